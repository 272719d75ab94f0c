"""Intervals for the Konüs index and the substitution bias from the fitted parameters'
uncertainty (parametric bootstrap, Krinsky and Robb 1986)."""

from __future__ import annotations

import numpy as np
from numpy.testing import assert_allclose
from scipy import stats

from dualcost.core.comparison import compare
from dualcost.core.estimation import Panel, comparison_intervals, fit
from dualcost.core.estimation.ces import CESShares
from dualcost.core.preferences import BaseBudget, calibrate

P0 = np.array([1.0, 1.0, 1.0])
P1 = np.array([1.04, 1.30, 0.97])
SHARES0 = np.array([0.3, 0.25, 0.45])


def _ces_fit(sigma: float, seed: int, noise: float = 0.01):  # type: ignore[no-untyped-def]
    rng = np.random.default_rng(seed)
    lp = rng.normal(0.0, 0.3, (60, 3))
    lm = rng.normal(3.0, 0.3, 60)
    w = CESShares(3).shares(np.array([sigma, 0.2, -0.3]), lp, lm)
    e = rng.normal(0.0, noise, w.shape)
    e -= e.mean(axis=1, keepdims=True)
    return fit(Panel.checked(np.exp(lp), w + e, np.exp(lm)), "ces")


def _point(result):  # type: ignore[no-untyped-def]
    base = BaseBudget.from_shares(P0, SHARES0, 100.0)
    return base, compare(calibrate(result.family, base, result.spec), base, P1)


def _ces_konus(sigma: float) -> float:
    """K = (sum_i s_i r_i^(1 - sigma))^(1 / (1 - sigma)), the CES Konüs index in share form
    (Lloyd 1975; Moulton 1996)."""
    r = P1 / P0
    return float((SHARES0 @ r ** (1.0 - sigma)) ** (1.0 / (1.0 - sigma)))


def test_ces_konus_interval_is_the_closed_form_at_the_normal_quantiles_of_sigma() -> None:
    """For CES the Konüs index depends on sigma alone and falls as sigma rises (a power mean
    rises with its order; Hardy, Littlewood and Polya 1934), so the percentile interval of the
    draws is K at sigma_hat -/+ z se. With 2,000 draws the Monte Carlo error of a 2.5% quantile
    is about 0.06 standard errors of sigma: the endpoints lie within K(sigma_hat + (z +/- 0.25)
    se), and the Laspeyres bias interval is Laspeyres minus the same endpoints."""
    result = _ces_fit(0.6, seed=1)
    base, point = _point(result)
    ci = comparison_intervals(result, point, base, P1, options={}, draws=2000, seed=7)
    sigma = result.spec["sigma"]
    se = float(np.sqrt(result.covariance[0, 0]))
    z = float(stats.norm.ppf(0.975))
    konus = ci.konus["base"]
    assert_allclose(konus.estimate, _ces_konus(sigma), rtol=1e-12)
    assert _ces_konus(sigma + (z + 0.25) * se) < konus.low < _ces_konus(sigma + (z - 0.25) * se)
    assert _ces_konus(sigma - (z - 0.25) * se) < konus.high < _ces_konus(sigma - (z + 0.25) * se)
    laspeyres = float(SHARES0 @ (P1 / P0))
    bias = ci.bias_points["laspeyres"]
    assert_allclose([bias.low, bias.high], [100 * (laspeyres - konus.high),
                                            100 * (laspeyres - konus.low)], rtol=1e-9)
    assert ci.failed == 0 and ci.draws == 2000 and ci.seed == 7


def test_the_same_seed_gives_the_same_interval() -> None:
    result = _ces_fit(0.6, seed=2)
    base, point = _point(result)
    a = comparison_intervals(result, point, base, P1, options={}, draws=50, seed=3)
    b = comparison_intervals(result, point, base, P1, options={}, draws=50, seed=3)
    c = comparison_intervals(result, point, base, P1, options={}, draws=50, seed=4)
    assert a.konus == b.konus and a.bias_points == b.bias_points
    assert a.konus["base"].low != c.konus["base"].low


def test_draws_that_cannot_be_evaluated_are_counted_and_said() -> None:
    """A sigma estimated near zero with a wide interval: draws below zero have no CES cost
    function. They are counted and reported in a notice, never replaced."""
    result = _ces_fit(0.03, seed=3, noise=0.05)
    assert 0.0 <= result.spec["sigma"]
    base, point = _point(result)
    ci = comparison_intervals(result, point, base, P1, options={}, draws=200, seed=1)
    # About Phi(-sigma_hat / se) of the draws fall below zero (binomial error about 0.03 here).
    share_below = float(stats.norm.cdf(-result.theta[0] / np.sqrt(result.covariance[0, 0])))
    assert ci.failed > 0
    assert abs(ci.failed / 200 - share_below) < 0.1
    assert ci.notices[0].code == "draws_failed" and str(ci.failed) in ci.notices[0].message
