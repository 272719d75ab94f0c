"""Request and answer of the comparison (POST /v1/comparisons): plain models, no logic."""

from __future__ import annotations

from typing import Any, Literal

from pydantic import Field, model_validator

from ...core.indices import formulas_for
from .common import (
    CAUTION,
    SHARE_UNIT_TEXT,
    SIGN_CONVENTION,
    FiniteFloat,
    ItemIn,
    NoticeOut,
    ProvenanceOut,
    ScaleOut,
    ShareUnit,
    StrictModel,
    ValidityOut,
    VectorIn,
)
from .model import ModelSpec

#: The most models of a comparison's band (as of a sensitivity request).
MAX_BAND_MODELS = 12

FormulaName = Literal[formulas_for("comparison")]  # type: ignore[valid-type]


class BaseIn(StrictModel):
    """Base-period prices with quantities, or with expenditure shares and total expenditure."""

    prices: VectorIn
    quantities: VectorIn | None = None
    shares: VectorIn | None = Field(None, description="Base expenditure shares, summing to 1.")
    expenditure: FiniteFloat | None = Field(
        None, description="Total base expenditure m0 (required with shares; with quantities it "
                          "must equal the basket's value if given).")

    @model_validator(mode="after")
    def _one_bundle(self) -> BaseIn:
        if (self.quantities is None) == (self.shares is None):
            raise ValueError("give the base bundle as quantities or as shares (exactly one)")
        if self.shares is not None and self.expenditure is None:
            raise ValueError("base shares need the total base expenditure (expenditure)")
        return self


class CurrentIn(StrictModel):
    """Current-period prices, with the income (total expenditure) or observed quantities."""

    prices: VectorIn
    quantities: VectorIn | None = Field(None, description="Observed current quantities; if "
                                        "absent, the model's demands are used.")
    expenditure: FiniteFloat | None = Field(None, description="Current income m1 (default: the "
                                            "value of the current quantities, else m0).")


class WeightReferenceIn(StrictModel):
    """An earlier weight-reference period b, for the Lowe and Young indices."""

    prices: VectorIn | None = None
    quantities: VectorIn | None = None
    shares: VectorIn | None = None


class ComparisonRequest(StrictModel):
    """Base and current prices, the base budget and a preference model."""

    items: list[ItemIn] = Field(min_length=1, description="The items, in a fixed order.")
    base: BaseIn
    current: CurrentIn
    model: ModelSpec
    reference_income: FiniteFloat | None = Field(
        None, description="A further living standard for the Konüs index, named by an income "
                          "at base prices.")
    weight_reference: WeightReferenceIn | None = None
    lloyd_moulton_sigma: FiniteFloat | None = Field(
        None, description="Elasticity for the Lloyd-Moulton index (default: the model's own).")
    formulas: list[FormulaName] | None = Field(  # type: ignore[valid-type]
        None, description="Formulas to compute (default: every formula that the data allow).")
    normalise_shares: bool = Field(
        False, description="Divide base shares by their sum when it is not 1; the answer says so.")
    share_unit: ShareUnit = Field(
        "fraction", description=SHARE_UNIT_TEXT + " It applies to base.shares and "
        "weight_reference.shares.")
    revealed_bounds: bool = Field(
        False, description="Also bracket the Konüs index at base utility by the two observed "
        "bundles alone (Varian 1982; needs current.quantities): the answer's revealed_bounds "
        "block, with whether the model's index lies inside.")
    band_models: list[ModelSpec] | None = Field(
        None, min_length=1, max_length=MAX_BAND_MODELS, description="Also compare under each of "
        "these models, as POST /v1/sensitivity would with them as its models: the answer's "
        "band block, the least and greatest Konüs index and bias across them, with whether this "
        "model's K(u0) lies inside. Formulas that need a weight-reference period are left out "
        "of the band.")


# -- response ---------------------------------------------------------------------------------


class KonusOut(StrictModel):
    base: float | None = Field(description="Konüs index at the base living standard, "
                                           "e(p1,u0)/e(p0,u0); null when the model is outside "
                                           "its regular region (see validity).")
    current: float | None = Field(description="At the current living standard, "
                                              "e(p1,u1)/e(p0,u1).")
    midpoint: float | None = Field(description="At the midpoint living standard (see docs).")
    reference: float | None = Field(description="At the living standard of reference_income.")
    homothetic: bool = Field(description="True when all of these coincide by construction.")


class LivingStandardsOut(StrictModel):
    base_income: float
    current_income: float
    midpoint_income: float = Field(description="Income at base prices of the midpoint standard.")
    reference_income: float | None
    utility_base: float = Field(description="u0 on the model's own utility scale.")
    utility_current: float
    utility_reference: float | None


class FormulaOut(StrictModel):
    formula: str
    title: str
    value: float = Field(description="The index as a ratio (1 = no change).")
    compared_with: Literal["base", "current", "midpoint"] = Field(
        description="Which Konüs index the bias is measured against.")
    konus: float | None = Field(description="The Konüs index compared with; null outside the "
                                            "model's regular region.")
    bias_points: float | None = Field(description="100 (value - konus): index points on base "
                                                  "100.")
    bias_percent: float | None = Field(description="100 (value / konus - 1).")


class CompensationOut(StrictModel):
    compensating_variation: float | None
    equivalent_variation: float | None
    compensated_income: float | None = Field(description="e(p1,u0): income keeping u0 at "
                                                         "current prices.")
    sign_convention: str


class ItemOut(StrictModel):
    item: str
    label: str | None
    base_price: float
    current_price: float
    price_relative: float
    base_quantity: float = Field(description="x(p0,m0), the model's base demand.")
    current_quantity: float | None = Field(description="x(p1,m1), the model's current demand "
                                                       "(null, like the three that follow, "
                                                       "outside the regular region).")
    compensated_quantity: float | None = Field(description="h(p1,u0), Hicksian demand at base "
                                                           "utility.")
    substitution_effect: float | None = Field(description="h(p1,u0) - x(p0,m0).")
    income_effect: float | None = Field(description="x(p1,m1) - h(p1,u0).")
    laspeyres_gap_points: float | None = Field(
        description="This item's part of Laspeyres minus Konüs(u0), in index points; the parts "
                    "add up to the whole gap.")


class DiagnosticsOut(StrictModel):
    duality_residual: float
    expenditure_residual: float
    base_bundle_gap: float


class RevealedBoundsOut(StrictModel):
    """What the two observed bundles say without a model (on request)."""

    garp: bool = Field(description="Whether one utility function can explain both choices.")
    efficiency_index: float = Field(description="Afriat's index: 1 when GARP holds.")
    efficiency_level: float = Field(description="The efficiency the bounds were computed at.")
    lower: float = Field(description="Least Konüs index at base utility the data allow.")
    upper: float = Field(description="Greatest; never above Laspeyres at full efficiency.")
    laspeyres: float
    paasche: float
    konus_base: float | None = Field(description="The model's own K(u0), null outside its "
                                                 "regular region.")
    konus_inside: bool | None = Field(description="Whether the model's K(u0) lies in "
                                                  "[lower, upper] (relative 1e-9).")
    method: str


class RangeOut(StrictModel):
    measure: str = Field(description="konus_base, konus_current, konus_midpoint or "
                                     "<formula>_bias_points.")
    low: float | None
    high: float | None
    count: int = Field(description="The comparisons the range is over.")
    left_out: int = Field(description="Comparisons left out: the model outside its regular "
                                      "region.")


class BandModelOut(StrictModel):
    family: str
    regular: bool = Field(description="Whether the model is regular at these prices (outside "
                                      "its regular region it is left out of the band).")
    konus_base: float | None
    konus_current: float | None
    konus_midpoint: float | None


class BandOut(StrictModel):
    """The band across the models of band_models (on request)."""

    models: list[BandModelOut] = Field(description="Each model of band_models, in order.")
    ranges: list[RangeOut] = Field(description="Least and greatest across the models.")
    konus_inside: bool | None = Field(description="Whether this comparison's K(u0) lies in the "
                                      "band's konus_base range (relative 1e-9); null when it or "
                                      "the range is not a result.")


class ComparisonOut(StrictModel):
    """A comparison's figures (inside a fitted comparison's answer, too)."""

    family: str
    items: list[str]
    scale: ScaleOut
    validity: ValidityOut
    konus: KonusOut
    living_standards: LivingStandardsOut
    formulas: list[FormulaOut]
    laspeyres_gap_points: float | None = Field(description="100 (Laspeyres - Konüs(u0)).")
    compensation: CompensationOut
    by_item: list[ItemOut]
    lloyd_moulton_sigma: float | None
    model_parameters: dict[str, Any]
    diagnostics: DiagnosticsOut
    notices: list[NoticeOut]
    caution: str
    revealed_bounds: RevealedBoundsOut | None = Field(
        None, description="On request (revealed_bounds: true): the model-free bracket.")
    band: BandOut | None = Field(None, description="On request (band_models): the band across "
                                 "those models.")


class ComparisonResponse(ComparisonOut):
    """The answer of POST /v1/comparisons: the comparison, and where it came from."""

    provenance: ProvenanceOut


__all__ = ["CAUTION", "SIGN_CONVENTION", "ComparisonOut", "ComparisonRequest",
           "ComparisonResponse", "FormulaName"]
