"""Request and answer of the audit (POST /v1/audits): plain models, no logic."""

from __future__ import annotations

from typing import Literal

from pydantic import Field

from .common import FiniteFloat, StrictInt, StrictModel
from .series import PeriodLabel, SeriesFormula, SeriesRequest


class PublishedIn(StrictModel):
    formula: SeriesFormula  # type: ignore[valid-type]
    series: Literal["fixed_base", "chained"] = "fixed_base"
    period: PeriodLabel
    value: FiniteFloat
    decimals: StrictInt | None = Field(None, ge=0, le=15, description="Decimal places it was published "
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
