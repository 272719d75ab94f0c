"""The Almost Ideal Demand System (AIDS) and its quadratic extension (QUAIDS).

Both are written through a log cost function built from three price aggregates,

    ln a(p)   = alpha0 + sum_k alpha_k ln p_k + 1/2 sum_k sum_j gamma_kj ln p_k ln p_j,
    b(p)      = beta0 prod_k p_k^(beta_k),
    lambda(p) = sum_k lambda_k ln p_k,

with

    AIDS    ln e(p, u) = ln a(p) + u b(p)                      (Deaton and Muellbauer 1980),
    QUAIDS  ln e(p, u) = ln a(p) + u b(p) / (1 - lambda(p) u)  (Banks, Blundell and Lewbel 1997).

AIDS is the case ``lambda = 0`` of QUAIDS; both are evaluated by the same code here. Write
``y = ln(e / a(p))``, the log of expenditure over the price aggregate ``a(p)`` (for demands at
income m, ``y = ln(m / a(p))``). Budget shares are

    w_i = alpha_i + sum_j gamma_ij ln p_j + beta_i y + (lambda_i / b(p)) y^2,

Marshallian demands ``x_i = w_i m / p_i`` and Hicksian demands ``h_i = w_i e(p, u) / p_i`` with
``y = u b / (1 - lambda u)``. The indirect utility is ``v = y / (b(p) + lambda(p) y)``, the
cancellation-free form of ``[(y / b)^(-1) + lambda(p)]^(-1)``.

Utility scale: ``u`` is the AIDS utility index of Deaton and Muellbauer (1980) (and its
QUAIDS counterpart): ``u = 0`` where expenditure equals ``a(p)``, and ``u`` is the log
expenditure above ``a(p)`` in units of ``b(p)``. It is not money. Only ratios of expenditures
leave the engine, and those do not depend on the choice of scale.

Parameter rules (Deaton and Muellbauer 1980, eqs. 9-11): adding-up ``sum alpha = 1``,
``sum beta = 0``, ``sum lambda = 0`` and zero column sums of ``gamma``; homogeneity: zero row
sums of ``gamma``; symmetry of ``gamma``. When ``alpha`` is not given it is calibrated so that
the model's shares at the base prices and income equal the base shares exactly.

QUAIDS is defined only where ``1 - lambda(p) u > 0`` (equivalently ``b(p) + lambda(p) y > 0``);
outside that region every method raises :class:`InvalidInput` rather than return a number.
Neither model is homothetic, and neither is globally regular: :meth:`regularity` reports
shares outside [0, 1] and a Slutsky matrix that is not negative semidefinite.
"""

from __future__ import annotations

import functools
import math
from collections.abc import Callable, Mapping
from typing import Any, TypeVar

import numpy as np
import numpy.typing as npt

from .. import _checks
from ..errors import InvalidInput, NumericalFailure
from .base import (
    BaseBudget,
    Matrix,
    Notice,
    ParameterSpec,
    Preferences,
    Vector,
    share_notices,
    slutsky_notices,
)

# exp() of a double overflows just above 709.78; we stop a little short of it.
_LOG_LIMIT = 709.0

_F = TypeVar("_F", bound=Callable[..., Any])
#: The private methods of the dual quartet, named in errors as the public method called.
_QUARTET = {f"_{name}": name for name in ("expenditure", "indirect_utility", "marshallian",
                                          "hicksian")}


def _finite_result(func: _F) -> _F:
    """Evaluate without numpy warnings and refuse a result that is not finite.

    Extreme parameters can overflow an intermediate array; we turn that into a
    :class:`NumericalFailure` naming the method instead of a RuntimeWarning or a NaN.
    """

    @functools.wraps(func)
    def wrapper(*args: Any, **kwargs: Any) -> Any:
        with np.errstate(over="ignore", invalid="ignore", divide="ignore", under="ignore"):
            out = func(*args, **kwargs)
        if not np.all(np.isfinite(out)):
            raise NumericalFailure(
                _QUARTET.get(func.__name__, func.__name__),
                "the value left the floating-point range at these inputs",
            )
        return out

    return wrapper  # type: ignore[return-value]

_COMMON_SPECS = (
    ParameterSpec(
        "gamma",
        "Symmetric n by n matrix of price coefficients gamma_ij, each row and column summing "
        "to 0.",
        required=True,
        shape="matrix",
    ),
    ParameterSpec(
        "beta",
        "Income (expenditure) coefficients beta_i, one per item, summing to 0.",
        required=True,
        shape="vector",
    ),
)
_LEVEL_SPECS = (
    ParameterSpec(
        "alpha",
        "Share intercepts alpha_i summing to 1; when omitted they are calibrated so the model "
        "reproduces the base shares exactly.",
        shape="vector",
    ),
    ParameterSpec("alpha0", "Constant alpha0 of ln a(p).", default=0.0),
    ParameterSpec("beta0", "Scale beta0 of b(p), greater than 0.", default=1.0),
)


class _LogQuadraticCost(Preferences):
    """The shared evaluation of AIDS and QUAIDS (AIDS is ``lambda = 0``)."""

    homothetic = False

    def __init__(
        self,
        alpha: npt.ArrayLike,
        gamma: npt.ArrayLike,
        beta: npt.ArrayLike,
        lam: npt.ArrayLike,
        alpha0: float = 0.0,
        beta0: float = 1.0,
    ) -> None:
        self.alpha = np.array(alpha, dtype=np.float64)
        self.gamma = np.array(gamma, dtype=np.float64)
        self.beta = np.array(beta, dtype=np.float64)
        self.lam = np.array(lam, dtype=np.float64)
        self.alpha0 = float(alpha0)
        self.beta0 = float(beta0)
        self.n_items = int(self.alpha.size)
        self._ln_beta0 = math.log(self.beta0)
        # Filled in by calibrate(): how the model sits at the base budget.
        self.alpha_calibrated = False
        self.base_share_gap = 0.0
        self.base_utility: float | None = None

    # -- price aggregates ----------------------------------------------------------------------
    @_finite_result
    def log_a(self, prices: Vector) -> float:
        """ln a(p) = alpha0 + alpha . ln p + 1/2 ln p' gamma ln p."""
        lnp = np.log(prices)
        return self._log_a(lnp)

    def _log_a(self, lnp: Vector) -> float:
        return _finite(
            self.alpha0 + float(self.alpha @ lnp) + 0.5 * float(lnp @ self.gamma @ lnp), "ln a(p)"
        )

    def _b(self, lnp: Vector) -> float:
        """b(p) = beta0 exp(beta . ln p), refused where it would overflow or vanish."""
        ln_b = self._ln_beta0 + float(self.beta @ lnp)
        if not abs(ln_b) < _LOG_LIMIT:
            raise NumericalFailure(
                "b(p)", "the price aggregate b(p) leaves the floating-point range at these prices"
            )
        return math.exp(ln_b)

    def _lambda(self, lnp: Vector) -> float:
        return float(self.lam @ lnp)

    # -- the two ways into y = ln(e / a) --------------------------------------------------------
    def _from_income(self, prices: Vector, income: float) -> tuple[Vector, float, float]:
        """``(ln p, y, b)`` at income m, with ``y = ln m - ln a(p)``, inside the model's domain."""
        lnp = np.log(prices)
        b = self._b(lnp)
        y = _finite(math.log(income) - self._log_a(lnp), "ln(m / a(p))")
        lam_p = self._lambda(lnp)
        if not b + lam_p * y > 0.0:
            raise InvalidInput("income", _income_domain_rule(income, self._log_a(lnp), b, lam_p))
        return lnp, y, b

    def _from_utility(self, prices: Vector, utility: float) -> tuple[Vector, float, float]:
        """``(ln p, y, b)`` at utility u, with ``y = u b / (1 - lambda(p) u)``."""
        u = float(utility)
        lnp = np.log(prices)
        b = self._b(lnp)
        lam_p = self._lambda(lnp)
        room = 1.0 - lam_p * u
        if not room > 0.0:
            raise InvalidInput("utility", _utility_domain_rule(u, lam_p))
        return lnp, _finite(u * b / room, "ln(e / a(p))"), b

    def _shares(self, lnp: Vector, y: float, b: float) -> Vector:
        """w = alpha + gamma ln p + beta y + lambda y^2 / b."""
        return self.alpha + self.gamma @ lnp + self.beta * y + self.lam * (y * y / b)

    def _expenditure_from(self, lnp: Vector, y: float) -> float:
        ln_e = self._log_a(lnp) + y
        if not abs(ln_e) < _LOG_LIMIT:
            raise NumericalFailure(
                "expenditure", f"the expenditure needed, exp({ln_e:.6g}), is outside the "
                "floating-point range"
            )
        return math.exp(ln_e)

    # -- the dual quartet ----------------------------------------------------------------------
    @_finite_result
    def _expenditure(self, prices: Vector, utility: float) -> float:
        """ln e(p, u) = ln a(p) + u b(p) / (1 - lambda(p) u)."""
        lnp, y, _ = self._from_utility(prices, utility)
        return self._expenditure_from(lnp, y)

    @_finite_result
    def _indirect_utility(self, prices: Vector, income: float) -> float:
        """v(p, m) = y / (b(p) + lambda(p) y) with y = ln m - ln a(p)."""
        lnp, y, b = self._from_income(prices, income)
        return _finite(y / (b + self._lambda(lnp) * y), "utility")

    @_finite_result
    def budget_shares(self, prices: Vector, income: float) -> Vector:
        """Marshallian budget shares w_i(p, m)."""
        lnp, y, b = self._from_income(prices, income)
        return self._shares(lnp, y, b)

    @_finite_result
    def _marshallian(self, prices: Vector, income: float) -> Vector:
        """x_i(p, m) = w_i(p, m) m / p_i."""
        return self.budget_shares(prices, income) * income / prices

    @_finite_result
    def _hicksian(self, prices: Vector, utility: float) -> Vector:
        """h_i(p, u) = w_i e(p, u) / p_i, the shares taken at y = ln(e(p, u) / a(p))."""
        lnp, y, b = self._from_utility(prices, utility)
        e = self._expenditure_from(lnp, y)
        return self._shares(lnp, y, b) * e / prices

    # -- regularity ----------------------------------------------------------------------------
    @_finite_result
    def slutsky_matrix(self, prices: Vector, income: float) -> Matrix:
        """Closed form S_ij = e / (p_i p_j) K_ij at u = v(p, m), e = m.

        ``K_ij = dw_i/dln p_j + w_i w_j - delta_ij w_i`` with the compensated share derivative

            dw_i/dln p_j = gamma_ij + (beta_i + 2 lambda_i y / b)(beta_j y + lambda_j y^2 / b)
                           - lambda_i beta_j y^2 / b,

        written below in its symmetric expansion
        ``gamma_ij + y beta_i beta_j + (y^2 / b)(beta_i lambda_j + lambda_i beta_j)
        + 2 (y^3 / b^2) lambda_i lambda_j`` (Banks, Blundell and Lewbel 1997; for AIDS
        ``lambda = 0`` leaves ``gamma_ij + y beta_i beta_j``, Deaton and Muellbauer 1980).
        """
        lnp, y, b = self._from_income(prices, income)
        w = self._shares(lnp, y, b)
        beta, lam = self.beta, self.lam
        cross = np.outer(beta, lam)
        k = (
            self.gamma
            + y * np.outer(beta, beta)
            + (y * y / b) * (cross + cross.T)
            + (2.0 * y**3 / (b * b)) * np.outer(lam, lam)
            + np.outer(w, w)
            - np.diag(w)
        )
        return income * k / np.outer(prices, prices)

    def regularity(self, prices: Vector, income: float) -> list[Notice]:
        """Shares outside [0, 1] (monotonicity) and Slutsky symmetry/negativity at (p, m)."""
        notices = share_notices(self.budget_shares(prices, income), self.family.upper())
        return notices + slutsky_notices(self.slutsky_matrix(prices, income), prices)

    # -- reporting -----------------------------------------------------------------------------
    def parameters(self) -> Mapping[str, Any]:
        out: dict[str, Any] = {
            "alpha": self.alpha.tolist(),
            "alpha0": self.alpha0,
            "gamma": self.gamma.tolist(),
            "beta": self.beta.tolist(),
            "beta0": self.beta0,
            "alpha_calibrated": self.alpha_calibrated,
            "base_share_gap": self.base_share_gap,
            "base_utility": self.base_utility,
        }
        return out

    # -- calibration ---------------------------------------------------------------------------
    @classmethod
    def _build(
        cls,
        base: BaseBudget,
        *,
        gamma: Any,
        beta: Any,
        lam: Any,
        alpha: Any,
        alpha0: Any,
        beta0: Any,
        lam_name: str,
    ) -> tuple[Vector, Matrix, Vector, Vector, float, float]:
        """Check every parameter and calibrate ``alpha`` if it is missing."""
        n = base.n_items
        g = _check_gamma(gamma, n)
        b_vec = _check_sums_to("beta", beta, n, 0.0)
        lam_vec = np.zeros(n) if lam is None else _check_sums_to(lam_name, lam, n, 0.0)
        a0 = _checks.scalar("alpha0", alpha0)
        b0 = _checks.scalar("beta0", beta0, minimum=0.0)
        if alpha is None:
            a = _calibrated_alpha(base, g, b_vec, lam_vec, a0, b0, lam_name)
        else:
            a = _check_sums_to("alpha", alpha, n, 1.0)
        return a, g, b_vec, lam_vec, a0, b0

    def _settle_at_base(self, base: BaseBudget, alpha_calibrated: bool, lam_name: str) -> None:
        """Record the base utility and how far the base shares are from the model's."""
        try:
            self.base_utility = self.indirect_utility(base.prices, base.expenditure)
            w = self.budget_shares(base.prices, base.expenditure)
        except InvalidInput as exc:
            raise InvalidInput(
                lam_name, "with these parameters the base budget lies outside the region where "
                f"the cost function is defined ({exc.rule})"
            ) from None
        self.alpha_calibrated = alpha_calibrated
        self.base_share_gap = float(np.max(np.abs(w - base.shares)))


class AIDS(_LogQuadraticCost):
    """Almost Ideal Demand System: ln e(p, u) = ln a(p) + u b(p) (Deaton and Muellbauer 1980).

    ``u`` is the AIDS utility index (see the module docstring), not money.
    """

    family = "aids"
    title = "AIDS: almost ideal demand system, shares linear in log prices and log real income"
    source = (
        "Deaton and Muellbauer (1980), 'An almost ideal demand system', American Economic "
        "Review 70(3)"
    )
    parameter_specs = _COMMON_SPECS + _LEVEL_SPECS

    def __init__(
        self,
        alpha: npt.ArrayLike,
        gamma: npt.ArrayLike,
        beta: npt.ArrayLike,
        alpha0: float = 0.0,
        beta0: float = 1.0,
    ) -> None:
        super().__init__(alpha, gamma, beta, np.zeros(np.size(alpha)), alpha0, beta0)

    @classmethod
    def calibrate(
        cls,
        base: BaseBudget,
        *,
        gamma: Any = None,
        beta: Any = None,
        alpha: Any = None,
        alpha0: Any = 0.0,
        beta0: Any = 1.0,
        **others: Any,
    ) -> AIDS:
        """Check the parameters; calibrate ``alpha`` to the base shares when it is not given.

        With ``ln p0`` fixed the base shares are linear in ``alpha``: ``alpha = d - beta c``
        with ``d = w0 - gamma ln p0`` and the scalar ``c = ln m0 - ln a(p0)`` solving
        ``c (1 - beta . ln p0) = ln m0 - alpha0 - 1/2 ln p0' gamma ln p0 - d . ln p0``.
        """
        _reject_unknown(cls, others)
        a, g, b_vec, _, a0, b0 = cls._build(
            base, gamma=gamma, beta=beta, lam=None, alpha=alpha, alpha0=alpha0, beta0=beta0,
            lam_name="beta",
        )
        model = cls(a, g, b_vec, a0, b0)
        model._settle_at_base(base, alpha is None, "beta")
        return model


class QUAIDS(_LogQuadraticCost):
    """Quadratic AIDS: ln e = ln a(p) + u b(p) / (1 - lambda(p) u) (Banks, Blundell, Lewbel 1997).

    ``u`` is the (QU)AIDS utility index (see the module docstring), not money. The cost
    function exists only where ``1 - lambda(p) u > 0``.
    """

    family = "quaids"
    title = "QUAIDS: quadratic almost ideal demand system, shares quadratic in log real income"
    source = (
        "Banks, Blundell and Lewbel (1997), 'Quadratic Engel curves and consumer demand', "
        "Review of Economics and Statistics 79(4)"
    )
    parameter_specs = (
        _COMMON_SPECS
        + (
            ParameterSpec(
                "lambda",
                "Coefficients lambda_i of the squared log real income, one per item, summing "
                "to 0.",
                required=True,
                shape="vector",
            ),
        )
        + _LEVEL_SPECS
    )

    @classmethod
    def calibrate(
        cls,
        base: BaseBudget,
        *,
        gamma: Any = None,
        beta: Any = None,
        alpha: Any = None,
        alpha0: Any = 0.0,
        beta0: Any = 1.0,
        **others: Any,
    ) -> QUAIDS:
        """Check the parameters (``lambda`` is passed by keyword, e.g. ``**{"lambda": v}``).

        When ``alpha`` is omitted it is calibrated: ``y0 = ln m0 - ln a(p0)`` solves the scalar
        quadratic ``(lambda(p0) / b(p0)) y^2 - (1 - beta . ln p0) y + R = 0``; we take the root
        that tends to the AIDS root ``R / (1 - beta . ln p0)`` as lambda goes to 0, in the form
        ``2 R / (s + sign(s) sqrt(s^2 - 4 A R))`` that does not cancel.
        """
        lam = others.pop("lambda", None)
        _reject_unknown(cls, others)
        if lam is None:
            raise InvalidInput("lambda", "is required: give one coefficient per item, summing to 0")
        a, g, b_vec, lam_vec, a0, b0 = cls._build(
            base, gamma=gamma, beta=beta, lam=lam, alpha=alpha, alpha0=alpha0, beta0=beta0,
            lam_name="lambda",
        )
        model = cls(a, g, b_vec, lam_vec, a0, b0)
        model._settle_at_base(base, alpha is None, "lambda")
        return model

    def parameters(self) -> Mapping[str, Any]:
        out = dict(super().parameters())
        out["lambda"] = self.lam.tolist()
        return out


# -- checks and calibration ----------------------------------------------------------------------
def _finite(value: float, what: str) -> float:
    if not math.isfinite(value):
        raise NumericalFailure(what, "the value left the floating-point range at these inputs")
    return value


def _reject_unknown(cls: type[Preferences], others: Mapping[str, Any]) -> None:
    for name in others:
        accepted = ", ".join(sorted(spec.name for spec in cls.parameter_specs))
        raise InvalidInput(
            name, f"is not a parameter of the {cls.family} family (it takes: {accepted})"
        )


def _check_gamma(gamma: Any, n: int) -> Matrix:
    if gamma is None:
        raise InvalidInput("gamma", f"is required: give a symmetric {n} by {n} matrix")
    g = _checks.square_matrix("gamma", gamma, n)
    tol = _checks.ADDING_UP_TOLERANCE
    rows = g.sum(axis=1)
    bad = np.flatnonzero(np.abs(rows) > tol)
    if bad.size:
        i = int(bad[0])
        raise InvalidInput(
            "gamma", f"each row must sum to 0 (homogeneity of degree zero in prices and income); "
            f"row {i} sums to {rows[i]:.6g}", i,
        )
    cols = g.sum(axis=0)
    bad = np.flatnonzero(np.abs(cols) > tol)
    if bad.size:
        j = int(bad[0])
        raise InvalidInput(
            "gamma", f"each column must sum to 0 (adding-up of the budget shares); column {j} "
            f"sums to {cols[j]:.6g}", j,
        )
    _checks.symmetric("gamma", g)
    return g


def _check_sums_to(name: str, values: Any, n: int, total: float) -> Vector:
    if values is None:
        raise InvalidInput(name, f"is required: give {n} values, one per item")
    arr = _checks.vector(name, values, size=n)
    s = float(arr.sum())
    if abs(s - total) > _checks.ADDING_UP_TOLERANCE:
        raise InvalidInput(
            name, f"must sum to {total:g} (adding-up of the budget shares, within 1e-6); "
            f"it sums to {s:.10g}",
        )
    return arr


@_finite_result
def _calibrated_alpha(
    base: BaseBudget,
    gamma: Matrix,
    beta: Vector,
    lam: Vector,
    alpha0: float,
    beta0: float,
    lam_name: str,
) -> Vector:
    """The intercepts that make the model's shares at ``(p0, m0)`` equal ``w0``.

    ``alpha = d - beta y - (lambda / b0) y^2`` with ``d = w0 - gamma ln p0``; substituting it
    into ``y = ln m0 - ln a(p0)`` gives ``A y^2 - s y + R = 0`` with ``A = lambda(p0) / b(p0)``,
    ``s = 1 - beta . ln p0``, ``R = ln m0 - alpha0 - 1/2 ln p0' gamma ln p0 - d . ln p0``.
    """
    lnp0 = np.log(base.prices)
    d = base.shares - gamma @ lnp0
    r = math.log(base.expenditure) - alpha0 - 0.5 * float(lnp0 @ gamma @ lnp0) - float(d @ lnp0)
    s = 1.0 - float(beta @ lnp0)
    ln_b0 = math.log(beta0) + float(beta @ lnp0)
    if not abs(ln_b0) < _LOG_LIMIT:
        raise NumericalFailure("b(p0)", "the price aggregate b(p) overflows at the base prices")
    b0 = math.exp(ln_b0)
    a = float(lam @ lnp0) / b0
    if a == 0.0:
        if s == 0.0:
            raise InvalidInput(
                "beta", "the base shares cannot be matched: sum_k beta_k ln p0_k equals 1, so "
                "the base shares do not depend on alpha's level; change beta or the price units"
            )
        y = r / s
    else:
        disc = s * s - 4.0 * a * r
        if disc < 0.0:
            raise InvalidInput(
                lam_name, "no intercepts alpha reproduce the base shares with these lambda "
                "coefficients (the calibrating quadratic has no real root); make lambda smaller "
                "or give alpha"
            )
        q = s + math.copysign(math.sqrt(disc), s)
        # q = 0 only when s = 0 and disc = 0, i.e. R = 0: the double root is y = 0.
        y = 2.0 * r / q if q != 0.0 else 0.0
    return d - beta * y - lam * (y * y / b0)


def _income_domain_rule(income: float, log_a: float, b: float, lam_p: float) -> str:
    # b + lambda y > 0 bounds y = ln(m / a) on one side: y > -b / lambda or y < -b / lambda.
    ln_bound = log_a - b / lam_p
    side = "above" if lam_p > 0.0 else "below"
    bound = f"{math.exp(ln_bound):.6g}" if abs(ln_bound) < _LOG_LIMIT else f"exp({ln_bound:.6g})"
    return (
        f"at these prices the QUAIDS cost function is defined only for incomes {side} {bound} "
        f"(where b(p) + lambda(p) ln(m / a(p)) > 0); income {income:.10g} is outside that range"
    )


def _utility_domain_rule(u: float, lam_p: float) -> str:
    side = "below" if lam_p > 0.0 else "above"
    return (
        f"at these prices the QUAIDS cost function is defined only for living standards u "
        f"{side} 1 / lambda(p) = {1.0 / lam_p:.6g} (where 1 - lambda(p) u > 0); u = {u:.10g} "
        "cannot be reached at these prices"
    )
