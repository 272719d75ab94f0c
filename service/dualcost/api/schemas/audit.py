"""Request and response of the audit operation (POST /v1/audits): published index numbers
recomputed from the panel they were computed from."""

from __future__ import annotations

from typing import Any, Literal

from pydantic import Field

from ...core.audit import Audit, PublishedValue, audit
from ...core.errors import InvalidInput
from ..problems import FieldError, RequestProblem
from .common import FiniteFloat, StrictModel
from .comparison import CAUTION
from .series import PeriodLabel, SeriesFormula, SeriesRequest, panel_from_json, run_series

TOLERANCE_RULE = ("A published value passes when |published - recomputed| <= tolerance; without a "
                  "tolerance, half a unit in the last decimal place it was published with "
                  "(plus 1e-9).")


class PublishedIn(StrictModel):
    formula: SeriesFormula  # type: ignore[valid-type]
    series: Literal["fixed_base", "chained"] = "fixed_base"
    period: PeriodLabel
    value: FiniteFloat
    decimals: int | None = Field(None, ge=0, le=15, description="Decimal places it was published "
                                 "with (sets its tolerance when `tolerance` is not given).")


class AuditRequest(SeriesRequest):
    """A panel with the series options it was published under, and the published values."""

    published: list[PublishedIn] = Field(min_length=1, description="The values to check.")
    tolerance: FiniteFloat | None = Field(None, ge=0, description="Absolute tolerance, in the units "
                                          "published (default: from each value's decimals).")


class AuditRowOut(StrictModel):
    formula: str
    series: str
    period: str
    published: float
    recomputed: float | None
    difference: float | None
    tolerance: float
    passed: bool


class AuditResponse(StrictModel):
    passed: bool
    checked: int
    failed: int
    rows: list[AuditRowOut]
    tolerance_rule: str
    caution: str

    @classmethod
    def from_audit(cls, result: Audit) -> AuditResponse:
        def finite(x: float) -> float | None:
            return x if x == x and abs(x) != float("inf") else None

        return cls(
            passed=result.passed, checked=len(result.rows), failed=len(result.failures),
            rows=[AuditRowOut(formula=r.formula, series=r.series, period=r.period,
                              published=r.published, recomputed=finite(r.recomputed),
                              difference=finite(r.difference), tolerance=r.tolerance,
                              passed=r.passed) for r in result.rows],
            tolerance_rule=TOLERANCE_RULE, caution=CAUTION)


def run_audit(req: AuditRequest, settings: Any) -> AuditResponse:
    """Recompute the series the published values belong to, then compare them one by one."""
    needed = list(dict.fromkeys(p.formula for p in req.published))
    options = req.model_copy(update={"formulas": needed})
    data = panel_from_json(options, max_periods=settings.max_periods, max_items=settings.max_items,
                           max_cells=settings.max_panel_cells)
    run = run_series(data, options, max_tree_depth=settings.max_tree_depth,
                     compute_deadline_seconds=settings.compute_deadline_seconds)
    series = run.result.formulas
    recomputed = {}
    for name, s in series.items():
        recomputed[(name, "fixed_base")] = s.fixed_base
        recomputed[(name, "chained")] = s.chained
    values = [PublishedValue(p.formula, p.series, str(p.period), p.value, p.decimals)
              for p in req.published]
    try:
        result = audit(values, recomputed, run.result.periods, tolerance=req.tolerance)
    except InvalidInput as exc:
        pointer = "/tolerance" if exc.parameter == "tolerance" else f"/published/{exc.index}"
        if exc.parameter == "tolerance" and req.tolerance is None:
            pointer = "/published"
        raise RequestProblem([FieldError(pointer, exc.rule)]) from exc
    return AuditResponse.from_audit(result)
