"""Request and answer of the sensitivity across fitted families (POST
/v1/fitted-sensitivity): plain models, no logic.

The data are those of POST /v1/fits (T observations of the same items); ``families`` lists the
families to fit to them, each as POST /v1/fits takes its ``model``; ``comparison`` and
``uncertainty`` are those of POST /v1/fitted-comparisons, the same for every family.
"""

from __future__ import annotations

from pydantic import Field

from .common import (
    CAUTION,
    FiniteFloat,
    NoticeOut,
    ProvenanceOut,
    ScaleOut,
    StrictInt,
    StrictModel,
)
from .comparison import ComparisonOut
from .estimation import (
    BudgetData,
    FitComparisonIn,
    FitModelIn,
    FitOut,
    IntervalsOut,
    UncertaintyIn,
)

#: The most families one request may fit (the service's max_fitted_families may be lower).
MAX_FAMILIES = 8


class FittedSensitivityRequest(BudgetData):
    """Budget data, the families to fit to them, and one price change compared under each."""

    families: list[FitModelIn] = Field(
        min_length=1, max_length=MAX_FAMILIES, description="The families to fit to the same "
        "data, each as POST /v1/fits takes its `model` (the band runs across them).")
    confidence_level: FiniteFloat = Field(0.95, gt=0.0, lt=1.0, description="Of every interval.")
    max_iterations: StrictInt = Field(200, ge=1, le=1000, description="Of each fit's iterated "
                                      "least squares.")
    comparison: FitComparisonIn
    uncertainty: UncertaintyIn = Field(default_factory=UncertaintyIn)


class FittedFamilyOut(StrictModel):
    """One family of the request, fitted and compared: what POST /v1/fitted-comparisons answers
    for it (without residuals)."""

    fit: FitOut
    comparison: ComparisonOut
    intervals: IntervalsOut


class FamilyIntervalOut(StrictModel):
    """One fitted family's interval of a measure, beside the band."""

    family: int = Field(description="The family's position in `families` (from 0).")
    estimate: float | None = Field(description="Null outside the model's regular region.")
    low: float | None
    high: float | None


class BandMeasureOut(StrictModel):
    measure: str = Field(description="konus_base, konus_current, konus_midpoint or "
                                     "<formula>_bias_points.")
    low: float | None = Field(description="The least value across the fitted families.")
    high: float | None = Field(description="The greatest value across the fitted families.")
    count: int = Field(description="The families the band is over.")
    left_out: int = Field(description="Families left out: the fitted model outside its "
                                      "regular region at these prices.")
    intervals: list[FamilyIntervalOut] = Field(
        description="Beside the band: each family's interval of the measure (the bootstrap of "
                    "its fit, as in `families[j].intervals`).")


class FittedSensitivityResponse(StrictModel):
    items: list[str]
    scale: ScaleOut
    families: list[FittedFamilyOut]
    band: list[BandMeasureOut] = Field(description="Across the fitted families.")
    notices: list[NoticeOut]
    caution: str
    provenance: ProvenanceOut


__all__ = ["CAUTION", "MAX_FAMILIES", "FittedSensitivityRequest", "FittedSensitivityResponse"]
