"""What keeping runs costs: the 300-item comparison under load, with save=true against without.

Run: ``python benchmarks/save_runs.py [--seconds 30] [--rounds 3] [--clients 64]
[--database-url URL] [--distinct]`` (needs ``wrk``). It starts one ``dualcost serve --workers 2`` on a new
SQLite database in a temporary folder (or on the database given, e.g. a PostgreSQL one) and
drives, in alternating turns of the same length and concurrency, ``POST /v1/comparisons`` (the
baseline, measured in the same run on the same processes) and ``POST /v1/comparisons?save=true``
(each answer stored with its request before it is sent). It prints the throughput, p50 and p99
of each, the runs stored, and the ratio of the throughputs (the figure to watch: target at least
0.9, saving costs at most 10 %). Traffic goes to 127.0.0.1 only.

The same request repeated is the load benchmark's case: its input and answer (about 160 kB) are
stored once, and each later run adds a small row. With ``--distinct`` every request (of both
targets alike) has its own input, one price changed in its last digits, so that every run stores
its own 27 kB input and 130 kB answer: the cost of saving work that is never repeated.
"""

from __future__ import annotations

import argparse
import json
import os
import shutil
import sys
import tempfile
from pathlib import Path

sys.path.insert(0, str(Path(__file__).resolve().parent))
from comparison_speed import scenario  # noqa: E402
from load import LUA, drive, free_port, start, stop, wait_until_up  # noqa: E402

HERE = Path(__file__).resolve().parent
TARGETS = ("plain", "save")
#: A price of the body that each request of --distinct replaces by its own number.
MARK = 98765.4321
#: wrk's script for --distinct: the body around the mark, and a number no other request of
#: the run sends in its place: the wrk thread's number, a point, then ten digits (the clock's
#: seconds, which differ between turns, and a counter): 11 significant digits, so that every
#: one is a different double.
DISTINCT_LUA = """
wrk.method = "POST"
wrk.headers["Content-Type"] = "application/json"
local f = io.open("{head}", "r")
local head = f:read("*a")
f:close()
f = io.open("{tail}", "r")
local tail = f:read("*a")
f:close()
local threads = 0
function setup(thread)
  threads = threads + 1
  thread:set("tid", threads)
end
function init(args)
  n = 0
  stamp = os.time() % 100000
end
function request()
  n = n + 1
  local price = string.format("%s.%05d%05d", tid, stamp, n % 100000)
  return wrk.format(nil, nil, nil, head .. price .. tail)
end
"""


def stored_runs(url: str) -> tuple[int, int]:
    """How many runs are stored, and how many distinct inputs and answers."""
    from sqlalchemy import create_engine, func, select

    from dualcost.storage.tables import RunContent, RunRecord

    engine = create_engine(url)
    with engine.connect() as connection:
        count = int(connection.execute(select(func.count()).select_from(RunRecord)).scalar_one())
        contents = int(connection.execute(select(func.count()).select_from(RunContent))
                       .scalar_one())
    engine.dispose()
    return count, contents


def main() -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--seconds", type=int, default=30, help="load time per target")
    parser.add_argument("--rounds", type=int, default=3, help="turns per target, alternating")
    parser.add_argument("--clients", type=int, default=64)
    parser.add_argument("--database-url", help="the database (default: SQLite in a temporary "
                                               "folder)")
    parser.add_argument("--distinct", action="store_true",
                        help="a new input for every request (nothing stored twice)")
    args = parser.parse_args()
    if not shutil.which("wrk"):
        print("wrk is needed: apt-get install wrk", file=sys.stderr)
        return 2
    request = scenario()
    if args.distinct:
        request["current"]["prices"][0] = MARK
    body = json.dumps(request).encode()
    turn = max(1, round(args.seconds / args.rounds))
    runs: dict[str, list[dict[str, float]]] = {name: [] for name in TARGETS}
    with tempfile.TemporaryDirectory() as tmp:
        url = args.database_url or f"sqlite:///{tmp}/runs.sqlite3"
        (Path(tmp) / "body.json").write_bytes(body)
        script = Path(tmp) / "post.lua"
        if args.distinct:
            head, tail = body.split(str(MARK).encode())
            (Path(tmp) / "head.txt").write_bytes(head)
            (Path(tmp) / "tail.txt").write_bytes(tail)
            script.write_text(DISTINCT_LUA.format(head=Path(tmp) / "head.txt",
                                                  tail=Path(tmp) / "tail.txt"))
        else:
            script.write_text(LUA.format(path=Path(tmp) / "body.json"))
        port = free_port()
        env = dict(os.environ, DUALCOST_DATABASE_URL=url, PYTHONPATH=os.pathsep.join(
            p for p in (str(HERE), os.environ.get("PYTHONPATH", "")) if p))
        proc = start([sys.executable, "-m", "dualcost.cli", "serve", "--port", str(port),
                      "--workers", "2"], env)
        base = f"http://127.0.0.1:{port}/v1/comparisons"
        urls = {"plain": base, "save": base + "?save=true"}
        try:
            wait_until_up(f"http://127.0.0.1:{port}/ready")
            for name in TARGETS:
                drive(urls[name], str(script), 3, args.clients)  # warm-up
            for _ in range(args.rounds):
                for name in TARGETS:
                    runs[name].append(drive(urls[name], str(script), turn, args.clients))
        finally:
            stop(proc)
        kept = stored_runs(url)
    print(f"save=true under load: {args.clients} connections, 2 workers, {args.rounds} turns of "
          f"{turn} s each, 300-item nested CES comparison ({len(body)} bytes), "
          f"{'SQLite' if args.database_url is None else 'the database given'}, "
          f"{'a new input every request' if args.distinct else 'the same request repeated'}")
    total = {}
    for name in TARGETS:
        r = runs[name]
        total[name] = sum(x["requests"] for x in r) / (turn * len(r))
        p50 = sorted(x["p50"] for x in r)[len(r) // 2]
        print(f"  {name:6s} {total[name]:7.1f} req/s   p50 {p50:8.2f} ms   p99 "
              f"{max(x['p99'] for x in r):8.2f} ms   errors {sum(x['errors'] for x in r)}")
    per_turn = [s["requests"] / p["requests"] for s, p in zip(runs["save"], runs["plain"],
                                                              strict=True)]
    print(f"  runs stored: {kept[0]}, distinct inputs and answers stored: {kept[1]}")
    print(f"  throughput ratio save / plain: {total['save'] / total['plain']:.2f} (target at "
          f"least 0.9); by turn: {', '.join(f'{x:.2f}' for x in per_turn)}")
    return 0


if __name__ == "__main__":
    sys.exit(main())
