"""POST /v1/index-series (JSON) and POST /v1/index-series/csv (CSV upload): index series over a
panel of periods, answered as JSON or, on request, as a CSV table with one row per period."""

from __future__ import annotations

from typing import Annotated, Any, Literal

from fastapi import APIRouter, Depends, Query, Request
from fastapi.responses import Response
from pydantic import BeforeValidator

from .. import workload
from ..deps import settings_of
from ..inputs.csv import DecimalParam, DeclaredDialect, SeparatorParam
from ..inputs.json_text import in_float_range
from ..inputs.panels import panel_from_csv, panel_from_json, panel_from_parquet
from ..inputs.query import validated
from ..inputs.uploads import TABLE_REQUEST_BODY, TableUpload, table_upload
from ..operations import series
from ..operations.answers import scale_headers
from ..provenance import Provenance, UploadSha256, of_body, of_upload, query_of
from ..render import (
    PARQUET_ANSWER,
    Format,
    ProvenanceQuery,
    csv_response,
    format_query,
    json_response,
    negotiate,
    parquet_response,
)
from ..routing import JsonRoute, inline_when_cheap
from ..schemas.series import DETAIL_TEXT, Detail, SeriesOptions, SeriesRequest, SeriesResponse

router = APIRouter(route_class=JsonRoute, prefix="/v1", tags=["series"])

RESPONSES: dict[int | str, dict[str, Any]] = {
    200: {"description": "The series as JSON, or as a table with one row per period when "
                         "asked: CSV (Accept: text/csv, or format=csv) or Parquet (Accept: "
                         "application/vnd.apache.parquet, or format=parquet).", **PARQUET_ANSWER},
}
OFFERS: tuple[Format, ...] = ("json", "csv", "parquet")
FormatParam = Annotated[Literal["json", "csv", "parquet"] | None, format_query(OFFERS)]

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

**Change measures** of every series (`changes`; in CSV, columns per series): period-on-period,
12-month (the same period a year earlier, for monthly, quarterly or annual data), the annual
average of each calendar year covered in full and its change over the previous year, and the
levels rebased to any period or year (`rebase`). A measure that needs a period the series lacks
is null, and `empty` says where and why.

**Headline only**: `detail: "headline"` (in the CSV form, `detail=headline`) leaves out the rows
per item (`item_treatment`, `weights.items`; in CSV the `items_*` columns), for a caller who
wants the series alone: the figures, flags and notices are those of the full answer, and the
answer's `detail` and `left_out` (in CSV, the headers `Dualcost-Detail` and `Dualcost-Left-Out`)
say what was left out.
"""
CSV_DESCRIPTION = (
    "The body is `text/csv` with columns `period`, `item`, `price` and, where known, "
    "`quantity` and/or `expenditure` (and an optional item `label`); one row per period "
    "and item, rows grouped by period in time order; an item not priced in a period has "
    "no row. Options are query parameters; `model` is a JSON object "
    '(`{"family": "ces", "sigma": 0.7}`), `formulas` and `loop` are comma-separated. '
    "Fields may be quoted (RFC 4180); fields separated by `,`, `;` or a tab and numbers with "
    "`.` or `,` as decimal mark, declared by `separator` and `decimal` or detected (stated in "
    "`notices`, code `csv_dialect_detected`); no grouping of thousands. "
    "Errors name the row and column (`#cell=row,column`, RFC 7111).\n\n"
    "The same columns may come as a Parquet file (Content-Type "
    "`application/vnd.apache.parquet`), found by name: `price`, `quantity` and `expenditure` "
    "hold numbers (integers, floats or decimals), `period`, `item` and `label` text (or "
    "integers, dates); a null `quantity` or `expenditure` is an empty cell. Errors name the "
    "column (`#column=price`) or the cell (`#row=3&column=price`, rows from 1), or the byte "
    "where a file that cannot be read breaks.\n\n")


def _answer(outcome: series.Outcome, fmt: str, provenance: Provenance, place: str) -> Response:
    if fmt in ("csv", "parquet"):
        dialect = outcome.dialect
        headers = (scale_headers(series.scale(outcome)) | series.revealed_headers(outcome)
                   | series.detail_headers(outcome))
        if dialect is not None:
            headers |= dialect.headers()
        if fmt == "parquet":
            header, rows = series.table(outcome)
            return parquet_response(header, rows, provenance=provenance,
                                    filename="index-series.parquet", headers=headers)
        header, columns = series.csv_table(outcome)
        return csv_response(header, columns, provenance=provenance, trailer=place == "trailer",
                            filename="index-series.csv", headers=headers)
    return json_response(series.document(outcome), provenance=provenance)


@router.post("/index-series", operation_id="indexSeries",
             summary="Index series over a panel: fixed-base, chained, Konüs, bias, drift, GEKS",
             description=DESCRIPTION, response_model=SeriesResponse, responses=RESPONSES)
@inline_when_cheap(workload.of_series)
def index_series(body: SeriesRequest, request: Request, format: FormatParam = None,
                 provenance: ProvenanceQuery = "headers") -> Response:
    fmt = negotiate(request, OFFERS, format)
    settings = settings_of(request)
    loc = series.locator()
    panel = panel_from_json(body.periods, body.items, {"prices": body.prices,
                            "quantities": body.quantities, "expenditures": body.expenditures},
                            series.limits(settings), loc)
    return _answer(series.run(body, panel, settings, loc), fmt, of_body(body), provenance)


@router.post("/index-series/csv", operation_id="indexSeriesFromCsv",
             summary="Index series from a CSV (or Parquet) panel in long form (one row per "
                     "period and item)",
             description=CSV_DESCRIPTION + DESCRIPTION, response_model=SeriesResponse,
             responses=RESPONSES, openapi_extra=TABLE_REQUEST_BODY)
@inline_when_cheap(workload.of_series_csv)
def index_series_from_csv(
    upload: Annotated[TableUpload, Depends(table_upload)],
    csv_sha256: UploadSha256,
    request: Request,
    base_period: Annotated[str | None, Query(description="Base (price-reference) period.")] = None,
    reference_period: Annotated[str | None, Query(description="Index reference period.")] = None,
    reference_value: Annotated[int | None, Query(description="1 or 100 (default 100).")] = None,
    frequency: Annotated[Literal["monthly", "quarterly", "annual"] | None, Query()] = None,
    formulas: Annotated[str | None, Query(description="Comma-separated formula names.")] = None,
    model: Annotated[str | None, Query(description="The preference model as a JSON object.")] = None,
    lloyd_moulton_sigma: Annotated[float | None, BeforeValidator(in_float_range),
                                   Query(allow_inf_nan=False)] = None,
    new_goods_sigma: Annotated[float | None, BeforeValidator(in_float_range),
                               Query(allow_inf_nan=False)] = None,
    weight_reference_period: Annotated[str | None, Query()] = None,
    geks_window: Annotated[int | None, Query(ge=2)] = None,
    geks_splice: Annotated[Literal["movement", "window", "half", "mean"] | None, Query()] = None,
    span_start: Annotated[str | None, Query()] = None,
    span_end: Annotated[str | None, Query()] = None,
    loop: Annotated[str | None, Query(description="Comma-separated period labels.")] = None,
    rebase_period: Annotated[str | None, Query(description="Rebase every series to this "
                                                           "period (the changes' rebased "
                                                           "levels).")] = None,
    rebase_year: Annotated[int | None, Query(ge=1, le=9999, description="Rebase every series "
                                             "to this calendar year's average.")] = None,
    detail: Annotated[Detail | None, Query(description=DETAIL_TEXT)] = None,
    separator: SeparatorParam = None,
    decimal: DecimalParam = None,
    format: FormatParam = None,
    provenance: ProvenanceQuery = "headers",
) -> Response:
    query = dict(locals())
    fmt = negotiate(request, OFFERS, format)
    settings = settings_of(request)
    loc = series.locator("csv")
    options = validated(SeriesOptions, series.options_body(query), loc)
    declared = upload.dialect(DeclaredDialect(separator, decimal))
    panel = (panel_from_parquet(upload.data, series.limits(settings), loc)
             if upload.data is not None else
             panel_from_csv(upload.text or "", series.limits(settings), loc, declared))
    origin = of_upload(csv_sha256, query_of(request.query_params.multi_items(), query))
    return _answer(series.run(options, panel, settings, loc, "indexSeriesFromCsv"), fmt, origin,
                   provenance)
