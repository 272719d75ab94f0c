"""Request and answer of the audit (POST /v1/audits): plain models, no logic."""

from __future__ import annotations

from typing import Literal

from pydantic import Field

from .common import FiniteFloat, ProvenanceOut, StrictInt, StrictModel
from .series import PeriodLabel, PeriodValidityOut, SeriesFormula, SeriesRequest


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


class ModelValidityOut(StrictModel):
    family: str
    state: Literal["regular", "outside_regular_region"]
    periods_outside_regular_region: list[PeriodValidityOut]


class AuditResponse(StrictModel):
    passed: bool
    checked: int
    failed: int
    rows: list[AuditRowOut]
    model_validity: ModelValidityOut | None = Field(
        description="With a model: whether it is regular in every period. Outside its regular "
                    "region its demands (the quantities of prices-only periods) are not "
                    "reliable weights, so values recomputed with them are not either.")
    tolerance_rule: str
    caution: str
    provenance: ProvenanceOut
