"""POST /v1/comparisons: the Konüs index beside the formula indices for one price change."""

from __future__ import annotations

from fastapi import APIRouter, Request
from fastapi.responses import Response

from .. import workload
from ..deps import settings_of
from ..operations import compare
from ..render import json_response
from ..routing import JsonRoute, inline_when_cheap
from ..schemas.comparison import ComparisonRequest, ComparisonResponse

router = APIRouter(route_class=JsonRoute, prefix="/v1", tags=["comparisons"])


@router.post(
    "/comparisons",
    operation_id="compare",
    summary="Compare two price situations: Konüs index, formula indices, bias, compensation",
    response_model=ComparisonResponse,
)
@inline_when_cheap(workload.of_comparison)
def compare_prices(body: ComparisonRequest, request: Request) -> Response:
    """Calibrate the chosen preference model to the base budget, evaluate its expenditure
    function at base and current prices, and set the true (Konüs) cost-of-living index beside
    the formula indices, with each formula's substitution bias, the compensating and
    equivalent variation, the Hicks decomposition of demand changes and each item's
    contribution to the Laspeyres gap."""
    outcome = compare.run(body, settings_of(request))
    return json_response(compare.document(outcome))
