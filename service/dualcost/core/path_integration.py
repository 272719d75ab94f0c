"""The expenditure function of a demand system, found by integrating its demands along a price path.

Along a price path ``p(t)`` the expenditure function at a fixed living standard ``u`` obeys

    d e(p(t), u) / dt = h(p(t), u) . p'(t) = x(p(t), e(p(t), u)) . p'(t)

(Shephard's lemma, then ``h(p, u) = x(p, e(p, u))``): an ordinary differential equation in the one
unknown ``e``, which needs only the Marshallian demands ``x(p, m)`` (Hausman 1981, "Exact consumer's
surplus and deadweight loss", American Economic Review 71(4); Vartia 1983, "Efficient methods of
measuring welfare change and compensated income in terms of ordinary demand functions",
Econometrica 51(1)). Started at ``e(p_a) = m`` it gives the least cost at ``p_b`` of the living
standard that ``m`` buys at ``p_a``; run backwards it gives the income at ``p_a`` that reaches the
living standard of ``(p_b, m)``.

The path is piecewise linear, through price vectors the caller may give; on each segment a price
moves from ``a_i`` to ``b_i`` as ``a_i + phi_i(s) (b_i - a_i)``, ``s`` in ``[0, 1]``, with
``phi_i(s) = s`` (a straight segment) or ``phi_i(s) = s + c_i s (1 - s)`` (each price at its own
pace, ``|c_i| < 1`` so that ``phi_i`` increases). Each segment is one call of
:func:`scipy.integrate.solve_ivp` (DOP853, an explicit Runge-Kutta method of order 8; Hairer,
Nørsett and Wanner 1993, *Solving Ordinary Differential Equations I*, II.5).

Integrability. The answer is the same along every path exactly when the demands come from a
utility function: the Slutsky matrix ``S = dx/dp + (dx/dm) x'`` is symmetric (and, for a
minimum rather than a maximum of cost, negative semidefinite), and the demands add up,
``p . x = m`` (Hurwicz and Uzawa 1971, "On the integrability of demand functions", in
*Preferences, Utility, and Demand*; Mas-Colell, Whinston and Green 1995, 3.H). The checks here
report each of these and the spread between two different paths.
"""

from __future__ import annotations

import time
from collections.abc import Callable, Sequence
from dataclasses import dataclass

import numpy as np
from numpy.typing import NDArray
from scipy.integrate import solve_ivp

from .deadline import share_the_interpreter
from .errors import DeadlineExceeded, InvalidInput

# Not imported from preferences.base: the families import this module.
Vector = NDArray[np.float64]
Matrix = NDArray[np.float64]

#: Relative tolerance of the integration (rtol of solve_ivp); atol is scaled to the budget.
DEFAULT_TOLERANCE = 1e-10
#: The error estimate compares a solve at ``tolerance`` with one at this many times ``tolerance``.
COARSE_FACTOR = 100.0
#: Two paths whose answers differ by more than this many times the tolerance (relative) mean
#: the demands are not integrable.
SPREAD_FACTOR = 1000.0
#: Relative adding-up gap |p . x - m| / m above which a notice is given (common practice: 1e-6).
ADDING_UP_TOLERANCE = 1e-6
#: The largest pace |c_i| on the alternative path.
PACE = 0.8

Demand = Callable[[Vector, float], Vector]


class Deadline:
    """A point in time after which a numerical solve stops with ``NumericalFailure("deadline")``.

    The clock starts when the object is made (for a family: at calibration) and again at
    :meth:`restart`; ``seconds=None`` means no deadline.
    """

    def __init__(self, seconds: float | None) -> None:
        if seconds is not None:
            seconds = float(seconds)
            if not (np.isfinite(seconds) and seconds > 0.0):
                raise InvalidInput("deadline_seconds", f"must be a number of seconds greater than "
                                   f"zero, got {seconds:g}")
        self.seconds = seconds
        self.expires: float | None = None
        self.restart()

    def restart(self) -> None:
        self.expires = None if self.seconds is None else time.monotonic() + self.seconds

    def check(self, doing: str) -> None:
        share_the_interpreter()  # (see dualcost.core.deadline)
        if self.expires is not None and time.monotonic() > self.expires:
            raise DeadlineExceeded("deadline", f"the compute deadline of {self.seconds:g} s passed "
                                   f"while {doing}; the model is too slow to evaluate at these "
                                   "inputs within the time allowed")


@dataclass(frozen=True)
class PricePath:
    """A piecewise path through ``vertices`` (first: where it starts; last: where it ends).

    ``paces`` (one ``c_i`` per item, or None for straight segments) bends every segment the same
    way: price ``i`` moves as ``a_i + (s + c_i s (1 - s)) (b_i - a_i)``.
    """

    vertices: tuple[Vector, ...]
    paces: Vector | None = None

    @property
    def segments(self) -> int:
        return len(self.vertices) - 1

    def point(self, k: int, s: float) -> Vector:
        a, b = self.vertices[k], self.vertices[k + 1]
        if self.paces is None:
            return a + s * (b - a)
        return a + (s + self.paces * s * (1.0 - s)) * (b - a)

    def velocity(self, k: int, s: float) -> Vector:
        a, b = self.vertices[k], self.vertices[k + 1]
        if self.paces is None:
            return b - a
        return (1.0 + self.paces * (1.0 - 2.0 * s)) * (b - a)

    def at(self, tau: float) -> Vector:
        """The prices at ``tau`` in ``[0, segments]`` (segment ``k`` covers ``[k, k + 1]``)."""
        k = min(int(tau), self.segments - 1)
        return self.point(k, tau - k)


def straight_path(start: Vector, end: Vector, waypoints: Sequence[Vector] = ()) -> PricePath:
    """Straight segments from ``start`` through ``waypoints`` to ``end``."""
    return PricePath((start, *waypoints, end))


def paced_path(start: Vector, end: Vector, waypoints: Sequence[Vector] = ()) -> PricePath:
    """The same vertices, each price moving at its own pace ``c_i``, spread evenly over
    ``[-0.8, 0.8]`` in item order: any two items with different paces enclose an area with the
    straight path, which is what reveals an asymmetric Slutsky matrix (Stokes' theorem on the
    1-form ``h . dp``)."""
    n = start.size
    paces = np.zeros(n) if n == 1 else PACE * (2.0 * np.arange(n) / (n - 1) - 1.0)
    return PricePath((start, *waypoints, end), paces)


@dataclass(frozen=True)
class Integration:
    """The value at the end of the path, and at the requested stops (``tau -> e``)."""

    value: float
    stops: dict[float, float]
    evaluations: int


def integrate(
    demand: Demand,
    path: PricePath,
    start_value: float,
    *,
    backward: bool = False,
    tolerance: float = DEFAULT_TOLERANCE,
    deadline: Deadline | None = None,
    parameter: str = "model",
    stops: Sequence[float] = (),
) -> Integration:
    """Integrate ``de/dt = x(p(t), e) . p'(t)`` along ``path``.

    Forward (default) the value starts at the first vertex; with ``backward=True`` at the last
    vertex, and the result is the value at the first. ``stops`` are places ``tau`` in
    ``[0, path.segments]`` where the solution is recorded too.

    Errors: a demand that turns negative raises ``InvalidInput("prices", ..., item)``; an
    expenditure that reaches zero, or a solver that fails, ``InvalidInput(parameter, ...)``; the
    deadline ``NumericalFailure("deadline", ...)``. A fault raised by ``demand`` itself gets the
    place on the path added to its message.
    """
    deadline = deadline or Deadline(None)
    value = float(start_value)
    atol = tolerance * 1e-2 * max(abs(value), 1e-300)
    count = [0]
    recorded: dict[float, float] = {}
    order = range(path.segments - 1, -1, -1) if backward else range(path.segments)
    total = path.segments
    for k in order:
        if np.array_equal(path.vertices[k], path.vertices[k + 1]):
            for tau in stops:
                if k <= tau <= k + 1:
                    recorded[tau] = value
            continue
        span = (1.0, 0.0) if backward else (0.0, 1.0)

        def rhs(s: float, y: np.ndarray, k: int = k) -> np.ndarray:
            count[0] += 1
            deadline.check("integrating the expenditure function along the price path")
            e = float(y[0])
            share = 100.0 * (k + s) / total
            if not e > 0.0:
                raise InvalidInput(parameter, "the expenditure function falls to zero on the price "
                                   f"path ({share:.0f}% of the way from base prices): the demands "
                                   "spend more than the income allows")
            p = path.point(k, s)
            try:
                x = demand(p, e)
            except InvalidInput as exc:
                raise type(exc)(exc.parameter, f"{exc.rule} (on the price path, {share:.0f}% of "
                                "the way from base prices)", exc.index) from None
            low = np.flatnonzero(x * p < -1e-12 * e)
            if low.size:
                i = int(low[0])
                raise InvalidInput("prices", f"the model's demand for this item turns negative "
                                   f"({x[i]:.4g}) on the price path, {share:.0f}% of the way from "
                                   "base prices to these prices", i)
            return np.array([float(x @ path.velocity(k, s))])

        ends = sorted({*(tau - k for tau in stops if k <= tau <= k + 1), span[1]},
                      reverse=backward)
        try:
            sol = solve_ivp(rhs, span, [value], method="DOP853", rtol=tolerance, atol=atol,
                            t_eval=ends)
        except (OverflowError, FloatingPointError) as exc:  # pragma: no cover - defensive
            raise InvalidInput(parameter, f"the integration along the price path overflowed "
                               f"({exc})") from None
        if sol.status != 0 or sol.t.size != len(ends) or not np.all(np.isfinite(sol.y[0])):
            raise InvalidInput(parameter, "the integration of the expenditure function along the "
                               f"price path did not converge ({sol.message})")
        local = dict(zip(ends, (float(e) for e in sol.y[0]), strict=True))
        for tau in stops:
            if k <= tau <= k + 1:
                recorded[tau] = local[tau - k]
        value = float(sol.y[0, -1])
    return Integration(value=value, stops=recorded, evaluations=count[0])


def slutsky(x: Vector, dx_dp: Matrix, dx_dm: Vector) -> Matrix:
    """The Slutsky matrix ``S_ij = dx_i/dp_j + x_j dx_i/dm`` (Slutsky 1915; Mas-Colell, Whinston
    and Green 1995, 2.F.10)."""
    return dx_dp + np.outer(dx_dm, x)


def adding_up_gap(prices: Vector, demands: Vector, income: float) -> float:
    """``|p . x - m| / m``: how far the demands are from spending exactly the income (Walras'
    law; Mas-Colell, Whinston and Green 1995, 2.E)."""
    return abs(float(prices @ demands) - income) / income


def spread_tolerance(tolerance: float) -> float:
    """The relative spread between two paths above which the demands are called not integrable."""
    return SPREAD_FACTOR * tolerance


__all__ = [
    "DEFAULT_TOLERANCE",
    "Deadline",
    "Integration",
    "PricePath",
    "adding_up_gap",
    "integrate",
    "paced_path",
    "slutsky",
    "spread_tolerance",
    "straight_path",
]
