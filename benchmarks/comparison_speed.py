"""How long one comparison takes: 300 items under a three-level nested CES model.

Run: ``python benchmarks/comparison_speed.py``. It prints, measured in the same run:

- the core's compute time for one comparison (calibration plus ``compare``), median of many runs;
- the same request through HTTP in-process (JSON parsing, validation, the answer's rendering);
- a baseline: bare numpy evaluation of Laspeyres, Paasche, Fisher, Törnqvist and one CES power
  mean on the same arrays, with the ratios of the two timings above to it.

The machine is shared and noisy, so the ratios are the figures to compare between runs.
"""

from __future__ import annotations

import warnings
from typing import Any

import numpy as np
from _timing import median_seconds  # benchmarks/, on the path when run as a script

from dualcost.core.comparison import compare
from dualcost.core.preferences import BaseBudget, calibrate

GROUPS, SUBGROUPS, ITEMS = 10, 3, 10  # 300 items


def scenario(seed: int = 7) -> dict[str, Any]:
    """An invented 300-item basket, prices moving by up to +-30 %."""
    rng = np.random.default_rng(seed)
    n = GROUPS * SUBGROUPS * ITEMS
    ids = [f"item_{i:03d}" for i in range(n)]
    p0 = rng.uniform(0.5, 20.0, n)
    q0 = rng.uniform(1.0, 50.0, n)
    p1 = p0 * np.exp(rng.uniform(-0.3, 0.3, n))
    k = iter(range(n))
    tree = {"name": "all items", "sigma": 0.3, "children": [
        {"name": f"group {g}", "sigma": 0.8, "children": [
            {"name": f"group {g}.{s}", "sigma": 2.0,
             "children": [ids[next(k)] for _ in range(ITEMS)]}
            for s in range(SUBGROUPS)]}
        for g in range(GROUPS)]}
    return {"items": ids, "base": {"prices": p0.tolist(), "quantities": q0.tolist()},
            "current": {"prices": p1.tolist()}, "model": {"family": "nested_ces", "tree": tree}}


def _positions(tree: dict[str, Any], ids: list[str]) -> dict[str, Any]:
    where = {item: i for i, item in enumerate(ids)}
    return {"name": tree["name"], "sigma": tree["sigma"], "children": [
        where[c] if isinstance(c, str) else _positions(c, ids) for c in tree["children"]]}


def main() -> None:
    body = scenario()
    p0 = np.array(body["base"]["prices"])
    q0 = np.array(body["base"]["quantities"])
    p1 = np.array(body["current"]["prices"])
    tree = _positions(body["model"]["tree"], body["items"])

    def core() -> object:
        base = BaseBudget.from_quantities(p0, q0)
        model = calibrate("nested_ces", base, {"tree": tree})
        return compare(model, base, p1)

    def baseline() -> object:
        w0 = p0 * q0 / (p0 @ q0)
        q1 = q0 * (p1 / p0) ** -0.5
        lasp = (p1 @ q0) / (p0 @ q0)
        paas = (p1 @ q1) / (p0 @ q1)
        fish = np.sqrt(lasp * paas)
        w1 = p1 * q1 / (p1 @ q1)
        torn = np.exp(0.5 * (w0 + w1) @ np.log(p1 / p0))
        ces = (w0 @ (p1 / p0) ** 0.7) ** (1 / 0.7)
        return lasp, paas, fish, torn, ces

    with warnings.catch_warnings():
        warnings.simplefilter("ignore")  # the test client's httpx notice is not ours to print
        from fastapi.testclient import TestClient

        from dualcost.api.app import create_app

        client = TestClient(create_app())

    def http() -> object:
        r = client.post("/v1/comparisons", json=body)
        assert r.status_code == 200, r.text
        return r

    t_base = median_seconds(baseline, 2000)
    t_core = median_seconds(core, 300)
    t_http = median_seconds(http, 60)
    print("comparison, 300 items, nested CES (10 groups x 3 subgroups x 10 items)")
    print(f"  baseline (bare numpy formulas)   {t_base * 1e3:8.3f} ms")
    print(f"  core compute (calibrate+compare) {t_core * 1e3:8.3f} ms   ratio {t_core / t_base:7.1f}")
    print(f"  HTTP in-process, JSON both ways  {t_http * 1e3:8.3f} ms   ratio {t_http / t_base:7.1f}")


if __name__ == "__main__":
    main()
