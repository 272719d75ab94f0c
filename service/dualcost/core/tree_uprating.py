"""Uprating clauses over the index of a classification tree: "this is how our index is built"
and "this is how our pensions are uprated" in one call, :func:`tree_uprating`.

The tree is computed by :func:`dualcost.core.index_tree.index_tree` (elementary aggregates,
Lowe or Young upper levels, chain-linked, and the nested CES model's Konüs index, given or
fitted sigmas); the clauses then read one node's published series (the root by default) and the
model's Konüs series at that node, through the same clause arithmetic as any index series
(:func:`dualcost.core.uprating.uprate`: measure, rounding, floor, cap, lag). The series are the
tree's chained levels from the first link on, so a clause's change is the ratio of two published
levels (CPI Manual 2004, ch. 9: the 12-month and annual average changes of the published index;
from memory). The model is homothetic, so its Konüs index has one living standard.
"""

from __future__ import annotations

from collections.abc import Mapping, Sequence
from dataclasses import dataclass
from typing import Any

from .aggregation import Link, Quotes
from .changes import Calendar
from .errors import InvalidInput
from .hierarchy import Hierarchy
from .index_tree import IndexTree, index_tree
from .preferences.base import Notice
from .series_panel import check_periods
from .uprating import ClauseResult, read_clause, uprate


@dataclass(frozen=True)
class TreeUprating:
    """The tree as computed, the node whose series the clauses read, the periods and calendar
    of its series (from the first link), the indices the clauses ran under (the upper formula's
    name for the published index, and ``konus``), and each clause's result."""

    tree: IndexTree
    node: int
    periods: tuple[str, ...]
    calendar: Calendar
    indices: tuple[str, ...]
    clauses: list[ClauseResult]
    amount: float | None
    notices: list[Notice]


def tree_uprating(h: Hierarchy, quotes: Quotes, links: Sequence[Link], periods: Sequence[str],
                  *, clauses: Sequence[Mapping[str, Any]], node: str | None = None,
                  amount: float | None = None, **tree: Any) -> TreeUprating:
    """The tree's index (``tree``: the options of :func:`index_tree`), then every clause under
    ``node``'s published series and its Konüs series. Errors name ``node``, ``clauses``
    (``(i, field)``) and ``periods`` beside the tree's own."""
    result = index_tree(h, quotes, links, periods, **tree)
    notices: list[Notice] = []
    if node is None:
        k = h.root
        notices.append(Notice("node_assumed", f"No node was given: the clauses read the root, "
                              f"{h.names[k]!r} (the all-items index)."))
    elif node in h.names:
        k = h.names.index(node)
    else:
        raise InvalidInput("node", f"{node!r} is not a node of the tree")
    labels, frequency, times = check_periods([periods[t] for t in result.periods], None)
    calendar = Calendar.of(labels, frequency, times)
    series = {result.upper: result.index[k]}
    if result.konus is not None:
        series["konus"] = result.konus[k]
    else:
        notices.append(Notice("no_model", "The tree has no model (no sigma given or fitted): "
                              "the clauses run under its published index only."))
    read = [read_clause(c, labels, i) for i, c in enumerate(clauses)]
    results = uprate(read, series, calendar, amount)
    return TreeUprating(result, k, tuple(labels), calendar, tuple(series), results, amount,
                        notices)


__all__ = ["TreeUprating", "tree_uprating"]
