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

On a machine shared with other work the throughput ratio moves with that work (single turns
have ranged from 0.3 to 2.5 at a load average of 10), so on Linux the script also prints the
CPU time each target spends per request: in the service's processes, and, for a PostgreSQL
database on this machine, in the server processes that serve the benchmark's database (its
background writers, shared with other databases, are not counted). Their ratio, plain / save,
is the throughput ratio to expect when the CPUs are the limit and the database shares them.
"""

from __future__ import annotations

import argparse
import json
import math
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


def _stat(pid: str) -> tuple[str, list[str]] | None:
    """A process's name and the fields of /proc/<pid>/stat after it (state first)."""
    try:
        with open(f"/proc/{pid}/stat") as f:
            name, fields = f.read().split(" (", 1)[1].rsplit(")", 1)
    except (OSError, IndexError, ValueError):  # gone meanwhile
        return None
    return name, fields.split()


def cpu_seconds(group: int, database: str | None) -> tuple[float, float]:
    """CPU seconds used so far by the processes of the service's process group, and by the
    local PostgreSQL server processes serving ``database`` (0 when None); (nan, nan) without
    /proc."""
    if not os.path.isdir("/proc/self"):
        return math.nan, math.nan
    tick = os.sysconf("SC_CLK_TCK")
    service = served = 0.0
    for pid in filter(str.isdigit, os.listdir("/proc")):
        found = _stat(pid)
        if found is None:
            continue
        name, stat = found
        used = (int(stat[11]) + int(stat[12])) / tick  # utime, stime
        if int(stat[2]) == group:  # pgrp
            service += used
        elif database is not None and name == "postgres":
            try:
                with open(f"/proc/{pid}/cmdline", "rb") as f:
                    title = f.read().decode(errors="replace").split()
            except OSError:
                continue
            if len(title) > 2 and title[0] == "postgres:" and title[2] == database:
                served += used
    return service, served


def local_database(url: str | None) -> str | None:
    """The database's name, when it is PostgreSQL on this machine."""
    if url is None:
        return None
    from sqlalchemy.engine import make_url

    parsed = make_url(url)
    local = parsed.host in (None, "", "localhost", "127.0.0.1", "::1")
    return parsed.database if parsed.get_backend_name() == "postgresql" and local else None


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
    database = local_database(args.database_url)
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
                    before = cpu_seconds(proc.pid, database)
                    runs[name].append(drive(urls[name], str(script), turn, args.clients))
                    after = cpu_seconds(proc.pid, database)
                    runs[name][-1]["service_cpu"] = after[0] - before[0]
                    runs[name][-1]["database_cpu"] = after[1] - before[1]
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
    cpu = {}
    for name in TARGETS:
        done = sum(x["requests"] for x in runs[name])
        service = 1000 * sum(x["service_cpu"] for x in runs[name]) / done
        served = 1000 * sum(x["database_cpu"] for x in runs[name]) / done
        cpu[name] = service + served
        print(f"  {name:6s} CPU per request: service {service:.2f} ms"
              + (f", database server {served:.2f} ms" if database else ""))
    print(f"  runs stored: {kept[0]}, distinct inputs and answers stored: {kept[1]}")
    print(f"  throughput ratio save / plain: {total['save'] / total['plain']:.2f} (target at "
          f"least 0.9); by turn: {', '.join(f'{x:.2f}' for x in per_turn)}")
    shared = ", the database server on them" if database else ""
    print(f"  CPU per request, ratio plain / save: {cpu['plain'] / cpu['save']:.2f} (the "
          f"throughput ratio when the CPUs are the limit{shared})")
    return 0


if __name__ == "__main__":
    sys.exit(main())
