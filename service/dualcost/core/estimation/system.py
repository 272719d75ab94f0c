"""Least squares for a system of budget-share equations, with robust standard errors.

The model is ``w_t = f(theta; ln p_t, ln m_t) + e_t`` for observations ``t = 1..T``, one share
equation per item. Shares sum to one, so an observation's n residuals sum to zero and their
covariance is singular: the last item's equation is dropped and its parameters follow from
adding-up. The other ``m = n - 1`` equations are fitted jointly by minimising

    sum_t omega_t e_t' S^{-1} e_t                              (omega_t: survey weights)

first with ``S = I``, then with ``S`` the weighted residual covariance of the previous step,
iterated until ``theta`` stops moving. This is iterated feasible generalised least squares
(Zellner 1962, "An efficient method of estimating seemingly unrelated regressions", JASA 57;
for nonlinear systems Gallant 1975, Journal of Econometrics 3). At convergence it is the Gaussian
maximum-likelihood estimate, which does not depend on which equation was dropped (Barten 1969,
European Economic Review 1). Linear systems are solved in closed form at each step; nonlinear ones
with ``scipy.optimize.least_squares`` (Levenberg-Marquardt), warm-started from the previous step.

Covariance: the HC1 heteroskedasticity-robust sandwich (White 1980; MacKinnon and White 1985) in
its system form, clustered by observation, so that an observation's residuals may be correlated
across its equations and their variance may differ between observations (Liang and Zeger 1986;
Arellano 1987):

    V = N / (N - K) A^{-1} B A^{-1},   A = sum_t omega_t J_t' S^{-1} J_t,
    B = sum_t s_t s_t',                s_t = omega_t J_t' S^{-1} e_t,

with ``J_t = d e_t / d theta`` (m by K), ``S`` the weighting of the last step, ``N = T m``
residuals and ``K`` free parameters. With one equation, or with equations that share their
regressors and no parameters (the unrestricted linear case), ``V`` is each equation's own HC1
covariance exactly. Intervals and p-values use Student's t with ``T - K / m`` degrees of freedom,
the residual degrees of freedom of one equation in that case.
"""

from __future__ import annotations

import abc
from collections.abc import Collection, Sequence
from dataclasses import dataclass, fields
from typing import Any, ClassVar, TypeVar

import numpy as np
from numpy.typing import NDArray
from scipy.optimize import least_squares

from .._differences import central_jacobian
from ..deadline import check as check_deadline
from ..errors import InvalidInput, NumericalFailure
from .panel import Panel

Vector = NDArray[np.float64]
Matrix = NDArray[np.float64]
Array3 = NDArray[np.float64]

#: The outer iteration stops when no parameter moves by more than this times (1 + |theta|).
TOLERANCE = 1e-10
#: A residual that cannot be evaluated during the search counts as this large.
_PENALTY = 1e6


@dataclass(frozen=True)
class Label:
    """The name of one parameter: a symbol, the item positions it belongs to, and its group."""

    symbol: str
    items: tuple[int, ...] = ()
    group: str | None = None

    def text(self, ids: Sequence[str]) -> str:
        """``gamma[rye_loaf,flat_rent]``, ``sigma[food]`` or ``sigma``."""
        inside = [ids[i] for i in self.items]
        if self.group is not None:
            inside.insert(0, self.group)
        return f"{self.symbol}[{','.join(inside)}]" if inside else self.symbol


#: Where each option of a fit applies, for the message that refuses it elsewhere; in the order
#: the options are checked.
_APPLIES_TO = {
    "estimator": "the aids and quaids families",
    "restrictions": "the aids and quaids families",
    "price_terms": "the aids and quaids families",
    "alpha0": "the aids and quaids families",
    "quadratic": "the aids family",
    "tree": "the nested_ces family",
}


@dataclass(frozen=True)
class FitOptions:
    """The options of a fit that shape its share system, as the caller gave them (``None`` or
    ``False``: not given); each family takes some and refuses the others.

    Parameters
    ----------
    estimator, restrictions, quadratic, price_terms, alpha0:
        AIDS and QUAIDS only: ``"nonlinear"`` (default) or ``"linear_approximate"``;
        ``"none"``, ``"homogeneity"`` or ``"symmetry"`` (default); the quadratic expenditure
        term (QUAIDS); ``False`` to fix every ``gamma_ij`` at 0 (Engel curves); ``alpha0``
        (default 0).
    tree:
        Nested CES only: the grouping, ``{"name", "children": [item position | group]}``, or
        an :class:`~dualcost.core.preferences.nested_ces.ItemIdTree` naming items by id.
    item_names:
        Used in messages about collinear prices.
    """

    estimator: str | None = None
    restrictions: str | None = None
    price_terms: bool | None = None
    alpha0: float | None = None
    quadratic: bool = False
    tree: Any = None
    item_names: Sequence[str] | None = None

    def refuse_all_but(self, family: str, taken: Collection[str]) -> None:
        """Raise :class:`InvalidInput` for the first option given that ``family`` does not take."""
        defaults = {f.name: f.default for f in fields(self)}
        for name, applies_to in _APPLIES_TO.items():
            value = getattr(self, name)
            # A flag is given when it is set; any other option when it is not None.
            given = bool(value) if isinstance(defaults[name], bool) else value is not None
            if given and name not in taken:
                raise InvalidInput(name, f"applies only to {applies_to}, not {family}")


_System = TypeVar("_System", bound="ShareSystem")


class ShareSystem(abc.ABC):
    """Budget shares as a function of free parameters ``theta``, prices and total expenditure.

    ``full_map`` turns the free parameters into the model's structural parameters (every item's,
    including those fixed by adding-up, homogeneity, symmetry or a normalisation):
    ``phi = A theta + c``, labelled by ``full_labels``.

    A family's system says itself which options of a fit it takes (:meth:`from_options`), how it
    is estimated (:attr:`method`) and why a fitted model could not be compared
    (:meth:`comparison_obstacle`).
    """

    #: The preference family (in :data:`dualcost.core.preferences.FAMILIES`) the fit describes.
    family: str
    #: True when the shares are linear in ``theta`` given the data (solved in closed form).
    linear: bool = False
    #: The options of :class:`FitOptions` the family takes.
    takes: ClassVar[frozenset[str]] = frozenset()
    #: How the parameters are estimated, in words.
    method: str
    #: The estimator chosen and the restrictions imposed, where the family offers a choice.
    estimator: str | None = None
    restrictions: str | None = None

    n_items: int
    labels: tuple[Label, ...]
    full_labels: tuple[Label, ...]
    full_map: tuple[Matrix, Vector]

    @classmethod
    @abc.abstractmethod
    def from_options(cls: type[_System], n_items: int, options: FitOptions) -> _System:
        """The system for ``n_items`` items, built from the options it takes; any other option
        given is refused (:meth:`FitOptions.refuse_all_but`)."""

    @property
    def n_parameters(self) -> int:
        return len(self.labels)

    def comparison_obstacle(self, theta: Vector) -> str | None:
        """Why the model fitted at ``theta`` cannot calibrate its family for a comparison (no
        cost function has those parameters), or ``None``."""
        return None

    @abc.abstractmethod
    def shares(self, theta: Vector, log_prices: Matrix, log_expenditure: Vector) -> Matrix:
        """The model's budget shares, T by n."""

    def jacobian(self, theta: Vector, log_prices: Matrix, log_expenditure: Vector) -> Array3:
        """``d w_ti / d theta_k``, T by n by K; by default by central differences (step 1e-6)."""
        return central_jacobian(lambda th: self.shares(th, log_prices, log_expenditure), theta)

    def design(self, panel: Panel) -> tuple[Array3, Matrix]:
        """For linear systems: ``Z`` (T by m by K) and ``z0`` (T by m), shares ``z0 + Z theta``."""
        raise NotImplementedError

    @abc.abstractmethod
    def start(self, panel: Panel) -> Vector:
        """Starting values for the search."""

    @abc.abstractmethod
    def spec(self, theta: Vector) -> dict[str, Any]:
        """Parameters for :func:`dualcost.core.preferences.calibrate` (arrays in item order)."""

    @abc.abstractmethod
    def elasticities(self, theta: Vector, log_prices: Vector, log_expenditure: float
                     ) -> tuple[Vector, Vector, Matrix]:
        """``(w, eta, E)`` at one point: shares, expenditure elasticities ``d ln x_i / d ln m`` and
        Marshallian price elasticities ``E_ij = d ln x_i / d ln p_j``."""

    def check_identified(self, panel: Panel) -> None:  # noqa: B027 (optional hook)
        """Raise :class:`InvalidInput` when the data cannot identify the parameters."""

    def full(self, theta: Vector) -> Vector:
        a, c = self.full_map
        return a @ theta + c


@dataclass(frozen=True)
class SystemFit:
    """The estimate, its robust covariance and the fit's statistics."""

    theta: Vector
    covariance: Matrix
    weighting: Matrix
    residual_covariance: Matrix
    fitted: Matrix
    residuals: Matrix
    r_squared: tuple[float | None, ...]
    iterations: int
    n_obs: int
    n_equations: int
    n_parameters: int
    df_resid: float
    small_sample_factor: float


def check_size(system: ShareSystem, panel: Panel) -> None:
    """Enough observations for the parameters asked: ``T - K / m >= 1`` and ``T > m``."""
    t_obs, m, k = panel.n_obs, panel.n_items - 1, system.n_parameters
    needed = max(int(np.floor(k / m)) + 1, m + 1)
    if t_obs < needed:
        raise InvalidInput(
            "observations", f"too few observations: the fit has {k} free parameters over {m} "
            f"share equations and needs at least {needed} observations, got {t_obs}")


def fit_system(system: ShareSystem, panel: Panel, *, max_iterations: int = 200,
               tolerance: float = TOLERANCE) -> SystemFit:
    """Fit ``system`` to ``panel`` by iterated feasible GLS; see the module docstring.

    Raises :class:`NumericalFailure` when the iteration does not converge within
    ``max_iterations`` steps or a step's search fails, and :class:`InvalidInput` when the data do
    not identify the parameters.
    """
    check_size(system, panel)
    system.check_identified(panel)
    t_obs, n = panel.shares.shape
    m = n - 1
    target = panel.shares[:, :m]
    sqrt_w = np.sqrt(panel.weights)
    log_p, log_m = panel.log_prices, panel.log_expenditure
    design = system.design(panel) if system.linear else None
    theta = system.start(panel)
    weighting = np.eye(m)
    previous: Vector | None = None
    iterations = 0
    for step in range(1, max_iterations + 1):
        check_deadline("fitting the model by iterated least squares")
        iterations = step
        chol = _cholesky(weighting)
        if design is not None:
            theta = _linear_step(design, target, chol, sqrt_w)
        else:
            theta = _nonlinear_step(system, theta, target, chol, sqrt_w, log_p, log_m)
        resid = target - _fitted(system, theta, design, log_p, log_m)[:, :m]
        if previous is not None and np.all(
            np.abs(theta - previous) <= tolerance * (1.0 + np.abs(theta))
        ):
            break
        previous = theta
        weighting = _weighted_covariance(resid, panel.weights)
    else:
        moved = ("one iteration cannot show that the estimate has settled" if previous is None
                 else "the last step still moved a parameter by "
                 f"{float(np.max(np.abs(theta - previous) / (1.0 + np.abs(theta)))):.3g} relative")
        raise NumericalFailure(
            "fit", f"the iterated least-squares fit did not converge within {max_iterations} "
            f"iteration(s) ({moved}); raise max_iterations or simplify the model")
    return _summary(system, panel, theta, weighting, iterations, design)


def first_step(system: ShareSystem, panel: Panel) -> Vector:
    """One unweighted-across-equations step of a linear system (``S = I``): a starting value."""
    m = panel.n_items - 1
    return _linear_step(system.design(panel), panel.shares[:, :m], np.eye(m),
                        np.sqrt(panel.weights))


def _fitted(system: ShareSystem, theta: Vector, design: tuple[Array3, Matrix] | None,
            log_p: Matrix, log_m: Vector) -> Matrix:
    """All n fitted shares; a linear system's come from its own regressors (its ``shares`` may be
    the exact model it approximates), the last share by adding-up."""
    if design is None:
        return system.shares(theta, log_p, log_m)
    z, z0 = design
    eq = z0 + z @ theta
    return np.column_stack([eq, 1.0 - eq.sum(axis=1)])


def _cholesky(weighting: Matrix) -> Matrix:
    """The inverse of the lower Cholesky factor of ``weighting`` (``L^{-1} S L^{-T} = I``).

    A weighting whose smallest eigenvalue is below 1e-12 of its largest is treated as singular:
    some share is then fitted (almost) exactly, and weighting by its inverse would be noise.
    """
    values = np.linalg.eigvalsh(weighting)
    try:
        if not values[0] > 1e-12 * values[-1]:
            raise np.linalg.LinAlgError
        factor = np.linalg.cholesky(weighting)
    except np.linalg.LinAlgError:
        raise InvalidInput(
            "observations", "the residual covariance of the share equations is singular: some "
            "items' shares are fitted exactly or move in lockstep; more observations or fewer "
            "items are needed") from None
    return np.linalg.inv(factor)


def _whiten(inv_chol: Matrix, values: NDArray[np.float64]) -> NDArray[np.float64]:
    """``L^{-1} v`` for each observation's m-vector (the axis after t is the equation).

    ``inv_chol`` is the inverse of the small m by m Cholesky factor, applied by matrix products:
    a triangular solve per call costs far more than the product for these sizes.
    """
    if values.ndim == 2:
        return values @ inv_chol.T
    return np.matmul(inv_chol, values)


def _linear_step(design: tuple[Array3, Matrix], target: Matrix, chol: Matrix,
                 sqrt_w: Vector) -> Vector:
    z, z0 = design
    t_obs, m, k = z.shape
    zw = _whiten(chol, z) * sqrt_w[:, None, None]
    yw = _whiten(chol, target - z0) * sqrt_w[:, None]
    theta, _, rank, _ = np.linalg.lstsq(zw.reshape(t_obs * m, k), yw.ravel(), rcond=None)
    if rank < k:
        raise InvalidInput(
            "observations", f"the data do not identify the parameters: the regressors of the "
            f"share equations have rank {rank}, fewer than the {k} parameters")
    return np.asarray(theta, dtype=np.float64)


def _nonlinear_step(system: ShareSystem, theta: Vector, target: Matrix, chol: Matrix,
                    sqrt_w: Vector, log_p: Matrix, log_m: Vector) -> Vector:
    m = target.shape[1]

    def residuals(th: Vector) -> Vector:
        with np.errstate(all="ignore"):
            e = target - system.shares(th, log_p, log_m)[:, :m]
            r = (_whiten(chol, e) * sqrt_w[:, None]).ravel()
        return np.where(np.isfinite(r), r, _PENALTY)

    def jacobian(th: Vector) -> Matrix:
        with np.errstate(all="ignore"):
            j = system.jacobian(th, log_p, log_m)[:, :m, :]
            out = -(_whiten(chol, j) * sqrt_w[:, None, None]).reshape(-1, th.size)
        return np.where(np.isfinite(out), out, 0.0)

    start = residuals(theta)
    if not np.all(start < _PENALTY):
        raise NumericalFailure("fit", "the model cannot be evaluated at the starting values "
                               "(a share left the floating-point range)")
    result = least_squares(residuals, theta, jac=jacobian, method="lm", x_scale="jac",
                           xtol=1e-12, ftol=1e-12, gtol=1e-12, max_nfev=200 * (theta.size + 1))
    if result.status <= 0:
        raise NumericalFailure("fit", f"the nonlinear least-squares search did not converge: "
                               f"{result.message}")
    if not np.all(np.abs(result.fun) < _PENALTY):
        raise NumericalFailure("fit", "the search ended where the model cannot be evaluated")
    return np.asarray(result.x, dtype=np.float64)


def _weighted_covariance(resid: Matrix, weights: Vector) -> Matrix:
    return (resid * weights[:, None]).T @ resid / float(weights.sum())


def _summary(system: ShareSystem, panel: Panel, theta: Vector, weighting: Matrix,
             iterations: int, design: tuple[Array3, Matrix] | None) -> SystemFit:
    t_obs, n = panel.shares.shape
    m, k = n - 1, theta.size
    log_p, log_m = panel.log_prices, panel.log_expenditure
    with np.errstate(all="ignore"):
        fitted = _fitted(system, theta, design, log_p, log_m)
    if not np.all(np.isfinite(fitted)):
        raise NumericalFailure("fit", "the fitted shares left the floating-point range")
    resid = panel.shares - fitted
    if design is not None:
        j = design[0]
    else:
        j = system.jacobian(theta, log_p, log_m)[:, :m, :]
    # Whitened Jacobian and residuals: A = sum G_t' G_t, s_t = omega_t J_t' S^-1 e_t.
    chol = _cholesky(weighting)
    g = _whiten(chol, j) * np.sqrt(panel.weights)[:, None, None]
    u = _whiten(chol, resid[:, :m]) * np.sqrt(panel.weights)[:, None]
    a = np.einsum("tik,til->kl", g, g)
    scores = np.einsum("tik,ti->tk", g, u)
    b = scores.T @ scores
    if np.linalg.matrix_rank(a) < k:
        raise InvalidInput("observations", "the data do not identify the parameters: the "
                           "share equations do not change independently with each parameter")
    a_inv = np.linalg.inv(a)
    n_resid = t_obs * m
    factor = n_resid / (n_resid - k)
    cov = factor * a_inv @ b @ a_inv
    cov = 0.5 * (cov + cov.T)
    wts = panel.weights / panel.weights.sum()
    r2: list[float | None] = []
    for i in range(n):
        centred = panel.shares[:, i] - wts @ panel.shares[:, i]
        total = float(wts @ centred**2)
        r2.append(None if total <= 0.0 else 1.0 - float(wts @ resid[:, i] ** 2) / total)
    return SystemFit(
        theta=theta, covariance=cov, weighting=weighting,
        residual_covariance=_weighted_covariance(resid[:, :m], panel.weights),
        fitted=fitted, residuals=resid, r_squared=tuple(r2), iterations=iterations,
        n_obs=t_obs, n_equations=m, n_parameters=k, df_resid=t_obs - k / m,
        small_sample_factor=factor,
    )


def collinear_columns(columns: Matrix, names: Sequence[str], weights: Vector) -> list[str] | None:
    """Names of the columns in a near-exact linear dependence, or ``None`` when there is none.

    Columns are scaled to unit weighted length first, so units do not matter; a singular value
    below 1e-9 of the largest counts as a dependence (common practice for rank decisions). A
    column of zeros is a dependence by itself.
    """
    x = columns * np.sqrt(weights / weights.sum())[:, None]
    norms = np.linalg.norm(x, axis=0)
    zero = np.flatnonzero(norms <= 1e-12 * max(1.0, float(norms.max(initial=0.0))))
    if zero.size:
        return [names[int(zero[0])]]
    x = x / norms
    _, s, vt = np.linalg.svd(x, full_matrices=False)
    if s[-1] > 1e-9 * s[0]:
        return None
    v = np.abs(vt[-1])
    return [names[int(j)] for j in np.flatnonzero(v > 0.05 * v.max())]
