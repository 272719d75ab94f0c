"""POST /v1/audits: check published index numbers against a recomputation from their panel."""

# No ``from __future__ import annotations``: the body's annotation carries the examples loaded
# when the router is built (see routes/comparisons.py).

from typing import Annotated

from fastapi import APIRouter, Body

from ...config import Settings
from ..examples import load_examples
from ..observability import computing
from ..routing import JsonRoute, inline_when_small
from ..schemas.audit import AuditRequest, AuditResponse, run_audit


def router(settings: Settings) -> APIRouter:
    r = APIRouter(route_class=JsonRoute, prefix="/v1", tags=["audits"])
    examples = load_examples(settings.examples_dir, "auditPublishedSeries")

    @r.post("/audits", operation_id="auditPublishedSeries", response_model=AuditResponse,
            summary="Recompute published index numbers from their panel and compare")
    @inline_when_small
    def audit_published(
        request: Annotated[AuditRequest, Body(openapi_examples=examples)],  # type: ignore[arg-type]
    ) -> AuditResponse:
        """The panel (prices with quantities or expenditures, as for POST /v1/index-series, with
        the same options: base period, reference value 1 or 100...) and the published values,
        each a formula, a series (fixed_base or chained), a period and a value. Every value is
        recomputed and passes when within its tolerance; `passed` is true when all do. The same
        check runs from the command line as `dualcost check`."""
        with computing("auditPublishedSeries", settings):
            return run_audit(request, settings)

    return r
