"""The axiomatic tests of index numbers, and the means the formulas are built from.

Index-number tests: Fisher (1922), *The Making of Index Numbers*; ILO, IMF, OECD, UNECE,
Eurostat and World Bank (2004), *Consumer Price Index Manual*, ch. 16 (the identity,
proportionality, homogeneity, quantity-scale, time reversal and factor reversal tests; named
there, not numbered here). Means: Carlson (1972), "The logarithmic mean",
American Mathematical Monthly 79; Hardy, Littlewood and Polya (1934), *Inequalities*, ch. II.

Property checks run with hypothesis, derandomised (a fixed sequence of 100 examples per test, no
example database), so every run sees the same data.
"""

from __future__ import annotations

from dataclasses import replace

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st
from numpy.testing import assert_allclose

from dualcost.core._means import log_mean, log_power_mean, power_mean_shares
from dualcost.core.indices import FORMULAS, IndexData, matched_sample

deterministic = settings(derandomize=True, max_examples=100, deadline=None, database=None)

RTOL = 1e-12

positive = st.floats(min_value=0.05, max_value=20.0, allow_nan=False, allow_infinity=False)
scale = st.floats(min_value=0.01, max_value=100.0, allow_nan=False, allow_infinity=False)
LLOYD_MOULTON_SIGMA = 0.7


@st.composite
def index_data(draw: st.DrawFn) -> IndexData:
    """Prices, quantities, an earlier basket and earlier shares for 1 to 7 items, all positive
    (the Sato-Vartia and Törnqvist formulas take logarithms of shares)."""
    n = draw(st.integers(min_value=1, max_value=7))
    vec = st.lists(positive, min_size=n, max_size=n).map(np.array)
    p0, p1, q0, q1, qb, wb = (draw(vec) for _ in range(6))
    return IndexData(p0, p1, q0, q1, weight_quantities=qb, weight_shares=wb / wb.sum(),
                     sigma=LLOYD_MOULTON_SIGMA)


def value(name: str, d: IndexData) -> float:
    return float(FORMULAS[name].compute(d))


def swapped(d: IndexData) -> IndexData:
    """The same comparison run backwards: periods 0 and 1 exchanged."""
    return replace(d, p0=d.p1, p1=d.p0, q0=d.q1, q1=d.q0)


def test_every_formula_is_covered() -> None:
    """The properties below loop over FORMULAS; this names the set they were written for, so a
    new formula is a deliberate addition here (common practice)."""
    assert set(FORMULAS) == {
        "laspeyres", "paasche", "fisher", "tornqvist", "walsh", "marshall_edgeworth",
        "sato_vartia", "geometric_laspeyres", "lloyd_moulton", "lowe", "young", "carli",
        "jevons", "dutot",
    }


# -- tests that every formula passes ----------------------------------------------------------


@deterministic
@given(index_data())
def test_identity(d: IndexData) -> None:
    """Identity test P(p, p, q0, q1) = 1 (Fisher 1922; CPI Manual 2004, ch. 16)."""
    same = replace(d, p1=d.p0.copy())
    for name in FORMULAS:
        assert_allclose(value(name, same), 1.0, rtol=RTOL, atol=0.0, err_msg=name)


@deterministic
@given(index_data(), scale)
def test_proportionality(d: IndexData, lam: float) -> None:
    """Proportionality test P(p0, lambda p0, q0, q1) = lambda (Fisher 1922; CPI Manual 2004,
    ch. 16)."""
    moved = replace(d, p1=lam * d.p0)
    for name in FORMULAS:
        assert_allclose(value(name, moved), lam, rtol=RTOL, atol=0.0, err_msg=name)


@deterministic
@given(index_data(), scale)
def test_homogeneous_of_degree_one_in_current_prices(d: IndexData, lam: float) -> None:
    """P(p0, lambda p1, q0, q1) = lambda P(p0, p1, q0, q1) (CPI Manual 2004, ch. 16)."""
    moved = replace(d, p1=lam * d.p1)
    for name in FORMULAS:
        assert_allclose(value(name, moved), lam * value(name, d), rtol=RTOL, atol=0.0,
                        err_msg=name)


@deterministic
@given(index_data(), scale)
def test_homogeneous_of_degree_zero_in_quantity_scale(d: IndexData, alpha: float) -> None:
    """Scaling all quantities (q0, q1 and the earlier basket qb) by one factor leaves every
    formula unchanged (CPI Manual 2004, ch. 16, the two quantity-scale tests applied together)."""
    qb = d.weight_quantities
    scaled = replace(d, q0=alpha * d.q0, q1=alpha * d.q1, weight_quantities=alpha * qb)
    for name in FORMULAS:
        assert_allclose(value(name, scaled), value(name, d), rtol=RTOL, atol=0.0, err_msg=name)


@deterministic
@given(index_data(), scale, scale)
def test_invariant_to_the_scale_of_each_period_quantities(
    d: IndexData, alpha: float, beta: float
) -> None:
    """Scaling q0 and q1 by different factors leaves the formula unchanged (CPI Manual 2004,
    ch. 16, invariance to proportional changes in base or current quantities), for every
    formula but Marshall-Edgeworth, which adds q0 to q1 (see
    ``test_marshall_edgeworth_depends_on_relative_quantity_scale``)."""
    scaled = replace(d, q0=alpha * d.q0, q1=beta * d.q1)
    for name in FORMULAS:
        if name == "marshall_edgeworth":
            continue
        assert_allclose(value(name, scaled), value(name, d), rtol=RTOL, atol=0.0, err_msg=name)


def test_marshall_edgeworth_depends_on_relative_quantity_scale() -> None:
    """A fixed counterexample: with q0 doubled the Marshall-Edgeworth weights q0 + q1 change
    (follows from the formula). p0 = (1, 1), p1 = (1, 2), q0 = (1, 0.5), q1 = (0.5, 1):
    P_ME = 4.5/3 = 1.5; with 2 q0 it is 6.5/4.5."""
    d = IndexData(np.array([1.0, 1.0]), np.array([1.0, 2.0]), np.array([1.0, 0.5]),
                  np.array([0.5, 1.0]))
    assert_allclose(value("marshall_edgeworth", d), 1.5, rtol=RTOL)
    assert_allclose(value("marshall_edgeworth", replace(d, q0=2.0 * d.q0)), 6.5 / 4.5, rtol=RTOL)


# -- items that come and go ----------------------------------------------------------------------


@deterministic
@given(index_data(), st.lists(st.booleans(), min_size=7, max_size=7))
def test_matched_sample_is_the_formula_over_the_matched_items_alone(
    d: IndexData, keep: list[bool]
) -> None:
    """Over a matched sample each formula equals the same formula over the matched items alone,
    the earlier shares rescaled to sum to one over them (the matched-sample rule; CPI Manual
    2004, ch. 20 for the unweighted formulas, ch. 15 for the basket ones)."""
    both = np.array(keep[: d.p0.size])
    both[0] = True  # at least one matched item
    over = matched_sample(d.p0, d.p1, d.q0, d.q1, both, weight_quantities=d.weight_quantities,
                          weight_shares=d.weight_shares, sigma=d.sigma)
    assert d.weight_shares is not None and d.weight_quantities is not None
    wb = d.weight_shares[both] / d.weight_shares[both].sum()
    alone = IndexData(d.p0[both], d.p1[both], d.q0[both], d.q1[both],
                      weight_quantities=d.weight_quantities[both], weight_shares=wb, sigma=d.sigma)
    for name in FORMULAS:
        assert_allclose(value(name, over), value(name, alone), rtol=1e-13, atol=0.0,
                        err_msg=name)


def test_sato_vartia_over_a_matched_sample_gives_a_zero_share_no_weight() -> None:
    """Where an item's share is zero in one period its logarithmic-mean weight L(w, 0) = 0 (the
    limit, Carlson 1972), so only the other items' relatives count, with weights
    L(w1_i, w0_i) = (w1_i - w0_i) / (ln w1_i - ln w0_i) normalised to sum to one (Sato 1976;
    Vartia 1976), worked out here by hand."""
    p0, p1 = np.array([1.0, 2.0, 4.0]), np.array([1.5, 2.2, 3.0])
    q0, q1 = np.array([2.0, 1.0, 0.0]), np.array([1.0, 3.0, 2.0])
    over = matched_sample(p0, p1, q0, q1, np.ones(3, dtype=bool))
    w0, w1 = p0 * q0 / (p0 @ q0), p1 * q1 / (p1 @ q1)
    lm = (w1[:2] - w0[:2]) / (np.log(w1[:2]) - np.log(w0[:2]))
    expected = np.exp(lm @ np.log(p1[:2] / p0[:2]) / lm.sum())
    assert_allclose(value("sato_vartia", over), expected, rtol=1e-14)


# -- time reversal ------------------------------------------------------------------------------

TIME_REVERSIBLE = ["fisher", "tornqvist", "walsh", "marshall_edgeworth", "sato_vartia", "jevons",
                   "dutot"]


@deterministic
@given(index_data())
def test_time_reversal_holds(d: IndexData) -> None:
    """P(p0, p1, q0, q1) P(p1, p0, q1, q0) = 1 for Fisher, Törnqvist, Walsh, Marshall-Edgeworth,
    Sato-Vartia, Jevons and Dutot (Fisher 1922; CPI Manual 2004, chs. 16 and 20)."""
    for name in TIME_REVERSIBLE:
        assert_allclose(value(name, d) * value(name, swapped(d)), 1.0, rtol=RTOL, atol=0.0,
                        err_msg=name)


# p0 = (1, 1), p1 = (1, 2), q0 = (1, 1), q1 = (2, 1): P_L = 3/2, P_P = 4/3, so
# P_L(0,1) P_L(1,0) = P_L / P_P = 9/8 and P_P(0,1) P_P(1,0) = 8/9; Carli: 3/2 * 3/4 = 9/8.
COUNTEREXAMPLE = IndexData(np.array([1.0, 1.0]), np.array([1.0, 2.0]), np.array([1.0, 1.0]),
                           np.array([2.0, 1.0]))


@pytest.mark.parametrize(
    ("name", "product"), [("laspeyres", 9.0 / 8.0), ("paasche", 8.0 / 9.0), ("carli", 9.0 / 8.0)]
)
def test_time_reversal_fails(name: str, product: float) -> None:
    """Laspeyres, Paasche and Carli fail time reversal (Fisher 1922; CPI Manual 2004, chs. 16
    and 20): a fixed counterexample with the product worked out by hand above."""
    forward_backward = value(name, COUNTEREXAMPLE) * value(name, swapped(COUNTEREXAMPLE))
    assert_allclose(forward_backward, product, rtol=RTOL)
    assert abs(forward_backward - 1.0) > 0.1


# -- factor reversal ------------------------------------------------------------------------------


@deterministic
@given(index_data())
def test_fisher_factor_reversal(d: IndexData) -> None:
    """P_F(p0, p1, q0, q1) Q_F = p1.q1 / p0.q0, with Q_F the Fisher quantity index (prices and
    quantities exchanged) (Fisher 1922; CPI Manual 2004, ch. 16)."""
    quantity_index = value("fisher", IndexData(d.q0, d.q1, d.p0, d.p1))
    assert_allclose(value("fisher", d) * quantity_index, (d.p1 @ d.q1) / (d.p0 @ d.q0),
                    rtol=RTOL, atol=0.0)


# -- the logarithmic mean -------------------------------------------------------------------------


@deterministic
@given(positive, positive)
def test_log_mean_symmetric_and_between_geometric_and_arithmetic(a: float, b: float) -> None:
    """L(a, b) = L(b, a) and sqrt(ab) <= L(a, b) <= (a + b)/2 (Carlson 1972)."""
    x, y = np.array(a), np.array(b)
    lm = float(log_mean(x, y))
    assert_allclose(lm, float(log_mean(y, x)), rtol=1e-14, atol=0.0)
    assert np.sqrt(a * b) * (1.0 - 1e-14) <= lm <= 0.5 * (a + b) * (1.0 + 1e-14)


@pytest.mark.parametrize("a", [1e-8, 0.3, 1.0, 7.5, 1e9])
def test_log_mean_of_equal_arguments_is_exact(a: float) -> None:
    """L(a, a) = a exactly (Carlson 1972, the continuous extension)."""
    assert float(log_mean(np.array(a), np.array(a))) == a


@pytest.mark.parametrize("y", [1e-15, 1e-12, 1e-9, 1e-6, 1e-3, -1e-9, -1e-3])
def test_log_mean_continuous_near_equal_arguments(y: float) -> None:
    """L(b e^y, b) = b (e^y - 1)/y = b (1 + y/2 + y^2/6 + y^3/24 + ...) (Carlson 1972): the
    engine keeps full accuracy as a approaches b instead of cancelling."""
    b = 3.7
    series = b * (1.0 + y / 2.0 + y**2 / 6.0 + y**3 / 24.0 + y**4 / 120.0)
    assert_allclose(float(log_mean(np.array(b * np.exp(y)), np.array(b))), series, rtol=4e-16 * 8)


# -- power means --------------------------------------------------------------------------------

weights_and_logs = st.integers(min_value=1, max_value=6).flatmap(
    lambda n: st.tuples(
        st.lists(st.floats(min_value=0.01, max_value=1.0), min_size=n, max_size=n),
        st.lists(st.floats(min_value=-3.0, max_value=3.0), min_size=n, max_size=n),
    )
)


def normalised(w: list[float]) -> np.ndarray:
    arr = np.array(w)
    return arr / arr.sum()


@deterministic
@given(weights_and_logs)
def test_power_mean_named_cases(data: tuple[list[float], list[float]]) -> None:
    """M_1 is the weighted arithmetic mean, M_0 the geometric and M_-1 the harmonic (Hardy,
    Littlewood and Polya 1934, ch. II)."""
    s, z = normalised(data[0]), np.array(data[1])
    r = np.exp(z)
    assert_allclose(np.exp(log_power_mean(z, s, 1.0)), s @ r, rtol=1e-13)
    assert_allclose(log_power_mean(z, s, 0.0), s @ z, rtol=1e-13, atol=1e-15)
    assert_allclose(np.exp(log_power_mean(z, s, -1.0)), 1.0 / (s @ (1.0 / r)), rtol=1e-13)


@deterministic
# Subnormal orders are left out: 1 - sigma is never subnormal, and there ln M_t keeps only about
# 1e-11 relative accuracy (the products t ln r carry few significant bits).
@given(weights_and_logs, st.floats(min_value=-20.0, max_value=20.0, allow_subnormal=False),
       st.floats(min_value=1e-3, max_value=5.0))
def test_power_mean_increasing_in_order(
    data: tuple[list[float], list[float]], t: float, dt: float
) -> None:
    """M_t <= M_(t + dt), and min r <= M_t <= max r (Hardy, Littlewood and Polya 1934,
    Theorems 1 and 16)."""
    s, z = normalised(data[0]), np.array(data[1])
    low, high = log_power_mean(z, s, t), log_power_mean(z, s, t + dt)
    assert low <= high + 1e-13
    assert z.min() - 1e-13 <= low <= z.max() + 1e-13


@pytest.mark.parametrize("t", [1e-15, 1e-12, 1e-9, -1e-12])
def test_power_mean_continuous_at_order_zero(t: float) -> None:
    """M_t tends to the geometric mean as t -> 0; ln M_t = sum s z + t Var_s(z)/2 + O(t^2)
    (Hardy, Littlewood and Polya 1934, ch. II): no cancellation near t = 0."""
    rng = np.random.default_rng(30)
    s, z = normalised(list(rng.uniform(0.1, 1.0, 5))), rng.uniform(-2.0, 2.0, 5)
    mean = s @ z
    expected = mean + 0.5 * t * (s @ (z - mean) ** 2)
    assert_allclose(log_power_mean(z, s, t), expected, rtol=1e-14, atol=1e-15)


@pytest.mark.parametrize("t", [-1e4, -50.0, 50.0, 1e4])
def test_power_mean_extreme_orders_finite(t: float) -> None:
    """For |t| large, M_t tends to max r (t > 0) or min r (t < 0) (Hardy, Littlewood and Polya
    1934, Theorem 4); relatives up to 1e3 either way must not overflow or warn."""
    rng = np.random.default_rng(31)
    s, z = normalised(list(rng.uniform(0.1, 1.0, 6))), rng.uniform(-np.log(1e3), np.log(1e3), 6)
    value_ = log_power_mean(z, s, t)
    shares = power_mean_shares(z, s, t)
    assert np.isfinite(value_) and np.all(np.isfinite(shares))
    limit = z.max() if t > 0 else z.min()
    # |ln M_t - limit| <= |ln s_limit| / |t|, with equality to rounding when the other terms
    # vanish.
    bound = abs(np.log(s[np.argmax(z) if t > 0 else np.argmin(z)])) / abs(t)
    assert abs(value_ - limit) <= bound * (1.0 + 1e-12) + 1e-14
    assert_allclose(shares.sum(), 1.0, rtol=1e-14)


@deterministic
@given(weights_and_logs, st.floats(min_value=-5.0, max_value=5.0))
def test_power_mean_shares_are_log_derivatives(
    data: tuple[list[float], list[float]], t: float
) -> None:
    """power_mean_shares = d ln M_t / d ln r_i (Hardy, Littlewood and Polya 1934, ch. II, by
    differentiation), against central differences with step 1e-6; they sum to one."""
    s, z = normalised(data[0]), np.array(data[1])
    shares = power_mean_shares(z, s, t)
    step = 1e-6
    numeric = np.empty(z.size)
    for i in range(z.size):
        up, down = z.copy(), z.copy()
        up[i] += step
        down[i] -= step
        numeric[i] = (log_power_mean(up, s, t) - log_power_mean(down, s, t)) / (2.0 * step)
    assert_allclose(shares, numeric, rtol=1e-6, atol=1e-8)
    assert_allclose(shares.sum(), 1.0, rtol=1e-14)
