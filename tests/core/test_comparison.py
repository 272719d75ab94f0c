"""One comparison (dualcost.core.comparison): each figure of the record against its definition,
computed here independently from the family's closed form.

Sources named beside each check: the Konüs (1924) index and its living standards; compensating
and equivalent variation (Hicks 1942; the definitions of Mas-Colell, Whinston and Green 1995,
3.I, with the sign turned, as the module says); the Hicks decomposition of a demand change into a
substitution and an income part (Slutsky 1915; Hicks 1939); Euler's theorem for a function
homogeneous of degree one, which makes the item contributions add up; the midpoint living
standard of the module docstring (our definition, following Diewert 1976 and Caves, Christensen
and Diewert 1982). Closed forms: Cobb-Douglas (Cobb and Douglas 1928) and Stone-Geary (Stone
1954; Geary 1950).
"""

from __future__ import annotations

import numpy as np
import pytest
from numpy.testing import assert_allclose

from dualcost.core.comparison import WeightReference, compare, compare_budgets
from dualcost.core.errors import InvalidInput
from dualcost.core.preferences import BaseBudget, calibrate

P0 = np.array([2.40, 9.00, 38.0, 4.10])
Q0 = np.array([12.0, 6.0, 1.0, 3.0])
P1 = np.array([2.52, 12.15, 41.0, 3.90])
RTOL = 1e-12


def _stone_geary(frisch: float = -2.5):
    base = BaseBudget.from_quantities(P0, Q0)
    return base, calibrate("stone_geary", base, {"frisch": frisch})


def test_cobb_douglas_figures_equal_their_closed_forms() -> None:
    """Cobb-Douglas with exponents a = base shares: e(p, u) = u prod (p/p0)^a (Cobb and Douglas
    1928), so K = prod (p1/p0)^a at every standard; CV = e(p1,u0) - m1 and EV = m0 - e(p0,u1)
    (Hicks 1942, losses positive), with u0 = m0 and u1 = m1 / K."""
    base = BaseBudget.from_quantities(P0, Q0)
    m0 = float(P0 @ Q0)
    a = P0 * Q0 / m0
    k = float(np.prod((P1 / P0) ** a))
    m1 = 1.07 * m0
    r = compare(calibrate("cobb_douglas", base), base, P1, current_income=m1)
    assert_allclose([r.konus.base, r.konus.current, r.konus.midpoint], [k, k, k], rtol=RTOL)
    assert_allclose(r.compensating_variation, m0 * k - m1, rtol=1e-11)
    assert_allclose(r.equivalent_variation, m0 - m1 / k, rtol=1e-11)
    assert_allclose(r.compensated_income, m0 * k, rtol=RTOL)
    assert r.konus.homothetic and any(n.code == "homothetic" for n in r.notices)


def test_stone_geary_konus_indices_at_each_living_standard() -> None:
    """Stone-Geary: e(p, u) = p.gamma + u B(p) with B(p) = prod (p/p0)^beta (Stone 1954;
    Geary 1950); K(u) = e(p1, u) / e(p0, u) (Konüs 1924) at u0 = v(p0, m0), at
    u1 = v(p1, m1), and at the midpoint standard whose base-price cost is the geometric mean
    of the two, e(p0, u*) = (e(p0, u0) e(p0, u1))^(1/2)."""
    base, model = _stone_geary()
    gamma, beta = model.subsistence, model.marginal_shares
    m0, m1 = float(P0 @ Q0), 1.04 * float(P0 @ Q0)

    def e(p: np.ndarray, u: float) -> float:
        return float(p @ gamma + u * np.prod((p / P0) ** beta))

    u0 = m0 - P0 @ gamma
    u1 = (m1 - P1 @ gamma) / np.prod((P1 / P0) ** beta)
    u_mid = np.sqrt(e(P0, u0) * e(P0, u1)) - P0 @ gamma
    r = compare(model, base, P1, current_income=m1)
    assert_allclose(r.konus.base, e(P1, u0) / e(P0, u0), rtol=RTOL)
    assert_allclose(r.konus.current, e(P1, u1) / e(P0, u1), rtol=RTOL)
    assert_allclose(r.konus.midpoint, e(P1, u_mid) / e(P0, u_mid), rtol=1e-11)
    assert_allclose(r.standards.midpoint_income, np.sqrt(e(P0, u0) * e(P0, u1)), rtol=RTOL)
    assert not r.konus.homothetic


def test_hicks_decomposition_adds_up_to_the_demand_change() -> None:
    """x(p1,m1) - x(p0,m0) = [h(p1,u0) - x(p0,m0)] + [x(p1,m1) - h(p1,u0)] (Slutsky 1915;
    Hicks 1939): the substitution part moves along the base indifference surface."""
    base, model = _stone_geary()
    r = compare(model, base, P1, current_income=1.1 * base.expenditure)
    d = r.demands
    assert_allclose(d.substitution_effect + d.income_effect, d.current - d.base, atol=1e-12)
    assert_allclose(d.compensated, model.hicksian(P1, model.indirect_utility(P0, base.expenditure)),
                    rtol=RTOL)
    # The compensated bundle costs e(p1, u0) at current prices.
    assert_allclose(P1 @ d.compensated, r.compensated_income, rtol=RTOL)


@pytest.mark.parametrize("family,parameters", [
    ("ces", {"sigma": 0.6}), ("stone_geary", {"frisch": -2.0}),
    ("translog", {"sigma": 0.8}), ("quadratic", {"sigma": 0.5}),
])
def test_item_contributions_add_up_to_the_laspeyres_gap(family, parameters) -> None:
    """c_i = p1_i q0_i / p0.q0 - p1_i h_i(p1,u0) / e(p0,u0) add up to P_L - K(u0), because
    e(p1, u0) = p1 . h(p1, u0) (Euler's theorem: e is homogeneous of degree one in prices)."""
    base = BaseBudget.from_quantities(P0, Q0)
    r = compare(calibrate(family, base, parameters), base, P1)
    gap = r.formulas["laspeyres"].value - r.konus.base
    assert r.laspeyres_gap_contributions is not None
    assert_allclose(float(np.sum(r.laspeyres_gap_contributions)), gap, rtol=1e-9, atol=1e-13)


def test_bias_is_measured_against_the_formulas_own_target() -> None:
    """Each formula's bias is 100 (P - K) in index points and 100 (P/K - 1) percent, against
    the Konüs index it approximates: base for Laspeyres-type, current for Paasche, midpoint for
    the symmetric ones (CPI Manual 2004, 17.9-17.20; common practice for the percent form)."""
    base, model = _stone_geary()
    r = compare(model, base, P1, current_income=1.05 * base.expenditure)
    targets = {"laspeyres": r.konus.base, "paasche": r.konus.current, "fisher": r.konus.midpoint}
    for name, k in targets.items():
        f = r.formulas[name]
        assert f.konus == k
        assert_allclose(f.bias_points, 100.0 * (f.value - k), rtol=RTOL)
        assert_allclose(f.bias_percent, 100.0 * (f.value / k - 1.0), rtol=RTOL)


def test_current_income_defaults_and_observed_quantities() -> None:
    """Without a current income, m1 is the value of observed current quantities, else m0
    (the answer says the formulas used the model's demands then: common practice)."""
    base, model = _stone_geary()
    plain = compare(model, base, P1)
    assert plain.standards.current_income == base.expenditure
    assert any(n.code == "current_quantities_from_model" for n in plain.notices)
    q1 = np.array([11.0, 5.0, 1.0, 3.5])
    observed = compare(model, base, P1, current_quantities=q1)
    assert_allclose(observed.standards.current_income, P1 @ q1, rtol=RTOL)
    assert observed.demands.current_quantities_observed
    with pytest.raises(InvalidInput) as info:
        compare(model, base, P1, current_quantities=q1, current_income=2 * float(P1 @ q1))
    assert info.value.parameter == "m1"


def test_a_reference_income_names_a_further_living_standard() -> None:
    """K at the standard that ``reference_income`` buys at base prices, u = v(p0, m_ref)."""
    base, model = _stone_geary()
    m_ref = 1.5 * base.expenditure
    r = compare(model, base, P1, reference_income=m_ref)
    u = model.indirect_utility(P0, m_ref)
    assert_allclose(r.konus.reference, model.expenditure(P1, u) / model.expenditure(P0, u),
                    rtol=RTOL)


def test_formulas_asked_for_that_cannot_be_computed_are_errors() -> None:
    """Lowe needs a weight-reference basket: asked for without one it is an error naming the
    formula's position; by default it is left out with a notice (nothing dropped silently)."""
    base, model = _stone_geary()
    with pytest.raises(InvalidInput) as info:
        compare(model, base, P1, formulas=["laspeyres", "lowe"])
    assert (info.value.parameter, info.value.index) == ("formulas", 1)
    r = compare(model, base, P1)
    assert "lowe" not in r.formulas
    assert any(n.code == "formula_not_computed" and "Lowe" in n.message for n in r.notices)
    qb = np.array([10.0, 7.0, 1.0, 2.0])
    lowe = compare(model, base, P1, weight_reference=WeightReference.checked(4, quantities=qb))
    assert_allclose(lowe.formulas["lowe"].value, (P1 @ qb) / (P0 @ qb), rtol=RTOL)


def test_the_whole_comparison_in_one_call_equals_the_steps() -> None:
    """compare_budgets (budget, calibration, comparison from plain arrays) gives the same
    record as the three steps one after another."""
    w0 = P0 * Q0 / float(P0 @ Q0)
    one, model = compare_budgets("ces", {"sigma": 0.6}, P0, P1, base_shares=w0,
                                 base_expenditure=float(P0 @ Q0))
    base = BaseBudget.from_shares(P0, w0, float(P0 @ Q0))
    steps = compare(calibrate("ces", base, {"sigma": 0.6}), base, P1)
    assert one.konus == steps.konus
    assert {k: f.value for k, f in one.formulas.items()} == {
        k: f.value for k, f in steps.formulas.items()}
    assert model.family == "ces"
