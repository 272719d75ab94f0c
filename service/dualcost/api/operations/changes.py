"""The change measures of a series answer (:mod:`dualcost.core.changes`): its JSON block and
its CSV columns, written for every series the answer holds (formula, GEKS and Konüs)."""

from __future__ import annotations

import math
from collections.abc import Sequence
from typing import Any

import numpy as np

from ...core.series import IndexSeries, SeriesChanges
from ..render import json_numbers

DEFINITIONS: dict[str, str] = {
    "period_on_period_percent": "100 (X_t / X_{t-1} - 1), t-1 the period just before t.",
    "twelve_month_percent": "100 (X_t / X_{t-k} - 1) with k periods to a year (12 monthly, 4 "
                            "quarterly, 1 annual): the change from the same period a year "
                            "earlier.",
    "annual.average": "The arithmetic mean of a calendar year's levels, for each year the "
                      "series covers in full (common practice; CPI Manual, ILO/IMF et al. "
                      "2004, ch. 9).",
    "annual.change_percent": "100 (A_y / A_{y-1} - 1): the annual average over the previous "
                             "annual average.",
    "rebased": "v X_t / X_r for a period r, or v X_t / A_y for a year y, v the reference value: "
               "every ratio and change is the same on any reference.",
    "empty": "A measure that needs a period the series lacks, or a level that is withheld, is "
             "null, and empty says where and why.",
}


def _values(values: np.ndarray) -> list[float | None]:
    return [x if math.isfinite(x) else None for x in values.tolist()]


def _name(c: SeriesChanges) -> str:
    """The series' column stem, as the series table names it."""
    if c.series == "konus":
        return f"konus_{c.kind}_{c.standard}"
    if c.kind == "full_span":
        return c.series
    return f"{c.series}_{c.kind}"


def document(r: IndexSeries) -> dict[str, Any]:
    """The ``changes`` block of a series answer (``ChangesOut``)."""
    labels = list(r.periods)
    rebase = r.rebase
    return {
        "definitions": DEFINITIONS,
        "rebased_to": None if rebase is None else {
            "period": None if rebase.period is None else labels[rebase.period],
            "year": rebase.year, "value": rebase.value},
        "by_series": [one(c, labels) for c in r.changes],
    }


def one(c: SeriesChanges, labels: Sequence[str]) -> dict[str, Any]:
    m = c.changes
    return {
        "series": c.series, "kind": c.kind, "standard": c.standard,
        "period_on_period_percent": json_numbers(m.period_on_period),
        "twelve_month_percent": json_numbers(m.twelve_month),
        "annual": [{"year": y, "average": a, "change_percent": ch} for y, a, ch in zip(
            m.annual.years, _values(m.annual.averages), _values(m.annual.change_percent),
            strict=True)],
        "rebased": None if m.rebased is None else json_numbers(m.rebased),
        "empty": [{"measure": e.measure, "reason": e.reason,
                   "periods": [labels[t] for t in e.periods], "years": list(e.years)}
                  for e in m.empty],
    }


def columns(r: IndexSeries) -> list[tuple[str, Any]]:
    """CSV columns per series: period-on-period and 12-month change, the annual average and its
    change in the row of the year's last period, and the rebased levels when asked."""
    n_t = len(r.periods)
    last: dict[int, int] = {}
    if r.calendar is not None:
        for y, at in r.calendar.complete_years().items():
            last[y] = int(at[-1])
    out: list[tuple[str, Any]] = []
    for c in r.changes:
        m, stem = c.changes, _name(c)
        average, change = np.full(n_t, np.nan), np.full(n_t, np.nan)  # NaN: an empty cell
        ends = [last[y] for y in m.annual.years]  # each year's value in its last period's row
        average[ends], change[ends] = m.annual.averages, m.annual.change_percent
        out += [(f"{stem}_period_on_period_percent", m.period_on_period),
                (f"{stem}_twelve_month_percent", m.twelve_month),
                (f"{stem}_annual_average", average),
                (f"{stem}_annual_average_change_percent", change)]
        if m.rebased is not None:
            out.append((f"{stem}_rebased", m.rebased))
    return out
