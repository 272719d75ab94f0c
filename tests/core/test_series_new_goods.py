"""Feenstra's (1994) CES new-goods adjustment against the Konüs index of a CES consumer whose
choice set changes, on data generated from CES preferences."""

from __future__ import annotations

import numpy as np
import pytest
from numpy.testing import assert_allclose

from dualcost.core.errors import InvalidInput
from dualcost.core.new_goods import feenstra
from dualcost.core.series import index_series
from dualcost.core.series_panel import Panel

SIGMA = 2.7


def ces_unit_cost(prices: np.ndarray, weights: np.ndarray, available: np.ndarray,
                  sigma: float = SIGMA) -> float:
    """c(p) = (sum_{i on sale} a_i p_i^(1-sigma))^(1/(1-sigma)): an item not on sale has an
    infinite (reservation) price and drops out of the sum when sigma > 1 (Feenstra 1994)."""
    terms = np.where(available, weights * np.where(available, prices, 1.0) ** (1 - sigma), 0.0)
    return float(np.sum(terms) ** (1 / (1 - sigma)))


def ces_demands(prices: np.ndarray, weights: np.ndarray, available: np.ndarray,
                income: float, sigma: float = SIGMA) -> np.ndarray:
    """Optimal CES quantities: x_i = m a_i p_i^(-sigma) / sum_j a_j p_j^(1-sigma) on the items on
    sale, 0 on the others (Arrow, Chenery, Minhas and Solow 1961)."""
    p = np.where(available, prices, 1.0)
    terms = np.where(available, weights * p ** (1 - sigma), 0.0)
    return np.where(available, income * terms / p / np.sum(terms), 0.0)


def two_periods(seed: int, new: bool):
    rng = np.random.default_rng(seed)
    n = 6
    a = rng.uniform(0.5, 2.0, n)
    p0, p1 = rng.uniform(1.0, 5.0, n), rng.uniform(1.0, 5.0, n)
    on0, on1 = np.ones(n, dtype=bool), np.ones(n, dtype=bool)
    (on0 if new else on1)[2] = False
    q0 = ces_demands(p0, a, on0, 100.0)
    q1 = ces_demands(p1, a, on1, 130.0)
    truth = ces_unit_cost(p1, a, on1) / ces_unit_cost(p0, a, on0)
    return p0, p1, q0, q1, on0, on1, truth


@pytest.mark.parametrize("new", [True, False], ids=["item_added", "item_removed"])
def test_feenstra_equals_the_ces_konus_index(new: bool) -> None:
    """Feenstra (1994), Proposition 1: for CES preferences with sigma > 1 the Sato-Vartia index
    over common items times (lambda_1/lambda_0)^(1/(sigma-1)) is the exact cost-of-living index
    when an item is added or removed; here to 1e-10 against c(p1)/c(p0) in closed form."""
    p0, p1, q0, q1, on0, on1, truth = two_periods(1 if new else 2, new)
    result = feenstra(p0, p1, q0, q1, on0, on1, SIGMA)
    assert_allclose(result.index, truth, rtol=1e-10)
    assert not result.common[2]
    if new:
        assert result.common_share_current < 1.0 and result.common_share_base == 1.0
        assert result.index < result.sato_vartia_common  # a new item lowers the index
    else:
        assert result.common_share_base < 1.0 and result.common_share_current == 1.0
        assert result.index > result.sato_vartia_common


def test_without_new_or_lost_items_it_is_sato_vartia() -> None:
    """With the same items in both periods lambda_0 = lambda_1 = 1 and the index is Sato-Vartia,
    itself exact for CES (Sato 1976; Vartia 1976)."""
    rng = np.random.default_rng(3)
    a = rng.uniform(0.5, 2.0, 5)
    on = np.ones(5, dtype=bool)
    p0, p1 = rng.uniform(1.0, 5.0, 5), rng.uniform(1.0, 5.0, 5)
    result = feenstra(p0, p1, ces_demands(p0, a, on, 50.0), ces_demands(p1, a, on, 60.0), on, on,
                      SIGMA)
    assert_allclose(result.index, result.sato_vartia_common, rtol=1e-15)
    assert_allclose(result.index, ces_unit_cost(p1, a, on) / ces_unit_cost(p0, a, on), rtol=1e-10)


def test_feenstra_series_over_a_panel_follows_the_ces_consumer() -> None:
    """Over a CES panel where one item arrives late and one leaves early, the fixed-base and
    the chained Feenstra series both equal c(p_t)/c(p_b) with each period's choice set, to
    1e-10 (Feenstra 1994; the exact CES index is transitive, so chaining adds no drift)."""
    rng = np.random.default_rng(4)
    n_t, n = 10, 7
    a = rng.uniform(0.5, 2.0, n)
    p = np.exp(np.cumsum(rng.normal(0.0, 0.1, (n_t, n)), axis=0))
    on = np.ones((n_t, n), dtype=bool)
    on[:4, 0] = False
    on[7:, 5] = False
    income = 100.0 * 1.02 ** np.arange(n_t)
    q = np.array([ces_demands(p[t], a, on[t], income[t]) for t in range(n_t)])
    panel = Panel.checked(np.where(on, p, np.nan), quantities=np.where(on, q, np.nan))
    result = index_series(panel, base=2, reference_value=1.0, formulas=["feenstra"],
                          new_goods_sigma=SIGMA)
    costs = np.array([ces_unit_cost(p[t], a, on[t]) for t in range(n_t)])
    truth = costs / costs[2]
    series = result.formulas["feenstra"]
    assert_allclose(series.fixed_base, truth, rtol=1e-10)
    assert_allclose(series.chained, truth, rtol=1e-10)


@pytest.mark.parametrize("sigma", [1.0, 0.5, float("nan")])
def test_elasticity_must_exceed_one(sigma: float) -> None:
    """The adjustment needs items that are not essential, sigma > 1 (Feenstra 1994)."""
    p0, p1, q0, q1, on0, on1, _ = two_periods(5, True)
    with pytest.raises(InvalidInput):
        feenstra(p0, p1, q0, q1, on0, on1, sigma)
