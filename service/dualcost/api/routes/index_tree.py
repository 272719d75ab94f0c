"""POST /v1/index-tree: the index of a classification tree as a statistical office computes it,
beside the Konüs index of a nested CES model on the same tree; and its spreadsheet form, GET
/v1/sheet/index-tree, one node's figure in one period of the Wrenmouth demo tree."""

from __future__ import annotations

import json
from collections.abc import Mapping
from functools import cache
from pathlib import Path
from typing import Annotated, Any, Literal

from fastapi import APIRouter, Depends, Query, Request
from fastapi.responses import PlainTextResponse, Response
from pydantic import BeforeValidator

from .. import workload
from ..deps import settings_of
from ..inputs.csv import (
    CSV_REQUEST_BODY,
    DecimalParam,
    DeclaredDialect,
    SeparatorParam,
    csv_body,
    dialect_notices,
)
from ..inputs.json_text import in_float_range
from ..inputs.quotes import quotes_from_csv
from ..operations import index_tree
from ..operations.answers import scale_headers
from ..problems import RequestProblem
from ..provenance import Provenance, UploadSha256, of_body, of_upload, query_of
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
#: The spreadsheet form, listed with the other spreadsheet forms (one tag, so the documentation
#: shows it once).
sheet_router = APIRouter(route_class=JsonRoute, prefix="/v1", tags=["spreadsheets"])

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


CSV_DESCRIPTION = """\
The **price quotes as a long CSV table** (as spreadsheets and statistical offices keep them), the
tree and the links as JSON text in the query parameters `tree` and `links` (the same JSON as the
fields of `POST /v1/index-tree`), the options as query parameters. The body is `text/csv` with
columns `quote`, `aggregate`, `period` and `price`, and optionally `item`, `outlet` and `unit`:
one record per quote and period it is priced in (a quote missing in a period is not priced
there), in any order; the periods are put in time order when their labels are dates, else in the
order they first appear (a notice says so). Fields separated by `,`, `;` or a tab, numbers with
`.` or `,` as decimal mark, declared by `separator` and `decimal` or detected (stated in
`notices`, code `csv_dialect_detected`); no grouping of thousands. Errors in the CSV name the row
and column (`#cell=row,column`, RFC 7111); errors in the tree or links name the query parameter
and the place inside its JSON (`#/query/links/1/weights/07 transport`). For a classification
too large for a query string, use `POST /v1/index-tree`.

""" + DESCRIPTION


@router.post("/index-tree/csv", operation_id="indexTreeFromCsv",
             summary="The index of a classification tree from price quotes uploaded as CSV",
             description=CSV_DESCRIPTION, response_model=IndexTreeResponse, responses=RESPONSES,
             openapi_extra=CSV_REQUEST_BODY)
@inline_when_cheap(workload.of_index_tree_csv)
def index_tree_from_csv(
    text: Annotated[str, Depends(csv_body)],
    csv_sha256: UploadSha256,
    request: Request,
    tree: Annotated[str, Query(description="The classification as JSON: a root node with "
                               "nested children, or a list of nodes naming their parents.")],
    links: Annotated[str, Query(description="The links as JSON: a list of {period, weights, "
                                "weight_reference}.")],
    elementary_formula: Literal["jevons", "carli", "dutot"] | None = None,
    upper_formula: Literal["lowe", "young"] | None = None,
    sigma_by_level: Annotated[str | None, Query(description="Comma-separated sigmas by level, "
                                                "the root first (0.3,0.7,1).")] = None,
    sigma_fit: Literal["by_group", "by_level"] | None = None,
    sigma_fallback: Annotated[float | None, BeforeValidator(in_float_range),
                              Query(allow_inf_nan=False)] = None,
    weight_tolerance: Annotated[float | None, BeforeValidator(in_float_range),
                                Query(allow_inf_nan=False)] = None,
    normalise_weights: bool | None = None,
    reference_value: Annotated[int | None, Query(description="1 or 100 (default 100).")] = None,
    separator: SeparatorParam = None,
    decimal: DecimalParam = None,
    format: Annotated[Literal["json", "csv"] | None, format_query(OFFERS)] = None,
    provenance: ProvenanceQuery = "headers",
) -> Response:
    """The index of the tree over the uploaded quotes, as POST /v1/index-tree computes it."""
    query = dict(locals())
    fmt = negotiate(request, OFFERS, format)
    settings = settings_of(request)
    loc = index_tree.locator("csv")
    quotes = quotes_from_csv(text, loc, max_rows=settings.max_panel_cells,
                             declared=DeclaredDialect(separator, decimal))
    body = index_tree.csv_request(query, quotes, loc)
    outcome = index_tree.run(body, settings, loc)
    origin = of_upload(csv_sha256, query_of(request.query_params.multi_items(), query))
    read = dialect_notices(quotes.dialect) + ([] if quotes.period_order is None else [
        {"code": "periods_in_order_of_appearance", "message": quotes.period_order,
         "items": []}])
    if fmt == "csv":
        header, rows = index_tree.table(outcome)
        scale = {k: v for k, v in index_tree.scale_of(outcome).items() if v}
        return csv_response(header, rows, provenance=origin, trailer=provenance == "trailer",
                            filename="index-tree.csv",
                            headers=scale_headers(scale) | quotes.dialect.headers())
    document = index_tree.document(outcome)
    document["notices"] = read + document["notices"]
    return json_response(document, provenance=origin)


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


@sheet_router.head("/sheet/index-tree", include_in_schema=False)
@sheet_router.get("/sheet/index-tree", operation_id="sheetIndexTree",
                  response_class=PlainTextResponse,
                  responses={200: {"content": {"text/plain": {}},
                                   "description": "One number."}})
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


@sheet_router.options("/sheet/index-tree", include_in_schema=False)
def sheet_options() -> Response:
    return Response(status_code=204, headers={"allow": "GET, HEAD, OPTIONS"})
