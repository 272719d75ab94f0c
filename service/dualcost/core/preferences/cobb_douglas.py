"""Cobb-Douglas preferences (Cobb and Douglas 1928).

Utility ``u(x) = prod_i (p0_i x_i / a_i)^(a_i)`` with exponents ``a_i >= 0`` summing to one.
Calibrated to a base budget, ``a`` is the vector of base expenditure shares and utility is money
at base prices, so the expenditure function is

    e(p, u) = u * prod_i (p_i / p0_i)^(a_i),

demands are ``x_i(p, m) = a_i m / p_i`` (constant budget shares) and
``h_i(p, u) = a_i e(p, u) / p_i``. The geometric Laspeyres index with base shares equals the
Konüs index exactly (e.g. ILO et al. 2004, *Consumer Price Index Manual*, 17.61-17.64).
"""

from __future__ import annotations

from collections.abc import Mapping
from typing import Any

import numpy as np
from numpy.typing import NDArray

from .base import BaseBudget, BatchCalibration, HomotheticPreferences, Vector, _per_item


class CobbDouglas(HomotheticPreferences):
    """Cobb-Douglas preferences with exponents ``shares`` and reference prices ``reference_prices``.

    ``shares`` may carry a leading household axis, ``(H, N)``: one model for H households
    (:meth:`calibrate_many`).
    """

    family = "cobb_douglas"
    title = "Cobb-Douglas: constant budget shares, unit elasticity of substitution"
    source = "Cobb and Douglas (1928), American Economic Review 18(1)"
    broadcasts = True

    def __init__(self, shares: Vector, reference_prices: Vector) -> None:
        self.shares = np.asarray(shares, dtype=np.float64)
        self.reference_prices = np.asarray(reference_prices, dtype=np.float64)
        self.n_items = int(self.shares.shape[-1])
        self.batch_shape = tuple(self.shares.shape[:-1])
        self._log_p_ref = np.log(self.reference_prices)

    @classmethod
    def calibrate(cls, base: BaseBudget, **parameters: Any) -> CobbDouglas:
        """Exponents are the base expenditure shares; no behavioural parameter is needed."""
        return cls(base.shares, base.prices)

    @classmethod
    def _calibrate_many(cls, base: BaseBudget, **parameters: Any) -> BatchCalibration:
        """Each household's exponents are its own base shares."""
        return BatchCalibration(cls(base.shares, base.prices))

    def _take(self, rows: NDArray[np.intp]) -> CobbDouglas:
        return CobbDouglas(self.shares[rows], self.reference_prices)

    def _unit_cost(self, prices: Vector) -> Any:
        """c(p) = prod_i (p_i / p0_i)^(a_i); c(p0) = 1."""
        if np.array_equal(prices, self.reference_prices):
            # exp(0) = 1, bit for bit, without a pass over the items of every household.
            return np.ones(self.batch_shape) if self.batch_shape else 1.0
        log_rel = np.log(prices) - self._log_p_ref
        if self.batch_shape:
            return np.exp(np.sum(self.shares * log_rel, axis=-1))
        if log_rel.ndim > 1:
            return np.exp(log_rel @ self.shares)
        return np.exp(self.shares @ log_rel)

    def _budget_shares(self, prices: Vector) -> Vector:
        """w(p) = a at every price: the budget shares are constant."""
        return self.shares.copy()

    def _marshallian(self, prices: Vector, income: Any) -> Any:
        """x_i(p, m) = a_i m / p_i: the shares are the exponents, with no copy to remember."""
        return _per_item(income) * self.shares / prices

    def _hicksian(self, prices: Vector, utility: Any) -> Any:
        """h_i(p, u) = a_i e(p, u) / p_i."""
        return _per_item(utility * self._evaluated(prices, False)[0]) * self.shares / prices

    def direct_utility(self, quantities: Vector) -> float:
        used = self.shares > 0.0
        a = self.shares[used]
        return float(np.exp(a @ np.log(self.reference_prices[used] * quantities[used] / a)))

    @property
    def substitution_elasticity(self) -> float:
        return 1.0

    def parameters(self) -> Mapping[str, Any]:
        return {"exponents": self.shares.tolist()}
