"""Published index numbers against a recomputation from their panel: POST /v1/audits and the
``dualcost check`` command (in process) both run it."""

from __future__ import annotations

from collections.abc import Mapping
from typing import Any

from pydantic import ValidationError

from ...config import Settings
from ...core.audit import Audit, PublishedValue, audit_series
from ..inputs.locator import Locator, Place
from ..inputs.panels import panel_from_json
from ..observability import computing
from ..problems import RequestProblem, field_errors
from ..provenance import of_body
from ..schemas.audit import AuditRequest
from ..schemas.common import CAUTION
from . import series
from .answers import notices_json

PLACES: dict[str, Place] = series.PLACES | {
    "tolerance": Place("/tolerance"),
    "published": Place("/published", shape="list"),
}
TOLERANCE_RULE = ("A published value passes when |published - recomputed| <= tolerance; without a "
                  "tolerance, half a unit in the last decimal place it was published with "
                  "(plus 1e-9).")


def run(request: AuditRequest, settings: Settings) -> Audit:
    """Recompute the series the published values belong to, then compare them one by one."""
    loc = Locator(PLACES)
    if request.revealed_bounds:  # the audit's answer has no place for them
        raise loc.problem("revealed_bounds", "is not part of an audit: ask POST "
                          "/v1/index-series or POST /v1/revealed-preference for the bounds")
    if request.band_models is not None:  # nor for the band
        raise RequestProblem.at("/band_models", "is not part of an audit: ask POST "
                                "/v1/index-series for the band across models")
    if request.tolerance is None:  # each value's tolerance comes from its decimals
        loc.add("tolerance", PLACES["published"])
    panel = panel_from_json(request.periods, request.items, {
        "prices": request.prices, "quantities": request.quantities,
        "expenditures": request.expenditures}, series.limits(settings), loc)
    values = [PublishedValue(p.formula, p.series, str(p.period), p.value, p.decimals)
              for p in request.published]
    arguments = series.core_arguments(request, panel, settings, loc)
    with computing("auditPublishedSeries", settings), loc.translating():
        return audit_series(values, tolerance=request.tolerance, **arguments)


def document(result: Audit, request: AuditRequest | None = None) -> dict[str, Any]:
    """The answer as plain values, in the shape of ``AuditResponse``; the request's items name
    the items of the model's reasons."""
    ids: list[str] = []
    labels: list[str | None] = []
    for it in (request.items if request is not None else []):
        ids.append(it if isinstance(it, str) else it.id)
        labels.append(None if isinstance(it, str) else it.label)
    def finite(x: float) -> float | None:
        return x if x == x and abs(x) != float("inf") else None

    return {
        "passed": result.passed, "checked": len(result.rows), "failed": len(result.failures),
        "rows": [{"formula": r.formula, "series": r.series, "period": r.period,
                  "published": r.published, "recomputed": finite(r.recomputed),
                  "difference": finite(r.difference), "tolerance": r.tolerance,
                  "passed": r.passed} for r in result.rows],
        "model_validity": None if result.model_family is None else {
            "family": result.model_family,
            "state": "outside_regular_region" if result.model_outside_regular_region
            else "regular",
            "periods_outside_regular_region": [
                {"period": period, "reasons": notices_json(v.reasons, ids, labels)}
                for period, v in result.model_outside_regular_region],
        },
        "tolerance_rule": TOLERANCE_RULE, "caution": CAUTION,
    }


#: The columns of an audit as a CSV table: one row per published value.
TABLE_COLUMNS = ("formula", "series", "period", "published", "recomputed", "difference",
                 "tolerance", "passed")


def table(result: Audit) -> tuple[tuple[str, ...], list[list[Any]]]:
    """The audit as one CSV table: the header, then one row per published value (recomputed
    and difference empty where the value could not be recomputed)."""
    rows = document(result)["rows"]
    return TABLE_COLUMNS, [[r[c] for c in TABLE_COLUMNS] for r in rows]


def audit_json(body: Mapping[str, Any], settings: Settings) -> dict[str, Any]:
    """The whole audit for a body held in memory, as the service answers it: the body is
    validated as POST /v1/audits validates it (the answer has its ``provenance`` too), and
    every broken rule is raised as a
    :class:`~dualcost.api.problems.RequestProblem` whose errors point into ``body``. This is the
    door for ``dualcost check`` in process."""
    try:
        request = AuditRequest.model_validate(body)
    except ValidationError as exc:
        raise RequestProblem(field_errors(exc.errors(), body, prefix=("body",))) from None
    return document(run(request, settings), request) | {"provenance": of_body(request).json()}
