"""The index of a classification tree (POST /v1/index-tree and its spreadsheet form): the index
at every node as a statistical office computes it, beside the nested CES model's Konüs index.

The request is translated once (the tree flattened to nodes with their parents, the quotes to a
matrix of prices, the links to period positions and weights per node), the core computes
everything in one call (:func:`dualcost.core.index_tree.index_tree`) under one error
translation, and the answer is written from the core's result. Every error names the field and
the node: the core names a node by its position and path of names; the translation here turns
the position into the node's place in the request (``/tree/children/0/children/2``, or
``/tree/5`` in the flat form) through the one locator.
"""

from __future__ import annotations

from collections import Counter
from collections.abc import Iterator
from contextlib import contextmanager
from dataclasses import dataclass
from typing import Any

import numpy as np

from ...config import Settings
from ...core.aggregation import Link, Quotes
from ...core.errors import InvalidInput
from ...core.hierarchy import Hierarchy, build_hierarchy
from ...core.index_tree import IndexTree, index_tree
from ..inputs.csv import parse_number
from ..inputs.locator import Form, Locator, Place
from ..inputs.query import json_parameter, validated
from ..inputs.quotes import QuoteTable
from ..observability import computing
from ..problems import RequestProblem
from ..render import finite
from ..schemas.common import CAUTION
from ..schemas.index_tree import IndexTreeRequest, NodeIn
from .answers import notices_json

#: Where each argument of the core is in the request (node-level errors lead into ``/tree``).
PLACES: dict[str, Place] = {
    "tree": Place("/tree", "tree", "path"),
    "links": Place("/links", "links", "path"),
    "quotes": Place("/quotes", "quotes", "path"),
    "periods": Place("/periods", "periods", "list"),
    "sigma_by_level": Place("/sigma_by_level", "sigma_by_level", "list"),
    "upper": Place("/upper_formula", "upper_formula"),
    "sigma_fit": Place("/sigma_fit", "sigma_fit"),
    "sigma_fallback": Place("/sigma_fallback", "sigma_fallback"),
}
#: The places of the CSV upload: the tree and the links as JSON text in query parameters, the
#: quotes in the CSV (an error about a quote at its first record's aggregate cell).
CSV_PLACES: dict[str, Place] = {
    **PLACES,
    "tree": Place("/tree", "tree", "path", json_text=True),
    "links": Place("/links", "links", "path", json_text=True),
    "quotes": Place("/quotes", None, "path", column="aggregate"),
    "sigma_by_level": Place("/sigma_by_level", "sigma_by_level", "scalar"),
}
#: The core's node-level arguments, and the field of a flat node each is about.
_NODE_FIELDS = {"name": "name", "parent": "parent", "formula": "formula", "sigma": "sigma",
                "children": None}


@dataclass(frozen=True)
class Nodes:
    """The tree flattened: names, parents' names, sigmas, formulas, and each node's place
    below ``/tree`` (keys and positions)."""

    names: list[str]
    parents: list[str | None]
    sigmas: list[float | None]
    formulas: list[str | None]
    places: list[tuple[int | str, ...]]
    flat: bool


@dataclass(frozen=True)
class Outcome:
    result: IndexTree
    request: IndexTreeRequest
    nodes: Nodes


def locator(form: Form = "json") -> Locator:
    return Locator(CSV_PLACES if form == "csv" else PLACES, form)


#: The query parameters of the CSV upload that are options of the JSON form, as they are.
CSV_OPTIONS = ("elementary_formula", "upper_formula", "sigma_fit", "sigma_fallback",
               "weight_tolerance", "normalise_weights", "reference_value")


def csv_request(query: dict[str, Any], quotes: QuoteTable, loc: Locator) -> IndexTreeRequest:
    """The request of a CSV upload: the quotes from the CSV, the tree and links from their
    query parameters' JSON text, the options as given; errors name the query parameter."""
    body: dict[str, Any] = {"periods": quotes.periods, "quotes": quotes.quotes,
                            "tree": json_parameter("tree", query["tree"], TREE_EXAMPLE),
                            "links": json_parameter("links", query["links"], LINKS_EXAMPLE)}
    body |= {k: query[k] for k in CSV_OPTIONS if query.get(k) is not None}
    if query.get("sigma_by_level"):
        body["sigma_by_level"] = numbers_of(query["sigma_by_level"], "sigma_by_level")
    request: IndexTreeRequest = validated(IndexTreeRequest, body, loc)
    return request


TREE_EXAMPLE = '{"name": "all items", "children": [{"name": "bread"}, {"name": "fish"}]}'
LINKS_EXAMPLE = '[{"period": "2024-12", "weights": {"bread": 60, "fish": 40}}]'


def numbers_of(text: str, name: str) -> list[float]:
    """Comma-separated numbers of a query parameter (``0.3,0.7,1``)."""
    out = []
    for k, part in enumerate(text.split(",")):
        value = parse_number(part.strip())
        if value is None:
            raise RequestProblem.at(f"#/query/{name}/{k}", f"{part.strip()!r} is not a number; "
                                    f"give comma-separated numbers such as 0.3,0.7,1")
        out.append(value)
    return out


def flatten(tree: NodeIn | list[Any]) -> Nodes:
    """The nodes in the order written (depth first), without recursion."""
    if isinstance(tree, list):
        return Nodes([n.name for n in tree], [n.parent for n in tree], [n.sigma for n in tree],
                     [n.formula for n in tree], [(k,) for k in range(len(tree))], True)
    out = Nodes([], [], [], [], [], False)
    stack: list[tuple[NodeIn, str | None, tuple[int | str, ...]]] = [(tree, None, ())]
    while stack:
        node, parent, place = stack.pop()
        out.names.append(node.name)
        out.parents.append(parent)
        out.sigmas.append(node.sigma)
        out.formulas.append(node.formula)
        out.places.append(place)
        for k in range(len(node.children or []) - 1, -1, -1):
            stack.append(((node.children or [])[k], node.name, (*place, "children", k)))
    return out


@dataclass(frozen=True)
class Translated:
    """The request in the core's terms: the checked tree, the quotes, the links, the nodes."""

    hierarchy: Hierarchy
    quotes: Quotes
    links: list[Link]
    nodes: Nodes


def run(request: IndexTreeRequest, settings: Settings, loc: Locator | None = None) -> Outcome:
    """Translate the request, compute the tree's index and its Konüs index, point any error
    at the request."""
    loc = loc or locator()
    t = translate(request, settings, loc)
    with computing("index_tree", settings), pointing(loc, t.nodes, request):
        result = index_tree(t.hierarchy, t.quotes, t.links, request.periods,
                            **tree_options(request))
    return Outcome(result, request, t.nodes)


def translate(request: IndexTreeRequest, settings: Settings, loc: Locator) -> Translated:
    """The tree, quotes and links of the request, each error pointed at its place."""
    nodes = flatten(request.tree)
    periods = _periods(request, loc)
    with pointing(loc, nodes, request):
        h = build_hierarchy(nodes.names, nodes.parents, formulas=nodes.formulas,
                            sigmas=nodes.sigmas, default_formula=request.elementary_formula,
                            max_depth=settings.max_tree_depth)
    if len(h.names) + len(request.quotes) > settings.max_items:
        raise loc.problem("quotes", f"the tree's nodes and quotes number "
                          f"{len(h.names) + len(request.quotes)}; the limit is "
                          f"{settings.max_items}")
    quotes = _quotes(request, h, periods, loc, nodes)
    return Translated(h, quotes, _links(request, h, periods, loc), nodes)


def tree_options(request: IndexTreeRequest) -> dict[str, Any]:
    """The options of :func:`dualcost.core.index_tree.index_tree` the request sets."""
    return {"upper": request.upper_formula, "sigma_by_level": request.sigma_by_level,
            "tolerance": request.weight_tolerance,
            "normalise_weights": request.normalise_weights, "sigma_fit": request.sigma_fit,
            "sigma_fallback": request.sigma_fallback}


def _periods(request: IndexTreeRequest, loc: Locator) -> dict[str, int]:
    seen: dict[str, int] = {}
    for k, label in enumerate(request.periods):
        if label in seen:
            raise loc.problem("periods", f"period {label!r} appears twice (positions "
                              f"{seen[label]} and {k}); periods are unique", k)
        seen[label] = k
    return seen


def _quotes(request: IndexTreeRequest, h: Hierarchy, periods: dict[str, int], loc: Locator,
            nodes: Nodes) -> Quotes:
    """The quotes as a matrix of prices (NaN: not priced) with their aggregates' nodes."""
    position = {name: k for k, name in enumerate(h.names)}
    ids: set[str] = set()
    prices = np.full((len(request.quotes), len(periods)), np.nan)
    owner = []
    for j, q in enumerate(request.quotes):
        if q.id in ids:
            raise loc.problem("quotes", f"quote id {q.id!r} appears twice; ids are unique",
                              (j, "id"))
        ids.add(q.id)
        e = position.get(q.aggregate)
        if e is None:
            raise loc.problem("quotes", f"quote {q.id!r} names the aggregate {q.aggregate!r}, "
                              "which is not a node of the tree; every quote belongs to an "
                              "elementary aggregate", (j, "aggregate"))
        if h.children[e]:
            raise loc.problem("quotes", f"quote {q.id!r} names {h.path(e)!r}, a group with "
                              "children; a quote belongs to an elementary aggregate (a node "
                              "without children)", (j, "aggregate"))
        if len(q.prices) != len(periods):
            raise loc.problem("quotes", f"quote {q.id!r} has {len(q.prices)} prices for "
                              f"{len(periods)} periods; give one per period (null where not "
                              "priced)", (j, "prices"))
        for t, p in enumerate(q.prices):
            if p is not None and not p > 0.0:
                raise loc.problem("quotes", f"quote {q.id!r} has price {p:g} in "
                                  f"{request.periods[t]!r}; a price must be positive",
                                  (j, "prices", t))
        prices[j] = [np.nan if p is None else p for p in q.prices]
        owner.append(e)
    for e in h.elementary:
        if e not in owner:
            raise loc.problem("tree", f"elementary aggregate {h.path(e)!r} has no quotes; give "
                              "it quotes, or children", nodes.places[e])
    return Quotes(prices, tuple(owner), tuple(q.unit for q in request.quotes))


def _links(request: IndexTreeRequest, h: Hierarchy, periods: dict[str, int],
           loc: Locator) -> list[Link]:
    position = {name: k for k, name in enumerate(h.names)}
    out = []
    for k, link in enumerate(request.links):
        if link.period not in periods:
            raise loc.problem("links", f"{link.period!r} is not one of the periods",
                              (k, "period"))
        reference = []
        for r, label in enumerate(link.weight_reference or []):
            if label not in periods:
                raise loc.problem("links", f"{label!r} is not one of the periods",
                                  (k, "weight_reference", r))
            reference.append(periods[label])
        weights = np.full(len(h.names), np.nan)
        for name, value in link.weights.items():
            if name not in position:
                raise loc.problem("links", f"{name!r} is not a node of the tree; weights are "
                                  "keyed by node name", (k, "weights", name))
            weights[position[name]] = value
        out.append(Link(periods[link.period], weights, tuple(reference)))
    return out


@contextmanager
def pointing(loc: Locator, nodes: Nodes, request: IndexTreeRequest) -> Iterator[None]:
    """The core's errors about a node, a link's weights or a quote, at their place."""
    try:
        yield
    except InvalidInput as exc:
        raise loc.problem(*_place(exc, nodes, request, loc.places)) from exc


def _place(exc: InvalidInput, nodes: Nodes, request: IndexTreeRequest,
           places: dict[str, Place]) -> tuple[str, str, Any]:
    """(argument, rule, index) in the request's terms."""
    index = exc.index
    if exc.parameter in _NODE_FIELDS and isinstance(index, int) and index < len(nodes.places):
        field = _NODE_FIELDS[exc.parameter]
        place = nodes.places[index]
        if field is not None and (nodes.flat or field in ("name", "sigma", "formula")):
            place = (*place, field)
        return "tree", exc.rule, place
    if exc.parameter == "weights" and isinstance(index, tuple) and len(index) == 2:
        link, node = int(index[0]), int(index[1])
        name = nodes.names[node]
        given = name in request.links[link].weights
        return "links", exc.rule, (link, "weights", name) if given else (link, "weights")
    if exc.parameter == "quotes" and isinstance(index, tuple) and index:
        return "tree", exc.rule, nodes.places[int(index[0])]
    if exc.parameter in places:
        return exc.parameter, exc.rule, index
    return "tree", f"{exc.parameter}: {exc.rule}", None


# -- the answer ---------------------------------------------------------------------------------


def _labels(request: IndexTreeRequest) -> tuple[list[str], list[str | None]]:
    labels = [" at ".join(x for x in (q.item, q.outlet) if x) or None for q in request.quotes]
    return [q.id for q in request.quotes], labels


def document(outcome: Outcome) -> dict[str, Any]:
    """The answer in the shape of ``IndexTreeResponse``."""
    r, request = outcome.result, outcome.request
    h, scale = r.hierarchy, float(request.reference_value)
    periods = [request.periods[t] for t in r.periods]
    ids, labels = _labels(request)
    counts = Counter(q.aggregate for q in request.quotes)
    return finite({
        "periods": periods,
        "reference_period": periods[0],
        "reference_value": scale,
        "upper_formula": r.upper,
        "links": [{"period": request.periods[s.link],
                   "weight_reference": [request.periods[t] for t in s.weight_reference],
                   "periods": [request.periods[t] for t in s.periods]} for s in r.segments],
        "nodes": [_node(r, k, scale, counts) for k in range(h.size)],
        "sigma_fit": _fits(r),
        "notices": notices_json(r.notices, ids, labels),
        "scale": _scale(periods[0], scale),
        "caution": CAUTION,
    }, "index tree")


EQUATION = ("D ln s_c = a_{g,k} + (1 - sigma_g) D ln P_c: the change of each child's share of its "
            "group between consecutive links against the change of its price level, one effect "
            "per group and link pair, least squares (CES share equation, Arrow, Chenery, Minhas "
            "and Solow 1961; sigma the Allen elasticity, Allen 1938)")


def _fits(r: IndexTree) -> dict[str, Any] | None:
    if r.fits is None:
        return None
    names = r.hierarchy.names
    return {
        "method": r.fits.method, "equation": EQUATION,
        "estimates": [{"nodes": [names[g] for g in e.nodes], "level": e.level,
                       "sigma": e.sigma, "standard_error": e.standard_error,
                       "observations": e.observations,
                       "degrees_of_freedom": e.degrees_of_freedom, "used": list(e.used),
                       "fitted": e.fitted, "reason": e.reason} for e in r.fits.estimates],
        "data": [{"node": names[d.node], "children": [names[c] for c in d.children],
                  "shares": d.shares.tolist(), "price_levels": d.prices.tolist()}
                 for d in r.fits.data],
    }


def scale_of(outcome: Outcome) -> dict[str, str | None]:
    """The scale of the answer's figures, as the JSON answer's ``scale`` and a CSV header."""
    r = outcome.result
    return _scale(outcome.request.periods[r.periods[0]], float(outcome.request.reference_value))


def _scale(reference: str, value: float) -> dict[str, str | None]:
    return {"indices": f"levels, {reference} = {value:g}", "bias": "index points on base 100",
            "links": None}


def _node(r: IndexTree, k: int, scale: float, counts: Counter[str]) -> dict[str, Any]:
    h = r.hierarchy
    parent = h.parents[k]
    return {
        "name": h.names[k], "path": h.path(k), "parent": h.names[parent] if parent >= 0 else None,
        "depth": h.depths[k], "kind": "group" if h.children[k] else "elementary",
        "formula": h.formulas[k] or r.upper,
        "sigma": None if r.sigmas is None else float(r.sigmas[k]),
        "weights": [float(s.shares[k]) for s in r.segments],
        "weights_used": [float(s.used[k]) for s in r.segments],
        "index": (scale * r.index[k]).tolist(),
        "konus": None if r.konus is None else (scale * r.konus[k]).tolist(),
        "bias_points": None if r.bias_points is None else r.bias_points[k].tolist(),
        "quotes": counts.get(h.names[k], 0),
    }


#: The columns of the CSV answer: one row per period and node.
TABLE_COLUMNS = ("period", "node", "path", "depth", "kind", "formula", "link", "weight",
                 "weight_used", "index", "konus", "bias_points")


def table(outcome: Outcome) -> tuple[tuple[str, ...], list[tuple[Any, ...]]]:
    """The answer as one CSV table: for each period, one row per node."""
    r, request = outcome.result, outcome.request
    h, scale = r.hierarchy, float(request.reference_value)
    rows = []
    for column, t in enumerate(r.periods):
        s = r.segments[r.segment_of[column]]
        for k in range(h.size):
            rows.append((request.periods[t], h.names[k], h.path(k), h.depths[k],
                         "group" if h.children[k] else "elementary", h.formulas[k] or r.upper,
                         request.periods[s.link], float(s.shares[k]), float(s.used[k]),
                         scale * float(r.index[k, column]),
                         None if r.konus is None else scale * float(r.konus[k, column]),
                         None if r.bias_points is None else float(r.bias_points[k, column])))
    return TABLE_COLUMNS, rows


def value(outcome: Outcome, node: str, period: str, measure: str) -> float | None:
    """One figure: ``index``, ``konus`` or ``bias_points`` of ``node`` in ``period`` (None if
    the model was not computed). The caller has checked that both exist."""
    r = outcome.result
    k = r.hierarchy.names.index(node)
    column = r.periods.index(outcome.request.periods.index(period))
    scale = float(outcome.request.reference_value)
    if measure == "index":
        return scale * float(r.index[k, column])
    source = r.konus if measure == "konus" else r.bias_points
    if source is None:
        return None
    return (scale if measure == "konus" else 1.0) * float(source[k, column])


__all__ = ["CSV_PLACES", "Outcome", "PLACES", "Translated", "csv_request", "document", "flatten",
           "locator", "pointing", "run", "scale_of", "table", "translate", "tree_options", "value"]
