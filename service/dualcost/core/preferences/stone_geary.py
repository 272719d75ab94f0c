"""Stone-Geary preferences: the linear expenditure system (Geary 1950; Stone 1954).

Utility ``U(x) = sum_i beta_i ln(x_i - gamma_i)`` with marginal budget shares ``beta_i >= 0``
summing to one and subsistence quantities ``gamma``. The household first buys the subsistence
bundle, at cost ``p . gamma``, and spends what is left, the supernumerary income
``m - p . gamma``, in Cobb-Douglas fashion (Stone 1954, Economic Journal 64(255)).

We measure utility as supernumerary income at base prices ``p0``: with the Cobb-Douglas price
index ``B(p) = prod_i (p_i / p0_i)^beta_i`` (so ``B(p0) = 1``),

    e(p, u) = p . gamma + u B(p),
    v(p, m) = (m - p . gamma) / B(p),
    x_i(p, m) = gamma_i + beta_i (m - p . gamma) / p_i,
    h_i(p, u) = gamma_i + beta_i u B(p) / p_i,

and the direct utility in the same units is ``u(x) = prod_i (p0_i (x_i - gamma_i) / beta_i)^beta_i``
over the items with ``beta_i > 0``, so that ``v(p0, m) = m - p0 . gamma``. The family is not
homothetic: the Konüs index ``(p1 . gamma + u B(p1)) / (p0 . gamma + u B(p0))`` moves from the
Laspeyres index of the subsistence bundle (``u -> 0``) towards the Cobb-Douglas index ``B(p1)``
(``u -> infinity``). It is defined only for incomes above the subsistence cost ``p . gamma``.

The Slutsky matrix has the closed form
``S_ij = (m - p . gamma) (beta_i beta_j - delta_ij beta_i) / (p_i p_j)``, negative semidefinite
wherever income exceeds subsistence (Deaton and Muellbauer 1980, *Economics and Consumer
Behavior*, 3.1).
"""

from __future__ import annotations

from collections.abc import Mapping
from typing import Any

import numpy as np
import numpy.typing as npt

from .. import _checks
from ..errors import InvalidInput
from .base import BaseBudget, Matrix, Notice, ParameterSpec, Preferences, Vector

#: Frisch (1959) conjectured values of the money flexibility around -2 for typical incomes, and
#: Lluch, Powell and Williams (1977), *Patterns in Household Demand and Saving*, report estimates
#: in that range (both recalled from memory).
DEFAULT_FRISCH = -2.0


def _subsistence_route(base: BaseBudget, subsistence: npt.ArrayLike) -> tuple[Vector, Vector]:
    """beta_i = p0_i (q0_i - gamma_i) / (m0 - p0 . gamma), which makes q0 optimal at (p0, m0)."""
    gamma = _checks.vector("subsistence_quantities", subsistence, size=base.n_items)
    above = base.quantities - gamma
    bad = np.flatnonzero(above < 0.0)
    if bad.size:
        i = int(bad[0])
        raise InvalidInput(
            "subsistence_quantities",
            f"a subsistence quantity ({gamma[i]:.6g}) must not exceed the base quantity "
            f"({base.quantities[i]:.6g}) of the same item",
            i,
        )
    supernumerary = float(base.prices @ above)
    if supernumerary <= 0.0:
        raise InvalidInput(
            "subsistence_quantities",
            f"the subsistence cost at base prices p0 . gamma = {float(base.prices @ gamma):.10g} "
            f"must be below base expenditure {base.expenditure:.10g}",
        )
    return gamma, base.prices * above / supernumerary


def _elasticity_route(
    base: BaseBudget, elasticities: npt.ArrayLike | None, frisch: float | None
) -> tuple[Vector, Vector]:
    """beta_i = eta_i w0_i and gamma_i = m0 (w0_i + beta_i / phi) / p0_i.

    With these, ``x(p0, m0) = q0``, ``d ln x_i / d ln m = eta_i`` at the base and
    ``phi = -m0 / (m0 - p0 . gamma)`` (Frisch 1959; Deaton and Muellbauer 1980, 5.1).
    """
    n = base.n_items
    w0 = base.shares
    if elasticities is None:
        eta = np.ones(n)
    else:
        eta = _checks.nonnegative("expenditure_elasticities", elasticities, size=n)
    mean = float(w0 @ eta)
    if abs(mean - 1.0) > _checks.ADDING_UP_TOLERANCE:
        raise InvalidInput(
            "expenditure_elasticities",
            "their base-share-weighted mean must be 1 (Engel aggregation, within 1e-6), "
            f"got {mean:.10g}",
        )
    phi = DEFAULT_FRISCH if frisch is None else _checks.scalar("frisch", frisch)
    if phi >= 0.0:
        raise InvalidInput(
            "frisch",
            f"the Frisch money flexibility -m / (m - p . gamma) must be negative, got {phi:g}",
        )
    # Within the tolerance, divide by the mean so that sum(beta) = 1 exactly and q0 is optimal
    # to rounding error rather than to 1e-6.
    beta = eta * w0 / mean
    gamma = base.expenditure * (w0 + beta / phi) / base.prices
    return gamma, beta


class StoneGeary(Preferences):
    """Stone-Geary (linear expenditure system) preferences, utility in base-price money."""

    family = "stone_geary"
    title = "Stone-Geary: subsistence quantities, the rest spent with constant marginal shares"
    source = (
        "Stone (1954), Economic Journal 64(255); Geary (1950), Review of Economic Studies 18(1); "
        "elasticity calibration as in Frisch (1959), Econometrica 27(2)"
    )
    homothetic = False
    parameter_specs = (
        ParameterSpec(
            "subsistence_quantities",
            "Subsistence quantity gamma_i of each item, at most the base quantity. If given, the "
            "marginal budget shares follow from it; do not give elasticities or frisch then.",
        ),
        ParameterSpec(
            "expenditure_elasticities",
            "Expenditure (income) elasticity of each item at the base, 0 or more, with base "
            "share-weighted mean 1 (Engel aggregation). Default: 1 for every item.",
        ),
        ParameterSpec(
            "frisch",
            "Frisch money flexibility -m0 / (m0 - p0 . gamma) at the base, negative. Between -1 "
            "and 0 the subsistence cost at base prices is zero or negative.",
            default=DEFAULT_FRISCH,
        ),
    )

    def __init__(
        self,
        subsistence: Vector,
        marginal_shares: Vector,
        reference_prices: Vector,
        base_expenditure: float,
    ) -> None:
        self.subsistence = np.asarray(subsistence, dtype=np.float64)
        self.marginal_shares = np.asarray(marginal_shares, dtype=np.float64)
        self.reference_prices = np.asarray(reference_prices, dtype=np.float64)
        self.base_expenditure = float(base_expenditure)
        self.n_items = int(self.subsistence.size)
        self._log_p_ref = np.log(self.reference_prices)

    @classmethod
    def calibrate(
        cls,
        base: BaseBudget,
        *,
        subsistence_quantities: npt.ArrayLike | None = None,
        expenditure_elasticities: npt.ArrayLike | None = None,
        frisch: float | None = None,
        **_: Any,
    ) -> StoneGeary:
        """Calibrate from subsistence quantities, or else from elasticities and ``frisch``.

        Route (a), ``subsistence_quantities`` given:
        ``beta_i = p0_i (q0_i - gamma_i) / (m0 - p0 . gamma)``.

        Route (b), otherwise: ``beta_i = eta_i w0_i`` and
        ``gamma_i = m0 (w0_i + beta_i / phi) / p0_i`` with expenditure elasticities ``eta``
        (default 1 for every item) and Frisch parameter ``phi`` (default -2: Frisch 1959
        conjectured values around -2 for typical incomes, and Lluch, Powell and Williams 1977
        report estimates in that range; recalled from memory). ``phi`` must be negative; for
        ``-1 <= phi < 0`` the subsistence cost ``p0 . gamma = m0 (1 + 1/phi)`` is zero or
        negative, which the model allows (some gamma_i are then negative). Items with
        ``eta_i > -phi`` get a negative gamma_i.
        """
        if subsistence_quantities is not None:
            for name, value in (("expenditure_elasticities", expenditure_elasticities),
                                ("frisch", frisch)):
                if value is not None:
                    raise InvalidInput(
                        name, "give subsistence_quantities, or expenditure elasticities with "
                        "frisch, not both"
                    )
            gamma, beta = _subsistence_route(base, subsistence_quantities)
        else:
            gamma, beta = _elasticity_route(base, expenditure_elasticities, frisch)
        model = cls(gamma, beta, base.prices, base.expenditure)
        if expenditure_elasticities is not None:
            mean = float(base.shares @ np.asarray(expenditure_elasticities, dtype=np.float64))
            if abs(mean - 1.0) > 1e-12:
                model.calibration_notices = (Notice(
                    "elasticities_rescaled", "The expenditure elasticities' base-share-weighted "
                    f"mean is {mean:.10g}, within the 1e-6 tolerance of 1; the marginal budget "
                    "shares were divided by it so that they sum to 1 exactly."),)
        return model

    # -- pieces ----------------------------------------------------------------------------------
    def price_index(self, prices: Vector) -> float:
        """B(p) = prod_i (p_i / p0_i)^beta_i, the price of supernumerary utility; B(p0) = 1."""
        return float(np.exp(self.marginal_shares @ (np.log(prices) - self._log_p_ref)))

    def income_floor(self, prices: Vector) -> float:
        """The subsistence cost ``p . gamma``: income must exceed it."""
        return float(prices @ self.subsistence)

    def _supernumerary(self, prices: Vector, income: float) -> float:
        floor = self.income_floor(prices)
        if income <= floor:
            raise InvalidInput(
                "income",
                f"income {income:.10g} is at or below the subsistence cost p.gamma = "
                f"{floor:.10g} at these prices; the Stone-Geary model is defined only above it",
            )
        return float(income) - floor

    # -- the dual quartet --------------------------------------------------------------------
    def expenditure(self, prices: Vector, utility: float) -> float:
        return self.income_floor(prices) + utility * self.price_index(prices)

    def indirect_utility(self, prices: Vector, income: float) -> float:
        return self._supernumerary(prices, income) / self.price_index(prices)

    def marshallian(self, prices: Vector, income: float) -> Vector:
        supernumerary = self._supernumerary(prices, income)
        return self.subsistence + self.marginal_shares * supernumerary / prices

    def hicksian(self, prices: Vector, utility: float) -> Vector:
        return self.subsistence + self.marginal_shares * utility * self.price_index(prices) / prices

    def direct_utility(self, quantities: Vector) -> float:
        """u(x) = prod_{beta_i > 0} (p0_i (x_i - gamma_i) / beta_i)^beta_i, in base-price money.

        Raises ``InvalidInput("quantities", ...)`` for a bundle below subsistence, where the
        logarithmic utility is not defined.
        """
        x = np.asarray(quantities, dtype=np.float64)
        above = x - self.subsistence
        used = self.marginal_shares > 0.0
        bad = np.flatnonzero((above < 0.0) | (used & (above <= 0.0)))
        if bad.size:
            i = int(bad[0])
            raise InvalidInput(
                "quantities",
                f"the quantity {x[i]:.6g} does not exceed the subsistence quantity "
                f"{self.subsistence[i]:.6g}; Stone-Geary utility is defined only above it",
                i,
            )
        b = self.marginal_shares[used]
        return float(np.exp(b @ np.log(self.reference_prices[used] * above[used] / b)))

    def slutsky_matrix(self, prices: Vector, income: float) -> Matrix:
        """S_ij = (m - p . gamma) (beta_i beta_j - delta_ij beta_i) / (p_i p_j)."""
        b = self.marginal_shares
        core = np.outer(b, b) - np.diag(b)
        return self._supernumerary(prices, income) * core / np.outer(prices, prices)

    def parameters(self) -> Mapping[str, Any]:
        """Parameters, with the base point's Frisch parameter and expenditure elasticities.

        At the base, ``phi = -m0 / (m0 - p0 . gamma)`` and ``eta_i = beta_i / w0_i`` (``None``
        for an item with no base expenditure).
        """
        p0, m0 = self.reference_prices, self.base_expenditure
        floor = self.income_floor(p0)
        w0 = p0 * self.marshallian(p0, m0) / m0
        beta = self.marginal_shares
        eta = [float(b / w) if w > 0.0 else None for b, w in zip(beta, w0, strict=True)]
        return {
            "subsistence_quantities": self.subsistence.tolist(),
            "marginal_budget_shares": self.marginal_shares.tolist(),
            "subsistence_cost_at_base_prices": floor,
            "frisch_at_base": -m0 / (m0 - floor),
            "expenditure_elasticities_at_base": eta,
        }
