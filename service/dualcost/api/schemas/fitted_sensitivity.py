"""Request and answer of the sensitivity across fitted families (POST
/v1/fitted-sensitivity): plain models, no logic.

The data are those of POST /v1/fits (T observations of the same items); ``families`` lists the
families to fit to them, each as POST /v1/fits takes its ``model``; ``comparison`` and
``uncertainty`` are those of POST /v1/fitted-comparisons, the same for every family.
"""

from __future__ import annotations

from pydantic import Field, model_validator

from .common import (
    CAUTION,
    SHARE_UNIT_TEXT,
    FiniteFloat,
    ItemIn,
    NoticeOut,
    ProvenanceOut,
    ScaleOut,
    ShareUnit,
    StrictInt,
    StrictModel,
)
from .comparison import ComparisonOut
from .estimation import (
    FitComparisonIn,
    FitModelIn,
    FitOut,
    IntervalsOut,
    ObservationLabel,
    Row,
    UncertaintyIn,
)

#: The most families one request may fit (the service's max_fitted_families may be lower).
MAX_FAMILIES = 8


class FittedSensitivityRequest(StrictModel):
    """Budget data, the families to fit to them, and one price change compared under each."""

    items: list[ItemIn] = Field(min_length=2, description="The items, in a fixed order.")
    observations: list[ObservationLabel] | None = Field(
        None, description="A label per observation (default: 1, 2, ...).")
    prices: list[Row] = Field(min_length=1, description="One row of prices per observation.")
    shares: list[Row] | None = Field(None, description="Budget shares, one row per observation, "
                                     "each in [0, 1] and summing to 1 (with total_expenditure).")
    total_expenditure: list[FiniteFloat] | None = Field(
        None, description="Total expenditure of each observation (with shares).")
    expenditures: list[Row] | None = Field(
        None, description="Money spent on each item, one row per observation (instead of shares).")
    quantities: list[Row] | None = Field(
        None, description="Quantities bought, one row per observation (instead of shares).")
    weights: list[FiniteFloat] | None = Field(
        None, description="A survey weight per observation, above zero (default: all 1).")
    normalise_shares: bool = Field(
        False, description="Divide shares that do not sum to 1 by their sum; the answer says so.")
    share_unit: ShareUnit = Field("fraction", description=SHARE_UNIT_TEXT)
    families: list[FitModelIn] = Field(
        min_length=1, max_length=MAX_FAMILIES, description="The families to fit to the same "
        "data, each as POST /v1/fits takes its `model` (the band runs across them).")
    confidence_level: FiniteFloat = Field(0.95, gt=0.0, lt=1.0, description="Of every interval.")
    max_iterations: StrictInt = Field(200, ge=1, le=1000, description="Of each fit's iterated "
                                      "least squares.")
    comparison: FitComparisonIn
    uncertainty: UncertaintyIn = Field(default_factory=UncertaintyIn)

    @model_validator(mode="after")
    def _one_kind_of_spending(self) -> FittedSensitivityRequest:
        given = [k for k in ("shares", "expenditures", "quantities") if getattr(self, k) is not None]
        if len(given) != 1:
            raise ValueError("give the spending as exactly one of shares (with total_expenditure), "
                             f"expenditures or quantities; got {', '.join(given) or 'none'}")
        if (self.shares is None) != (self.total_expenditure is None):
            raise ValueError("total_expenditure goes with shares, and shares need it")
        return self


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
