"""Preferences given by a utility formula ``u(x)``; demands and expenditure by numerical optimisation.

The caller writes the direct utility as a formula in the language of
:mod:`dualcost.core.expressions`, with the item ids standing for the quantities, for example
``0.35*log(rye_loaf - 4) + 0.4*log(peat_briquettes - 2) + 0.25*log(ferry_pass)``. Utility is
measured on the formula's own scale. The dual functions follow from their definitions
(Mas-Colell, Whinston and Green 1995, *Microeconomic Theory*, 3.D and 3.E):

- ``x(p, m) = argmax { u(x) : p . x <= m, x >= 0 }`` and ``v(p, m) = u(x(p, m))``;
- ``h(p, u) = argmin { p . x : u(x) >= u, x >= 0 }`` and ``e(p, u) = p . h(p, u)``.

Each problem is solved by sequential least squares programming (SLSQP; Kraft 1988, "A software
package for sequential quadratic programming", DFVLR-FB 88-28, as in :func:`scipy.optimize.minimize`)
from several starting bundles (the base bundle, equal spending, and seeded random ones), with the
gradient of ``u`` taken from the formula's tree; the best answer is then refined by Newton steps
on the first-order conditions ``grad u(x) = lambda p`` with the budget (or the utility level) as
the side condition, over the items bought in positive amounts. The two problems are solved
independently, so the comparison's duality residuals ``|h(p, u) - x(p, e(p, u))|`` and
``|e(p, v(p, m)) - m|`` measure how well they agree.

The Slutsky matrix comes from the bordered Hessian at the optimum: with
``N = [[H, p], [p', 0]]`` (``H`` the Hessian of ``u``, by central differences of the formula's
gradient), ``S = lambda [N^-1]_xx`` (Barten 1966; Phlips 1974, *Applied Consumption Analysis*,
ch. 2; both recalled from memory). It is symmetric by construction; it fails to be negative
semidefinite where ``u`` is not quasi-concave, and then the bundle found need not be the best.

Calibration sets nothing: the base budget is the reference point (and a starting bundle); how far
``x(p0, m0)`` is from the observed base bundle is the comparison's ``base_bundle_gap``.
"""

from __future__ import annotations

from collections.abc import Mapping
from typing import Any

import numpy as np
from scipy.optimize import brentq, minimize

from .. import _checks
from ..errors import InvalidInput
from ..expressions import Expression, evaluate_all, parse
from ..path_integration import Deadline
from .base import BaseBudget, Matrix, Notice, ParameterSpec, Preferences, Vector, slutsky_notices

#: Quantities below this share of the budget count as zero (a corner of the budget set).
_ZERO_SHARE = 1e-9
#: Relative step for the Hessian by central differences of the gradient.
_STEP = 1e-5
_CACHE_SIZE = 256


class UtilityFormula(Preferences):
    """A direct utility written as a formula; x, v, h and e by constrained optimisation."""

    family = "utility_formula"
    title = "Utility given as a formula; demands and expenditure function by numerical optimisation"
    source = (
        "Duality of utility maximisation and expenditure minimisation (Mas-Colell, Whinston and "
        "Green 1995, 3.D-3.E); SLSQP (Kraft 1988) from several starts"
    )
    homothetic = False
    parameter_specs = (
        ParameterSpec("utility_formula", "The direct utility u(x) as a formula, with item ids "
                      "standing for quantities.", required=True, shape="text"),
        ParameterSpec("starts", "Starting bundles for each optimisation (at least 2).", default=3),
        ParameterSpec("deadline_seconds", "Seconds allowed for the model's numerical work, counted "
                      "from calibration (the service sets it).", default=10.0, shape="service"),
        ParameterSpec("item_names", "The item ids the formula uses, in item order (the service "
                      "sets them from items).", shape="service"),
    )

    def __init__(self, utility: Expression, names: list[str], base: BaseBudget, *, starts: int,
                 deadline: Deadline) -> None:
        self.utility = utility
        self.names = names
        self.n_items = base.n_items
        self.base_prices = base.prices
        self.base_quantities = base.quantities
        self.starts = starts
        self.deadline = deadline
        self.gradient = [utility.derivative(name) if utility.uses(name) else None for name in names]
        self._used = [i for i, g in enumerate(self.gradient) if g is not None]
        self._gradient_formulas = [g for g in self.gradient if g is not None]
        self._cache: dict[tuple[Any, ...], Vector] = {}
        self._solves = 0
        self._largest_kkt_residual = 0.0
        self._several_optima: float | None = None
        self.calibration_notices = (
            Notice("utility_by_optimisation",
                   "The utility formula has no closed-form expenditure function: demands x(p,m) "
                   "and the least-cost bundles h(p,u) are found by constrained optimisation "
                   f"(SLSQP from {starts} starting bundles, refined on the first-order conditions); "
                   "utility is on the formula's own scale."),
        )

    @classmethod
    def calibrate(cls, base: BaseBudget, *, utility_formula: Any = None, starts: Any = 3,
                  deadline_seconds: Any = 10.0, item_names: Any = None,
                  **_: Any) -> UtilityFormula:
        """Parse the formula; ``base`` is the reference point and a starting bundle."""
        n = base.n_items
        if utility_formula is None:
            raise InvalidInput("utility_formula", "is required: write u(x) with the item ids as "
                               "quantities")
        if item_names is None:
            names = [f"x{i + 1}" for i in range(n)]
        else:
            names = list(item_names)
            if len(names) != n or not all(isinstance(s, str) and s for s in names) \
                    or len(set(names)) != n:
                raise InvalidInput("item_names", f"must be {n} different item ids, one per item")
        k = _checks.scalar("starts", starts, minimum=2.0, strict=False)
        if k != int(k) or k > 20:
            raise InvalidInput("starts", f"must be a whole number from 2 to 20, got {k:g}")
        deadline = Deadline(None if deadline_seconds is None else
                            _checks.scalar("deadline_seconds", deadline_seconds, minimum=0.0))
        expr = parse(utility_formula, names, parameter="utility_formula",
                     describe_names="the item ids (their quantities)")
        if not expr.names:
            raise InvalidInput("utility_formula", "does not depend on any item's quantity")
        model = cls(expr, names, base, starts=int(k), deadline=deadline)
        model.direct_utility(base.quantities.copy(), where=" at the base bundle")
        return model

    def restart_clock(self) -> None:
        """Start the deadline's count again (for a model kept and used later, from Python)."""
        self.deadline.restart()

    # -- the formula and its gradient ---------------------------------------------------------
    def _env(self, x: Vector) -> dict[str, float]:
        return {name: float(v) for name, v in zip(self.names, x, strict=True)}

    def direct_utility(self, quantities: Vector, *, where: str = "") -> float:
        return float(self.utility.evaluate(self._env(quantities), where=where))

    def _grad(self, x: Vector, where: str = "") -> Vector:
        g = np.zeros(self.n_items)
        g[self._used] = evaluate_all(self._gradient_formulas, self._env(x),
                                     where=where or " (its derivative)")
        return g

    def _hessian(self, x: Vector) -> Matrix:
        n = self.n_items
        h = np.zeros((n, n))
        for j in self._used:
            step = _STEP * max(abs(x[j]), 1e-8)
            up, down = x.copy(), x.copy()
            up[j] += step
            down[j] -= step
            h[:, j] = (self._grad(up) - self._grad(down)) / (up[j] - down[j])
        return 0.5 * (h + h.T)

    # -- the dual quartet ---------------------------------------------------------------------
    def _marshallian(self, prices: Vector, income: float) -> Vector:
        key = ("x", prices.tobytes(), float(income))
        if key not in self._cache:
            self._store(key, self._maximise(prices, income))
        return self._cache[key].copy()

    def _indirect_utility(self, prices: Vector, income: float) -> float:
        return self.direct_utility(self._marshallian(prices, income))

    def _hicksian(self, prices: Vector, utility: float) -> Vector:
        key = ("h", prices.tobytes(), float(utility))
        if key not in self._cache:
            self._store(key, self._minimise(prices, utility))
        return self._cache[key].copy()

    def _expenditure(self, prices: Vector, utility: float) -> float:
        return float(prices @ self._hicksian(prices, utility))

    def _store(self, key: tuple[Any, ...], value: Vector) -> None:
        if len(self._cache) >= _CACHE_SIZE:
            self._cache.pop(next(iter(self._cache)))
        self._cache[key] = value

    # -- utility maximisation -----------------------------------------------------------------
    def _starting_shares(self, prices: Vector) -> list[Vector]:
        """Budget shares to start from: the base bundle's, equal, then seeded random ones."""
        n = self.n_items
        value = prices * self.base_quantities
        out = []
        if value.sum() > 0 and np.all(value > 0):
            out.append(value / value.sum())
        out.append(np.full(n, 1.0 / n))
        rng = np.random.default_rng(20250101)
        while len(out) < self.starts:
            out.append(rng.dirichlet(np.ones(n)))
        return out[: self.starts]

    def _maximise(self, p: Vector, m: float) -> Vector:
        """argmax u(x) s.t. p.x = m, x >= 0, in budget shares z = p x / m."""
        self._solves += 1
        to_x = m / p

        last: list[Any] = [0.0, np.zeros(self.n_items)]

        def objective(z: Vector) -> tuple[float, Vector]:
            # Where the formula is undefined the objective is made much worse than the last
            # defined point, so that the line search steps back into the domain.
            self.deadline.check("maximising the utility formula")
            x = z * to_x
            try:
                value = -self.direct_utility(x) / scale
                grad = -self._grad(x) * to_x / scale
            except InvalidInput:
                return float(last[0]) + 1e6, last[1]
            last[0], last[1] = value, grad
            return value, grad

        results = []
        faults: list[InvalidInput] = []
        scale = 1.0
        for z0 in self._starting_shares(p):
            try:
                x0 = z0 * to_x
                scale = max(abs(float(self._grad(x0) @ x0)), 1e-300)
                last[0] = -self.direct_utility(x0) / scale
                res = minimize(objective, z0, jac=True, method="SLSQP",
                               bounds=[(0.0, 1.0)] * self.n_items,
                               constraints=[{"type": "eq", "fun": lambda z: z.sum() - 1.0,
                                             "jac": lambda z: np.ones_like(z)}],
                               options={"ftol": 1e-14, "maxiter": 500})
            except InvalidInput as exc:
                faults.append(exc)
                continue
            if res.success or res.status == 8:  # 8: positive directional derivative at the end
                z = np.clip(res.x, 0.0, None)
                z /= z.sum()
                try:
                    results.append((self.direct_utility(z * to_x), z * to_x))
                except InvalidInput as exc:
                    faults.append(exc)
        if not results:
            raise self._no_answer("the best affordable bundle", faults)
        results.sort(key=lambda r: -r[0])
        self._note_spread([r[0] for r in results])
        x = results[0][1]
        return self._refine(p, x, side="budget", level=m)

    def _minimise(self, p: Vector, level: float) -> Vector:
        """argmin p.x s.t. u(x) >= level, x >= 0, in spending y = p x / s for a scale s."""
        self._solves += 1
        starts = []
        faults: list[InvalidInput] = []
        for z0 in self._starting_shares(p):
            try:
                x0 = self._on_level(z0 / p, level)
            except InvalidInput as exc:
                faults.append(exc)
                continue
            if x0 is not None:
                starts.append(x0)
        if not starts:
            raise self._no_answer("a bundle reaching this living standard", faults)
        s = float(p @ starts[0])
        to_x = s / p

        def objective(y: Vector) -> tuple[float, Vector]:
            self.deadline.check("minimising the cost of the living standard")
            return float(y.sum()), np.ones_like(y)

        last_jac: list[Vector] = [np.zeros(self.n_items)]

        def constraint(y: Vector) -> float:
            # Undefined points are treated as far below the level (infeasible).
            try:
                return (self.direct_utility(y * to_x) - level) / uscale
            except InvalidInput:
                return -1e6

        def constraint_jac(y: Vector) -> Vector:
            try:
                last_jac[0] = self._grad(y * to_x) * to_x / uscale
            except InvalidInput:
                pass
            return last_jac[0]

        results = []
        for x0 in starts:
            y0 = p * x0 / s
            try:
                uscale = max(abs(float(self._grad(x0) @ x0)), 1e-300)
            except InvalidInput as exc:
                faults.append(exc)
                continue
            res = minimize(objective, y0, jac=True, method="SLSQP",
                           bounds=[(0.0, None)] * self.n_items,
                           constraints=[{"type": "ineq", "fun": constraint,
                                         "jac": constraint_jac}],
                           options={"ftol": 1e-14, "maxiter": 500})
            if not (res.success or res.status == 8):
                continue
            x = np.clip(res.x, 0.0, None) * to_x
            try:
                if self.direct_utility(x) < level - 1e-8 * uscale:
                    continue
            except InvalidInput as exc:
                faults.append(exc)
                continue
            results.append((float(p @ x), x))
        if not results:
            raise self._no_answer("a least-cost bundle reaching this living standard", faults)
        results.sort(key=lambda r: r[0])
        self._note_spread([r[0] for r in results])
        return self._refine(p, results[0][1], side="utility", level=level)

    def _on_level(self, direction: Vector, level: float) -> Vector | None:
        """``t d`` with ``u(t d) = level``: bracket ``ln t`` in unit steps, move the lower end
        into the formula's domain by bisection, then Brent's method (Brent 1973). None when the
        ray never reaches the level. Points where the formula is undefined count as below it."""

        def gap(log_t: float) -> float:
            self.deadline.check("finding a bundle on the indifference surface")
            try:
                return self.direct_utility(np.exp(log_t) * direction) - level
            except InvalidInput:
                return -np.inf

        lo = hi = 0.0
        if gap(0.0) >= 0.0:
            while gap(lo) >= 0.0:
                lo -= 1.0
                if lo < -200.0:
                    return None
            hi = lo + 1.0
        else:
            while gap(hi) < 0.0:
                hi += 1.0
                if hi > 200.0:
                    return None
            lo = hi - 1.0
        for _ in range(80):
            if gap(lo) > -np.inf:
                break
            mid = 0.5 * (lo + hi)
            if gap(mid) >= 0.0:
                hi = mid
            else:
                lo = mid
        else:
            return None
        t = brentq(gap, lo, hi, xtol=1e-15, rtol=4 * np.finfo(float).eps, maxiter=200)
        # Just above the level, so that the constraint holds at the start.
        return np.exp(t) * direction * (1.0 + 1e-12)

    # -- refinement on the first-order conditions ---------------------------------------------
    def _refine(self, p: Vector, x: Vector, *, side: str, level: float) -> Vector:
        """Newton steps on ``g_F(x) = lambda p_F`` and the side condition (``p.x = m`` or
        ``u(x) = level``) over the items bought, ``F``; kept only when they reduce the residual."""
        spend = float(p @ x)
        free = np.flatnonzero(p * x > _ZERO_SHARE * spend)
        if free.size == 0:
            return x

        def residual(x: Vector, lam: float) -> Vector:
            g = self._grad(x)
            side_gap = (float(p @ x) - level) / level if side == "budget" else \
                (self.direct_utility(x) - level) / gscale
            return np.concatenate([(g[free] - lam * p[free]) / (lam * np.abs(p[free])), [side_gap]])

        try:
            g = self._grad(x)
            gscale = max(abs(float(g[free] @ x[free])), 1e-300)
            lam = float(g[free] @ x[free]) / float(p[free] @ x[free])
            if not lam > 0.0:
                return x
            r = residual(x, lam)
            for _ in range(8):
                self.deadline.check("refining an optimum")
                size = float(np.max(np.abs(r)))
                if size < 1e-14:
                    break
                h = self._hessian(x)[np.ix_(free, free)]
                c = p[free] if side == "budget" else self._grad(x)[free]
                k = free.size
                jac = np.zeros((k + 1, k + 1))
                jac[:k, :k] = h
                jac[:k, k] = -p[free]
                jac[k, :k] = c
                rhs = -np.concatenate([g[free] - lam * p[free],
                                       [float(p @ x) - level if side == "budget" else
                                        self.direct_utility(x) - level]])
                try:
                    step = np.linalg.solve(jac, rhs)
                except np.linalg.LinAlgError:
                    break
                if not np.all(np.isfinite(step)):
                    break
                t = 1.0
                for _ in range(30):
                    x_new = x.copy()
                    x_new[free] = x[free] + t * step[:k]
                    lam_new = lam + t * step[k]
                    if np.all(x_new[free] > 0.0) and lam_new > 0.0:
                        try:
                            r_new = residual(x_new, lam_new)
                        except InvalidInput:
                            r_new = None
                        if r_new is not None and np.max(np.abs(r_new)) < size:
                            break
                    t *= 0.5
                else:
                    break
                x, lam, r = x_new, lam_new, r_new
                g = self._grad(x)
            self._largest_kkt_residual = max(self._largest_kkt_residual,
                                             float(np.max(np.abs(r))))
        except InvalidInput:
            pass  # the refinement left the formula's domain: keep the optimiser's answer
        return x

    def _note_spread(self, values: list[float]) -> None:
        if len(values) < 2:
            return
        best = values[0]
        spread = max(abs(v - best) for v in values) / max(abs(best), 1e-300)
        if spread > 1e-6:
            self._several_optima = max(spread, self._several_optima or 0.0)

    def _no_answer(self, what: str, faults: list[InvalidInput]) -> InvalidInput:
        why = f"; {faults[0].rule}" if faults else ""
        return InvalidInput("utility_formula", f"{what} could not be found at these prices from "
                            f"{self.starts} starting bundles{why}")

    # -- diagnostics --------------------------------------------------------------------------
    def slutsky_matrix(self, prices: Vector, income: float) -> Matrix:
        """``S = lambda [N^-1]_xx`` with the bordered Hessian ``N`` at ``x(p, m)`` over the items
        bought (zero rows and columns for the others)."""
        x = self.marshallian(prices, income)
        free = np.flatnonzero(prices * x > _ZERO_SHARE * income)
        n = self.n_items
        out = np.zeros((n, n))
        if free.size == 0:
            return out
        g = self._grad(x)
        lam = float(g[free] @ x[free]) / float(prices[free] @ x[free])
        k = free.size
        bordered = np.zeros((k + 1, k + 1))
        bordered[:k, :k] = self._hessian(x)[np.ix_(free, free)]
        bordered[:k, k] = prices[free]
        bordered[k, :k] = prices[free]
        try:
            inverse = np.linalg.inv(bordered)
        except np.linalg.LinAlgError:
            raise InvalidInput("utility_formula", "has a singular bordered Hessian at the chosen "
                               "bundle: its Slutsky matrix is not defined there") from None
        out[np.ix_(free, free)] = lam * inverse[:k, :k]
        return out

    def regularity(self, prices: Vector, income: float) -> list[Notice]:
        notices: list[Notice] = []
        matrix = self.slutsky_matrix(prices, income)
        if float(np.max(np.abs(prices[:, None] * matrix * prices[None, :]))) > 1e-12 * income:
            notices.extend(slutsky_notices(matrix, prices))
        if self._several_optima is not None:
            notices.append(Notice("several_optima", "Different starting bundles led to different "
                                  f"optima (relative spread up to {self._several_optima:.3g}); the "
                                  "best was used, but the utility formula may not be "
                                  "quasi-concave."))
            self._several_optima = None
        return notices

    def parameters(self) -> Mapping[str, Any]:
        return {
            "utility_formula": self.utility.text,
            "starts": self.starts,
            "optimisations": self._solves,
            "largest_first_order_residual": self._largest_kkt_residual,
            "deadline_seconds": self.deadline.seconds,
        }


__all__ = ["UtilityFormula"]
