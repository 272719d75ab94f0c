"""How much computing a request asks for, estimated from its shape before anything is computed.

The service computes a cheap request on the event loop, where it costs less than a thread
handoff, and everything else in the compute threads, so that the event loop (which answers the
probes and reads every other request) is never held for long (see :mod:`dualcost.api.routing`).
The decision reads the request's model and sizes, not its length in bytes: a 1 kB utility formula
can compute for the whole compute deadline while a 27 kB nested CES comparison takes a
millisecond.

The estimate is in microseconds of one core of the machine the figures were measured on (a shared
2-core x86-64 box; timings of whole requests through the app, then rounded up):

- a comparison: 5 us per item (translating the request, the core, writing the answer);
- a nested CES tree: 20 us per group (each depth of the tree is one vectorised step);
- the families with an n by n price matrix (translog, quadratic, AIDS, QUAIDS): calibration and
  the regularity checks decompose the matrix, 0.015 us times n cubed (300 items: about 0.4 s);
- the families without a closed form (a utility formula, a demand system integrated along a price
  path; those that take the compute deadline): no bound short of the compute deadline, so they
  always go to the compute threads, whatever their size;
- an index series or an audit: 2 us per pair of periods (the bilateral comparisons behind GEKS
  and the drift checks), 5 us per period and item, and its model's own cost once; a CSV panel
  counts each record as a period of its own, which bounds its periods from above;
- an index tree: 1 us per quote and period, 20 us per node and period (the demo tree, 27 quotes
  and 19 nodes over 30 months, estimates 12 ms and computes in about 7; forty times its quotes,
  44 ms for about 21);
- a spreadsheet form: the comparison or the series its query describes (the index tree's form:
  its demo tree).

Model fits, household batches, revealed-preference panels (a closure and linear programmes)
and sensitivity sweeps (up to ``max_sweep_points`` comparisons) always use the compute threads
and need no estimate.
"""

from __future__ import annotations

import json
import math
from collections.abc import Mapping
from typing import Any

from ..core.preferences import FAMILIES, Preferences

PER_ITEM = 5.0
PER_GROUP = 20.0
PER_MATRIX_CUBE = 0.015
PER_PERIOD_PAIR = 2.0
PER_CELL = 5.0
PER_QUOTE_CELL = 1.0
#: The work of a model that solves numerically: always more than any inline budget.
UNBOUNDED = math.inf


def solves_numerically(family: type[Preferences]) -> bool:
    """Whether the family's evaluation is an iterative solve: such families take the service's
    compute deadline (a parameter the service sets itself)."""
    return any(p.name == "deadline_seconds" and p.shape == "service"
               for p in family.parameter_specs)


def model(family: Any, parameters: Mapping[str, Any], n_items: int) -> float:
    """The work of calibrating and evaluating a model of ``n_items`` items, once."""
    cls = FAMILIES.get(family) if isinstance(family, str) else None
    if cls is None:
        return 0.0  # refused before anything is computed
    if solves_numerically(cls):
        return UNBOUNDED
    shapes = {p.name: p.shape for p in cls.parameter_specs}
    work = 0.0
    if "matrix" in shapes.values():
        work += PER_MATRIX_CUBE * float(n_items) ** 3
    for name, shape in shapes.items():
        if shape == "tree" and name in parameters:
            work += PER_GROUP * groups(parameters[name])
    return work


def groups(tree: Any) -> int:
    """The groups of a nested tree as a request gives it (counted without recursion: the tree's
    depth is checked later, by the core)."""
    count, stack = 0, [tree]
    while stack:
        node = stack.pop()
        if isinstance(node, dict):
            count += 1
            children = node.get("children")
            if isinstance(children, list):
                stack.extend(children)
    return count


def _model_of(spec: Any) -> tuple[Any, Mapping[str, Any]]:
    """The family and the parameters of a request's model (a ModelSpec, or a plain dict)."""
    if spec is None:
        return None, {}
    if isinstance(spec, dict):
        return spec.get("family"), spec
    return spec.family, spec.parameters()


def comparison(body: Any) -> float:
    """A comparison (:class:`~dualcost.api.schemas.comparison.ComparisonRequest`)."""
    n = len(body.items)
    work = 0.0
    for spec in (body.model, *(getattr(body, "band_models", None) or ())):  # each compared
        family, parameters = _model_of(spec)
        work += PER_ITEM * n + model(family, parameters, n)
    return work


def series_shape(periods: int, items: int, spec: Any) -> float:
    """An index series of ``periods`` periods and ``items`` items under the model ``spec``."""
    family, parameters = _model_of(spec)
    return (PER_PERIOD_PAIR * float(periods) ** 2 + PER_CELL * float(periods) * items
            + model(family, parameters, items))


def series(body: Any) -> float:
    """An index series or an audit, from its JSON body."""
    work = 0.0
    for spec in (body.model, *(getattr(body, "band_models", None) or ())):  # each a series
        work += series_shape(len(body.periods), len(body.items), spec)
    return work + PER_ITEM * len(getattr(body, "published", ()))


def series_csv(text: str, model_text: str | None) -> float:
    """An index series uploaded as CSV: every record may be a period of its own."""
    records = text.count("\n") + 1
    spec: Any = None
    if model_text:
        try:
            spec = json.loads(model_text)
        except ValueError:
            spec = None  # refused before anything is computed
    return series_shape(records, 1, spec if isinstance(spec, dict) else None) + PER_CELL * records


def _count(text: Any, separators: str = ",;") -> int:
    if not isinstance(text, str) or not text:
        return 0
    return max(text.count(s) for s in separators) + 1


def sheet_comparison(params: Mapping[str, Any]) -> float:
    """A spreadsheet comparison form (its model is a family and numbers: no trees or
    matrices)."""
    n = _count(params.get("items"))
    return PER_ITEM * n + model(params.get("family"), {}, n)


def sheet_series(items: Any, periods: Any, family: Any) -> float:
    """The spreadsheet series form."""
    spec = None if family is None else {"family": family}
    return series_shape(_count(periods), _count(items), spec)


def of_comparison(arguments: Mapping[str, Any]) -> float:
    return comparison(arguments["body"])


def of_series(arguments: Mapping[str, Any]) -> float:
    return series(arguments["body"])


def of_series_csv(arguments: Mapping[str, Any]) -> float:
    upload = arguments["upload"]
    if upload.text is None:  # a Parquet file: pyarrow reads it in a compute thread
        return math.inf
    return series_csv(upload.text, arguments.get("model"))


def of_sheet_comparison(arguments: Mapping[str, Any]) -> float:
    return sheet_comparison(arguments["params"])


def of_sheet_series(arguments: Mapping[str, Any]) -> float:
    return sheet_series(arguments.get("items"), arguments.get("periods"), arguments.get("family"))


def index_tree(body: Any) -> float:
    """The index of a classification tree: every quote in every period (1 us: the elementary
    aggregates are vectorised), and every node in every period (20 us: the groups' means, the
    model's pass over the tree, the answer's row)."""
    periods = len(body.periods)
    nodes = len(body.tree) if isinstance(body.tree, list) else groups_of_nodes(body.tree)
    return PER_QUOTE_CELL * periods * len(body.quotes) + PER_GROUP * nodes * periods


def groups_of_nodes(tree: Any) -> int:
    """The nodes of a nested classification (a request's NodeIn), counted without recursion."""
    count, stack = 0, [tree]
    while stack:
        node = stack.pop()
        count += 1
        stack.extend(node.children or [])
    return count


def of_index_tree(arguments: Mapping[str, Any]) -> float:
    return index_tree(arguments["body"])


def index_tree_csv(text: str, tree: Any) -> float:
    """An index tree over quotes uploaded as CSV: every record a quote cell, and every node
    (counted by its names in the tree's JSON text) in as many periods as there could be."""
    records = text.count("\n") + 1
    nodes = tree.count('"name"') if isinstance(tree, str) else 0
    return PER_QUOTE_CELL * records + PER_GROUP * nodes * min(records, 1_000)


def of_index_tree_csv(arguments: Mapping[str, Any]) -> float:
    return index_tree_csv(arguments["text"], arguments.get("tree"))
