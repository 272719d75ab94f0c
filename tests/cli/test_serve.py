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


def test_every_worker_writes_json_request_logs() -> None:
    """With two worker processes each one logs its requests as JSON lines with the request id
    (worker processes start afresh, so the logging set-up must reach them through uvicorn)."""
    port = _free_port()
    proc = subprocess.Popen(
        [sys.executable, "-m", "dualcost.cli", "serve", "--port", str(port), "--workers", "2"],
        stdout=subprocess.DEVNULL, stderr=subprocess.PIPE, text=True,
    )
    try:
        deadline = time.monotonic() + 60
        while True:
            try:
                with urllib.request.urlopen(f"http://127.0.0.1:{port}/ready", timeout=1):
                    break
            except OSError:
                assert proc.poll() is None, proc.stderr.read() if proc.stderr else ""
                assert time.monotonic() < deadline, "service did not start in 60 s"
                time.sleep(0.2)
        for k in range(6):
            request = urllib.request.Request(f"http://127.0.0.1:{port}/v1/demo",
                                             headers={"X-Request-ID": f"worker-log-{k}"})
            with urllib.request.urlopen(request, timeout=10) as r:
                assert r.status == 200
    finally:
        proc.terminate()
        _, err = proc.communicate(timeout=20)
    entries = []
    for line in err.splitlines():
        try:
            entries.append(json.loads(line))
        except ValueError:
            continue
    logged = {e["request_id"] for e in entries if e.get("message") == "request"}
    assert {f"worker-log-{k}" for k in range(6)} <= logged, err[-2000:]
    assert all(e.get("status") == 200 for e in entries if e.get("request_id", "").startswith("worker-log"))


def test_serve_bounds_the_request_head_in_every_worker() -> None:
    """``dualcost serve`` runs the bounded protocol (dualcost.api.transport) in each worker
    process, with the limits of the environment: a header of 1 MiB is refused 431 (RFC 6585)
    by the server before the application sees it."""
    import os

    port = _free_port()
    env = os.environ | {"DUALCOST_MAX_HEADER_BYTES": "4096"}
    proc = subprocess.Popen(
        [sys.executable, "-m", "dualcost.cli", "serve", "--port", str(port), "--workers", "2",
         "--log-level", "warning"], stdout=subprocess.DEVNULL, stderr=subprocess.PIPE, text=True,
        env=env)
    try:
        deadline = time.monotonic() + 60
        while True:
            try:
                with urllib.request.urlopen(f"http://127.0.0.1:{port}/ready", timeout=1):
                    break
            except OSError:
                assert proc.poll() is None, proc.stderr.read() if proc.stderr else ""
                assert time.monotonic() < deadline, "service did not start in 60 s"
                time.sleep(0.2)
        for _ in range(4):  # connections may reach either worker
            with socket.create_connection(("127.0.0.1", port), timeout=10) as sock:
                try:
                    sock.sendall(b"GET /live HTTP/1.1\r\nHost: d\r\nX-Big: " + b"a" * (1 << 20)
                                 + b"\r\n\r\n")
                except OSError:
                    pass
                answer = b""
                while piece := sock.recv(65536):
                    answer += piece
            head, _, body = answer.partition(b"\r\n\r\n")
            assert head.startswith(b"HTTP/1.1 431 "), answer[:300]
            assert b"limit of 4096 bytes" in body
    finally:
        proc.terminate()
        proc.communicate(timeout=20)
