"""How long index series take: 1,000 items by 120 monthly periods, every series formula and the
CES Konüs series.

Run: ``python benchmarks/series_speed.py``. It prints, measured in the same run:

- the core's compute time (panel checks, calibration of a CES model to the base period, the
  fixed-base and chained series of all 14 formulas and Feenstra's, the Konüs series, GEKS on
  Fisher and Törnqvist links over the whole span and over a rolling 13-month window, bias,
  chain drift and item treatment), median of several runs;
- the same request through HTTP in-process, as JSON and as a CSV upload (parsing, validation,
  the input digest, rendering of the answer), each as a ratio to the core's time measured in the
  same run (the targets: JSON at most 1.5 times the core, CSV at most 2 times), timed in
  interleaved rounds (core, then each HTTP path, again and again) and given as the median of
  the rounds' ratios, so that a burst of load on the shared machine weighs on both; the bodies are
  encoded once beforehand, as a client holding its request as bytes sends it (the client's own
  encoding is not the service's time);
- the same two requests asking for the headline only (``detail=headline``: no per-item rows);
- a baseline: bare numpy fixed-base and chained Laspeyres, Paasche, Fisher and Törnqvist series
  and the CES unit cost in every period, on the same arrays, and the ratios of the timings above
  to it.

The machine is shared and noisy, so the ratios are the figures to compare between runs.
"""

from __future__ import annotations

import statistics
import time
import warnings
from collections.abc import Callable
from typing import Any

import numpy as np
import orjson
from _timing import median_seconds  # benchmarks/, on the path when run as a script

from dualcost.core.series import calibrate_to_base, index_series
from dualcost.core.series_panel import Panel

N_ITEMS, N_PERIODS, SIGMA = 1_000, 120, 1.6


def scenario(seed: int = 11) -> tuple[list[str], list[str], np.ndarray, np.ndarray]:
    """An invented panel: prices drifting by a few percent a year, quantities from a CES
    consumer with some noise, one item in fifty arriving late and one in fifty leaving early."""
    rng = np.random.default_rng(seed)
    periods = [f"{2015 + t // 12}-{t % 12 + 1:02d}" for t in range(N_PERIODS)]
    items = [f"item_{i:04d}" for i in range(N_ITEMS)]
    trend = rng.normal(0.002, 0.003, N_ITEMS)
    p = rng.uniform(0.5, 50.0, N_ITEMS) * np.exp(
        np.arange(N_PERIODS)[:, None] * trend + np.cumsum(rng.normal(0, 0.01, (N_PERIODS, N_ITEMS)),
                                                          axis=0))
    a = rng.uniform(0.2, 2.0, N_ITEMS)
    w = a * p ** (1 - SIGMA)
    q = 5_000.0 * w / w.sum(axis=1, keepdims=True) / p * rng.uniform(0.9, 1.1, p.shape)
    p[:30, ::50] = np.nan
    p[90:, 1::50] = np.nan
    q = np.where(np.isnan(p), np.nan, q)
    return periods, items, p, q


def main() -> None:
    periods, items, p, q = scenario()
    base = 12

    def core() -> object:
        panel = Panel.checked(p, quantities=q, periods=periods, items=items)
        model = calibrate_to_base(panel, base, "ces", {"sigma": SIGMA})
        result = index_series(panel, base=base, model=model, weight_reference=0)
        assert len(result.formulas) == 15 and len(result.multilateral) == 2
        return result

    full = ~np.isnan(p).any(axis=0)
    pb, qb = p[:, full], q[:, full]

    def baseline() -> object:
        out = []
        for p0, q0, p1, q1 in ((pb[base], qb[base], pb, qb),  # fixed base
                               (pb[:-1], qb[:-1], pb[1:], qb[1:])):  # chain links
            lasp = np.sum(p1 * q0, axis=-1) / np.sum(p0 * q0, axis=-1)
            paas = np.sum(p1 * q1, axis=-1) / np.sum(p0 * q1, axis=-1)
            v0 = p0 * q0 / np.sum(p0 * q0, axis=-1, keepdims=True)
            v1 = p1 * q1 / np.sum(p1 * q1, axis=-1, keepdims=True)
            torn = np.exp(np.sum(0.5 * (v0 + v1) * np.log(p1 / p0), axis=-1))
            out += [lasp, paas, np.sqrt(lasp * paas), torn]
        s = pb[base] * qb[base] / (pb[base] @ qb[base])
        ces = ((pb / pb[base]) ** (1 - SIGMA) @ s) ** (1 / (1 - SIGMA))
        return out, [np.cumprod(x) for x in out[4:]], ces

    with warnings.catch_warnings():
        warnings.simplefilter("ignore")  # the test client's httpx notice is not ours to print
        from fastapi.testclient import TestClient

        from dualcost.api.app import create_app

        client = TestClient(create_app())

    def cell(x: float) -> float | None:
        return None if np.isnan(x) else float(x)

    body: dict[str, Any] = {
        "periods": periods, "items": items,
        "prices": [[cell(x) for x in row] for row in p],
        "quantities": [[cell(x) for x in row] for row in q],
        "base_period": periods[base], "weight_reference": {"period": periods[0]},
        "model": {"family": "ces", "sigma": SIGMA},
    }
    lines = ["period,item,price,quantity"]
    for t in range(N_PERIODS):
        for i in range(N_ITEMS):
            if not np.isnan(p[t, i]):
                lines.append(f"{periods[t]},{items[i]},{float(p[t, i])!r},{float(q[t, i])!r}")
    text = "\n".join(lines) + "\n"
    query = (f"?base_period={periods[base]}&weight_reference_period={periods[0]}"
             f"&model=%7B%22family%22%3A%22ces%22%2C%22sigma%22%3A{SIGMA}%7D")

    json_bytes = orjson.dumps(body)
    headline_bytes = orjson.dumps(body | {"detail": "headline"})

    def post_json(content: bytes) -> Callable[[], object]:
        def post() -> object:
            r = client.post("/v1/index-series", content=content,
                            headers={"content-type": "application/json"})
            assert r.status_code == 200, r.text[:500]
            return r
        return post

    def post_csv(extra: str) -> Callable[[], object]:
        def post() -> object:
            r = client.post("/v1/index-series/csv" + query + extra, content=text,
                            headers={"content-type": "text/csv", "accept": "text/csv"})
            assert r.status_code == 200, r.text[:500]
            return r
        return post

    t_base = median_seconds(baseline, 50)
    paths = {"JSON both ways": post_json(json_bytes), "CSV both ways": post_csv(""),
             "JSON, headline only": post_json(headline_bytes),
             "CSV, headline only": post_csv("&detail=headline")}
    core_times, times = interleaved(core, paths, ROUNDS)
    t_core = statistics.median(core_times)
    print(f"index series, {N_ITEMS} items x {N_PERIODS} monthly periods, 15 formula series, "
          "CES Konüs series, GEKS (2 links, full span + 13-month rolling window)")
    print(f"  baseline (bare numpy, 4 formulas, fixed+chained, CES cost) {t_base * 1e3:8.2f} ms")
    print(f"  core compute                         {t_core * 1e3:8.1f} ms   "
          f"{t_core / t_base:6.1f} x baseline")
    for name, ts in times.items():
        t = statistics.median(ts)
        ratio = statistics.median(x / c for x, c in zip(ts, core_times, strict=True))
        print(f"  HTTP in-process, {name:<20}{t * 1e3:8.1f} ms   {t / t_base:6.1f} x baseline"
              f"   {ratio:5.2f} x core")


#: Rounds of the interleaved timings (each round times the core and every HTTP path once).
ROUNDS = 7


def interleaved(core: Callable[[], object], paths: dict[str, Callable[[], object]], rounds: int
                ) -> tuple[list[float], dict[str, list[float]]]:
    """The core's time and each path's, a round at a time (after one warm-up call each), so
    that every ratio to the core compares calls made under the same load of the shared machine;
    the ratios printed are the medians of the rounds' ratios."""
    for fn in (core, *paths.values()):
        fn()
    core_times: list[float] = []
    times: dict[str, list[float]] = {name: [] for name in paths}
    for _ in range(rounds):
        for name, fn in (("core", core), *paths.items()):
            start = time.perf_counter()
            fn()
            (core_times if name == "core" else times[name]).append(time.perf_counter() - start)
    return core_times, times


if __name__ == "__main__":
    main()
