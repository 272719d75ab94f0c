"""POST /v1/index-tree: the index of a classification tree as a statistical office computes it,
beside the Konüs index of a nested CES model on the same tree; and its spreadsheet form, GET
/v1/sheet/index-tree, one node's figure in one period of the Wrenmouth demo tree."""

from __future__ import annotations

import json
from collections.abc import Mapping
from functools import cache
from pathlib import Path
from typing import Annotated, Any, Literal

from fastapi import APIRouter, Query, Request
from fastapi.responses import PlainTextResponse, Response

from .. import workload
from ..deps import settings_of
from ..operations import index_tree
from ..operations.answers import scale_headers
from ..problems import RequestProblem
from ..provenance import Provenance, of_body
from ..render import (
    CSV_ANSWER,
    TEXT_CONTENT_TYPE,
    Format,
    ProvenanceQuery,
    SheetNumbers,
    csv_response,
    format_query,
    json_response,
    negotiate,
)
from ..routing import JsonRoute, inline_when_cheap
from ..schemas.index_tree import IndexTreeRequest, IndexTreeResponse
from .sheets import Decimal, Digits, OnError, _answer

router = APIRouter(route_class=JsonRoute, prefix="/v1", tags=["index tree"])

OFFERS: tuple[Format, ...] = ("json", "csv")
RESPONSES: dict[int | str, dict[str, Any]] = {
    200: {"description": "The index at every node as JSON; or, asked for (Accept: text/csv, or "
                         "format=csv), a CSV table with one row per period and node: "
                         + ",".join(index_tree.TABLE_COLUMNS) + ".", **CSV_ANSWER},
}
DESCRIPTION = """\
A **classification tree** (any classification: a root, groups, and elementary aggregates at the
leaves) with **price quotes** in its elementary aggregates and **weights** at each level. The
index is computed as a statistical office computes a consumer price index (CPI Manual 2004,
ch. 9 and 20; 2020 edition): each elementary aggregate by **Jevons**, **Carli** or **Dutot** over
its quotes (chosen per aggregate or for all), direct from the link period over the quotes priced
in both periods; the groups by **Lowe** (the weight reference period's basket: shares
price-updated from the weight reference period to the link) or **Young** (the shares as given);
**chain-linked** at each link's period (e.g. December, with annual re-weighting), published on
the first link = 100. Beside it, at every node, the **Konüs index** of a nested CES model on the
same tree (sigma per node, or per level in `sigma_by_level`) calibrated to the same weights, and
the **bias** in index points. With `sigma_fit` (`by_group` or `by_level`) each group's sigma is
**fitted** from the tree's own data: the change of each child's share of its group between
consecutive links against the change of its price level (the CES share equation, least squares
with one effect per group and link pair), with standard errors and the data used in
`sigma_fit`; a group that cannot be fitted (one child, one link, no relative price change, or a
fit below 0) keeps its given sigma or `sigma_fallback`, and a notice names it. A group's weight
must equal its children's sum (within
`weight_tolerance`; `normalise_weights` scales them instead, with a notice). Errors name the
field and the node.
"""


@router.post("/index-tree", operation_id="indexTree",
             summary="The index of a classification tree, node by node, beside the Konüs index",
             description=DESCRIPTION, response_model=IndexTreeResponse, responses=RESPONSES)
@inline_when_cheap(workload.of_index_tree)
def index_tree_answer(body: IndexTreeRequest, request: Request,
                      format: Annotated[Literal["json", "csv"] | None, format_query(OFFERS)] = None,
                      provenance: ProvenanceQuery = "headers") -> Response:
    """The index at every node of the tree for every period from the first link, beside the
    nested CES model's Konüs index and the bias."""
    fmt = negotiate(request, OFFERS, format)
    outcome = index_tree.run(body, settings_of(request))
    if fmt == "csv":
        header, rows = index_tree.table(outcome)
        scale = {k: v for k, v in index_tree.scale_of(outcome).items() if v}
        return csv_response(header, rows, provenance=of_body(body),
                            trailer=provenance == "trailer", filename="index-tree.csv",
                            headers=scale_headers(scale))
    return json_response(index_tree.document(outcome), provenance=of_body(body))


# -- the spreadsheet form -----------------------------------------------------------------------

DEMO = Path(__file__).resolve().parents[2] / "demo" / "wrenmouth_index_tree.json"


@cache
def demo_body() -> dict[str, Any]:
    """The Wrenmouth demo tree, read once."""
    document: dict[str, Any] = json.loads(DEMO.read_text(encoding="utf-8"))
    return document


@cache
def _demo_work() -> float:
    return workload.index_tree(IndexTreeRequest.model_validate(demo_body()))


def _sheet_work(arguments: Mapping[str, Any]) -> float:
    """The demo tree's work, whatever the query asks of it."""
    return _demo_work()


@router.head("/sheet/index-tree", include_in_schema=False)
@router.get("/sheet/index-tree", operation_id="sheetIndexTree", response_class=PlainTextResponse,
            tags=["spreadsheets"],
            responses={200: {"content": {"text/plain": {}}, "description": "One number."}})
@inline_when_cheap(_sheet_work)
def sheet_index_tree(
    request: Request,
    node: Annotated[str, Query(description="The node's name in the Wrenmouth demo tree, e.g. "
                               "'01 food and non-alcoholic beverages'.")],
    period: Annotated[str, Query(description="A period from the first link on, e.g. 2025-06.")],
    measure: Annotated[Literal["index", "konus", "bias_points"], Query(
        description="index: the chained index (first link = 100); konus: the nested CES "
                    "model's; bias_points: index - konus.")] = "index",
    upper_formula: Literal["lowe", "young"] = "lowe",
    elementary_formula: Literal["jevons", "carli", "dutot"] | None = Query(
        None, description="The formula of every elementary aggregate (default: the demo's)."),
    digits: Digits = None,
    decimal: Decimal = "point",
    on_error: OnError = "problem",
) -> Response:
    """One node's figure in one period of the Wrenmouth demo tree as text/plain, for a
    spreadsheet's web-fetch function."""

    def one() -> tuple[str, Provenance]:
        body = dict(demo_body()) | {"upper_formula": upper_formula}
        if elementary_formula is not None:
            body["elementary_formula"] = elementary_formula
            body["tree"] = _without_formulas(body["tree"])
        parsed = IndexTreeRequest.model_validate(body)
        outcome = index_tree.run(parsed, settings_of(request), index_tree.locator("query"))
        names = outcome.result.hierarchy.names
        shown = [parsed.periods[t] for t in outcome.result.periods]
        if node not in names:
            raise RequestProblem.at("#/query/node", f"{node!r} is not a node of the demo tree; "
                                    f"its nodes are {', '.join(repr(n) for n in names)}")
        if period not in shown:
            raise RequestProblem.at("#/query/period", f"{period!r} is not a period of the demo "
                                    f"index; it runs from {shown[0]} to {shown[-1]}")
        figure = index_tree.value(outcome, node, period, measure)
        assert figure is not None  # the demo gives every group a sigma
        return numbers.number(figure), of_body(parsed)

    numbers = SheetNumbers(decimal, digits)
    return _answer(request, on_error, TEXT_CONTENT_TYPE, one, numbers)


def _without_formulas(tree: Any) -> Any:
    """The demo tree with no formula of its own on any node (so the query's applies to all)."""
    if isinstance(tree, dict):
        return {k: _without_formulas(v) for k, v in tree.items() if k != "formula"}
    if isinstance(tree, list):
        return [_without_formulas(v) for v in tree]
    return tree


@router.options("/sheet/index-tree", include_in_schema=False)
def sheet_options() -> Response:
    return Response(status_code=204, headers={"allow": "GET, HEAD, OPTIONS"})
