"""Change measures of an index series, as indexation and the press read it, and rebasing.

An index series is published as levels on an index reference period; what clauses and news
use is a change between two of its levels (CPI Manual, ILO/IMF et al. 2004, ch. 9 and Annex on
presentation; 2020 edition, ch. 8 "Calculating consumer price indices in practice"). For a
level series ``X`` with ``k`` periods to a year (12 monthly, 4 quarterly, 1 annual):

- period-on-period change ``100 (X_t / X_{t-1} - 1)`` percent, ``t-1`` the period just before
  ``t`` in time;
- 12-month change (the change from the same period a year earlier, for any frequency: twelve
  months, four quarters or one year) ``100 (X_t / X_{t-k} - 1)``;
- annual average of a calendar year ``A_y = (1/k) sum_{t in y} X_t``, the arithmetic mean of the
  year's levels (common practice: annual indices are the averages of the monthly or quarterly
  ones; CPI Manual 2004, ch. 9, from memory), defined only for a year the series covers fully; its change
  ``100 (A_y / A_{y-1} - 1)``;
- cumulative change from period ``s`` to ``t``: ``100 (X_t / X_s - 1)``;
- rebasing to a period ``r`` or a year ``y`` (so that it reads 100, or 1): ``v X_t / X_r`` or
  ``v X_t / A_y``. Rebasing multiplies every level by one number, so every ratio of two levels,
  and every change above, is unchanged (rebasing changes the reference period, not the
  movements; CPI Manual 2004, ch. 9, from memory).

A measure that needs a period the series does not have is empty (``NaN``), never dropped, and
:class:`Empty` records say which periods and why. Everything here is arithmetic on arrays; the
calendar (:class:`Calendar`) knows where each period lies in time.
"""

from __future__ import annotations

from collections.abc import Mapping, Sequence
from dataclasses import dataclass
from functools import cached_property
from typing import TypeVar

import numpy as np
from numpy.typing import NDArray

from .errors import InvalidInput
from .series_panel import PERIODS_PER_YEAR, Array, read_label

K = TypeVar("K")
MEASURES: tuple[str, ...] = ("period_on_period", "twelve_month", "annual_average",
                             "annual_average_change", "rebased")
WITHHELD = ("the series has no level there (a Konüs value is withheld where the model is "
            "outside its regular region)")


@dataclass(frozen=True)
class Calendar:
    """Where each period of a series lies in time.

    ``ordinals`` are positions on a time line counted in periods of the frequency: for date
    labels the calendar position (``12 year + month - 1``, ``4 year + quarter - 1``, ``year``),
    so that ``ordinal // per_year`` is the calendar year and ``ordinal % per_year`` the period
    of the year (from 0); for other labels ``0, 1, 2, ...``. ``per_year`` is ``None`` when the
    frequency is not known; ``dated`` says whether calendar years are known.
    """

    labels: tuple[str, ...]
    ordinals: NDArray[np.int64]
    frequency: str | None
    per_year: int | None
    dated: bool

    @classmethod
    def of(cls, labels: Sequence[str], frequency: str | None, times: Array) -> Calendar:
        """The calendar of a checked panel's labels, frequency and times."""
        first = read_label(str(labels[0]))
        dated = frequency is not None and first is not None and first[0] == frequency
        start = first[1] if dated and first is not None else 0
        ordinals = np.rint(np.asarray(times, dtype=np.float64)).astype(np.int64) + start
        per_year = None if frequency is None else PERIODS_PER_YEAR[frequency]
        return cls(tuple(str(x) for x in labels), ordinals, frequency, per_year, dated)

    def position(self, ordinal: int) -> int | None:
        """The position of the period at ``ordinal``, if the series has it."""
        at = int(np.searchsorted(self.ordinals, ordinal))
        return at if at < self.ordinals.size and int(self.ordinals[at]) == ordinal else None

    def label(self, ordinal: int) -> str:
        """The label of the period at ``ordinal`` (also one the series does not have)."""
        at = self.position(ordinal)
        if at is not None:
            return self.labels[at]
        if not self.dated or self.per_year is None:
            return f"period {ordinal}"
        year, k = divmod(ordinal, self.per_year)
        if self.per_year == 12:
            return f"{year:04d}-{k + 1:02d}"
        return f"{year:04d}-Q{k + 1}" if self.per_year == 4 else f"{year:04d}"

    def year(self, t: int) -> int | None:
        """The calendar year of period ``t``, where labels are dates."""
        if not self.dated or self.per_year is None:
            return None
        return int(self.ordinals[t]) // self.per_year

    def period_of_year(self, t: int) -> int | None:
        """Period ``t``'s place in its year, from 1 (the month, the quarter, or 1)."""
        if not self.dated or self.per_year is None:
            return None
        return int(self.ordinals[t]) % self.per_year + 1

    def earlier(self, steps: int) -> NDArray[np.intp]:
        """For each period, the position of the period ``steps`` periods earlier, -1 if none."""
        target = self.ordinals - steps
        at = np.minimum(np.searchsorted(self.ordinals, target), self.ordinals.size - 1)
        return np.where(self.ordinals[at] == target, at, -1).astype(np.intp)

    def complete_years(self) -> dict[int, NDArray[np.intp]]:
        """Each calendar year the series covers fully, with its periods' positions."""
        return self._complete_years

    @cached_property
    def _complete_years(self) -> dict[int, NDArray[np.intp]]:
        if not self.dated or self.per_year is None:
            return {}
        years = self.ordinals // self.per_year  # sorted: periods run forwards
        found, starts, counts = np.unique(years, return_index=True, return_counts=True)
        return {int(y): np.arange(a, a + n, dtype=np.intp)
                for y, a, n in zip(found.tolist(), starts.tolist(), counts.tolist(), strict=True)
                if n == self.per_year}


@dataclass(frozen=True)
class Empty:
    """Where a measure is empty and why (``periods`` positions, or calendar ``years``)."""

    measure: str
    reason: str
    periods: tuple[int, ...] = ()
    years: tuple[int, ...] = ()


@dataclass(frozen=True)
class AnnualAverages:
    """Annual averages of the complete calendar years and their changes (percent)."""

    years: tuple[int, ...]
    averages: Array
    change_percent: Array


@dataclass(frozen=True)
class Changes:
    """The change measures of one level series (percent, ``NaN`` where empty) and the record of
    what is empty and why."""

    period_on_period: Array
    twelve_month: Array
    annual: AnnualAverages
    rebased: Array | None
    empty: tuple[Empty, ...]


@dataclass(frozen=True)
class Rebase:
    """A new index reference: a period (position) or a calendar year, worth ``value`` there."""

    period: int | None = None
    year: int | None = None
    value: float = 100.0


def ratio_change(later: Array, earlier: Array) -> Array:
    """``100 (later / earlier - 1)``: the percentage change between two levels."""
    return np.asarray(100.0 * (later / earlier - 1.0), dtype=np.float64)


def _between(levels: Array, earlier: NDArray[np.intp]) -> Array:
    """``100 (X_t / X_s - 1)`` with ``s = earlier[t]``, NaN where ``s`` is -1 or a level is NaN."""
    have = earlier >= 0
    base = np.where(have, levels[np.where(have, earlier, 0)], np.nan)
    with np.errstate(invalid="ignore"):
        return np.where(have, ratio_change(levels, base), np.nan)


def annual_averages(levels: Array, calendar: Calendar) -> AnnualAverages:
    """The arithmetic mean of each complete calendar year's levels (common practice) and
    its change on the year before, ``100 (A_y / A_{y-1} - 1)``; NaN where a level is NaN or the
    year before is not complete."""
    years = calendar.complete_years()
    ys = tuple(sorted(years))
    if not ys:
        return AnnualAverages((), np.empty(0), np.empty(0))
    averages = np.mean(levels[np.stack([years[y] for y in ys])], axis=1)
    change = np.full(len(ys), np.nan)
    follows = np.flatnonzero(np.diff(np.asarray(ys)) == 1) + 1  # a year after a covered one
    with np.errstate(invalid="ignore"):
        change[follows] = ratio_change(averages[follows], averages[follows - 1])
    return AnnualAverages(ys, averages, change)


def check_rebase(rebase: Rebase, calendar: Calendar) -> None:
    """A rebase names one period of the series or one complete calendar year of it."""
    if (rebase.period is None) == (rebase.year is None):
        raise InvalidInput("rebase", "name a period or a year to rebase to, one of them")
    if rebase.year is not None:
        years = calendar.complete_years()
        if rebase.year not in years:
            have = ", ".join(str(y) for y in sorted(years)) or "none"
            why = ("the period labels are not dates" if not calendar.dated else
                   f"the series covers every period of these years only: {have}")
            raise InvalidInput("rebase_year", f"cannot rebase to the average of {rebase.year}: "
                               f"{why}")


def rebased(levels: Array, rebase: Rebase, calendar: Calendar) -> Array:
    """``v X_t / X_r`` (a period) or ``v X_t / A_y`` (a year's average); all NaN when that
    reference level is NaN."""
    if rebase.period is not None:
        at: Array = levels[rebase.period:rebase.period + 1]
    else:
        assert rebase.year is not None
        at = levels[calendar.complete_years()[rebase.year]]
    reference = float(np.mean(at))
    return np.asarray(rebase.value * (levels / reference), dtype=np.float64)


def _empty_periods(measure: str, values: Array, levels: Array, earlier: NDArray[np.intp] | None,
                   needs: str) -> list[Empty]:
    """Group the periods where ``values`` is empty by their reason."""
    missing = np.flatnonzero(np.isnan(values))
    if not missing.size:
        return []
    withheld = np.isnan(levels)
    if earlier is not None:
        withheld = withheld | ((earlier >= 0) & withheld[np.maximum(earlier, 0)])
    no_level = [t for t in missing.tolist() if withheld[t]]
    no_period = [t for t in missing.tolist() if not withheld[t]]
    out = []
    if no_period:
        out.append(Empty(measure, needs, tuple(no_period)))
    if no_level:
        out.append(Empty(measure, WITHHELD, tuple(no_level)))
    return out


def changes(levels: Array, calendar: Calendar, rebase: Rebase | None = None) -> Changes:
    """Every change measure of one level series (see the module docstring)."""
    levels = np.asarray(levels, dtype=np.float64)
    previous = calendar.earlier(1) if calendar.dated else np.arange(levels.size) - 1
    pop = _between(levels, previous)
    empty = _empty_periods("period_on_period", pop, levels, previous,
                           "the period just before is not in the series")
    if calendar.per_year is None:
        twelve = np.full(levels.size, np.nan)
        empty.append(Empty("twelve_month", "the frequency is not known (period labels are not "
                           "dates and none was given)", tuple(range(levels.size))))
    else:
        year_ago = calendar.earlier(calendar.per_year)
        twelve = _between(levels, year_ago)
        empty += _empty_periods("twelve_month", twelve, levels, year_ago,
                                "the same period a year earlier is not in the series")
    annual = annual_averages(levels, calendar)
    empty += _empty_years(annual, calendar)
    out = None if rebase is None else rebased(levels, rebase, calendar)
    if out is not None and np.isnan(out).all():
        empty.append(Empty("rebased", "the level of the new reference is empty ("
                           + WITHHELD + ")", tuple(range(levels.size))))
    return Changes(pop, twelve, annual, out, tuple(empty))


def _empty_years(annual: AnnualAverages, calendar: Calendar) -> list[Empty]:
    if not calendar.dated:
        return [Empty("annual_average", "calendar years are not known: the period labels are "
                      "not dates (YYYY-MM, YYYY-Qn, YYYY)")]
    out = []
    every = np.unique(calendar.ordinals // (calendar.per_year or 1)).tolist()
    partial = sorted(set(every) - set(annual.years))
    if partial:
        out.append(Empty("annual_average", "the series does not cover every period of the "
                         "year", years=tuple(partial)))
    averages, change = annual.averages.tolist(), annual.change_percent.tolist()
    withheld = tuple(y for y, a in zip(annual.years, averages, strict=True) if a != a)  # NaN
    if withheld:
        out.append(Empty("annual_average", WITHHELD, years=withheld))
    first = tuple(y for j, y in enumerate(annual.years)
                  if change[j] != change[j] and averages[j] == averages[j]
                  and (j == 0 or annual.years[j - 1] != y - 1))
    if first:
        out.append(Empty("annual_average_change", "the year before is not covered in full",
                         years=first))
    return out


def changes_of(named: Mapping[K, Array], calendar: Calendar,
               rebase: Rebase | None = None) -> dict[K, Changes]:
    """:func:`changes` of each named level series."""
    if rebase is not None:
        check_rebase(rebase, calendar)
    return {name: changes(levels, calendar, rebase) for name, levels in named.items()}
