"""Requests and answers of the index-series operations (POST /v1/index-series and its CSV form):
plain models, no logic."""

from __future__ import annotations

from typing import Annotated, Any, Literal

from pydantic import Field, model_validator

from ...core.indices import formulas_for
from .common import (
    SHARE_UNIT_TEXT,
    FiniteFloat,
    ItemIn,
    NoticeOut,
    ProvenanceOut,
    ScaleOut,
    ShareUnit,
    StrictInt,
    StrictModel,
    VectorIn,
    WholeNumber,
)
from .model import ModelSpec

SeriesFormula = Literal[formulas_for("series")]  # type: ignore[valid-type]
PeriodLabel = Annotated[str | int, Field(description="A period label: YYYY-MM, YYYY-Qn, YYYY, an "
                                         "integer, or any other text.")]
Cell = FiniteFloat | None
Row = Annotated[list[Cell] | dict[str, Cell], Field(
    union_mode="left_to_right",  # the forms cannot be confused (see VectorIn)
    description="One period: an object keyed by item id, or a list in the order of `items`; "
                "null (or, in an object, no entry) where the item is not priced.")]

Detail = Literal["full", "headline"]
DETAIL_TEXT = (
    "How much the answer holds: full (default), or headline: every series, bias, drift, change "
    "measure and notice as in full, without the rows per item: item_treatment (one row per "
    "period and item left out of a comparison or valued otherwise) and weights.items are null, "
    "and in a CSV answer the columns items_not_priced, items_left_out_fixed_base and "
    "items_left_out_of_link are left out (the header Dualcost-Left-Out names them). The "
    "answer's detail and left_out say so. The figures are the same either way.")
#: What a headline answer leaves out, as its left_out names them.
HEADLINE_LEFT_OUT = ("item_treatment", "weights.items")

FREQUENCY_TEXT = ("monthly, quarterly or annual; inferred from period labels of the form YYYY-MM, "
                  "YYYY-Qn or YYYY")


class WeightReferenceIn(StrictModel):
    """The weight-reference period for the Lowe and Young series: a period of the panel, or a
    basket (quantities, or shares, with that period's prices) given here."""

    period: PeriodLabel | None = Field(None, description="A panel period at or before the base.")
    prices: VectorIn | None = None
    quantities: VectorIn | None = None
    shares: VectorIn | None = None

    @model_validator(mode="after")
    def _one_source(self) -> WeightReferenceIn:
        vectors = (self.prices, self.quantities, self.shares)
        if (self.period is None) == all(v is None for v in vectors):
            raise ValueError("give the weight-reference period, or its basket (quantities or "
                             "shares, with prices), not both")
        return self


class GeksIn(StrictModel):
    window: StrictInt | None = Field(None, ge=2, description="Rolling window in periods (default: a "
                               "year and one period, 13 for monthly data).")
    splice: Literal["movement", "window", "half", "mean"] = Field(
        "movement", description="How each new window joins the published series (Ivancic, "
                                "Diewert and Fox 2011); see the operation's description.")


class SpanIn(StrictModel):
    start: PeriodLabel | None = Field(None, description="First period (default: the first).")
    end: PeriodLabel | None = Field(None, description="Last period (default: the last).")


class RebaseIn(StrictModel):
    """A further index reference for the change measures' rebased levels: one period of the
    panel, or a calendar year the panel covers in full (its average is then the reference)."""

    period: PeriodLabel | None = Field(None, description="A period of the panel.")
    year: StrictInt | None = Field(None, ge=1, le=9999, description="A calendar year the "
                                   "panel covers in full (monthly, quarterly or annual labels).")

    @model_validator(mode="after")
    def _one(self) -> RebaseIn:
        if (self.period is None) == (self.year is None):
            raise ValueError("give the period or the year to rebase to, one of them")
        return self


class SeriesOptions(StrictModel):
    """Everything but the panel: shared by the JSON and the CSV operation."""

    base_period: PeriodLabel | None = Field(None, description="The base (price-reference) period; "
                                            "the model is calibrated to it. Default: the first.")
    reference_period: PeriodLabel | None = Field(None, description="The index reference period "
                                                 "(default: the base period).")
    reference_value: Annotated[Literal[1, 100], WholeNumber] = Field(
        100, description="The series' value in the index reference period.")
    frequency: Literal["monthly", "quarterly", "annual"] | None = Field(
        None, description=FREQUENCY_TEXT + ".")
    formulas: list[SeriesFormula] | None = Field(  # type: ignore[valid-type]
        None, description="Formula series to compute (default: every one the data allow).")
    model: ModelSpec | None = Field(None, description="A preference model, calibrated to the base "
                                    "period, for the Konüs series and the bias.")
    lloyd_moulton_sigma: FiniteFloat | None = Field(None, description="Lloyd-Moulton elasticity "
                                                    "(default: the model's own).")
    new_goods_sigma: FiniteFloat | None = Field(
        None, description="Elasticity (> 1) for Feenstra's new-goods adjustment (default: the "
                          "model's own when above 1).")
    weight_reference: WeightReferenceIn | None = None
    share_unit: ShareUnit = Field(
        "fraction", description=SHARE_UNIT_TEXT + " It applies to weight_reference.shares.")
    geks: GeksIn = Field(default_factory=GeksIn)
    span: SpanIn | None = Field(None, description="Span of the average annual bias.")
    loop: list[PeriodLabel] | None = Field(
        None, min_length=2, description="Periods of the circularity check, in order (default: the "
                                        "span's periods, closing back to its first).")
    rebase: RebaseIn | None = Field(
        None, description="Rebase every series to this period or year (worth reference_value "
                          "there) in `changes.by_series[].rebased`; the changes are the same on "
                          "any reference.")
    detail: Detail = Field("full", description=DETAIL_TEXT)
    revealed_bounds: bool = Field(
        False, description="Also test the panel's choices for GARP (Varian 1982) and bracket "
        "each period's Konüs index against the base at base utility without a model, over the "
        "items priced in every period (needs quantities or expenditures in every period); the "
        "answer's revealed_bounds block; in the CSV answer, its rows as revealed_* columns "
        "and the verdicts in the headers Dualcost-Garp and Dualcost-Efficiency-Index. JSON body "
        "only.")


class SeriesRequest(SeriesOptions):
    """A panel of prices, with quantities or expenditures where known, and the options."""

    periods: list[PeriodLabel] = Field(min_length=2, description="The periods, in time order.")
    items: list[ItemIn] = Field(min_length=1, description="The items.")
    prices: list[Row] = Field(description="One row per period, in the order of `periods`.")
    quantities: list[Row | None] | None = Field(
        None, description="One row per period (null for a period with prices only).")
    expenditures: list[Row | None] | None = Field(
        None, description="As quantities, in money; quantity = expenditure / price.")
    band_models: list[ModelSpec] | None = Field(
        None, min_length=1, max_length=12, description="Also compute the model's fixed-base "
        "Konüs series at base utility under each of these models (calibrated to the same base "
        "period): the answer's band block, the least and greatest of them in every period. "
        "Periods times items times (1 + models) at most max_panel_cells. JSON body only.")


# -- response ------------------------------------------------------------------------------------


class FormulaSeriesOut(StrictModel):
    formula: str
    title: str
    compared_with: Literal["base", "current", "midpoint"] = Field(
        description="Which Konüs series the bias is measured against.")
    fixed_base: list[float] = Field(description="Direct comparisons with the base period, on the "
                                    "index reference period.")
    chained: list[float] = Field(description="Period-to-period links multiplied, on the index "
                                 "reference period.")
    links: list[float] = Field(description="P(t-1, t) for the second period on, as ratios.")
    chain_drift_percent: list[float] = Field(description="100 (chained / fixed-base - 1), both "
                                             "from the base period.")
    loop_product: float = Field(description="The product of the formula's bilateral indices "
                                "around the loop (1 for a transitive index).")
    circularity_failure_percent: float = Field(description="100 (loop_product - 1).")
    rule_for_items_that_come_and_go: str


class PeriodValidityOut(StrictModel):
    period: str
    reasons: list[NoticeOut]


class KonusValidityOut(StrictModel):
    state: Literal["regular", "outside_regular_region"]
    periods_outside_regular_region: list[PeriodValidityOut]
    rule: str


class KonusSeriesOut(StrictModel):
    family: str
    homothetic: bool
    fixed_base: dict[str, list[float | None]] = Field(
        description="base: e(p_t,u_b)/e(p_b,u_b); current: e(p_t,u_t)/e(p_b,u_t); midpoint. "
                    "null where the model is outside its regular region (see validity).")
    chained: dict[str, list[float | None]] = Field(
        description="Links t-1 -> t at u_{t-1} (base), at u_t (current) or at their midpoint; "
                    "null from a period where the model is not regular on.")
    validity: KonusValidityOut
    incomes: list[float] = Field(description="Spending on the model's items per period.")
    utilities: list[float] = Field(description="u_t = v(p_t, m_t), the model's own scale.")
    items: list[str] = Field(description="The model's items: those priced in the base period.")
    model_parameters: dict[str, Any]
    rule_for_items_that_come_and_go: str


class MultilateralOut(StrictModel):
    method: str
    bilateral: str
    full_span: list[float] = Field(description="GEKS over the whole panel.")
    rolling: list[float] | None = Field(description="Rolling-window GEKS, spliced.")
    window: int | None
    splice: str
    loop_product: float
    rule_for_items_that_come_and_go: str


class BiasOut(StrictModel):
    series: str
    kind: Literal["fixed_base", "chained", "full_span", "rolling"]
    compared_with: Literal["base", "current", "midpoint"]
    points: list[float | None] = Field(description="100 (P_t - K_t), on reference 100; null "
                                                   "where K_t is withheld.")
    percent: list[float | None] = Field(description="100 (P_t / K_t - 1).")


class AnnualBiasOut(StrictModel):
    series: str
    kind: Literal["fixed_base", "chained", "full_span", "rolling"]
    compared_with: Literal["base", "current", "midpoint"]
    annual_rate_percent: float
    konus_annual_rate_percent: float | None
    bias_pp_per_year: float | None = Field(description="Difference of the average annual rates, in "
                                    "percentage points.")


class SpanOut(StrictModel):
    start: str
    end: str
    years: float | None
    frequency: str | None
    periods_per_year: int | None


class AnnualBiasBlock(StrictModel):
    span: SpanOut
    definition: str
    by_series: list[AnnualBiasOut]


class ChainDriftOut(StrictModel):
    loop: list[str]
    periods_with_base_prices: list[str] = Field(
        description="Periods whose prices all equal the base period's: a transitive index is at "
                    "the base value there.")
    definition: str


class ItemTreatmentOut(StrictModel):
    period: str
    item: str
    priced: bool
    fixed_base: Literal["used", "left_out"]
    chained: Literal["used", "left_out", "none"]
    model: Literal["used", "price_carried", "outside_model", "no_model"]
    carried_from: str | None
    detail: str


class WeightItemOut(StrictModel):
    item: str
    share: float | None = Field(description="Expenditure share in the weight-reference period.")
    price_updated_share: float | None = Field(
        description="Share price-updated to the base period: s_w p_b / p_w, rescaled.")


class WeightsOut(StrictModel):
    period: str | None
    items: list[WeightItemOut] | None = Field(description="One row per item (null in a "
                                              "headline answer).")
    rule: str


class EmptyOut(StrictModel):
    measure: Literal["period_on_period", "twelve_month", "annual_average",
                     "annual_average_change", "rebased"]
    reason: str
    periods: list[str] = Field(description="The periods where the measure is empty.")
    years: list[int] = Field(description="The years where an annual measure is empty.")


class AnnualOut(StrictModel):
    year: int
    average: float | None = Field(description="Arithmetic mean of the year's levels.")
    change_percent: float | None = Field(description="100 (A_y / A_{y-1} - 1).")


class SeriesChangesOut(StrictModel):
    series: str = Field(description="A formula, a GEKS method, or konus.")
    kind: Literal["fixed_base", "chained", "full_span", "rolling"]
    standard: Literal["base", "current", "midpoint"] | None = Field(
        description="The Konüs series' living standard (null for the others).")
    period_on_period_percent: list[float | None] = Field(
        description="100 (X_t / X_{t-1} - 1); null where empty (see empty).")
    twelve_month_percent: list[float | None] = Field(
        description="100 (X_t / X_{t-k} - 1), k periods to a year: the change from the same "
                    "period a year earlier; null where empty.")
    annual: list[AnnualOut] = Field(description="Each calendar year the series covers in full.")
    rebased: list[float | None] | None = Field(description="The levels on the `rebase` "
                                               "reference (null when none was asked for).")
    empty: list[EmptyOut]


class RebasedToOut(StrictModel):
    period: str | None
    year: int | None
    value: float


class ChangesOut(StrictModel):
    definitions: dict[str, str]
    rebased_to: RebasedToOut | None
    by_series: list[SeriesChangesOut]
class RevealedRowOut(StrictModel):
    period: str
    lower: float
    upper: float
    laspeyres: float
    paasche: float
    konus_base: float | None = Field(description="The model's fixed-base Konüs index at base "
                                                 "utility as a ratio to the base period (null "
                                                 "without a model or where withheld).")
    konus_inside: bool | None = Field(description="Whether it lies in [lower, upper]; null "
                                                  "when the model's items differ from the "
                                                  "bounds' items.")


class RevealedSeriesOut(StrictModel):
    """What the panel says without a model (on request)."""

    items: list[str] = Field(description="The items the bounds use: those priced in every "
                                         "period.")
    consistency: dict[str, Any] = Field(description="garp, warp, sarp, efficiency_index, "
                                        "violations, violation_counts, as POST "
                                        "/v1/revealed-preference gives them.")
    base_period: str
    efficiency_level: float
    method: str
    rows: list[RevealedRowOut]


class BandSeriesModelOut(StrictModel):
    family: str
    fixed_base: list[float | None] = Field(description="Its fixed-base Konüs series at base "
                                           "utility, scaled as the series (null where the "
                                           "model is outside its regular region).")


class BandSeriesRowOut(StrictModel):
    period: str
    konus_low: float | None
    konus_high: float | None
    models: int = Field(description="The models whose value is a result in this period.")
    konus: float | None = Field(description="The series' own model's value.")
    konus_inside: bool | None = Field(description="Whether konus lies in [konus_low, "
                                      "konus_high] (relative 1e-9).")


class BandSeriesOut(StrictModel):
    """The band across band_models (on request)."""

    measure: str
    models: list[BandSeriesModelOut]
    rows: list[BandSeriesRowOut]


class SeriesResponse(StrictModel):
    periods: list[str]
    items: list[str]
    frequency: str | None
    base_period: str
    reference_period: str
    reference_value: float
    formulas: list[FormulaSeriesOut]
    konus: KonusSeriesOut | None
    multilateral: list[MultilateralOut]
    bias: list[BiasOut]
    annual_bias: AnnualBiasBlock | None
    chain_drift: ChainDriftOut
    item_treatment: list[ItemTreatmentOut] | None = Field(
        description="One row per period and item left out of a comparison or valued otherwise "
                    "by the model (null in a headline answer).")
    weights: WeightsOut | None
    lloyd_moulton_sigma: float | None
    new_goods_sigma: float | None
    changes: ChangesOut = Field(description="Change measures of every series: period-on-period, "
                                "12-month, annual averages and their changes, and the levels "
                                "rebased where asked.")
    notices: list[NoticeOut]
    scale: ScaleOut = Field(description="How the levels, links and biases are scaled.")
    caution: str
    detail: Detail = Field(description="full, or headline as asked (see the request's detail).")
    left_out: list[str] = Field(description="The members left out of a headline answer (null "
                                "in it): item_treatment and weights.items; empty in full.")
    revealed_bounds: RevealedSeriesOut | None = Field(
        None, description="On request (revealed_bounds: true): the model-free brackets, as "
                          "ratios to the base period.")
    band: BandSeriesOut | None = Field(None, description="On request (band_models): the band "
                                       "across those models.")
    provenance: ProvenanceOut


__all__ = ["DETAIL_TEXT", "FREQUENCY_TEXT", "HEADLINE_LEFT_OUT", "Detail", "PeriodLabel",
           "RebaseIn", "SeriesFormula", "SeriesOptions", "SeriesRequest", "SeriesResponse"]
