"""Konüs bounds and the exactness of index formulas, checked on the engine's families.

Bounds: Konüs (1924), "The problem of the true index of the cost of living" (English translation
Econometrica 7, 1939); restated in ILO et al. (2004), *Consumer Price Index Manual*, 17.9-17.20.
Exactness: an index formula equals the Konüs index when the quantities are optimal choices under
the named preferences: Leontief and Cobb-Douglas (CPI Manual 17.61-17.64), CES (Lloyd 1975;
Moulton 1996; Sato 1976; Vartia 1976), homogeneous quadratic and homothetic translog (Diewert
1976, "Exact and superlative index numbers", Journal of Econometrics 4).

Every draw is seeded (``np.random.default_rng(seed)``); quantities are the family's own demands
q0 = x(p0, m0), q1 = x(p1, m1) at random prices and incomes.
"""

from __future__ import annotations

import warnings
from collections.abc import Callable, Iterator

import numpy as np
import pytest
from numpy.testing import assert_allclose

from dualcost.core.indices import FORMULAS, IndexData
from dualcost.core.preferences import (
    CES,
    FAMILIES,
    BaseBudget,
    CobbDouglas,
    Preferences,
    calibrate,
)

from .family_cases import CASE_IDS, CASES, FamilyCase, random_budget, random_prices

SEEDS = (0, 1, 2)
# Slack on the bounds: Leontief meets them with equality, up to rounding.
BOUND_SLACK = 1e-12
EXACT_RTOL = 1e-10
N_BUDGETS = 8
N_PRICE_PAIRS = 25


def konus(prefs: Preferences, p0: np.ndarray, p1: np.ndarray, utility: float) -> float:
    """K(p0, p1, u) = e(p1, u) / e(p0, u) (Konüs 1924)."""
    return prefs.expenditure(p1, utility) / prefs.expenditure(p0, utility)


def income_above_floor(prefs: Preferences, base: BaseBudget, prices: np.ndarray,
                       factor: float) -> float:
    """The family's income floor at ``prices`` plus ``factor`` times the base budget's income
    above its floor (the floor is zero for most families)."""
    surplus = base.expenditure - prefs.income_floor(base.prices)
    return float(prefs.income_floor(prices) + factor * surplus)


# -- Konüs bounds, every family ---------------------------------------------------------------


def bounds_setup(case: FamilyCase, seed: int) -> tuple[Preferences, IndexData, float, float]:
    """A family with two optimal situations (p0, q0, u0) and (p1, q1, u1)."""
    rng = np.random.default_rng(seed)
    base = random_budget(rng, n=5)
    prefs = case.build(rng, base)
    p0 = random_prices(rng, base)
    p1 = random_prices(rng, base)
    m0 = income_above_floor(prefs, base, p0, rng.uniform(0.8, 1.25))
    m1 = income_above_floor(prefs, base, p1, rng.uniform(0.8, 1.25))
    data = IndexData(p0, p1, prefs.marshallian(p0, m0), prefs.marshallian(p1, m1))
    return prefs, data, prefs.indirect_utility(p0, m0), prefs.indirect_utility(p1, m1)


@pytest.mark.parametrize("case", CASES, ids=CASE_IDS)
@pytest.mark.parametrize("seed", SEEDS)
def test_konus_bounds(case: FamilyCase, seed: int) -> None:
    """K(u0) <= Laspeyres and K(u1) >= Paasche, with q0, q1 the optimal choices (Konüs 1924;
    CPI Manual 2004, 17.9-17.17)."""
    prefs, d, u0, u1 = bounds_setup(case, seed)
    laspeyres = FORMULAS["laspeyres"].compute(d)
    paasche = FORMULAS["paasche"].compute(d)
    assert konus(prefs, d.p0, d.p1, u0) <= laspeyres * (1.0 + BOUND_SLACK)
    assert konus(prefs, d.p0, d.p1, u1) >= paasche * (1.0 - BOUND_SLACK)


@pytest.mark.parametrize(
    "case", [c for c in CASES if c.homothetic], ids=[c.id for c in CASES if c.homothetic]
)
@pytest.mark.parametrize("seed", SEEDS)
def test_homothetic_konus_independent_of_utility_and_between_paasche_and_laspeyres(
    case: FamilyCase, seed: int
) -> None:
    """For homothetic preferences K does not depend on u, and Paasche <= K <= Laspeyres
    (Konüs 1924; CPI Manual 2004, 17.18-17.20)."""
    prefs, d, u0, u1 = bounds_setup(case, seed)
    k0 = konus(prefs, d.p0, d.p1, u0)
    for u in (u1, 0.01 * u0, 100.0 * u0):
        assert_allclose(konus(prefs, d.p0, d.p1, u), k0, rtol=EXACT_RTOL, atol=0.0)
    assert FORMULAS["paasche"].compute(d) * (1.0 - BOUND_SLACK) <= k0
    assert k0 <= FORMULAS["laspeyres"].compute(d) * (1.0 + BOUND_SLACK)


# -- exactness ---------------------------------------------------------------------------------


def optimal_situations(
    build: Callable[[BaseBudget], Preferences],
    seed: int,
    spread: float = 0.6,
) -> Iterator[tuple[Preferences, IndexData, float]]:
    """Seeded random families (``N_BUDGETS`` base budgets) and, for each, ``N_PRICE_PAIRS``
    pairs of prices moved by factors up to exp(+-spread) from base, with optimal quantities and
    the Konüs index (at u0; the families used here are homothetic)."""
    rng = np.random.default_rng(seed)
    for _ in range(N_BUDGETS):
        base = random_budget(rng, n=int(rng.integers(2, 7)))
        prefs = build(base)
        for _ in range(N_PRICE_PAIRS):
            p0 = base.prices * np.exp(rng.uniform(-spread, spread, base.n_items))
            p1 = base.prices * np.exp(rng.uniform(-spread, spread, base.n_items))
            m0 = base.expenditure * rng.uniform(0.5, 2.0)
            m1 = base.expenditure * rng.uniform(0.5, 2.0)
            u0 = prefs.indirect_utility(p0, m0)
            d = IndexData(p0, p1, prefs.marshallian(p0, m0), prefs.marshallian(p1, m1))
            yield prefs, d, konus(prefs, p0, p1, u0)


def assert_exact(
    build: Callable[[BaseBudget], Preferences],
    formula: str,
    seed: int,
    spread: float = 0.6,
    sigma: float | None = None,
) -> None:
    """The named formula equals the Konüs index to ``EXACT_RTOL`` on every draw."""
    for prefs, d, k in optimal_situations(build, seed, spread):
        if sigma is not None:
            d = IndexData(d.p0, d.p1, d.q0, d.q1, sigma=sigma)
        value = FORMULAS[formula].compute(d)
        assert_allclose(value, k, rtol=EXACT_RTOL, atol=0.0,
                        err_msg=f"{formula} vs Konüs, {prefs.family}, p0={d.p0}, p1={d.p1}")


def family_or_skip(name: str) -> type[Preferences]:
    if name not in FAMILIES:
        pytest.skip(f"the {name} family is not registered yet")
    return FAMILIES[name]


@pytest.mark.parametrize("formula", ["laspeyres", "paasche"])
def test_leontief_laspeyres_and_paasche_exact(formula: str) -> None:
    """Fixed proportions (CES sigma = 0): Laspeyres = Paasche = Konüs (CPI Manual 2004,
    17.61; Konüs 1924)."""
    assert_exact(lambda b: CES.calibrate(b, sigma=0.0), formula, seed=10, spread=1.5)


def test_cobb_douglas_geometric_laspeyres_exact() -> None:
    """Cobb-Douglas: the geometric Laspeyres index with base shares = Konüs (CPI Manual 2004,
    17.61-17.64)."""
    assert_exact(CobbDouglas.calibrate, "geometric_laspeyres", seed=11, spread=1.5)


@pytest.mark.parametrize("sigma", [0.2, 0.7, 0.999, 1.3, 2.5, 8.0])
def test_ces_lloyd_moulton_exact(sigma: float) -> None:
    """CES with elasticity sigma: the Lloyd-Moulton index with base shares and the same sigma =
    Konüs (Lloyd 1975; Moulton 1996; CPI Manual 2004, 17.61)."""
    assert_exact(lambda b: CES.calibrate(b, sigma=sigma), "lloyd_moulton", seed=12, spread=1.5,
                 sigma=sigma)


@pytest.mark.parametrize("sigma", [0.2, 0.7, 0.999, 1.3, 2.5, 8.0])
def test_ces_sato_vartia_exact(sigma: float) -> None:
    """CES with any elasticity: Sato-Vartia = Konüs (Sato 1976; Vartia 1976; CPI Manual 2004,
    17.69)."""
    assert_exact(lambda b: CES.calibrate(b, sigma=sigma), "sato_vartia", seed=13, spread=1.5)


@pytest.mark.parametrize("sigma", [0.0, 0.2, 0.4])
def test_homogeneous_quadratic_fisher_exact(sigma: float) -> None:
    """Homogeneous quadratic utility f(x) = (x'Ax)^(1/2): Fisher = Konüs (Diewert 1976, "Exact
    and superlative index numbers", Journal of Econometrics 4). Prices within a factor 1.8 of
    base, where the calibrated model is regular for these sigma (family docstring)."""
    family_or_skip("quadratic")
    assert_exact(lambda b: calibrate("quadratic", b, {"sigma": sigma}), "fisher", seed=14)


@pytest.mark.parametrize("sigma", [0.0, 0.3, 0.6, 1.0, 1.5])
def test_homothetic_translog_tornqvist_exact_sigma(sigma: float) -> None:
    """Homothetic translog unit cost (Gamma from sigma): Törnqvist = Konüs (Diewert 1976,
    "Exact and superlative index numbers", Journal of Econometrics 4). The identity is algebraic
    (Diewert's quadratic lemma), so it holds wherever the model is evaluated."""
    family_or_skip("translog")
    assert_exact(lambda b: calibrate("translog", b, {"sigma": sigma}), "tornqvist", seed=15)


def random_translog_gamma(base: BaseBudget, rng: np.random.Generator) -> np.ndarray:
    """A random symmetric Gamma with zero row sums, small against the base shares."""
    n = base.n_items
    g = rng.normal(0.0, 0.05, (n, n))
    centre = np.eye(n) - 1.0 / n
    return centre @ (0.5 * (g + g.T)) @ centre


def test_homothetic_translog_tornqvist_exact_gamma() -> None:
    """Homothetic translog with a random symmetric Gamma (rows summing to zero): Törnqvist =
    Konüs (Diewert 1976, Journal of Econometrics 4)."""
    family_or_skip("translog")
    rng = np.random.default_rng(16)
    assert_exact(
        lambda b: calibrate("translog", b, {"gamma": random_translog_gamma(b, rng).tolist()}),
        "tornqvist", seed=17, spread=0.4,
    )


# -- CES at the edges of sigma ----------------------------------------------------------------


def edge_setup(seed: int, spread: float) -> tuple[BaseBudget, np.ndarray, float, float]:
    rng = np.random.default_rng(seed)
    base = random_budget(rng, n=6)
    p1 = base.prices * np.exp(rng.uniform(-spread, spread, base.n_items))
    return base, p1, base.expenditure * rng.uniform(0.5, 2.0), rng.uniform(10.0, 100.0)


def quartet(prefs: Preferences, p: np.ndarray, m: float, u: float) -> list[np.ndarray]:
    """e(p, u), v(p, m), x(p, m), h(p, u)."""
    return [np.asarray(prefs.expenditure(p, u)), np.asarray(prefs.indirect_utility(p, m)),
            prefs.marshallian(p, m), prefs.hicksian(p, u)]


@pytest.mark.parametrize("seed", [20, 21, 22])
def test_ces_sigma_one_is_cobb_douglas(seed: int) -> None:
    """CES at sigma = 1 is Cobb-Douglas (Arrow, Chenery, Minhas and Solow 1961): e, v, x and h
    agree to 1e-13 relative."""
    base, p1, m, u = edge_setup(seed, spread=1.5)
    ces = CES.calibrate(base, sigma=1.0)
    cd = CobbDouglas.calibrate(base)
    for a, b in zip(quartet(ces, p1, m, u), quartet(cd, p1, m, u), strict=True):
        assert_allclose(a, b, rtol=1e-13, atol=0.0)


@pytest.mark.parametrize("seed", [20, 21, 22])
@pytest.mark.parametrize("offset", [-1e-12, 1e-12])
def test_ces_continuous_at_sigma_one(seed: int, offset: float) -> None:
    """CES at sigma = 1 +- 1e-12 differs from Cobb-Douglas by O(1e-12 (ln p1/p0)^2) only
    (continuity of the power mean in its order; Hardy, Littlewood and Polya 1934, ch. II):
    checked to 1e-11 relative."""
    base, p1, m, u = edge_setup(seed, spread=1.5)
    ces = CES.calibrate(base, sigma=1.0 + offset)
    cd = CobbDouglas.calibrate(base)
    for a, b in zip(quartet(ces, p1, m, u), quartet(cd, p1, m, u), strict=True):
        assert_allclose(a, b, rtol=1e-11, atol=0.0)


@pytest.mark.parametrize("seed", [23, 24])
@pytest.mark.parametrize("sigma", [50.0, 1e4])
def test_ces_large_sigma_finite_without_warnings(seed: int, sigma: float) -> None:
    """CES with sigma = 50 and 1e4 and price relatives up to 1e3 either way: e, v, x, h, the
    Konüs index and the Lloyd-Moulton index are finite, raise no numpy warning, and keep
    p . x = m and Lloyd-Moulton = Konüs (Lloyd 1975; Moulton 1996) to 1e-10."""
    base, p1, m, u = edge_setup(seed, spread=np.log(1e3))
    with warnings.catch_warnings():
        warnings.simplefilter("error")
        ces = CES.calibrate(base, sigma=sigma)
        values = quartet(ces, p1, m, u)
        k = konus(ces, base.prices, p1, u)
        lm = FORMULAS["lloyd_moulton"].compute(
            IndexData(base.prices, p1, base.quantities, ces.marshallian(p1, m), sigma=sigma)
        )
    for value in [*values, np.asarray(k), np.asarray(lm)]:
        assert np.all(np.isfinite(value))
    assert np.all(values[2] >= 0.0) and np.all(values[3] >= 0.0)
    assert_allclose(p1 @ values[2], m, rtol=1e-10, atol=0.0)
    assert_allclose(lm, k, rtol=EXACT_RTOL, atol=0.0)
    # The cheapest item's relative bounds the index from below (power mean of order < 0).
    assert np.min(p1 / base.prices) * (1.0 - 1e-12) <= k <= FORMULAS["laspeyres"].compute(
        IndexData(base.prices, p1, base.quantities, base.quantities)
    )


@pytest.mark.parametrize("seed", [25, 26, 27])
def test_ces_sigma_zero_is_laspeyres(seed: int) -> None:
    """CES at sigma = 0 (fixed proportions): Konüs = Laspeyres with the base basket
    (Konüs 1924; CPI Manual 2004, 17.61), to 1e-12."""
    base, p1, _, u = edge_setup(seed, spread=1.5)
    ces = CES.calibrate(base, sigma=0.0)
    laspeyres = FORMULAS["laspeyres"].compute(
        IndexData(base.prices, p1, base.quantities, base.quantities)
    )
    assert_allclose(konus(ces, base.prices, p1, u), laspeyres, rtol=1e-12, atol=0.0)
