"""Stone-Geary (linear expenditure system) preferences against published results and closed forms.

Sources are named in each test's docstring. Finite differences are central, with relative steps
chosen so that truncation and rounding errors are both far below the tolerances asserted.
"""

from __future__ import annotations

import numpy as np
import pytest
from numpy.testing import assert_allclose

from dualcost.core.errors import InvalidInput
from dualcost.core.indices import IndexData, laspeyres, paasche
from dualcost.core.preferences import FAMILIES, BaseBudget, calibrate
from dualcost.core.preferences.stone_geary import StoneGeary

from .numeric_helpers import (
    assert_closed_form_slutsky,
    assert_duality_identities,
    assert_shephard_and_roy,
    moved_prices,
    seeded_budget,
)


def _elasticities(seed: int, base: BaseBudget) -> np.ndarray:
    """Positive elasticities scaled to satisfy Engel aggregation sum w0 eta = 1."""
    raw = np.random.default_rng(seed).uniform(0.4, 1.8, base.n_items)
    return raw / float(base.shares @ raw)


def _models(seed: int) -> list[tuple[StoneGeary, BaseBudget]]:
    base = seeded_budget(seed)
    return [
        (StoneGeary.calibrate(base, subsistence_quantities=0.3 * base.quantities), base),
        (StoneGeary.calibrate(base, expenditure_elasticities=_elasticities(seed, base),
                              frisch=-2.5), base),
    ]


CASES = [(seed, k) for seed in (1, 2, 3) for k in (0, 1)]


@pytest.mark.parametrize(("seed", "k"), CASES)
def test_base_bundle_is_the_optimal_choice(seed: int, k: int) -> None:
    """Calibration: x(p0, m0) = q0 to 1e-12 relative, and v(p0, m) = m - p0 . gamma, the
    utility scale stated in the module (closed form; Stone 1954)."""
    model, base = _models(seed)[k]
    assert_allclose(model.marshallian(base.prices, base.expenditure), base.quantities,
                    rtol=1e-12, atol=0.0)
    floor = float(base.prices @ model.subsistence)
    assert_allclose(model.indirect_utility(base.prices, base.expenditure),
                    base.expenditure - floor, rtol=1e-13, atol=0.0)
    assert_allclose(model.marginal_shares.sum(), 1.0, rtol=0.0, atol=1e-14)


def test_subsistence_route_keeps_the_given_subsistence_bundle() -> None:
    """Route (a): beta_i = p0_i (q0_i - gamma_i) / (m0 - p0 . gamma) (the LES demand solved for
    beta at the base; Stone 1954)."""
    base = seeded_budget(4)
    gamma = np.array([0.5, 0.0, 1.0, 0.2]) * base.quantities
    model = StoneGeary.calibrate(base, subsistence_quantities=gamma)
    assert_allclose(model.subsistence, gamma, rtol=0.0, atol=0.0)
    expected = base.prices * (base.quantities - gamma) / (base.expenditure - base.prices @ gamma)
    assert_allclose(model.marginal_shares, expected, rtol=1e-14, atol=0.0)


def test_elasticity_route_reproduces_elasticities_and_frisch() -> None:
    """Route (b): d ln x_i / d ln m at the base equals eta_i (central differences in ln m), and
    -m0 / (m0 - p0 . gamma) equals the Frisch parameter phi (Frisch 1959; Deaton and
    Muellbauer 1980, 5.1)."""
    base = seeded_budget(5, n=5)
    eta = _elasticities(5, base)
    model = StoneGeary.calibrate(base, expenditure_elasticities=eta, frisch=-2.5)
    m0, p0 = base.expenditure, base.prices
    h = 1e-5
    numeric = (np.log(model.marshallian(p0, m0 * np.exp(h)))
               - np.log(model.marshallian(p0, m0 * np.exp(-h)))) / (2.0 * h)
    assert_allclose(numeric, eta, rtol=1e-8, atol=0.0)
    frisch = -m0 / (m0 - float(p0 @ model.subsistence))
    assert_allclose(frisch, -2.5, rtol=1e-13, atol=0.0)
    reported = model.parameters()
    assert_allclose(reported["frisch_at_base"], -2.5, rtol=1e-13, atol=0.0)
    assert_allclose(reported["expenditure_elasticities_at_base"], eta, rtol=1e-12, atol=0.0)


def test_defaults_give_half_the_base_bundle_as_subsistence() -> None:
    """With eta = 1 and phi = -2 (the defaults), gamma_i = m0 (w0_i - w0_i / 2) / p0_i = q0_i / 2
    (closed form of route (b))."""
    base = seeded_budget(6)
    model = StoneGeary.calibrate(base)
    assert_allclose(model.subsistence, 0.5 * base.quantities, rtol=1e-14, atol=0.0)
    assert_allclose(model.marginal_shares, base.shares, rtol=1e-14, atol=0.0)


def test_frisch_between_minus_one_and_zero_gives_nonpositive_subsistence_cost() -> None:
    """For -1 <= phi < 0, p0 . gamma = m0 (1 + 1/phi) <= 0 (closed form), and the base bundle is
    still optimal."""
    base = seeded_budget(7)
    model = StoneGeary.calibrate(base, frisch=-0.5)
    assert_allclose(base.prices @ model.subsistence, -base.expenditure, rtol=1e-13, atol=0.0)
    assert_allclose(model.marshallian(base.prices, base.expenditure), base.quantities,
                    rtol=1e-12, atol=1e-12)


@pytest.mark.parametrize(("seed", "k"), CASES)
def test_duality_identities(seed: int, k: int) -> None:
    """e(p, v(p, m)) = m, v(p, e(p, u)) = u, h(p, u) = x(p, e(p, u)) and p . x(p, m) = m
    (Mas-Colell, Whinston and Green 1995, 3.E and 3.G)."""
    model, base = _models(seed)[k]
    p = moved_prices(seed, base)
    m = 1.3 * base.expenditure
    assert_duality_identities(model, p, m)


@pytest.mark.parametrize(("seed", "k"), CASES)
def test_shephard_and_roy(seed: int, k: int) -> None:
    """Shephard's lemma h = grad_p e(p, u) (Shephard 1953) and Roy's identity
    x_i = -(dv/dp_i)/(dv/dm) (Roy 1947), both by central differences (Mas-Colell, Whinston and
    Green 1995, 3.G.1 and 3.G.4)."""
    model, base = _models(seed)[k]
    p = moved_prices(seed, base)
    m = 1.1 * base.expenditure
    assert_shephard_and_roy(model, p, m, rtol=1e-7)


@pytest.mark.parametrize(("seed", "k"), CASES)
def test_slutsky_matrix(seed: int, k: int) -> None:
    """The closed-form Slutsky matrix equals the central-difference derivative of h and the
    Slutsky equation S = D_p x + D_m x x' (Slutsky 1915); it is symmetric, negative
    semidefinite and S p = 0 (Mas-Colell, Whinston and Green 1995, 2.F and 3.G)."""
    model, base = _models(seed)[k]
    p = moved_prices(seed, base)
    m = 1.2 * base.expenditure
    assert_closed_form_slutsky(model, p, m)
    assert model.regularity(p, m) == []


@pytest.mark.parametrize(("seed", "k"), CASES)
def test_direct_utility_is_maximised_by_the_demands(seed: int, k: int) -> None:
    """u(x(p, m)) = v(p, m), and every other bundle on the budget line p . x = m nearby gives less
    utility (utility maximisation, Mas-Colell, Whinston and Green 1995, 3.D)."""
    model, base = _models(seed)[k]
    p = moved_prices(seed, base)
    m = base.expenditure
    x = model.marshallian(p, m)
    best = model.direct_utility(x)
    assert_allclose(best, model.indirect_utility(p, m), rtol=1e-12, atol=0.0)
    rng = np.random.default_rng(seed)
    for _ in range(20):
        d = rng.normal(size=p.size)
        d -= (p @ d) / (p @ p) * p
        d *= 0.05 * float(np.min(x - model.subsistence)) / float(np.max(np.abs(d)))
        assert model.direct_utility(x + d) < best


@pytest.mark.parametrize(("seed", "k"), CASES)
def test_konus_bounds_and_dependence_on_utility(seed: int, k: int) -> None:
    """Konüs (1924): K(u0) <= Laspeyres and K(u1) >= Paasche. The family is not homothetic, so K
    depends on u; K(u) = (p1.gamma + u B1)/(p0.gamma + u B0) is a mediant of the subsistence
    bundle's Laspeyres index and the Cobb-Douglas index B(p1), so it lies between them and
    moves monotonically from one to the other (closed form)."""
    model, base = _models(seed)[k]
    p0, p1, m0 = base.prices, moved_prices(seed, base), base.expenditure
    m1 = 1.05 * m0
    u0, u1 = model.indirect_utility(p0, m0), model.indirect_utility(p1, m1)
    q1 = model.marshallian(p1, m1)

    def konus(u: float) -> float:
        return model.expenditure(p1, u) / model.expenditure(p0, u)

    data = IndexData(p0, p1, base.quantities, q1)
    assert konus(u0) <= laspeyres(data) * (1.0 + 1e-13)
    assert konus(u1) >= paasche(data) * (1.0 - 1e-13)
    levels = u0 * np.array([0.1, 0.5, 1.0, 2.0, 10.0])
    values = np.array([konus(u) for u in levels])
    low = float(p1 @ model.subsistence) / float(p0 @ model.subsistence)
    high = model.price_index(p1)
    assert abs(values[0] - values[-1]) > 1e-6
    assert np.all(values >= min(low, high) - 1e-14)
    assert np.all(values <= max(low, high) + 1e-14)
    steps = np.diff(values)
    assert np.all(steps >= -1e-15) or np.all(steps <= 1e-15)


def test_income_at_or_below_subsistence_is_refused() -> None:
    """The LES is defined only above the subsistence cost p . gamma (Stone 1954)."""
    base = seeded_budget(8)
    model = StoneGeary.calibrate(base, subsistence_quantities=0.3 * base.quantities)
    floor = model.income_floor(base.prices)
    assert_allclose(floor, 0.3 * base.expenditure, rtol=1e-14, atol=0.0)
    for method in (model.indirect_utility, model.marshallian):
        with pytest.raises(InvalidInput) as info:
            method(base.prices, floor)
        assert info.value.parameter == "income"
        assert "subsistence cost p.gamma" in info.value.rule
    with pytest.raises(InvalidInput) as info:
        model.direct_utility(0.2 * base.quantities)
    assert info.value.parameter == "quantities"


@pytest.mark.parametrize(
    ("params", "name", "index"),
    [
        ({"subsistence_quantities": [1.0, 1.0, 1e6, 1.0]}, "subsistence_quantities", 2),
        ({"subsistence_quantities": [1.0, 1.0]}, "subsistence_quantities", None),
        ({"subsistence_quantities": [1.0, 1.0, 1.0, 1.0], "frisch": -2.0}, "frisch", None),
        ({"subsistence_quantities": [1.0, 1.0, 1.0, 1.0],
          "expenditure_elasticities": [1.0, 1.0, 1.0, 1.0]}, "expenditure_elasticities", None),
        ({"expenditure_elasticities": [2.0, 1.0, 1.0, 1.0]}, "expenditure_elasticities", None),
        ({"expenditure_elasticities": [-1.0, 1.0, 1.0, 1.0]}, "expenditure_elasticities", 0),
        ({"frisch": 0.0}, "frisch", None),
        ({"frisch": float("nan")}, "frisch", None),
        ({"sigma": 0.5}, "sigma", None),
    ],
)
def test_invalid_parameters_name_the_parameter(params: dict, name: str, index: int | None) -> None:
    """Every rule broken raises InvalidInput with the parameter's name (common practice)."""
    base = BaseBudget.from_quantities([1.0, 2.0, 3.0, 4.0], [2.0, 2.0, 2.0, 2.0])
    with pytest.raises(InvalidInput) as info:
        calibrate("stone_geary", base, params)
    assert info.value.parameter == name
    assert info.value.index == index


def test_subsistence_equal_to_the_base_bundle_is_refused() -> None:
    """With gamma = q0 nothing is left to spend (m0 - p0 . gamma = 0): no beta exists."""
    base = seeded_budget(9)
    with pytest.raises(InvalidInput) as info:
        StoneGeary.calibrate(base, subsistence_quantities=base.quantities)
    assert info.value.parameter == "subsistence_quantities"


def test_registered_under_its_family_name() -> None:
    """The registry finds the family by name (common practice for plug-in registries)."""
    assert FAMILIES["stone_geary"] is StoneGeary
    assert not StoneGeary.homothetic
