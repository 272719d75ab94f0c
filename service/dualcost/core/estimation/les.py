"""Linear expenditure system share equations for estimation (Stone 1954; Geary 1950).

Spending on item i is its subsistence cost plus a fixed part ``beta_i`` of the income left over
(Stone 1954, "Linear expenditure systems and demand analysis", Economic Journal 64(255)):

    p_i x_i = p_i gamma_i + beta_i (m - p . gamma),   sum_i beta_i = 1,

so the budget shares are ``w_i = p_i gamma_i / m + beta_i (1 - p . gamma / m)``. The free
parameters are every subsistence quantity ``gamma_i`` and the marginal budget shares of all items
but the last (``beta_n = 1 - sum of the others``, adding-up). The shares are fitted by nonlinear
least squares on the share equations (see :mod:`.system`).

Elasticities at ``(p, m)`` with ``e_i = p_i / m``: expenditure ``eta_i = beta_i / w_i`` and
Marshallian ``E_ij = -delta_ij (1 - e_i gamma_i / w_i) - beta_i e_j gamma_j / w_i`` (differentiate
``x_i = gamma_i + beta_i (m - p . gamma) / p_i``; Deaton and Muellbauer 1980, *Economics and
Consumer Behavior*, 3.1).
"""

from __future__ import annotations

from typing import Any

import numpy as np

from ..errors import InvalidInput
from .ces import _relative_price_spread
from .panel import Panel
from .system import Array3, FitOptions, Label, Matrix, ShareSystem, Vector


class LinearExpenditureShares(ShareSystem):
    """``theta = (gamma_1, ..., gamma_n, beta_1, ..., beta_{n-1})``."""

    family = "stone_geary"
    method = "nonlinear least squares on the linear expenditure system's share equations"

    @classmethod
    def from_options(cls, n_items: int, options: FitOptions) -> LinearExpenditureShares:
        options.refuse_all_but(cls.family, cls.takes)
        return cls(n_items)

    def __init__(self, n_items: int) -> None:
        n = n_items
        self.n_items = n
        self.labels = tuple(Label("gamma", (i,)) for i in range(n)) + tuple(
            Label("beta", (i,)) for i in range(n - 1))
        self.full_labels = tuple(Label("gamma", (i,)) for i in range(n)) + tuple(
            Label("beta", (i,)) for i in range(n))
        a = np.zeros((2 * n, 2 * n - 1))
        a[: 2 * n - 1, : 2 * n - 1] = np.eye(2 * n - 1)
        a[2 * n - 1, n:] = -1.0
        c = np.zeros(2 * n)
        c[-1] = 1.0
        self.full_map = (a, c)

    def _split(self, theta: Vector) -> tuple[Vector, Vector]:
        n = self.n_items
        gamma = theta[:n]
        beta = np.append(theta[n:], 1.0 - float(np.sum(theta[n:])))
        return gamma, beta

    def shares(self, theta: Vector, log_prices: Matrix, log_expenditure: Vector) -> Matrix:
        gamma, beta = self._split(theta)
        e = np.exp(log_prices - log_expenditure[:, None])
        left = 1.0 - e @ gamma
        return e * gamma + left[:, None] * beta

    def jacobian(self, theta: Vector, log_prices: Matrix, log_expenditure: Vector) -> Array3:
        """``dw_i/dgamma_k = delta_ik e_i - beta_i e_k``;
        ``dw_i/dbeta_k = (delta_ik - delta_in)(1 - e . gamma)``."""
        n = self.n_items
        gamma, beta = self._split(theta)
        e = np.exp(log_prices - log_expenditure[:, None])
        left = 1.0 - e @ gamma
        out = np.empty(e.shape + (2 * n - 1,))
        out[:, :, :n] = e[:, :, None] * np.eye(n)[None] - beta[None, :, None] * e[:, None, :]
        pick = np.zeros((n, n - 1))
        pick[: n - 1] = np.eye(n - 1)
        pick[n - 1] = -1.0
        out[:, :, n:] = left[:, None, None] * pick[None]
        return out

    def start(self, panel: Panel) -> Vector:
        """Subsistence at half the smallest quantity bought; beta by least squares given it."""
        quantities = panel.shares * panel.expenditure[:, None] / panel.prices
        gamma = 0.5 * quantities.min(axis=0)
        e = panel.prices / panel.expenditure[:, None]
        left = 1.0 - e @ gamma
        omega = panel.weights
        beta = (omega * left) @ (panel.shares - e * gamma) / float(omega @ left**2)
        return np.concatenate([gamma, beta[:-1]])

    def spec(self, theta: Vector) -> dict[str, Any]:
        return {"subsistence_quantities": self._split(theta)[0].copy()}

    def elasticities(self, theta: Vector, log_prices: Vector, log_expenditure: float
                     ) -> tuple[Vector, Vector, Matrix]:
        gamma, beta = self._split(theta)
        e = np.exp(log_prices - log_expenditure)
        w = e * gamma + beta * (1.0 - float(e @ gamma))
        with np.errstate(divide="ignore", invalid="ignore"):
            eta = beta / w
            marshallian = (-np.diag(1.0 - e * gamma / w)
                           - (beta / w)[:, None] * (e * gamma)[None, :])
        return w, eta, marshallian

    def check_identified(self, panel: Panel) -> None:
        if float(np.max(_relative_price_spread(panel.log_prices, panel.weights))) <= 1e-12:
            raise InvalidInput(
                "prices", "the relative prices of the items do not change over the sample, so "
                "the subsistence quantities cannot be told apart from the marginal budget shares")
