"""Request and response of the comparison operation (POST /v1/comparisons)."""

from __future__ import annotations

import math
from typing import Any, Literal

from pydantic import Field, model_validator

from ...core.comparison import Comparison, WeightReference, compare
from ...core.indices import FORMULAS
from ...core.preferences import BaseBudget, Preferences
from ..problems import FieldError, RequestProblem
from .common import FiniteFloat, ItemAxis, ItemIn, MatrixIn, Pointers, StrictModel, VectorIn
from .model import ModelSpec, model_to_core

CAUTION = (
    "Model-based cost-of-living figures are estimates: they depend on the preference model and "
    "parameters chosen. For wage, pension or benefit indexation, defer to official statistics "
    "and to the applicable law or agreement."
)
SIGN_CONVENTION = (
    "Compensating and equivalent variation are stated as losses: positive when the change of "
    "prices and income leaves the household worse off. compensating_variation = e(p1,u0) - m1, "
    "money needed at current prices to keep the base living standard; equivalent_variation = "
    "m0 - e(p0,u1), the loss valued at base prices."
)

FormulaName = Literal[tuple(FORMULAS)]  # type: ignore[valid-type]


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

    def run(self, *, max_items: int, max_tree_depth: int, compute_deadline_seconds: float | None = None,
            ) -> tuple[Comparison, Preferences, ItemAxis]:
        """Translate to core calls; core errors come back pointing at the request field."""
        axis = ItemAxis.from_request(self.items)
        if len(axis) > max_items:
            raise RequestProblem([FieldError("/items", f"has {len(axis)} items; the limit is "
                                             f"{max_items}")])
        ptr = Pointers(axis)
        b, c = self.base, self.current
        ptr.note("p0", "/base/prices", b.prices)
        p0 = axis.vector(b.prices, "/base/prices")
        ptr.note("m0", "/base/expenditure", per_item=False)
        with ptr.translating():
            if b.quantities is not None:
                ptr.note("q0", "/base/quantities", b.quantities)
                budget = BaseBudget.from_quantities(
                    p0, axis.vector(b.quantities, "/base/quantities"), expenditure=b.expenditure)
            else:
                assert b.shares is not None and b.expenditure is not None
                ptr.note("w0", "/base/shares", b.shares)
                ptr.note("q0", "/base/shares", b.shares)
                budget = BaseBudget.from_shares(p0, axis.vector(b.shares, "/base/shares"),
                                                b.expenditure, normalise=self.normalise_shares)
        model = model_to_core(self.model, budget, axis, ptr, max_tree_depth=max_tree_depth,
                              compute_deadline_seconds=compute_deadline_seconds)

        ptr.note("p1", "/current/prices", c.prices)
        p1 = axis.vector(c.prices, "/current/prices")
        q1 = None
        if c.quantities is not None:
            ptr.note("q1", "/current/quantities", c.quantities)
            q1 = axis.vector(c.quantities, "/current/quantities")
        ptr.note("m1", "/current/expenditure" if c.expenditure is not None else "/current",
                 per_item=False)
        ptr.note("reference_income", "/reference_income", per_item=False)
        ptr.note("lloyd_moulton_sigma", "/lloyd_moulton_sigma", per_item=False)
        ptr.note("formulas", "/formulas", per_item=False)
        weights = None
        with ptr.translating():
            if self.weight_reference is not None:
                wr = self.weight_reference
                vec = {}
                for key, core, value in (("prices", "pb", wr.prices),
                                         ("quantities", "qb", wr.quantities),
                                         ("shares", "wb", wr.shares)):
                    if value is not None:
                        ptr.note(core, f"/weight_reference/{key}", value)
                        vec[key] = axis.vector(value, f"/weight_reference/{key}")
                weights = WeightReference.checked(len(axis), **vec)
            result = compare(
                model, budget, p1,
                current_income=c.expenditure,
                current_quantities=q1,
                reference_income=self.reference_income,
                weight_reference=weights,
                lloyd_moulton_sigma=self.lloyd_moulton_sigma,
                formulas=self.formulas,
            )
        return result, model, axis


# -- response ---------------------------------------------------------------------------------


class KonusOut(StrictModel):
    base: float = Field(description="Konüs index at the base living standard, e(p1,u0)/e(p0,u0).")
    current: float = Field(description="At the current living standard, e(p1,u1)/e(p0,u1).")
    midpoint: float = Field(description="At the midpoint living standard (see docs).")
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
    konus: float
    bias_points: float = Field(description="100 (value - konus): index points on base 100.")
    bias_percent: float = Field(description="100 (value / konus - 1).")


class CompensationOut(StrictModel):
    compensating_variation: float
    equivalent_variation: float
    compensated_income: float = Field(description="e(p1,u0): income keeping u0 at current prices.")
    sign_convention: str


class ItemOut(StrictModel):
    item: str
    label: str | None
    base_price: float
    current_price: float
    price_relative: float
    base_quantity: float = Field(description="x(p0,m0), the model's base demand.")
    current_quantity: float = Field(description="x(p1,m1), the model's current demand.")
    compensated_quantity: float = Field(description="h(p1,u0), Hicksian demand at base utility.")
    substitution_effect: float = Field(description="h(p1,u0) - x(p0,m0).")
    income_effect: float = Field(description="x(p1,m1) - h(p1,u0).")
    laspeyres_gap_points: float | None = Field(
        description="This item's part of Laspeyres minus Konüs(u0), in index points; the parts "
                    "add up to the whole gap.")


class DiagnosticsOut(StrictModel):
    duality_residual: float
    expenditure_residual: float
    base_bundle_gap: float


class NoticeOut(StrictModel):
    code: str
    message: str


class ComparisonResponse(StrictModel):
    family: str
    items: list[str]
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

    @classmethod
    def from_result(cls, r: Comparison, model: Preferences, axis: ItemAxis) -> ComparisonResponse:
        return cls.model_validate(comparison_document(r, model, axis))


def comparison_document(r: Comparison, model: Preferences, axis: ItemAxis) -> dict[str, Any]:
    """The answer as plain JSON-ready values, in the shape of :class:`ComparisonResponse`.

    The comparison route renders this directly (validating 300 item records would cost more than
    the computation); tests check that every answer validates against the response model.
    """
    lasp = r.formulas.get("laspeyres")
    st = r.standards
    return {
        "family": r.family,
        "items": axis.ids,
        "konus": {"base": r.konus.base, "current": r.konus.current, "midpoint": r.konus.midpoint,
                  "reference": r.konus.reference, "homothetic": r.konus.homothetic},
        "living_standards": {
            "base_income": st.base_income, "current_income": st.current_income,
            "midpoint_income": st.midpoint_income, "reference_income": st.reference_income,
            "utility_base": st.base, "utility_current": st.current,
            "utility_reference": st.reference,
        },
        "formulas": [{"formula": f.name, "title": FORMULAS[f.name].title, "value": f.value,
                      "compared_with": f.target, "konus": f.konus, "bias_points": f.bias_points,
                      "bias_percent": f.bias_percent} for f in r.formulas.values()],
        "laspeyres_gap_points": None if lasp is None else 100.0 * (lasp.value - r.konus.base),
        "compensation": {
            "compensating_variation": r.compensating_variation,
            "equivalent_variation": r.equivalent_variation,
            "compensated_income": r.compensated_income, "sign_convention": SIGN_CONVENTION,
        },
        "by_item": _items(r, axis),
        "lloyd_moulton_sigma": r.lloyd_moulton_sigma,
        "model_parameters": dict(model.parameters()),
        "diagnostics": {"duality_residual": r.diagnostics.duality_residual,
                        "expenditure_residual": r.diagnostics.expenditure_residual,
                        "base_bundle_gap": r.diagnostics.base_bundle_gap},
        "notices": [{"code": n.code, "message": n.message} for n in r.notices],
        "caution": CAUTION,
    }


def all_finite(value: Any) -> bool:
    """True when every number in a nested structure of dicts and lists is finite."""
    isfinite = math.isfinite
    stack = [value]
    while stack:
        v = stack.pop()
        kind = type(v)
        if kind is dict:
            # The common case, a record of text and numbers, without a trip through the stack.
            for x in v.values():
                kx = type(x)
                if kx is float:
                    if not isfinite(x):
                        return False
                elif not (kx is str or kx is int or kx is bool or x is None):
                    stack.append(x)
        elif isinstance(v, (list, tuple)):
            try:
                # A list of numbers (the common case: a parameter vector) in one pass.
                if not all(map(isfinite, v)):
                    return False
            except (TypeError, OverflowError):  # not all numbers, or an int beyond floats
                stack.extend(v)
        elif isinstance(v, float):
            if not isfinite(v):
                return False
        elif isinstance(v, dict):
            stack.extend(v.values())
    return True


def _items(r: Comparison, axis: ItemAxis) -> list[dict[str, Any]]:
    """One record per item, built from the core's arrays as plain dicts (the response model
    validates them in one pass, which for thousands of items is far cheaper than building one
    model object per item). Written out as a dict display: about twice as fast as zipping
    names with rows, for baskets of hundreds of items."""
    d = r.demands
    gap = r.laspeyres_gap_contributions
    gaps = [None] * len(axis.ids) if gap is None else (100.0 * gap).tolist()
    return [
        {"item": item, "label": label, "base_price": p0, "current_price": p1,
         "price_relative": rel, "base_quantity": q0, "current_quantity": q1,
         "compensated_quantity": h1, "substitution_effect": sub, "income_effect": inc,
         "laspeyres_gap_points": g}
        for item, label, p0, p1, rel, q0, q1, h1, sub, inc, g in zip(
            axis.ids, axis.labels, r.base_prices.tolist(), r.current_prices.tolist(),
            (r.current_prices / r.base_prices).tolist(), d.base.tolist(), d.current.tolist(),
            d.compensated.tolist(), d.substitution_effect.tolist(), d.income_effect.tolist(),
            gaps, strict=True)
    ]


__all__ = ["CAUTION", "ComparisonRequest", "ComparisonResponse", "MatrixIn", "all_finite",
           "comparison_document"]
