"""Homogeneous quadratic preferences against published results and closed forms.

Sources are named in each test's docstring. Finite differences are central, with relative steps
chosen so that truncation and rounding errors are both far below the tolerances asserted.
"""

from __future__ import annotations

import numpy as np
import pytest
from numpy.testing import assert_allclose

from dualcost.core.errors import InvalidInput
from dualcost.core.indices import IndexData, fisher, laspeyres, paasche
from dualcost.core.preferences import FAMILIES, BaseBudget, calibrate
from dualcost.core.preferences.quadratic import HomogeneousQuadratic

from .numeric_helpers import (
    assert_closed_form_slutsky,
    assert_duality_identities,
    assert_shephard_and_roy,
    ces_allen_elasticities,
    moved_prices,
    numeric_allen_elasticities,
    seeded_budget,
)

CASES = [(seed, sigma) for seed in (1, 2) for sigma in (0.0, 0.4, 1.0, 1.5)]


@pytest.mark.parametrize(("seed", "sigma"), CASES)
def test_base_bundle_is_the_optimal_choice(seed: int, sigma: float) -> None:
    """Calibration: c(p0) = 1 and x(p0, m0) = q0 to 1e-12, since B p0 = q0 / E (closed form of
    the calibrated B); the reported gap is zero."""
    base = seeded_budget(seed)
    model = HomogeneousQuadratic.calibrate(base, sigma=sigma)
    assert_allclose(model.unit_cost(base.prices), 1.0, rtol=1e-14, atol=0.0)
    assert_allclose(model.marshallian(base.prices, base.expenditure), base.quantities,
                    rtol=1e-12, atol=0.0)
    assert model.parameters()["base_quantity_gap"] < 1e-13


@pytest.mark.parametrize(("seed", "sigma"), CASES)
def test_cost_is_mean_squared_less_sigma_times_variance(seed: int, sigma: float) -> None:
    """c(p)^2 = (sum s_i rho_i)^2 - sigma Var_s(rho) with rho = p / p0 and base shares s
    (algebra of the calibrated B, stated in the module docstring)."""
    base = seeded_budget(seed)
    model = HomogeneousQuadratic.calibrate(base, sigma=sigma)
    rho = moved_prices(seed, base) / base.prices
    s = base.shares
    mean = float(s @ rho)
    variance = float(s @ (rho - mean) ** 2)
    assert_allclose(model.unit_cost(rho * base.prices) ** 2, mean**2 - sigma * variance,
                    rtol=1e-13, atol=0.0)


@pytest.mark.parametrize(("seed", "sigma"), CASES)
def test_duality_identities(seed: int, sigma: float) -> None:
    """e(p, v(p, m)) = m, v(p, e(p, u)) = u, h(p, u) = x(p, e(p, u)), p . x(p, m) = m and
    e(t p, u) = t e(p, u) (Mas-Colell, Whinston and Green 1995, 3.E and 3.G)."""
    base = seeded_budget(seed)
    model = HomogeneousQuadratic.calibrate(base, sigma=sigma)
    p = moved_prices(seed, base)
    m = 1.3 * base.expenditure
    assert_duality_identities(model, p, m)
    u = model.indirect_utility(p, m)
    assert_allclose(model.expenditure(3.0 * p, u), 3.0 * m, rtol=1e-13, atol=0.0)


@pytest.mark.parametrize(("seed", "sigma"), CASES)
def test_shephard_and_roy(seed: int, sigma: float) -> None:
    """Shephard's lemma h = grad_p e(p, u) (Shephard 1953) and Roy's identity
    x_i = -(dv/dp_i)/(dv/dm) (Roy 1947), by central differences (Mas-Colell, Whinston and Green
    1995, 3.G.1 and 3.G.4)."""
    base = seeded_budget(seed)
    model = HomogeneousQuadratic.calibrate(base, sigma=sigma)
    p = moved_prices(seed, base, spread=0.3)
    m = base.expenditure
    assert_shephard_and_roy(model, p, m, rtol=1e-7)


@pytest.mark.parametrize(("seed", "sigma"), [(s, g) for s, g in CASES if g > 0.0])
def test_slutsky_matrix(seed: int, sigma: float) -> None:
    """The closed-form Slutsky matrix equals the central-difference derivative of h and the
    Slutsky equation S = D_p x + D_m x x' (Slutsky 1915); it is symmetric, negative semidefinite
    and S p = 0 (Mas-Colell, Whinston and Green 1995, 2.F and 3.G)."""
    base = seeded_budget(seed)
    model = HomogeneousQuadratic.calibrate(base, sigma=sigma)
    p = moved_prices(seed, base, spread=0.3)
    m = base.expenditure
    assert_closed_form_slutsky(model, p, m)
    assert model.regularity(p, m) == []


@pytest.mark.parametrize("sigma", [0.0, 0.4, 1.0, 2.0])
def test_allen_elasticities_at_base_equal_sigma(sigma: float) -> None:
    """The Allen elasticities c c_ij / (c_i c_j) at the base (Allen 1938; Uzawa 1962), from
    finite differences of c, are sigma off the diagonal and -sigma (1 - s_i) / s_i on it, as for
    CES (closed form of the calibrated B)."""
    base = seeded_budget(3, n=4)
    model = HomogeneousQuadratic.calibrate(base, sigma=sigma)
    allen = numeric_allen_elasticities(model.unit_cost, base.prices)
    expected = ces_allen_elasticities(sigma, base.shares)
    scale = max(1.0, float(np.max(np.abs(expected))))
    assert_allclose(allen, expected, rtol=0.0, atol=2e-6 * scale)
    assert model.substitution_elasticity == sigma


@pytest.mark.parametrize(("seed", "sigma"), CASES)
def test_fisher_is_exact(seed: int, sigma: float) -> None:
    """The Fisher index of the optimal quantities at (p0, m0) and (p1, m1) equals c(p1) / c(p0)
    to 1e-10 (Diewert 1976, "Exact and superlative index numbers"; Konüs and Byushgens 1926)."""
    base = seeded_budget(seed, n=5)
    model = HomogeneousQuadratic.calibrate(base, sigma=sigma)
    p0 = base.prices
    for k in range(3):
        p1 = moved_prices(seed + 10 * k, base)
        q0 = model.marshallian(p0, base.expenditure)
        q1 = model.marshallian(p1, (0.8 + 0.5 * k) * base.expenditure)
        value = fisher(IndexData(p0, p1, q0, q1))
        assert_allclose(value, model.unit_cost(p1) / model.unit_cost(p0), rtol=1e-10, atol=0.0)


def test_leontief_limit_makes_laspeyres_and_paasche_exact() -> None:
    """With sigma = 0 the model is Leontief: Laspeyres = Paasche = Konüs (Konüs 1924; CPI Manual
    2004, ch. 17)."""
    base = seeded_budget(4)
    model = HomogeneousQuadratic.calibrate(base, sigma=0.0)
    p1 = moved_prices(4, base)
    q1 = model.marshallian(p1, 2.0 * base.expenditure)
    data = IndexData(base.prices, p1, base.quantities, q1)
    konus = model.unit_cost(p1) / model.unit_cost(base.prices)
    assert_allclose([laspeyres(data), paasche(data)], [konus, konus], rtol=1e-13, atol=0.0)


@pytest.mark.parametrize(("seed", "sigma"), CASES)
def test_direct_utility_is_maximised_by_the_demands(seed: int, sigma: float) -> None:
    """f(x) = (x' B^-1 x)^(1/2) is the dual of c(p) = (p' B p)^(1/2) (Diewert 1976): f(q0) = m0,
    f(x(p, m)) = v(p, m), and every other bundle nearby on the budget line gives less utility
    (utility maximisation, Mas-Colell, Whinston and Green 1995, 3.D). sigma = 0 uses the
    Leontief form."""
    base = seeded_budget(seed)
    model = HomogeneousQuadratic.calibrate(base, sigma=sigma)
    assert_allclose(model.direct_utility(base.quantities), base.expenditure, rtol=1e-12, atol=0.0)
    p = moved_prices(seed, base, spread=0.3)
    m = base.expenditure
    x = model.marshallian(p, m)
    best = model.direct_utility(x)
    assert_allclose(best, model.indirect_utility(p, m), rtol=1e-12, atol=0.0)
    rng = np.random.default_rng(seed)
    for _ in range(20):
        d = rng.normal(size=p.size)
        d -= (p @ d) / (p @ p) * p
        d *= 0.05 * float(np.min(x)) / float(np.max(np.abs(d)))
        assert model.direct_utility(x + d) < best


def test_cost_function_undefined_far_from_base_raises() -> None:
    """Where p' B p <= 0 the cost function does not exist: InvalidInput("prices") with the
    value, never NaN and never a numpy warning (closed form: sigma Var_s(rho) >= mean^2)."""
    base = BaseBudget.from_shares([1.0, 1.0], [0.5, 0.5], 10.0)
    model = HomogeneousQuadratic.calibrate(base, sigma=3.0)
    p = np.array([1.0, 10.0])  # mean 5.5, variance 20.25: 30.25 - 60.75 < 0
    for call in (lambda: model.unit_cost(p), lambda: model.marshallian(p, 10.0),
                 lambda: model.hicksian(p, 1.0), lambda: model.indirect_utility(p, 10.0)):
        with pytest.raises(InvalidInput) as info:
            call()
        assert info.value.parameter == "prices"
        assert "p'Bp" in info.value.rule


def test_regularity_reports_negative_shares() -> None:
    """A demand turns negative once rho_i > (1 + sigma) / sigma * sum s_j rho_j (closed form of
    B p), while p' B p is still positive; regularity says so. At the base there is no notice."""
    base = BaseBudget.from_shares([1.0, 1.0], [0.9, 0.1], 10.0)
    model = HomogeneousQuadratic.calibrate(base, sigma=3.0)
    assert model.regularity(base.prices, 10.0) == []
    p1 = np.array([1.0, 1.6])
    assert model.marshallian(p1, 10.0)[1] < 0.0
    codes = [n.code for n in model.regularity(p1, 10.0)]
    assert codes == ["shares_outside_unit_interval"]


def test_leontief_regularity_has_no_rounding_notice() -> None:
    """With sigma = 0 the Slutsky matrix is zero (Leontief: no substitution); rounding noise must
    not read as a positive eigenvalue (Mas-Colell, Whinston and Green 1995, 3.G)."""
    base = seeded_budget(5)
    model = HomogeneousQuadratic.calibrate(base, sigma=0.0)
    for k in range(5):
        p = moved_prices(5 + k, base)
        assert model.regularity(p, base.expenditure) == []


def test_explicit_cost_matrix_is_scaled_and_reports_the_gap() -> None:
    """An explicit B is scaled so that c(p0) = 1; a multiple of the calibrated B gives the same
    model with zero gap, and a B for which q0 is not optimal reports
    max|x(p0, m0) - q0| / max q0 (definition in the module)."""
    base = seeded_budget(6)
    calibrated = HomogeneousQuadratic.calibrate(base, sigma=0.7)
    scaled = HomogeneousQuadratic.calibrate(base, cost_matrix=7.0 * calibrated.cost_matrix)
    assert_allclose(scaled.cost_matrix, calibrated.cost_matrix, rtol=1e-14, atol=1e-16)
    assert scaled.parameters()["base_quantity_gap"] < 1e-13
    assert scaled.substitution_elasticity is None
    identity = HomogeneousQuadratic.calibrate(base, cost_matrix=np.eye(4))
    assert_allclose(identity.unit_cost(base.prices), 1.0, rtol=1e-14, atol=0.0)
    x = identity.marshallian(base.prices, base.expenditure)
    gap = np.max(np.abs(x - base.quantities)) / np.max(base.quantities)
    assert_allclose(identity.parameters()["base_quantity_gap"], gap, rtol=1e-14, atol=0.0)
    assert gap > 0.01


@pytest.mark.parametrize(
    ("params", "name", "index"),
    [
        ({}, "sigma", None),
        ({"sigma": -0.5}, "sigma", None),
        ({"sigma": "a lot"}, "sigma", None),
        ({"sigma": 0.5, "cost_matrix": np.eye(4)}, "cost_matrix", None),
        ({"cost_matrix": np.eye(3)}, "cost_matrix", None),
        ({"cost_matrix": np.triu(np.ones((4, 4)))}, "cost_matrix", (0, 1)),
        ({"cost_matrix": -np.eye(4)}, "cost_matrix", None),
        ({"gamma": np.eye(4)}, "gamma", None),
    ],
)
def test_invalid_parameters_name_the_parameter(params: dict, name: str, index) -> None:
    """Every rule broken raises InvalidInput with the parameter's name (common practice)."""
    base = BaseBudget.from_quantities([1.0, 2.0, 3.0, 4.0], [2.0, 2.0, 2.0, 2.0])
    with pytest.raises(InvalidInput) as info:
        calibrate("quadratic", base, params)
    assert info.value.parameter == name
    assert info.value.index == index


def test_registered_under_its_family_name() -> None:
    """The registry finds the family by name (common practice for plug-in registries)."""
    assert FAMILIES["quadratic"] is HomogeneousQuadratic
    assert HomogeneousQuadratic.homothetic
