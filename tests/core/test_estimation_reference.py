"""Our linear demand-system estimates, standard errors, intervals, Wald tests and delta-method
errors against statsmodels as the reference library, on the same regressions.

statsmodels is a test-only dependency: the service does its own least squares (numpy/scipy).
Each regression is built here from its published form, independently of the service's own design
matrices: the linear approximate AIDS of Deaton and Muellbauer (1980; eq. 12, number recalled
from memory), with Stone's price index.
"""

from __future__ import annotations

import numpy as np
import pytest
from numpy.testing import assert_allclose

from dualcost.core.elasticities import elasticity_table
from dualcost.core.estimation import Panel, fit
from dualcost.core.preferences.aids import AIDS

sm = pytest.importorskip("statsmodels.api")

ITEMS = ["rye_loaf", "peat_briquettes", "ferry_pass", "flat_rent"]
N = len(ITEMS)
M = N - 1


def _panel(seed: int, t_obs: int = 90, weighted: bool = True) -> Panel:
    """Shares from a symmetric AIDS at random prices and incomes, with heteroskedastic noise
    that sums to zero across items; survey weights between 0.5 and 3."""
    rng = np.random.default_rng(seed)
    alpha = np.array([0.25, 0.15, 0.2, 0.4])
    beta = np.array([-0.04, 0.01, 0.02, 0.01])
    gamma = np.array([[0.06, -0.02, -0.01, -0.03], [-0.02, 0.05, -0.02, -0.01],
                      [-0.01, -0.02, 0.04, -0.01], [-0.03, -0.01, -0.01, 0.05]])
    model = AIDS(alpha, gamma, beta, 0.0, 1.0)
    lp = rng.normal(0.0, 0.3, (t_obs, N))
    lm = rng.normal(1.5, 0.5, t_obs)
    w = np.array([model.budget_shares(np.exp(lp[t]), float(np.exp(lm[t]))) for t in range(t_obs)])
    noise = rng.normal(0.0, 0.01, (t_obs, N)) * (1.0 + np.abs(lm - 1.5))[:, None]
    noise -= noise.mean(axis=1, keepdims=True)
    weights = rng.uniform(0.5, 3.0, t_obs) if weighted else None
    return Panel.checked(np.exp(lp), w + noise, np.exp(lm), weights)


def _stone_income(panel: Panel) -> np.ndarray:
    return panel.log_expenditure - np.sum(panel.shares * panel.log_prices, axis=1)


def _table(result):  # type: ignore[no-untyped-def]
    return {p.label.text(ITEMS): p for p in result.parameters}


def _eq_names(i: int, columns: list[str]) -> list[str]:
    return [f"alpha[{ITEMS[i]}]"] + [f"gamma[{ITEMS[i]},{c}]" for c in columns] + [
        f"beta[{ITEMS[i]}]"]


@pytest.mark.parametrize("weighted", [False, True])
def test_unrestricted_linear_aids_equals_statsmodels_wls_hc1(weighted: bool) -> None:
    """Unrestricted LA-AIDS: each equation is its own WLS regression on (1, ln p, ln m - ln P*);
    estimates, HC1 standard errors (MacKinnon and White 1985) and 95% t intervals equal
    statsmodels' WLS(cov_type='HC1', use_t=True) to 1e-8 -- the dropped last equation's derived
    parameters too, whose errors come from the cross-equation (clustered) covariance."""
    panel = _panel(1, weighted=weighted)
    result = fit(panel, "aids", estimator="linear_approximate", restrictions="none")
    table = _table(result)
    x = np.column_stack([np.ones(panel.n_obs), panel.log_prices, _stone_income(panel)])
    for i in range(N):
        ref = sm.WLS(panel.shares[:, i], x, weights=panel.weights).fit(cov_type="HC1", use_t=True)
        ours = [table[name] for name in _eq_names(i, ITEMS)]
        assert_allclose([p.estimate for p in ours], ref.params, rtol=1e-8, atol=1e-12)
        assert_allclose([p.std_error for p in ours], ref.bse, rtol=1e-8, atol=1e-14)
        assert_allclose([[p.ci_low, p.ci_high] for p in ours], ref.conf_int(alpha=0.05),
                        rtol=1e-8, atol=1e-12)
        assert_allclose([p.p_value for p in ours], ref.pvalues, rtol=1e-6, atol=1e-300)
        assert_allclose(result.fit.r_squared[i], ref.rsquared, rtol=1e-8)


def test_homogeneity_restricted_equals_statsmodels_substituted_and_constrained_fits() -> None:
    """Homogeneity (sum_j gamma_ij = 0) imposed: equal to statsmodels' WLS of the substituted
    regression on ln(p_j / p_n) with HC1 errors, and to statsmodels' constrained fit
    (GLM.fit_constrained, Gaussian with the survey weights as variance weights) of the
    unrestricted regression, both to 1e-8."""
    panel = _panel(2)
    result = fit(panel, "aids", estimator="linear_approximate", restrictions="homogeneity")
    table = _table(result)
    lp = panel.log_prices
    income = _stone_income(panel)
    x_sub = np.column_stack([np.ones(panel.n_obs), lp[:, :M] - lp[:, M:], income])
    x_full = np.column_stack([np.ones(panel.n_obs), lp, income])
    constraint = (np.r_[0.0, np.ones(N), 0.0][None, :], np.zeros(1))
    for i in range(M):
        ref = sm.WLS(panel.shares[:, i], x_sub, weights=panel.weights).fit(cov_type="HC1")
        ours = [table[name] for name in _eq_names(i, ITEMS[:M])]
        assert_allclose([p.estimate for p in ours], ref.params, rtol=1e-8, atol=1e-12)
        assert_allclose([p.std_error for p in ours], ref.bse, rtol=1e-8, atol=1e-14)
        glm = sm.GLM(panel.shares[:, i], x_full, family=sm.families.Gaussian(),
                     var_weights=panel.weights).fit_constrained(constraint)
        full = [table[name] for name in _eq_names(i, ITEMS)]
        assert_allclose([p.estimate for p in full], glm.params, rtol=1e-8, atol=1e-12)


def _symmetric_stack(panel: Panel) -> tuple[np.ndarray, np.ndarray, list[str]]:
    """The stacked regression of the m equations with symmetric, homogeneous gamma: free
    parameters alpha_i, beta_i and gamma_ij (i <= j < n), each gamma_ij entering equation i on
    ln(p_j/p_n) and equation j on ln(p_i/p_n) (Deaton and Muellbauer 1980; restrictions and Stone
    index as in their eqs. 9-12, numbers from memory)."""
    t_obs = panel.n_obs
    lp = panel.log_prices
    rel = lp[:, :M] - lp[:, M:]
    income = _stone_income(panel)
    names = [f"alpha[{ITEMS[i]}]" for i in range(M)] + [f"beta[{ITEMS[i]}]" for i in range(M)]
    pairs = [(i, j) for i in range(M) for j in range(i, M)]
    names += [f"gamma[{ITEMS[i]},{ITEMS[j]}]" for i, j in pairs]
    z = np.zeros((t_obs, M, len(names)))
    for i in range(M):
        z[:, i, i] = 1.0
        z[:, i, M + i] = income
    for k, (i, j) in enumerate(pairs):
        z[:, i, 2 * M + k] += rel[:, j]
        if i != j:
            z[:, j, 2 * M + k] += rel[:, i]
    return z, panel.shares[:, :M], names


def test_symmetric_system_equals_statsmodels_on_the_transformed_stacked_regression() -> None:
    """Symmetry is a cross-equation restriction, so the equations are fitted jointly by iterated
    feasible GLS (Zellner 1962). Its last step is the stacked regression premultiplied by the
    inverse Cholesky factor of the weighting matrix S; statsmodels' WLS of that regression with
    errors clustered by observation (Liang and Zeger 1986; no small-sample correction, then our
    N/(N - K) factor, MacKinnon and White 1985) gives the same estimates and standard errors to
    1e-8. At convergence S is the weighted residual covariance at the estimate (the fixed point
    of the iteration)."""
    panel = _panel(3)
    result = fit(panel, "aids", estimator="linear_approximate", restrictions="symmetry")
    table = _table(result)
    z, y, names = _symmetric_stack(panel)
    chol = np.linalg.cholesky(result.fit.weighting)
    zs = np.linalg.solve(chol, z.transpose(1, 0, 2).reshape(M, -1)).reshape(M, panel.n_obs, -1)
    ys = np.linalg.solve(chol, y.T)
    x_stack = zs.transpose(1, 0, 2).reshape(panel.n_obs * M, -1)
    y_stack = ys.T.ravel()
    groups = np.repeat(np.arange(panel.n_obs), M)
    ref = sm.WLS(y_stack, x_stack, weights=np.repeat(panel.weights, M)).fit(
        cov_type="cluster", cov_kwds={"groups": groups, "use_correction": False})
    n_resid, k = panel.n_obs * M, len(names)
    assert_allclose([table[nm].estimate for nm in names], ref.params, rtol=1e-8, atol=1e-12)
    assert_allclose([table[nm].std_error for nm in names],
                    ref.bse * np.sqrt(n_resid / (n_resid - k)), rtol=1e-8)
    resid = y - np.einsum("tik,k->ti", z, ref.params)
    fixed_point = (resid * panel.weights[:, None]).T @ resid / panel.weights.sum()
    assert_allclose(result.fit.weighting, fixed_point, rtol=1e-6)


def test_wald_tests_equal_the_statistic_from_statsmodels_estimates_and_covariance() -> None:
    """The homogeneity and symmetry tests: W = r'(C V C')^-1 r (Wald 1943) with the unrestricted
    stacked regression's estimates and clustered covariance from statsmodels (scaled by
    N/(N - K)), computed by statsmodels' own wald_test; equal to 1e-8, with chi-squared
    p-values."""
    panel = _panel(4)
    result = fit(panel, "aids", estimator="linear_approximate", restrictions="none")
    t_obs = panel.n_obs
    x = np.column_stack([np.ones(t_obs), panel.log_prices, _stone_income(panel)])
    k_eq = x.shape[1]
    block = np.zeros((t_obs, M, M * k_eq))
    for i in range(M):
        block[:, i, i * k_eq:(i + 1) * k_eq] = x
    ref = sm.WLS(panel.shares[:, :M].ravel(), block.reshape(t_obs * M, -1),
                 weights=np.repeat(panel.weights, M)).fit(
        cov_type="cluster", cov_kwds={"groups": np.repeat(np.arange(t_obs), M),
                                      "use_correction": False})
    n_resid, k = t_obs * M, M * k_eq
    cov = ref.cov_params() * n_resid / (n_resid - k)

    def gamma(i: int, j: int) -> int:
        return i * k_eq + 1 + j

    rows = []
    for i in range(M):
        row = np.zeros(k)
        row[[gamma(i, j) for j in range(N)]] = 1.0
        rows.append(row)
    homogeneity = np.array(rows)
    for i in range(M):
        for j in range(i + 1, M):
            row = np.zeros(k)
            row[gamma(i, j)], row[gamma(j, i)] = 1.0, -1.0
            rows.append(row)
    symmetry = np.array(rows)
    tests = {t.hypothesis: t for t in result.tests}
    for name, c in (("homogeneity", homogeneity), ("symmetry", symmetry)):
        wald = ref.wald_test(c, cov_p=cov, use_f=False, scalar=True)
        assert_allclose(tests[name].statistic, float(wald.statistic), rtol=1e-8)
        assert_allclose(tests[name].p_value, float(wald.pvalue), rtol=1e-6)
        assert tests[name].df == c.shape[0]


def test_delta_method_errors_equal_statsmodels_nonlinear_delta_cov() -> None:
    """Delta-method standard errors of the AIDS elasticities (Oehlert 1992) equal statsmodels'
    NonlinearDeltaCov on the same function and covariance (its gradient by complex step, ours by
    central differences) to 1e-6 relative."""
    from statsmodels.stats._delta_method import NonlinearDeltaCov

    panel = _panel(5)
    result = fit(panel, "aids", restrictions="symmetry")
    system = result.system
    lp, lm = panel.mean_point()
    table = elasticity_table(system, result.theta, result.covariance, np.exp(lp), np.exp(lm))

    def func(theta: np.ndarray) -> np.ndarray:
        w, eta, marshallian = system.elasticities(theta, lp, lm)
        return np.concatenate([eta, marshallian.ravel(), (marshallian + np.outer(eta, w)).ravel()])

    ref = NonlinearDeltaCov(func, result.theta, result.covariance)
    ours = np.concatenate([table.expenditure_se, table.marshallian_se.ravel(),
                           table.hicksian_se.ravel()])
    assert_allclose(ours, ref.se_vectorized(), rtol=1e-6, atol=1e-12)
    assert_allclose(table.expenditure, func(result.theta)[:N], rtol=1e-12)
