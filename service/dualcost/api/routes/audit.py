"""POST /v1/audits: check published index numbers against a recomputation from their panel."""

from __future__ import annotations

from typing import Annotated, Any, Literal

from fastapi import APIRouter, Request
from fastapi.responses import Response

from .. import workload
from ..deps import settings_of
from ..operations import audit
from ..provenance import of_body
from ..render import CSV_ANSWER, Format, ProvenanceQuery, csv_response, format_query, json_response, negotiate
from ..routing import JsonRoute, inline_when_cheap
from ..schemas.audit import AuditRequest, AuditResponse

router = APIRouter(route_class=JsonRoute, prefix="/v1", tags=["audits"])

OFFERS: tuple[Format, ...] = ("json", "csv")
RESPONSES: dict[int | str, dict[str, Any]] = {
    200: {"description": "The audit as JSON; or, asked for (Accept: text/csv, or format=csv), "
                         "as a CSV table with one row per published value: "
                         + ",".join(audit.TABLE_COLUMNS) + ".", **CSV_ANSWER},
}


@router.post("/audits", operation_id="auditPublishedSeries", response_model=AuditResponse,
             summary="Recompute published index numbers from their panel and compare",
             responses=RESPONSES)
@inline_when_cheap(workload.of_series)
def audit_published(body: AuditRequest, request: Request,
                    format: Annotated[Literal["json", "csv"] | None, format_query(OFFERS)] = None,
                    provenance: ProvenanceQuery = "headers") -> Response:
    """The panel (prices with quantities or expenditures, as for POST /v1/index-series, with
    the same options: base period, reference value 1 or 100...) and the published values,
    each a formula, a series (fixed_base or chained), a period and a value. Every value is
    recomputed and passes when within its tolerance; `passed` is true when all do. The same
    check runs from the command line as `dualcost check`. As CSV: one row per published
    value."""
    fmt = negotiate(request, OFFERS, format)
    result = audit.run(body, settings_of(request))
    if fmt == "csv":
        header, rows = audit.table(result)
        return csv_response(header, rows, provenance=of_body(body),
                            trailer=provenance == "trailer", filename="audit.csv")
    return json_response(audit.document(result, body), provenance=of_body(body))
