"""The ``dualcost`` command: exit codes, and ``serve`` answering on loopback with the demo."""

from __future__ import annotations

import json
import socket
import subprocess
import sys
import time
import urllib.request

from dualcost.cli import main


def test_version_exits_zero(capsys) -> None:
    try:
        main(["--version"])
    except SystemExit as exc:
        assert exc.code == 0
    assert "dualcost" in capsys.readouterr().out


def test_unknown_command_exits_two(capsys) -> None:
    try:
        main(["brew"])
    except SystemExit as exc:
        assert exc.code == 2


def _free_port() -> int:
    with socket.socket() as s:
        s.bind(("127.0.0.1", 0))
        return int(s.getsockname()[1])


def test_serve_starts_with_the_demo_ready() -> None:
    port = _free_port()
    proc = subprocess.Popen(
        [sys.executable, "-m", "dualcost.cli", "serve", "--port", str(port), "--log-level",
         "warning"],
        stdout=subprocess.PIPE, stderr=subprocess.STDOUT, text=True,
    )
    try:
        deadline = time.monotonic() + 30
        while True:
            try:
                with urllib.request.urlopen(f"http://127.0.0.1:{port}/health", timeout=1) as r:
                    assert json.load(r)["status"] == "ok"
                break
            except OSError:
                assert proc.poll() is None, proc.stdout.read() if proc.stdout else ""
                assert time.monotonic() < deadline, "service did not start in 30 s"
                time.sleep(0.2)
        with urllib.request.urlopen(f"http://127.0.0.1:{port}/v1/demo", timeout=10) as r:
            demo = json.load(r)
        assert demo["result"]["konus"]["base"] > 1.0
    finally:
        proc.terminate()
        try:
            proc.wait(timeout=10)
        finally:
            if proc.stdout:
                proc.stdout.close()
