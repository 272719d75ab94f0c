"""POST /v1/comparisons: the Konüs index beside the formula indices for one price change."""

from __future__ import annotations

from typing import Annotated, Any, Literal

from fastapi import APIRouter, Request
from fastapi.responses import Response

from .. import workload
from ..deps import settings_of
from ..operations import compare
from ..operations.answers import SCALE_RATIO, scale_headers
from ..provenance import of_body
from ..render import CSV_ANSWER, Format, ProvenanceQuery, csv_response, format_query, json_response, negotiate
from ..routing import JsonRoute, inline_when_cheap
from ..schemas.comparison import ComparisonRequest, ComparisonResponse

router = APIRouter(route_class=JsonRoute, prefix="/v1", tags=["comparisons"])

OFFERS: tuple[Format, ...] = ("json", "csv")
RESPONSES: dict[int | str, dict[str, Any]] = {
    200: {"description": "The comparison as JSON; or, asked for (Accept: text/csv, or "
                         "format=csv), as a CSV table with one row per measure: "
                         "measure,value,compared_with,bias_points,bias_percent.", **CSV_ANSWER},
}


@router.post(
    "/comparisons",
    operation_id="compare",
    summary="Compare two price situations: Konüs index, formula indices, bias, compensation",
    response_model=ComparisonResponse,
    responses=RESPONSES,
)
@inline_when_cheap(workload.of_comparison)
def compare_prices(body: ComparisonRequest, request: Request,
                   format: Annotated[Literal["json", "csv"] | None, format_query(OFFERS)] = None,
                   provenance: ProvenanceQuery = "headers") -> Response:
    """Calibrate the chosen preference model to the base budget, evaluate its expenditure
    function at base and current prices, and set the true (Konüs) cost-of-living index beside
    the formula indices, with each formula's substitution bias, the compensating and
    equivalent variation, the Hicks decomposition of demand changes and each item's
    contribution to the Laspeyres gap. As CSV: one row per measure (the Konüs indices, each
    formula with its bias, the compensation), as GET /v1/sheet/comparison answers."""
    fmt = negotiate(request, OFFERS, format)
    outcome = compare.run(body, settings_of(request))
    if fmt == "csv":
        header, rows = compare.table(outcome)
        return csv_response(header, rows, provenance=of_body(body),
                            trailer=provenance == "trailer", filename="comparison.csv",
                            headers=scale_headers(SCALE_RATIO))
    return json_response(compare.document(outcome, rows_as_text=True), provenance=of_body(body))
