"""AIDS and QUAIDS share equations for estimation, with their restrictions and tests.

Budget shares (Deaton and Muellbauer 1980, "An almost ideal demand system", AER 70(3);
Banks, Blundell and Lewbel 1997, "Quadratic Engel curves and consumer demand", REStat 79(4);
the equation numbers cited below are recalled from memory):

    w_i = alpha_i + sum_j gamma_ij ln p_j + beta_i y + (lambda_i / b(p)) y^2,
    y = ln m - ln a(p),   ln a(p) = alpha0 + alpha . ln p + 1/2 ln p' gamma ln p,
    b(p) = prod_k p_k^(beta_k),

with ``lambda = 0`` for AIDS. ``alpha0`` is fixed, not estimated (it is poorly determined by
the data; common practice fixes it in advance). Two estimators:

- ``nonlinear``: the equations above, by iterated nonlinear least squares
  (``scipy.optimize.least_squares``; see :mod:`.system`), started from the linear version.
- ``linear_approximate`` (AIDS only): ``ln a(p)`` replaced by Stone's index
  ``ln P*_t = sum_k w_tk ln p_tk`` computed from each observation's own shares, which makes the
  equations linear in the parameters (Deaton and Muellbauer 1980, eq. 12; Stone 1954). The
  estimates are then read as the AIDS parameters, with ``alpha0`` as given, for elasticities,
  regularity and the comparison: an approximation, which the answer states.

Restrictions (Deaton and Muellbauer 1980, eqs. 9-11, as in preferences/aids.py). Adding-up is
always imposed (it holds in the data, so it is not tested): the last item's equation is dropped
and ``alpha_n = 1 - sum``, ``beta_n = -sum``, ``lambda_n = -sum`` and ``gamma_nj = -sum_i
gamma_ij`` follow. On request, homogeneity (``sum_j gamma_ij = 0``, by
substitution: ``gamma_in = -sum_{j<n} gamma_ij``) or symmetry (``gamma_ij = gamma_ji``, which
with adding-up brings homogeneity with it). ``price_terms = false`` fixes every ``gamma_ij`` at 0:
Engel curves only, for a cross-section observed at one set of prices (Working 1943; Leser 1963).

Tests: Wald statistics of homogeneity and of homogeneity with symmetry, from the unrestricted
fit with its robust covariance, ``W = r' (C V C')^{-1} r`` with ``r = C theta``, against the
chi-squared distribution with as many degrees of freedom as restrictions (Wald 1943; tested so
in demand systems since Deaton and Muellbauer 1980).

Elasticities at ``(p, m)`` (Banks, Blundell and Lewbel 1997, section on elasticities): with
``mu_i = beta_i + 2 lambda_i y / b(p)`` and
``mu_ij = gamma_ij - mu_i (alpha_j + sum_k gamma_jk ln p_k) - lambda_i beta_j y^2 / b(p)``,
expenditure ``eta_i = 1 + mu_i / w_i`` and Marshallian ``E_ij = mu_ij / w_i - delta_ij``.
"""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass
from typing import Any, ClassVar

import numpy as np
from scipy import stats

from ..errors import InvalidInput
from .panel import Panel
from .system import (
    Array3,
    FitOptions,
    Label,
    Matrix,
    ShareSystem,
    SystemFit,
    Vector,
    collinear_columns,
    first_step,
)

RESTRICTIONS = ("none", "homogeneity", "symmetry")
ESTIMATORS = ("nonlinear", "linear_approximate")
#: Each estimator's method, in words.
METHODS = {
    "nonlinear": "iterated nonlinear least squares on the AIDS (or QUAIDS) share equations",
    "linear_approximate": "least squares on the linear approximate AIDS with Stone's price index",
}


@dataclass(frozen=True)
class RestrictionTest:
    """A Wald test of linear restrictions on the unrestricted estimate."""

    hypothesis: str
    statistic: float
    df: int
    p_value: float
    imposed: bool


class AlmostIdealShares(ShareSystem):
    """AIDS or QUAIDS shares; ``theta`` holds ``alpha_i``, ``beta_i`` (and ``lambda_i``) of the
    first n - 1 items, then the free ``gamma_ij`` in row order."""

    family = "aids"
    takes = frozenset({"estimator", "restrictions", "price_terms", "alpha0", "quadratic"})
    estimator: str
    restrictions: str
    #: Whether the family always has the quadratic expenditure term (QUAIDS).
    always_quadratic: ClassVar[bool] = False

    @classmethod
    def from_options(cls, n_items: int, options: FitOptions) -> AlmostIdealShares:
        """Defaults: restrictions 'symmetry', the nonlinear estimator, price terms, alpha0 = 0."""
        options.refuse_all_but(cls.family, cls.takes)
        return cls(
            n_items, restrictions=options.restrictions or "symmetry",
            quadratic=options.quadratic or cls.always_quadratic,
            price_terms=True if options.price_terms is None else options.price_terms,
            estimator=options.estimator or "nonlinear",
            alpha0=0.0 if options.alpha0 is None else options.alpha0,
            item_names=options.item_names)

    def __init__(self, n_items: int, *, restrictions: str = "symmetry", quadratic: bool = False,
                 price_terms: bool = True, estimator: str = "nonlinear", alpha0: float = 0.0,
                 item_names: Sequence[str] | None = None) -> None:
        if restrictions not in RESTRICTIONS:
            raise InvalidInput("restrictions", f"must be one of {', '.join(RESTRICTIONS)}, got "
                               f"{restrictions!r}")
        if estimator not in ESTIMATORS:
            raise InvalidInput("estimator", f"must be one of {', '.join(ESTIMATORS)}, got "
                               f"{estimator!r}")
        if quadratic and estimator != "nonlinear":
            raise InvalidInput("estimator", "QUAIDS (a quadratic expenditure term) is fitted only "
                               "by the nonlinear estimator")
        if not np.isfinite(alpha0):
            raise InvalidInput("alpha0", "must be a finite number")
        n = n_items
        self.n_items = n
        self.family = "quaids" if quadratic else "aids"
        self.restrictions = restrictions
        self.quadratic = quadratic
        self.price_terms = price_terms
        self.estimator = estimator
        self.method = METHODS[estimator]
        self.linear = estimator == "linear_approximate"
        self.alpha0 = float(alpha0)
        self.item_names = list(item_names) if item_names is not None else [
            f"item {i}" for i in range(n)]
        m = n - 1
        if not price_terms:
            pairs: list[tuple[int, int]] = []
        elif restrictions == "none":
            pairs = [(i, j) for i in range(m) for j in range(n)]
        elif restrictions == "homogeneity":
            pairs = [(i, j) for i in range(m) for j in range(m)]
        else:
            pairs = [(i, j) for i in range(m) for j in range(i, m)]
        self._pairs = pairs
        symbols = ["alpha", "beta"] + (["lambda"] if quadratic else [])
        labels = [Label(s, (i,)) for s in symbols for i in range(m)]
        labels += [Label("gamma", pair) for pair in pairs]
        self.labels = tuple(labels)
        full = [Label(s, (i,)) for s in ("alpha", "beta") for i in range(n)]
        full += [Label("gamma", (i, j)) for i in range(n) for j in range(n)]
        full += [Label("lambda", (i,)) for i in range(n)] if quadratic else []
        self.full_labels = tuple(full)
        k = len(labels)
        c = self._complete(np.zeros(k))
        a = np.column_stack([self._complete(e) - c for e in np.eye(k)]) if k else np.zeros((c.size, 0))
        self.full_map = (a, c)
        # Rows of phi = A theta + c for each block, for the Jacobian and the design.
        self._a_alpha, self._a_beta = a[:n], a[n:2 * n]
        self._a_gamma = a[2 * n:2 * n + n * n].reshape(n, n, k)
        self._a_lambda = a[2 * n + n * n:] if quadratic else None

    # -- parameters ----------------------------------------------------------------------------
    def _complete(self, theta: Vector) -> Vector:
        """All parameters from the free ones, by adding-up and the restrictions asked."""
        n, m = self.n_items, self.n_items - 1
        q = 3 if self.quadratic else 2
        blocks = [np.append(theta[b * m:(b + 1) * m], 0.0) for b in range(q)]
        blocks[0][m] = 1.0 - blocks[0][:m].sum()
        for b in range(1, q):
            blocks[b][m] = -blocks[b][:m].sum()
        g = np.zeros((n, n))
        for (i, j), v in zip(self._pairs, theta[q * m:], strict=True):
            g[i, j] = v
            g[j, i] = v if self.restrictions == "symmetry" else g[j, i]
        if self.price_terms and self.restrictions != "none":
            g[:m, m] = -g[:m, :m].sum(axis=1)
        g[m, :] = -g[:m, :].sum(axis=0)
        parts = [blocks[0], blocks[1], g.ravel()] + ([blocks[2]] if self.quadratic else [])
        return np.concatenate(parts)

    def unpack(self, theta: Vector) -> tuple[Vector, Vector, Matrix, Vector]:
        """``(alpha, beta, gamma, lambda)`` for every item."""
        n = self.n_items
        phi = self.full(theta)
        lam = phi[2 * n + n * n:] if self.quadratic else np.zeros(n)
        return phi[:n], phi[n:2 * n], phi[2 * n:2 * n + n * n].reshape(n, n), lam

    def spec(self, theta: Vector) -> dict[str, Any]:
        alpha, beta, gamma, lam = self.unpack(theta)
        out: dict[str, Any] = {"alpha": alpha, "beta": beta, "gamma": gamma, "alpha0": self.alpha0}
        if self.quadratic:
            out["lambda"] = lam
        return out

    # -- shares --------------------------------------------------------------------------------
    def _pieces(self, theta: Vector, log_prices: Matrix, log_expenditure: Vector
                ) -> tuple[Vector, Vector, Matrix, Vector, Vector, Vector]:
        alpha, beta, gamma, lam = self.unpack(theta)
        sym = 0.5 * (gamma + gamma.T)
        log_a = self.alpha0 + log_prices @ alpha + 0.5 * np.sum((log_prices @ sym) * log_prices, 1)
        y = log_expenditure - log_a
        inv_b = np.exp(-(log_prices @ beta))
        return alpha, beta, gamma, lam, y, inv_b

    def shares(self, theta: Vector, log_prices: Matrix, log_expenditure: Vector) -> Matrix:
        """The exact AIDS/QUAIDS shares (also for the linear approximation's estimates)."""
        alpha, beta, gamma, lam, y, inv_b = self._pieces(theta, log_prices, log_expenditure)
        return (alpha + log_prices @ gamma.T + y[:, None] * beta
                + (y * y * inv_b)[:, None] * lam)

    def jacobian(self, theta: Vector, log_prices: Matrix, log_expenditure: Vector) -> Array3:
        """Analytic: with ``mu_i = beta_i + 2 lambda_i y / b``,
        ``dw_i/dalpha_k = delta_ik - mu_i ln p_k``,
        ``dw_i/dgamma_kl = delta_ik ln p_l - mu_i ln p_k ln p_l / 2``,
        ``dw_i/dbeta_k = delta_ik y - lambda_i (y^2 / b) ln p_k``,
        ``dw_i/dlambda_k = delta_ik y^2 / b``; then through ``phi = A theta + c``."""
        _, beta, _, lam, y, inv_b = self._pieces(theta, log_prices, log_expenditure)
        lp = log_prices
        mu = beta[None, :] + 2.0 * lam[None, :] * (y * inv_b)[:, None]
        y2b = y * y * inv_b
        a_alpha, a_beta, a_gamma = self._a_alpha, self._a_beta, self._a_gamma
        d_log_a = lp @ a_alpha + 0.5 * np.einsum("tk,tl,klq->tq", lp, lp, a_gamma)
        jac = a_alpha[None] + np.einsum("tl,ilq->tiq", lp, a_gamma) - mu[:, :, None] * d_log_a[:, None, :]
        jac = jac + y[:, None, None] * a_beta[None] - (lam[None, :, None] * y2b[:, None, None]) * (
            lp @ a_beta)[:, None, :]
        if self._a_lambda is not None:
            jac = jac + y2b[:, None, None] * self._a_lambda[None]
        return jac

    def stone_index_income(self, panel: Panel) -> Vector:
        """``ln m_t - ln P*_t`` with Stone's index ``ln P*_t = sum_k w_tk ln p_tk``."""
        return panel.log_expenditure - np.sum(panel.shares * panel.log_prices, axis=1)

    def design(self, panel: Panel) -> tuple[Array3, Matrix]:
        """The linear approximation: ``w_i = alpha_i + sum_j gamma_ij ln p_j + beta_i x_t``."""
        m = self.n_items - 1
        a, c = self.full_map
        n = self.n_items
        x = self.stone_index_income(panel)
        lp = panel.log_prices
        z = (self._a_alpha[None, :m] + np.einsum("tl,ilq->tiq", lp, self._a_gamma[:m])
             + x[:, None, None] * self._a_beta[None, :m])
        c_gamma = c[2 * n:2 * n + n * n].reshape(n, n)
        z0 = c[None, :m] + lp @ c_gamma[:m].T + x[:, None] * c[n:n + m][None]
        return z, z0

    def start(self, panel: Panel) -> Vector:
        """The linear approximation's estimate (lambda = 0), one least-squares step."""
        linear = AlmostIdealShares(
            self.n_items, restrictions=self.restrictions, quadratic=False,
            price_terms=self.price_terms, estimator="linear_approximate", alpha0=self.alpha0)
        theta = first_step(linear, panel)
        if not self.quadratic:
            return theta
        m = self.n_items - 1
        return np.concatenate([theta[:2 * m], np.zeros(m), theta[2 * m:]])

    # -- elasticities ----------------------------------------------------------------------------
    def elasticities(self, theta: Vector, log_prices: Vector, log_expenditure: float
                     ) -> tuple[Vector, Vector, Matrix]:
        alpha, beta, gamma, lam, y_arr, inv_b_arr = self._pieces(
            theta, log_prices[None, :], np.array([log_expenditure]))
        y, inv_b = y_arr[0], inv_b_arr[0]  # no float(): complex-step differentiation works
        w = alpha + gamma @ log_prices + beta * y + lam * (y * y * inv_b)
        mu = beta + 2.0 * lam * y * inv_b
        d_log_a = alpha + 0.5 * (gamma + gamma.T) @ log_prices
        mu_ij = gamma - np.outer(mu, d_log_a) - np.outer(lam, beta) * (y * y * inv_b)
        with np.errstate(divide="ignore", invalid="ignore"):
            eta = 1.0 + mu / w
            marshallian = mu_ij / w[:, None] - np.eye(self.n_items)
        return w, eta, marshallian

    # -- identification --------------------------------------------------------------------------
    def comparison_obstacle(self, theta: Vector) -> str | None:
        """Without homogeneity and symmetry no cost function gives these shares (Deaton and
        Muellbauer 1980, eqs. 9-11); with the price terms left out every gamma is 0 and both
        hold."""
        if self.restrictions != "symmetry" and self.price_terms:
            return (f"the {self.family} family in a comparison needs homogeneity and symmetry "
                    "(a cost function exists only then): fit with restrictions 'symmetry'")
        return None

    def check_identified(self, panel: Panel) -> None:
        names = self.item_names
        m = self.n_items - 1
        lp = panel.log_prices
        income = (self.stone_index_income(panel) if self.linear else panel.log_expenditure)
        cols = [np.ones(panel.n_obs)]
        labels = ["the constant"]
        if self.price_terms:
            if self.restrictions == "none":
                cols += [lp[:, j] for j in range(self.n_items)]
                labels += [f"ln p of {names[j]!r}" for j in range(self.n_items)]
            else:
                cols += [lp[:, j] - lp[:, m] for j in range(m)]
                labels += [f"ln p of {names[j]!r} relative to {names[m]!r}" for j in range(m)]
        cols.append(income)
        labels.append("log total expenditure")
        found = collinear_columns(np.column_stack(cols), labels, panel.weights)
        if found is None:
            return
        if found == ["log total expenditure"] or found == ["the constant", "log total expenditure"]:
            raise InvalidInput("expenditure", "total expenditure does not vary over the sample, so "
                               "the expenditure (income) effects cannot be estimated")
        hint = ("" if not self.price_terms else
                "; with one set of prices for every observation (a cross-section), set "
                "price_terms to false to fit Engel curves only")
        raise InvalidInput(
            "prices", f"collinear prices: {', '.join(found)} are linearly dependent over the "
            "sample, so their effects on the shares cannot be told apart; the fit needs prices "
            f"that move independently{hint}")


class QuadraticAlmostIdealShares(AlmostIdealShares):
    """QUAIDS: AIDS with the quadratic expenditure term always in (Banks, Blundell and Lewbel
    1997); asking for the term again is allowed."""

    family = "quaids"
    always_quadratic = True


def restriction_tests(unrestricted: AlmostIdealShares, fit: SystemFit,
                      imposed: str) -> tuple[RestrictionTest, ...]:
    """Wald tests of homogeneity, and of homogeneity with symmetry, on the unrestricted fit."""
    n, m = unrestricted.n_items, unrestricted.n_items - 1
    k = unrestricted.n_parameters
    offset = k - m * n
    position = {pair: offset + r for r, pair in enumerate(unrestricted._pairs)}
    homogeneity = []
    for i in range(m):
        row = np.zeros(k)
        row[[position[(i, j)] for j in range(n)]] = 1.0
        homogeneity.append(row)
    symmetry = []
    for i in range(m):
        for j in range(i + 1, m):
            row = np.zeros(k)
            row[position[(i, j)]] = 1.0
            row[position[(j, i)]] = -1.0
            symmetry.append(row)
    out = []
    for name, rows, on in (("homogeneity", homogeneity, imposed in ("homogeneity", "symmetry")),
                           ("symmetry", homogeneity + symmetry, imposed == "symmetry")):
        c = np.array(rows)
        stat = wald_statistic(c, fit.theta, fit.covariance)
        out.append(RestrictionTest(name, stat, len(rows), float(stats.chi2.sf(stat, len(rows))), on))
    return tuple(out)


def wald_statistic(c: Matrix, theta: Vector, covariance: Matrix) -> float:
    """``W = (C theta)' (C V C')^{-1} (C theta)`` (Wald 1943)."""
    r = c @ theta
    middle = c @ covariance @ c.T
    return float(r @ np.linalg.solve(middle, r))
