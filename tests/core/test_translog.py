"""Homothetic translog preferences against published results and closed forms.

Sources are named in each test's docstring. Finite differences are central, with relative steps
chosen so that truncation and rounding errors are both far below the tolerances asserted.
"""

from __future__ import annotations

import numpy as np
import pytest
from numpy.testing import assert_allclose

from dualcost.core.errors import InvalidInput, NumericalFailure
from dualcost.core.indices import IndexData, tornqvist
from dualcost.core.preferences import FAMILIES, BaseBudget, calibrate
from dualcost.core.preferences.translog import Translog

from .numeric_helpers import (
    assert_closed_form_slutsky,
    assert_duality_identities,
    assert_shephard_and_roy,
    ces_allen_elasticities,
    moved_prices,
    numeric_allen_elasticities,
    seeded_budget,
)

CASES = [(seed, sigma) for seed in (1, 2) for sigma in (0.0, 0.6, 1.0, 2.0)]


@pytest.mark.parametrize(("seed", "sigma"), CASES)
def test_base_bundle_is_the_optimal_choice(seed: int, sigma: float) -> None:
    """Calibration: c(p0) = 1 and x(p0, m0) = q0 to 1e-12 (closed form of the translog shares,
    Christensen, Jorgenson and Lau 1975)."""
    base = seeded_budget(seed)
    model = Translog.calibrate(base, sigma=sigma)
    assert model.unit_cost(base.prices) == 1.0
    assert_allclose(model.marshallian(base.prices, base.expenditure), base.quantities,
                    rtol=1e-12, atol=0.0)


@pytest.mark.parametrize(("seed", "sigma"), CASES)
def test_duality_identities(seed: int, sigma: float) -> None:
    """e(p, v(p, m)) = m, v(p, e(p, u)) = u, h(p, u) = x(p, e(p, u)), p . x(p, m) = m and
    e(t p, u) = t e(p, u) (Mas-Colell, Whinston and Green 1995, 3.E and 3.G)."""
    base = seeded_budget(seed)
    model = Translog.calibrate(base, sigma=sigma)
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
    model = Translog.calibrate(base, sigma=sigma)
    p = moved_prices(seed, base)
    m = base.expenditure
    assert_shephard_and_roy(model, p, m, rtol=1e-7)


@pytest.mark.parametrize(("seed", "sigma"), [(s, g) for s, g in CASES if g > 0.0])
def test_slutsky_matrix(seed: int, sigma: float) -> None:
    """The closed-form Slutsky matrix equals the central-difference derivative of h and the
    Slutsky equation S = D_p x + D_m x x' (Slutsky 1915); it is symmetric, negative semidefinite
    and S p = 0 (Mas-Colell, Whinston and Green 1995, 2.F and 3.G). Checked near the base, where
    a translog with sigma > 0 is regular."""
    base = seeded_budget(seed)
    model = Translog.calibrate(base, sigma=sigma)
    p = moved_prices(seed, base, spread=0.2)
    m = base.expenditure
    assert_closed_form_slutsky(model, p, m)
    assert model.regularity(p, m) == []


@pytest.mark.parametrize("sigma", [0.0, 0.3, 0.6, 1.0, 2.5])
def test_allen_elasticities_at_base_equal_sigma(sigma: float) -> None:
    """With Gamma = (1 - sigma)(diag(w0) - w0 w0'), the Allen elasticities c c_ij / (c_i c_j) at
    the base (Allen 1938; Uzawa 1962), from finite differences of c, are sigma off the diagonal
    and -sigma (1 - w0_i) / w0_i on it, as for CES (closed form)."""
    base = seeded_budget(3, n=4)
    model = Translog.calibrate(base, sigma=sigma)
    allen = numeric_allen_elasticities(model.unit_cost, base.prices)
    expected = ces_allen_elasticities(sigma, base.shares)
    scale = max(1.0, float(np.max(np.abs(expected))))
    assert_allclose(allen, expected, rtol=0.0, atol=2e-6 * scale)
    assert model.substitution_elasticity == sigma


@pytest.mark.parametrize("seed", [4, 5, 6])
def test_tornqvist_is_exact(seed: int) -> None:
    """The Törnqvist index of the optimal quantities at (p0, m0) and (p1, m1) equals
    c(p1) / c(p0) to 1e-10 (Diewert 1976, "Exact and superlative index numbers"), for a Gamma
    from sigma and for a general symmetric zero-row-sum Gamma."""
    base = seeded_budget(seed, n=5)
    rng = np.random.default_rng(seed)
    z = rng.normal(size=(5, 5))
    centre = np.eye(5) - 1.0 / 5
    general = 0.02 * centre @ (z + z.T) @ centre
    for model in (Translog.calibrate(base, sigma=0.6), Translog.calibrate(base, gamma=general)):
        p0 = base.prices
        p1 = moved_prices(seed, base)
        q0 = model.marshallian(p0, base.expenditure)
        q1 = model.marshallian(p1, 1.7 * base.expenditure)
        value = tornqvist(IndexData(p0, p1, q0, q1))
        assert_allclose(value, model.unit_cost(p1) / model.unit_cost(p0), rtol=1e-10, atol=0.0)


def test_explicit_gamma_equals_the_sigma_form() -> None:
    """Giving Gamma = (1 - sigma)(diag(w0) - w0 w0') explicitly gives the same model (closed
    form); rows summing to zero within 1e-6 are projected to sum to zero exactly."""
    base = seeded_budget(7)
    w0 = base.shares
    gamma = 0.4 * (np.diag(w0) - np.outer(w0, w0))
    a = Translog.calibrate(base, sigma=0.6)
    b = Translog.calibrate(base, gamma=gamma + 1e-8)
    assert_allclose(b.gamma.sum(axis=1), 0.0, rtol=0.0, atol=1e-15)
    p = moved_prices(7, base)
    assert_allclose(b.unit_cost(p), a.unit_cost(p), rtol=1e-12, atol=0.0)
    assert b.substitution_elasticity is None
    assert b.parameters()["sigma"] is None


def test_regularity_reports_negative_shares_and_a_non_concave_cost() -> None:
    """Far from the base, translog shares w0 + Gamma r leave [0, 1] (Christensen, Jorgenson and
    Lau 1975 note the form is only locally regular); with sigma = 0 the Slutsky matrix
    Gamma + w w' - diag(w) loses negative semidefiniteness as soon as w moves from w0
    (Mas-Colell, Whinston and Green 1995, 3.G). At the base there is no notice."""
    base = seeded_budget(8)
    p0, m0 = base.prices, base.expenditure
    high = Translog.calibrate(base, sigma=3.0)
    assert high.regularity(p0, m0) == []
    p1 = p0.copy()
    p1[0] *= np.exp(2.0)
    codes = [n.code for n in high.regularity(p1, m0)]
    assert "shares_outside_unit_interval" in codes
    fixed = Translog.calibrate(base, sigma=0.0)
    assert fixed.regularity(p0, m0) == []
    codes = [n.code for n in fixed.regularity(moved_prices(8, base), m0)]
    assert codes == ["slutsky_not_negative_semidefinite"]


def test_extreme_prices_fail_cleanly() -> None:
    """Where exp(ln c) or exp(-ln c) leaves the floating-point range (overflow, or underflow to
    zero) the model raises NumericalFailure and emits no numpy warning (pytest turns warnings
    into errors; common practice)."""
    base = seeded_budget(9)
    model = Translog.calibrate(base, sigma=0.0)
    p = base.prices * np.array([1e300, 1e-300, 1.0, 1.0])
    with pytest.raises(NumericalFailure):
        model.expenditure(p, 1.0)
    with pytest.raises(NumericalFailure):
        model.indirect_utility(p, 1.0)


def _with_asymmetry(n: int) -> np.ndarray:
    g = np.zeros((n, n))
    g[0, 1] = 0.1
    return g


@pytest.mark.parametrize(
    ("params", "name", "index"),
    [
        ({}, "sigma", None),
        ({"sigma": -0.1}, "sigma", None),
        ({"sigma": float("inf")}, "sigma", None),
        ({"sigma": 0.5, "gamma": np.zeros((4, 4))}, "gamma", None),
        ({"gamma": np.zeros((3, 3))}, "gamma", None),
        ({"gamma": _with_asymmetry(4)}, "gamma", (0, 1)),
        ({"gamma": np.diag([0.1, 0.0, 0.0, 0.0])}, "gamma", 0),
        ({"frisch": -2.0}, "frisch", None),
    ],
)
def test_invalid_parameters_name_the_parameter(params: dict, name: str, index) -> None:
    """Every rule broken raises InvalidInput with the parameter's name (common practice)."""
    base = BaseBudget.from_quantities([1.0, 2.0, 3.0, 4.0], [2.0, 2.0, 2.0, 2.0])
    with pytest.raises(InvalidInput) as info:
        calibrate("translog", base, params)
    assert info.value.parameter == name
    assert info.value.index == index


def test_registered_under_its_family_name() -> None:
    """The registry finds the family by name (common practice for plug-in registries)."""
    assert FAMILIES["translog"] is Translog
    assert Translog.homothetic
    with pytest.raises(NotImplementedError):
        Translog.calibrate(seeded_budget(1), sigma=0.5).direct_utility(np.ones(4))
