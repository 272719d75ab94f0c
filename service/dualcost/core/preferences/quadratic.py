"""Homogeneous quadratic preferences, ``f(x) = (x' A x)^(1/2)`` (Diewert 1976).

We work on the cost side: the unit cost dual to ``f`` is ``c(p) = (p' B p)^(1/2)`` with
``B = A^(-1)`` (Diewert 1976, "Exact and superlative index numbers", Journal of Econometrics 4),
so that

    e(p, u) = u c(p),    h(p, u) = u B p / c(p),    x(p, m) = m B p / (p' B p),

and the Fisher index of optimal quantities equals the Konüs index exactly (same paper).

Calibrated form. With base expenditure ``E = p0 . q0``, ``M = diag(q0 / p0)`` and an elasticity of
substitution ``sigma >= 0`` at the base point,

    B = ((1 + sigma) q0 q0' / E - sigma M) / E,

which gives ``c(p0) = 1`` (utility is money at base prices), ``B p0 = q0 / E`` (the base bundle is
optimal) and, with price relatives ``rho = p / p0`` and base shares ``s``,

    c(p)^2 = (sum_i s_i rho_i)^2 - sigma Var_s(rho),

the share-weighted mean of the relatives squared, less ``sigma`` times their share-weighted
variance. Every cross Allen elasticity ``c c_ij / (c_i c_j)`` at the base is ``sigma`` and the own
ones are ``-sigma (1 - s_i) / s_i``, as for CES (Allen 1938). ``sigma = 0`` is Leontief.

``B`` has at most one positive eigenvalue, so ``c`` is concave where it is defined; but it is
defined only where ``p' B p > 0`` (relatives not too dispersed: ``Var_s(rho) < mean^2 / sigma``),
and demands stay non-negative only while ``rho_i < (1 + sigma) / sigma * sum_j s_j rho_j``.
Outside the domain the model raises; outside the second region :meth:`regularity` says so.

An explicit ``cost_matrix`` B may be given instead of ``sigma``: it is scaled so that
``c(p0) = 1``, and the base bundle need not be optimal for it (``parameters()`` reports the
relative gap).
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


def _explicit_matrix(base: BaseBudget, value: npt.ArrayLike) -> Matrix:
    """A symmetric cost matrix, scaled so that p0' B p0 = 1."""
    b = _checks.square_matrix("cost_matrix", value, base.n_items)
    _checks.symmetric("cost_matrix", b)
    b = 0.5 * (b + b.T)
    level = float(base.prices @ b @ base.prices)
    if level <= 0.0:
        raise InvalidInput(
            "cost_matrix",
            f"p0' B p0 must be greater than zero for the cost function to be defined at base "
            f"prices, got {level:.6g}",
        )
    return b / level


class HomogeneousQuadratic(HomotheticPreferences):
    """Homogeneous quadratic preferences through the unit cost ``c(p) = (p' B p)^(1/2)``."""

    family = "quadratic"
    title = "Homogeneous quadratic: square root of a quadratic form, exact for the Fisher index"
    source = "Diewert (1976), Journal of Econometrics 4; Konüs and Byushgens (1926)"
    parameter_specs = (
        ParameterSpec(
            "sigma",
            "Elasticity of substitution at the base point, 0 or more (0: Leontief). Give sigma "
            "or cost_matrix.",
        ),
        ParameterSpec(
            "cost_matrix",
            "Symmetric n by n matrix B of the unit cost (p' B p)^(1/2); scaled so that the cost "
            "at base prices is 1. Give sigma or cost_matrix.",
            shape="matrix",
        ),
    )

    def __init__(
        self,
        cost_matrix: Matrix,
        reference_prices: Vector,
        sigma: float | None = None,
        base_quantities: Vector | None = None,
    ) -> None:
        self.cost_matrix = np.asarray(cost_matrix, dtype=np.float64)
        self.reference_prices = np.asarray(reference_prices, dtype=np.float64)
        self.sigma = None if sigma is None else float(sigma)
        self.base_quantities = None if base_quantities is None else np.asarray(base_quantities)
        self.n_items = int(self.reference_prices.size)

    @classmethod
    def calibrate(
        cls,
        base: BaseBudget,
        *,
        sigma: float | None = None,
        cost_matrix: npt.ArrayLike | None = None,
        **_: Any,
    ) -> HomogeneousQuadratic:
        """``B = ((1 + sigma) q0 q0' / E - sigma diag(q0 / p0)) / E``, or an explicit B."""
        if sigma is not None and cost_matrix is not None:
            raise InvalidInput("cost_matrix", "give sigma or cost_matrix, not both")
        if cost_matrix is not None:
            b = _explicit_matrix(base, cost_matrix)
            return cls(b, base.prices, None, base.quantities)
        if sigma is None:
            raise InvalidInput("sigma", "give sigma or cost_matrix")
        s = check_sigma("sigma", sigma)
        q0, e0 = base.quantities, base.expenditure
        b = ((1.0 + s) * np.outer(q0, q0) / e0 - s * np.diag(q0 / base.prices)) / e0
        return cls(b, base.prices, s, base.quantities)

    # -- pieces ----------------------------------------------------------------------------------
    def _quadratic_form(self, prices: Vector) -> tuple[float, Vector]:
        """(p' B p, B p), raising where the cost function is not defined."""
        with np.errstate(over="ignore", invalid="ignore"):
            bp = self.cost_matrix @ prices
            level = float(prices @ bp)
        if not (np.isfinite(level) and np.all(np.isfinite(bp))):
            raise NumericalFailure("unit cost", "p'Bp is beyond the floating-point range; the "
                                   "prices are too far from base for the quadratic model")
        if level <= 0.0:
            raise InvalidInput(
                "prices",
                f"the quadratic model's cost function is not defined at these prices "
                f"(p'Bp = {level:.6g} <= 0); lower sigma or bring the prices closer to base",
            )
        return level, bp

    def _unit_cost(self, prices: Vector) -> float:
        """c(p) = (p' B p)^(1/2); c(p0) = 1."""
        return math.sqrt(self._quadratic_form(prices)[0])

    def _budget_shares(self, prices: Vector) -> Vector:
        """w_i(p) = p_i (B p)_i / (p' B p)."""
        level, bp = self._quadratic_form(prices)
        return prices * bp / level

    # -- the dual quartet: e and v from the base class, x and h from one p' B p ----------------
    def _marshallian(self, prices: Vector, income: float) -> Vector:
        level, bp = self._quadratic_form(prices)
        return income * bp / level

    def _hicksian(self, prices: Vector, utility: float) -> Vector:
        level, bp = self._quadratic_form(prices)
        return utility * bp / math.sqrt(level)

    def direct_utility(self, quantities: Vector) -> float:
        """f(x) = (x' B^(-1) x)^(1/2) on the items the model uses (Diewert 1976).

        For the calibrated ``sigma = 0`` (Leontief) case B has rank one and
        ``f(x) = E min_i x_i / q0_i`` over the items with ``q0_i > 0``. An explicit singular
        ``cost_matrix`` has no closed form here (``NotImplementedError``). Bundles outside the
        cone where ``x' B^(-1) x > 0`` raise ``InvalidInput("quantities", ...)``.
        """
        x = np.asarray(quantities, dtype=np.float64)
        if self.sigma is not None and self.base_quantities is not None:
            used = self.base_quantities > 0.0
            if self.sigma == 0.0:
                q0 = self.base_quantities
                e0 = float(self.reference_prices @ q0)
                return e0 * float(np.min(x[used] / q0[used]))
        else:
            used = np.any(self.cost_matrix != 0.0, axis=1)
        block = self.cost_matrix[np.ix_(used, used)]
        try:
            a = np.linalg.inv(block)
        except np.linalg.LinAlgError:
            raise NotImplementedError(
                "the quadratic model's cost matrix is singular: no closed-form direct utility"
            ) from None
        level = float(x[used] @ a @ x[used])
        if level <= 0.0:
            raise InvalidInput(
                "quantities",
                f"the quadratic utility is not defined for this bundle (x'B^-1 x = {level:.6g} "
                "<= 0)",
            )
        return math.sqrt(level)

    def slutsky_matrix(self, prices: Vector, income: float) -> Matrix:
        """S = u (B / c - (B p)(B p)' / c^3) at u = v(p, m)."""
        level, bp = self._quadratic_form(prices)
        c = math.sqrt(level)
        u = float(income) / c
        full = level * self.cost_matrix
        rank_one = np.outer(bp, bp)
        # Near the Leontief limit the two terms cancel.
        core = drop_rounding(full - rank_one, np.abs(full) + np.abs(rank_one))
        return u * core / (c * level)

    def regularity(self, prices: Vector, income: float) -> list[Notice]:
        """Shares outside [0, 1] and a Slutsky matrix that is not negative semidefinite."""
        notices = share_notices(self.budget_shares(prices), "quadratic model's")
        return notices + slutsky_notices(self.slutsky_matrix(prices, income), prices)

    @property
    def substitution_elasticity(self) -> float | None:
        """sigma when the model was built from it (the Allen elasticity at the base)."""
        return self.sigma

    def parameters(self) -> Mapping[str, Any]:
        """sigma, the (scaled) cost matrix and the base bundle's relative gap from optimal.

        The gap is ``max_i |x_i(p0, m0) - q0_i| / max_i q0_i`` (zero by construction for the
        sigma form).
        """
        out: dict[str, Any] = {"sigma": self.sigma, "cost_matrix": self.cost_matrix.tolist()}
        if self.base_quantities is not None:
            q0 = self.base_quantities
            m0 = float(self.reference_prices @ q0)
            gap = self.marshallian(self.reference_prices, m0) - q0
            out["base_quantity_gap"] = float(np.max(np.abs(gap)) / np.max(np.abs(q0)))
        return out
