"""Seeded budgets and prices, central differences, and the derivative identities checked with
them, shared by the family test modules.

The random draws reuse :func:`tests.core.family_cases.random_budget` and
:func:`tests.core.family_cases.random_prices`, from a generator seeded here
(``np.random.default_rng(seed)``), so that a test names its draw by one integer.

Finite differences are central, with a step relative to each coordinate: the truncation error
is of order ``rel^2`` and the rounding error of order ``1e-16 / rel`` (common practice).
"""

from __future__ import annotations

from collections.abc import Callable

import numpy as np
from numpy.testing import assert_allclose

from dualcost.core.preferences import BaseBudget, Preferences

from .family_cases import random_budget, random_prices

#: Relative step of the first derivatives: both error terms near 1e-12 to 1e-10 relative.
REL_STEP = 1e-6

#: Added to a seed before drawing prices, so that prices and the budget drawn with the same
#: seed come from different streams.
PRICE_SEED_OFFSET = 100


def seeded_budget(seed: int, n: int = 4) -> BaseBudget:
    """:func:`random_budget` with ``n`` items, drawn from ``np.random.default_rng(seed)``."""
    return random_budget(np.random.default_rng(seed), n)


def moved_prices(
    seed: int, base: BaseBudget, spread: float = 0.5, *, offset: int = PRICE_SEED_OFFSET
) -> np.ndarray:
    """:func:`random_prices` (each base price moved by a factor up to exp(+-spread)), drawn from
    ``np.random.default_rng(seed + offset)``."""
    return random_prices(np.random.default_rng(seed + offset), base, spread)


def central_jacobian(
    f: Callable[[np.ndarray], np.ndarray | float], x: np.ndarray, rel: float = REL_STEP
) -> np.ndarray:
    """d f / d x by central differences with steps ``rel * x_j`` (x > 0).

    The last axis indexes ``x``: a gradient for scalar ``f``, the Jacobian (rows are outputs)
    for vector ``f``.
    """
    columns = []
    for j in range(x.size):
        h = rel * x[j]
        up, down = x.copy(), x.copy()
        up[j] += h
        down[j] -= h
        columns.append((np.asarray(f(up)) - np.asarray(f(down))) / (2.0 * h))
    return np.stack(columns, axis=-1)


def central_derivative(
    f: Callable[[float], np.ndarray | float], x: float, rel: float = REL_STEP
) -> np.ndarray:
    """d f / d x for scalar x > 0 (an income, say) by central differences with step ``rel * x``."""
    h = rel * x
    return (np.asarray(f(x + h)) - np.asarray(f(x - h))) / (2.0 * h)


def central_hessian(
    f: Callable[[np.ndarray], float], x: np.ndarray, rel: float = 1e-4
) -> np.ndarray:
    """Second derivatives of scalar ``f`` by the four-point central formula, steps ``rel * x_i``.

    ``d2f / dx_i dx_j ~ [f(++) - f(+-) - f(-+) + f(--)] / (4 h_i h_j)`` (common practice); the
    larger step keeps the rounding error, of order ``1e-16 / rel^2``, near 1e-8.
    """
    n = x.size
    out = np.empty((n, n))
    for i in range(n):
        for j in range(n):
            hi, hj = rel * x[i], rel * x[j]
            total = 0.0
            for si, sj, sign in ((1, 1, 1), (1, -1, -1), (-1, 1, -1), (-1, -1, 1)):
                q = x.copy()
                q[i] += si * hi
                q[j] += sj * hj
                total += sign * f(q)
            out[i, j] = total / (4.0 * hi * hj)
    return out


def numeric_allen_elasticities(unit_cost: Callable[[np.ndarray], float], p: np.ndarray) -> np.ndarray:
    """Allen elasticities ``c c_ij / (c_i c_j)`` of a unit cost at ``p`` (Allen 1938; Uzawa
    1962), from central differences of ``c``."""
    grad = central_jacobian(unit_cost, p)
    return unit_cost(p) * central_hessian(unit_cost, p) / np.outer(grad, grad)


def ces_allen_elasticities(sigma: float, shares: np.ndarray) -> np.ndarray:
    """The CES pattern: ``sigma`` off the diagonal, ``-sigma (1 - s_i) / s_i`` on it (Uzawa
    1962; the own ones follow from sum_j s_j A_ij = 0)."""
    out = np.full((shares.size, shares.size), sigma)
    np.fill_diagonal(out, -sigma * (1.0 - shares) / shares)
    return out


def assert_duality_identities(model: Preferences, p: np.ndarray, m: float) -> None:
    """At u = v(p, m): e(p, u) = m and v(p, e(p, 2u)) = 2u to 1e-13, h(p, u) = x(p, m) to 1e-12
    and p . x(p, m) = m to 1e-13 (Mas-Colell, Whinston and Green 1995, 3.E and 3.G)."""
    u = model.indirect_utility(p, m)
    assert_allclose(model.expenditure(p, u), m, rtol=1e-13, atol=0.0)
    assert_allclose(model.indirect_utility(p, model.expenditure(p, 2.0 * u)), 2.0 * u,
                    rtol=1e-13, atol=0.0)
    assert_allclose(model.hicksian(p, u), model.marshallian(p, m), rtol=1e-12, atol=0.0)
    assert_allclose(p @ model.marshallian(p, m), m, rtol=1e-13, atol=0.0)


def assert_shephard_and_roy(model: Preferences, p: np.ndarray, m: float, rtol: float) -> None:
    """Shephard's lemma h(p, u) = grad_p e(p, u) at u = v(p, m) (Shephard 1953) and Roy's
    identity x_i = -(dv/dp_i) / (dv/dm) (Roy 1947), the closed forms against central differences
    to ``rtol`` (Mas-Colell, Whinston and Green 1995, 3.G.1 and 3.G.4)."""
    u = model.indirect_utility(p, m)
    assert_allclose(central_jacobian(lambda q: model.expenditure(q, u), p), model.hicksian(p, u),
                    rtol=rtol, atol=0.0)
    dv_dp = central_jacobian(lambda q: model.indirect_utility(q, m), p)
    dv_dm = central_derivative(lambda income: model.indirect_utility(p, income), m)
    assert_allclose(-dv_dp / dv_dm, model.marshallian(p, m), rtol=rtol, atol=0.0)


def assert_closed_form_slutsky(model: Preferences, p: np.ndarray, m: float) -> None:
    """A family's closed-form Slutsky matrix S at (p, m), relative to its largest element: equal
    to the interface's central-difference derivative of h to 1e-8 and to the Slutsky equation
    S = D_p x + D_m x x' (Slutsky 1915) by central differences to 1e-7; symmetric to 1e-14,
    negative semidefinite to 1e-12 and S p = 0 to 1e-13 (Mas-Colell, Whinston and Green 1995,
    2.F and 3.G)."""
    s = model.slutsky_matrix(p, m)
    scale = float(np.max(np.abs(s)))
    assert_allclose(s, Preferences.slutsky_matrix(model, p, m), rtol=0.0, atol=1e-8 * scale)
    jac = central_jacobian(lambda q: model.marshallian(q, m), p)
    dx_dm = central_derivative(lambda income: model.marshallian(p, income), m)
    assert_allclose(jac + np.outer(dx_dm, model.marshallian(p, m)), s, rtol=0.0,
                    atol=1e-7 * scale)
    assert_allclose(s, s.T, rtol=0.0, atol=1e-14 * scale)
    top = float(np.max(np.linalg.eigvalsh(s)))
    assert top <= 1e-12 * scale, f"largest eigenvalue {top:.3g} of S is positive"
    assert_allclose(s @ p, 0.0, rtol=0.0, atol=1e-13 * scale * float(np.max(p)))
