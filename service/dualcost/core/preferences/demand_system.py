"""A demand system given only by its Marshallian demands; the expenditure function by integration.

The caller gives the demands ``x(p, m)`` in one of these forms (``b``: price coefficients,
``c``: income coefficients, ``eps``: price elasticities, ``eta``: income elasticities):

- ``linear``      ``x_i = a_i + sum_j b_ij p_j + c_i m``;
- ``log_linear``  ``ln x_i = a_i + sum_j eps_ij ln p_j + eta_i ln m`` (constant elasticities);
- ``semi_log``    ``ln x_i = a_i + sum_j b_ij p_j + c_i m``;
- ``formula``     one formula per item in the language of :mod:`dualcost.core.expressions`, with
                  the item ids standing for their prices and ``income`` for income;
- ``function``    (from Python only) a callable ``x(p, m)``.

The single-good linear, log-linear and semi-log demand curves are those of Hausman (1981),
"Exact consumer's surplus and deadweight loss", American Economic Review 71(4), who gives their
expenditure functions in closed form. With a ``numeraire`` item (Hausman's "all other goods"),
prices and income in the equations are measured in units of the numeraire's price,
``x_i = f_i(p / p_r, m / p_r)``, and the numeraire's own demand is what the budget leaves,
``x_r = (m - sum_{i != r} p_i x_i) / p_r``: the system then adds up and is homogeneous of degree
zero by construction, and it is integrable when the Slutsky matrix of the other items is
symmetric and negative semidefinite (Hurwicz and Uzawa 1971). A linear system of several goods
meets that only with zero income coefficients and a symmetric price matrix, or in a few special
cases (LaFrance 1985, "Linear demand functions in theory and practice", Journal of Economic
Theory 37; recalled from memory).

Utility is measured as money at base prices (equivalent income): ``u = e(p0, u)``, so
``v(p0, m) = m``. ``e(p, u)`` integrates ``de/dt = x(p(t), e) . p'(t)`` from ``(p0, u)`` to ``p``;
``v(p, m)`` integrates backwards from ``(p, m)`` to ``p0``; ``h(p, u) = x(p, e(p, u))``
(Hausman 1981; Vartia 1983, Econometrica 51(1)); see :mod:`dualcost.core.path_integration`. The
path is straight, or runs through the price vectors the caller gives in ``path``.

Calibration sets nothing: the base budget is the reference point ``p0`` (and ``m0``). How far
the demands at ``(p0, m0)`` are from the observed base bundle is the comparison's
``base_bundle_gap``.
"""

from __future__ import annotations

from collections.abc import Callable, Mapping, Sequence
from typing import Any

import numpy as np

from .. import _checks
from ..errors import InvalidInput
from ..expressions import Expression, evaluate_all, parse
from ..path_integration import (
    DEFAULT_TOLERANCE,
    Deadline,
    Integration,
    PricePath,
    adding_up_gap,
    integrate,
    paced_path,
    slutsky,
    spread_tolerance,
    straight_path,
)
from .base import BaseBudget, Matrix, Notice, ParameterSpec, Preferences, Vector, slutsky_notices

FORMS = ("linear", "log_linear", "semi_log", "formula", "function")
_FORM_PARAMETERS = {
    "linear": ("intercepts", "price_coefficients", "income_coefficients"),
    "semi_log": ("intercepts", "price_coefficients", "income_coefficients"),
    "log_linear": ("intercepts", "price_elasticities", "income_elasticities"),
    "formula": ("demand_formulas",),
    "function": ("demand_function",),
}
INCOME = "income"
#: Relative step in ln p and ln m for the derivatives of a demand function given from Python.
_STEP = 1e-6
#: Where along the path (fractions of the way) the Slutsky matrix is checked.
_CHECKPOINTS = (0.25, 0.5, 0.75, 1.0)
_CACHE_SIZE = 512


# -- the demand functions, in the numeraire's units when there is one ------------------------


class _Coefficients:
    """Linear, log-linear or semi-log demands with vectorised derivatives."""

    def __init__(self, form: str, a: Vector, b: Matrix, c: Vector) -> None:
        self.form, self.a, self.b, self.c = form, a, b, c

    def values(self, q: Vector, y: float) -> Vector:
        if self.form == "linear":
            return self.a + self.b @ q + self.c * y
        if self.form == "semi_log":
            return self._exp(self.a + self.b @ q + self.c * y)
        return self._exp(self.a + self.b @ np.log(q) + self.c * np.log(y))

    def derivatives(self, q: Vector, y: float) -> tuple[Vector, Matrix, Vector]:
        f = self.values(q, y)
        if self.form == "linear":
            return f, self.b.copy(), self.c.copy()
        if self.form == "semi_log":
            return f, f[:, None] * self.b, f * self.c
        return f, f[:, None] * self.b / q[None, :], f * self.c / y

    def _exp(self, z: Vector) -> Vector:
        big = np.flatnonzero(z > 700.0)
        if big.size:
            raise InvalidInput("prices", f"the {self.form.replace('_', '-')} demand for this item "
                               f"is too large for floating point (its logarithm is {z[big[0]]:.4g}) "
                               "at these prices and income", int(big[0]))
        return np.exp(z)


class _Formulas:
    """One parsed formula per item (None for the numeraire), derivatives taken from the trees."""

    def __init__(self, formulas: list[Expression | None], names: list[str]) -> None:
        self.formulas = formulas
        self.names = names
        self._given = [i for i, f in enumerate(formulas) if f is not None]
        self._parsed = [f for f in formulas if f is not None]
        self._derivatives: list[tuple[int, int, Expression]] | None = None

    def _env(self, q: Vector, y: float) -> dict[str, float]:
        env = {name: float(v) for name, v in zip(self.names, q, strict=True)}
        env[INCOME] = float(y)
        return env

    def values(self, q: Vector, y: float) -> Vector:
        out = np.zeros(q.size)
        out[self._given] = evaluate_all(self._parsed, self._env(q, y),
                                        where=", at the prices and income evaluated")
        return out

    def derivatives(self, q: Vector, y: float) -> tuple[Vector, Matrix, Vector]:
        n = q.size
        if self._derivatives is None:
            # (row, column, formula); column n stands for income.
            position = {name: j for j, name in enumerate(self.names)}
            position[INCOME] = n
            self._derivatives = [(i, position[name], f.derivative(name))
                                 for i, f in enumerate(self.formulas) if f is not None
                                 for name in sorted(f.names)]
        full = np.zeros((n, n + 1))
        if self._derivatives:
            rows, cols, formulas = zip(*self._derivatives, strict=True)
            full[list(rows), list(cols)] = evaluate_all(
                formulas, self._env(q, y), where=", in its derivative at the prices and income "
                "evaluated")
        return self.values(q, y), full[:, :n], full[:, n]


class _Function:
    """A demand function from Python; derivatives by central differences in ln p and ln m."""

    def __init__(self, fn: Callable[[Vector, float], Any], n: int) -> None:
        self.fn = fn
        self.n = n

    def values(self, q: Vector, y: float) -> Vector:
        out = np.asarray(self.fn(q.copy(), float(y)), dtype=np.float64)
        if out.shape != (self.n,) or not np.all(np.isfinite(out)):
            raise InvalidInput("demand_function", f"must return {self.n} finite quantities, one per "
                               f"item; it returned shape {out.shape}")
        return out

    def derivatives(self, q: Vector, y: float) -> tuple[Vector, Matrix, Vector]:
        f = self.values(q, y)
        fq = np.empty((self.n, self.n))
        up, down = np.exp(_STEP), np.exp(-_STEP)
        for j in range(self.n):
            hi, lo = q.copy(), q.copy()
            hi[j] *= up
            lo[j] *= down
            fq[:, j] = (self.values(hi, y) - self.values(lo, y)) / (hi[j] - lo[j])
        fy = (self.values(q, y * up) - self.values(q, y * down)) / (y * (up - down))
        return f, fq, fy


class _System:
    """The demands for every item; with a numeraire ``r``, the others in its units and ``x_r``
    the rest of the budget."""

    def __init__(self, inner: _Coefficients | _Formulas | _Function, n: int,
                 numeraire: int | None) -> None:
        self.inner = inner
        self.n = n
        self.r = numeraire
        if numeraire is not None:
            self.others = np.array([i for i in range(n) if i != numeraire], dtype=int)

    def demand(self, p: Vector, m: float) -> Vector:
        if self.r is None:
            return self.inner.values(p, m)
        s = p[self.r]
        x = self.inner.values(p / s, m / s)
        o = self.others
        x[self.r] = (m - float(p[o] @ x[o])) / s
        return x

    def derivatives(self, p: Vector, m: float) -> tuple[Vector, Matrix, Vector]:
        """``x``, ``dx/dp`` and ``dx/dm`` at ``(p, m)``, by the chain rule through the numeraire."""
        if self.r is None:
            return self.inner.derivatives(p, m)
        r, o = self.r, self.others
        s = p[r]
        q, y = p / s, m / s
        f, fq, fy = self.inner.derivatives(q, y)
        x = f.copy()
        x[r] = (m - float(p[o] @ f[o])) / s
        jp = np.zeros((self.n, self.n))
        jm = np.zeros(self.n)
        jp[np.ix_(o, o)] = fq[np.ix_(o, o)] / s
        jp[o, r] = -(fq[np.ix_(o, o)] @ q[o] + fy[o] * y) / s
        jm[o] = fy[o] / s
        # x_r = (m - sum_o p_i x_i) / p_r
        jp[r, o] = -(x[o] + p[o] @ jp[np.ix_(o, o)]) / s
        jp[r, r] = -(x[r] + p[o] @ jp[o, r]) / s
        jm[r] = (1.0 - float(p[o] @ jm[o])) / s
        return x, jp, jm


# -- the family -------------------------------------------------------------------------------


class DemandSystem(Preferences):
    """Marshallian demands of a given form; e, v and h by integration along a price path."""

    family = "demand_system"
    title = ("Demand system given by its demand functions (linear, log-linear, semi-log or "
             "formulas); expenditure function by integration along a price path")
    source = (
        "Hausman (1981), American Economic Review 71(4); Vartia (1983), Econometrica 51(1); "
        "integrability: Hurwicz and Uzawa (1971)"
    )
    homothetic = False
    parameter_specs = (
        ParameterSpec("form", "How the demands are given: linear, log_linear, semi_log or formula "
                      "(function from Python).", required=True, shape="text"),
        ParameterSpec("intercepts", "linear, semi_log, log_linear: the constants a_i, one per "
                      "item.", shape="vector"),
        ParameterSpec("price_coefficients", "linear, semi_log: the matrix b_ij of the prices (row i: "
                      "item i's demand).", shape="matrix"),
        ParameterSpec("income_coefficients", "linear, semi_log: the income coefficients c_i.",
                      default=0.0, shape="vector"),
        ParameterSpec("price_elasticities", "log_linear: the matrix of price elasticities "
                      "eps_ij.", shape="matrix"),
        ParameterSpec("income_elasticities", "log_linear: the income elasticities eta_i.",
                      default=0.0, shape="vector"),
        ParameterSpec("demand_formulas", "formula: one formula per item, keyed by item id, using "
                      "item ids as prices and income.", shape="formulas"),
        ParameterSpec("numeraire", "An item whose demand is the rest of the budget and whose price "
                      "is the unit of the other prices and income in the equations (its own "
                      "coefficients must be 0, it has no formula).", shape="item"),
        ParameterSpec("path", "Price vectors the price path passes through on its way from base "
                      "prices (default: a straight path).", shape="path"),
        ParameterSpec("tolerance", "Relative tolerance of the integration.",
                      default=DEFAULT_TOLERANCE),
        ParameterSpec("deadline_seconds", "Seconds allowed for the model's numerical work, counted "
                      "from calibration (the service sets it).", default=10.0, shape="service"),
        ParameterSpec("item_names", "The item ids that formulas use, in item order (the service "
                      "sets them from items).", shape="service"),
        ParameterSpec("demand_function", "function: a Python callable x(p, m) (from Python "
                      "only).", shape="python"),
    )

    def __init__(self, system: _System, base: BaseBudget, *, form: str, waypoints: Sequence[Vector],
                 tolerance: float, deadline: Deadline, numeraire_name: str | None) -> None:
        self.system = system
        self.form = form
        self.base_prices = base.prices
        self.base_income = base.expenditure
        self.n_items = base.n_items
        self.waypoints = tuple(waypoints)
        self.tolerance = tolerance
        self.deadline = deadline
        self.numeraire_name = numeraire_name
        self._cache: dict[tuple[Any, ...], float] = {}
        self._solves = 0
        self._error_estimate: float | None = None
        self._path_spread: float | None = None
        path_text = ("a straight price path" if not waypoints else
                     f"a price path through {len(waypoints)} given price vector(s)")
        self.calibration_notices = (
            Notice("expenditure_by_integration",
                   f"The {form.replace('_', '-')} demand system has no closed-form expenditure "
                   f"function: e(p,u) is found by integrating the demands along {path_text} from "
                   f"base prices (Hausman 1981; Vartia 1983), relative tolerance "
                   f"{tolerance:.0e}; utility is measured as money at base prices."),
        )

    # -- calibration ------------------------------------------------------------------------
    @classmethod
    def calibrate(
        cls,
        base: BaseBudget,
        *,
        form: str | None = None,
        intercepts: Any = None,
        price_coefficients: Any = None,
        income_coefficients: Any = None,
        price_elasticities: Any = None,
        income_elasticities: Any = None,
        demand_formulas: Any = None,
        demand_function: Any = None,
        numeraire: Any = None,
        path: Any = None,
        tolerance: Any = DEFAULT_TOLERANCE,
        deadline_seconds: Any = 10.0,
        item_names: Any = None,
        **_: Any,
    ) -> DemandSystem:
        """Check the demand system's parameters; ``base`` is the reference point (p0, m0)."""
        n = base.n_items
        given = {
            "intercepts": intercepts, "price_coefficients": price_coefficients,
            "income_coefficients": income_coefficients, "price_elasticities": price_elasticities,
            "income_elasticities": income_elasticities, "demand_formulas": demand_formulas,
            "demand_function": demand_function,
        }
        if form is None:
            raise InvalidInput("form", "is required: give linear, log_linear, semi_log or formula")
        if form not in FORMS:
            raise InvalidInput("form", f"must be one of linear, log_linear, semi_log, formula or "
                               f"function, got {form!r}")
        for name, value in given.items():
            if value is not None and name not in _FORM_PARAMETERS[form]:
                takes = ", ".join(_FORM_PARAMETERS[form])
                raise InvalidInput(name, f"is not used by the {form} form (it takes {takes})")
        names = _item_names(item_names, n)
        r = _numeraire(numeraire, names, n)
        if r is not None and form == "function":
            raise InvalidInput("numeraire", "is not used with a demand function from Python: write "
                               "the numeraire's demand into the function")
        rtol = _checks.scalar("tolerance", tolerance)
        if not 1e-13 <= rtol <= 1e-4:
            raise InvalidInput("tolerance", f"must be between 1e-13 and 1e-4, got {rtol:g}")
        deadline = Deadline(None if deadline_seconds is None else
                            _checks.scalar("deadline_seconds", deadline_seconds, minimum=0.0))
        waypoints = _waypoints(path, n)

        inner: _Coefficients | _Formulas | _Function
        if form in ("linear", "semi_log", "log_linear"):
            inner = _coefficients(form, n, r, given)
        elif form == "formula":
            inner = _formulas(demand_formulas, names, n, r)
        else:
            if not callable(demand_function):
                raise InvalidInput("demand_function", "is required for the function form: a "
                                   "callable x(p, m) returning one quantity per item")
            inner = _Function(demand_function, n)
        model = cls(_System(inner, n, r), base, form=form, waypoints=waypoints, tolerance=rtol,
                    deadline=deadline, numeraire_name=None if r is None else
                    (names[r] if names else f"item {r}"))
        return model

    def restart_clock(self) -> None:
        """Start the deadline's count again (for a model kept and used later, from Python)."""
        self.deadline.restart()

    # -- the dual quartet -----------------------------------------------------------------
    def _marshallian(self, prices: Vector, income: float) -> Vector:
        x = self.system.demand(prices, income)
        low = np.flatnonzero(x * prices < -1e-12 * income)
        if low.size:
            i = int(low[0])
            raise InvalidInput("prices", f"the model's demand for this item is negative "
                               f"({x[i]:.4g}) at these prices and income", i)
        return x

    def _expenditure(self, prices: Vector, utility: float) -> float:
        _positive_standard(utility)
        if np.array_equal(prices, self.base_prices):
            return float(utility)
        return self._solve(prices, utility, backward=False)

    def _indirect_utility(self, prices: Vector, income: float) -> float:
        if np.array_equal(prices, self.base_prices):
            return float(income)
        return self._solve(prices, income, backward=True)

    def _hicksian(self, prices: Vector, utility: float) -> Vector:
        return self._marshallian(prices, self._expenditure(prices, utility))

    def slutsky_matrix(self, prices: Vector, income: float) -> Matrix:
        """``dx/dp + (dx/dm) x'`` from the demands' own derivatives (symbolic for formulas,
        exact for the coefficient forms, central differences for a Python function)."""
        x, jp, jm = self.system.derivatives(prices, income)
        return slutsky(x, jp, jm)

    # -- integration --------------------------------------------------------------------------
    def _path(self, prices: Vector, *, paced: bool = False) -> PricePath:
        build = paced_path if paced else straight_path
        return build(self.base_prices, prices, self.waypoints)

    def _solve(self, prices: Vector, value: float, *, backward: bool, paced: bool = False,
               tolerance: float | None = None) -> float:
        """One integration (cached): ``e`` at ``prices`` from ``(p0, value)``, or backwards."""
        rtol = self.tolerance if tolerance is None else tolerance
        key = (backward, paced, rtol, prices.tobytes(), float(value))
        if key not in self._cache:
            if len(self._cache) >= _CACHE_SIZE:
                self._cache.pop(next(iter(self._cache)))
            self._cache[key] = self._integrate(prices, value, backward=backward, paced=paced,
                                               tolerance=rtol).value
        return self._cache[key]

    def _integrate(self, prices: Vector, value: float, *, backward: bool, paced: bool = False,
                   tolerance: float | None = None, stops: Sequence[float] = ()) -> Integration:
        self._solves += 1
        return integrate(self.system.demand, self._path(prices, paced=paced), value,
                         backward=backward, tolerance=tolerance or self.tolerance,
                         deadline=self.deadline, parameter=self._parameter, stops=stops)

    @property
    def _parameter(self) -> str:
        return {"formula": "demand_formulas", "function": "demand_function"}.get(self.form, "model")

    # -- diagnostics ------------------------------------------------------------------------
    def regularity(self, prices: Vector, income: float) -> list[Notice]:
        """Adding-up at ``(p, m)``; Slutsky symmetry and negative semidefiniteness along the path
        from base prices at the living standard of ``(p, m)``; away from base prices also the
        spread between two paths and the integration error estimate."""
        notices: list[Notice] = []
        x = self.system.demand(prices, income)
        gap = adding_up_gap(prices, x, income)
        if gap > 1e-6:
            notices.append(Notice("adding_up_failed", f"The demands do not spend exactly the income: "
                                  f"p.x = {float(prices @ x):.6g} against income {income:.6g} "
                                  f"(relative gap {gap:.3g}); the integrated expenditure function "
                                  "then does not equal p.h, and item contributions need not add up "
                                  "(give a numeraire item to close the budget)."))
        at_base = np.array_equal(prices, self.base_prices)
        if at_base:
            points: list[tuple[float | None, Vector, float]] = [(None, prices, income)]
        else:
            total = len(self.waypoints) + 1
            taus = [c * total for c in _CHECKPOINTS]
            path = self._path(prices)
            along = self._integrate(prices, income, backward=True, stops=taus)
            u = along.value
            incomes = along.stops
            points = [(c, path.at(tau), incomes[tau]) for c, tau in zip(_CHECKPOINTS, taus, strict=True)]
        seen: set[str] = set()
        # A Slutsky matrix that is zero within the accuracy of its derivatives (fixed proportions)
        # is symmetric and negative semidefinite; the scale-free test would only see noise.
        floor = 1e-7 if self.form == "function" else 1e-12
        for share, p, m in points:
            matrix = self.slutsky_matrix(p, m)
            if float(np.max(np.abs(p[:, None] * matrix * p[None, :]))) <= floor * m:
                continue
            for n in slutsky_notices(matrix, p):
                if n.code in seen:
                    continue
                seen.add(n.code)
                where = "" if share is None else (
                    f" (found on the price path from base prices, {100 * share:.0f}% of the way)")
                notices.append(Notice(n.code, n.message + where))
        if not at_base:
            notices.extend(self._path_checks(prices, income, u))
        return notices

    def _path_checks(self, prices: Vector, income: float, u: float) -> list[Notice]:
        coarse = self.tolerance * 100.0
        u_coarse = self._solve(prices, income, backward=True, tolerance=coarse)
        e_fine = self.expenditure(prices, self.base_income)
        e_coarse = self._solve(prices, self.base_income, backward=False, tolerance=coarse)
        error = max(abs(u - u_coarse) / abs(u), abs(e_fine - e_coarse) / abs(e_fine))
        u_paced = self._solve(prices, income, backward=True, paced=True)
        spread = abs(u - u_paced) / abs(u)
        self._error_estimate = max(error, self._error_estimate or 0.0)
        self._path_spread = max(spread, self._path_spread or 0.0)
        limit = spread_tolerance(self.tolerance)
        if spread > limit:
            return [Notice("not_integrable",
                           f"The demands are not integrable: two different price paths from base "
                           f"prices give living standards that differ by {spread:.3g} (relative; "
                           f"tolerance {limit:.0e}), so the Konüs index, CV and EV depend on the "
                           "path taken and are not those of any utility function (Hurwicz and "
                           "Uzawa 1971).")]
        return [Notice("path_integration",
                       f"Two different price paths from base prices agree to {spread:.2g} "
                       f"(relative; tolerance {limit:.0e}); the integration's error estimate is "
                       f"{error:.2g} (relative)."),]

    def parameters(self) -> Mapping[str, Any]:
        return {
            "form": self.form,
            "numeraire": self.numeraire_name,
            "path_points": len(self.waypoints),
            "tolerance": self.tolerance,
            "integrations": self._solves,
            "error_estimate": self._error_estimate,
            "path_spread": self._path_spread,
            "path_spread_tolerance": spread_tolerance(self.tolerance),
            "deadline_seconds": self.deadline.seconds,
        }


# -- parameter checks -------------------------------------------------------------------------


def _positive_standard(utility: float) -> None:
    if not utility > 0.0:
        raise InvalidInput("utility", "a living standard, measured as money at base prices, must be "
                           f"greater than zero, got {utility:g}")


def _item_names(item_names: Any, n: int) -> list[str] | None:
    if item_names is None:
        return None
    names = list(item_names)
    if len(names) != n or not all(isinstance(s, str) and s for s in names):
        raise InvalidInput("item_names", f"must be {n} item ids (non-empty text), one per item")
    seen: dict[str, int] = {}
    for i, name in enumerate(names):
        if name in seen:
            raise InvalidInput("item_names", f"item id {name!r} is given twice", i)
        seen[name] = i
    return names


def _numeraire(numeraire: Any, names: list[str] | None, n: int) -> int | None:
    if numeraire is None:
        return None
    if isinstance(numeraire, str):
        if names is None or numeraire not in names:
            raise InvalidInput("numeraire", f"{numeraire!r} is not one of the items")
        return names.index(numeraire)
    if isinstance(numeraire, (int, np.integer)) and not isinstance(numeraire, bool) \
            and 0 <= int(numeraire) < n:
        return int(numeraire)
    raise InvalidInput("numeraire", f"must be an item (an id, or a position below {n})")


def _waypoints(path: Any, n: int) -> list[Vector]:
    if path is None:
        return []
    if isinstance(path, np.ndarray) and path.ndim == 2:
        path = list(path)
    if not isinstance(path, (list, tuple)):
        raise InvalidInput("path", "must be a list of price vectors, one positive price per item")
    if len(path) > 100:
        raise InvalidInput("path", f"has {len(path)} price vectors; the limit is 100")
    return [_checks.positive(f"path[{k}]", point, size=n) for k, point in enumerate(path)]


def _coefficients(form: str, n: int, r: int | None, given: Mapping[str, Any]) -> _Coefficients:
    a_name, b_name, c_name = _FORM_PARAMETERS[form]
    if given[a_name] is None:
        raise InvalidInput(a_name, f"is required for the {form} form: one constant per item")
    if given[b_name] is None:
        raise InvalidInput(b_name, f"is required for the {form} form: an {n} by {n} matrix")
    a = _checks.vector(a_name, given[a_name], size=n)
    b = _checks.square_matrix(b_name, given[b_name], n)
    c = np.zeros(n) if given[c_name] is None else _checks.vector(c_name, given[c_name], size=n)
    if r is not None:
        for name, values in ((a_name, a), (c_name, c)):
            if values[r] != 0.0:
                raise InvalidInput(name, "must be 0 for the numeraire item, whose demand is the rest "
                                   "of the budget", r)
        bad = [(r, j) for j in range(n) if b[r, j] != 0.0] + [(i, r) for i in range(n) if b[i, r] != 0.0]
        if bad:
            raise InvalidInput(b_name, "the numeraire's row and column must be 0: its demand is the "
                               "rest of the budget and its price is the unit of the others", bad[0])
    return _Coefficients(form, a, b, c)


def _formulas(demand_formulas: Any, names: list[str] | None, n: int, r: int | None) -> _Formulas:
    if names is None:
        raise InvalidInput("item_names", "the formula form needs the item ids that the formulas use, "
                           "in item order")
    if demand_formulas is None:
        raise InvalidInput("demand_formulas", "is required for the formula form: one formula per item")
    if isinstance(demand_formulas, Mapping):
        unknown = [k for k in demand_formulas if k not in names]
        if unknown:
            raise InvalidInput("demand_formulas", f"{unknown[0]!r} is not one of the items")
        texts = [demand_formulas.get(name) for name in names]
    else:
        texts = list(demand_formulas)
        if len(texts) != n:
            raise InvalidInput("demand_formulas", f"must hold {n} formulas, one per item, got "
                               f"{len(texts)}")
    if INCOME in names:
        raise InvalidInput("item_names", f"an item may not be called {INCOME!r} when demands are "
                           "formulas: that name is the income", names.index(INCOME))
    allowed = [name for i, name in enumerate(names) if i != r] + [INCOME]
    if r is None:
        describe = "the item ids (their prices) and income"
    else:
        describe = (f"the item ids other than the numeraire {names[r]!r} (their prices in units "
                    "of the numeraire's price) and income (in the same units)")
    parsed: list[Expression | None] = []
    for i, text in enumerate(texts):
        if i == r:
            if text is not None:
                raise InvalidInput("demand_formulas", "the numeraire has no formula: its demand is "
                                   "the rest of the budget", i)
            parsed.append(None)
            continue
        if text is None:
            raise InvalidInput("demand_formulas", "has no formula for this item", i)
        parsed.append(parse(text, allowed, parameter="demand_formulas", index=i,
                            describe_names=describe))
    return _Formulas(parsed, names)
