"""Auditing published index numbers: recompute each one and say whether it agrees.

A published value passes when it is within its tolerance of the recomputed one. The tolerance is
the caller's when given; otherwise it is half a unit in the last decimal place the value was
published with (a value printed as 1.4200 passes for any recomputed value in [1.41995, 1.42005]),
plus 1e-9 for the binary representation of decimals (common practice for checking printed tables).
"""

from __future__ import annotations

from collections.abc import Mapping, Sequence
from dataclasses import dataclass
from typing import Any

import numpy as np
from numpy.typing import NDArray

from .errors import InvalidInput
from .series import series_by_label
from .validity import Validity

Array = NDArray[np.float64]

#: The series a published value can belong to.
SERIES_KINDS = ("fixed_base", "chained")


@dataclass(frozen=True)
class PublishedValue:
    formula: str
    series: str  # "fixed_base" or "chained"
    period: str
    value: float
    decimals: int | None = None  # decimal places it was published with, when known


@dataclass(frozen=True)
class AuditRow:
    formula: str
    series: str
    period: str
    published: float
    recomputed: float
    difference: float  # published - recomputed
    tolerance: float
    passed: bool


@dataclass(frozen=True)
class Audit:
    rows: list[AuditRow]
    #: With a model (which fills in the quantities of prices-only periods): the periods where
    #: it is outside its regular region, with why. Its demands there are not reliable weights.
    model_outside_regular_region: tuple[tuple[str, Validity], ...] = ()
    model_family: str | None = None

    @property
    def passed(self) -> bool:
        return all(r.passed for r in self.rows)

    @property
    def failures(self) -> list[AuditRow]:
        return [r for r in self.rows if not r.passed]


def tolerance_for(value: PublishedValue, tolerance: float | None) -> float:
    if tolerance is not None:
        return tolerance
    if value.decimals is None:
        raise InvalidInput("tolerance", "give a tolerance, or the number of decimals each value was "
                           "published with, so that rounding can be allowed for")
    return 0.5 * 10.0 ** (-value.decimals) + 1e-9


def audit(
    published: Sequence[PublishedValue],
    recomputed: Mapping[tuple[str, str], Array],
    periods: Sequence[str],
    *,
    tolerance: float | None = None,
) -> Audit:
    """Compare every published value with ``recomputed[(formula, series)][period]``."""
    if tolerance is not None and not (np.isfinite(tolerance) and tolerance >= 0):
        raise InvalidInput("tolerance", f"must be a finite number, zero or more, got {tolerance!r}")
    where = {p: i for i, p in enumerate(periods)}
    rows = []
    for k, value in enumerate(published):
        if value.series not in SERIES_KINDS:
            raise InvalidInput("published", f"series {value.series!r} is not one of "
                               f"{', '.join(SERIES_KINDS)}", k)
        if (value.formula, value.series) not in recomputed:
            raise InvalidInput("published", f"formula {value.formula!r} was not recomputed (unknown "
                               "name, or the data do not allow it)", k)
        if value.period not in where:
            raise InvalidInput("published", f"period {value.period!r} is not in the panel", k)
        again = float(recomputed[(value.formula, value.series)][where[value.period]])
        tol = tolerance_for(value, tolerance)
        gap = value.value - again
        rows.append(AuditRow(value.formula, value.series, value.period, value.value, again, gap,
                             tol, bool(np.isfinite(again) and abs(gap) <= tol)))
    return Audit(rows)


def decimals_of(text: str) -> int:
    """Decimal places of a number as written: '1.4200' -> 4, '100' -> 0, '1.5e-3' -> 4."""
    t = text.strip().lower()
    mantissa, _, exponent = t.partition("e")
    places = len(mantissa.split(".", 1)[1]) if "." in mantissa else 0
    return max(places - int(exponent or 0), 0)


def audit_series(published: Sequence[PublishedValue], *, tolerance: float | None = None,
                 **series: Any) -> Audit:
    """Recompute the series the published values belong to from their panel, and compare them
    one by one: :func:`dualcost.core.series.series_by_label` with ``series`` as its arguments,
    only the formulas published, then :func:`audit`."""
    needed = list(dict.fromkeys(p.formula for p in published))
    result = series_by_label(**(series | {"formulas": needed})).result
    recomputed = {(name, kind): getattr(s, kind) for name, s in result.formulas.items()
                  for kind in SERIES_KINDS}
    checked = audit(published, recomputed, result.periods, tolerance=tolerance)
    if result.konus is None:
        return checked
    outside = tuple((result.periods[t], v) for t, v in enumerate(result.konus.validity)
                    if not v.regular)
    return Audit(checked.rows, outside, result.konus.family)
