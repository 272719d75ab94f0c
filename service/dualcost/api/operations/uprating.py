"""Uprating clauses over an index series: POST /v1/uprating and the spreadsheet's clause form.

The series part of the request is read exactly as the index-series operation reads it
(:func:`dualcost.api.operations.series.core_arguments`, its places); the clauses go with it
into one core call (:func:`dualcost.core.uprating.uprating_by_label`). The answer gives each
uprating's factor under each formula and under the Konüs index, the money paid under each and
the cumulative difference, with the indexation caution first.
"""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass
from typing import Any

import numpy as np

from ...config import Settings
from ...core.uprating import ClauseResult, Uprating, uprating_by_label
from ..inputs.items import ItemAxis
from ..inputs.locator import Form, Locator, Place
from ..inputs.panels import PanelArrays
from ..observability import computing
from ..problems import RequestProblem
from ..schemas.common import CAUTION
from ..schemas.uprating import ClauseIn, UpratingRequest
from . import series
from .answers import notices_json

PLACES: dict[str, Place] = {
    **series.PLACES,
    "clauses": Place("/clauses", "clauses", "path"),
    "amount": Place("/amount", "amount"),
    "series_kind": Place("/series_kind", "series_kind"),
    "konus_standard": Place("/konus_standard", "konus_standard"),
}

INDEXATION = (
    "These upratings show what each index, and the model's Konüs index, would pay under the "
    "clause as stated; they are not the upratings any law or agreement requires. " + CAUTION)


@dataclass(frozen=True)
class Outcome:
    result: Uprating
    axis: ItemAxis
    clauses: list[ClauseIn]


def locator(form: Form = "json") -> Locator:
    return Locator(PLACES, form)


def run(body: UpratingRequest, panel: PanelArrays, settings: Settings, loc: Locator,
        operation: str = "uprating") -> Outcome:
    """Compute the series and run every clause under each of its indices: one core call."""
    arguments = series.core_arguments(body, panel, settings, loc)
    clauses = [clause_arguments(c) for c in body.clauses]
    with computing(operation, settings), loc.translating():
        result = uprating_by_label(clauses=clauses, amount=body.amount,
                                   series_kind=body.series_kind,
                                   konus_standard=body.konus_standard, **arguments)
    return Outcome(result, panel.axis, body.clauses)


def clause_arguments(c: ClauseIn) -> dict[str, Any]:
    """A clause as the core reads it (:class:`dualcost.core.uprating.Clause`'s fields)."""
    out: dict[str, Any] = {"measure": c.measure, "lag": c.lag,
                           "period_of_year": c.period_of_year,
                           "since": None if c.since is None else str(c.since),
                           "floor": c.floor, "cap": c.cap}
    if c.rounding is not None:
        out |= {"decimals": c.rounding.decimals, "rounding": c.rounding.method}
    return out


def _num(x: float) -> float | None:
    return float(x) if np.isfinite(x) else None


def definition(c: ClauseIn, frequency: str | None) -> str:
    """The clause in one sentence."""
    unit = {"monthly": "month", "quarterly": "quarter"}.get(frequency or "", "period")
    read = {"twelve_month": f"the 12-month change in {unit} {c.period_of_year or 1} of each year",
            "annual_average": "each calendar year's average over the previous year's",
            "cumulative": f"the change since {c.since} (then since each uprating's measure "
                          "period)"}[c.measure]
    parts = [f"Uprated by {read}"]
    if c.rounding is not None:
        parts.append(f"rounded to {c.rounding.decimals} decimal(s) ({c.rounding.method})")
    if c.floor is not None:
        parts.append(f"at least {c.floor:g}%")
    if c.cap is not None:
        parts.append(f"at most {c.cap:g}%")
    parts.append(f"paid from {c.lag} {unit}(s) after the measure period")
    return ", ".join(parts) + "."


def document(outcome: Outcome) -> dict[str, Any]:
    """The answer as plain JSON-ready values, in the shape of ``UpratingResponse``."""
    u = outcome.result
    r = u.labelled.result
    frequency = r.calendar.frequency if r.calendar is not None else None
    return {
        "caution": INDEXATION,
        "periods": list(r.periods), "frequency": frequency,
        "series_kind": u.kind, "konus_standard": u.standard, "indices": list(u.indices),
        "amount": u.amount,
        "clauses": [clause_out(c, given, r.periods, u.amount is not None, frequency)
                    for c, given in zip(u.clauses, outcome.clauses, strict=True)],
        "notices": notices_json(u.notices + r.notices, outcome.axis.ids, outcome.axis.labels),
        "scale": series.scale(series.Outcome(r, outcome.axis, None, frequency)),
    }


def clause_out(c: ClauseResult, given: ClauseIn, labels: Sequence[str], paid: bool,
               frequency: str | None) -> dict[str, Any]:
    """One clause's part of the answer (``ClauseOut``); ``labels`` the series' periods,
    ``paid`` whether an amount was given."""
    upratings = [{
        "measured_in": labels[s.measured_at], "measured_from": labels[s.measured_from],
        "paid_from": s.paid_from_label, "paid_within_series": s.paid_within,
        "by_index": [{"index": name, "change_percent": _num(f.change_percent[j]),
                      "applied_percent": _num(f.applied_percent[j]),
                      "factor": _num(f.factors[j])} for name, f in c.by_series.items()]}
        for j, s in enumerate(c.steps)]
    return {
        "clause": given.model_dump(mode="json"), "definition": definition(given, frequency),
        "upratings": upratings,
        "not_computed": [{"measured_in": labels[t], "reason": why} for t, why in c.not_computed],
        "money": _money(c) if paid else None,
    }


def _money(c: ClauseResult) -> list[dict[str, Any]]:
    out = []
    for name, f in c.by_series.items():
        assert f.paid is not None and f.total is not None
        diff = f.difference
        out.append({"index": name, "paid": [_num(x) for x in f.paid], "total": _num(f.total),
                    "by_year": [{"year": y, "paid": _num(v)} for y, v in f.by_year.items()],
                    "cumulative_difference_vs_konus": None if diff is None
                    else [_num(x) for x in diff],
                    "difference_vs_konus_total": None if diff is None else _num(diff[-1])})
    return out


def table(outcome: Outcome) -> tuple[list[str], list[list[Any]]]:
    """One row per clause, uprating and index: the change, as applied, the factor, and the
    money paid by the end of the series under that index and its difference to Konüs."""
    return TABLE_HEADER, table_rows(outcome.result.clauses, outcome.clauses,
                                    outcome.result.labelled.result.periods)


TABLE_HEADER = ["clause", "measured_in", "measured_from", "paid_from", "index", "change_percent",
                "applied_percent", "factor", "total_paid", "difference_vs_konus_total"]


def table_rows(results: Sequence[ClauseResult], clauses: Sequence[ClauseIn],
               labels: Sequence[str]) -> list[list[Any]]:
    """The CSV rows of :data:`TABLE_HEADER`: one per clause, uprating and index."""
    rows: list[list[Any]] = []
    for i, (c, given) in enumerate(zip(results, clauses, strict=True)):
        for j, s in enumerate(c.steps):
            for name, f in c.by_series.items():
                total = f.total
                diff = None if f.difference is None else float(f.difference[-1])
                rows.append([given.name or str(i), labels[s.measured_at],
                             labels[s.measured_from], s.paid_from_label, name,
                             float(f.change_percent[j]), float(f.applied_percent[j]),
                             float(f.factors[j]), total, diff])
    return rows


def factor(outcome: Outcome, index: str, paid_from: str | None) -> tuple[float, str]:
    """The first clause's factor under ``index`` for the uprating paid from ``paid_from``
    (default: the last one paid within the series), and which uprating that is, in words."""
    c = outcome.result.clauses[0]
    if index not in c.by_series:
        raise RequestProblem.at("#/query/index", f"unknown index {index!r}; this request has: "
                                f"{', '.join(c.by_series)}")
    steps = list(enumerate(c.steps))
    if paid_from is None:
        j, step = [(j, s) for j, s in steps if s.paid_within][-1]
    else:
        found = [(j, s) for j, s in steps if s.paid_from_label == paid_from]
        if not found:
            shown = ", ".join(s.paid_from_label for _, s in steps)
            raise RequestProblem.at("#/query/paid_from", f"no uprating of this clause is paid "
                                    f"from {paid_from!r}; they are paid from: {shown}")
        j, step = found[0]
    value = float(c.by_series[index].factors[j])
    if not np.isfinite(value):
        raise RequestProblem.at("#/query/index", f"the {index} factor paid from "
                                f"{step.paid_from_label} is not a result: the model is outside "
                                "its regular region at a period it reads",
                                slug="model-not-regular")
    labels = outcome.result.labelled.result.periods
    return value, (f"{index}: measured {labels[step.measured_at]} against "
                   f"{labels[step.measured_from]}, paid from {step.paid_from_label}")
