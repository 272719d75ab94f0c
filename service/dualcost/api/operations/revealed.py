"""What a panel says without a preference model: POST /v1/revealed-preference.

The panel arrives as JSON rows (:mod:`dualcost.api.inputs.panels`); the core checks GARP, WARP
and SARP, finds Afriat's efficiency index and brackets the Konüs index in one call
(:func:`dualcost.core.revealed_bounds.revealed_preference`); the answer is JSON or a CSV table
with one row per period.
"""

from __future__ import annotations

from collections import Counter
from dataclasses import dataclass
from typing import Any

from ...config import Settings
from ...core.revealed_bounds import RevealedPreference, revealed_preference
from ..inputs.items import ItemAxis
from ..inputs.locator import Locator, Place
from ..inputs.panels import Limits, panel_from_json
from ..observability import computing
from ..schemas.common import CAUTION
from ..schemas.revealed import BOUNDS_METHOD, RevealedRequest
from .answers import SCALE_RATIO, notices_json

#: Where each core argument is in the JSON body.
PLACES: dict[str, Place] = {
    "prices": Place("/prices", "prices", "panel"),
    "quantities": Place("/quantities", "quantities", "panel"),
    "expenditures": Place("/expenditures", "expenditures", "panel"),
    "periods": Place("/periods", "periods", "list"),
    "items": Place("/items", "items", "list"),
    "base": Place("/base_period", "base_period"),
    "base_period": Place("/base_period", "base_period"),
    "utility_of": Place("/utility_period", "utility_period"),
    "utility_period": Place("/utility_period", "utility_period"),
}


@dataclass(frozen=True)
class Outcome:
    result: RevealedPreference
    periods: list[str]
    axis: ItemAxis


def locator() -> Locator:
    return Locator(PLACES, "json")


def limits(settings: Settings) -> Limits:
    return Limits(settings.max_revealed_periods, settings.max_items, settings.max_panel_cells)


def run(request: RevealedRequest, settings: Settings) -> Outcome:
    """Read the panel, name the base and utility periods, and make the one core call."""
    loc = locator()
    panel = panel_from_json(request.periods, request.items, {
        "prices": request.prices, "quantities": request.quantities,
        "expenditures": request.expenditures}, limits(settings), loc)
    periods, items = len(panel.periods), len(panel.axis)
    if periods * periods * items > settings.max_revealed_work:
        raise loc.problem("periods", f"{periods} periods of {items} items make linear "
                          f"programmes of {periods} x {periods} x {items} = "
                          f"{periods * periods * items} coefficients; the limit is "
                          f"{settings.max_revealed_work} (max_revealed_work): give fewer "
                          "periods or items")
    base = _position(panel.periods, request.base_period, "base_period", loc, 0)
    utility = _position(panel.periods, request.utility_period, "utility_period", loc, base)
    with computing("revealedPreference", settings), loc.translating():
        result = revealed_preference(panel.prices, panel.quantities,
                                     expenditures=panel.expenditures, base=base,
                                     utility_of=utility)
    return Outcome(result, panel.periods, panel.axis)


def _position(periods: list[str], label: Any, name: str, loc: Locator, default: int) -> int:
    if label is None:
        return default
    if str(label) not in periods:
        raise loc.problem(name, f"{label!r} is not a period of the panel")
    return periods.index(str(label))


def document(outcome: Outcome) -> dict[str, Any]:
    """The answer as plain JSON-ready values, in the shape of ``RevealedResponse``."""
    r, labels = outcome.result, outcome.periods
    return {
        "periods": labels, "items": outcome.axis.ids, "scale": SCALE_RATIO,
        "consistency": consistency_json(r, labels),
        "bounds": {"base_period": labels[r.base], "utility_period": labels[r.utility_of],
                   "efficiency_level": r.level, "method": BOUNDS_METHOD,
                   "rows": rows_json(r, labels)},
        "expenditure": r.expenditure.tolist(),
        "notices": notices_json(r.notices),
        "caution": CAUTION,
    }


def consistency_json(r: RevealedPreference, labels: list[str]) -> dict[str, Any]:
    """The verdicts, Afriat's index and every violation, periods by label (also in the index
    series' answer)."""
    c = r.consistency
    counts = Counter(v.axiom for v in c.violations)
    return {"garp": c.garp, "warp": c.warp, "sarp": c.sarp, "efficiency_index": r.efficiency,
            "violations": [{"axiom": v.axiom, "first": labels[v.first],
                            "second": labels[v.second],
                            "periods": [labels[t] for t in v.periods]} for v in c.violations],
            "violation_counts": {axiom: counts[axiom] for axiom in ("GARP", "WARP", "SARP")}}


def rows_json(r: RevealedPreference, labels: list[str]) -> list[dict[str, Any]]:
    """One bracket per period against the base period."""
    return [{"period": labels[k.current], "lower": k.lower, "upper": k.upper,
             "laspeyres": k.laspeyres, "paasche": k.paasche} for k in r.bounds]


#: The columns of the CSV answer: one row per period.
TABLE_COLUMNS = ("period", "expenditure", "lower", "upper", "laspeyres", "paasche",
                 "efficiency_level")


def table(outcome: Outcome) -> tuple[tuple[str, ...], list[tuple[Any, ...]]]:
    """The bounds as one CSV table, one row per period (the verdicts go in the headers)."""
    r = outcome.result
    rows = [(outcome.periods[k.current], float(r.expenditure[k.current]), k.lower, k.upper,
             k.laspeyres, k.paasche, r.level) for k in r.bounds]
    return TABLE_COLUMNS, rows


def headers(outcome: Outcome) -> dict[str, str]:
    """The verdicts a CSV answer states in its headers."""
    r = outcome.result
    return {"Dualcost-Garp": "pass" if r.consistency.garp else "fail",
            "Dualcost-Efficiency-Index": repr(r.efficiency),
            "Dualcost-Base-Period": outcome.periods[r.base],
            "Dualcost-Utility-Period": outcome.periods[r.utility_of]}
