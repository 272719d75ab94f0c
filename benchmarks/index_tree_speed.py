"""How long the index of a classification tree takes: 2,000 elementary aggregates under 200
groups, 20,000 quotes, 36 months, two links (annual re-weighting), Lowe over Jevons, and the
nested CES Konüs index at every node.

Run: ``python benchmarks/index_tree_speed.py``. It prints, measured in the same run:

- the core's compute time (:func:`dualcost.core.index_tree.index_tree`: the elementary
  aggregates over matched quotes, the price-updated weights, every group's index, the model's
  elementary indices and its Konüs index at every node, chain-linking), median of a few runs;
- a baseline: bare numpy Jevons indices of every aggregate in one pass (``np.add.reduceat``
  over quotes sorted by aggregate) and one Young mean of them at the root per segment, on the
  same arrays: the least any computation of the top-level number must do;
- the ratio of the first to the second.

The machine is shared and noisy, so the ratio is the figure to compare between runs.
"""

from __future__ import annotations

import numpy as np
from _timing import median_seconds  # benchmarks/, on the path when run as a script

from dualcost.core.aggregation import Link, Quotes
from dualcost.core.hierarchy import Hierarchy, build_hierarchy
from dualcost.core.index_tree import index_tree

N_TOP, N_GROUPS, N_AGGREGATES, N_QUOTES, N_PERIODS = 20, 200, 2_000, 20_000, 36


def tree_and_data() -> tuple[Hierarchy, Quotes, list[Link], list[str]]:
    rng = np.random.default_rng(1)
    groups = [f"g{i}" for i in range(N_GROUPS)]
    leaves = [f"e{i}" for i in range(N_AGGREGATES)]
    parents: list[str | None] = [None] + ["all"] * N_TOP
    parents += [f"g{i % N_TOP}" for i in range(N_GROUPS - N_TOP)]
    parents += [f"g{N_TOP + i % (N_GROUPS - N_TOP)}" for i in range(N_AGGREGATES)]
    names = ["all", *groups, *leaves]
    h = build_hierarchy(names, parents, formulas=[None] * len(names),
                        sigmas=[0.5] * len(names))
    owner = tuple(int(h.elementary[i % N_AGGREGATES]) for i in range(N_QUOTES))
    prices = np.exp(np.cumsum(rng.normal(0.002, 0.02, (N_QUOTES, N_PERIODS)), axis=1))
    weights = np.full(len(names), np.nan)
    weights[list(h.elementary)] = rng.uniform(1.0, 5.0, N_AGGREGATES)
    links = [Link(11, weights, tuple(range(12))), Link(23, weights, tuple(range(12, 24)))]
    return h, Quotes(prices, owner, (None,) * N_QUOTES), links, [str(t) for t in range(N_PERIODS)]


def baseline(q: Quotes, links: list[Link]) -> np.ndarray:
    """Jevons per aggregate by one segment reduction, and the root's Young mean, per segment."""
    owner = np.asarray(q.aggregate)
    order = np.argsort(owner, kind="stable")
    sorted_owner = owner[order]
    starts = np.flatnonzero(np.r_[True, sorted_owner[1:] != sorted_owner[:-1]])
    counts = np.diff(np.r_[starts, owner.size])
    logs = np.log(q.prices[order])
    out = []
    for k, link in enumerate(links):
        end = links[k + 1].period if k + 1 < len(links) else q.prices.shape[1] - 1
        rel = logs[:, link.period:end + 1] - logs[:, [link.period]]
        jevons = np.exp(np.add.reduceat(rel, starts, axis=0) / counts[:, None])
        w = np.asarray(link.weights)[np.unique(sorted_owner)]
        out.append(w @ jevons / np.sum(w))
    return np.concatenate(out)


def main() -> None:
    h, q, links, periods = tree_and_data()
    # The baseline computes the same numbers: each segment's root index on its link.
    result = index_tree(h, q, links, periods, upper="young")
    direct = np.concatenate([s.index[h.root] for s in result.segments])
    np.testing.assert_allclose(baseline(q, links), direct, rtol=1e-12)
    core = median_seconds(lambda: index_tree(h, q, links, periods, upper="young"), 3)
    bare = median_seconds(lambda: baseline(q, links), 5)
    print(f"tree: {N_AGGREGATES} aggregates, {N_GROUPS} groups, {N_QUOTES} quotes, "
          f"{N_PERIODS} periods, 2 links")
    print(f"core index_tree (Young, with the Konüs index at every node): {core:.3f} s")
    print(f"baseline (bare numpy Jevons + one Young mean at the root):   {bare:.3f} s")
    print(f"ratio core / baseline: {core / bare:.1f}")


if __name__ == "__main__":
    main()
