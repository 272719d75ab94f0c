"""Uprating clauses over the index of a classification tree (POST /v1/uprating/index-tree):
"this is how our index is built" and "this is how our pensions are uprated" in one request.

The tree part of the request is read exactly as the index-tree operation reads it
(:func:`dualcost.api.operations.index_tree.translate`, its places); the clauses and the node go
with it into one core call (:func:`dualcost.core.tree_uprating.tree_uprating`). The answer is
the uprating answer's clause block (each uprating's change, applied change and factor under the
published index and the Konüs index, the money paid), with the indexation caution first.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Any

from ...config import Settings
from ...core.tree_uprating import TreeUprating, tree_uprating
from ..inputs.locator import Form, Locator, Place
from ..observability import computing
from ..schemas.tree_uprating import TreeUpratingRequest
from . import index_tree, uprating
from .answers import notices_json

PLACES: dict[str, Place] = {
    **index_tree.PLACES,
    "clauses": Place("/clauses", "clauses", "path"),
    "amount": Place("/amount", "amount"),
    "node": Place("/node", "node"),
}


@dataclass(frozen=True)
class Outcome:
    result: TreeUprating
    request: TreeUpratingRequest


def locator(form: Form = "json") -> Locator:
    return Locator(PLACES, form)


def run(request: TreeUpratingRequest, settings: Settings, loc: Locator | None = None) -> Outcome:
    """Translate the tree, then compute it and run every clause on the node's series: one
    core call, its errors pointed at the request."""
    loc = loc or locator()
    t = index_tree.translate(request, settings, loc)
    clauses = [uprating.clause_arguments(c) for c in request.clauses]
    with computing("tree_uprating", settings), index_tree.pointing(loc, t.nodes, request):
        result = tree_uprating(t.hierarchy, t.quotes, t.links, request.periods,
                               clauses=clauses, node=request.node, amount=request.amount,
                               **index_tree.tree_options(request))
    return Outcome(result, request)


def _tree_outcome(outcome: Outcome) -> index_tree.Outcome:
    return index_tree.Outcome(outcome.result.tree, outcome.request,
                              index_tree.flatten(outcome.request.tree))


def document(outcome: Outcome) -> dict[str, Any]:
    """The answer in the shape of ``TreeUpratingResponse``."""
    u, request = outcome.result, outcome.request
    tree = index_tree.document(_tree_outcome(outcome))
    h = u.tree.hierarchy
    frequency = u.calendar.frequency
    ids = [q.id for q in request.quotes]
    return {
        "caution": uprating.INDEXATION,
        "node": h.names[u.node], "path": h.path(u.node),
        "periods": list(u.periods), "frequency": frequency, "upper_formula": u.tree.upper,
        "indices": list(u.indices), "amount": u.amount,
        "clauses": [uprating.clause_out(c, given, u.periods, u.amount is not None, frequency)
                    for c, given in zip(u.clauses, request.clauses, strict=True)],
        "sigma_fit": tree["sigma_fit"],
        "notices": notices_json(u.notices, ids) + tree["notices"],
        "scale": tree["scale"],
    }


def table(outcome: Outcome) -> tuple[list[str], list[list[Any]]]:
    """One row per clause, uprating and index (the uprating answer's CSV table)."""
    u = outcome.result
    return uprating.TABLE_HEADER, uprating.table_rows(u.clauses, outcome.request.clauses,
                                                      u.periods)


__all__ = ["Outcome", "PLACES", "document", "locator", "run", "table"]
