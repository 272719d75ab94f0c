"""The engine's expenditure function and Hicksian demands against scipy as a reference library.

For every case in ``CASES``:

- where the family has a closed-form direct utility u(x), e(p, u) must equal the least cost
  p . x subject to u(x) >= u found by ``scipy.optimize.minimize`` (SLSQP, several starts), the
  definition of the expenditure function (Mas-Colell, Whinston and Green 1995, 3.E);
- where it has none (translog, AIDS, QUAIDS), e(p, u) must equal the income at which the
  engine's v(p, .) reaches u, found by ``scipy.optimize.brentq``. This is the weaker check: it
  only confirms that the engine's e and v invert each other, and cannot catch a v that belongs to
  no utility maximisation, because both sides come from the engine; the primal minimisation uses
  only u(x) and so tests the dual formulas independently;
- the Hicksian demands must equal scipy's finite-difference gradient of e in p
  (``scipy.optimize.approx_fprime``), Shephard's lemma (Shephard 1953; Mas-Colell, Whinston and
  Green 1995, Proposition 3.G.1).

Small problems (4 items, 2 seeds) keep the run short.
"""

from __future__ import annotations

import warnings

import numpy as np
import pytest
from numpy.testing import assert_allclose
from scipy.optimize import approx_fprime, brentq, minimize

from dualcost.core.errors import DualcostError
from dualcost.core.preferences import BaseBudget, Preferences

from .family_cases import CASE_IDS, CASES, FamilyCase, random_budget, random_prices

SEEDS = (0, 1)
N_ITEMS = 4
N_STARTS = 4

parametrise_cases = pytest.mark.parametrize("case", CASES, ids=CASE_IDS)
parametrise_seeds = pytest.mark.parametrize("seed", SEEDS)


def setup(case: FamilyCase, seed: int) -> tuple[Preferences, BaseBudget, np.ndarray, float]:
    """Seeded family, evaluation prices and a living standard reached at other random prices
    and an income near the base one (above the family's income floor)."""
    rng = np.random.default_rng(seed)
    base = random_budget(rng, n=N_ITEMS)
    prefs = case.build(rng, base)
    prices = random_prices(rng, base)
    other = random_prices(rng, base)
    surplus = base.expenditure - prefs.income_floor(base.prices)
    income = prefs.income_floor(other) + rng.uniform(0.8, 1.25) * surplus
    return prefs, base, prices, prefs.indirect_utility(other, income)


def has_direct_utility(prefs: Preferences, base: BaseBudget) -> bool:
    try:
        prefs.direct_utility(base.quantities)
    except NotImplementedError:
        return False
    return True


def utility_or_nan(prefs: Preferences, x: np.ndarray) -> float:
    """u(x), or NaN where the optimiser strays outside the family's domain (for example below a
    subsistence bundle); the optimiser then treats the point as infeasible."""
    with warnings.catch_warnings(), np.errstate(all="ignore"):
        warnings.simplefilter("ignore")
        try:
            value = float(prefs.direct_utility(x))
        except (DualcostError, ValueError, FloatingPointError, OverflowError):
            return float("nan")
    return value if np.isfinite(value) else float("nan")


def least_cost_by_minimisation(
    prefs: Preferences, base: BaseBudget, prices: np.ndarray, utility: float, seed: int
) -> float:
    """min p . x subject to u(x) >= u, by SLSQP from several starts, in log quantities
    (which keeps x positive). Returns the cheapest feasible optimum found."""
    rng = np.random.default_rng(1000 + seed)
    scale = float(prices @ base.quantities)
    u_scale = abs(utility)

    def cost(y: np.ndarray) -> float:
        return float(prices @ np.exp(y)) / scale

    def cost_gradient(y: np.ndarray) -> np.ndarray:
        return prices * np.exp(y) / scale

    def surplus(y: np.ndarray) -> float:
        value = utility_or_nan(prefs, np.exp(y))
        return -1.0 if np.isnan(value) else (value - utility) / u_scale

    best = np.inf
    for _ in range(N_STARTS):
        # Starts above the base bundle, item by item, stay inside every family's domain (a
        # subsistence bundle lies below the base bundle).
        start = np.log(base.quantities) + rng.uniform(0.0, 0.7, base.n_items)
        with warnings.catch_warnings(), np.errstate(all="ignore"):
            # SLSQP's own warnings about the last step are not the engine's: the result is
            # judged below on feasibility and cost alone.
            warnings.simplefilter("ignore")
            result = minimize(
                cost, start, jac=cost_gradient, method="SLSQP",
                constraints=[{"type": "ineq", "fun": surplus}],
                options={"ftol": 1e-15, "maxiter": 500},
            )
        if surplus(result.x) >= -1e-10:
            best = min(best, cost(result.x) * scale)
    assert np.isfinite(best), "no start reached a feasible optimum"
    return best


def least_cost_leontief(
    prefs: Preferences, base: BaseBudget, prices: np.ndarray, utility: float
) -> float:
    """For fixed proportions (sigma = 0) u(x) has a kink at the optimum and SLSQP stalls there.
    The set {x : u(x) >= u} is then the orthant x >= x_min (Leontief 1941), so the least cost is
    p . x_min; each x_min_i is found from u(x) alone with ``scipy.optimize.brentq``, with the
    other items held so plentiful that they do not bind."""
    plenty = base.quantities.copy()
    while utility_or_nan(prefs, plenty) < 10.0 * utility:
        plenty *= 2.0
    x_min = np.empty(base.n_items)
    for i in range(base.n_items):

        def reaches(t: float, i: int = i) -> float:
            x = plenty.copy()
            x[i] = t
            return utility_or_nan(prefs, x) - utility

        lo, hi = 1e-3 * plenty[i], plenty[i]
        assert reaches(lo) < 0.0 < reaches(hi)
        x_min[i] = brentq(reaches, lo, hi, xtol=1e-300, rtol=1e-15)
    return float(prices @ x_min)


def income_reaching(prefs: Preferences, base: BaseBudget, prices: np.ndarray, u: float) -> float:
    """The income m with v(p, m) = u, by bracketing and ``scipy.optimize.brentq``."""
    floor = prefs.income_floor(prices)
    surplus = base.expenditure - prefs.income_floor(base.prices)
    lo = floor + 0.5 * surplus
    hi = floor + 2.0 * surplus
    for _ in range(60):
        if prefs.indirect_utility(prices, lo) <= u:
            break
        lo = floor + 0.5 * (lo - floor)
    for _ in range(60):
        if prefs.indirect_utility(prices, hi) >= u:
            break
        hi = floor + 2.0 * (hi - floor)
    return float(
        brentq(lambda m: prefs.indirect_utility(prices, m) - u, lo, hi, xtol=1e-14 * hi,
               rtol=1e-15, maxiter=500)
    )


@parametrise_cases
@parametrise_seeds
def test_expenditure_agrees_with_scipy(case: FamilyCase, seed: int) -> None:
    """e(p, u) = min {p . x : u(x) >= u} by scipy.optimize.minimize (SLSQP, several starts) where
    u(x) has a closed form (Mas-Colell, Whinston and Green 1995, Definition 3.E; for fixed
    proportions see ``least_cost_leontief``); otherwise the
    weaker check e(p, u) = m with v(p, m) = u by scipy.optimize.brentq (see module docstring).
    Agreement to 1e-6 relative."""
    prefs, base, prices, utility = setup(case, seed)
    engine = prefs.expenditure(prices, utility)
    if has_direct_utility(prefs, base) and prefs.substitution_elasticity == 0.0:
        reference = least_cost_leontief(prefs, base, prices, utility)
    elif has_direct_utility(prefs, base):
        reference = least_cost_by_minimisation(prefs, base, prices, utility, seed)
    else:
        reference = income_reaching(prefs, base, prices, utility)
    assert_allclose(engine, reference, rtol=1e-6, atol=0.0)


@parametrise_cases
@parametrise_seeds
def test_hicksian_is_scipy_gradient_of_expenditure(case: FamilyCase, seed: int) -> None:
    """h(p, u) = grad_p e(p, u), with the gradient from scipy.optimize.approx_fprime (Shephard
    1953; Mas-Colell, Whinston and Green 1995, Proposition 3.G.1); forward differences with step
    1e-8 p_i are accurate to about 1e-7 relative, so the check is to 1e-6."""
    prefs, _, prices, utility = setup(case, seed)
    gradient = approx_fprime(prices, lambda p: prefs.expenditure(p, utility), 1e-8 * prices)
    h = prefs.hicksian(prices, utility)
    assert_allclose(gradient, h, rtol=1e-6, atol=1e-8 * float(np.max(h)))


@parametrise_cases
@parametrise_seeds
def test_demands_reach_their_utility(case: FamilyCase, seed: int) -> None:
    """Where u(x) has a closed form: u(h(p, u)) = u and u(x(p, m)) = v(p, m), the definitions of
    the Hicksian demand and the indirect utility function (Mas-Colell, Whinston and Green 1995,
    3.D and 3.E), to 1e-10 relative."""
    prefs, base, prices, utility = setup(case, seed)
    if not has_direct_utility(prefs, base):
        pytest.skip(f"the {prefs.family} family has no closed-form direct utility")
    assert_allclose(
        prefs.direct_utility(prefs.hicksian(prices, utility)), utility, rtol=1e-10, atol=0.0
    )
    income = prefs.expenditure(prices, utility) * 1.1
    assert_allclose(
        prefs.direct_utility(prefs.marshallian(prices, income)),
        prefs.indirect_utility(prices, income),
        rtol=1e-10, atol=0.0,
    )
