"""GET forms of the comparison for spreadsheets' web-fetch functions.

A spreadsheet can only send a GET with a URL and read the body back as text, so the inputs travel
as query parameters holding short comma-separated vectors in the order given by ``items``:

    /v1/sheet/comparison?items=rye_loaf,peat,ferry&p0=2.40,9,38&p1=2.52,12.15,41
        &q0=12,6,1&family=ces&sigma=0.6

``/v1/sheet/comparison`` answers ``text/csv`` (a header row, then one row per measure);
``/v1/sheet/value`` answers ``text/plain`` holding one number (``measure=konus_base`` by
default). Numbers are read and written with '.' as the decimal point and no grouping.

A spreadsheet shows any non-2xx answer as a bare error marker and loses its body. With
``on_error=text`` a bad request is answered with status 200 and a text body starting with
``ERROR:`` that names the parameter and the rule; without it, the usual 422 problem response.
Both routes answer HEAD and OPTIONS as well, since a spreadsheet may send those first.
"""

from __future__ import annotations

from typing import Annotated, Any, Literal

from fastapi import APIRouter, Depends, Query, Request
from fastapi.responses import PlainTextResponse, Response
from pydantic import ValidationError

from ..deps import SettingsDep
from ..observability import computing
from ..problems import (
    FieldError,
    RequestProblem,
    _pointer,
    _pydantic_message,
    error_text,
    problem_response,
)
from ..routing import JsonRoute, inline_when_small
from ..schemas.comparison import ComparisonRequest, ComparisonResponse
from ..tabular import csv_text, parse_number

router = APIRouter(route_class=JsonRoute, prefix="/v1/sheet", tags=["spreadsheets"])

#: Where each request-body field travels in the query string.
_QUERY_NAME = {
    "/items": "items",
    "/base/prices": "p0",
    "/base/quantities": "q0",
    "/base/shares": "w0",
    "/base/expenditure": "m0",
    "/current/prices": "p1",
    "/current/quantities": "q1",
    "/current/expenditure": "m1",
    "/current": "m1",
    "/reference_income": "reference_income",
    "/model/family": "family",
    "/model/sigma": "sigma",
    "/model/frisch": "frisch",
    "/model/subsistence_quantities": "subsistence",
    "/model/expenditure_elasticities": "elasticities",
    "/model": "family",
    "/formulas": "formulas",
    "/lloyd_moulton_sigma": "lloyd_moulton_sigma",
    "/normalise_shares": "normalise_shares",
}

Measure = Literal[
    "konus_base", "konus_current", "konus_midpoint", "konus_reference", "laspeyres", "paasche",
    "fisher", "tornqvist", "walsh", "marshall_edgeworth", "sato_vartia", "geometric_laspeyres",
    "lloyd_moulton", "carli", "jevons", "dutot", "laspeyres_bias_points",
    "compensating_variation", "equivalent_variation", "compensated_income",
]

Vector = Annotated[str | None, Query(description="Numbers in the order of items, separated by commas "
                                                 "(or all by semicolons), '.' as decimal point.")]


def _query_pointer(body_pointer: str) -> str:
    """``/base/prices/2`` becomes ``#/query/p0/2``."""
    for prefix in sorted(_QUERY_NAME, key=len, reverse=True):
        if body_pointer == prefix or body_pointer.startswith(prefix + "/"):
            return f"#/query/{_QUERY_NAME[prefix]}{body_pointer[len(prefix):]}"
    return f"#/query{body_pointer}"


def _vector(name: str, text: str | None) -> list[float] | None:
    if text is None:
        return None
    # Semicolons may separate the values instead of commas: a sheet in a comma-decimal locale
    # joins cells with ';' and turns its decimal commas into points before sending.
    separator = ";" if ";" in text else ","
    values = []
    for i, cell in enumerate(text.split(separator)):
        value = parse_number(cell)
        if value is None:
            raise RequestProblem([FieldError(f"#/query/{name}/{i}", f"{cell.strip()!r} is not a "
                                             "finite number (use '.' as decimal point, no grouping)")])
        values.append(value)
    return values


def _build(params: dict[str, Any]) -> ComparisonRequest:
    items = [s.strip() for s in (params["items"] or "").split(",") if s.strip()]
    base: dict[str, Any] = {"prices": _vector("p0", params["p0"])}
    for key, name in (("quantities", "q0"), ("shares", "w0")):
        if params[name] is not None:
            base[key] = _vector(name, params[name])
    if params["m0"] is not None:
        base["expenditure"] = params["m0"]
    current: dict[str, Any] = {"prices": _vector("p1", params["p1"])}
    if params["q1"] is not None:
        current["quantities"] = _vector("q1", params["q1"])
    if params["m1"] is not None:
        current["expenditure"] = params["m1"]
    model: dict[str, Any] = {"family": params["family"]}
    for key, name in (("sigma", "sigma"), ("frisch", "frisch")):
        if params[name] is not None:
            model[key] = params[name]
    for key, name in (("subsistence_quantities", "subsistence"),
                      ("expenditure_elasticities", "elasticities")):
        if params[name] is not None:
            model[key] = _vector(name, params[name])
    body: dict[str, Any] = {"items": items, "base": base, "current": current, "model": model,
                            "normalise_shares": params["normalise_shares"]}
    if params["reference_income"] is not None:
        body["reference_income"] = params["reference_income"]
    try:
        return ComparisonRequest.model_validate(body)
    except ValidationError as exc:
        raise RequestProblem([FieldError(_query_pointer(_pointer(("body", *e["loc"]), body, e["type"])),
                                         _pydantic_message(e)) for e in exc.errors()]) from None


def _run(params: dict[str, Any], settings: Any) -> ComparisonResponse:
    request = _build(params)
    try:
        with computing("sheetComparison", settings):
            result, model, axis = request.run(max_items=settings.max_items,
                                              max_tree_depth=settings.max_tree_depth,
                                              compute_deadline_seconds=settings.compute_deadline_seconds)
    except RequestProblem as exc:
        raise RequestProblem([FieldError(_query_pointer(e.pointer), e.detail) for e in exc.errors],
                             slug=exc.slug) from None
    return ComparisonResponse.from_result(result, model, axis)


def _answer(params: dict[str, Any], settings: Any, render: Any, media: str) -> Response:
    try:
        body = render(_run(params, settings))
    except RequestProblem as exc:
        if params["on_error"] == "text":
            return PlainTextResponse(error_text(exc.errors))
        return problem_response(exc.slug, "; ".join(f"{e.pointer}: {e.detail}" for e in exc.errors),
                                errors=exc.errors)
    return Response(body, media_type=media)


def _rows(r: ComparisonResponse) -> list[list[Any]]:
    rows: list[list[Any]] = [
        ["konus_base", r.konus.base, "", "", ""],
        ["konus_current", r.konus.current, "", "", ""],
        ["konus_midpoint", r.konus.midpoint, "", "", ""],
    ]
    if r.konus.reference is not None:
        rows.append(["konus_reference", r.konus.reference, "", "", ""])
    rows += [[f.formula, f.value, f.compared_with, f.bias_points, f.bias_percent] for f in r.formulas]
    c = r.compensation
    rows += [["compensating_variation", c.compensating_variation, "", "", ""],
             ["equivalent_variation", c.equivalent_variation, "", "", ""],
             ["compensated_income", c.compensated_income, "", "", ""]]
    return rows


def _number(value: float, digits: int | None) -> str:
    """Shortest round-trip form, or fixed-point with ``digits`` decimals (never an exponent)."""
    return repr(float(value)) if digits is None else f"{value:.{digits}f}"


def _formatted(rows: list[list[Any]], digits: int | None) -> list[list[Any]]:
    if digits is None:
        return rows
    return [[_number(v, digits) if isinstance(v, float) else v for v in row] for row in rows]


def _measure(r: ComparisonResponse, measure: str) -> float:
    for name, value, *_ in _rows(r):
        if name == measure:
            return float(value)
    if measure == "laspeyres_bias_points" and r.laspeyres_gap_points is not None:
        return r.laspeyres_gap_points
    raise RequestProblem([FieldError("#/query/measure", f"{measure!r} was not computed for this "
                                     "request (for konus_reference give reference_income)")])


def _params(
    items: Annotated[str | None, Query(description="Item ids, comma-separated: the order of every "
                                                   "vector.")] = None,
    p0: Vector = None, p1: Vector = None, q0: Vector = None, w0: Vector = None,
    m0: Annotated[float | None, Query(description="Base total expenditure (with w0).")] = None,
    q1: Vector = None,
    m1: Annotated[float | None, Query(description="Current income (default m0).")] = None,
    family: Annotated[str, Query(description="Preference family (no nested trees or matrices "
                                             "here; use POST /v1/comparisons).")] = "ces",
    sigma: float | None = None, frisch: float | None = None,
    subsistence: Vector = None, elasticities: Vector = None,
    reference_income: float | None = None,
    normalise_shares: bool = False,
    digits: Annotated[int | None, Query(ge=0, le=15, description="Write numbers with this many "
                                        "decimals, fixed-point (default: shortest exact form).")] = None,
    on_error: Annotated[Literal["problem", "text"], Query(
        description="text: answer a bad request with 200 and an 'ERROR: ...' line, for "
                    "spreadsheets that hide error bodies.")] = "problem",
) -> dict[str, Any]:
    return dict(locals())


Params = Annotated[dict[str, Any], Depends(_params)]


@router.head("/comparison", include_in_schema=False)
@router.get("/comparison", operation_id="sheetComparison",
                  response_class=Response,
                  responses={200: {"content": {"text/csv": {}, "text/plain": {}},
                                   "description": "CSV: measure,value,compared_with,bias_points,"
                                   "bias_percent; with on_error=text a bad request is answered "
                                   "as text/plain 'ERROR: ...'"}})
@inline_when_small
def sheet_comparison(params: Params, settings: SettingsDep) -> Response:
    """The comparison as CSV: one row per measure (Konüs indices, formulas with their bias,
    compensation), for a spreadsheet's CSV-import function."""
    header = ["measure", "value", "compared_with", "bias_points", "bias_percent"]
    return _answer(params, settings,
                   lambda r: csv_text(header, _formatted(_rows(r), params["digits"])),
                   "text/csv; charset=utf-8")


@router.head("/value", include_in_schema=False)
@router.get("/value", operation_id="sheetValue",
                  response_class=PlainTextResponse,
                  responses={200: {"content": {"text/plain": {}}, "description": "One number."}})
@inline_when_small
def sheet_value(params: Params, settings: SettingsDep,
                measure: Measure = "konus_base") -> Response:
    """One number as text/plain, for a spreadsheet's web-fetch function."""
    return _answer(params, settings, lambda r: _number(_measure(r, measure), params["digits"]),
                   "text/plain; charset=utf-8")


@router.options("/comparison", include_in_schema=False)
@router.options("/value", include_in_schema=False)
def sheet_options() -> Response:
    return Response(status_code=204, headers={"allow": "GET, HEAD, OPTIONS"})


# -- the series, for a short panel -------------------------------------------------------------


def _series_rows(name: str, values: list[str] | None, n_periods: int) -> list[list[float]] | None:
    """One repeated query parameter per period, each a vector in item order."""
    if not values:
        return None
    if len(values) != n_periods:
        raise RequestProblem([FieldError(f"#/query/{name}", f"is given {len(values)} times but there "
                                         f"are {n_periods} periods; give it once per period, in "
                                         "the order of periods")])
    rows = []
    for t, text in enumerate(values):
        try:
            row = _vector(name, text)
        except RequestProblem as exc:
            raise RequestProblem([FieldError(e.pointer.replace(f"#/query/{name}/",
                                                               f"#/query/{name}/{t}/"), e.detail)
                                  for e in exc.errors]) from None
        assert row is not None
        rows.append(row)
    return rows


def _series_query_pointer(body_pointer: str) -> str:
    """``/prices/2/1`` becomes ``#/query/prices/2/1``; ``/model/sigma`` becomes ``#/query/sigma``."""
    if not body_pointer.startswith("/"):
        return body_pointer
    if body_pointer == "/model":
        return "#/query/family"
    return "#/query" + body_pointer.removeprefix("/model")


def _series_table(request: Request, settings: Any, digits: int | None, sigma: float | None) -> str:
    from ..schemas.series import SeriesRequest, csv_table, panel_from_json, run_series

    q = request.query_params
    items = [s.strip() for s in q.get("items", "").split(",") if s.strip()]
    periods = [s.strip() for s in q.get("periods", "").split(",") if s.strip()]
    body: dict[str, Any] = {"items": items, "periods": periods,
                            "prices": _series_rows("prices", q.getlist("prices"), len(periods)) or []}
    quantities = _series_rows("quantities", q.getlist("quantities"), len(periods))
    if quantities is not None:
        body["quantities"] = quantities
    for key in ("base_period", "reference_period"):
        if q.get(key):
            body[key] = q[key]
    if q.get("reference_value"):
        body["reference_value"] = int(q["reference_value"])
    if q.get("formulas"):
        body["formulas"] = [s.strip() for s in q["formulas"].split(",") if s.strip()]
    if q.get("family"):
        body["model"] = {"family": q["family"]}
        if sigma is not None:
            body["model"]["sigma"] = sigma
    try:
        series_request = SeriesRequest.model_validate(body)
    except ValidationError as exc:
        raise RequestProblem([
            FieldError(_series_query_pointer(_pointer(("body", *e["loc"]), body, e["type"])),
                       _pydantic_message(e)) for e in exc.errors()]) from None
    try:
        data = panel_from_json(series_request, max_periods=settings.max_periods,
                               max_items=settings.max_items, max_cells=settings.max_panel_cells)
        with computing("sheetSeries", settings):
            run = run_series(data, series_request, max_tree_depth=settings.max_tree_depth,
                             compute_deadline_seconds=settings.compute_deadline_seconds)
    except RequestProblem as exc:
        raise RequestProblem([FieldError(_series_query_pointer(e.pointer), e.detail)
                              for e in exc.errors], slug=exc.slug) from None
    header, rows = csv_table(run)
    return csv_text(header, _formatted(rows, digits))


@router.head("/series", include_in_schema=False)
@router.get("/series", operation_id="sheetSeries",
            response_class=Response,
            responses={200: {"content": {"text/csv": {}, "text/plain": {}},
                             "description": "CSV: one row per period, one column per series (as "
                             "POST /v1/index-series answers in CSV); with on_error=text a bad "
                             "request is answered as text/plain 'ERROR: ...'"}})
@inline_when_small
def sheet_series(
    request: Request,
    settings: SettingsDep,
    items: Annotated[str, Query(description="Item ids, comma-separated: the order of every row.")],
    periods: Annotated[str, Query(description="Period labels, comma-separated, in time order.")],
    prices: Annotated[list[str], Query(description="Repeated once per period, in period order: "
                                                   "that period's prices in item order.")],
    quantities: Annotated[list[str] | None, Query(description="Repeated once per period, like "
                                                               "prices (optional).")] = None,
    base_period: str | None = None,
    reference_period: str | None = None,
    reference_value: Annotated[int | None, Query(description="1 or 100 (default 100).")] = None,
    formulas: Annotated[str | None, Query(description="Comma-separated formula names.")] = None,
    family: Annotated[str | None, Query(description="A model for the Konüs series (ces, "
                                                    "cobb_douglas, translog, quadratic).")] = None,
    sigma: float | None = None,
    digits: Annotated[int | None, Query(ge=0, le=15)] = None,
    on_error: Literal["problem", "text"] = "problem",
) -> Response:
    """The index series of a short panel for a spreadsheet's CSV import: each period's prices
    (and quantities) as one repeated query parameter, e.g.
    `?items=rye_loaf,ferry_pass&periods=2025-01,2025-02&prices=2.40,38&prices=2.45,38`."""
    try:
        text = _series_table(request, settings, digits, sigma)
    except RequestProblem as exc:
        if on_error == "text":
            return PlainTextResponse(error_text(exc.errors))
        return problem_response(exc.slug, "; ".join(f"{e.pointer}: {e.detail}" for e in exc.errors),
                                errors=exc.errors)
    return Response(text, media_type="text/csv; charset=utf-8")


@router.options("/series", include_in_schema=False)
def sheet_series_options() -> Response:
    return Response(status_code=204, headers={"allow": "GET, HEAD, OPTIONS"})
