"""Requests and answers of the estimation operations: POST /v1/fits (JSON), POST /v1/fits/csv
and POST /v1/fitted-comparisons: plain models, no logic.

The data are T observations (households, periods, or households in periods) of the same n items:
one row per observation of ``prices``, and one of ``shares`` (with ``total_expenditure`` per
observation), ``expenditures`` (money spent on each item) or ``quantities``; ``weights`` per
observation (survey weights) are optional. Rows are objects keyed by item id or lists in the
order of ``items``.
"""

from __future__ import annotations

from typing import Annotated, Any, Literal

from pydantic import Field, model_validator
from typing_extensions import Self

from .common import (
    SHARE_UNIT_TEXT,
    FiniteFloat,
    ItemIn,
    NoticeOut,
    ProvenanceOut,
    ShareUnit,
    StrictInt,
    StrictModel,
    VectorIn,
)
from .comparison import ComparisonOut, CurrentIn, FormulaName, WeightReferenceIn

FittedFamily = Literal["ces", "nested_ces", "stone_geary", "aids", "quaids"]
Estimator = Literal["nonlinear", "linear_approximate"]
Restrictions = Literal["none", "homogeneity", "symmetry"]
Row = Annotated[list[FiniteFloat] | dict[str, FiniteFloat], Field(
    union_mode="left_to_right",  # the forms cannot be confused (see VectorIn)
    description="One observation: an object keyed by item id, or a list in the order of `items`.")]
ObservationLabel = Annotated[str | int, Field(description="A household id, a period, or both.")]
# -- requests ---------------------------------------------------------------------------------


class FitModelIn(StrictModel):
    """The family to fit, and how (see the operation's description for the estimators)."""

    family: FittedFamily = Field(description="ces, nested_ces, stone_geary (the linear "
                                 "expenditure system), aids or quaids.")
    estimator: Estimator | None = Field(
        None, description="aids only: nonlinear (default; iterated nonlinear least squares) or "
                          "linear_approximate (Stone's price index, linear least squares).")
    restrictions: Restrictions | None = Field(
        None, description="aids and quaids: none, homogeneity, or symmetry (default; implies "
                          "homogeneity). Adding-up is always imposed. A comparison needs symmetry.")
    quadratic: bool = Field(False, description="aids: add the quadratic expenditure term (QUAIDS).")
    price_terms: bool | None = Field(
        None, description="aids and quaids: false fixes every gamma at 0 (Engel curves only, for "
                          "a cross-section at one set of prices).")
    alpha0: FiniteFloat | None = Field(
        None, description="aids and quaids: the constant of ln a(p), fixed, not estimated "
                          "(default 0).")
    tree: dict[str, Any] | None = Field(
        None, description="nested_ces: the grouping, a group with an optional name and children "
                          "(item ids or groups); no sigma (it is what the fit estimates).")


class PointIn(StrictModel):
    """Where the elasticities are evaluated."""

    prices: VectorIn
    expenditure: FiniteFloat = Field(description="Total expenditure m.")


class BudgetData(StrictModel):
    """Budget data of T observations of the same items: prices, and the spending as exactly
    one of shares (with total expenditure), expenditures or quantities (POST /v1/fits and POST
    /v1/fitted-sensitivity)."""

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

    @model_validator(mode="after")
    def _one_kind_of_spending(self) -> Self:
        given = [k for k in ("shares", "expenditures", "quantities") if getattr(self, k) is not None]
        if len(given) != 1:
            raise ValueError("give the spending as exactly one of shares (with total_expenditure), "
                             f"expenditures or quantities; got {', '.join(given) or 'none'}")
        if (self.shares is None) != (self.total_expenditure is None):
            raise ValueError("total_expenditure goes with shares, and shares need it")
        return self


class FitRequest(BudgetData):
    """Budget data of T observations and the model to fit."""

    share_unit: ShareUnit = Field(
        "fraction", description=SHARE_UNIT_TEXT + " It applies to shares (and, in a fitted "
        "comparison, to comparison.base.shares and comparison.weight_reference.shares).")
    model: FitModelIn
    confidence_level: FiniteFloat = Field(0.95, gt=0.0, lt=1.0, description="Of every interval.")
    elasticities_at: PointIn | None = Field(
        None, description="Where to evaluate elasticities (default: the sample's weighted "
                          "geometric mean prices and total expenditure).")
    max_iterations: StrictInt = Field(200, ge=1, le=1000, description="Of the iterated least squares.")
    residuals: bool = Field(True, description="Include each observation's fitted shares and "
                            "residuals.")

class FitBaseIn(StrictModel):
    """Base-period prices and total expenditure; the bundle, as quantities or shares, is optional:
    without it the base bundle is the fitted model's demand at these prices and expenditure, so
    that calibrating the family keeps the fitted parameters."""

    prices: VectorIn
    expenditure: FiniteFloat | None = Field(None, description="Total base expenditure m0 "
                                            "(required unless quantities are given).")
    quantities: VectorIn | None = None
    shares: VectorIn | None = None

    @model_validator(mode="after")
    def _bundle(self) -> FitBaseIn:
        if self.quantities is not None and self.shares is not None:
            raise ValueError("give the base bundle as quantities or as shares, not both")
        if self.quantities is None and self.expenditure is None:
            raise ValueError("give the base total expenditure (expenditure)")
        return self


class FitComparisonIn(StrictModel):
    """The price change to evaluate under the fitted model (as in POST /v1/comparisons)."""

    base: FitBaseIn
    current: CurrentIn
    reference_income: FiniteFloat | None = None
    weight_reference: WeightReferenceIn | None = Field(
        None, description="An earlier period's prices with quantities or shares (Lowe, Young).")
    lloyd_moulton_sigma: FiniteFloat | None = None
    formulas: list[FormulaName] | None = None  # type: ignore[valid-type]


class UncertaintyIn(StrictModel):
    """The parametric bootstrap behind the intervals."""

    draws: StrictInt = Field(500, ge=10, description="Parameter draws.")
    seed: StrictInt = Field(0, ge=0, description="Seed of the random generator (same seed, same "
                      "interval).")


class FitAndCompareRequest(FitRequest):
    """Fit a model to budget data, then compare two price situations under it."""

    comparison: FitComparisonIn
    uncertainty: UncertaintyIn = Field(default_factory=UncertaintyIn)


# -- answers --------------------------------------------------------------------------------


class ParameterOut(StrictModel):
    name: str = Field(description="The parameter with its items or group, e.g. "
                      "gamma[rye_loaf,flat_rent].")
    symbol: str
    items: list[str]
    group: str | None
    estimate: float
    std_error: float | None
    t_statistic: float | None
    p_value: float | None
    ci_low: float | None
    ci_high: float | None
    kind: Literal["estimated", "derived", "fixed"] = Field(
        description="estimated directly; derived from estimated ones by adding-up or a "
                    "restriction (its standard error by the same linear map); or fixed by a "
                    "normalisation (no standard error).")


class TestOut(StrictModel):
    hypothesis: Literal["homogeneity", "symmetry"] = Field(
        description="homogeneity: every row of gamma sums to 0; symmetry: homogeneity and "
                    "gamma symmetric.")
    test: str
    statistic: float
    df: int
    p_value: float
    imposed: bool = Field(description="Whether the fitted model imposes the hypothesis.")


class EstimateOut(StrictModel):
    estimate: float | None
    std_error: float | None
    ci_low: float | None
    ci_high: float | None


class ElasticitiesOut(StrictModel):
    prices: dict[str, float] = Field(description="The point: prices ...")
    expenditure: float = Field(description="... and total expenditure.")
    at: Literal["sample_means", "given"] = Field(
        description="sample_means: the weighted geometric means over the observations.")
    shares: dict[str, float] = Field(description="The model's shares at the point.")
    expenditure_elasticities: dict[str, EstimateOut]
    marshallian: dict[str, dict[str, EstimateOut]] = Field(
        description="marshallian[i][j] = d ln x_i / d ln p_j, income held fixed.")
    hicksian: dict[str, dict[str, EstimateOut]] = Field(
        description="hicksian[i][j]: utility held fixed (Slutsky equation).")
    method: str


class RegularityNoteOut(StrictModel):
    observation: str
    code: str
    message: str


class RegularityOut(StrictModel):
    observations_checked: int
    monotonicity_violations: int = Field(description="Observations with a fitted share outside "
                                         "[0, 1].")
    concavity_violations: int = Field(description="Observations where the Slutsky matrix is not "
                                      "negative semidefinite.")
    symmetry_violations: int = Field(description="Observations where the Slutsky matrix is not "
                                     "symmetric (symmetry not imposed).")
    outside_domain: int
    monotonicity_observations: list[str] = Field(description="The first 50 of them.")
    concavity_observations: list[str] = Field(description="The first 50 of them.")
    notes: list[RegularityNoteOut]


class ResidualOut(StrictModel):
    observation: str
    fitted: list[float] = Field(description="Fitted shares, in item order.")
    residuals: list[float] = Field(description="Observed minus fitted shares, in item order.")


class FitStatsOut(StrictModel):
    observations: int
    equations: int = Field(description="Share equations fitted (items less one: adding-up).")
    parameters: int = Field(description="Free parameters estimated.")
    degrees_of_freedom: float = Field(description="T - K/m, for the t quantiles and p-values.")
    iterations: int
    converged: bool
    weighted: bool
    r_squared: dict[str, float | None] = Field(description="Per item: 1 - weighted residual sum "
                                               "of squares / weighted total sum of squares.")
    residual_covariance: list[list[float]] = Field(
        description="Of the fitted equations (every item but the last), at the estimate.")
    residuals: list[ResidualOut] | None


class FitOut(StrictModel):
    """A fit's figures (inside a fitted comparison's answer, too)."""

    family: str = Field(description="The fitted preference family (as POST /v1/comparisons "
                        "names it).")
    estimator: str | None
    restrictions: str | None
    method: str
    covariance_type: str
    confidence_level: float
    items: list[str]
    observations: list[str]
    parameters: list[ParameterOut]
    model: dict[str, Any] = Field(description="The fitted model, ready to send as `model` to POST "
                                  "/v1/comparisons with the same items.")
    fit: FitStatsOut
    tests: list[TestOut]
    elasticities: ElasticitiesOut
    regularity: RegularityOut
    notices: list[NoticeOut]
    caution: str


class FitResponse(FitOut):
    """The answer of POST /v1/fits and POST /v1/fits/csv: the fit, and where it came from."""

    provenance: ProvenanceOut


# -- fit and compare ----------------------------------------------------------------------


class IntervalOut(StrictModel):
    estimate: float = Field(description="From the estimated parameters.")
    low: float
    high: float
    std_error: float = Field(description="Standard deviation over the draws.")


class FormulaIntervalOut(StrictModel):
    formula: str
    bias_points: IntervalOut | None = Field(description="Null outside the fitted model's "
                                            "regular region, as the bias itself.")
    bias_percent: IntervalOut | None


class IntervalsOut(StrictModel):
    method: str
    confidence_level: float
    draws: int
    draws_failed: int
    seed: int
    konus: dict[str, IntervalOut | None] = Field(
        description="base, current, midpoint (and reference); each null outside the fitted "
                    "model's regular region, where the comparison withholds the figure (a notice "
                    "says so).")
    formulas: list[FormulaIntervalOut]
    compensating_variation: IntervalOut | None
    equivalent_variation: IntervalOut | None
    notices: list[NoticeOut]


class FitAndCompareResponse(StrictModel):
    fit: FitOut
    comparison: ComparisonOut
    intervals: IntervalsOut
    caution: str
    provenance: ProvenanceOut


__all__ = ["FitAndCompareRequest", "FitAndCompareResponse", "FitModelIn", "FitOut", "FitRequest",
           "FitResponse"]
