"""How fast a household batch runs: 10,000 households by 200 items under a CES model.

Run: ``python benchmarks/households_speed.py`` (needs ``dualcost[cluster]`` for the last part).
It prints, measured in the same run:

- a baseline: bare numpy evaluation of the CES Konüs index, Laspeyres, Paasche, Fisher and
  Törnqvist for every household, on the same arrays, written the direct way;
- the core batch (:func:`dualcost.core.households.run_households`: row checks, the same indices
  per household, Konüs indices at three living standards, CV, EV, biases, the Prais aggregates
  and weighted quantiles), its ratio to the baseline (target: at most 2) and households per
  second; and the chunk evaluation alone, without the summaries;
- peak memory of one batch: the largest Python-heap allocation above the input (tracemalloc,
  which numpy reports to), beside the size of the input shares;
- the same job on a two-worker LocalCluster (two processes, one thread each), its ratio to the
  in-process batch, and whether the two results are identical bit for bit;
- the HTTP path of a household job in process: the upload parsed, evaluated and streamed back,
  as CSV in and out, Parquet in and out, and CSV in with a Parquet answer, in households per
  second and as a ratio to the core batch's households per second, the core batch timed
  again beside each (one after the other, five times each: on a shared machine whose load
  changes from minute to minute, a baseline timed a minute earlier says little); beside
  them, Apache Arrow's readers alone (the upload's bytes to float columns, nothing checked
  or computed), a floor under each path's reading, in the same ratio.

``python benchmarks/households_speed.py --json-batch [--before TREE]`` measures only the JSON
batch: POST /v1/household-indices in process (3,000 households by 200 items, the JSON answer
read whole) against the core batch for the same households timed beside it. With ``--before``
it runs that measurement alternately on another checkout's service (``TREE/service``, e.g. the
main branch before a change) and on this one, each in its own process, three rounds each, and
prints both ratios with the load average: before and after in one run; beside them, the time
of writing the JSON answer alone (the route's document and orjson, from the batch's results).

The machine is shared and noisy, so the ratios are the figures to compare between runs.
"""

from __future__ import annotations

import argparse
import json
import os
import resource
import subprocess
import sys
import tempfile
import time
import tracemalloc
import warnings
from collections.abc import Callable
from typing import Any

import numpy as np
from _timing import median_seconds  # benchmarks/, on the path when run as a script

from dualcost.core.households import HouseholdJob, chunks_of, evaluate_chunk, run_households
from dualcost.engines.dask import cluster_evaluator

HOUSEHOLDS, ITEMS, SIGMA = 10_000, 200, 0.7
FORMULAS = ["laspeyres", "paasche", "fisher", "tornqvist"]


def scenario(seed: int = 6) -> dict[str, Any]:
    """Invented shares (Dirichlet), incomes and prices moving by about +-10 %."""
    rng = np.random.default_rng(seed)
    p0 = rng.uniform(0.5, 20.0, ITEMS)
    return {"p0": p0, "p1": p0 * np.exp(rng.normal(0.02, 0.1, ITEMS)),
            "w": rng.dirichlet(np.full(ITEMS, 0.8), HOUSEHOLDS),
            "m": rng.uniform(500.0, 6000.0, HOUSEHOLDS)}


def baseline(s: dict[str, Any]) -> tuple[np.ndarray, ...]:
    """The five indices in bare numpy: CES unit cost and shares, then the four formulas."""
    p0, p1, w, m = s["p0"], s["p1"], s["w"], s["m"]
    r = p1 / p0
    t = 1.0 - SIGMA
    terms = w * r**t
    total = terms.sum(axis=1)
    konus = total ** (1.0 / t)
    w1 = terms / total[:, None]
    q0 = w * (m / 1.0)[:, None] / p0
    q1 = w1 * m[:, None] / p1
    lasp = (q0 * p1).sum(axis=1) / (q0 * p0).sum(axis=1)
    paas = (q1 * p1).sum(axis=1) / (q1 * p0).sum(axis=1)
    fish = np.sqrt(lasp * paas)
    torn = np.exp((0.5 * (w + w1) * np.log(r)).sum(axis=1))
    return konus, lasp, paas, fish, torn


def peak_bytes(fn: Callable[[], object]) -> int:
    tracemalloc.start()
    tracemalloc.reset_peak()
    before = tracemalloc.get_traced_memory()[0]
    fn()
    peak = tracemalloc.get_traced_memory()[1]
    tracemalloc.stop()
    return peak - before


def loop_family_job() -> tuple[HouseholdJob, np.ndarray, np.ndarray]:
    """A job for a family evaluated one household at a time: 1,500 households, 20 items, nested
    CES with two groups; there the work per byte sent is large and workers pay off."""
    rng = np.random.default_rng(8)
    p0 = rng.uniform(1.0, 10.0, 20)
    tree = {"sigma": 0.4, "children": [{"sigma": 1.5, "children": list(range(10))},
                                       {"sigma": 0.3, "children": list(range(10, 20))}]}
    job = HouseholdJob.checked("nested_ces", {"tree": tree}, p0,
                               p0 * np.exp(rng.normal(0.02, 0.1, 20)), formulas=FORMULAS,
                               chunk_rows=100)
    return job, rng.dirichlet(np.ones(20), 1_500), rng.uniform(500.0, 6000.0, 1_500)


def on_cluster(s: dict[str, Any], job: HouseholdJob, local: Any) -> list[str]:
    """The CES batch and the one-by-one batch on two worker processes, against in process."""
    try:
        from distributed import Client, LocalCluster
    except ImportError:
        return ["  (dask.distributed is not installed: pip install 'dualcost[cluster]')"]
    loop_job, loop_w, loop_m = loop_family_job()
    lines = []
    with LocalCluster(n_workers=2, threads_per_worker=1, processes=True,
                      dashboard_address="127.0.0.1:0") as cluster, Client(cluster) as client:
        for title, the_job, w, m, expected, repeat in (
            ("CES batch", job, s["w"], s["m"], local, 5),
            ("nested CES, one by one, 1,500 x 20", loop_job, loop_w, loop_m, None, 1),
        ):
            per_task = max(1, 2_500 // the_job.chunk_rows)
            if expected is None:
                start = time.perf_counter()
                expected = run_households(the_job, w, expenditure=m)
                t_here = time.perf_counter() - start
            else:
                t_here = median_seconds(lambda j=the_job, w=w, m=m: run_households(
                    j, w, expenditure=m), repeat)

            def remote(j: HouseholdJob = the_job, w: Any = w, m: Any = m,
                       k: int = per_task) -> Any:
                return run_households(j, w, expenditure=m, engine="cluster",
                                      evaluate=cluster_evaluator(client, chunks_per_task=k))

            t_there = median_seconds(remote, repeat)
            got = remote()
            same = (all(np.array_equal(expected.values[k], got.values[k]) for k in expected.values)
                    and expected.summary == got.summary)
            lines.append(f"  two-worker LocalCluster, {title:<36}{t_there * 1e3:9.1f} ms   "
                         f"in process {t_here * 1e3:9.1f} ms   ratio {t_there / t_here:5.2f}   "
                         f"identical: {same}")
    return lines


PARQUET = "application/vnd.apache.parquet"


def beside(fn: Callable[[], object], core: Callable[[], object], repeat: int = 5
           ) -> tuple[float, float]:
    """Median seconds of ``fn`` and of the core batch, timed one after the other."""
    fn()
    core()
    times: list[list[float]] = [[], []]
    for _ in range(repeat):
        for k, f in enumerate((fn, core)):
            start = time.perf_counter()
            f()
            times[k].append(time.perf_counter() - start)
    return float(np.median(times[0])), float(np.median(times[1]))


def over_http(s: dict[str, Any], core: Callable[[], object]
              ) -> dict[str, tuple[float, float]]:
    """Seconds of the HTTP job path in process (create, upload, read the whole answer), by
    upload and answer format: CSV in and out, Parquet in and out, CSV in and Parquet out;
    each with the seconds of the core batch timed beside it."""
    import io

    import pyarrow as pa
    import pyarrow.parquet as pq

    with warnings.catch_warnings():
        warnings.simplefilter("ignore")  # the test client's httpx notice is not ours to print
        from fastapi.testclient import TestClient

        from dualcost.api.app import create_app
        from dualcost.config import Settings

        # The jobs (and each chunk's rows) go to a new SQLite database, removed at the end.
        data = tempfile.TemporaryDirectory()
        client = TestClient(create_app(Settings(max_body_bytes=1 << 30, data_dir=data.name)))
    ids = [f"item_{i:03d}" for i in range(ITEMS)]
    lines = [",".join(["household", "expenditure", *ids])]
    lines += [",".join([f"h{h}", repr(float(s["m"][h])), *map(repr, s["w"][h].tolist())])
              for h in range(HOUSEHOLDS)]
    text = ("\n".join(lines) + "\n").encode()
    columns = {"household": pa.array([f"h{h}" for h in range(HOUSEHOLDS)]),
               "expenditure": pa.array(s["m"])} | {i: pa.array(s["w"][:, k])
                                                   for k, i in enumerate(ids)}
    sink = io.BytesIO()
    pq.write_table(pa.table(columns), sink)
    parquet = sink.getvalue()
    spec = {"items": ids, "base_prices": s["p0"].tolist(), "current_prices": s["p1"].tolist(),
            "model": {"family": "ces", "sigma": SIGMA}, "formulas": FORMULAS}

    def run(body: bytes, media: str, accept: str) -> None:
        job = client.post("/v1/household-jobs", json=spec).json()
        r = client.post(job["links"]["households"], content=body,
                        headers={"content-type": media, "accept": accept})
        assert r.status_code == 200, r.text[:300]
        if accept == "text/csv":
            assert r.text.count("\n") == HOUSEHOLDS + 1, r.text[-300:]
        else:
            assert pq.read_metadata(io.BytesIO(r.content)).num_rows == HOUSEHOLDS

    cases = {"CSV in, CSV out": (text, "text/csv", "text/csv"),
             "Parquet in, Parquet out": (parquet, PARQUET, PARQUET),
             "CSV in, Parquet out": (text, "text/csv", PARQUET)}
    timings = {name: beside(lambda c=c: run(*c), core) for name, c in cases.items()}
    return timings | readers_alone(text, parquet, core)


def readers_alone(text: bytes, parquet: bytes, core: Callable[[], object]
                  ) -> dict[str, tuple[float, float]]:
    """Seconds of Apache Arrow's readers alone on the same uploads: the CSV's text to float
    columns (multi-threaded, the household ids as text), and the Parquet file's columns."""
    import io

    import pyarrow as pa
    import pyarrow.csv as pacsv
    import pyarrow.parquet as pq

    types = {"household": pa.string()} | {f"item_{i:03d}": pa.float64() for i in range(ITEMS)}
    convert = pacsv.ConvertOptions(column_types=types | {"expenditure": pa.float64()})
    return {
        "(Arrow's CSV reader alone)": beside(
            lambda: pacsv.read_csv(io.BytesIO(text), convert_options=convert), core),
        "(Arrow's Parquet reader alone)": beside(
            lambda: pq.read_table(io.BytesIO(parquet)), core)}


JSON_HOUSEHOLDS = 3_000


def json_batch_seconds() -> tuple[float, float, float]:
    """Median seconds of POST /v1/household-indices in process (JSON in, the JSON answer read
    and parsed whole) for JSON_HOUSEHOLDS households by ITEMS items, of the core batch for
    the same households timed beside it, and of the answer's writing alone."""
    import orjson

    s = scenario()
    w, m = s["w"][:JSON_HOUSEHOLDS], s["m"][:JSON_HOUSEHOLDS]
    job = HouseholdJob.checked("ces", {"sigma": SIGMA}, s["p0"], s["p1"], formulas=FORMULAS)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        from fastapi.testclient import TestClient

        from dualcost.api.app import create_app
        from dualcost.config import Settings

        data = tempfile.TemporaryDirectory()
        client = TestClient(create_app(Settings(max_body_bytes=1 << 30, data_dir=data.name)))
    ids = [f"item_{i:03d}" for i in range(ITEMS)]
    body = orjson.dumps({
        "items": ids, "base_prices": s["p0"].tolist(), "current_prices": s["p1"].tolist(),
        "model": {"family": "ces", "sigma": SIGMA}, "formulas": FORMULAS,
        "households": [{"id": f"h{h}", "shares": w[h].tolist(),
                        "expenditure": float(m[h])} for h in range(JSON_HOUSEHOLDS)]})

    def post() -> None:
        r = client.post("/v1/household-indices", content=body,
                        headers={"content-type": "application/json"})
        assert r.status_code == 200, r.text[:300]
        assert len(orjson.loads(r.content)["households"]) == JSON_HOUSEHOLDS

    t_http, t_core = beside(post, lambda: run_households(job, w, expenditure=m), repeat=7)
    return t_http, t_core, answer_seconds(body)


def answer_seconds(body: bytes) -> float:
    """Median seconds of writing the JSON answer alone (``households.document`` and orjson, as
    the route calls them in the tree on the path) for the request ``body``."""
    import inspect

    import orjson

    from dualcost.api.operations import households
    from dualcost.api.schemas.households import HouseholdIndicesRequest
    from dualcost.config import Settings

    outcome = households.run(HouseholdIndicesRequest.model_validate_json(body),
                             Settings(max_body_bytes=1 << 30))
    quick = "rows_as_text" in inspect.signature(households.document).parameters
    options = {"rows_as_text": True} if quick else {}
    return median_seconds(lambda: orjson.dumps(households.document(outcome, **options),
                                               option=orjson.OPT_SERIALIZE_NUMPY), 7)


def json_batch_line(name: str, t_http: float, t_core: float, t_answer: float) -> str:
    return (f"    {name:31s} {t_http * 1e3:8.1f} ms   core beside it {t_core * 1e3:6.1f} ms   "
            f"HTTP / core {t_http / t_core:5.2f}   the JSON answer's writing alone "
            f"{t_answer * 1e3:6.1f} ms")


def json_batch_before_after(before: str, rounds: int = 3) -> None:
    """The JSON batch on ``before``'s service and on this checkout's, alternately, each in its
    own process (this script, with PYTHONPATH at the tree's service)."""
    here = os.path.dirname(os.path.dirname(os.path.abspath(__file__)))
    found: dict[str, list[list[float]]] = {"before": [], "after": []}
    for _ in range(rounds):
        for name, tree in (("before", before), ("after", here)):
            env = os.environ | {"PYTHONPATH": os.pathsep.join(
                [os.path.join(tree, "service"), os.path.dirname(os.path.abspath(__file__))])}
            out = subprocess.run([sys.executable, os.path.abspath(__file__), "--json-batch",
                                  "--print-seconds"], env=env, check=True, capture_output=True,
                                 text=True).stdout
            found[name].append(json.loads(out.strip().splitlines()[-1]))
    print(f"JSON batch, POST /v1/household-indices in process: {JSON_HOUSEHOLDS} households x "
          f"{ITEMS} items, CES, {len(FORMULAS)} formulas; {rounds} alternating rounds, medians "
          f"(load average {', '.join(f'{x:.2f}' for x in os.getloadavg())})")
    for name, tree in (("before", before), ("after", here)):
        t_http, t_core, t_answer = np.median(np.array(found[name]), axis=0).tolist()
        print(json_batch_line(f"{name} ({tree})", t_http, t_core, t_answer))


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--json-batch", action="store_true",
                        help="measure only the JSON batch (POST /v1/household-indices)")
    parser.add_argument("--before", metavar="TREE",
                        help="with --json-batch: also another checkout's service, alternately")
    parser.add_argument("--print-seconds", action="store_true", help=argparse.SUPPRESS)
    args = parser.parse_args()
    if args.json_batch and args.before:
        json_batch_before_after(args.before)
    elif args.json_batch:
        seconds = json_batch_seconds()
        print(json.dumps(seconds) if args.print_seconds else
              json_batch_line("JSON batch", *seconds))
    else:
        everything()


def everything() -> None:
    s = scenario()
    job = HouseholdJob.checked("ces", {"sigma": SIGMA}, s["p0"], s["p1"], formulas=FORMULAS)

    def batch() -> Any:
        return run_households(job, s["w"], expenditure=s["m"])

    def chunks_only() -> Any:
        return [evaluate_chunk(job, c) for c in chunks_of(job, s["w"], expenditure=s["m"])]

    t_base = median_seconds(lambda: baseline(s), 15)
    t_batch = median_seconds(batch, 15)
    t_chunks = median_seconds(chunks_only, 15)
    local = batch()
    reference = baseline(s)
    agree = max(float(np.max(np.abs(local.values[name][0] / ref - 1.0)))
                for name, ref in zip(["konus", *FORMULAS], reference, strict=True))
    peak = peak_bytes(batch)
    print(f"household batch: {HOUSEHOLDS} households x {ITEMS} items, CES sigma {SIGMA}, "
          f"{', '.join(FORMULAS)} and the Konüs index (chunks of {job.chunk_rows} rows)")
    print(f"  baseline (bare numpy, five indices)   {t_base * 1e3:8.1f} ms")
    print(f"  core batch, with summaries            {t_batch * 1e3:8.1f} ms   ratio "
          f"{t_batch / t_base:5.2f}   {HOUSEHOLDS / t_batch:10,.0f} households/s")
    print(f"  core chunks only, no summaries        {t_chunks * 1e3:8.1f} ms   ratio "
          f"{t_chunks / t_base:5.2f}")
    print(f"  largest relative gap to the baseline  {agree:.1e}")
    print(f"  peak memory of one batch              {peak / 2**20:8.1f} MiB above the input "
          f"(input shares {s['w'].nbytes / 2**20:.1f} MiB); process max RSS "
          f"{resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024:.0f} MiB")
    for line in on_cluster(s, job, local):
        print(line)
    print("  HTTP household job in process (create, upload, whole answer), against the core "
          "batch's households/s timed beside it (targets: CSV at least 0.5, Parquet at least "
          "0.7):")
    for name, (t_http, t_core) in over_http(s, batch).items():
        print(f"    {name:31s} {t_http * 1e3:8.1f} ms   {HOUSEHOLDS / t_http:10,.0f} "
              f"households/s   core beside it {t_core * 1e3:6.1f} ms   ratio to the core "
              f"{t_core / t_http:5.2f}")


if __name__ == "__main__":
    main()
