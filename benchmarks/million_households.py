"""A million households through the household-job path: a Parquet upload, a Parquet answer, in
the service's own process and on a Dask LocalCluster, with the service's peak memory.

Run: ``PYTHONPATH=service python benchmarks/million_households.py`` (the full run: 1,000,000
households by 200 items, a 1.6 GB Parquet file in a temporary folder, some minutes on a small
machine); ``--households 20000`` for a quick run; ``--no-cluster`` to leave out the Dask part
(which needs ``dualcost[cluster]``); ``--csv`` for the CSV path alone instead (the same
households as a CSV upload with a CSV answer, read once the upload has arrived, as before, then
computed while it arrives, in the same run: the time from the upload's first byte to the
answer's last, and whether the two answers are the same bytes). It

1. writes the households (random shares, seeded, each row summing to 1; lognormal incomes) as
   a Parquet file, row group by row group (65,536 households each);
2. starts ``dualcost serve`` with one worker process (the service process whose memory is
   measured) and creates a job: CES with sigma 0.7 and the Laspeyres, Paasche, Fisher and
   Törnqvist indices;
3. uploads the file streamed from disk and reads the Parquet answer streamed to disk, while a
   second connection asks the job for its progress every two seconds (printed);
4. does the same with ``engine: cluster`` against a two-worker LocalCluster (one thread each);
5. prints for each path the households per second, against the core's households per second
   measured in the same run on a 10,000-household sample (the baseline), the service process's
   peak resident memory (``VmHWM``, target under 1 GiB), and whether the two answers are
   identical (every column, bit for bit).

Memory stays bounded because the upload is spooled to disk as it arrives, read back one block
of rows (16,384) at a time, evaluated chunk by chunk, kept in the database as Arrow columns a
few chunks at a time (at most 16,384 households held), and written back one row group per
chunk; only the per-household figures that the distribution summaries need (a few numbers per
household and period) are kept until the end. A Parquet file whose row groups are much larger
than this script's is read a row group at a time: the memory then follows its row groups.
"""

from __future__ import annotations

import argparse
import os
import signal
import socket
import subprocess
import sys
import tempfile
import threading
import time
from pathlib import Path

import httpx
import numpy as np
import pyarrow as pa
import pyarrow.parquet as pq

ITEMS, SIGMA = 200, 0.7
FORMULAS = ["laspeyres", "paasche", "fisher", "tornqvist"]
ROW_GROUP = 65_536
PARQUET = "application/vnd.apache.parquet"


def write_households(path: Path, households: int, items: int, seed: int = 1_000_000) -> None:
    """The upload, row group by row group (never all of it in memory)."""
    rng = np.random.default_rng(seed)
    alpha = rng.uniform(0.5, 2.0, items)
    names = [f"item_{i:03d}" for i in range(items)]
    schema = pa.schema([("household", pa.string()), ("expenditure", pa.float64()),
                        *((n, pa.float64()) for n in names)])
    with pq.ParquetWriter(path, schema) as writer:
        for start in range(0, households, ROW_GROUP):
            n = min(ROW_GROUP, households - start)
            shares = rng.random((n, items)) * alpha  # positive, each row summing to 1
            shares /= shares.sum(axis=1, keepdims=True)
            columns = [pa.array([f"h{start + k}" for k in range(n)]),
                       pa.array(rng.lognormal(7.0, 0.5, n))]
            columns += [pa.array(shares[:, i]) for i in range(items)]
            writer.write_table(pa.Table.from_arrays(columns, schema=schema))


def prices(items: int, seed: int = 7) -> tuple[list[float], list[float]]:
    rng = np.random.default_rng(seed)
    p0 = rng.uniform(0.5, 20.0, items)
    return p0.tolist(), (p0 * rng.uniform(0.9, 1.3, items)).tolist()


def core_rate(items: int) -> float:
    """Households per second of the core batch (the baseline), on 10,000 households."""
    from dualcost.core.households import HouseholdJob, run_households

    rng = np.random.default_rng(3)
    p0, p1 = prices(items)
    shares = rng.dirichlet(np.ones(items), size=10_000)
    incomes = rng.lognormal(7.0, 0.5, 10_000)
    job = HouseholdJob.checked("ces", {"sigma": SIGMA}, np.array(p0), np.array(p1),
                               formulas=FORMULAS)
    best = float("inf")
    for _ in range(3):
        start = time.perf_counter()
        run_households(job, shares, expenditure=incomes)
        best = min(best, time.perf_counter() - start)
    return 10_000 / best


def free_port() -> int:
    with socket.socket() as s:
        s.bind(("127.0.0.1", 0))
        return int(s.getsockname()[1])


def peak_rss_mib(pid: int) -> float:
    for line in Path(f"/proc/{pid}/status").read_text().splitlines():
        if line.startswith("VmHWM:"):
            return int(line.split()[1]) / 1024
    return float("nan")


def serve(env: dict[str, str]) -> tuple[subprocess.Popen[bytes], str]:
    port = free_port()
    proc = subprocess.Popen([sys.executable, "-m", "dualcost.cli", "serve", "--port", str(port),
                             "--workers", "1"], env=env, stdout=subprocess.DEVNULL,
                            stderr=subprocess.DEVNULL, start_new_session=True)
    url = f"http://127.0.0.1:{port}"
    deadline = time.monotonic() + 60
    while time.monotonic() < deadline:
        try:
            if httpx.get(url + "/ready", timeout=1).status_code == 200:
                return proc, url
        except httpx.HTTPError:
            pass
        time.sleep(0.3)
    stop(proc)
    raise RuntimeError("the service did not start")


def stop(proc: subprocess.Popen[bytes]) -> None:
    try:
        os.killpg(proc.pid, signal.SIGTERM)
        proc.wait(timeout=20)
    except (ProcessLookupError, subprocess.TimeoutExpired):
        os.killpg(proc.pid, signal.SIGKILL)


def watch(url: str, done: threading.Event, households: int, quiet: bool) -> None:
    """The job's progress every two seconds, as a client would follow it."""
    with httpx.Client(timeout=10) as client:
        while not done.wait(2.0):
            if quiet:
                continue
            progress = client.get(url).json()["progress"]
            print(f"    progress: {progress['rows_read']:>9,} rows read, "
                  f"{progress['households_done']:>9,} done of {households:,}", flush=True)


def write_csv(parquet: Path, path: Path) -> None:
    """The same households as a CSV file (no quotes: the ids need none), batch by batch."""
    import pyarrow.csv as pacsv

    pf = pq.ParquetFile(parquet)
    with path.open("wb") as out:
        out.write((",".join(pf.schema_arrow.names) + "\n").encode())  # pyarrow would quote it
        with pacsv.CSVWriter(out, pf.schema_arrow, write_options=pacsv.WriteOptions(
                include_header=False, quoting_style="none")) as writer:
            for batch in pf.iter_batches(ROW_GROUP):
                writer.write_batch(batch)


def run_job(url: str, upload: Path, answer: Path, households: int, engine: str, *,
            quiet: bool = False) -> float:
    """Seconds from the upload's first byte to the answer's last (the job created before)."""
    p0, p1 = prices(ITEMS)
    spec = {"items": [f"item_{i:03d}" for i in range(ITEMS)], "base_prices": p0,
            "current_prices": p1, "model": {"family": "ces", "sigma": SIGMA},
            "formulas": FORMULAS, "engine": engine}
    with httpx.Client(timeout=None) as client:
        job = client.post(url + "/v1/household-jobs", json=spec)
        job.raise_for_status()
        links = job.json()["links"]
        done = threading.Event()
        watcher = threading.Thread(target=watch, args=(url + links["self"], done, households, quiet))
        start = time.perf_counter()
        watcher.start()
        try:
            with upload.open("rb") as file, client.stream(
                    "POST", url + links["households"], content=iter(lambda: file.read(1 << 20), b""),
                    headers={"content-type": media_of(upload), "accept": media_of(answer)}
            ) as r:
                if r.status_code != 200:
                    raise RuntimeError(f"{r.status_code}: {r.read()[:500]!r}")
                if not quiet:
                    print(f"    answer begun after "
                          f"{time.perf_counter() - start:.1f} s", flush=True)
                with answer.open("wb") as out:
                    for piece in r.iter_bytes(1 << 20):
                        out.write(piece)
        finally:
            done.set()
            watcher.join()
        elapsed = time.perf_counter() - start
        status = client.get(url + links["self"]).json()
    if status["status"] != "done" or status["progress"]["households_done"] != households:
        raise RuntimeError(f"the job did not finish: {status['status']} {status['error']}")
    return elapsed


def media_of(path: Path) -> str:
    return "text/csv" if path.suffix == ".csv" else PARQUET


def identical(a: Path, b: Path) -> bool:
    """Both answers, row group by row group, every column equal (NaN where NaN)."""
    fa, fb = pq.ParquetFile(a), pq.ParquetFile(b)
    if fa.metadata.num_rows != fb.metadata.num_rows:
        return False
    for x, y in zip(fa.iter_batches(65_536), fb.iter_batches(65_536), strict=True):
        if not x.equals(y):
            return False
    return True


def one_path(label: str, env: dict[str, str], upload: Path, answer: Path, households: int,
             engine: str, baseline: float) -> float:
    proc, url = serve(env)
    try:
        print(f"  {label}:", flush=True)
        # A small job first: the service's first job imports what it needs (not timed).
        warm = upload.with_name("warm-up.parquet")
        if not warm.exists():
            write_households(warm, 1000, ITEMS)
        if upload.suffix == ".csv":
            write_csv(warm, warm := warm.with_suffix(".csv"))
        run_job(url, warm, answer, 1000, engine, quiet=True)
        seconds = run_job(url, upload, answer, households, engine)
        peak = peak_rss_mib(proc.pid)
    finally:
        stop(proc)
    rate = households / seconds
    print(f"    {seconds:8.1f} s   {rate:10,.0f} households/s   ratio to the core "
          f"{rate / baseline:5.2f}   service peak memory {peak:6.0f} MiB (target under 1024)",
          flush=True)
    return seconds


def csv_paths(env: dict[str, str], folder: Path, households: int, baseline: float) -> bool:
    """A CSV upload and answer, read once the upload has arrived (as before; the baseline)
    and computed while it arrives, in the same run: seconds from the upload's first byte to
    the answer's last, and whether the two answers are the same bytes."""
    upload = folder / "households.csv"
    write_csv(folder / "households.parquet", upload)
    print(f"  CSV upload {upload.stat().st_size / 2**20:,.0f} MiB, CSV answer; load average "
          f"{os.getloadavg()[0]:.2f}", flush=True)
    before = one_path("CSV read once it has arrived (before)", env | {
        "DUALCOST_STREAM_CSV_UPLOADS": "false"}, upload, folder / "spooled.csv", households,
        "local", baseline)
    after = one_path("CSV computed while it arrives", env, upload, folder / "streamed.csv",
                     households, "local", baseline)
    same = (folder / "spooled.csv").read_bytes() == (folder / "streamed.csv").read_bytes()
    print(f"  computed while it arrives: {before / after:.2f} times as fast (upload's first "
          f"byte to answer's last); the same bytes: {same}; load average "
          f"{os.getloadavg()[0]:.2f}", flush=True)
    return same


def main() -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--households", type=int, default=1_000_000)
    parser.add_argument("--no-cluster", action="store_true")
    parser.add_argument("--csv", action="store_true", help="only the CSV upload, read once it "
                        "has arrived and computed while it arrives (in the same run)")
    args = parser.parse_args()
    env = dict(os.environ, DUALCOST_MAX_BODY_BYTES=str(1 << 40), DUALCOST_LOG_JSON="false",
               DUALCOST_COMPUTE_THREADS="2")
    with tempfile.TemporaryDirectory() as tmp:
        folder = Path(tmp)
        # The service keeps its jobs (and each chunk's results, as Arrow columns) in a new
        # SQLite database here.
        env["DUALCOST_DATA_DIR"] = str(folder)
        upload = folder / "households.parquet"
        start = time.perf_counter()
        write_households(upload, args.households, ITEMS)
        size = upload.stat().st_size
        print(f"{args.households:,} households x {ITEMS} items, CES sigma {SIGMA}, "
              f"{', '.join(FORMULAS)} and the Konüs indices; upload {size / 2**20:,.0f} MiB "
              f"(written in {time.perf_counter() - start:.1f} s)", flush=True)
        baseline = core_rate(ITEMS)
        print(f"  baseline: the core batch, {baseline:,.0f} households/s", flush=True)
        if args.csv:
            return 0 if csv_paths(env, folder, args.households, baseline) else 1
        one_path("in process", env, upload, folder / "local.parquet", args.households, "local",
                 baseline)
        if args.no_cluster:
            return 0
        from distributed import LocalCluster

        with LocalCluster(n_workers=2, threads_per_worker=1, processes=True,
                          dashboard_address=None) as cluster:
            one_path("Dask LocalCluster, two workers", env | {
                "DUALCOST_DASK_SCHEDULER": cluster.scheduler_address}, upload,
                folder / "cluster.parquet", args.households, "cluster", baseline)
        same = identical(folder / "local.parquet", folder / "cluster.parquet")
        print(f"  the two answers are identical, every column: {same}")
        return 0 if same else 1


if __name__ == "__main__":
    sys.exit(main())
