"""One comparison of two price situations: the Konüs index beside the formula indices.

Definitions used throughout (utility ``u``, expenditure function ``e``, indirect utility ``v``):

- Base and current living standards: ``u0 = v(p0, m0)``, ``u1 = v(p1, m1)``.
- Konüs (1924) cost-of-living index at living standard ``u``: ``K(u) = e(p1, u) / e(p0, u)``.
  ``K(u0)`` is the target of base-weighted formulas (Laspeyres-type), ``K(u1)`` of
  current-weighted ones (Paasche-type); Konüs showed ``K(u0) <= P_L`` and ``K(u1) >= P_P``.
- Midpoint living standard, the target of the symmetric formulas: the one whose cost at base
  prices is the geometric mean of the base and current living standards' costs at base prices,
  ``e(p0, u*) = (e(p0, u0) e(p0, u1))^(1/2)``. Superlative indices approximate the Konüs index at
  such an intermediate standard (Diewert 1976; for the translog exactly, Caves, Christensen and
  Diewert 1982, Econometrica 50(6)).
- Compensating variation ``CV = e(p1, u0) - m1`` and equivalent variation
  ``EV = m0 - e(p0, u1)``. Sign convention: both are *losses*, positive when the change of prices
  and income leaves the household worse off. (Hicks 1942; Mas-Colell, Whinston and Green 1995,
  3.I, define them with the opposite sign, as gains.)
- Substitution bias of a formula: ``P - K`` in index points (times 100) and ``100 (P / K - 1)``
  in percent, against the Konüs index the formula is meant to approximate.
- Hicks decomposition of each item's quantity change ``x1 - x0``: substitution part
  ``h(p1, u0) - x(p0, m0)`` (moving along the base indifference surface) plus income part
  ``x(p1, m1) - h(p1, u0)``; the two add up exactly.
- Item contributions to the gap between Laspeyres and ``K(u0)``:
  ``c_i = p1_i q0_i / (p0 . q0) - p1_i h_i(p1, u0) / e(p0, u0)``. Since
  ``e(p1, u0) = p1 . h(p1, u0)`` (Euler, e is homogeneous of degree one in prices), the ``c_i`` add
  up exactly to ``P_L - K(u0)``; an item contributes in proportion to how far the household,
  compensated, moves away from it.
"""

from __future__ import annotations

import math
from collections.abc import Mapping, Sequence
from dataclasses import dataclass, field, replace
from typing import Any

import numpy as np
import numpy.typing as npt

from . import _checks
from .errors import InvalidInput, NumericalFailure
from .indices import (
    REGISTRY,
    IndexData,
    IndexFormula,
    Need,
    Target,
    check_formula_names,
    check_positive_shares,
    formulas_for,
)
from .konus import PriceChange, StandardAt, konus_at_income, naming, price_change
from .preferences import calibrate
from .preferences.base import BaseBudget, Notice, Preferences, Vector, converted_notices
from .revealed_bounds import RevealedPreference, revealed_preference
from .validity import Validity, assess, negative_demands

#: Duality residuals above this (relative) are reported as a notice.
DUALITY_TOLERANCE = 1e-8


@dataclass(frozen=True)
class WeightReference:
    """An earlier weight-reference period b for the Lowe and Young indices.

    Give quantities (the basket, for Lowe) or shares (for Young); with ``prices`` of period b
    either one yields the other: ``w_b = p_b q_b / p_b . q_b``.
    """

    quantities: Vector | None = None
    shares: Vector | None = None
    prices: Vector | None = None
    #: What was done to the inputs (shares given in percent or per mille, converted).
    notices: tuple[Notice, ...] = ()

    @classmethod
    def checked(
        cls,
        n_items: int,
        *,
        quantities: npt.ArrayLike | None = None,
        shares: npt.ArrayLike | None = None,
        prices: npt.ArrayLike | None = None,
        share_unit: str = "fraction",
    ) -> WeightReference:
        """``share_unit``: the unit of ``shares`` (``fraction``, ``percent``, ``per_mille``);
        shares in percent or per mille are divided by 100 or 1000, with a notice."""
        qb = None if quantities is None else _checks.nonnegative("qb", quantities, size=n_items)
        wb = None if shares is None else _checks.shares("wb", shares, size=n_items,
                                                        unit=share_unit)
        notices = () if shares is None else converted_notices(
            "The weight-reference shares", share_unit)
        pb = None if prices is None else _checks.positive("pb", prices, size=n_items)
        if qb is not None and not np.any(qb > 0):
            raise InvalidInput("qb", "at least one quantity of the weight-reference basket must "
                               "be greater than zero")
        if qb is not None and wb is not None:
            raise InvalidInput("wb", "give the weight-reference basket or its shares, not both")
        if pb is not None:
            if qb is not None:
                wb = pb * qb / float(pb @ qb)
            elif wb is not None:
                qb = wb / pb
            else:
                raise InvalidInput("pb", "weight-reference prices need a basket or shares to go "
                                   "with them")
        return cls(quantities=qb, shares=wb, prices=pb, notices=notices)


@dataclass(frozen=True)
class FormulaResult:
    """One formula's value and its substitution bias against the Konüs index it targets."""

    name: str
    value: float
    target: Target
    konus: float
    bias_points: float
    bias_percent: float


@dataclass(frozen=True)
class KonusIndices:
    """The Konüs index at the base, current, midpoint and (optionally) a reference standard."""

    base: float
    current: float
    midpoint: float
    reference: float | None
    homothetic: bool

    def at(self, target: Target) -> float:
        return {"base": self.base, "current": self.current, "midpoint": self.midpoint}[target]


@dataclass(frozen=True)
class LivingStandards:
    """Utilities reached, with the incomes that define them (model's own utility scale)."""

    base: float
    current: float
    midpoint: float
    reference: float | None
    base_income: float
    current_income: float
    midpoint_income: float
    reference_income: float | None


@dataclass(frozen=True)
class Demands:
    """Quantities per item: model demands and the Hicks decomposition of their change."""

    base: Vector  # x(p0, m0)
    current: Vector  # x(p1, m1)
    compensated: Vector  # h(p1, u0)
    substitution_effect: Vector  # h(p1, u0) - x(p0, m0)
    income_effect: Vector  # x(p1, m1) - h(p1, u0)
    formula_base_quantities: Vector  # what the formulas used as q0
    formula_current_quantities: Vector  # what the formulas used as q1
    current_quantities_observed: bool


@dataclass(frozen=True)
class Diagnostics:
    duality_residual: float  # max relative |h(p,u) - x(p, e(p,u))|
    expenditure_residual: float  # max relative |e(p, v(p,m)) - m|
    base_bundle_gap: float  # max relative |x(p0,m0) - q0|: how far the base bundle is from optimal


@dataclass(frozen=True)
class Comparison:
    """Everything one comparison returns; see the module docstring for each definition."""

    family: str
    base_prices: Vector
    current_prices: Vector
    konus: KonusIndices
    standards: LivingStandards
    formulas: dict[str, FormulaResult]
    compensating_variation: float
    equivalent_variation: float
    compensated_income: float
    demands: Demands
    laspeyres_gap_contributions: Vector | None
    diagnostics: Diagnostics
    lloyd_moulton_sigma: float | None
    notices: list[Notice] = field(default_factory=list)
    #: Whether the model is regular at the prices and incomes used; when it is not, the Konüs
    #: indices, CV, EV, compensated income, the biases and the Hicks decomposition are not
    #: results (:mod:`dualcost.core.validity`).
    validity: Validity = field(default_factory=Validity)
    #: On request (``compare_budgets(revealed_bounds=True)``), what the two observed bundles
    #: say without a model: GARP and Varian's bounds on the Konüs index at base utility
    #: (:mod:`dualcost.core.revealed_bounds`).
    revealed: RevealedPreference | None = None


def _relative_gap(a: Vector, b: Vector) -> float:
    scale = max(float(np.abs(b).max()), 1e-300)
    return float(np.abs(a - b).max()) / scale


def compare(
    model: Preferences,
    base: BaseBudget,
    current_prices: npt.ArrayLike,
    *,
    current_income: float | None = None,
    current_quantities: npt.ArrayLike | None = None,
    reference_income: float | None = None,
    weight_reference: WeightReference | None = None,
    lloyd_moulton_sigma: float | None = None,
    formulas: Sequence[str] | None = None,
) -> Comparison:
    """Compare base prices ``base.prices`` with ``current_prices`` under ``model``.

    Parameters
    ----------
    model:
        A family calibrated to ``base`` (see :func:`dualcost.core.preferences.calibrate`).
    base:
        Base prices, quantities and income ``m0 = p0 . q0``.
    current_prices:
        ``p1``, one positive price per item.
    current_income:
        ``m1``; defaults to ``p1 . q1`` when current quantities are given, else to ``m0``
        (each default stated in a notice).
    current_quantities:
        Observed ``q1``; when absent the formula indices use the model's ``x(p1, m1)``.
    reference_income:
        An income at base prices naming a further living standard for the Konüs index.
    weight_reference:
        An earlier period's basket or shares, for the Lowe and Young indices.
    lloyd_moulton_sigma:
        The Lloyd-Moulton elasticity; defaults to the model's own where it has a single one.
    formulas:
        Formula names to compute (default: all). A formula named here that cannot be computed
        is an error; under the default it is left out with a notice.
    """
    n = base.n_items
    if model.n_items != n:
        raise InvalidInput("model", f"the model has {model.n_items} items but the base budget {n}")
    p0, m0 = base.prices, base.expenditure
    p1 = _checks.positive("p1", current_prices, size=n)
    q1_obs, m1, income_notice = _current_side(p1, m0, current_income, current_quantities)
    m_ref = None
    if reference_income is not None:
        m_ref = _checks.scalar("reference_income", reference_income, minimum=0.0)
    for name, prices, income in (("m0", p0, m0), ("m1", p1, m1), ("reference_income", p0, m_ref)):
        if income is None:
            continue
        floor = model.income_floor(prices)
        if income <= floor:
            raise InvalidInput(name, f"income {income:.10g} does not exceed the model's "
                               f"subsistence cost {floor:.10g} at those prices")
    change = price_change(model, p0, p1, m0, m1, decomposition=True)
    reference = None
    if m_ref is not None:
        with naming(prices="p1", income="reference_income", utility="reference_income"):
            reference = konus_at_income(model, p0, p1, m_ref)
    result = comparison_of(model, base, change, observed_quantities=q1_obs, reference=reference,
                           weight_reference=weight_reference,
                           lloyd_moulton_sigma=lloyd_moulton_sigma, formulas=formulas)
    if income_notice is not None:  # after what was done to the base budget
        result.notices.insert(len(base.notices), income_notice)
    return result


def _current_side(p1: Vector, m0: float, current_income: float | None,
                  current_quantities: npt.ArrayLike | None
                  ) -> tuple[Vector | None, float, Notice | None]:
    """Observed current quantities (or None), the current income ``m1``, and the notice that
    states how ``m1`` was filled in when it was not given."""
    q1_obs = None
    if current_quantities is not None:
        q1_obs = _checks.nonnegative("q1", current_quantities, size=p1.size)
        if not np.any(q1_obs > 0):
            raise InvalidInput("q1", "at least one current quantity must be greater than zero")
    if current_income is not None:
        m1 = _checks.scalar("m1", current_income, minimum=0.0)
        if q1_obs is not None:
            value = float(p1 @ q1_obs)
            if abs(m1 - value) > _checks.ADDING_UP_TOLERANCE * value:
                raise InvalidInput("m1", f"current income {m1:.10g} differs from the value of "
                                   f"the current basket p1 . q1 = {value:.10g}; give one of "
                                   "them, or make them agree")
        return q1_obs, m1, None
    if q1_obs is not None:
        m1 = float(p1 @ q1_obs)
        return q1_obs, m1, Notice("current_income_from_quantities", "No current income was "
                                  "given: it is the value of the current basket, p1 . q1 = "
                                  f"{m1:.10g}.")
    return None, m0, Notice("current_income_assumed", "No current income or quantities were "
                            f"given: current income is taken equal to base income, {m0:.10g}. "
                            "For a model that is not homothetic this choice moves K(u1), the "
                            "compensating and equivalent variations; give current.expenditure "
                            "to set it.")


def comparison_of(
    model: Preferences,
    base: BaseBudget,
    change: PriceChange,
    *,
    observed_quantities: Vector | None = None,
    reference: StandardAt | None = None,
    weight_reference: WeightReference | None = None,
    lloyd_moulton_sigma: float | None = None,
    formulas: Sequence[str] | None = None,
    formulas_required: bool | None = None,
) -> Comparison:
    """The single comparison assembled from the kernel's evaluation of one change
    (:func:`dualcost.core.konus.price_change` with ``decomposition=True``): the formula indices
    and their bias, the Hicks decomposition, the diagnostics and every notice, each checked as
    :func:`compare` checks it. The households that a family evaluates one by one go through
    here too, so that each is checked as its own comparison would be.

    ``formulas_required``: whether a formula of ``formulas`` that the data do not allow is an
    error (``InvalidInput`` at ``formulas``) rather than left out with a notice; by default,
    when ``formulas`` are named. A household batch's default set passes False."""
    notices: list[Notice] = list(base.notices) + list(model.calibration_notices)
    if weight_reference is not None:
        notices.extend(weight_reference.notices)
    mid = change.midpoint
    konus = _konus_indices(model, change, reference, notices)
    p0, m0, p1, m1 = base.prices, base.expenditure, change.current_prices, change.current_income
    q0 = base.quantities
    q1 = observed_quantities if observed_quantities is not None else change.current_demands
    if observed_quantities is None:
        notices.append(Notice("current_quantities_from_model", "No current quantities were "
                              "given: the formula indices use the model's demands at current "
                              "prices and income."))
    lm_sigma = lloyd_moulton_sigma
    if lm_sigma is None:
        lm_sigma = model.substitution_elasticity
        if lm_sigma is not None and _wanted("lloyd_moulton", formulas):
            notices.append(Notice("lloyd_moulton_sigma_from_model", "No Lloyd-Moulton "
                                  "elasticity was given: the model's own elasticity of "
                                  f"substitution, {lm_sigma:.10g}, is used."))
    elif lm_sigma < 0 or not np.isfinite(lm_sigma):
        raise InvalidInput("lloyd_moulton_sigma", "an elasticity of substitution must be a "
                           f"finite number, zero or more, got {lm_sigma:g}")
    weights = weight_reference or WeightReference()
    data = IndexData(p0=p0, p1=p1, q0=q0, q1=q1, weight_quantities=weights.quantities,
                     weight_shares=weights.shares, sigma=lm_sigma)
    results = _formula_results(data, konus, formulas, notices,
                               q1_observed=observed_quantities is not None,
                               required=formulas_required)
    demands, diagnostics = _demands_and_diagnostics(change, q0, q1, observed_quantities)
    notices.extend(_diagnostic_notices(model, diagnostics, konus, results, p0, m0, p1, m1))
    notices.extend(_vanishing_shares(p0, q0, m0))
    notices.extend(negative_demands("At base prices", {"demand": demands.base}))
    notices.extend(negative_demands("At current prices", {"demand": demands.current,
                                                          "compensated demand":
                                                          demands.compensated}))
    gap_contrib = None
    if "laspeyres" in results:
        gap_contrib = p1 * q0 / float(p0 @ q0) - p1 * demands.compensated / change.base_cost
    comparison = Comparison(
        family=model.family, base_prices=p0, current_prices=p1, konus=konus,
        standards=LivingStandards(
            base=change.base_utility, current=change.current_utility, midpoint=mid.utility,
            reference=None if reference is None else reference.utility, base_income=m0,
            current_income=m1, midpoint_income=mid.income,
            reference_income=None if reference is None else reference.income,
        ),
        formulas=results, compensating_variation=change.compensating_variation,
        equivalent_variation=change.equivalent_variation,
        compensated_income=change.compensated_income, demands=demands,
        laspeyres_gap_contributions=gap_contrib, diagnostics=diagnostics,
        lloyd_moulton_sigma=lm_sigma, notices=notices, validity=assess(notices),
    )
    _check_finite(comparison)
    return comparison


def _vanishing_shares(p0: Vector, q0: Vector, m0: float) -> list[Notice]:
    """A notice naming the bought items whose base expenditure share is too small for floating
    point (it rounds to zero, beside items worth 1e300 times more): the model gives them a zero
    weight and a zero demand."""
    shares = p0 * q0 / m0  # underflow is silent by numpy's default
    lost = np.flatnonzero((q0 > 0.0) & (shares == 0.0))
    if not lost.size:
        return []
    return [Notice("share_below_float_range", f"The base expenditure share of "
                   f"{_items_count(lost.size)} is smaller than the smallest floating-point "
                   "number (its value against the budget's total spans more than 300 orders of "
                   "magnitude): the model weights it by zero and its demand is zero. The "
                   "indices are unaffected to within that share.", _positions_tuple(lost))]


def _wanted(name: str, requested: Sequence[str] | None) -> bool:
    """Whether the formula ``name`` is among those asked for (all, when none were named)."""
    return requested is None or name in requested


def _konus_indices(model: Preferences, change: PriceChange, reference: StandardAt | None,
                   notices: list[Notice]) -> KonusIndices:
    konus = KonusIndices(
        base=change.konus_base,
        current=change.konus_current,
        midpoint=change.midpoint.konus,
        reference=None if reference is None else reference.konus,
        homothetic=model.homothetic,
    )
    if model.homothetic:
        notices.append(Notice("homothetic", f"The {model.family} model is homothetic: the Konüs "
                              "index is the same at every living standard."))
    return konus


def _demands_and_diagnostics(change: PriceChange, q0: Vector, q1: Vector,
                             observed: Vector | None) -> tuple[Demands, Diagnostics]:
    """The Hicks decomposition of the quantity change, and how well the model's own functions
    agree: ``h(p, u)`` against ``x(p, e(p, u))`` and ``e(p, v(p, m))`` against ``m``."""
    d = change.decomposition
    if d is None:
        raise ValueError("the comparison needs the kernel's decomposition")
    x0, x1, h10 = d.base_demands, change.current_demands, d.compensated_demands
    m0, m1 = change.base_income, change.current_income
    demands = Demands(
        base=x0, current=x1, compensated=h10, substitution_effect=h10 - x0,
        income_effect=x1 - h10, formula_base_quantities=q0, formula_current_quantities=q1,
        current_quantities_observed=observed is not None,
    )
    diagnostics = Diagnostics(
        duality_residual=max(_relative_gap(d.base_compensated, d.base_at_cost),
                             _relative_gap(h10, d.compensated_at_cost),
                             _relative_gap(d.current_compensated, d.current_at_cost)),
        expenditure_residual=max(abs(change.base_cost - m0) / m0,
                                 abs(change.current_cost - m1) / m1),
        base_bundle_gap=_relative_gap(x0, q0),
    )
    return demands, diagnostics


def _formula_results(data: IndexData, konus: KonusIndices, requested: Sequence[str] | None,
                     notices: list[Notice], *, q1_observed: bool = True,
                     required: bool | None = None) -> dict[str, FormulaResult]:
    """Each formula's value and bias; floating-point warnings are off (a value beyond floating
    point is caught as not finite and left out, or refused, by name)."""
    with np.errstate(all="ignore"):
        return _each_formula(data, konus, requested, notices, q1_observed=q1_observed,
                             required=required)


def _each_formula(
    data: IndexData,
    konus: KonusIndices,
    requested: Sequence[str] | None,
    notices: list[Notice],
    *,
    q1_observed: bool = True,
    required: bool | None = None,
) -> dict[str, FormulaResult]:
    explicit = requested is not None if required is None else required
    names = (check_formula_names(list(requested)) if requested is not None
             else formulas_for("comparison"))
    # The inputs a comparison may lack; both periods' quantities are always there (q1 observed
    # or the model's demands).
    inputs: dict[Need, object] = {"sigma": data.sigma, "weight_quantities": data.weight_quantities,
                                  "weight_shares": data.weight_shares}
    unmet = {need for need, value in inputs.items() if value is None}
    # The model's demands can turn negative where a flexible form is not regular; the formulas
    # that weight by current quantities are then undefined (a regularity notice says why).
    negative = np.flatnonzero(data.q1 < 0.0)
    out: dict[str, FormulaResult] = {}
    for i, name in enumerate(names):
        formula = REGISTRY[name]
        missing = formula.missing(unmet, "comparison")
        if missing is not None:
            text = f"The {formula.title} index needs {missing}"
            if explicit:
                raise InvalidInput("formulas", text + ", which was not given.", i)
            notices.append(Notice("formula_not_computed", text + "; it was left out."))
            continue
        if negative.size and formula.uses_current_quantities:
            text = (f"The {formula.title} index weights by current quantities, and the model's "
                    f"current demand is negative for {_items_count(negative.size)}")
            if explicit:
                raise InvalidInput("formulas", text + "; the model is not regular at these "
                                   "prices (give observed current quantities, or leave this "
                                   "formula out; the answer's validity block names the "
                                   "items).", i)
            notices.append(Notice("formula_not_computed", text + "; it was left out.",
                                  _positions_tuple(negative)))
            continue
        zero = _zero_quantities(data, formula)
        if zero is not None:
            period, at = zero
            whose = "model's current demand" if period == "current" and not q1_observed \
                else f"{period} quantity"
            text = (f"The {formula.title} index takes logarithms of expenditure shares, and the "
                    f"{whose} is zero for {_items_count(at.size)}")
            if not explicit:
                notices.append(Notice("formula_not_computed", text + "; it was left out.",
                                      _positions_tuple(at)))
                continue
            if whose.startswith("model"):  # nothing in the request to point at but the formula
                raise InvalidInput("formulas", text + " (give observed current quantities, or "
                                   "leave this formula out).", i)
        check_positive_shares(data, formula)
        value = float(formula.compute(data))
        if not math.isfinite(value):
            text = (f"The {formula.title} index is beyond floating point at these prices and "
                    "quantities (its sums overflow or underflow)")
            if explicit:
                raise InvalidInput("formulas", text + "; check the inputs' magnitudes, or leave "
                                   "this formula out.", i)
            notices.append(Notice("formula_not_computed", text + "; it was left out."))
            continue
        k = konus.at(formula.target)
        out[name] = FormulaResult(
            name=name,
            value=value,
            target=formula.target,
            konus=k,
            bias_points=100.0 * (value - k),
            bias_percent=100.0 * (value / k - 1.0),
        )
    return out


def _zero_quantities(data: IndexData, formula: IndexFormula
                     ) -> tuple[str, npt.NDArray[np.intp]] | None:
    """The period and items whose zero quantity keeps a formula that takes logarithms of
    shares from being computed, or None."""
    if not formula.logs_of_shares:
        return None
    for period, q in (("base", data.q0), ("current", data.q1)):
        zero = np.flatnonzero(np.asarray(q).reshape(-1) <= 0.0)
        if zero.size:
            return period, zero
    return None


def _items_count(n: int) -> str:
    return "1 item" if n == 1 else f"{n} items"


def _positions_tuple(at: npt.NDArray[np.intp]) -> tuple[int, ...]:
    return tuple(int(i) for i in at)


def _diagnostic_notices(
    model: Preferences,
    diag: Diagnostics,
    konus: KonusIndices,
    results: dict[str, FormulaResult],
    p0: Vector,
    m0: float,
    p1: Vector,
    m1: float,
) -> list[Notice]:
    notices: list[Notice] = []
    for where, prices, income in (("base", p0, m0), ("current", p1, m1)):
        for notice in model.regularity(prices, income):
            notices.append(Notice(notice.code, f"At {where} prices: {notice.message}",
                                  notice.items))
    if diag.duality_residual > DUALITY_TOLERANCE or diag.expenditure_residual > DUALITY_TOLERANCE:
        notices.append(Notice("duality_residual", "The model's demands and expenditure "
                              "function disagree (relative residual "
                              f"{max(diag.duality_residual, diag.expenditure_residual):.3g}); "
                              "treat its Konüs index with care."))
    if diag.base_bundle_gap > 1e-8:
        notices.append(Notice("base_bundle_not_optimal", "With the parameters given, the base "
                              "bundle is not the model's optimal choice at base prices (largest "
                              f"relative gap {diag.base_bundle_gap:.3g}); the formula indices use "
                              "the observed base bundle."))
    tol = 1e-10
    lasp = results.get("laspeyres")
    if lasp is not None and konus.base > lasp.value * (1 + tol) and diag.base_bundle_gap <= 1e-8:
        notices.append(Notice("konus_bound_failed", "The Konüs index at base utility exceeds "
                              "the Laspeyres index, which a regular model cannot do (Konüs 1924)."))
    return notices


def _check_finite(c: Comparison) -> None:
    """Every number of the answer is finite, or the comparison fails here (never NaN in a 200)."""
    k, s, d = c.konus, c.standards, c.diagnostics
    scalars = [k.base, k.current, k.midpoint, k.reference, c.compensating_variation,
               c.equivalent_variation, c.compensated_income, c.lloyd_moulton_sigma,
               s.base, s.current, s.midpoint, s.reference, s.midpoint_income,
               d.duality_residual, d.expenditure_residual, d.base_bundle_gap]
    scalars += [x for r in c.formulas.values() for x in (r.value, r.bias_points, r.bias_percent)]
    vectors = [c.demands.base, c.demands.current, c.demands.compensated,
               c.demands.substitution_effect, c.demands.income_effect]
    if c.laspeyres_gap_contributions is not None:
        vectors.append(c.laspeyres_gap_contributions)
    if not (all(math.isfinite(x) for x in scalars if x is not None)
            and np.isfinite(np.concatenate(vectors)).all()):
        raise NumericalFailure("comparison", "the model could not be evaluated in floating "
                               "point at these prices and incomes (a result overflowed or is "
                               "undefined); check the inputs' magnitudes")


def compare_budgets(
    family: str,
    parameters: Mapping[str, Any],
    base_prices: npt.ArrayLike,
    current_prices: npt.ArrayLike,
    *,
    base_quantities: npt.ArrayLike | None = None,
    base_shares: npt.ArrayLike | None = None,
    base_expenditure: float | None = None,
    normalise_shares: bool = False,
    share_unit: str = "fraction",
    current_quantities: npt.ArrayLike | None = None,
    current_income: float | None = None,
    reference_income: float | None = None,
    weight_reference: Mapping[str, npt.ArrayLike] | None = None,
    lloyd_moulton_sigma: float | None = None,
    formulas: Sequence[str] | None = None,
    revealed_bounds: bool = False,
) -> tuple[Comparison, Preferences]:
    """The whole comparison from plain arrays, in one call: the base budget (``p0`` with
    quantities ``q0``, or shares ``w0`` and expenditure ``m0``), the family calibrated to it
    (:func:`dualcost.core.preferences.calibrate`), and :func:`compare`.

    ``share_unit`` is the unit of the base shares (``fraction``, ``percent``, ``per_mille``;
    :meth:`BaseBudget.from_shares`). ``weight_reference`` holds any of ``prices``,
    ``quantities`` and ``shares`` of an earlier weight-reference period, and the shares'
    ``share_unit`` (:class:`WeightReference`). Errors name the arguments as
    :func:`compare` and the family do (``p0``, ``q0``, ``w0``, ``m0``, ``pb``, ``qb``, ``wb``,
    ``sigma``, ...).

    ``revealed_bounds``: also bracket the Konüs index at base utility by the two observed
    bundles alone (:func:`with_revealed_bounds`; needs ``current_quantities``).
    """
    if revealed_bounds and current_quantities is None:
        raise InvalidInput("revealed_bounds", "the model-free bounds come from the two observed "
                           "bundles: give the current quantities too")
    budget = base_budget(base_prices, base_quantities=base_quantities, base_shares=base_shares,
                         base_expenditure=base_expenditure, normalise_shares=normalise_shares,
                         share_unit=share_unit)
    model = calibrate(family, budget, parameters)
    weights = None
    if weight_reference:
        size = budget.n_items
        given = dict(weight_reference)
        weights = WeightReference.checked(size, share_unit=str(given.pop("share_unit", "fraction")),
                                          **given)
    result = compare(model, budget, current_prices, current_income=current_income,
                     current_quantities=current_quantities, reference_income=reference_income,
                     weight_reference=weights, lloyd_moulton_sigma=lloyd_moulton_sigma,
                     formulas=formulas)
    if revealed_bounds:
        result = with_revealed_bounds(result, budget)
    return result, model


def with_revealed_bounds(result: Comparison, base: BaseBudget) -> Comparison:
    """The comparison with Varian's bounds (1982) from its two observed bundles: GARP, and the
    bracket on ``K(u0) = e(p1, u0) / e(p0, u0)`` that holds for every utility function
    explaining both choices, beside the model's own ``K(u0)``. A model whose index lies outside
    the bracket cannot have made both choices; a notice says so."""
    q1 = result.demands.formula_current_quantities
    found = revealed_preference(np.vstack([base.prices, result.current_prices]),
                                np.vstack([base.quantities, q1]))
    bracket = found.bounds[1]
    notices = list(result.notices) + [n for n in found.notices if n.code == "garp_failed"]
    k = result.konus.base
    if result.validity.regular and not (bracket.lower * (1 - 1e-9) <= k
                                        <= bracket.upper * (1 + 1e-9)):
        notices.append(Notice("konus_outside_revealed_bounds", f"The model's Konüs index at "
                              f"base utility, {k:.10g}, lies outside [{bracket.lower:.10g}, "
                              f"{bracket.upper:.10g}], the bracket the two observed bundles "
                              "allow for any utility function that explains both (Varian "
                              "1982): the model does not explain the current choice."))
    return replace(result, revealed=found, notices=notices)


def base_budget(base_prices: npt.ArrayLike, *, base_quantities: npt.ArrayLike | None = None,
                base_shares: npt.ArrayLike | None = None, base_expenditure: float | None = None,
                normalise_shares: bool = False, share_unit: str = "fraction") -> BaseBudget:
    """The base budget from ``p0`` with quantities ``q0``, or with shares ``w0`` and
    expenditure ``m0`` (:meth:`BaseBudget.from_quantities`, :meth:`BaseBudget.from_shares`)."""
    if base_quantities is not None:
        return BaseBudget.from_quantities(base_prices, base_quantities,
                                          expenditure=base_expenditure)
    if base_shares is None or base_expenditure is None:
        raise InvalidInput("w0", "give the base quantities, or the base shares with the base "
                           "expenditure")
    return BaseBudget.from_shares(base_prices, base_shares, base_expenditure,
                                  normalise=normalise_shares, unit=share_unit)
