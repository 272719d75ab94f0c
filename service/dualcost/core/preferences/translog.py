"""Homothetic translog preferences (Christensen, Jorgenson and Lau 1975; Diewert 1976).

The unit cost is a second-order polynomial in the log price relatives ``r = ln(p / p0)``:

    ln c(p) = w0 . r + 1/2 r' Gamma r,      c(p0) = 1,

with base shares ``w0`` and a symmetric matrix ``Gamma`` whose rows sum to zero (which makes
``c`` homogeneous of degree one in prices). Then ``e(p, u) = u c(p)``, utility is money at base
prices, and the budget shares are linear in log prices, ``w(p) = w0 + Gamma r``, so
``x_i = m w_i(p) / p_i`` and ``h_i = e(p, u) w_i(p) / p_i`` (Christensen, Jorgenson and Lau 1975,
American Economic Review 65(3)). The Törnqvist index of optimal quantities equals the Konüs
index exactly (Diewert 1976, "Exact and superlative index numbers", Journal of Econometrics 4).

``Gamma`` may be given, or built from one elasticity of substitution ``sigma`` at the base point:
``Gamma = (1 - sigma) (diag(w0) - w0 w0')``. With it every cross Allen elasticity
``c c_ij / (c_i c_j)`` at the base equals ``sigma`` and the own ones are
``-sigma (1 - w0_i) / w0_i``, as for CES (Allen 1938, *Mathematical Analysis for Economists*;
Uzawa 1962).

The translog is a flexible form, not a globally regular one: away from the base the shares can
leave [0, 1] and the Slutsky matrix
``S_ij = e / (p_i p_j) (Gamma_ij + w_i w_j - delta_ij w_i)`` can lose negative semidefiniteness;
:meth:`Translog.regularity` reports both. It has no closed-form direct utility.
"""

from __future__ import annotations

import math
from collections.abc import Mapping
from typing import Any

import numpy as np
import numpy.typing as npt

from .. import _checks
from ..errors import InvalidInput, NumericalFailure
from .base import (
    BaseBudget,
    HomotheticPreferences,
    Matrix,
    Notice,
    ParameterSpec,
    Vector,
    drop_rounding,
    share_notices,
    slutsky_notices,
)
from .ces import check_sigma


def check_gamma(value: npt.ArrayLike, n: int) -> Matrix:
    """A translog ``Gamma``: n by n, symmetric (1e-8) and rows summing to zero (1e-6).

    Within those tolerances the matrix is projected exactly onto the symmetric, zero-row-sum
    matrices, ``P (G + G')/2 P`` with ``P = I - 11'/n``, so that the unit cost is homogeneous of
    degree one to rounding error.
    """
    g = _checks.square_matrix("gamma", value, n)
    _checks.symmetric("gamma", g)
    rows = g.sum(axis=1)
    bad = np.flatnonzero(np.abs(rows) > _checks.ADDING_UP_TOLERANCE)
    if bad.size:
        i = int(bad[0])
        raise InvalidInput(
            "gamma",
            f"each row must sum to zero (within 1e-6) so that the cost function is homogeneous "
            f"of degree one in prices; row {i} sums to {rows[i]:.6g}",
            i,
        )
    centre = np.eye(n) - 1.0 / n
    return centre @ (0.5 * (g + g.T)) @ centre


def _exp(x: float, what: str) -> float:
    """exp(x), raising NumericalFailure rather than overflowing or underflowing to zero."""
    try:
        value = math.exp(x)
    except OverflowError:
        value = math.inf
    if value == 0.0 or math.isinf(value):
        raise NumericalFailure(what, f"exp({x:.6g}) is beyond the floating-point range; the "
                               "prices are too far from base for the translog model")
    return value


class Translog(HomotheticPreferences):
    """Homothetic translog unit cost around base prices ``reference_prices``."""

    family = "translog"
    title = "Translog: budget shares linear in log prices, a flexible second-order form"
    source = (
        "Christensen, Jorgenson and Lau (1975), American Economic Review 65(3); "
        "Diewert (1976), Journal of Econometrics 4"
    )
    parameter_specs = (
        ParameterSpec(
            "sigma",
            "Elasticity of substitution at the base point, 0 or more; sets "
            "Gamma = (1 - sigma)(diag(w0) - w0 w0'). Give sigma or gamma.",
        ),
        ParameterSpec(
            "gamma",
            "The n by n matrix Gamma of second-order log-price terms: symmetric, rows summing "
            "to zero. Give sigma or gamma.",
            shape="matrix",
        ),
    )

    def __init__(
        self, shares: Vector, reference_prices: Vector, gamma: Matrix, sigma: float | None = None
    ) -> None:
        self.shares = np.asarray(shares, dtype=np.float64)
        self.reference_prices = np.asarray(reference_prices, dtype=np.float64)
        self.gamma = np.asarray(gamma, dtype=np.float64)
        self.sigma = None if sigma is None else float(sigma)
        self.n_items = int(self.shares.size)
        self._log_p_ref = np.log(self.reference_prices)

    @classmethod
    def calibrate(
        cls,
        base: BaseBudget,
        *,
        sigma: float | None = None,
        gamma: npt.ArrayLike | None = None,
        **_: Any,
    ) -> Translog:
        """First-order terms are the base shares; second-order from ``sigma`` or ``gamma``."""
        w0 = base.shares
        if sigma is not None and gamma is not None:
            raise InvalidInput("gamma", "give sigma or gamma, not both")
        if gamma is not None:
            given = _checks.square_matrix("gamma", gamma, base.n_items)
            cleaned = check_gamma(given, base.n_items)
            model = cls(w0, base.prices, cleaned)
            moved = float(np.max(np.abs(cleaned - given)))
            if moved > 1e-12:
                model.calibration_notices = (Notice(
                    "gamma_adjusted", "Within the 1e-6 tolerance, gamma was made exactly "
                    f"symmetric with rows summing to zero (largest change {moved:.3g})."),)
            return model
        if sigma is None:
            raise InvalidInput("sigma", "give sigma or gamma")
        s = check_sigma("sigma", sigma)
        return cls(w0, base.prices, (1.0 - s) * (np.diag(w0) - np.outer(w0, w0)), s)

    def _log_relatives(self, prices: Vector) -> Vector:
        return np.log(prices) - self._log_p_ref

    def log_unit_cost(self, prices: Vector) -> float:
        """ln c(p) = w0 . r + 1/2 r' Gamma r with r = ln(p / p0)."""
        r = self._log_relatives(prices)
        return float(self.shares @ r + 0.5 * r @ self.gamma @ r)

    def _unit_cost(self, prices: Vector) -> float:
        """c(p), with c(p0) = 1."""
        return _exp(self.log_unit_cost(prices), "unit cost")

    def _budget_shares(self, prices: Vector) -> Vector:
        """w(p) = d ln c / d ln p = w0 + Gamma r."""
        return self.shares + self.gamma @ self._log_relatives(prices)

    def _indirect_utility(self, prices: Vector, income: float) -> float:
        """m exp(-ln c(p)): where c(p) overflows, 1 / c would quietly give zero; this raises."""
        return float(income) * _exp(-self.log_unit_cost(prices), "indirect utility")

    def slutsky_matrix(self, prices: Vector, income: float) -> Matrix:
        """S_ij = e / (p_i p_j) (Gamma_ij + w_i w_j - delta_ij w_i), with e = m at u = v(p, m)."""
        w = self.budget_shares(prices)
        ww = np.outer(w, w)
        dw = np.diag(w)
        # At the base with sigma = 0 the terms cancel exactly.
        core = drop_rounding(self.gamma + ww - dw, np.abs(self.gamma) + np.abs(ww) + np.abs(dw))
        return income * core / np.outer(prices, prices)

    def regularity(self, prices: Vector, income: float) -> list[Notice]:
        """Shares outside [0, 1] and a Slutsky matrix that is not negative semidefinite."""
        notices = share_notices(self.budget_shares(prices), "translog")
        return notices + slutsky_notices(self.slutsky_matrix(prices, income), prices)

    @property
    def substitution_elasticity(self) -> float | None:
        """sigma when the model was built from it (the Allen elasticity at the base)."""
        return self.sigma

    def parameters(self) -> Mapping[str, Any]:
        return {
            "sigma": self.sigma,
            "gamma": self.gamma.tolist(),
            "weights": self.shares.tolist(),
        }
