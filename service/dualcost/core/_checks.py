"""Checks at the core's edge: every public core function passes its inputs through these.

Each check names the argument and the rule in one sentence and raises
:class:`~dualcost.core.errors.InvalidInput`; nothing is silently repaired.
"""

from __future__ import annotations

import numpy as np
import numpy.typing as npt
from numpy.typing import NDArray

from .errors import InvalidInput

Vector = NDArray[np.float64]

#: Tolerance on "shares sum to one" and other adding-up rules (common practice: 1e-6).
ADDING_UP_TOLERANCE = 1e-6
#: The units a caller may give expenditure shares in (``share_unit``), by what a whole budget
#: adds up to in each: fractions of 1, percent, per mille.
SHARE_UNITS: dict[str, float] = {"fraction": 1.0, "percent": 100.0, "per_mille": 1000.0}
_UNIT_WORDS = {"fraction": "fractions", "percent": "percentages", "per_mille": "per mille figures"}
#: How near (relatively) a sum of shares must come to 1, 100 or 1000 for a refusal to suggest
#: that unit.
UNIT_HINT_BAND = 0.05


def vector(name: str, values: npt.ArrayLike, *, size: int | None = None) -> Vector:
    """A finite one-dimensional float vector, of ``size`` elements if given."""
    try:
        arr = np.asarray(values, dtype=np.float64)
    except (TypeError, ValueError) as exc:
        raise InvalidInput(name, "must be a list of numbers") from exc
    if arr.ndim != 1:
        raise InvalidInput(name, f"must be a one-dimensional vector, got {arr.ndim} dimensions")
    if arr.size == 0:
        raise InvalidInput(name, "must hold at least one item")
    if size is not None and arr.size != size:
        raise InvalidInput(name, f"must hold {size} values, one per item, got {arr.size}")
    bad = np.flatnonzero(~np.isfinite(arr))
    if bad.size:
        raise InvalidInput(name, "must be a finite number (not NaN or infinity)", int(bad[0]))
    return arr


def positive(name: str, values: npt.ArrayLike, *, size: int | None = None) -> Vector:
    """A vector of strictly positive finite numbers (prices, price relatives)."""
    arr = vector(name, values, size=size)
    bad = np.flatnonzero(arr <= 0.0)
    if bad.size:
        raise InvalidInput(name, "must be greater than zero", int(bad[0]))
    return arr


def nonnegative(name: str, values: npt.ArrayLike, *, size: int | None = None) -> Vector:
    """A vector of finite numbers that are zero or more (quantities, shares)."""
    arr = vector(name, values, size=size)
    bad = np.flatnonzero(arr < 0.0)
    if bad.size:
        raise InvalidInput(name, "must not be negative", int(bad[0]))
    return arr


def share_scale(unit: str) -> float:
    """What a whole budget adds up to in ``unit`` (``fraction`` 1, ``percent`` 100,
    ``per_mille`` 1000)."""
    try:
        return SHARE_UNITS[unit]
    except KeyError:
        raise InvalidInput("share_unit", f"must be one of {', '.join(SHARE_UNITS)}, got "
                           f"{unit!r}") from None


def unit_words(unit: str) -> str:
    """The unit in words: "percent", "per mille", "fractions of 1"."""
    return {"fraction": "fractions of 1", "percent": "percent", "per_mille": "per mille"}[unit]


def unit_hint(total: float, unit: str = "fraction") -> str:
    """For shares in ``unit`` that add up to ``total`` (as given) where the rule wants another
    sum: the unit they seem to be in, if another one's whole budget is within 5% of ``total``
    ("; if they are percentages (a whole budget 100), give share_unit=percent"); else ""."""
    for name, scale in SHARE_UNITS.items():
        if name != unit and abs(total / scale - 1.0) <= UNIT_HINT_BAND:
            return (f"; if they are {_UNIT_WORDS[name]} (a whole budget {scale:g}), give "
                    f"share_unit={name}")
    return ""


def sum_rule(unit: str = "fraction") -> str:
    """The adding-up rule for shares given in ``unit``."""
    if unit == "fraction":
        return "expenditure shares must sum to 1 (within 1e-6)"
    scale = share_scale(unit)
    return (f"expenditure shares given in {unit_words(unit)} (share_unit={unit}) must sum to "
            f"{scale:g} (within {ADDING_UP_TOLERANCE * scale:g})")


def shares(name: str, values: npt.ArrayLike, *, size: int | None = None,
           unit: str = "fraction") -> Vector:
    """Expenditure shares: non-negative and summing to one within 1e-6; given in ``unit``
    (:data:`SHARE_UNITS`), they are divided by its whole budget (100 for percent) first."""
    scale = share_scale(unit)
    arr = nonnegative(name, values, size=size)
    given = float(arr.sum())
    if scale != 1.0:
        arr = arr / scale
    if abs(given / scale - 1.0) > ADDING_UP_TOLERANCE:
        raise InvalidInput(name, f"{sum_rule(unit)}; they sum to {given:.10g}"
                           f"{unit_hint(given, unit)}")
    return arr


def scalar(name: str, value: float, *, minimum: float | None = None, strict: bool = True) -> float:
    """A finite number, above ``minimum`` (strictly unless ``strict`` is false)."""
    try:
        x = float(value)
    except (TypeError, ValueError) as exc:
        raise InvalidInput(name, "must be a number") from exc
    if not np.isfinite(x):
        raise InvalidInput(name, "must be a finite number (not NaN or infinity)")
    if minimum is not None:
        if strict and x <= minimum:
            raise InvalidInput(name, f"must be greater than {minimum:g}, got {x:g}")
        if not strict and x < minimum:
            raise InvalidInput(name, f"must be at least {minimum:g}, got {x:g}")
    return x


def square_matrix(name: str, values: npt.ArrayLike, size: int) -> NDArray[np.float64]:
    """A finite ``size`` by ``size`` matrix."""
    try:
        arr = np.asarray(values, dtype=np.float64)
    except (TypeError, ValueError) as exc:
        raise InvalidInput(name, "must be a matrix of numbers (a list of rows)") from exc
    if arr.shape != (size, size):
        raise InvalidInput(name, f"must be a {size} by {size} matrix, got shape {arr.shape}")
    if not np.all(np.isfinite(arr)):
        bad = np.argwhere(~np.isfinite(arr))[0]
        raise InvalidInput(name, "must be finite numbers", (int(bad[0]), int(bad[1])))
    return arr


def symmetric(name: str, matrix: NDArray[np.float64], *, tolerance: float = 1e-8) -> None:
    """Raise unless ``matrix`` equals its transpose within ``tolerance`` (absolute)."""
    gap = np.abs(matrix - matrix.T)
    if gap.max() > tolerance:
        i, j = np.unravel_index(int(np.argmax(gap)), gap.shape)
        raise InvalidInput(
            name,
            f"must be symmetric (element [{i}][{j}] is {matrix[i, j]:.6g} but [{j}][{i}] is "
            f"{matrix[j, i]:.6g})",
            (int(i), int(j)),
        )
