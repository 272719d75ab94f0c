"""GEKS indices on Fisher and Törnqvist links: the all-pairs matrix against the bilateral
formulas, the GEKS definition, exact transitivity, and the rolling-window splices."""

from __future__ import annotations

import itertools

import numpy as np
import pytest
from numpy.testing import assert_allclose

from dualcost.core.errors import InvalidInput
from dualcost.core.indices import FORMULAS, IndexData
from dualcost.core.multilateral import bilateral_log_matrix, geks, rolling_geks


def panel(seed: int, n_t: int = 8, n: int = 6, holes: bool = True):
    rng = np.random.default_rng(seed)
    p = np.exp(np.cumsum(rng.normal(0.0, 0.1, (n_t, n)), axis=0))
    q = rng.uniform(0.2, 4.0, (n_t, n))
    priced = np.ones((n_t, n), dtype=bool)
    if holes:
        priced[:2, 0] = False  # arrives in period 2
        priced[5:, 1] = False  # leaves after period 4
        priced[3, 2] = False  # missing in period 3
    return np.where(priced, p, np.nan), np.where(priced, q, 0.0), priced


@pytest.mark.parametrize("link", ["fisher", "tornqvist"])
def test_pair_matrix_equals_the_bilateral_formula_on_matched_items(link: str) -> None:
    """G[s, t] = ln P(s, t), P the Fisher (1922) or Törnqvist (1936) index over the items priced
    in both periods (matched sample), as computed by the formula itself."""
    p, q, priced = panel(1)
    g = bilateral_log_matrix(p, q, priced, link)  # type: ignore[arg-type]
    for s, t in itertools.product(range(p.shape[0]), repeat=2):
        keep = priced[s] & priced[t]
        direct = FORMULAS[link].compute(IndexData(p[s, keep], p[t, keep], q[s, keep], q[t, keep]))
        assert_allclose(g[s, t], np.log(direct), rtol=1e-11, atol=1e-13, err_msg=f"{s},{t}")


@pytest.mark.parametrize("link", ["fisher", "tornqvist"])
def test_geks_equals_its_definition(link: str) -> None:
    """P_GEKS(s, t) = prod_k (P(s, k) P(k, t))^(1/T) (Gini 1931; Eltetö and Köves 1964; Szulc
    1964), computed here term by term from the bilateral formula."""
    p, q, priced = panel(2)
    n_t = p.shape[0]

    def bilateral(s: int, t: int) -> float:
        keep = priced[s] & priced[t]
        return float(FORMULAS[link].compute(IndexData(p[s, keep], p[t, keep], q[s, keep],
                                                      q[t, keep])))

    series = geks(bilateral_log_matrix(p, q, priced, link), base=0)  # type: ignore[arg-type]
    for t in range(n_t):
        expected = np.prod([bilateral(0, k) * bilateral(k, t) for k in range(n_t)]) ** (1 / n_t)
        assert_allclose(series[t], expected, rtol=1e-12)


@pytest.mark.parametrize("link", ["fisher", "tornqvist"])
def test_geks_is_transitive_exactly(link: str) -> None:
    """Transitivity (circularity, Fisher 1922): P(a, c) = P(a, b) P(b, c) for every a, b, c, to
    1e-12, which GEKS satisfies by construction (Eltetö and Köves 1964; Szulc 1964)."""
    p, q, priced = panel(3, n_t=10)
    g = bilateral_log_matrix(p, q, priced, link)  # type: ignore[arg-type]
    for a, b, c in itertools.product(range(10), repeat=3):
        assert_allclose(geks(g, a)[c], geks(g, a)[b] * geks(g, b)[c], rtol=1e-12)


def _window_geks(g: np.ndarray, lo: int, hi: int, s: int, t: int) -> float:
    """GEKS(s, t) within the window lo..hi, from its definition."""
    ks = range(lo, hi + 1)
    return float(np.exp(np.mean([g[s, k] + g[k, t] for k in ks])))


@pytest.mark.parametrize("splice", ["movement", "window", "half", "mean"])
def test_rolling_window_splices(splice: str) -> None:
    """Rolling-window GEKS (Ivancic, Diewert and Fox 2011): the first window as is, then each new
    period spliced on the published series by the movement splice (Ivancic, Diewert and Fox
    2011), window splice (Krsinich 2016), half splice (de Haan 2015) or mean splice (Diewert and
    Fox 2018; these three attributions from memory), each written out here from its definition."""
    p, q, priced = panel(4, n_t=11)
    g = bilateral_log_matrix(p, q, priced, "fisher")
    w = 5
    out = rolling_geks(g, w, splice)  # type: ignore[arg-type]
    expected = [_window_geks(g, 0, w - 1, 0, t) for t in range(w)]
    for t in range(w, 11):
        lo = t - w + 1
        if splice == "movement":
            value = expected[t - 1] * _window_geks(g, lo, t, t - 1, t)
        elif splice == "window":
            value = expected[lo] * _window_geks(g, lo, t, lo, t)
        elif splice == "half":
            k = t - (w - 1) // 2
            value = expected[k] * _window_geks(g, lo, t, k, t)
        else:
            value = float(np.prod([expected[k] * _window_geks(g, lo, t, k, t)
                                   for k in range(lo, t)]) ** (1 / (w - 1)))
        expected.append(value)
    assert_allclose(out, expected, rtol=1e-12)


def test_window_covering_the_panel_is_the_full_geks() -> None:
    """A window as long as the panel has nothing to splice (Ivancic, Diewert and Fox 2011)."""
    p, q, priced = panel(5)
    g = bilateral_log_matrix(p, q, priced, "tornqvist")
    assert_allclose(rolling_geks(g, 8, "movement"), geks(g), rtol=1e-14)


def test_proportional_prices_give_the_factor() -> None:
    """Proportionality (CPI Manual 2004, ch. 16): if all prices of t are lambda times those of
    period 0, every bilateral link and so GEKS is lambda."""
    rng = np.random.default_rng(6)
    lam = np.array([1.0, 1.1, 0.9, 1.3, 1.25])
    p = lam[:, None] * rng.uniform(1, 3, 4)[None, :]
    q = rng.uniform(1, 3, (5, 4))
    for link in ("fisher", "tornqvist"):
        g = bilateral_log_matrix(p, q, np.ones_like(p, dtype=bool), link)  # type: ignore[arg-type]
        assert_allclose(geks(g), lam, rtol=1e-13)


def test_periods_without_a_common_item_are_named() -> None:
    p = np.array([[1.0, np.nan], [np.nan, 2.0]])
    q = np.array([[1.0, 0.0], [0.0, 1.0]])
    with pytest.raises(InvalidInput) as info:
        bilateral_log_matrix(p, q, ~np.isnan(p), "fisher", ["2025-01", "2025-02"])
    assert "'2025-01' and '2025-02'" in info.value.rule
