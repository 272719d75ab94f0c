"""Consistency of observed choices with utility maximisation: GARP, WARP, SARP and Afriat's
efficiency index, on a panel of T periods of prices and quantities (no preference model).

Definitions (Varian 1982, Econometrica 50(4); Afriat 1967, International Economic Review 8(1)),
with ``C[t, s] = p_t . x_s`` the cost of period s's bundle at period t's prices and ``e`` an
efficiency level in (0, 1] (1: the plain axioms):

- ``x_t R0 x_s`` (directly revealed preferred): ``e C[t, t] >= C[t, s]``; every bundle is
  directly revealed preferred to itself.
- ``x_t P0 x_s`` (strictly): ``e C[t, t] > C[t, s]``.
- ``R`` is the transitive closure of ``R0`` (Warshall 1962).
- GARP: ``x_t R x_s`` implies not ``x_s P0 x_t``.
- WARP: ``x_t R0 x_s`` and ``x_t != x_s`` imply not ``x_s R0 x_t``.
- SARP: ``x_t R x_s`` and ``x_t != x_s`` imply not ``x_s R x_t``.
- Afriat's critical cost efficiency index (CCEI): the largest ``e <= 1`` at which GARP holds
  (Afriat 1972, International Economic Review 13(3); Varian 1990, Journal of Econometrics 46).
  The relations change only where ``e`` crosses a ratio ``C[t, s] / C[t, t]``, so the index is
  one of those ratios (or 1), found exactly by bisection over the sorted ratios.

A strict preference is taken only when the gap exceeds ``tolerance`` (relative), so that
bundles that cost the same up to rounding are not read as strictly cheaper. The
nonparametric bounds on the Konüs index are in :mod:`dualcost.core.revealed_bounds`.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Literal

import numpy as np
import numpy.typing as npt
from numpy.typing import NDArray

from . import deadline
from .errors import InvalidInput

Matrix = NDArray[np.float64]
Relation = NDArray[np.bool_]
Axiom = Literal["GARP", "WARP", "SARP"]

#: The relative gap below which two costs count as equal (a strict preference needs more).
TOLERANCE = 1e-10


@dataclass(frozen=True)
class Panel:
    """Checked prices and quantities, ``(T, N)`` each, and the cost matrix ``C[t, s] = p_t .
    x_s`` (its diagonal is each period's expenditure)."""

    prices: Matrix
    quantities: Matrix
    costs: Matrix

    @property
    def periods(self) -> int:
        return int(self.prices.shape[0])

    @property
    def expenditure(self) -> NDArray[np.float64]:
        return np.diagonal(self.costs).copy()


@dataclass(frozen=True)
class Violation:
    """One breach of an axiom: ``first`` is revealed preferred to ``second``, and the reverse
    holds too (strictly and directly for GARP); ``periods`` is a cycle of periods through
    which the data reveal it, from ``first`` back to ``first`` (each step a direct revealed
    preference)."""

    axiom: Axiom
    first: int
    second: int
    periods: tuple[int, ...]


@dataclass(frozen=True)
class Consistency:
    """The verdicts of the three axioms at efficiency ``level``, every violation, and the
    relations they were read from."""

    garp: bool
    warp: bool
    sarp: bool
    violations: tuple[Violation, ...]
    level: float
    direct: Relation
    revealed: Relation
    strict: Relation


def panel(prices: npt.ArrayLike, quantities: npt.ArrayLike | None = None, *,
          expenditures: npt.ArrayLike | None = None) -> Panel:
    """Check a panel: prices positive and finite, quantities (or expenditures, ``x = e / p``)
    finite and not negative, the same shape ``(T, N)`` with ``T >= 2``, and each period's
    expenditure ``p_t . x_t`` positive. Errors name the argument and ``(period, item)``."""
    p = _matrix("prices", prices)
    name = "quantities" if expenditures is None else "expenditures"
    given = quantities if expenditures is None else expenditures
    if given is None or (quantities is not None and expenditures is not None):
        raise InvalidInput("quantities", "give the quantities or the expenditures of every "
                           "period (exactly one of them)")
    x = _matrix(name, given)
    if x.shape != p.shape:
        raise InvalidInput(name, f"has {x.shape[0]} periods of {x.shape[1]} items but the "
                           f"prices {p.shape[0]} of {p.shape[1]}; give one value per period "
                           "and item")
    if p.shape[0] < 2:
        raise InvalidInput("prices", "needs at least two periods to compare")
    _check_signs(p, x, name)
    if expenditures is not None:
        x = x / p
    costs = p @ x.T
    spent = np.diagonal(costs)
    bad = np.flatnonzero(~(spent > 0.0) | ~np.isfinite(spent))
    if bad.size:
        t = int(bad[0])
        raise InvalidInput(name, f"the expenditure of period {t}, p_t . x_t = {spent[t]:.10g}, "
                           "must be greater than zero (and finite): a period with nothing "
                           "bought reveals no preference", (t,))
    if not np.isfinite(costs).all():
        raise InvalidInput(name, "a bundle's cost at another period's prices is beyond floating "
                           "point; check the magnitudes")
    return Panel(p, x, costs)


def _matrix(name: str, values: npt.ArrayLike) -> Matrix:
    try:
        arr = np.asarray(values, dtype=np.float64)
    except (TypeError, ValueError) as exc:
        raise InvalidInput(name, "must be rows of numbers, one row per period") from exc
    if arr.ndim != 2 or arr.shape[1] == 0:
        raise InvalidInput(name, "must be rows of numbers, one row per period, one value per "
                           "item")
    bad = np.argwhere(~np.isfinite(arr))
    if bad.size:
        raise InvalidInput(name, "must be a finite number (every item priced and bought, or "
                           "0, in every period)", (int(bad[0][0]), int(bad[0][1])))
    return arr


def _check_signs(p: Matrix, x: Matrix, name: str) -> None:
    bad = np.argwhere(p <= 0.0)
    if bad.size:
        raise InvalidInput("prices", "must be greater than zero", (int(bad[0][0]),
                                                                   int(bad[0][1])))
    bad = np.argwhere(x < 0.0)
    if bad.size:
        raise InvalidInput(name, "must not be negative", (int(bad[0][0]), int(bad[0][1])))


def relations(costs: Matrix, level: float = 1.0, tolerance: float = TOLERANCE
              ) -> tuple[Relation, Relation]:
    """``R0`` and ``P0`` at efficiency ``level`` (Varian 1982; Afriat 1972): ``R0[t, s]`` when
    ``level C[t, t] >= C[t, s]`` (and on the diagonal), ``P0[t, s]`` when ``level C[t, t] >
    C[t, s] (1 + tolerance)``."""
    own = level * np.diagonal(costs)[:, None]
    direct = own >= costs
    np.fill_diagonal(direct, True)
    strict = own > costs * (1.0 + tolerance)
    np.fill_diagonal(strict, False)
    return direct, strict


def closure(direct: Relation) -> Relation:
    """The transitive closure of a relation by Warshall's algorithm (Warshall 1962, JACM 9(1)),
    one vectorised step per intermediate period: ``R |= R[:, k] & R[k, :]``."""
    revealed = direct.copy()
    for k in range(revealed.shape[0]):
        revealed |= revealed[:, k, None] & revealed[None, k, :]
    return revealed


def garp_holds(costs: Matrix, level: float = 1.0, tolerance: float = TOLERANCE) -> bool:
    """Whether GARP holds at efficiency ``level``: no ``x_t R x_s`` with ``x_s P0 x_t``."""
    direct, strict = relations(costs, level, tolerance)
    return not bool((closure(direct) & strict.T).any())


def consistency(data: Panel, level: float = 1.0, tolerance: float = TOLERANCE) -> Consistency:
    """GARP, WARP and SARP at efficiency ``level``, with every violation and a cycle of periods
    revealing it (see the module docstring for the definitions)."""
    direct, strict = relations(data.costs, level, tolerance)
    revealed = closure(direct)
    distinct = _distinct(data.quantities)
    breaches: dict[Axiom, Relation] = {
        "GARP": revealed & strict.T,
        "WARP": np.triu(direct & direct.T & distinct, 1),
        "SARP": np.triu(revealed & revealed.T & distinct, 1),
    }
    paths = _Paths(direct)
    found = [Violation(axiom, int(t), int(s), paths.cycle(int(t), int(s), axiom))
             for axiom, where in breaches.items() for t, s in np.argwhere(where)]
    return Consistency(garp=not breaches["GARP"].any(), warp=not breaches["WARP"].any(),
                       sarp=not breaches["SARP"].any(), violations=tuple(found), level=level,
                       direct=direct, revealed=revealed, strict=strict)


def _distinct(x: Matrix) -> Relation:
    """Whether two periods' bundles differ (beyond a relative 1e-12 of the larger)."""
    scale = np.maximum(np.abs(x)[:, None, :], np.abs(x)[None, :, :])
    gap = np.abs(x[:, None, :] - x[None, :, :]) > 1e-12 * scale
    return np.asarray(gap.any(axis=-1), dtype=np.bool_)


class _Paths:
    """Shortest chains of direct revealed preference from each period (breadth first), read
    only to name the periods of a violation."""

    def __init__(self, direct: Relation) -> None:
        self.direct = direct.copy()
        np.fill_diagonal(self.direct, False)
        self._parents: dict[int, NDArray[np.intp]] = {}

    def chain(self, start: int, end: int) -> list[int]:
        """The periods from ``start`` to ``end`` (both included) along direct preferences."""
        if start == end:
            return [start]
        parent = self._parents.get(start)
        if parent is None:
            parent = self._parents[start] = self._search(start)
        out = [end]
        while out[-1] != start:
            out.append(int(parent[out[-1]]))
        return out[::-1]

    def _search(self, start: int) -> NDArray[np.intp]:
        size = self.direct.shape[0]
        parent = np.full(size, -1, dtype=np.intp)
        seen = np.zeros(size, dtype=np.bool_)
        seen[start] = True
        frontier = np.array([start])
        while frontier.size:
            reach = self.direct[frontier] & ~seen  # rows: frontier periods
            hit = reach.any(axis=0)
            parent[hit] = frontier[np.argmax(reach[:, hit], axis=0)]
            seen |= hit
            frontier = np.flatnonzero(hit)
        return parent

    def cycle(self, t: int, s: int, axiom: Axiom) -> tuple[int, ...]:
        """A cycle from ``t`` through ``s`` back to ``t``: the chain t..s, then back directly
        (GARP: ``x_s P0 x_t``; WARP: ``x_s R0 x_t``) or along the chain s..t (SARP)."""
        there = self.chain(t, s)
        back = [t] if axiom != "SARP" else self.chain(s, t)[1:]
        return tuple(there + back)


def efficiency_index(costs: Matrix, tolerance: float = TOLERANCE) -> float:
    """Afriat's critical cost efficiency index: the largest ``e <= 1`` at which GARP holds
    (Afriat 1972; Varian 1990). GARP at ``e`` holds for every smaller ``e`` (fewer relations),
    and the relations change only at the ratios ``C[t, s] / C[t, t]``; the index is the ratio
    at which the last interval where GARP holds ends, found by bisection over the sorted
    ratios (each test one closure), so it is exact, not approximate."""
    if garp_holds(costs, 1.0, tolerance):
        return 1.0
    own = np.diagonal(costs)[:, None]
    ratios = np.unique((costs / own)[~np.eye(costs.shape[0], dtype=np.bool_)])
    ratios = ratios[(ratios > 0.0) & (ratios < 1.0)]
    cuts = np.concatenate(([0.0], ratios, [1.0]))
    # Interval i is (cuts[i], cuts[i+1]); GARP holds on interval 0 (only the diagonal is
    # revealed there). Find the last interval on which it holds.
    low, high = 0, cuts.size - 2  # holds on low; fails on high (it fails at 1 and just below)
    if _holds_within(costs, cuts, high, tolerance):
        return 1.0  # fails only at e = 1 itself: a tie read as strict at 1
    while high - low > 1:
        deadline.check("searching for the efficiency index")
        middle = (low + high) // 2
        if _holds_within(costs, cuts, middle, tolerance):
            low = middle
        else:
            high = middle
    return float(cuts[low + 1])


def _holds_within(costs: Matrix, cuts: NDArray[np.float64], interval: int,
                  tolerance: float) -> bool:
    level = 0.5 * (cuts[interval] + cuts[interval + 1])
    return garp_holds(costs, level, tolerance)


def level_below(costs: Matrix, index: float, tolerance: float = TOLERANCE) -> float:
    """An efficiency level at which GARP holds and the relations are those just below
    ``index``: the index itself when GARP holds there, else the middle of the interval of
    ratios that ends at it."""
    if garp_holds(costs, index, tolerance):
        return index  # (an index of 1 where the data fail only through a tie at 1 goes on)
    own = np.diagonal(costs)[:, None]
    ratios = (costs / own)[~np.eye(costs.shape[0], dtype=np.bool_)]
    below = ratios[ratios < index]
    previous = float(below.max()) if below.size else 0.0
    return 0.5 * (previous + index)
