"""A utility function given as a formula: demands and expenditure by numerical optimisation.

References: the closed forms of the same utility functions as the engine's families (Cobb and
Douglas 1928; Arrow, Chenery, Minhas and Solow 1961 for CES; Stone 1954 and Geary 1950 for the
linear expenditure system, with its Slutsky matrix from Deaton and Muellbauer 1980, 3.1); perfect
substitutes, e(p, u) = u min_i p_i / a_i (the expenditure minimisation problem of Mas-Colell,
Whinston and Green 1995, section 3.E; common practice). Random draws are seeded
(``np.random.default_rng(seed)``).
"""

from __future__ import annotations

import numpy as np
import pytest
from numpy.testing import assert_allclose

from dualcost.core.comparison import compare
from dualcost.core.errors import InvalidInput, NumericalFailure
from dualcost.core.preferences import (
    CES,
    FAMILIES,
    BaseBudget,
    CobbDouglas,
    StoneGeary,
    UtilityFormula,
)

NAMES = ["rye_loaf", "peat_briquettes", "ferry_pass", "smoked_eel"]
P0 = np.array([2.5, 8.0, 40.0, 12.5])
GAMMA = np.array([4.0, 2.0, 0.0, 0.0])
BETA = np.array([0.3, 0.35, 0.15, 0.2])
SUPERNUMERARY = 200.0
Q0 = GAMMA + BETA * SUPERNUMERARY / P0
RTOL = 1e-8


def stone_geary_formula() -> str:
    return " + ".join(f"{b!r}*log({n} - {g!r})" if g else f"{b!r}*log({n})"
                      for n, b, g in zip(NAMES, BETA.tolist(), GAMMA.tolist(), strict=True))


def share_formula(base: BaseBudget, sigma: float) -> str:
    """The CES utility of the engine's calibrated share form, written out as a formula:
    u(x) = (sum_i s_i (p0_i x_i / s_i)^rho)^(1/rho), rho = (sigma - 1)/sigma."""
    rho = (sigma - 1.0) / sigma
    terms = [f"{float(s)!r}*({float(p / s)!r}*{n})^{rho!r}"
             for n, s, p in zip(NAMES, base.shares, base.prices, strict=True)]
    return f"({' + '.join(terms)})^(1/{rho!r})"


def assert_same_comparison(ours, ref) -> None:
    for field in ("base", "current", "midpoint"):
        assert_allclose(getattr(ours.konus, field), getattr(ref.konus, field), rtol=RTOL)
    assert_allclose(ours.compensating_variation, ref.compensating_variation, rtol=1e-7, atol=1e-8)
    assert_allclose(ours.equivalent_variation, ref.equivalent_variation, rtol=1e-7, atol=1e-8)
    assert_allclose(ours.demands.compensated, ref.demands.compensated, rtol=1e-7)


@pytest.mark.parametrize("seed", [0, 1, 2])
def test_stone_geary_formula_matches_the_linear_expenditure_system(seed: int) -> None:
    """u = sum beta_i ln(x_i - gamma_i) written as a formula gives the Konüs indices, CV, EV and
    compensated demands of the closed-form linear expenditure system (Stone 1954; Geary 1950)
    to 1e-8, with duality residuals at rounding level."""
    rng = np.random.default_rng(seed)
    base = BaseBudget.from_quantities(P0, Q0)
    p1 = P0 * np.exp(rng.uniform(-0.3, 0.3, 4))
    m1 = base.expenditure * float(rng.uniform(0.95, 1.15))
    model = UtilityFormula.calibrate(base, utility_formula=stone_geary_formula(), item_names=NAMES)
    ours = compare(model, base, p1, current_income=m1)
    ref = compare(StoneGeary.calibrate(base, subsistence_quantities=GAMMA), base, p1,
                  current_income=m1)
    assert_same_comparison(ours, ref)
    assert ours.diagnostics.duality_residual < 1e-10
    assert ours.diagnostics.expenditure_residual < 1e-10
    assert ours.diagnostics.base_bundle_gap < 1e-10
    assert not [n for n in ours.notices if n.code.startswith("slutsky")]
    assert model.parameters()["largest_first_order_residual"] < 1e-10


@pytest.mark.parametrize("sigma", [0.4, 2.5])
def test_ces_formula_matches_the_ces_family(sigma: float) -> None:
    """The CES utility in share form (Arrow, Chenery, Minhas and Solow 1961) as a formula gives
    the closed-form CES comparison to 1e-8."""
    rng = np.random.default_rng(5)
    base = BaseBudget.from_quantities(P0, rng.uniform(1.0, 10.0, 4))
    p1 = P0 * np.exp(rng.uniform(-0.4, 0.4, 4))
    model = UtilityFormula.calibrate(base, utility_formula=share_formula(base, sigma),
                                     item_names=NAMES)
    assert_same_comparison(compare(model, base, p1), compare(CES.calibrate(base, sigma=sigma),
                                                             base, p1))


def test_cobb_douglas_formula() -> None:
    """u = prod x_i^{w_i} (Cobb and Douglas 1928), written with powers, gives the Cobb-Douglas
    comparison to 1e-8."""
    rng = np.random.default_rng(6)
    base = BaseBudget.from_quantities(P0, rng.uniform(1.0, 10.0, 4))
    text = " * ".join(f"{n}^{float(w)!r}" for n, w in zip(NAMES, base.shares, strict=True))
    model = UtilityFormula.calibrate(base, utility_formula=text, item_names=NAMES)
    p1 = P0 * np.exp(rng.uniform(-0.4, 0.4, 4))
    assert_same_comparison(compare(model, base, p1), compare(CobbDouglas.calibrate(base), base, p1))


def test_slutsky_matrix_from_the_bordered_hessian() -> None:
    """S = lambda [N^-1]_xx at the optimum equals the linear expenditure system's closed form
    S_ij = (m - p.gamma)(beta_i beta_j - delta_ij beta_i)/(p_i p_j) (Deaton and Muellbauer 1980,
    3.1) to 1e-6 (the Hessian is by central differences)."""
    base = BaseBudget.from_quantities(P0, Q0)
    model = UtilityFormula.calibrate(base, utility_formula=stone_geary_formula(), item_names=NAMES)
    p, m = P0 * np.array([1.1, 0.9, 1.2, 1.0]), 240.0
    closed = StoneGeary.calibrate(base, subsistence_quantities=GAMMA).slutsky_matrix(p, m)
    assert_allclose(model.slutsky_matrix(p, m), closed, rtol=1e-6, atol=1e-7 * np.abs(closed).max())


def test_perfect_substitutes_reach_a_corner() -> None:
    """u = 2 a + b: the household buys only the item with the lower p_i / a_i, and
    e(p, u) = u min(p_a / 2, p_b) (perfect substitutes; common practice)."""
    base = BaseBudget.from_quantities([1.0, 1.0], [10.0, 0.0])
    model = UtilityFormula.calibrate(base, utility_formula="2*a + b", item_names=["a", "b"])
    for p in (np.array([1.5, 1.0]), np.array([3.0, 1.0])):
        x = model.marshallian(p, 30.0)
        cheaper = int(np.argmin(p / np.array([2.0, 1.0])))
        assert_allclose(x[cheaper], 30.0 / p[cheaper], rtol=1e-8)
        assert_allclose(x[1 - cheaper], 0.0, atol=1e-8)
        assert_allclose(model.expenditure(p, 20.0), 20.0 * min(p[0] / 2, p[1]), rtol=1e-8)


def test_not_quasi_concave_utility_is_reported() -> None:
    """u = a^2 + b^2 is not quasi-concave: its optimum is a corner and the starting bundles
    disagree, which the answer reports (several_optima; Mas-Colell, Whinston and Green 1995,
    3.B: demand is a best choice only under quasi-concavity)."""
    base = BaseBudget.from_quantities([1.0, 1.3], [5.0, 5.0])
    model = UtilityFormula.calibrate(base, utility_formula="a^2 + b^2", item_names=["a", "b"],
                                     starts=5)
    x = model.marshallian(base.prices, base.expenditure)
    assert_allclose(x, [base.expenditure, 0.0], atol=1e-6)
    codes = [n.code for n in model.regularity(base.prices, base.expenditure)]
    assert "several_optima" in codes


def test_registered_and_documented() -> None:
    """The family is listed with its parameters (our rule: the catalogue reads parameter_specs)."""
    assert FAMILIES["utility_formula"] is UtilityFormula
    assert [s.name for s in UtilityFormula.parameter_specs][0] == "utility_formula"


# -- bad input --------------------------------------------------------------------------------


@pytest.mark.parametrize("params,name,words", [
    ({}, "utility_formula", ["required"]),
    ({"utility_formula": "log(rye_loaf) + log(peat)"}, "utility_formula",
     ["unknown name 'peat'", "character 21", "did you mean 'peat_briquettes'"]),
    ({"utility_formula": "log(rye_loaf - 100) + ferry_pass"}, "utility_formula",
     ["logarithm of a negative number", "at the base bundle"]),
    ({"utility_formula": "3 + 4"}, "utility_formula", ["does not depend on any item"]),
    ({"utility_formula": "rye_loaf", "starts": 1}, "starts", ["at least 2"]),
    ({"utility_formula": "rye_loaf", "starts": 2.5}, "starts", ["whole number"]),
    ({"utility_formula": "(" * 1000 + "rye_loaf" + ")" * 1000}, "utility_formula", ["nested"]),
])
def test_bad_parameters(params: dict, name: str, words: list[str]) -> None:
    """Each rule is one sentence naming the parameter (our rules)."""
    base = BaseBudget.from_quantities(P0, Q0)
    with pytest.raises(InvalidInput) as info:
        UtilityFormula.calibrate(base, item_names=NAMES, **params)
    assert info.value.parameter == name
    for w in words:
        assert w in info.value.rule, (w, info.value.rule)


def test_a_living_standard_out_of_reach() -> None:
    """Below the subsistence cost the formula is undefined everywhere affordable: the search
    finds no bundle and says so, naming the formula."""
    base = BaseBudget.from_quantities(P0, Q0)
    model = UtilityFormula.calibrate(base, utility_formula=stone_geary_formula(), item_names=NAMES)
    with pytest.raises(InvalidInput) as info:
        model.marshallian(P0, float(P0 @ GAMMA) * 0.8)
    assert info.value.parameter == "utility_formula" and "could not be found" in info.value.rule


def test_deadline_stops_the_optimisation() -> None:
    """A deadline that has passed stops the solve with NumericalFailure("deadline") (our rule)."""
    base = BaseBudget.from_quantities(P0, Q0)
    model = UtilityFormula.calibrate(base, utility_formula=stone_geary_formula(), item_names=NAMES,
                                     deadline_seconds=1e-9)
    with pytest.raises(NumericalFailure) as info:
        model.marshallian(P0 * 1.1, 250.0)
    assert info.value.what == "deadline"
