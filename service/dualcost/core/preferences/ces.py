"""Constant elasticity of substitution (CES) preferences (Arrow, Chenery, Minhas and Solow 1961).

In the calibrated share form, with base shares ``s`` at base prices ``p0`` and elasticity of
substitution ``sigma >= 0``, the unit cost is the power mean of order ``1 - sigma`` of the price
relatives,

    c(p) = ( sum_i s_i (p_i / p0_i)^(1 - sigma) )^(1 / (1 - sigma)),      c(p0) = 1,

so ``e(p, u) = u c(p)`` with utility measured as money at base prices. The dual utility is
``u(x) = ( sum_i s_i (p0_i x_i / s_i)^rho )^(1/rho)`` with ``rho = (sigma - 1) / sigma``.
Demands are ``x_i = m w_i(p) / p_i`` with current shares
``w_i(p) = s_i (p_i/p0_i)^(1-sigma) / sum_j s_j (p_j/p0_j)^(1-sigma)``.

``sigma = 0`` is Leontief (fixed proportions) and ``sigma = 1`` Cobb-Douglas; both are exact
limits of the same evaluation (see :mod:`dualcost.core._means`), and large ``sigma`` cannot
overflow. The Lloyd-Moulton index with base shares and the same ``sigma`` equals the Konüs index
(Lloyd 1975; Moulton 1996), and so does the Sato-Vartia index (Sato 1976; Vartia 1976).
"""

from __future__ import annotations

from collections.abc import Mapping
from typing import Any

import numpy as np
from numpy.typing import NDArray

from .. import _checks
from .._means import log_power_mean, log_quantity_mean, power_mean_shares
from ..errors import InvalidInput
from .base import BaseBudget, BatchCalibration, HomotheticPreferences, ParameterSpec, Vector


def check_sigma(name: str, sigma: Any) -> float:
    """An elasticity of substitution: a finite number, zero or more."""
    if sigma is None:
        raise InvalidInput(name, "is required: give the elasticity of substitution (0 or more)")
    value = _checks.scalar(name, sigma)
    if value < 0.0:
        raise InvalidInput(
            name, f"an elasticity of substitution must be zero or more, got {value:g}"
        )
    return value


class CES(HomotheticPreferences):
    """CES preferences in calibrated share form.

    ``shares`` may carry a leading household axis, ``(H, N)``: one model for H households with
    a common sigma (:meth:`calibrate_many`).
    """

    family = "ces"
    title = "CES: one constant elasticity of substitution between all items"
    source = (
        "Arrow, Chenery, Minhas and Solow (1961), Review of Economics and Statistics 43(3); "
        "calibrated share form as in Lloyd (1975) and Moulton (1996)"
    )
    parameter_specs = (
        ParameterSpec(
            "sigma",
            "Elasticity of substitution, 0 or more (0: Leontief, 1: Cobb-Douglas).",
            required=True,
        ),
    )
    broadcasts = True

    def __init__(self, shares: Vector, reference_prices: Vector, sigma: float) -> None:
        self.shares = np.asarray(shares, dtype=np.float64)
        self.reference_prices = np.asarray(reference_prices, dtype=np.float64)
        self.sigma = float(sigma)
        self.n_items = int(self.shares.shape[-1])
        self.batch_shape = tuple(self.shares.shape[:-1])
        self._log_p_ref = np.log(self.reference_prices)

    @classmethod
    def calibrate(cls, base: BaseBudget, *, sigma: float | None = None, **_: Any) -> CES:
        """Weights are the base shares; the caller must give ``sigma`` (no default)."""
        return cls(base.shares, base.prices, check_sigma("sigma", sigma))

    @classmethod
    def _calibrate_many(cls, base: BaseBudget, *, sigma: float | None = None,
                        **_: Any) -> BatchCalibration:
        """Each household's weights are its own base shares; sigma is common."""
        return BatchCalibration(cls(base.shares, base.prices, check_sigma("sigma", sigma)))

    def _take(self, rows: NDArray[np.intp]) -> CES:
        return CES(self.shares[rows], self.reference_prices, self.sigma)

    def _log_relatives(self, prices: Vector) -> Vector:
        return np.log(prices) - self._log_p_ref

    def _unit_cost(self, prices: Vector) -> Any:
        """c(p), the power mean of order 1 - sigma of p / p0 with base-share weights."""
        if np.array_equal(prices, self.reference_prices):
            return _cost_at_reference(self.shares)
        return np.exp(log_power_mean(self._log_relatives(prices), self.shares, 1.0 - self.sigma))

    def _budget_shares(self, prices: Vector) -> Vector:
        """w_i(p) = d ln c / d ln p_i."""
        if np.array_equal(prices, self.reference_prices):
            return _shares_at_reference(self.shares, 1.0 - self.sigma)
        return power_mean_shares(self._log_relatives(prices), self.shares, 1.0 - self.sigma)

    def direct_utility(self, quantities: Vector) -> float:
        """u(x) = M_rho(p0 x / s; s) with rho = (sigma - 1) / sigma, over the items with s > 0.

        The same aggregate as each group of a nested CES tree (Sato 1967), so a zero quantity
        is handled as there.
        """
        x = _checks.nonnegative("x", quantities, size=self.n_items)
        used = self.shares > 0.0
        s = self.shares[used]
        log_z = np.full(s.size, -np.inf)
        bought = x[used] > 0.0
        log_z[bought] = np.log(self.reference_prices[used][bought] * x[used][bought] / s[bought])
        return float(np.exp(log_quantity_mean(log_z, s, self.sigma)))

    @property
    def substitution_elasticity(self) -> float:
        return self.sigma

    def parameters(self) -> Mapping[str, Any]:
        return {"sigma": self.sigma, "weights": self.shares.tolist()}


# At the calibration point every log relative is 0: the power mean is exp(0) = 1 and each term
# of the shares is its weight (see dualcost.core._means). These give the general formulas'
# values there bit for bit, without their exponentials: worth it for thousands of households.
def _cost_at_reference(weights: Vector) -> Any:
    return np.ones(weights.shape[:-1]) if weights.ndim > 1 else 1.0


def _shares_at_reference(weights: Vector, t: float) -> Vector:
    if t == 0.0:
        return weights.copy()
    return weights / np.sum(weights, axis=-1, keepdims=True)
