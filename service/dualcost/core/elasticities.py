"""Price and expenditure elasticities of a fitted demand system, with delta-method standard errors.

With demands ``x_i = w_i m / p_i``:

- expenditure (income) elasticity ``eta_i = d ln x_i / d ln m``;
- Marshallian (uncompensated) price elasticity ``E_ij = d ln x_i / d ln p_j``;
- Hicksian (compensated) price elasticity from the Slutsky equation in elasticity form,
  ``E^c_ij = E_ij + eta_i w_j`` (Slutsky 1915; Deaton and Muellbauer 1980, *Economics and
  Consumer Behavior*, ch. 2).

Each family gives ``eta`` and ``E`` in closed form (see the share systems in
:mod:`dualcost.core.estimation`). Standard errors by the delta method: for a smooth function
``g`` of the estimate, ``Var g(theta_hat) ~ G V G'`` with ``G = dg / dtheta`` (Cramér 1946,
*Mathematical Methods of Statistics*; Oehlert 1992, The American Statistician 46(1)). ``G``
is taken by central differences of the closed forms in each parameter (step
``1e-6 (1 + |theta_k|)``, relative accuracy about 1e-9).
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import TYPE_CHECKING

import numpy as np
from numpy.typing import NDArray

from ._differences import central_jacobian

if TYPE_CHECKING:
    from .estimation.system import ShareSystem

Vector = NDArray[np.float64]
Matrix = NDArray[np.float64]


@dataclass(frozen=True)
class ElasticityTable:
    """Elasticities at one point, with their delta-method standard errors.

    Entries are NaN where the model's share at the point is zero (the elasticity is undefined).
    """

    prices: Vector
    expenditure_level: float
    log_prices: Vector
    log_expenditure: float
    shares: Vector
    expenditure: Vector
    expenditure_se: Vector
    marshallian: Matrix
    marshallian_se: Matrix
    hicksian: Matrix
    hicksian_se: Matrix


def _stacked(system: ShareSystem, theta: Vector, log_prices: Vector, log_expenditure: float
             ) -> tuple[Vector, Vector, Matrix, Matrix]:
    w, eta, marshallian = system.elasticities(theta, log_prices, log_expenditure)
    hicksian = marshallian + np.outer(eta, w)
    return w, eta, marshallian, hicksian


def elasticity_table(system: ShareSystem, theta: Vector, covariance: Matrix,
                     prices: Vector, expenditure: float) -> ElasticityTable:
    """Elasticities of ``system`` at ``(p, m)`` with delta-method standard errors."""
    n = system.n_items
    log_prices = np.log(prices)
    log_expenditure = float(np.log(expenditure))

    def stacked_elasticities(th: Vector) -> Vector:  # eta, E and E^c as one vector
        parts = _stacked(system, th, log_prices, log_expenditure)[1:]
        return np.concatenate([a.ravel() for a in parts])

    with np.errstate(divide="ignore", invalid="ignore", over="ignore"):
        w, eta, marshallian, hicksian = _stacked(system, theta, log_prices, log_expenditure)
        value = np.concatenate([eta, marshallian.ravel(), hicksian.ravel()])
        g = central_jacobian(stacked_elasticities, theta)
        var = np.einsum("ek,kl,el->e", g, covariance, g)
        se = np.sqrt(np.where(var >= 0.0, var, np.nan))
    bad = ~np.isfinite(value)
    se = np.where(bad | ~np.isfinite(se), np.nan, se)
    value = np.where(bad, np.nan, value)
    return ElasticityTable(
        prices=np.asarray(prices, dtype=np.float64), expenditure_level=float(expenditure),
        log_prices=log_prices, log_expenditure=log_expenditure, shares=w,
        expenditure=value[:n], expenditure_se=se[:n],
        marshallian=value[n:n + n * n].reshape(n, n), marshallian_se=se[n:n + n * n].reshape(n, n),
        hicksian=value[n + n * n:].reshape(n, n), hicksian_se=se[n + n * n:].reshape(n, n),
    )
