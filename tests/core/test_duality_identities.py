"""The duality identities of consumer theory, for every calibrated family in ``CASES``.

Sources: Mas-Colell, Whinston and Green (1995), *Microeconomic Theory*, ch. 3 (3.D-3.G);
Shephard (1953), *Cost and Production Functions*; Roy (1947), "La distribution du revenu entre
les divers biens", Econometrica 15; Slutsky (1915), "Sulla teoria del bilancio del consumatore",
Giornale degli Economisti 51. Identities that hold in closed form are checked to 1e-10 relative;
derivative identities against central differences, with the tolerance that the step allows.

Every check is made at random prices and a random living standard, not only at the base budget
the family was calibrated to. Each draw is seeded (``np.random.default_rng(seed)``).
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import pytest
from numpy.testing import assert_allclose

from dualcost.core.preferences import BaseBudget, Preferences

from .family_cases import CASE_IDS, CASES, FamilyCase, random_budget, random_prices
from .numeric_helpers import central_derivative, central_jacobian

SEEDS = (0, 1, 2)

# Relative step for central differences: truncation error about step^2, rounding about
# 1e-16 / step, both near 1e-10 relative (common practice).
STEP = 1e-5

# Closed-form identities hold to rounding error.
CLOSED_FORM_RTOL = 1e-10

parametrise_cases = pytest.mark.parametrize("case", CASES, ids=CASE_IDS)
parametrise_seeds = pytest.mark.parametrize("seed", SEEDS)


@dataclass(frozen=True)
class Draw:
    """A calibrated family with prices, an income and a living standard drawn at random."""

    prefs: Preferences
    base: BaseBudget
    prices: np.ndarray
    income: float
    utility: float


def supernumerary_income(
    prefs: Preferences, base: BaseBudget, prices: np.ndarray, factor: float
) -> float:
    """An income above the family's floor at ``prices``: the floor plus ``factor`` times the base
    budget's income above its own floor (for most families the floor is zero)."""
    floor_now = prefs.income_floor(prices)
    return float(floor_now + factor * (base.expenditure - prefs.income_floor(base.prices)))


def draw(case: FamilyCase, seed: int) -> Draw:
    """Seeded base budget, calibrated family, evaluation prices, income and living standard.

    The living standard is what a second random income buys at second random prices, so it is
    a level the family reaches but not the base one.
    """
    rng = np.random.default_rng(seed)
    base = random_budget(rng, n=5)
    prefs = case.build(rng, base)
    prices = random_prices(rng, base)
    income = supernumerary_income(prefs, base, prices, rng.uniform(0.8, 1.25))
    other_prices = random_prices(rng, base)
    other_income = supernumerary_income(prefs, base, other_prices, rng.uniform(0.8, 1.25))
    utility = prefs.indirect_utility(other_prices, other_income)
    return Draw(prefs, base, prices, income, utility)


# -- closed-form identities -------------------------------------------------------------------


@parametrise_cases
@parametrise_seeds
def test_expenditure_of_indirect_utility_is_income(case: FamilyCase, seed: int) -> None:
    """e(p, v(p, m)) = m (Mas-Colell, Whinston and Green 1995, Proposition 3.E.1)."""
    d = draw(case, seed)
    u = d.prefs.indirect_utility(d.prices, d.income)
    assert_allclose(d.prefs.expenditure(d.prices, u), d.income, rtol=CLOSED_FORM_RTOL, atol=0.0)


@parametrise_cases
@parametrise_seeds
def test_indirect_utility_of_expenditure_is_utility(case: FamilyCase, seed: int) -> None:
    """v(p, e(p, u)) = u (Mas-Colell, Whinston and Green 1995, Proposition 3.E.1)."""
    d = draw(case, seed)
    e = d.prefs.expenditure(d.prices, d.utility)
    assert_allclose(
        d.prefs.indirect_utility(d.prices, e), d.utility, rtol=CLOSED_FORM_RTOL, atol=1e-12
    )


@parametrise_cases
@parametrise_seeds
def test_hicksian_is_marshallian_at_expenditure(case: FamilyCase, seed: int) -> None:
    """h(p, u) = x(p, e(p, u)) at arbitrary p and u (Mas-Colell, Whinston and Green 1995,
    Proposition 3.E.4)."""
    d = draw(case, seed)
    h = d.prefs.hicksian(d.prices, d.utility)
    x = d.prefs.marshallian(d.prices, d.prefs.expenditure(d.prices, d.utility))
    scale = float(np.max(np.abs(x)))
    assert_allclose(h, x, rtol=CLOSED_FORM_RTOL, atol=1e-13 * scale)


@parametrise_cases
@parametrise_seeds
def test_budget_is_exhausted(case: FamilyCase, seed: int) -> None:
    """Walras' law p . x(p, m) = m, and p . h(p, u) = e(p, u) (Mas-Colell, Whinston and Green
    1995, Propositions 3.D.2 and 3.E.3)."""
    d = draw(case, seed)
    assert_allclose(
        d.prices @ d.prefs.marshallian(d.prices, d.income), d.income,
        rtol=CLOSED_FORM_RTOL, atol=0.0,
    )
    assert_allclose(
        d.prices @ d.prefs.hicksian(d.prices, d.utility),
        d.prefs.expenditure(d.prices, d.utility),
        rtol=CLOSED_FORM_RTOL, atol=0.0,
    )


@parametrise_cases
@parametrise_seeds
@pytest.mark.parametrize("scale", [0.37, 2.9])
def test_expenditure_homogeneous_of_degree_one_in_prices(
    case: FamilyCase, seed: int, scale: float
) -> None:
    """e(lambda p, u) = lambda e(p, u) and h(lambda p, u) = h(p, u) (Mas-Colell, Whinston and
    Green 1995, Propositions 3.E.2 and 3.E.3)."""
    d = draw(case, seed)
    e = d.prefs.expenditure(d.prices, d.utility)
    assert_allclose(
        d.prefs.expenditure(scale * d.prices, d.utility), scale * e,
        rtol=CLOSED_FORM_RTOL, atol=0.0,
    )
    h = d.prefs.hicksian(d.prices, d.utility)
    assert_allclose(
        d.prefs.hicksian(scale * d.prices, d.utility), h,
        rtol=CLOSED_FORM_RTOL, atol=1e-13 * float(np.max(h)),
    )


@parametrise_cases
@parametrise_seeds
@pytest.mark.parametrize("scale", [0.37, 2.9])
def test_marshallian_homogeneous_of_degree_zero(case: FamilyCase, seed: int, scale: float) -> None:
    """x(lambda p, lambda m) = x(p, m) and v(lambda p, lambda m) = v(p, m) (Mas-Colell, Whinston
    and Green 1995, Propositions 2.E.1 and 3.D.3)."""
    d = draw(case, seed)
    x = d.prefs.marshallian(d.prices, d.income)
    assert_allclose(
        d.prefs.marshallian(scale * d.prices, scale * d.income), x,
        rtol=CLOSED_FORM_RTOL, atol=1e-13 * float(np.max(x)),
    )
    assert_allclose(
        d.prefs.indirect_utility(scale * d.prices, scale * d.income),
        d.prefs.indirect_utility(d.prices, d.income),
        rtol=CLOSED_FORM_RTOL, atol=1e-12,
    )


# -- derivative identities --------------------------------------------------------------------


@parametrise_cases
@parametrise_seeds
def test_shephard_lemma(case: FamilyCase, seed: int) -> None:
    """h_i(p, u) = d e(p, u) / d p_i, against central differences (Shephard 1953; Mas-Colell,
    Whinston and Green 1995, Proposition 3.G.1)."""
    d = draw(case, seed)
    gradient = central_jacobian(lambda p: d.prefs.expenditure(p, d.utility), d.prices, STEP)
    h = d.prefs.hicksian(d.prices, d.utility)
    assert_allclose(gradient, h, rtol=1e-6, atol=1e-9 * float(np.max(h)))


@parametrise_cases
@parametrise_seeds
def test_roy_identity(case: FamilyCase, seed: int) -> None:
    """x_i(p, m) = -(d v / d p_i) / (d v / d m), against central differences (Roy 1947;
    Mas-Colell, Whinston and Green 1995, Proposition 3.G.4)."""
    d = draw(case, seed)
    dv_dp = central_jacobian(lambda p: d.prefs.indirect_utility(p, d.income), d.prices, STEP)
    dv_dm = central_derivative(lambda m: d.prefs.indirect_utility(d.prices, m), d.income, STEP)
    x = d.prefs.marshallian(d.prices, d.income)
    assert_allclose(-dv_dp / dv_dm, x, rtol=1e-6, atol=1e-9 * float(np.max(x)))


def slutsky_from_marshallian(prefs: Preferences, prices: np.ndarray, income: float) -> np.ndarray:
    """d x_i / d p_j + x_j d x_i / d m, by central differences of the Marshallian demands."""
    dx_dp = central_jacobian(lambda p: prefs.marshallian(p, income), prices, STEP)
    dx_dm = central_derivative(lambda m: prefs.marshallian(prices, m), income, STEP)
    x = prefs.marshallian(prices, income)
    return dx_dp + np.outer(dx_dm, x)


def scaled(matrix: np.ndarray, prices: np.ndarray) -> np.ndarray:
    """diag(p) S diag(p): money-valued and free of the units of each item."""
    return prices[:, None] * matrix * prices[None, :]


@parametrise_cases
@parametrise_seeds
def test_slutsky_equation(case: FamilyCase, seed: int) -> None:
    """d h_i / d p_j = d x_i / d p_j + x_j d x_i / d m at u = v(p, m), all by central
    differences (Slutsky 1915; Mas-Colell, Whinston and Green 1995, Proposition 3.G.3). The
    family's own ``slutsky_matrix`` must satisfy the same equation.

    Compared on diag(p) S diag(p) (money units), to 1e-5 relative or 1e-7 of income.
    """
    d = draw(case, seed)
    u = d.prefs.indirect_utility(d.prices, d.income)
    dh_dp = central_jacobian(lambda p: d.prefs.hicksian(p, u), d.prices, STEP)
    rhs = scaled(slutsky_from_marshallian(d.prefs, d.prices, d.income), d.prices)
    atol = 1e-7 * d.income
    assert_allclose(scaled(dh_dp, d.prices), rhs, rtol=1e-5, atol=atol)
    own = scaled(d.prefs.slutsky_matrix(d.prices, d.income), d.prices)
    assert_allclose(own, rhs, rtol=1e-5, atol=atol)


@parametrise_cases
@parametrise_seeds
def test_slutsky_matrix_symmetric_negative_semidefinite_and_annihilates_prices(
    case: FamilyCase, seed: int
) -> None:
    """The Slutsky matrix S(p, m) is symmetric, negative semidefinite and S p = 0 (Slutsky
    1915; Mas-Colell, Whinston and Green 1995, Propositions 3.G.2 and 2.F.3). Checked on the
    scale-free diag(p) S diag(p), to 1e-8 of income (the default numeric matrix is accurate to
    about 1e-10 of income)."""
    d = draw(case, seed)
    s = scaled(d.prefs.slutsky_matrix(d.prices, d.income), d.prices)
    atol = 1e-8 * d.income
    assert_allclose(s, s.T, rtol=0.0, atol=atol)
    top = float(np.max(np.linalg.eigvalsh(0.5 * (s + s.T))))
    assert top <= atol, f"largest eigenvalue {top:.3g} of diag(p) S diag(p) is positive"
    # diag(p) S diag(p) 1 = diag(p) S p.
    assert_allclose(s.sum(axis=1), 0.0, rtol=0.0, atol=atol)
