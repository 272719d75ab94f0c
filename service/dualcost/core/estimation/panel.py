"""Budget data for estimation: prices and budget shares of T observations over n items.

An observation is one household, one period, or one household in one period: its prices
``p_t``, its budget shares ``w_t`` (spending on each item over total spending), its total
expenditure ``m_t`` and a survey weight ``omega_t`` (1 when the data are not weighted). Every
observation has the same n items in the same order.

Checks (each names the observation and item): prices finite and above zero, shares in [0, 1]
and summing to one within 1e-6 (or divided by their sum on request, with a notice), total
expenditure and weights finite and above zero, at least two items, and no item with a zero share
in every observation (its equation would have nothing to fit).
"""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np
import numpy.typing as npt
from numpy.typing import NDArray

from .. import _checks
from .._checks import ADDING_UP_TOLERANCE
from ..errors import InvalidInput
from ..preferences.base import Notice, converted_notices

Matrix = NDArray[np.float64]
Vector = NDArray[np.float64]


def _matrix(name: str, values: npt.ArrayLike, shape: tuple[int, int] | None = None) -> Matrix:
    try:
        arr = np.asarray(values, dtype=np.float64)
    except (TypeError, ValueError) as exc:
        raise InvalidInput(name, "must be a table of numbers, one row per observation") from exc
    if arr.ndim != 2:
        raise InvalidInput(name, "must be a table with one row per observation and one column per "
                           f"item, got {arr.ndim} dimensions")
    if shape is not None and arr.shape != shape:
        raise InvalidInput(name, f"must have {shape[0]} rows and {shape[1]} columns (one per "
                           f"observation and item), got {arr.shape[0]} by {arr.shape[1]}")
    bad = np.argwhere(~np.isfinite(arr))
    if bad.size:
        t, i = (int(v) for v in bad[0])
        raise InvalidInput(name, "must be a finite number (not NaN or infinity)", (t, i))
    return arr


def _per_observation(name: str, values: npt.ArrayLike, size: int, what: str) -> Vector:
    try:
        arr = np.asarray(values, dtype=np.float64)
    except (TypeError, ValueError) as exc:
        raise InvalidInput(name, "must be a list of numbers, one per observation") from exc
    if arr.shape != (size,):
        raise InvalidInput(name, f"must hold {size} values, one per observation, got shape "
                           f"{arr.shape}")
    bad = np.flatnonzero(~np.isfinite(arr) | (arr <= 0.0))
    if bad.size:
        t = int(bad[0])
        raise InvalidInput(name, f"{what} must be a finite number above zero, got {arr[t]!r}", t)
    return arr


@dataclass(frozen=True)
class Panel:
    """Checked budget data; build it with :meth:`checked`.

    ``prices`` and ``shares`` are T by n, ``expenditure`` and ``weights`` have T entries.
    """

    prices: Matrix
    shares: Matrix
    expenditure: Vector
    weights: Vector
    notices: tuple[Notice, ...] = field(default=())

    @property
    def n_obs(self) -> int:
        return int(self.prices.shape[0])

    @property
    def n_items(self) -> int:
        return int(self.prices.shape[1])

    @property
    def log_prices(self) -> Matrix:
        return np.log(self.prices)

    @property
    def log_expenditure(self) -> Vector:
        return np.log(self.expenditure)

    @property
    def weighted(self) -> bool:
        return bool(np.any(self.weights != self.weights[0]))

    def mean_point(self) -> tuple[Vector, float]:
        """The weighted geometric means of prices and of total expenditure, as logarithms."""
        w = self.weights / self.weights.sum()
        return w @ self.log_prices, float(w @ self.log_expenditure)

    @classmethod
    def checked(
        cls,
        prices: npt.ArrayLike,
        shares: npt.ArrayLike,
        expenditure: npt.ArrayLike,
        weights: npt.ArrayLike | None = None,
        *,
        normalise: bool = False,
        unit: str = "fraction",
    ) -> Panel:
        """Check the data; with ``normalise`` shares not summing to one are divided by their sum.
        Shares given in another ``unit`` (``percent``, ``per_mille``) are divided by 100 or 1000
        first, with a notice.

        Raises :class:`InvalidInput` naming ``prices``, ``shares`` (index ``(t, i)``, or ``(t,)``
        for a row sum), ``expenditure`` or ``weights`` (index ``t``), or ``items`` (index ``i``).
        """
        p = _matrix("prices", prices)
        t_obs, n = p.shape
        if t_obs == 0:
            raise InvalidInput("observations", "must hold at least one observation")
        if n < 2:
            raise InvalidInput("items", f"a demand system needs at least two items, got {n}")
        bad = np.argwhere(p <= 0.0)
        if bad.size:
            t, i = (int(v) for v in bad[0])
            raise InvalidInput("prices", f"must be greater than zero, got {p[t, i]!r}", (t, i))
        scale = _checks.share_scale(unit)
        given = _matrix("shares", shares, (t_obs, n))
        w = given / scale if scale != 1.0 else given
        bad = np.argwhere((w < 0.0) | (w > 1.0))
        if bad.size:
            t, i = (int(v) for v in bad[0])
            bound = "[0, 1]" if scale == 1.0 else f"[0, {scale:g}] (share_unit={unit})"
            hint = _checks.unit_hint(float(given[t].sum()), unit)
            raise InvalidInput("shares", f"a budget share must lie in {bound}, got "
                               f"{float(given[t, i])!r}{hint}", (t, i))
        m = _per_observation("expenditure", expenditure, t_obs, "total expenditure")
        omega = (np.ones(t_obs) if weights is None
                 else _per_observation("weights", weights, t_obs, "a survey weight"))
        totals = w.sum(axis=1)
        gap = np.abs(totals - 1.0)
        notices: tuple[Notice, ...] = converted_notices("The budget shares", unit)
        if normalise:
            bad_t = np.flatnonzero(totals <= 0.0)
            if bad_t.size:
                raise InvalidInput("shares", "the shares of an observation must not all be zero",
                                   (int(bad_t[0]),))
            changed = int(np.count_nonzero(gap > 0.0))
            if changed:
                w = w / totals[:, None]
                worst = int(np.argmax(gap))
                notices += (Notice(
                    "shares_normalised",
                    f"The shares of {changed} of {t_obs} observations did not sum to 1 (largest "
                    f"gap {gap[worst]:.3g}, observation {worst}); as asked, each was divided by "
                    "its sum."),)
        else:
            bad_t = np.flatnonzero(gap > ADDING_UP_TOLERANCE)
            if bad_t.size:
                t = int(bad_t[0])
                total = float(totals[t] * scale)
                raise InvalidInput(
                    "shares", f"the budget shares of an observation: {_checks.sum_rule(unit)}; "
                    f"they sum to {total:.10g}{_checks.unit_hint(total, unit)} (set "
                    "normalise_shares to divide them by their sum)", (t,))
        empty = np.flatnonzero(np.all(w == 0.0, axis=0))
        if empty.size:
            raise InvalidInput("items", "this item has a zero share in every observation, so "
                               "its demand cannot be estimated; leave it out", int(empty[0]))
        return cls(prices=p, shares=w, expenditure=m, weights=omega, notices=notices)

    @classmethod
    def from_spending(
        cls,
        prices: npt.ArrayLike,
        spending: npt.ArrayLike,
        weights: npt.ArrayLike | None = None,
    ) -> Panel:
        """The data from money spent on each item (``shares`` in errors, as the spending
        stands in for them): shares are spending over its total, the total is the expenditure.
        """
        p = _matrix("prices", prices)
        spend = _matrix("shares", spending, p.shape)
        bad = np.argwhere(spend < 0.0)
        if bad.size:
            t, i = (int(v) for v in bad[0])
            raise InvalidInput("shares", f"spending must not be negative, got {spend[t, i]!r}",
                               (t, i))
        if not np.all(p > 0.0):
            t, i = (int(v) for v in np.argwhere(p <= 0.0)[0])
            raise InvalidInput("prices", f"must be greater than zero, got {p[t, i]!r}", (t, i))
        total = spend.sum(axis=1)
        empty = np.flatnonzero(total <= 0.0)
        if empty.size:
            raise InvalidInput("shares", "the spending on every item of this observation is "
                               "zero: there is no budget to share", (int(empty[0]),))
        return cls.checked(p, spend / total[:, None], total, weights)

