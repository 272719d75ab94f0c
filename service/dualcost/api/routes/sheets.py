"""GET forms for spreadsheets' web-fetch functions: one number as text, or a CSV table.

``/v1/sheet/value`` answers ``text/plain`` holding one number (``measure=konus_base`` by
default); ``/v1/sheet/comparison`` answers ``text/csv`` (a header row, then one row per
measure); ``/v1/sheet/series`` the series table of a short panel. A spreadsheet shows any
non-2xx answer as a bare error marker and loses its body: with ``on_error=text`` a bad request is
answered with status 200 and a text body starting with ``ERROR:`` that names the parameter and
the rule; without it, the usual 422 problem. Every form answers HEAD and OPTIONS as well, since a
spreadsheet may send those first.

``decimal=comma`` serves sheets whose locale writes decimal commas: the query's numbers are read
with ',' as decimal mark (values separated by ';'), the answer's numbers are written with ','
and a CSV table separates its fields by ';'. Every answer says which in its headers
(``Dualcost-Decimal: point|comma``; a CSV table also ``Dualcost-Separator: comma|semicolon``).
"""

from __future__ import annotations

from collections.abc import Callable
from typing import Annotated, Any, Literal

from fastapi import APIRouter, Depends, Query, Request
from fastapi.responses import PlainTextResponse, Response

from .. import workload
from ..deps import settings_of
from ..inputs.locator import Place
from ..inputs.panels import panel_from_json
from ..inputs.query import validated
from ..operations import compare, sensitivity, series, sheets, uprating
from ..operations.answers import notices_json
from ..problems import RequestProblem, error_text, problem_response
from ..provenance import Provenance, header_text, of_body
from ..render import (
    CSV_CONTENT_TYPE,
    TEXT_CONTENT_TYPE,
    ProvenanceQuery,
    SheetNumbers,
    negotiate,
)
from ..routing import JsonRoute, inline_when_cheap
from ..schemas.common import SHARE_UNIT_TEXT, DecimalMark, ShareUnit
from ..schemas.comparison import ComparisonRequest
from ..schemas.sensitivity import SensitivityRequest
from ..schemas.series import SeriesRequest
from ..schemas.uprating import UpratingRequest

router = APIRouter(route_class=JsonRoute, prefix="/v1/sheet", tags=["spreadsheets"])

Measure = Literal[compare.MEASURES]  # type: ignore[valid-type]
OnError = Annotated[Literal["problem", "text"], Query(
    description="text: answer a bad request with 200 and an 'ERROR: ...' line, for "
                "spreadsheets that hide error bodies.")]
Digits = Annotated[int | None, Query(ge=0, le=15, description="Write numbers with this many "
                                     "decimals, fixed-point (default: shortest exact form).")]
Decimal = Annotated[DecimalMark, Query(
    description="The decimal mark of the numbers in the query and in the answer. comma: read "
                "'2,40' as 2.4 (vectors then separated by ';'), write decimal commas, and "
                "separate a CSV answer's fields by ';'.")]
#: The panel of the series forms (series and uprating): items, then each period's prices (and
#: quantities) as repeated parameters in period order.
ItemsQuery = Annotated[str, Query(description="Item ids, comma-separated: the order of every row.")]
PricesQuery = Annotated[list[str], Query(description="Repeated once per period, in period "
                                                     "order: that period's prices in item order.")]
QuantitiesQuery = Annotated[list[str] | None, Query(description="Repeated once per period, like "
                                                                 "prices (optional).")]
Vector = Annotated[str | None, Query(description="Numbers in the order of items, separated by "
                                     "commas (or all by semicolons), '.' as decimal point; "
                                     "with decimal=comma, ',' as decimal mark and separated by "
                                     "semicolons.")]


RebasePeriod = Annotated[str | None, Query(description="Rebase every series to this period "
                                                  "(the change measures' rebased columns).")]
RebaseYear = Annotated[int | None, Query(ge=1, le=9999, description="Rebase every series to "
                                         "this calendar year's average.")]


def _number(description: str) -> Any:
    return Query(description=f"{description} A number, written with the decimal mark that "
                             "`decimal` declares.")


def comparison_query(
    items: Annotated[str | None, Query(description="Item ids, comma-separated: the order of every "
                                                   "vector.")] = None,
    p0: Vector = None, p1: Vector = None, q0: Vector = None, w0: Vector = None,
    m0: Annotated[str | None, _number("Base total expenditure (with w0).")] = None,
    q1: Vector = None,
    m1: Annotated[str | None, _number("Current income (default m0).")] = None,
    family: Annotated[str, Query(description="Preference family (no nested trees or matrices "
                                             "here; use POST /v1/comparisons).")] = "ces",
    sigma: Annotated[str | None, _number("Elasticity of substitution.")] = None,
    frisch: Annotated[str | None, _number("Frisch parameter (stone_geary).")] = None,
    subsistence: Vector = None, elasticities: Vector = None,
    reference_income: Annotated[str | None, _number("Income of the reference living "
                                                    "standard.")] = None,
    normalise_shares: bool = False,
    share_unit: Annotated[ShareUnit, Query(description=SHARE_UNIT_TEXT + " It applies to "
                                           "w0.")] = "fraction",
    formulas: Annotated[str | None, Query(description="Formula names, comma-separated "
                                                      "(default: every formula the data "
                                                      "allow).")] = None,
    digits: Digits = None,
    decimal: Decimal = "point",
    on_error: OnError = "problem",
) -> dict[str, Any]:
    return dict(locals())


ComparisonQuery = Annotated[dict[str, Any], Depends(comparison_query)]


def _answer(request: Request, on_error: str, media: str,
            make: Callable[[], tuple[str, Provenance]], numbers: SheetNumbers) -> Response:
    """``make()``'s text, or the problem it raised as the form's ``on_error`` asks; the headers
    say how the numbers are written, and where the answer came from (the provenance of the
    body the query was read into)."""
    negotiate(request, ("csv",) if media == CSV_CONTENT_TYPE else ("text",))
    try:
        text, origin = make()
    except RequestProblem as exc:
        if on_error == "text":
            return PlainTextResponse(error_text(exc.errors),
                                     headers=numbers.headers(table=media == CSV_CONTENT_TYPE))
        return problem_response(exc.slug, "; ".join(f"{e.pointer}: {e.detail}"
                                                    for e in exc.errors), errors=exc.errors)
    return numbers.response(text, media, origin)


def _comparison(params: dict[str, Any], request: Request) -> tuple[compare.Outcome, Provenance]:
    loc = compare.locator("query")
    body = validated(ComparisonRequest, sheets.comparison_body(params), loc)
    return compare.run(body, settings_of(request), loc), of_body(body)


@router.head("/comparison", include_in_schema=False)
@router.get("/comparison", operation_id="sheetComparison", response_class=Response,
            responses={200: {"content": {"text/csv": {}, "text/plain": {}},
                             "description": "CSV: measure,value,compared_with,bias_points,"
                             "bias_percent; the first row, model_regular, is 1 when the model is "
                             "regular at these prices and 0 when not (the model's figures and "
                             "the biases are then empty); with on_error=text a bad request is answered as "
                             "text/plain 'ERROR: ...'"}})
@inline_when_cheap(workload.of_sheet_comparison)
def sheet_comparison(params: ComparisonQuery, request: Request,
                     provenance: ProvenanceQuery = "headers") -> Response:
    """The comparison as CSV: one row per measure (Konüs indices, formulas with their bias,
    compensation), for a spreadsheet's CSV-import function; the same table as POST
    /v1/comparisons answers in CSV."""
    numbers = SheetNumbers(params["decimal"], params["digits"])

    def table() -> tuple[str, Provenance]:
        outcome, origin = _comparison(params, request)
        header, rows = compare.table(outcome)
        return numbers.table(header, rows, origin if provenance == "trailer" else None), origin

    return _answer(request, params["on_error"], CSV_CONTENT_TYPE, table, numbers)


@router.head("/value", include_in_schema=False)
@router.get("/value", operation_id="sheetValue", response_class=PlainTextResponse,
            responses={200: {"content": {"text/plain": {}}, "description": "One number."}})
@inline_when_cheap(workload.of_sheet_comparison)
def sheet_value(params: ComparisonQuery, request: Request,
                measure: Measure = "konus_base") -> Response:
    """One number as text/plain, for a spreadsheet's web-fetch function."""

    def one() -> tuple[str, Provenance]:
        outcome, origin = _comparison(params, request)
        validity = outcome.result.validity
        if measure in compare.MODEL_MEASURES and not validity.regular:
            reasons = notices_json(validity.reasons, outcome.axis.ids, outcome.axis.labels)
            raise RequestProblem.at("#/query/measure", f"{measure} is not a result: the "
                                    f"{outcome.result.family} model is outside its regular "
                                    "region here; " + " ".join(r["message"] for r in reasons)
                                    + " The formula indices remain available.",
                                    slug="model-not-regular")
        value = compare.measure(outcome, measure)
        if value is None:
            raise RequestProblem.at("#/query/measure", f"{measure!r} was not computed for this "
                                    "request (for konus_reference give reference_income)")
        return numbers.number(value), origin

    numbers = SheetNumbers(params["decimal"], params["digits"])
    return _answer(request, params["on_error"], TEXT_CONTENT_TYPE, one, numbers)


@router.head("/series", include_in_schema=False)
@router.get("/series", operation_id="sheetSeries", response_class=Response,
            responses={200: {"content": {"text/csv": {}, "text/plain": {}},
                             "description": "CSV: one row per period, one column per series (as "
                             "POST /v1/index-series answers in CSV); with on_error=text a bad "
                             "request is answered as text/plain 'ERROR: ...'"}})
@inline_when_cheap(workload.of_sheet_series)
def sheet_series(
    request: Request,
    items: ItemsQuery,
    periods: Annotated[str, Query(description="Period labels, comma-separated, in time order.")],
    prices: PricesQuery,
    quantities: QuantitiesQuery = None,
    base_period: str | None = None,
    reference_period: str | None = None,
    reference_value: Annotated[int | None, Query(description="1 or 100 (default 100).")] = None,
    formulas: Annotated[str | None, Query(description="Comma-separated formula names.")] = None,
    family: Annotated[str | None, Query(description="A model for the Konüs series (ces, "
                                                    "cobb_douglas, translog, quadratic).")] = None,
    sigma: Annotated[str | None, _number("Elasticity of substitution.")] = None,
    rebase_period: RebasePeriod = None,
    rebase_year: RebaseYear = None,
    digits: Digits = None,
    decimal: Decimal = "point",
    on_error: OnError = "problem",
    provenance: ProvenanceQuery = "headers",
) -> Response:
    """The index series of a short panel for a spreadsheet's CSV import: each period's prices
    (and quantities) as one repeated query parameter, e.g.
    `?items=rye_loaf,ferry_pass&periods=2025-01,2025-02&prices=2.40,38&prices=2.45,38`."""
    query = dict(locals())

    def table() -> tuple[str, Provenance]:
        loc = series.locator("query")
        for name, place in SERIES_MODEL_PLACES.items():
            loc.add(name, place)
        body = validated(SeriesRequest, sheets.series_body(query, prices, quantities), loc)
        settings = settings_of(request)
        panel = panel_from_json(body.periods, body.items, {"prices": body.prices,
                                "quantities": body.quantities, "expenditures": None},
                                series.limits(settings), loc)
        header, rows = series.table(series.run(body, panel, settings, loc, "sheetSeries"))
        origin = of_body(body)
        return numbers.table(header, rows, origin if provenance == "trailer" else None), origin

    numbers = SheetNumbers(decimal, digits)
    return _answer(request, on_error, CSV_CONTENT_TYPE, table, numbers)


#: The series form carries the model as ``family`` and ``sigma``.
SERIES_MODEL_PLACES = {"model": Place("/model", "family"), "family": Place("/model/family", "family"),
                       "sigma": Place("/model/sigma", "sigma")}


#: Where the clause form's query parameters go in the uprating body it stands for.
CLAUSE_PLACES = {
    **{f"clause_{k}": Place(f"/clauses/0/{k}", k) for k in sheets.CLAUSE_FIELDS},
    "clause_decimals": Place("/clauses/0/rounding/decimals", "decimals"),
    "clause_rounding": Place("/clauses/0/rounding/method", "rounding"),
    "clause_rounding_object": Place("/clauses/0/rounding", "decimals"),
    "clause": Place("/clauses/0", "measure"),
}


@router.head("/uprating", include_in_schema=False)
@router.get("/uprating", operation_id="sheetUprating", response_class=Response,
            responses={200: {"content": {"text/csv": {}, "text/plain": {}},
                             "description": "One number, the clause's uprating factor under "
                             "`index` (a CSV of one cell); the uprating is named in the "
                             "Dualcost-Uprating header. With on_error=text a bad request is "
                             "answered as text/plain 'ERROR: ...'"}})
@inline_when_cheap(workload.of_sheet_series)
def sheet_uprating(
    request: Request,
    items: ItemsQuery,
    periods: Annotated[str, Query(description="Period labels (dates), comma-separated.")],
    prices: PricesQuery,
    measure: Annotated[str, Query(description="twelve_month, annual_average or cumulative.")],
    lag: Annotated[int, Query(description="Periods from the measure period to the payment.")],
    index: Annotated[str, Query(description="The index whose factor to give: a formula name, "
                                            "or konus (needs family).")],
    quantities: QuantitiesQuery = None,
    period_of_year: Annotated[int | None, Query(description="Month or quarter the change is "
                                                            "read in.")] = None,
    since: Annotated[str | None, Query(description="cumulative: the period it counts "
                                                   "from.")] = None,
    decimals: Annotated[int | None, Query(description="Decimals of the rounded change.")] = None,
    rounding: Annotated[str | None, Query(description="half_up, half_even, down or up.")] = None,
    floor: Annotated[str | None, _number("Lowest change applied, percent.")] = None,
    cap: Annotated[str | None, _number("Highest change applied, percent.")] = None,
    paid_from: Annotated[str | None, Query(description="The uprating paid from this period "
                                                       "(default: the last one paid within "
                                                       "the series).")] = None,
    series_kind: Annotated[str | None, Query(description="fixed_base or chained.")] = None,
    konus_standard: Annotated[str | None, Query(description="base, current or midpoint.")] = None,
    base_period: str | None = None,
    formulas: Annotated[str | None, Query(description="Comma-separated formula names.")] = None,
    family: Annotated[str | None, Query(description="A model for the Konüs index.")] = None,
    sigma: Annotated[str | None, _number("Elasticity of substitution.")] = None,
    digits: Digits = None,
    decimal: Decimal = "point",
    on_error: OnError = "problem",
) -> Response:
    """One clause's uprating factor as one number (text/csv), for a spreadsheet: the series as
    in `/v1/sheet/series`, the clause's fields as query parameters, e.g.
    `&measure=twelve_month&period_of_year=9&lag=7&decimals=1&rounding=half_up&floor=0&index=laspeyres`."""
    query = dict(locals())
    chosen: dict[str, str] = {}

    def one() -> tuple[str, Provenance]:
        loc = uprating.locator("query")
        for name, place in (SERIES_MODEL_PLACES | CLAUSE_PLACES).items():
            loc.add(name, place)
        body = validated(UpratingRequest, sheets.uprating_body(query, prices, quantities), loc)
        settings = settings_of(request)
        panel = panel_from_json(body.periods, body.items, {"prices": body.prices,
                                "quantities": body.quantities, "expenditures": None},
                                series.limits(settings), loc)
        outcome = uprating.run(body, panel, settings, loc, "sheetUprating")
        value, chosen["text"] = uprating.factor(outcome, index, paid_from)
        return numbers.number(value) + "\r\n", of_body(body)

    numbers = SheetNumbers(decimal, digits)
    response = _answer(request, on_error, CSV_CONTENT_TYPE, one, numbers)
    if "text" in chosen:
        response.headers["Dualcost-Uprating"] = header_text(chosen["text"])
    return response


@router.options("/uprating", include_in_schema=False)
@router.head("/sweep", include_in_schema=False)
@router.get("/sweep", operation_id="sheetSweep", response_class=Response,
            responses={200: {"content": {"text/csv": {}, "text/plain": {}},
                             "description": "CSV: one row for the model as given (kind model), "
                             "then one per value of the grid (kind grid): " + ",".join(
                                 sensitivity.LEADING_COLUMNS) + ", then each formula's value "
                             "and <formula>_bias_points, as POST /v1/sensitivity answers in "
                             "CSV; with on_error=text a bad request is answered as text/plain "
                             "'ERROR: ...'"}})
def sheet_sweep(params: ComparisonQuery, request: Request,
                values: Vector = None,
                parameter: Annotated[str, Query(description="The model's parameter run over "
                                                "the values (sigma, frisch, ...).")] = "sigma",
                provenance: ProvenanceQuery = "headers") -> Response:
    """The σ sweep (or another number parameter's) of one comparison for a spreadsheet's CSV
    import: the comparison form's parameters, and `values`, e.g. `&values=0.2,0.5,1,2`."""
    numbers = SheetNumbers(params["decimal"], params["digits"])

    def table() -> tuple[str, Provenance]:
        loc = sensitivity.locator("query")
        body = validated(SensitivityRequest, sheets.sweep_body(params, parameter, values), loc)
        header, rows = sensitivity.table(sensitivity.run(body, settings_of(request), loc,
                                                         "sheetSweep"))
        origin = of_body(body)
        return numbers.table(header, rows, origin if provenance == "trailer" else None), origin

    return _answer(request, params["on_error"], CSV_CONTENT_TYPE, table, numbers)


@router.options("/sweep", include_in_schema=False)
@router.options("/comparison", include_in_schema=False)
@router.options("/value", include_in_schema=False)
@router.options("/series", include_in_schema=False)
def sheet_options() -> Response:
    return Response(status_code=204, headers={"allow": "GET, HEAD, OPTIONS"})
