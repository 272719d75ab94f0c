"""Nonparametric bounds on the Konüs index from a panel of prices and quantities alone.

Let the data satisfy GARP (at efficiency ``e``, see :mod:`dualcost.core.revealed`), ``u_r`` be
the utility of period r's bundle under any utility function that rationalises them, and
``e(p, u_r)`` its expenditure function. Varian (1982, Econometrica 50(4), section on
recoverability; 1983, Review of Economic Studies 50(1)) bounds ``e(p, u_r)`` by two sets of
bundles the data fix without a functional form:

- revealed preferred, ``RP(x_r) = {x_s : x_s R x_r}``: each reaches at least ``u_r``, so
  ``e(p, u_r) <= e+(p, u_r) = min over s in RP(x_r) of p . x_s`` (the cheapest of them at p; the
  convex monotone hull of the set has the same least cost);
- revealed worse, ``RW(x_r)``: the bundles ``x`` with ``e p_s . x_s >= p_s . x`` for some s with
  ``x_r R x_s``; none of them beats ``u_r``, so ``e(p, u_r) >= e-(p, u_r) = min p . x`` over
  ``x >= 0`` outside ``RW(x_r)``, i.e. with ``p_s . x >= e p_s . x_s`` for every such s: a
  linear programme, solved by scipy's HiGHS (Huangfu and Hall 2018).

The Konüs index between periods a and b at the utility of period r,
``K = e(p_b, u_r) / e(p_a, u_r)``, then lies in ``[e-(p_b) / e+(p_a), e+(p_b) / e-(p_a)]``.
At ``e = 1`` and ``r = a`` both bounds of ``e(p_a, u_a)`` equal ``p_a . x_a``, and the upper
bound is never above Laspeyres ``p_b . x_a / p_a . x_a`` (Konüs 1924's bound). Adding
observations can only enlarge both sets, so the bounds never widen (Varian 1982).

These are Varian's bounds only. The tighter bounds of Blundell, Browning and Crawford (2003,
Econometrica 71(1); 2008, Econometrica 76(6)) use expansion paths (Engel curves estimated from
many households at each price vector) and are not computed here.

Where the data fail GARP, the bounds are computed at an efficiency level at which they pass
(Afriat's index, or just below it): they are then bounds for preferences that rationalise the
data up to that waste of budget, and they widen by it (``e(p_a, u_a)`` is only known to lie in
``[e p_a . x_a, p_a . x_a]``).
"""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass

import numpy as np
import numpy.typing as npt
import scipy.optimize
import scipy.sparse
from numpy.typing import NDArray

from . import deadline
from .errors import InvalidInput, NumericalFailure
from .preferences.base import Notice
from .revealed import (
    Consistency,
    Matrix,
    Panel,
    Relation,
    closure,
    consistency,
    efficiency_index,
    level_below,
    panel,
    relations,
)


@dataclass(frozen=True)
class CostBounds:
    """Bounds on ``e(p_j, u_r)`` for every period j's prices and each reference period r:
    ``lower[j, k]`` and ``upper[j, k]`` at ``references[k]``, at efficiency ``level``."""

    references: tuple[int, ...]
    lower: Matrix
    upper: Matrix
    level: float


@dataclass(frozen=True)
class KonusBounds:
    """The Konüs index from period ``base`` to period ``current`` at the utility of period
    ``utility_of``: the model-free bracket ``[lower, upper]`` at efficiency ``level``, with the
    Laspeyres and Paasche indices beside it (Konüs 1924: ``K(u_base) <= Laspeyres``,
    ``K(u_current) >= Paasche``)."""

    base: int
    current: int
    utility_of: int
    lower: float
    upper: float
    laspeyres: float
    paasche: float
    level: float


def cost_bounds(data: Panel, references: Sequence[int], level: float = 1.0) -> CostBounds:
    """``e+`` and ``e-`` (module docstring) at every period's prices, for each reference period,
    with the relations at efficiency ``level`` (GARP must hold there)."""
    direct, _ = relations(data.costs, level)
    revealed = closure(direct)
    refs = tuple(int(r) for r in references)
    upper = _upper(data.costs, revealed, refs)
    lower = _lower(data, revealed, refs, level)
    # Rounding in the solver can put e- a hair above e+; they agree to the solver's tolerance.
    lower = np.minimum(lower, upper)
    return CostBounds(refs, lower, upper, level)


def _upper(costs: Matrix, revealed: Relation, refs: tuple[int, ...]) -> Matrix:
    """``upper[j, k] = min over s with x_s R x_r of C[j, s]`` (r = refs[k]), for all j at once."""
    better = revealed[:, list(refs)]  # (s, k): x_s R x_r
    masked = np.where(better[None, :, :], costs[:, :, None], np.inf)  # (j, s, k)
    out: Matrix = masked.min(axis=1)
    return out


def _lower(data: Panel, revealed: Relation, refs: tuple[int, ...], level: float) -> Matrix:
    """``lower[j, k]``: one linear programme per reference period, its T objectives (one per
    period's prices) solved together as independent blocks of one HiGHS call (the blocks share
    nothing, so the sum's minimum is each block's minimum)."""
    periods = data.periods
    out = np.empty((periods, len(refs)))
    for k, r in enumerate(refs):
        deadline.check("bounding the cost of a living standard")
        worse = np.flatnonzero(revealed[r])  # x_r R x_s
        out[:, k] = _least_costs(data.prices, data.prices[worse],
                                 level * np.diagonal(data.costs)[worse])
    return out


def _least_costs(objectives: Matrix, rows: Matrix, floors: NDArray[np.float64]
                 ) -> NDArray[np.float64]:
    """``min p_j . x`` subject to ``rows @ x >= floors``, ``x >= 0``, for every row ``p_j`` of
    ``objectives``: one block-diagonal HiGHS programme (scipy.optimize.linprog)."""
    blocks, items = objectives.shape
    # Scale each constraint to a unit right-hand side and each block's prices to unit mean: the
    # same programme, better conditioned for the solver.
    a = rows / floors[:, None]
    scale = objectives.mean(axis=1, keepdims=True)
    c = (objectives / scale).reshape(-1)
    matrix = scipy.sparse.block_diag([scipy.sparse.csr_matrix(-a)] * blocks, format="csr")
    b = -np.ones(blocks * a.shape[0])
    # Presolve finds nothing to remove in these small dense covering programmes; without it
    # HiGHS solves them about a third faster (benchmarks/revealed_speed.py).
    result = scipy.optimize.linprog(c, A_ub=matrix, b_ub=b, bounds=(0, None), method="highs",
                                    options={"presolve": False})
    if result.status != 0 or result.x is None:
        raise NumericalFailure("bounds", "the linear programme for the lower bound did not "
                               f"solve: {result.message}")
    x = np.asarray(result.x).reshape(blocks, items)
    values: NDArray[np.float64] = np.einsum("ji,ji->j", objectives, x)
    return values


def konus_bounds(data: Panel, bounds: CostBounds, base: int, current: int,
                 utility_of: int) -> KonusBounds:
    """The bracket on ``e(p_current, u_r) / e(p_base, u_r)`` (r = ``utility_of``, one of
    ``bounds.references``), with Laspeyres and Paasche from ``base`` to ``current``."""
    k = bounds.references.index(utility_of)
    lo, up, c = bounds.lower[:, k], bounds.upper[:, k], data.costs
    return KonusBounds(
        base=base, current=current, utility_of=utility_of,
        lower=float(lo[current] / up[base]), upper=float(up[current] / lo[base]),
        laspeyres=float(c[current, base] / c[base, base]),
        paasche=float(c[current, current] / c[base, current]), level=bounds.level)


def every_pair(data: Panel, bounds: CostBounds) -> tuple[Matrix, Matrix]:
    """The brackets of every pair of periods (a, b) at the utility of a, ``lower[a, b]`` and
    ``upper[a, b]``, for bounds computed with every period as a reference, in order."""
    if bounds.references != tuple(range(data.periods)):
        raise ValueError("every_pair needs every period as a reference, in order")
    # At reference r = a: e(p_b, u_a) / e(p_a, u_a); column a of the bounds is reference a.
    own_lower = np.diagonal(bounds.lower)
    own_upper = np.diagonal(bounds.upper)
    lower: Matrix = bounds.lower.T / own_upper[:, None]
    upper: Matrix = bounds.upper.T / own_lower[:, None]
    return lower, upper


@dataclass(frozen=True)
class RevealedPreference:
    """What a panel says without a model: the axioms at full efficiency (``consistency``),
    Afriat's index (``efficiency``), and the Konüs index of every period against ``base`` at the
    utility of ``utility_of``, bracketed at efficiency ``level`` (1 when GARP holds)."""

    consistency: Consistency
    efficiency: float
    level: float
    base: int
    utility_of: int
    bounds: tuple[KonusBounds, ...]
    expenditure: NDArray[np.float64]
    notices: tuple[Notice, ...]


def revealed_preference(prices: npt.ArrayLike, quantities: npt.ArrayLike | None = None, *,
                        expenditures: npt.ArrayLike | None = None, base: int = 0,
                        utility_of: int | None = None) -> RevealedPreference:
    """The whole model-free reading of a panel in one call: check it
    (:func:`dualcost.core.revealed.panel`), test GARP, WARP and SARP and list every violation,
    find Afriat's efficiency index, and bracket the Konüs index of each period against
    ``base`` at the utility of period ``utility_of`` (default: the base) by Varian's bounds,
    at the efficiency level where the data pass GARP."""
    data = panel(prices, quantities, expenditures=expenditures)
    r = base if utility_of is None else utility_of
    for name, t in (("base", base), ("utility_of", r)):
        if not 0 <= t < data.periods:
            raise InvalidInput(name, f"must be a period of the panel (0 to {data.periods - 1})")
    verdict = consistency(data)
    index = efficiency_index(data.costs)
    level = level_below(data.costs, index)
    cost = cost_bounds(data, [r], level)
    brackets = tuple(konus_bounds(data, cost, base, t, r) for t in range(data.periods))
    return RevealedPreference(verdict, index, level, base, r, brackets, data.expenditure,
                              _notices(verdict, index, level))


def _notices(verdict: Consistency, index: float, level: float) -> tuple[Notice, ...]:
    notices = [Notice("varian_bounds_only", "The bounds are Varian's (1982, 1983), from the "
                      "revealed preferred and revealed worse sets of the observed bundles; the "
                      "tighter bounds of Blundell, Browning and Crawford (2003, 2008), which "
                      "need expansion paths, are not computed.")]
    if not verdict.garp:
        notices.append(Notice("garp_failed", f"The data fail GARP ({_count(verdict)}); Afriat's "
                              f"efficiency index is {index:.10g}. The bounds are computed at "
                              f"efficiency {level:.10g}, where the data pass: they bracket the "
                              "index for preferences that explain the choices up to that share "
                              "of wasted budget, and are wider for it."))
    return tuple(notices)


def _count(verdict: Consistency) -> str:
    n = sum(v.axiom == "GARP" for v in verdict.violations)
    return "1 violation" if n == 1 else f"{n} violations"
