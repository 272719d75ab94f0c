"""Uprating clauses as data: what each index series, formula or Konüs, would have paid.

A clause says how an amount (a pension, a wage, an allowance) is raised from an index; it is
data, not code (common practice in indexation law and agreements):

- ``measure``: ``twelve_month``, the 12-month change of the index in a stated period of the
  year (``100 (X_m / X_{m-k} - 1)``, ``k`` periods to a year); ``annual_average``, the average
  of a calendar year over the previous year's, read when the year is complete, at its last
  period (``100 (A_y / A_{y-1} - 1)``); ``cumulative``, the change since a stated period
  ``since`` up to the first measure period, then since each uprating's measure period up to the
  next (``100 (X_m / X_{m'} - 1)``);
- ``rounding``: the percentage change rounded to ``decimals`` places by ``half_up`` (ties away
  from zero), ``half_even`` (ties to the even digit), ``down`` (towards zero: truncation) or
  ``up`` (away from zero); no rounding when ``decimals`` is not given;
- ``floor`` and ``cap``: bounds on the rounded change, in percent (a floor of 0 keeps an amount
  from falling); the applied change is ``min(max(rounded, floor), cap)``;
- ``lag``: the periods from the measure period to the first payment at the new amount (a
  September measure paid from April: 7 months).

The uprating factor is ``1 + applied / 100``, and an amount paid each period from the first
period of the series is ``amount * prod f_k`` over the upratings paid by then. The arithmetic of
the change measures is :mod:`dualcost.core.changes` (CPI Manual, ILO/IMF et al. 2004 and 2020,
definitions of the 12-month and annual average changes; from memory).

Rounding is of the decimal number the change is written as to 12 significant figures, so that
a change that is a decimal tie (2.35) is not moved off it by binary floating point
(2.3499999999999996); it is exact rational arithmetic from there (``fractions``).
"""

from __future__ import annotations

from collections.abc import Mapping, Sequence
from dataclasses import dataclass, field, replace
from fractions import Fraction
from typing import Any, Literal

import numpy as np

from .changes import Calendar
from .errors import InvalidInput
from .preferences import Notice
from .series import IndexSeries, LabelledSeries, series_by_label
from .series_panel import Array

Measure = Literal["twelve_month", "annual_average", "cumulative"]
Rounding = Literal["half_up", "half_even", "down", "up"]
MEASURES: tuple[str, ...] = ("twelve_month", "annual_average", "cumulative")
ROUNDINGS: tuple[str, ...] = ("half_up", "half_even", "down", "up")
SIGNIFICANT = 12
MAX_AMOUNT = 1e15


@dataclass(frozen=True)
class Clause:
    """One uprating clause (module docstring); ``since`` is a period position."""

    measure: Measure
    lag: int
    period_of_year: int | None = None
    since: int | None = None
    decimals: int | None = None
    rounding: Rounding = "half_up"
    floor: float | None = None
    cap: float | None = None


@dataclass(frozen=True)
class Step:
    """One uprating of a clause: measured at period ``measured_at`` against ``measured_from``
    (positions), paid from the time-line position ``paid_from`` (maybe after the series)."""

    measured_at: int
    measured_from: int
    paid_from: int
    paid_from_label: str
    paid_within: bool


@dataclass(frozen=True)
class Factors:
    """A clause's upratings under one index series: changes in percent as measured, as
    rounded and bounded (applied), and the factors; NaN where the series has no level."""

    change_percent: Array
    applied_percent: Array
    factors: Array
    paid: Array | None  # per period of the series, when an amount is given
    total: float | None = None
    by_year: dict[int, float] = field(default_factory=dict)
    #: Running total of (paid under this index - paid under the Konüs index).
    difference: Array | None = None


@dataclass(frozen=True)
class ClauseResult:
    clause: Clause
    steps: tuple[Step, ...]
    by_series: dict[str, Factors]
    #: Measure periods of the clause that give no uprating, and why.
    not_computed: tuple[tuple[int, str], ...] = field(default=())


def round_percent(value: float, decimals: int, method: Rounding) -> float:
    """``value`` rounded to ``decimals`` places by ``method`` (module docstring): the number
    written to 12 significant figures, then rounded exactly as a fraction."""
    exact = Fraction(f"{value:.{SIGNIFICANT}g}")
    scaled = exact * 10 ** decimals
    sign = -1 if scaled < 0 else 1
    magnitude = abs(scaled)
    whole, rest = divmod(magnitude.numerator, magnitude.denominator)
    twice = 2 * rest
    if method == "down":
        up = False
    elif method == "up":
        up = rest != 0
    elif method == "half_up":
        up = twice >= magnitude.denominator
    else:  # half_even
        up = twice > magnitude.denominator or (twice == magnitude.denominator and whole % 2 == 1)
    return float(Fraction(sign * (whole + int(up)), 10 ** decimals))


def applied(change: float, clause: Clause) -> float:
    """The change the clause applies: rounded, then held between its floor and cap."""
    if not np.isfinite(change):
        return float("nan")
    out = change if clause.decimals is None else round_percent(change, clause.decimals,
                                                               clause.rounding)
    if clause.floor is not None:
        out = max(out, clause.floor)
    if clause.cap is not None:
        out = min(out, clause.cap)
    return out


def check_clause(clause: Clause, calendar: Calendar, i: int) -> None:
    """The clause's own rules, each named by its field (``("clauses", (i, field))``)."""
    def bad(name: str, rule: str) -> InvalidInput:
        return InvalidInput("clauses", rule, (i, name))

    if clause.measure not in MEASURES:
        raise bad("measure", f"unknown measure {clause.measure!r}; known: {', '.join(MEASURES)}")
    if clause.rounding not in ROUNDINGS:
        raise bad("rounding", f"unknown rounding {clause.rounding!r}; known: "
                  f"{', '.join(ROUNDINGS)}")
    if clause.decimals is not None and not 0 <= clause.decimals <= 10:
        raise bad("decimals", f"must be a whole number from 0 to 10, got {clause.decimals}")
    if clause.lag < 0:
        raise bad("lag", f"must be zero or more periods, got {clause.lag}")
    if clause.floor is not None and clause.cap is not None and clause.floor > clause.cap:
        raise bad("floor", f"the floor {clause.floor:g} is above the cap {clause.cap:g}")
    if clause.cap is not None and clause.cap <= -100.0:
        raise bad("cap", f"a cap of {clause.cap:g} percent would pay nothing or less; it must "
                  "be above -100")
    if not calendar.dated or calendar.per_year is None:
        raise bad("measure", "a clause reads the index at dates: the period labels must be "
                  "dates (YYYY-MM, YYYY-Qn or YYYY)")
    k = calendar.per_year
    if clause.measure == "annual_average":
        if clause.period_of_year is not None:
            raise bad("period_of_year", "an annual-average clause is read when the year is "
                      "complete, at its last period: leave period_of_year out")
    elif clause.period_of_year is None and k > 1:
        raise bad("period_of_year", f"give the period of the year the {clause.measure} change "
                  f"is read in (1 to {k})")
    elif clause.period_of_year is not None and not 1 <= clause.period_of_year <= k:
        raise bad("period_of_year", f"must be from 1 to {k} for {calendar.frequency} periods, "
                  f"got {clause.period_of_year}")
    if clause.measure == "cumulative" and clause.since is None:
        raise bad("since", "a cumulative clause needs the period it counts from")
    if clause.measure != "cumulative" and clause.since is not None:
        raise bad("since", f"only a cumulative clause counts from a period; a {clause.measure} "
                  "clause does not take since")


def schedule(clause: Clause, calendar: Calendar,
             i: int) -> tuple[list[Step], list[tuple[int, str]]]:
    """The clause's upratings over the series, and the measure periods that give none."""
    check_clause(clause, calendar, i)
    k = calendar.per_year or 1
    n_t = calendar.ordinals.size
    steps: list[Step] = []
    skipped: list[tuple[int, str]] = []
    years = calendar.complete_years()
    if clause.measure == "annual_average":
        pairs = [(int(years[y][-1]), int(years[y - 1][-1])) for y in sorted(years)
                 if y - 1 in years]
        skipped = [(int(years[y][-1]), f"the year before, {y - 1}, is not covered in full")
                   for y in sorted(years) if y - 1 not in years]
    else:
        want = clause.period_of_year or 1
        points = [t for t in range(n_t) if calendar.period_of_year(t) == want]
        pairs = []
        previous = clause.since
        for t in points:
            if clause.measure == "twelve_month":
                at = calendar.position(int(calendar.ordinals[t]) - k)
                if at is None:
                    skipped.append((t, f"{calendar.label(int(calendar.ordinals[t]) - k)}, a "
                                    "year earlier, is not in the series"))
                    continue
                pairs.append((t, at))
            else:
                assert previous is not None
                if t <= previous:
                    skipped.append((t, f"it is not after {calendar.labels[previous]}, the "
                                    "period the clause counts from"))
                    continue
                pairs.append((t, previous))
                previous = t
    last = int(calendar.ordinals[-1])
    for m, s in pairs:
        paid = int(calendar.ordinals[m]) + clause.lag
        steps.append(Step(m, s, paid, calendar.label(paid), paid <= last))
    _check_schedule(clause, calendar, i, steps, skipped)
    return steps, skipped


def _check_schedule(clause: Clause, calendar: Calendar, i: int, steps: list[Step],
                    skipped: list[tuple[int, str]]) -> None:
    if not steps:
        why = ("; ".join(f"{calendar.labels[t]}: {reason}" for t, reason in skipped[:3])
               or "no period of the series is the clause's measure period")
        raise InvalidInput("clauses", f"the {clause.measure} measure needs periods the series "
                           f"does not have ({why})", (i, "measure"))
    if not any(s.paid_within for s in steps):
        raise InvalidInput("clauses", f"a lag of {clause.lag} periods puts every payment after "
                           f"the series' last period, {calendar.labels[-1]} (the first would be "
                           f"paid from {steps[0].paid_from_label})", (i, "lag"))


def factors(levels: Array, steps: Sequence[Step], clause: Clause, calendar: Calendar,
            amount: float | None) -> Factors:
    """The clause's upratings under one level series, and the amount paid each period."""
    at = np.array([s.measured_at for s in steps], dtype=np.intp)
    base = np.array([s.measured_from for s in steps], dtype=np.intp)
    with np.errstate(invalid="ignore"):
        change = 100.0 * (levels[at] / levels[base] - 1.0)
    applied_ = np.array([applied(float(c), clause) for c in change], dtype=np.float64)
    f = 1.0 + applied_ / 100.0
    if amount is None:
        return Factors(np.asarray(change, dtype=np.float64), applied_, f, None)
    paid = np.full(calendar.ordinals.size, float(amount))
    for step, factor in zip(steps, f.tolist(), strict=True):
        paid = np.where(calendar.ordinals >= step.paid_from, paid * factor, paid)
    by_year: dict[int, float] = {}
    for t, x in enumerate(paid.tolist()):
        y = calendar.year(t)
        if y is not None:
            by_year[y] = by_year.get(y, 0.0) + x
    return Factors(np.asarray(change, dtype=np.float64), applied_, f, paid,
                   float(np.sum(paid)), by_year)


def with_differences(by: dict[str, Factors], reference: str = "konus") -> dict[str, Factors]:
    """Each index's running total of money paid beyond what the ``reference`` index pays."""
    ref = by.get(reference)
    if ref is None or ref.paid is None:
        return by
    return {name: f if name == reference or f.paid is None
            else replace(f, difference=np.cumsum(f.paid - ref.paid)) for name, f in by.items()}


def uprate(clauses: Sequence[Clause], series: Mapping[str, Array], calendar: Calendar,
           amount: float | None = None) -> list[ClauseResult]:
    """Every clause's upratings under every named level series (formula or Konüs)."""
    if amount is not None and not (np.isfinite(amount) and 0.0 < amount <= MAX_AMOUNT):
        raise InvalidInput("amount", f"must be greater than 0 and at most {MAX_AMOUNT:g} (a "
                           f"bound that keeps every total inside floating point), got "
                           f"{amount:g}")
    out = []
    for i, clause in enumerate(clauses):
        steps, skipped = schedule(clause, calendar, i)
        by = with_differences({name: factors(levels, steps, clause, calendar, amount)
                               for name, levels in series.items()})
        out.append(ClauseResult(clause, tuple(steps), by, tuple(skipped)))
    return out


# -- over an index series -----------------------------------------------------------------------


@dataclass(frozen=True)
class Uprating:
    """What :func:`uprating_by_label` returns: the series it read, the indices the clauses
    ran under (each formula, and ``konus`` with a model), and each clause's result."""

    labelled: LabelledSeries
    kind: str
    standard: str
    indices: tuple[str, ...]
    clauses: list[ClauseResult]
    amount: float | None
    notices: list[Notice]


def indices_of(result: IndexSeries, kind: str, standard: str) -> dict[str, Array]:
    """The level series the clauses read: each bilateral formula's ``kind`` series, and the
    Konüs series of that kind at living standard ``standard``."""
    out = {name: (f.fixed_base if kind == "fixed_base" else f.chained)
           for name, f in result.formulas.items()}
    if result.konus is not None:
        block = result.konus.fixed_base if kind == "fixed_base" else result.konus.chained
        out["konus"] = block[standard]
    return out


def uprating_by_label(
    *,
    clauses: Sequence[Mapping[str, Any]],
    amount: float | None = None,
    series_kind: str | None = None,
    konus_standard: str | None = None,
    **series: Any,
) -> Uprating:
    """The index series (:func:`dualcost.core.series.series_by_label` with ``series``), then
    every clause under each formula and the Konüs index. A clause is a mapping of
    :class:`Clause`'s fields with ``since`` as a period label; errors name
    ``("clauses", (i, field))``. ``series_kind`` (fixed_base or chained) and
    ``konus_standard`` (base, current or midpoint) default to fixed_base and base, with a
    notice."""
    labelled = series_by_label(**series)
    notices = []
    if series_kind is None:
        series_kind = "fixed_base"
        notices.append(Notice("series_kind_assumed", "No series_kind was given: the clauses "
                              "read the fixed-base series (direct comparisons with the base "
                              "period)."))
    if konus_standard is None:
        konus_standard = "base"
        if labelled.result.konus is not None:
            notices.append(Notice("konus_standard_assumed", "No konus_standard was given: the "
                                  "Konüs index is at the base period's living standard, the "
                                  "one a Laspeyres-type index approximates."))
    if labelled.result.konus is None:
        notices.append(Notice("no_model", "No model was given: the clauses run under the "
                              "formula indices only, not under the Konüs index."))
    if series_kind not in ("fixed_base", "chained"):
        raise InvalidInput("series_kind", f"must be fixed_base or chained, got {series_kind!r}")
    if konus_standard not in ("base", "current", "midpoint"):
        raise InvalidInput("konus_standard", "must be base, current or midpoint, got "
                           f"{konus_standard!r}")
    calendar = labelled.result.calendar
    assert calendar is not None
    read = [read_clause(c, labelled.panel.periods, i) for i, c in enumerate(clauses)]
    indices = indices_of(labelled.result, series_kind, konus_standard)
    results = uprate(read, indices, calendar, amount)
    if any(not np.all(np.isfinite(f.factors)) for r in results for f in r.by_series.values()):
        notices.append(Notice("uprating_withheld", "Some Konüs upratings are empty: the "
                              "model is outside its regular region at a period they read, so "
                              "its index there is not a result."))
    return Uprating(labelled, series_kind, konus_standard, tuple(indices), results, amount,
                    notices)


def read_clause(given: Mapping[str, Any], periods: Sequence[str], i: int) -> Clause:
    """A clause from a mapping of :class:`Clause`'s fields, ``since`` a label of ``periods``."""
    fields = dict(given)
    since = fields.pop("since", None)
    if since is not None:
        if str(since) not in periods:
            raise InvalidInput("clauses", f"period {str(since)!r} is not in the series (its "
                               f"periods run from {periods[0]!r} to "
                               f"{periods[-1]!r})", (i, "since"))
        fields["since"] = list(periods).index(str(since))
    return Clause(**fields)
