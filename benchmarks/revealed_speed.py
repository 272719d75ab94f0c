"""How long the model-free reading of a panel takes: 24 periods by 50 items, GARP, WARP and SARP
with every violation, Afriat's efficiency index, and Varian's bounds on the Konüs index for
every pair of periods (at the first period's living standard of each pair).

Run: ``python benchmarks/revealed_speed.py``. It prints, measured in the same run, on two
invented panels (one from a CES consumer, which passes GARP; one with noise of up to 50% on the
quantities, which fails it, so that the efficiency search runs too):

- the core's compute time (:mod:`dualcost.core.revealed`, :mod:`dualcost.core.revealed_bounds`),
  median of several runs; the target is under 1 s;
- a baseline: a bare numpy pass over the same panel, the cost matrix ``p_t . x_s`` with the
  Laspeyres and Paasche indices of every pair (the formula bounds beside the model-free ones),
  and the ratio of the core's time to it;
- the lower bounds solved as 24 x 24 separate ``scipy.optimize.linprog`` calls instead of 24
  block programmes, for comparison.

The machine is shared and noisy, so the ratios are the figures to compare between runs.
"""

from __future__ import annotations

import numpy as np
import scipy.optimize
from _timing import median_seconds  # benchmarks/, on the path when run as a script

from dualcost.core import revealed as rv
from dualcost.core import revealed_bounds as rb

PERIODS, ITEMS, SIGMA = 24, 50, 0.7


def panel(noise: float, seed: int = 5) -> tuple[np.ndarray, np.ndarray]:
    """Prices drifting and wandering by a few percent; quantities of a CES consumer whose budget
    grows, times noise."""
    rng = np.random.default_rng(seed)
    p = rng.uniform(0.5, 20.0, ITEMS) * np.exp(np.cumsum(rng.normal(0.002, 0.03,
                                                                    (PERIODS, ITEMS)), axis=0))
    a = rng.uniform(0.2, 2.0, ITEMS)
    m = 1_000.0 * np.exp(np.arange(PERIODS) * 0.004 + rng.normal(0, 0.02, PERIODS))
    w = a * p ** (1 - SIGMA)
    x = m[:, None] * w / w.sum(axis=1, keepdims=True) / p
    return p, x * rng.uniform(1 - noise, 1 + noise, x.shape)


def core(p: np.ndarray, x: np.ndarray) -> tuple[rv.Consistency, float, np.ndarray, np.ndarray]:
    data = rv.panel(p, x)
    verdict = rv.consistency(data)
    index = rv.efficiency_index(data.costs)
    bounds = rb.cost_bounds(data, range(PERIODS), rv.level_below(data.costs, index))
    lower, upper = rb.every_pair(data, bounds)
    return verdict, index, lower, upper


def bare_numpy(p: np.ndarray, x: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    costs = p @ x.T  # costs[t, s] = p_t . x_s
    own = np.diagonal(costs)
    laspeyres = costs / own[None, :]  # [b, a]: p_b . x_a / p_a . x_a
    paasche = own[:, None] / costs.T  # [b, a]: p_b . x_b / p_a . x_b
    return laspeyres.T, paasche.T


def one_at_a_time(p: np.ndarray, x: np.ndarray) -> None:
    data = rv.panel(p, x)
    revealed = rv.closure(rv.relations(data.costs)[0])
    for r in range(PERIODS):
        worse = np.flatnonzero(revealed[r])
        for j in range(PERIODS):
            scipy.optimize.linprog(p[j], A_ub=-p[worse], b_ub=-np.diagonal(data.costs)[worse],
                                   method="highs")


def main() -> None:
    for name, noise in (("CES consumer", 0.0), ("CES consumer, quantities times noise of up to 50%", 0.5)):
        p, x = panel(noise)
        verdict, index, lower, upper = core(p, x)
        t_core = median_seconds(lambda: core(p, x), repeat=5)  # noqa: B023
        t_base = median_seconds(lambda: bare_numpy(p, x), repeat=50)  # noqa: B023
        t_loop = median_seconds(lambda: one_at_a_time(p, x), repeat=1)  # noqa: B023
        garp = "passes" if verdict.garp else f"fails ({len(verdict.violations)} violations)"
        print(f"{name}: {PERIODS} periods x {ITEMS} items, GARP {garp}, efficiency index "
              f"{index:.4f}, median bracket width {np.median(upper - lower):.4f}")
        print(f"  core (axioms, efficiency, all {PERIODS * PERIODS} pairwise bounds): "
              f"{t_core * 1e3:8.1f} ms  (target < 1000 ms)")
        print(f"  baseline, bare numpy cost matrix + Laspeyres/Paasche of every pair: "
              f"{t_base * 1e3:8.3f} ms  -> core / baseline = {t_core / t_base:,.0f}")
        print(f"  lower bounds as {PERIODS * PERIODS} separate linprog calls: "
              f"{t_loop * 1e3:8.1f} ms  -> separate / core = {t_loop / t_core:.1f}")


if __name__ == "__main__":
    main()
