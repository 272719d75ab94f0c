"""A panel of prices (and quantities) over many periods, checked at the core's edge.

The panel is ``T`` periods by ``N`` items. A price that was not observed (the item was not on
sale, not yet or no longer) is ``NaN`` in the input; everything else must be a positive finite
number. Quantities may be given directly or as expenditures (``q = e / p``). A period either has a
quantity for every item priced in it or none at all (a *prices-only* period).

Period labels are free text; three forms are recognised and then must run forwards in time,
``YYYY-MM`` (monthly), ``YYYY-Qn`` (quarterly) and ``YYYY`` (annual), as must plain integers
(``1``, ``2``, ...). The recognised form also gives the frequency and the time between periods.
"""

from __future__ import annotations

import re
from collections.abc import Sequence
from dataclasses import dataclass
from typing import Literal

import numpy as np
import numpy.typing as npt
from numpy.typing import NDArray

from . import _checks
from .errors import InvalidInput

Array = NDArray[np.float64]
Mask = NDArray[np.bool_]
Frequency = Literal["monthly", "quarterly", "annual"]

#: How many periods make a year, per frequency (common practice).
PERIODS_PER_YEAR: dict[str, int] = {"monthly": 12, "quarterly": 4, "annual": 1}

_MONTHLY = re.compile(r"^(\d{4})-(0[1-9]|1[0-2])$")
_QUARTERLY = re.compile(r"^(\d{4})-?[Qq]([1-4])$")
_ANNUAL = re.compile(r"^(\d{4})$")
_INTEGER = re.compile(r"^[+-]?\d+$")


def read_label(label: str) -> tuple[str, int] | None:
    """The form of a period label and its position on that form's time line, if recognised.

    ``("monthly", 12 * year + month - 1)``, ``("quarterly", 4 * year + quarter - 1)``,
    ``("annual", year)``, ``("integer", n)``; ``None`` for any other label.
    """
    text = label.strip()
    if m := _MONTHLY.match(text):
        return "monthly", 12 * int(m.group(1)) + int(m.group(2)) - 1
    if m := _QUARTERLY.match(text):
        return "quarterly", 4 * int(m.group(1)) + int(m.group(2)) - 1
    if m := _ANNUAL.match(text):
        return "annual", int(m.group(1))
    if _INTEGER.match(text):
        return "integer", int(text)
    return None


def check_periods(
    labels: Sequence[str], frequency: str | None
) -> tuple[tuple[str, ...], Frequency | None, Array]:
    """Distinct labels running forwards in time; the frequency; each period's time in periods.

    Returns the labels, the frequency (the one given, else the one the labels show, else
    ``None``) and the position of each period on the time line, counted in periods of that
    frequency from the first (``0, 1, 2, ...`` when the labels are not dates).
    """
    out = tuple(str(x) for x in labels)
    if not out:
        raise InvalidInput("periods", "must hold at least one period")
    seen: dict[str, int] = {}
    for t, label in enumerate(out):
        if not label.strip():
            raise InvalidInput("periods", "a period label must not be empty", t)
        if label in seen:
            raise InvalidInput("periods", f"period {label!r} is listed twice (first at position "
                               f"{seen[label]})", t)
        seen[label] = t
    read = [read_label(label) for label in out]
    forms = {r[0] for r in read if r is not None}
    if frequency is not None and frequency not in PERIODS_PER_YEAR:
        raise InvalidInput("frequency", f"must be one of {', '.join(PERIODS_PER_YEAR)}, got "
                           f"{frequency!r}")
    times = np.arange(len(out), dtype=np.float64)
    if all(r is not None for r in read) and len(forms) == 1:
        form = forms.pop()
        ordinals = [r[1] for r in read if r is not None]
        for t in range(1, len(out)):
            if ordinals[t] <= ordinals[t - 1]:
                raise InvalidInput("periods", f"period {out[t]!r} comes after {out[t - 1]!r} but "
                                   "is not later in time: periods must run forwards", t)
        if form != "integer":
            if frequency is not None and frequency != form:
                raise InvalidInput("frequency", f"is {frequency!r} but the period labels are "
                                   f"{form} ({out[0]!r})")
            frequency = form
            times = np.asarray(ordinals, dtype=np.float64) - ordinals[0]
    return out, frequency, times  # type: ignore[return-value]


@dataclass(frozen=True)
class Panel:
    """Checked prices and quantities of ``T`` periods by ``N`` items.

    ``prices`` holds ``NaN`` where ``priced`` is false; ``quantities`` holds ``0`` where the item
    is not priced and, in a prices-only period (``has_quantities[t]`` false), ``0`` throughout.
    ``times`` gives each period's place in time, in periods of ``frequency`` from the first.
    """

    prices: Array
    quantities: Array
    priced: Mask
    has_quantities: Mask
    periods: tuple[str, ...]
    items: tuple[str, ...]
    frequency: Frequency | None
    times: Array

    @property
    def n_periods(self) -> int:
        return int(self.prices.shape[0])

    @property
    def n_items(self) -> int:
        return int(self.prices.shape[1])

    def filled_prices(self, fill: float = 1.0) -> Array:
        """Prices with ``fill`` where an item is not priced (for arithmetic that masks them)."""
        return np.where(self.priced, np.nan_to_num(self.prices, nan=fill), fill)

    def period_index(self, parameter: str, label: str | int | None, default: int) -> int:
        """The position of the period labelled ``label`` (``default`` when ``None``)."""
        if label is None:
            return default
        key = str(label)
        try:
            return self.periods.index(key)
        except ValueError:
            shown = f"{self.periods[0]!r} to {self.periods[-1]!r}"
            raise InvalidInput(parameter, f"period {key!r} is not in the panel (its periods run "
                               f"from {shown})") from None

    @classmethod
    def checked(
        cls,
        prices: npt.ArrayLike,
        *,
        quantities: npt.ArrayLike | None = None,
        expenditures: npt.ArrayLike | None = None,
        periods: Sequence[str] | None = None,
        items: Sequence[str] | None = None,
        frequency: str | None = None,
    ) -> Panel:
        """Check a panel; errors name the argument and the ``(period, item)`` position.

        ``NaN`` marks a price not observed, and a quantity or expenditure not known. Where both
        a quantity and an expenditure are given they must agree (``p q = e`` within 1e-6).
        """
        p = _matrix("prices", prices)
        n_t, n = p.shape
        labels, freq, times = check_periods(
            periods if periods is not None else [str(t + 1) for t in range(n_t)], frequency)
        if len(labels) != n_t:
            raise InvalidInput("periods", f"lists {len(labels)} periods but the prices have "
                               f"{n_t} rows, one per period")
        names = tuple(items) if items is not None else tuple(f"item {i}" for i in range(n))
        if len(names) != n:
            raise InvalidInput("items", f"lists {len(names)} items but the prices have {n} "
                               "columns, one per item")
        priced = ~np.isnan(p)
        _no_inf("prices", p)
        bad = np.argwhere(priced & ~(p > 0.0))
        if bad.size:
            raise InvalidInput("prices", "must be greater than zero", _at(bad[0]))
        empty = np.flatnonzero(~priced.any(axis=1))
        if empty.size:
            raise InvalidInput("prices", f"period {labels[empty[0]]!r} has no price at all; "
                               "leave it out of the panel", (int(empty[0]),))
        never = np.flatnonzero(~priced.any(axis=0))
        if never.size:
            raise InvalidInput("items", f"item {names[never[0]]!r} has no price in any period; "
                               "leave it out of the items", int(never[0]))
        q = _quantities(p, priced, quantities, expenditures)
        known = ~np.isnan(q)
        has_q: Mask = np.asarray(known.any(axis=1))
        partial = np.argwhere(priced & ~known & has_q[:, None])
        if partial.size:
            t, i = (int(x) for x in partial[0])
            raise InvalidInput("quantities", f"item {names[i]!r} is priced in period "
                               f"{labels[t]!r} but has no quantity or expenditure, while other "
                               "items of that period have one: give it (0 if nothing was "
                               "bought), or give no quantities for that period", (t, i))
        q = np.where(known, np.nan_to_num(q), 0.0)
        spent = np.sum(np.where(priced, np.nan_to_num(p), 0.0) * q, axis=1)
        zero = np.flatnonzero(has_q & (spent <= 0.0))
        if zero.size:
            raise InvalidInput("quantities", f"every quantity of period {labels[zero[0]]!r} is "
                               "zero: at least one must be greater than zero", (int(zero[0]),))
        return cls(prices=np.where(priced, p, np.nan), quantities=q, priced=priced,
                   has_quantities=has_q, periods=labels, items=names, frequency=freq,
                   times=times)


def _matrix(name: str, values: npt.ArrayLike) -> Array:
    try:
        arr = np.array(values, dtype=np.float64)
    except (TypeError, ValueError) as exc:
        raise InvalidInput(name, "must be a table of numbers, one row per period") from exc
    if arr.ndim != 2 or arr.shape[0] == 0 or arr.shape[1] == 0:
        raise InvalidInput(name, "must be a table with one row per period and one column per "
                           f"item, at least one of each; got shape {arr.shape}")
    return arr


def _no_inf(name: str, arr: Array) -> None:
    bad = np.argwhere(np.isinf(arr))
    if bad.size:
        raise InvalidInput(name, "must be a finite number (not infinity)", _at(bad[0]))


def _at(index: NDArray[np.intp]) -> tuple[int, int]:
    return int(index[0]), int(index[1])


def _quantities(
    p: Array, priced: Mask, quantities: npt.ArrayLike | None, expenditures: npt.ArrayLike | None
) -> Array:
    """Quantities from quantities and/or expenditures, ``NaN`` where neither is known."""
    q = np.full(p.shape, np.nan)
    for name, given in (("quantities", quantities), ("expenditures", expenditures)):
        if given is None:
            continue
        arr = _matrix(name, given)
        if arr.shape != p.shape:
            raise InvalidInput(name, f"must have the prices' shape {p.shape} (periods by items), "
                               f"got {arr.shape}")
        _no_inf(name, arr)
        known = ~np.isnan(arr)
        orphan = np.argwhere(known & ~priced)
        if orphan.size:
            raise InvalidInput(name, "is given for an item that has no price in that period",
                               _at(orphan[0]))
        negative = np.argwhere(known & ~(np.nan_to_num(arr) >= 0.0))
        if negative.size:
            raise InvalidInput(name, "must not be negative", _at(negative[0]))
        if name == "expenditures":
            arr = np.where(known, np.nan_to_num(arr) / np.where(priced, np.nan_to_num(p), 1.0),
                           np.nan)
            both = known & ~np.isnan(q)
            gap = np.abs(np.nan_to_num(arr) - np.nan_to_num(q))
            scale = np.maximum(np.abs(np.nan_to_num(q)), 1e-300)
            clash = np.argwhere(both & (gap > _checks.ADDING_UP_TOLERANCE * scale))
            if clash.size:
                raise InvalidInput("expenditures", "differs from price times quantity given for "
                                   "the same item and period; give one of them, or make them "
                                   "agree", _at(clash[0]))
            q = np.where(np.isnan(q), arr, q)
        else:
            q = arr
    return q
