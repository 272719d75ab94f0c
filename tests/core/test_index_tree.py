"""The index as a statistical office builds it (core/hierarchy.py, core/aggregation.py,
core/index_tree.py), checked against the definitions of the CPI Manual (ILO, IMF, OECD, UNECE,
Eurostat and World Bank 2004, ch. 9 and 20; the 2020 edition keeps the definitions; section
numbers from memory) on a hierarchy worked by hand in the tests, against the AM-GM inequality,
and against the service's own nested CES comparison."""

from __future__ import annotations

import math

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st
from numpy.testing import assert_allclose

from dualcost.core.aggregation import Link, Quotes, carli, dutot, jevons
from dualcost.core.comparison import compare_budgets
from dualcost.core.errors import InvalidInput
from dualcost.core.hierarchy import build_hierarchy, check_weights
from dualcost.core.index_tree import index_tree

NAN = math.nan
#: all > A > (a1: Jevons, a2: Carli); all > b: Dutot. Two quotes each.
NAMES = ["all", "A", "a1", "a2", "b"]
PARENTS = [None, "all", "A", "A", "all"]
FORMULAS = [None, None, "jevons", "carli", "dutot"]
#: Quotes over the periods w (weight reference), 0 (price reference) and 1.
PRICES = np.array([
    [1.8, 2.0, 3.0],    # a1
    [4.0, 4.0, 4.0],    # a1
    [1.0, 1.0, 1.2],    # a2
    [4.5, 5.0, 5.5],    # a2
    [10.0, 10.0, 12.0],  # b
    [18.0, 20.0, 21.0],  # b
])
OWNER = (2, 2, 3, 3, 4, 4)
PERIODS = ["w", "0", "1"]
WEIGHTS = [100.0, 50.0, 30.0, 20.0, 50.0]


def tree(sigmas: list[float | None] | None = None) -> object:
    return build_hierarchy(NAMES, PARENTS, formulas=FORMULAS, sigmas=sigmas or [None] * 5)


def quotes(units: tuple[str | None, ...] = ("kg",) * 6) -> Quotes:
    return Quotes(PRICES, OWNER, units)


def test_elementary_aggregates_follow_the_cpi_manual_definitions() -> None:
    """CPI Manual 2004, ch. 20 (from memory): Jevons the geometric mean of the relatives,
    Carli their arithmetic mean, Dutot the ratio of average prices; worked by hand."""
    r = index_tree(tree(), quotes(), [Link(1, WEIGHTS)], PERIODS, upper="young")
    jev = math.sqrt((3.0 / 2.0) * (4.0 / 4.0))
    car = (1.2 / 1.0 + 5.5 / 5.0) / 2
    dut = ((12.0 + 21.0) / 2) / ((10.0 + 20.0) / 2)
    assert_allclose(r.index[2:, 1], [jev, car, dut], rtol=1e-14)
    assert_allclose(r.index[:, 0], 1.0)


def test_upper_levels_are_young_and_lowe_as_defined() -> None:
    """Young: sum s^b I^{0:t}; Lowe: sum s^b I^{0:t}/I^{0:b} / sum s^b/I^{0:b}, the basket of b
    priced at 0 and t (CPI Manual 2004, 9.9-9.16 and 15.33-15.37; from memory), with the
    weight reference period w before the price reference period 0; worked by hand."""
    jev = math.sqrt(1.5)
    car = (1.2 + 1.1) / 2
    dut = 33.0 / 30.0
    # Each aggregate's index in w on 0, by its own formula.
    jev_w = math.sqrt((1.8 / 2.0) * 1.0)
    car_w = (1.0 + 4.5 / 5.0) / 2
    dut_w = 28.0 / 30.0
    s = {"a1": 0.3, "a2": 0.2, "b": 0.5}
    young = s["a1"] * jev + s["a2"] * car + s["b"] * dut
    young_a = (s["a1"] * jev + s["a2"] * car) / (s["a1"] + s["a2"])
    top = s["a1"] * jev / jev_w + s["a2"] * car / car_w + s["b"] * dut / dut_w
    bottom = s["a1"] / jev_w + s["a2"] / car_w + s["b"] / dut_w
    lowe = top / bottom
    lowe_a = (s["a1"] * jev / jev_w + s["a2"] * car / car_w) / (s["a1"] / jev_w + s["a2"] / car_w)
    link = Link(1, WEIGHTS, (0,))
    y = index_tree(tree(), quotes(), [link], PERIODS, upper="young")
    lo = index_tree(tree(), quotes(), [link], PERIODS, upper="lowe")
    assert_allclose([y.index[0, 1], y.index[1, 1]], [young, young_a], rtol=1e-14)
    assert_allclose([lo.index[0, 1], lo.index[1, 1]], [lowe, lowe_a], rtol=1e-14)
    # The price-updated shares as used: s^b / I^{0:b}, normalised.
    assert_allclose(lo.segments[0].used[4], s["b"] / dut_w / bottom, rtol=1e-14)


def test_an_upper_index_is_consistent_in_aggregation() -> None:
    """Lowe and Young computed level by level equal the same formula over the elementary
    aggregates directly (CPI Manual 2004, ch. 9; from memory)."""
    flat = build_hierarchy(["all", "a1", "a2", "b"], [None, "all", "all", "all"],
                           formulas=[None, "jevons", "carli", "dutot"], sigmas=[None] * 4)
    owner = (1, 1, 2, 2, 3, 3)
    for upper in ("lowe", "young"):
        deep = index_tree(tree(), quotes(), [Link(1, WEIGHTS, (0,))], PERIODS, upper=upper)
        shallow = index_tree(flat, Quotes(PRICES, owner, ("kg",) * 6),
                             [Link(1, [NAN, 30.0, 20.0, 50.0], (0,))], PERIODS, upper=upper)
        assert_allclose(deep.index[0], shallow.index[0], rtol=1e-14)


positive_prices = st.lists(st.floats(0.01, 1e4), min_size=1, max_size=12)


@settings(max_examples=200, deadline=None, derandomize=True, database=None)
@given(st.data())
def test_jevons_never_exceeds_carli(data: st.DataObject) -> None:
    """The geometric mean of the relatives is at most their arithmetic mean (the AM-GM
    inequality; CPI Manual 2004, 20.61, from memory), with equality when they are equal."""
    p0 = np.array(data.draw(positive_prices))
    p1 = np.array(data.draw(st.lists(st.floats(0.01, 1e4), min_size=p0.size,
                                     max_size=p0.size)))
    matched = np.ones(p0.size, dtype=bool)
    assert jevons(p0, p1, matched) <= carli(p0, p1, matched) * (1 + 1e-12)


@settings(max_examples=200, deadline=None, derandomize=True, database=None)
@given(st.data())
def test_dutot_depends_on_units_and_jevons_and_carli_do_not(data: st.DataObject) -> None:
    """Pricing one quote per a different quantity (its prices times k in both periods) leaves
    Jevons and Carli unchanged and moves Dutot, a price-weighted Carli with weights
    p0_j / sum p0 (CPI Manual 2004, 20.37-20.40; from memory): the failure of the commensurability
    test."""
    p0 = np.array(data.draw(st.lists(st.floats(0.1, 100.0), min_size=2, max_size=8)))
    p1 = np.array(data.draw(st.lists(st.floats(0.1, 100.0), min_size=p0.size,
                                     max_size=p0.size)))
    k = data.draw(st.floats(0.01, 100.0))
    matched = np.ones(p0.size, dtype=bool)
    scale = np.ones(p0.size)
    scale[0] = k
    q0, q1 = p0 * scale, p1 * scale
    assert_allclose(jevons(q0, q1, matched), jevons(p0, p1, matched), rtol=1e-12)
    assert_allclose(carli(q0, q1, matched), carli(p0, p1, matched), rtol=1e-12)
    weighted_carli = np.sum(q0 / np.sum(q0) * (p1 / p0))
    assert_allclose(dutot(q0, q1, matched), weighted_carli, rtol=1e-12)
    others = np.sum(p1[1:]) / np.sum(p0[1:])
    if abs(p1[0] / p0[0] - others) > 1e-3 * others and abs(k - 1.0) > 0.1:
        assert not math.isclose(dutot(q0, q1, matched), dutot(p0, p1, matched), rel_tol=1e-12)


def test_dutot_over_mixed_units_gets_a_notice() -> None:
    r = index_tree(tree(), quotes(("kg",) * 4 + ("kg", "l")), [Link(1, WEIGHTS)], PERIODS)
    assert any(n.code == "dutot_mixed_units" and "'all > b'" in n.message for n in r.notices)


def chain_example() -> tuple[object, Quotes, list[str]]:
    rng = np.random.default_rng(7)
    periods = [f"2025-{m:02d}" for m in range(1, 13)] + [f"2026-{m:02d}" for m in range(1, 7)]
    prices = np.exp(np.cumsum(rng.normal(0.005, 0.03, size=(6, len(periods))), axis=1))
    return tree([0.4, 0.8, 1.5, 0.5, 2.0]), Quotes(prices, OWNER, ("kg",) * 6), periods


def test_chain_linking_is_continuous_and_direct_within_each_segment() -> None:
    """Chain-linking at a month (CPI Manual 2004, 9.75-9.80; from memory): the linked series is
    continuous at the link, and within each segment it moves as that segment's direct index,
    computed here on its own from the link period with the segment's weights."""
    h, q, periods = chain_example()
    w2 = [NAN, 60.0, 35.0, 25.0, 40.0]
    links = [Link(3, WEIGHTS, (0, 1, 2)), Link(11, w2, tuple(range(0, 11)))]
    chained = index_tree(h, q, links, periods)
    at_link = 11 - 3
    second = index_tree(h, q, [links[1]], periods)
    first = index_tree(h, q, [links[0]], periods[:12])
    for series, direct in ((chained.index, second.index), (chained.konus, second.konus)):
        assert series is not None and direct is not None
        assert_allclose(series[:, at_link:] / series[:, [at_link]], direct, rtol=1e-12)
    assert_allclose(chained.index[:, : at_link + 1], first.index, rtol=1e-13)
    # Continuity: the level at the link is the first segment's, from both sides.
    assert_allclose(chained.segments[0].index[:, -1] * chained.segments[1].index[:, 0],
                    chained.index[:, at_link], rtol=1e-14)


def test_konus_on_a_tree_equals_the_nested_ces_comparison() -> None:
    """The Konüs index at the root equals the existing nested CES comparison
    (core.comparison.compare_budgets) on the same tree and prices, quotes as items with equal
    shares within each elementary aggregate; a group's equals the comparison of its own
    subtree (separability of nested CES; Sato 1967)."""
    sig = [0.4, 0.8, 1.5, 0.5, 2.0]
    r = index_tree(tree(sig), quotes(), [Link(1, WEIGHTS)], PERIODS)
    shares = np.array([0.15, 0.15, 0.1, 0.1, 0.25, 0.25])
    spec = {"sigma": 0.4, "children": [
        {"name": "A", "sigma": 0.8, "children": [{"name": "a1", "sigma": 1.5, "children": [0, 1]},
                                                 {"name": "a2", "sigma": 0.5, "children": [2, 3]}]},
        {"name": "b", "sigma": 2.0, "children": [4, 5]}]}
    whole, _ = compare_budgets("nested_ces", {"tree": spec}, PRICES[:, 1], PRICES[:, 2],
                               base_shares=shares, base_expenditure=100.0)
    assert r.konus is not None
    assert_allclose(r.konus[0, 1], whole.konus.base, rtol=1e-12)
    sub = {"sigma": 0.8, "children": [{"name": "a1", "sigma": 1.5, "children": [0, 1]},
                                      {"name": "a2", "sigma": 0.5, "children": [2, 3]}]}
    part, _ = compare_budgets("nested_ces", {"tree": sub}, PRICES[:4, 1], PRICES[:4, 2],
                              base_shares=shares[:4] / 0.5, base_expenditure=50.0)
    assert_allclose(r.konus[1, 1], part.konus.base, rtol=1e-12)


def test_weights_that_do_not_add_up_are_refused_naming_the_node_the_sum_and_the_tolerance() -> None:
    h = tree()
    with pytest.raises(InvalidInput) as caught:
        check_weights(h, [NAN, 52.0, 30.0, 20.0, 50.0])
    assert caught.value.index == (1,)
    assert "'all > A'" in caught.value.rule and "add up to 50" in caught.value.rule
    assert "tolerance 1e-06" in caught.value.rule
    scaled = check_weights(h, [NAN, 52.0, 30.0, 20.0, 50.0], normalise=True)
    assert [n.code for n in scaled.notices] == ["weights_normalised"]
    assert_allclose(scaled.shares[[2, 3, 4]], np.array([31.2, 20.8, 50.0]) / 102.0, rtol=1e-14)


@pytest.mark.parametrize(("names", "parents", "parameter", "words"), [
    (["all", "x", "x"], [None, "all", "all"], "name", "appears twice"),
    (["all", "x", "y"], [None, "y", "x"], "parent", "own ancestor"),
    (["all", "x"], [None, "nowhere"], "parent", "not a node"),
    (["all", "x"], [None, None], "parent", "exactly one root"),
])
def test_a_tree_that_is_not_a_tree_is_refused(names: list[str], parents: list[str | None],
                                             parameter: str, words: str) -> None:
    with pytest.raises(InvalidInput) as caught:
        build_hierarchy(names, parents, formulas=[None] * len(names), sigmas=[None] * len(names))
    assert caught.value.parameter == parameter and words in caught.value.rule


def test_an_aggregate_without_prices_in_a_period_is_refused_naming_it_and_the_period() -> None:
    prices = PRICES.copy()
    prices[4:, 2] = NAN
    with pytest.raises(InvalidInput) as caught:
        index_tree(tree(), Quotes(prices, OWNER, ("kg",) * 6), [Link(1, WEIGHTS)], PERIODS)
    assert caught.value.index == (4,) and "'all > b'" in caught.value.rule
    assert "'1'" in caught.value.rule


@pytest.mark.parametrize("sigma", [0.0, 0.5, 1.0, 1.0 + 1e-9, 3.0, 40.0])
def test_the_model_s_elementary_index_is_the_power_mean_of_the_matched_relatives(
        sigma: float) -> None:
    """Each aggregate's model index is the equal-weight power mean of order 1 - sigma of its
    matched quotes' relatives (the CES unit cost with equal shares; Hardy, Littlewood and Polya
    1934), checked against scipy.stats.pmean (scipy.stats.gmean at order 0) as reference
    library, including a quote left out in one period and orders where the terms span many
    powers of ten (the shifted evaluation)."""
    from scipy.stats import gmean, pmean

    from dualcost.core.aggregation import elementary_indices

    rng = np.random.default_rng(3)
    prices = rng.uniform(0.5, 2.0, size=(6, 4))
    prices[1, 3] = NAN
    sigmas = np.full(5, sigma)
    _, counts, model = elementary_indices(tree(), Quotes(prices, OWNER, (None,) * 6), 0,
                                          [0, 1, 2, 3], PERIODS + ["3"], sigmas)
    assert model is not None
    for e, rows in ((2, [0, 1]), (3, [2, 3]), (4, [4, 5])):
        for t in range(4):
            kept = [j for j in rows if np.isfinite(prices[j, t])]
            rel = prices[kept, t] / prices[kept, 0]
            order = 1.0 - sigma
            # Near order 0 scipy's pmean loses digits (rounding over the order); the mean there
            # is the geometric mean to within |order| times the spread of the logs.
            near_zero = abs(order) < 1e-6
            expected = gmean(rel) if near_zero else pmean(rel, order)
            assert counts[e, t] == len(kept)
            assert_allclose(model[e, t], expected, rtol=1e-8 if near_zero else 1e-12)


def jevons_tree(upper_sigmas: list[float]) -> object:
    """The worked tree with Jevons in every aggregate and the model's aggregates at sigma 1 (so
    each aggregate's model index is its Jevons index), the groups' sigmas as given."""
    return build_hierarchy(NAMES, PARENTS, formulas=[None, None, "jevons", "jevons", "jevons"],
                           sigmas=[*upper_sigmas, 1.0, 1.0, 1.0])


def test_with_cobb_douglas_groups_the_konus_index_is_the_weighted_geometric_mean() -> None:
    """At sigma 1 everywhere the Konüs index is the geometric mean of the aggregates' indices
    weighted by the base shares, exact for Cobb-Douglas preferences (Konüs and Byushgens 1926),
    and the Young (here Laspeyres-type) index is at least that (the weighted AM-GM inequality):
    worked by hand."""
    r = index_tree(jevons_tree([1.0, 1.0]), quotes(), [Link(1, WEIGHTS)], PERIODS, upper="young")
    jev = [math.sqrt(1.5), math.sqrt(1.2 * 1.1), math.sqrt(1.2 * 1.05)]
    expected = jev[0] ** 0.3 * jev[1] ** 0.2 * jev[2] ** 0.5
    assert r.konus is not None and r.bias_points is not None
    assert_allclose(r.konus[0, 1], expected, rtol=1e-13)
    assert_allclose(r.konus[1, 1], jev[0] ** 0.6 * jev[1] ** 0.4, rtol=1e-13)
    assert np.all(r.bias_points >= -1e-12)


@settings(max_examples=60, deadline=None, derandomize=True, database=None)
@given(st.lists(st.floats(0.0, 5.0), min_size=2, max_size=2),
       st.lists(st.floats(0.2, 5.0), min_size=6, max_size=6))
def test_the_index_on_base_weights_bounds_the_konus_index_at_every_group(
        sigmas: list[float], current: list[float]) -> None:
    """With weights of the price reference period, the Young index over Jevons aggregates is a
    Laspeyres index over the aggregates (whose model prices are their Jevons indices), so it is
    at least the Konüs index at base utility at every group, whatever the sigmas (Konüs 1924)."""
    prices = PRICES.copy()
    prices[:, 2] = current
    r = index_tree(jevons_tree(sigmas), Quotes(prices, OWNER, (None,) * 6), [Link(1, WEIGHTS)],
                   PERIODS, upper="young")
    assert r.konus is not None
    assert np.all(r.index[:, 1] >= r.konus[:, 1] * (1 - 1e-12))
