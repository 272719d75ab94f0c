"""POST /v1/audits: check published index numbers against a recomputation from their panel."""

from __future__ import annotations

from fastapi import APIRouter, Request
from fastapi.responses import Response

from .. import workload
from ..deps import settings_of
from ..operations import audit
from ..render import json_response
from ..routing import JsonRoute, inline_when_cheap
from ..schemas.audit import AuditRequest, AuditResponse

router = APIRouter(route_class=JsonRoute, prefix="/v1", tags=["audits"])


@router.post("/audits", operation_id="auditPublishedSeries", response_model=AuditResponse,
             summary="Recompute published index numbers from their panel and compare")
@inline_when_cheap(workload.of_series)
def audit_published(body: AuditRequest, request: Request) -> Response:
    """The panel (prices with quantities or expenditures, as for POST /v1/index-series, with
    the same options: base period, reference value 1 or 100...) and the published values,
    each a formula, a series (fixed_base or chained), a period and a value. Every value is
    recomputed and passes when within its tolerance; `passed` is true when all do. The same
    check runs from the command line as `dualcost check`."""
    return json_response(audit.document(audit.run(body, settings_of(request))))
