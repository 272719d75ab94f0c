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
from numpy.typing import NDArray

from .. import _checks
from ..errors import InvalidInput
from .base import (
    BaseBudget,
    BatchCalibration,
    Matrix,
    Notice,
    ParameterSpec,
    Preferences,
    RowRefusal,
    Vector,
    _per_item,
)

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
    phi = _checked_frisch(frisch)
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
            shape="vector",
        ),
        ParameterSpec(
            "expenditure_elasticities",
            "Expenditure (income) elasticity of each item at the base, 0 or more, with base "
            "share-weighted mean 1 (Engel aggregation). Default: 1 for every item.",
            shape="vector",
        ),
        ParameterSpec(
            "frisch",
            "Frisch money flexibility -m0 / (m0 - p0 . gamma) at the base, negative. Between -1 "
            "and 0 the subsistence cost at base prices is zero or negative.",
            default=DEFAULT_FRISCH,
        ),
    )

    broadcasts = True

    def __init__(
        self,
        subsistence: Vector,
        marginal_shares: Vector,
        reference_prices: Vector,
        base_expenditure: Any,
    ) -> None:
        self.subsistence = np.asarray(subsistence, dtype=np.float64)
        self.marginal_shares = np.asarray(marginal_shares, dtype=np.float64)
        self.reference_prices = np.asarray(reference_prices, dtype=np.float64)
        self.base_expenditure = (float(base_expenditure) if np.ndim(base_expenditure) == 0
                                 else np.asarray(base_expenditure, dtype=np.float64))
        self.n_items = int(self.marginal_shares.shape[-1])
        self.batch_shape = tuple(np.broadcast_shapes(self.subsistence.shape[:-1],
                                                     self.marginal_shares.shape[:-1]))
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
            _one_route(expenditure_elasticities, frisch)
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

    @classmethod
    def _calibrate_many(
        cls,
        base: BaseBudget,
        *,
        subsistence_quantities: npt.ArrayLike | None = None,
        expenditure_elasticities: npt.ArrayLike | None = None,
        frisch: float | None = None,
        **_: Any,
    ) -> BatchCalibration:
        """Every household of a budget of many at once, with the parameters common to all.

        Subsistence route: ``beta_h = p0 (q0_h - gamma) / (m_h - p0 . gamma)``, defined when
        every base quantity is at least its subsistence quantity and income exceeds
        ``p0 . gamma``; other households are refused (``below_subsistence``). Elasticity route:
        ``beta_h = eta w0_h / (w0_h . eta)``, the common elasticities divided by the household's
        share-weighted mean so that Engel aggregation holds for each household (counted in the
        remarks: for one budget, :meth:`calibrate` refuses a mean away from 1 instead), and
        ``gamma_h = m_h (w0_h + beta_h / phi) / p0`` (Frisch 1959).
        """
        n = base.n_items
        if subsistence_quantities is not None:
            _one_route(expenditure_elasticities, frisch)
            gamma = _checks.vector("subsistence_quantities", subsistence_quantities, size=n)
            return _many_from_subsistence(cls, base, gamma)
        eta = (np.ones(n) if expenditure_elasticities is None else
               _checks.nonnegative("expenditure_elasticities", expenditure_elasticities, size=n))
        return _many_from_elasticities(cls, base, eta, _checked_frisch(frisch))

    def _take(self, rows: NDArray[np.intp]) -> StoneGeary:
        gamma = self.subsistence if self.subsistence.ndim == 1 else self.subsistence[rows]
        return StoneGeary(gamma, self.marginal_shares[rows], self.reference_prices,
                          np.asarray(self.base_expenditure)[rows])

    # -- pieces ----------------------------------------------------------------------------------
    def _aggregates(self, prices: Vector) -> tuple[Any, Any]:
        """(p . gamma, B(p)), remembered for the last few price arrays."""
        return self._remember(prices, self._price_aggregates)

    def _price_aggregates(self, prices: Vector) -> tuple[Any, Any]:
        log_rel = np.log(prices) - self._log_p_ref
        if self.batch_shape:  # per-household parameters: sums along the item axis
            floor = np.sum(self.subsistence * prices, axis=-1)
            if np.array_equal(prices, self.reference_prices):
                # B(p0) = exp(0) = 1, bit for bit, without a pass over every household's items.
                return floor, np.ones(self.batch_shape)
            return floor, np.exp(np.sum(self.marginal_shares * log_rel, axis=-1))
        if prices.ndim == 1:
            return float(prices @ self.subsistence), float(np.exp(self.marginal_shares @ log_rel))
        return prices @ self.subsistence, np.exp(log_rel @ self.marginal_shares)

    def price_index(self, prices: Vector) -> Any:
        """B(p) = prod_i (p_i / p0_i)^beta_i, the price of supernumerary utility; B(p0) = 1."""
        return self._aggregates(np.asarray(prices, dtype=np.float64))[1]

    def _income_floor(self, prices: Vector) -> Any:
        """The subsistence cost ``p . gamma``: income must exceed it."""
        return self._aggregates(prices)[0]

    def describe_income_floor(self, prices_name: str) -> str:
        return f"the subsistence cost {prices_name} . gamma"

    def _supernumerary(self, prices: Vector, income: Any) -> tuple[Any, Any]:
        """(m - p . gamma, B(p)), refusing an income at or below the subsistence cost."""
        floor, index = self._aggregates(prices)
        short = np.asarray(income <= floor)
        if short.any():
            first = np.unravel_index(int(np.argmax(short)), short.shape)
            m = float(np.broadcast_to(income, short.shape)[first])
            f = float(np.broadcast_to(floor, short.shape)[first])
            raise InvalidInput(
                "income",
                f"income {m:.10g} is at or below the subsistence cost p.gamma = "
                f"{f:.10g} at these prices; the Stone-Geary model is defined only above it",
            )
        return income - floor, index

    # -- the dual quartet --------------------------------------------------------------------
    def _expenditure(self, prices: Vector, utility: Any) -> Any:
        """e(p, u) = p . gamma + u B(p)."""
        floor, index = self._aggregates(prices)
        return floor + utility * index

    def _indirect_utility(self, prices: Vector, income: Any) -> Any:
        """v(p, m) = (m - p . gamma) / B(p)."""
        supernumerary, index = self._supernumerary(prices, income)
        return supernumerary / index

    def _marshallian(self, prices: Vector, income: Any) -> Any:
        """x_i(p, m) = gamma_i + beta_i (m - p . gamma) / p_i."""
        supernumerary, _ = self._supernumerary(prices, income)
        return self.subsistence + self.marginal_shares * _per_item(supernumerary) / prices

    def _hicksian(self, prices: Vector, utility: Any) -> Any:
        """h_i(p, u) = gamma_i + beta_i u B(p) / p_i."""
        _, index = self._aggregates(prices)
        return (self.subsistence
                + self.marginal_shares * _per_item(utility) * _per_item(index) / prices)

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
        return self._supernumerary(prices, income)[0] * core / np.outer(prices, prices)

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


def _one_route(elasticities: Any, frisch: Any) -> None:
    """Subsistence quantities exclude the elasticity route's parameters."""
    for name, value in (("expenditure_elasticities", elasticities), ("frisch", frisch)):
        if value is not None:
            raise InvalidInput(
                name, "give subsistence_quantities, or expenditure elasticities with frisch, "
                "not both"
            )


def _checked_frisch(frisch: float | None) -> float:
    """The Frisch parameter, -2 by default; it must be negative."""
    phi = DEFAULT_FRISCH if frisch is None else _checks.scalar("frisch", frisch)
    if phi >= 0.0:
        raise InvalidInput(
            "frisch",
            f"the Frisch money flexibility -m / (m - p . gamma) must be negative, got {phi:g}",
        )
    return phi


def _many_from_subsistence(cls: type[StoneGeary], base: BaseBudget,
                           gamma: Vector) -> BatchCalibration:
    """beta_h = p0 (q0_h - gamma) / (m_h - p0 . gamma); households whose base bundle or income
    does not cover the subsistence bundle are refused, naming the item or the income."""
    p0, m, q0 = base.prices, base.expenditure, base.quantities
    floor0 = float(p0 @ gamma)
    above = q0 - gamma
    short = above < 0.0
    refused: dict[int, RowRefusal] = {}
    for h in np.flatnonzero(short.any(axis=-1)):
        i = int(np.argmax(short[h]))
        refused[int(h)] = RowRefusal(int(h), InvalidInput(
            "q0", f"the household is below subsistence: its base quantity {q0[h, i]:.6g} (share "
            f"times income over price) is less than the subsistence quantity {gamma[i]:.6g}", i),
            "below_subsistence")
    supernumerary = np.sum(above * p0, axis=-1)
    for h in np.flatnonzero(supernumerary <= 0.0):
        refused.setdefault(int(h), RowRefusal(int(h), InvalidInput(
            "m0", f"the household is below subsistence: its income {m[h]:.10g} does not exceed "
            f"the subsistence cost p0 . gamma = {floor0:.10g}"), "below_subsistence"))
    bad = np.zeros(m.shape, dtype=bool)
    bad[list(refused)] = True
    safe = np.where(bad, 1.0, supernumerary)
    beta = above * p0 / safe[:, None]
    return BatchCalibration(cls(gamma, beta, p0, m),
                            tuple(refused[h] for h in sorted(refused)))


def _many_from_elasticities(cls: type[StoneGeary], base: BaseBudget, eta: Vector,
                            phi: float) -> BatchCalibration:
    """beta_h = eta w0_h / (w0_h . eta), gamma_h = m_h (w0_h + beta_h / phi) / p0."""
    p0, m, w0 = base.prices, base.expenditure, base.shares
    mean = np.sum(w0 * eta, axis=-1)
    bad = mean <= 0.0
    refused = tuple(RowRefusal(int(h), InvalidInput(
        "w0", "the expenditure elasticities are zero on every item this household buys, so its "
        "marginal budget shares cannot sum to 1"), "below_subsistence")
        for h in np.flatnonzero(bad))
    safe = np.where(bad, 1.0, mean)
    rescaled = int(np.count_nonzero((np.abs(safe - 1.0) > 1e-12) & ~bad))
    beta = eta * w0 / safe[:, None]
    gamma = (m[:, None] * (w0 + beta / phi)) / p0
    remarks = {} if not rescaled else {"elasticities_rescaled": (
        rescaled, "the expenditure elasticities' share-weighted mean was not 1; their marginal "
        "budget shares were divided by it (Engel aggregation).")}
    return BatchCalibration(cls(gamma, beta, p0, m), refused, remarks)
