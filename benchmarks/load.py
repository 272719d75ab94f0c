"""Load test: the service with two workers on loopback, against a bare parse-and-echo endpoint.

Run: ``python benchmarks/load.py [--seconds 30] [--rounds 3] [--clients 64]`` (needs ``wrk``, from
Debian's packages: ``apt-get install wrk``). It starts ``dualcost serve --workers 2`` and, in the
same run, a bare FastAPI app with two workers whose endpoint only parses and echoes the same body,
then drives each with the same number of concurrent connections for the same time, sending the
300-item nested CES comparison of benchmarks/comparison_speed.py. The time is taken in turns
(three by default), so that a shared machine's changes of speed fall on every target alike. It
prints throughput, p50 and p99 latency and errors for each, and the ratio of the throughputs
against the echo endpoint, target at least 0.5, with zero errors). A second echo endpoint in
the same app parses and writes with orjson, the fastest a bare endpoint can do: the ratio to it
is the honest floor (target at least 0.35). A fourth target, the service with
DUALCOST_INLINE_COMPUTE_MAX_BYTES=0, computes every request in its compute threads (the trade:
less throughput, a shorter latency tail under overload). ``--before PATH`` adds a fifth target:
the service run from another source tree (PATH is its ``service/`` folder, e.g. an export of an
earlier commit), so that a change is measured against the code before it in the same run.
Traffic goes to 127.0.0.1 only, and every run is bounded in time.
"""

from __future__ import annotations

import argparse
import json
import os
import re
import shutil
import signal
import socket
import subprocess
import sys
import tempfile
import time
import urllib.request
from pathlib import Path

sys.path.insert(0, str(Path(__file__).resolve().parent))
from comparison_speed import scenario  # noqa: E402

HERE = Path(__file__).resolve().parent

LUA = """
wrk.method = "POST"
wrk.headers["Content-Type"] = "application/json"
local f = io.open("{path}", "r")
wrk.body = f:read("*a")
f:close()
"""


def free_port() -> int:
    with socket.socket() as s:
        s.bind(("127.0.0.1", 0))
        return int(s.getsockname()[1])


def wait_until_up(url: str, timeout: float = 60.0) -> None:
    deadline = time.monotonic() + timeout
    while time.monotonic() < deadline:
        try:
            with urllib.request.urlopen(url, timeout=1):
                return
        except OSError:
            time.sleep(0.2)
    raise RuntimeError(f"{url} did not come up")


def start(cmd: list[str], env: dict[str, str]) -> subprocess.Popen[bytes]:
    return subprocess.Popen(cmd, env=env, stdout=subprocess.DEVNULL, stderr=subprocess.DEVNULL,
                            start_new_session=True)


def stop(proc: subprocess.Popen[bytes]) -> None:
    try:
        os.killpg(proc.pid, signal.SIGTERM)
        proc.wait(timeout=15)
    except (ProcessLookupError, subprocess.TimeoutExpired):
        os.killpg(proc.pid, signal.SIGKILL)


def to_ms(text: str) -> float:
    """wrk's latency cells: '812.00us', '3.41ms', '1.20s' or '2.00m'."""
    value, unit = re.match(r"([\d.]+)(us|ms|s|m)$", text).groups()  # type: ignore[union-attr]
    return float(value) * {"us": 0.001, "ms": 1.0, "s": 1000.0, "m": 60_000.0}[unit]


def drive(url: str, script: str, seconds: int, clients: int) -> dict[str, float]:
    out = subprocess.run(["wrk", "-t2", f"-c{clients}", f"-d{seconds}s", "--timeout", "10s",
                          "--latency", "-s", script, url], capture_output=True, text=True,
                         timeout=seconds + 60, check=True).stdout
    rps = float(re.search(r"Requests/sec:\s+([\d.]+)", out).group(1))  # type: ignore[union-attr]
    p50 = to_ms(re.search(r"^\s+50%\s+(\S+)", out, re.M).group(1))  # type: ignore[union-attr]
    p99 = to_ms(re.search(r"^\s+99%\s+(\S+)", out, re.M).group(1))  # type: ignore[union-attr]
    total = int(re.search(r"(\d+) requests in", out).group(1))  # type: ignore[union-attr]
    non2xx = re.search(r"Non-2xx or 3xx responses: (\d+)", out)
    sock = re.search(r"Socket errors: connect (\d+), read (\d+), write (\d+), timeout (\d+)", out)
    errors = (int(non2xx.group(1)) if non2xx else 0) + (sum(map(int, sock.groups())) if sock else 0)
    return {"rps": rps, "p50": p50, "p99": p99, "requests": total, "errors": errors}


TARGETS = ("dualcost", "echo", "floor", "threads")
LABELS = {"dualcost": "dualcost", "echo": "echo (std json)", "floor": "echo (orjson both ways)",
          "threads": "dualcost, compute threads only", "before": "dualcost, code before (--before)"}


def server(name: str, port: int, before: str | None = None
           ) -> tuple[list[str], dict[str, str], str, str]:
    """Command, environment, load URL and readiness URL of one target."""
    # benchmarks/ first, then any path given (a worktree's service/ rather than the installed
    # one); the code before a change from its own source tree
    source = before if name == "before" else os.environ.get("PYTHONPATH", "")
    env = dict(os.environ, PYTHONPATH=os.pathsep.join(p for p in (str(HERE), source) if p))
    if name in ("echo", "floor"):
        cmd = [sys.executable, "-m", "uvicorn", "echo_app:app", "--port", str(port),
               "--workers", "2", "--log-level", "warning", "--no-access-log"]
        path = "/echo" if name == "echo" else "/echo-orjson"
        return cmd, env, f"http://127.0.0.1:{port}{path}", f"http://127.0.0.1:{port}/docs"
    if name == "threads":
        env["DUALCOST_INLINE_COMPUTE_MAX_BYTES"] = "0"
    cmd = [sys.executable, "-m", "dualcost.cli", "serve", "--port", str(port), "--workers", "2"]
    return cmd, env, f"http://127.0.0.1:{port}/v1/comparisons", f"http://127.0.0.1:{port}/ready"


def main() -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--seconds", type=int, default=30, help="load time per target")
    parser.add_argument("--rounds", type=int, default=3,
                        help="the load time is split into this many turns, taken in rotation")
    parser.add_argument("--clients", type=int, default=64)
    parser.add_argument("--before", metavar="PATH", help="also run the service from this source "
                        "folder (another commit's service/), in the same turns")
    args = parser.parse_args()
    targets = TARGETS + (("before",) if args.before else ())
    if not shutil.which("wrk"):
        print("wrk is needed: apt-get install wrk", file=sys.stderr)
        return 2

    body = json.dumps(scenario()).encode()
    turn = max(1, round(args.seconds / args.rounds))
    runs: dict[str, list[dict[str, float]]] = {name: [] for name in targets}
    with tempfile.TemporaryDirectory() as tmp:
        body_path = Path(tmp) / "body.json"
        body_path.write_bytes(body)
        script = Path(tmp) / "post.lua"
        script.write_text(LUA.format(path=body_path))
        procs, urls = [], {}
        try:
            # All targets run side by side, idle unless driven, and take turns: a shared machine
            # changes speed over minutes, and turns spread that over every target alike.
            for name in targets:
                cmd, env, url, probe = server(name, free_port(), args.before)
                procs.append(start(cmd, env))
                wait_until_up(probe)
                urls[name] = url
            for name in targets:
                drive(urls[name], str(script), 3, args.clients)  # warm-up
            for _ in range(args.rounds):
                for name in targets:
                    runs[name].append(drive(urls[name], str(script), turn, args.clients))
        finally:
            for proc in procs:
                stop(proc)

    print(f"load: {args.clients} connections, 2 workers per target, {args.rounds} turns of "
          f"{turn} s per target, 300-item nested CES comparison ({len(body)} bytes)")
    total = {}
    for name in targets:
        r = runs[name]
        total[name] = sum(x["requests"] for x in r) / (turn * len(r))
        p50 = sorted(x["p50"] for x in r)[len(r) // 2]
        p99 = max(x["p99"] for x in r)
        print(f"  {LABELS[name]:31s} {total[name]:7.1f} req/s   p50 {p50:8.2f} ms   "
              f"p99 {p99:8.2f} ms   requests {sum(x['requests'] for x in r):6d}   "
              f"errors {sum(x['errors'] for x in r)}")
    print("  (p50: the median turn's; p99: the worst turn's)")
    per_turn = [d["requests"] / e["requests"] for d, e in zip(runs["dualcost"], runs["echo"],
                                                              strict=True)]
    per_floor = [d["requests"] / e["requests"] for d, e in zip(runs["dualcost"], runs["floor"],
                                                               strict=True)]
    print(f"  throughput ratio dualcost / echo: {total['dualcost'] / total['echo']:.2f} (target at "
          f"least 0.5); by turn: {', '.join(f'{x:.2f}' for x in per_turn)}")
    print(f"  throughput ratio dualcost / orjson floor: {total['dualcost'] / total['floor']:.2f} "
          f"(target at least 0.35); by turn: {', '.join(f'{x:.2f}' for x in per_floor)}")
    print(f"  echo (std json) / orjson floor: {total['echo'] / total['floor']:.2f}")
    print(f"  compute threads only / echo: {total['threads'] / total['echo']:.2f}")
    if args.before:
        by_turn = [d["requests"] / b["requests"] for d, b in zip(runs["dualcost"], runs["before"],
                                                                  strict=True)]
        print(f"  dualcost / code before: {total['dualcost'] / total['before']:.2f}; by turn: "
              f"{', '.join(f'{x:.2f}' for x in by_turn)}; the code before / orjson floor: "
              f"{total['before'] / total['floor']:.2f}")
    return 0


if __name__ == "__main__":
    sys.exit(main())
