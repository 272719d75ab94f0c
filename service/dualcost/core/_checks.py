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


def shares(name: str, values: npt.ArrayLike, *, size: int | None = None) -> Vector:
    """Expenditure shares: non-negative and summing to one within 1e-6."""
    arr = nonnegative(name, values, size=size)
    total = float(arr.sum())
    if abs(total - 1.0) > ADDING_UP_TOLERANCE:
        raise InvalidInput(
            name, f"expenditure shares must sum to 1 (within 1e-6); they sum to {total:.10g}"
        )
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
