"""POST /v1/index-series (JSON) and POST /v1/index-series/csv (CSV upload): index series over a
panel of periods, answered as JSON or, on request, as a CSV table with one row per period."""

from __future__ import annotations

from typing import Annotated, Any, Literal

from fastapi import APIRouter, Depends, Query, Request
from fastapi.responses import Response

from .. import workload
from ..deps import settings_of
from ..inputs.csv import CSV_REQUEST_BODY, csv_body
from ..inputs.panels import panel_from_csv, panel_from_json
from ..inputs.query import validated
from ..operations import series
from ..render import CSV_ANSWER, csv_response, json_response, negotiate
from ..routing import JsonRoute, inline_when_cheap
from ..schemas.series import SeriesOptions, SeriesRequest, SeriesResponse

router = APIRouter(route_class=JsonRoute, prefix="/v1", tags=["series"])

RESPONSES: dict[int | str, dict[str, Any]] = {
    200: {"description": "The series as JSON, or as a CSV table with one row per period when "
                         "asked (Accept: text/csv, or format=csv).", **CSV_ANSWER},
}
FormatParam = Annotated[Literal["json", "csv"] | None, Query(
    description="Answer format; default by the Accept header (JSON unless text/csv is "
                "preferred).")]

DESCRIPTION = """\
For every formula, the **fixed-base** series (direct comparisons with the base period) and the
**chained** series (period-to-period links multiplied), published on the index reference period
(1 or 100). With a `model`, calibrated to the base period's budget, the **Konüs** series: fixed
base at base-period utility (and at each period's own and the midpoint standard), and chained with
each link at its starting period's utility (or its end's, or the midpoint); then each formula's
**bias** per period, and the **average annual bias** in percentage points per year over a `span`,
with the frequency stated.

**Chain drift**: chained against direct per formula, and the circularity failure over a `loop`
of periods. **GEKS** on Fisher and on Törnqvist links (Gini 1931; Eltetö and Köves 1964; Szulc
1964) over the whole panel, and over a rolling window (default 13 months, 5 quarters or 2 years)
spliced onto the published series by `geks.splice` (Ivancic, Diewert and Fox 2011): `movement`
(default) `P_t = P_{t-1} G_W(t-1,t)`; `window` splices on the first period of the new window,
`half` on its middle period, `mean` on all overlapping periods (geometric mean).

**Items that come and go**: every comparison uses the items priced in both of its periods; each
formula's `rule_for_items_that_come_and_go` says what that amounts to, and `item_treatment` lists
every period and item left out of a comparison or valued otherwise by the model. The `feenstra`
series adds the CES new-goods adjustment (Feenstra 1994) with elasticity `new_goods_sigma` > 1.

**Lowe and Young** series take the basket or shares of a `weight_reference` period at or before the
base; `weights` gives the shares and their price-updated form (the form in which Young equals
Lowe).
"""
CSV_DESCRIPTION = (
    "The body is `text/csv` with columns `period`, `item`, `price` and, where known, "
    "`quantity` and/or `expenditure` (and an optional item `label`); one row per period "
    "and item, rows grouped by period in time order; an item not priced in a period has "
    "no row. Options are query parameters; `model` is a JSON object "
    '(`{"family": "ces", "sigma": 0.7}`), `formulas` and `loop` are comma-separated. '
    "Errors name the row and column (`#cell=row,column`, RFC 7111).\n\n")


def _answer(outcome: series.Outcome, request: Request, fmt: str | None) -> Response:
    if negotiate(request, fmt) == "csv":
        header, rows = series.table(outcome)
        return csv_response(header, rows, filename="index-series.csv")
    return json_response(series.document(outcome))


@router.post("/index-series", operation_id="indexSeries",
             summary="Index series over a panel: fixed-base, chained, Konüs, bias, drift, GEKS",
             description=DESCRIPTION, response_model=SeriesResponse, responses=RESPONSES)
@inline_when_cheap(workload.of_series)
def index_series(body: SeriesRequest, request: Request, format: FormatParam = None) -> Response:
    settings = settings_of(request)
    loc = series.locator()
    panel = panel_from_json(body.periods, body.items, {"prices": body.prices,
                            "quantities": body.quantities, "expenditures": body.expenditures},
                            series.limits(settings), loc)
    return _answer(series.run(body, panel, settings, loc), request, format)


@router.post("/index-series/csv", operation_id="indexSeriesFromCsv",
             summary="Index series from a CSV panel in long form (one row per period and item)",
             description=CSV_DESCRIPTION + DESCRIPTION, response_model=SeriesResponse,
             responses=RESPONSES, openapi_extra=CSV_REQUEST_BODY)
@inline_when_cheap(workload.of_series_csv)
def index_series_from_csv(
    text: Annotated[str, Depends(csv_body)],
    request: Request,
    base_period: Annotated[str | None, Query(description="Base (price-reference) period.")] = None,
    reference_period: Annotated[str | None, Query(description="Index reference period.")] = None,
    reference_value: Annotated[int | None, Query(description="1 or 100 (default 100).")] = None,
    frequency: Annotated[Literal["monthly", "quarterly", "annual"] | None, Query()] = None,
    formulas: Annotated[str | None, Query(description="Comma-separated formula names.")] = None,
    model: Annotated[str | None, Query(description="The preference model as a JSON object.")] = None,
    lloyd_moulton_sigma: Annotated[float | None, Query(allow_inf_nan=False)] = None,
    new_goods_sigma: Annotated[float | None, Query(allow_inf_nan=False)] = None,
    weight_reference_period: Annotated[str | None, Query()] = None,
    geks_window: Annotated[int | None, Query(ge=2)] = None,
    geks_splice: Annotated[Literal["movement", "window", "half", "mean"] | None, Query()] = None,
    span_start: Annotated[str | None, Query()] = None,
    span_end: Annotated[str | None, Query()] = None,
    loop: Annotated[str | None, Query(description="Comma-separated period labels.")] = None,
    format: FormatParam = None,
) -> Response:
    query = dict(locals())
    settings = settings_of(request)
    loc = series.locator("csv")
    options = validated(SeriesOptions, series.options_body(query), loc)
    panel = panel_from_csv(text, series.limits(settings), loc)
    return _answer(series.run(options, panel, settings, loc, "indexSeriesFromCsv"), request,
                   format)
