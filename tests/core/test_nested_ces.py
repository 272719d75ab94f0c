"""Checks of the nested CES family against published identities, closed forms and scipy.

Sources are named in each test's docstring. Every random draw is seeded.
"""

from __future__ import annotations

import copy
import math
from typing import Any

import numpy as np
import pytest
from numpy.testing import assert_allclose
from scipy.optimize import minimize
from scipy.special import softmax

from dualcost.core.errors import InvalidInput
from dualcost.core.preferences import FAMILIES, BaseBudget, calibrate
from dualcost.core.preferences.base import slutsky_notices
from dualcost.core.preferences.ces import CES
from dualcost.core.preferences.nested_ces import (
    FIT_TREE,
    MODEL_TREE,
    ItemIdTree,
    NestedCES,
    parse_tree,
)

from .numeric_helpers import central_derivative, central_jacobian, moved_prices, seeded_budget

# The example tree of the interface: 7 items, three levels.
TREE7: dict[str, Any] = {
    "sigma": 0.3,
    "children": [
        {"name": "food", "sigma": 1.5, "children": [0, 1, 2]},
        3,
        {
            "name": "transport",
            "sigma": 2.0,
            "children": [4, {"name": "fuel", "sigma": 0.5, "children": [5, 6]}],
        },
    ],
}


def budget(seed: int, n: int = 7) -> BaseBudget:
    """A seeded base budget, with the seven items of ``TREE7`` unless told."""
    return seeded_budget(seed, n)


def moved(seed: int, base: BaseBudget, spread: float = 0.6) -> np.ndarray:
    """Seeded prices moved from base, drawn from this module's own stream (seed + 1000)."""
    return moved_prices(seed, base, spread, offset=1000)


def with_sigmas(tree: dict[str, Any], sigma: float) -> dict[str, Any]:
    """The same tree with every group's sigma set to ``sigma``."""
    out = copy.deepcopy(tree)
    stack = [out]
    while stack:
        node = stack.pop()
        node["sigma"] = sigma
        stack.extend(c for c in node["children"] if isinstance(c, dict))
    return out


def model7(seed: int = 1) -> tuple[NestedCES, BaseBudget]:
    base = budget(seed)
    return NestedCES.calibrate(base, tree=TREE7), base


# -- duality, Shephard, Roy -------------------------------------------------------------------


@pytest.mark.parametrize("seed", [1, 2, 3])
def test_duality_identities(seed: int) -> None:
    """e(p, v(p, m)) = m, v(p, e(p, u)) = u, h(p, u) = x(p, e(p, u)), x(p, m) = h(p, v(p, m))
    (Mas-Colell, Whinston and Green 1995, 3.E and 3.G)."""
    model, base = model7(seed)
    p = moved(seed, base)
    m, u = 1.3 * base.expenditure, 0.8 * base.expenditure
    assert_allclose(model.expenditure(p, model.indirect_utility(p, m)), m, rtol=1e-13)
    assert_allclose(model.indirect_utility(p, model.expenditure(p, u)), u, rtol=1e-13)
    assert_allclose(model.hicksian(p, u), model.marshallian(p, model.expenditure(p, u)),
                    rtol=1e-13)
    assert_allclose(model.marshallian(p, m), model.hicksian(p, model.indirect_utility(p, m)),
                    rtol=1e-13)
    # Walras' law: demands exhaust income (MWG 2.E).
    assert_allclose(p @ model.marshallian(p, m), m, rtol=1e-13)


@pytest.mark.parametrize("seed", [1, 2])
def test_shephards_lemma(seed: int) -> None:
    """h(p, u) = grad_p e(p, u) by central differences (Shephard 1953; Mas-Colell, Whinston and
    Green 1995, 3.G.1)."""
    model, base = model7(seed)
    p, u = moved(seed, base), base.expenditure
    grad = central_jacobian(lambda q: model.expenditure(q, u), p, rel=1e-5)
    assert_allclose(model.hicksian(p, u), grad, rtol=1e-7)


@pytest.mark.parametrize("seed", [1, 2])
def test_roys_identity(seed: int) -> None:
    """x_i = -(dv/dp_i) / (dv/dm) by central differences (Roy 1947; Mas-Colell, Whinston and
    Green 1995, 3.G.4)."""
    model, base = model7(seed)
    p, m = moved(seed, base), 1.7 * base.expenditure
    dv_dm = central_derivative(lambda income: model.indirect_utility(p, income), m, rel=1e-5)
    x = -central_jacobian(lambda q: model.indirect_utility(q, m), p, rel=1e-5) / dv_dm
    assert_allclose(model.marshallian(p, m), x, rtol=1e-7)


# -- calibration and the direct utility ----------------------------------------------------------


@pytest.mark.parametrize("seed", [1, 2, 3])
def test_calibration_reproduces_base_bundle(seed: int) -> None:
    """x(p0, m0) = q0, e(p0, u) = u and u(q0) = m0: the calibrated share form (common practice,
    as for CES: Lloyd 1975; Moulton 1996)."""
    model, base = model7(seed)
    assert_allclose(model.marshallian(base.prices, base.expenditure), base.quantities, rtol=1e-12)
    assert_allclose(model.expenditure(base.prices, 3.0), 3.0, rtol=1e-14)
    assert_allclose(model.direct_utility(base.quantities), base.expenditure, rtol=1e-12)
    assert_allclose(model.budget_shares(base.prices), base.shares, rtol=1e-12)


@pytest.mark.parametrize("seed", [1, 2])
def test_direct_utility_is_dual(seed: int) -> None:
    """u(x(p, m)) = v(p, m), and no bundle on the budget plane does better (Mas-Colell, Whinston
    and Green 1995, 3.D: the indirect utility is the maximum of u on the budget set)."""
    model, base = model7(seed)
    p, m = moved(seed, base), 1.2 * base.expenditure
    best = model.direct_utility(model.marshallian(p, m))
    assert_allclose(best, model.indirect_utility(p, m), rtol=1e-12)
    rng = np.random.default_rng(seed)
    for _ in range(200):
        w = rng.dirichlet(np.ones(p.size))
        assert model.direct_utility(m * w / p) <= best * (1 + 1e-12)


def test_demand_maximises_utility_scipy() -> None:
    """The Marshallian demand equals the maximiser of u(x) on p . x = m found by
    scipy.optimize.minimize (BFGS over budget shares); the definition of demand (Mas-Colell,
    Whinston and Green 1995, 3.D.1)."""
    model, base = model7(4)
    p, m = moved(4, base), base.expenditure

    def loss(theta: np.ndarray) -> float:
        w = softmax(np.concatenate(([0.0], theta)))
        return -math.log(model.direct_utility(m * w / p))

    start = np.zeros(p.size - 1)
    result = minimize(loss, start, method="BFGS", options={"gtol": 1e-10})
    found = m * softmax(np.concatenate(([0.0], result.x))) / p
    assert_allclose(found, model.marshallian(p, m), rtol=1e-4)


# -- reductions to CES ---------------------------------------------------------------------------


@pytest.mark.parametrize("sigma", [0.0, 0.4, 1.0, 1.0 + 1e-9, 3.0, 40.0])
def test_one_level_tree_equals_ces(sigma: float) -> None:
    """A tree with one group is the CES family with the group's sigma (Sato 1967: nested CES
    reduces to CES with one level)."""
    base = budget(5, 6)
    nested = NestedCES.calibrate(base, tree={"sigma": sigma, "children": list(range(6))})
    flat = CES.calibrate(base, sigma=sigma)
    for k in range(3):
        p = moved(k, base, spread=1.0)
        assert_allclose(nested.expenditure(p, 2.0), flat.expenditure(p, 2.0), rtol=1e-12)
        assert_allclose(nested.marshallian(p, 50.0), flat.marshallian(p, 50.0), rtol=1e-12)
        assert_allclose(nested.hicksian(p, 50.0), flat.hicksian(p, 50.0), rtol=1e-12)
        x = nested.marshallian(p, 50.0)
        assert_allclose(nested.direct_utility(x), flat.direct_utility(x), rtol=1e-9)
    assert nested.substitution_elasticity == sigma


@pytest.mark.parametrize("sigma", [0.0, 0.5, 1.0, 2.5, 50.0])
def test_equal_sigmas_equal_flat_ces(sigma: float) -> None:
    """A tree whose groups all have the same sigma is flat CES with that sigma: a power mean of
    power means of one order over a partition is the power mean of the whole (Sato 1967;
    Hardy, Littlewood and Polya 1934, ch. II). sigma = 50 with wide price moves exercises the
    shifted evaluation for large sigma."""
    base = budget(6)
    nested = NestedCES.calibrate(base, tree=with_sigmas(TREE7, sigma))
    flat = CES.calibrate(base, sigma=sigma)
    for k in range(3):
        p = moved(k, base, spread=3.0)
        assert_allclose(nested.expenditure(p, 1.0), flat.expenditure(p, 1.0), rtol=1e-12)
        assert_allclose(nested.hicksian(p, 1.0), flat.hicksian(p, 1.0), rtol=1e-11, atol=1e-300)
    assert nested.substitution_elasticity == sigma


# -- separability: prices moving inside one group -----------------------------------------------


@pytest.mark.parametrize("seed", [1, 2, 3])
def test_price_change_inside_one_group(seed: int) -> None:
    """Only food prices move. Weak separability of the tree (Sato 1967; Gorman 1959) gives the
    food group's cost relative P as the CES index of the food items alone with food's sigma and
    within-food base shares, and the Konus index in closed form as the root's power mean of P
    and 1: K = (1 - S + S P^(1 - sigma_root))^(1 / (1 - sigma_root)), S = food's base share."""
    model, base = model7(seed)
    food = [0, 1, 2]
    p = base.prices.copy()
    p[food] = moved(seed, base)[food]
    sub = BaseBudget.from_quantities(base.prices[food], base.quantities[food])
    rel_food = CES.calibrate(sub, sigma=1.5).unit_cost(p[food])
    share = float(base.shares[food].sum())
    t = 1.0 - 0.3
    expected = (1.0 - share + share * rel_food**t) ** (1.0 / t)
    konus = model.expenditure(p, 1.0) / model.expenditure(base.prices, 1.0)
    assert_allclose(konus, expected, rtol=1e-13)
    groups = [g["path"] for g in model.groups()]
    assert_allclose(model.group_cost_relatives(p)[groups.index("all items > food")], rel_food,
                    rtol=1e-13)
    # Within food, relative demands are those of the food-only CES (two-stage budgeting).
    x = model.marshallian(p, base.expenditure)
    x_sub = CES.calibrate(sub, sigma=1.5).marshallian(p[food], 1.0)
    assert_allclose(x[food] / x[food].sum(), x_sub / x_sub.sum(), rtol=1e-12)


def test_uniform_change_inside_subgroup() -> None:
    """All fuel prices rise by the factor lam: fuel's relative is lam (a power mean is
    homogeneous of degree one), transport's is M_(1-2)(1, lam) with fuel's share in transport,
    and the Konus index is M_(1-0.3)(1, that) with transport's base share (Hardy, Littlewood and
    Polya 1934, ch. II)."""
    model, base = model7(7)
    lam = 1.37
    p = base.prices.copy()
    p[[5, 6]] *= lam
    s = base.shares
    fuel_in_transport = (s[5] + s[6]) / (s[4] + s[5] + s[6])
    transport = (1 - fuel_in_transport + fuel_in_transport * lam ** (1 - 2.0)) ** (1 / (1 - 2.0))
    st = s[4] + s[5] + s[6]
    expected = (1 - st + st * transport ** (1 - 0.3)) ** (1 / (1 - 0.3))
    assert_allclose(model.unit_cost(p), expected, rtol=1e-13)


# -- Slutsky ------------------------------------------------------------------------------------


@pytest.mark.parametrize("seed", [1, 2])
def test_slutsky_symmetric_negative_semidefinite(seed: int) -> None:
    """The Slutsky matrix is symmetric, negative semidefinite and S p = 0 (Mas-Colell, Whinston
    and Green 1995, 2.F.1, 2.F.3 and 3.G.2)."""
    model, base = model7(seed)
    p, m = moved(seed, base), base.expenditure
    s = model.slutsky_matrix(p, m)
    scaled = p[:, None] * s * p[None, :]
    scale = np.abs(scaled).max()
    assert_allclose(scaled, scaled.T, rtol=0, atol=1e-8 * scale)
    assert np.linalg.eigvalsh(0.5 * (scaled + scaled.T)).max() <= 1e-8 * scale
    assert_allclose(s @ p, 0.0, atol=1e-8 * np.abs(s).max() * p.max())
    assert slutsky_notices(s, p) == []
    assert model.regularity(p, m) == []


# -- sigma at 0 and 1 ---------------------------------------------------------------------------


@pytest.mark.parametrize(("exact", "near"), [(0.0, 1e-9), (1.0, 1.0 - 1e-9), (1.0, 1.0 + 1e-9)])
def test_sigma_limits_are_continuous(exact: float, near: float) -> None:
    """sigma = 0 (Leontief) and sigma = 1 (Cobb-Douglas) are the limits of the power mean of
    order 1 - sigma (Hardy, Littlewood and Polya 1934, ch. II): answers 1e-9 away differ by about
    1e-9, whichever group carries the limit."""
    base = budget(8)
    p = moved(8, base)
    for where in ("root", "fuel"):
        trees = []
        for sigma in (exact, near):
            tree = copy.deepcopy(TREE7)
            group = tree if where == "root" else tree["children"][2]["children"][1]
            group["sigma"] = sigma
            trees.append(NestedCES.calibrate(base, tree=tree))
        a, b = trees
        assert_allclose(a.expenditure(p, 1.0), b.expenditure(p, 1.0), rtol=1e-8)
        assert_allclose(a.budget_shares(p), b.budget_shares(p), rtol=1e-8)
        x = a.marshallian(p, 10.0)
        assert_allclose(a.direct_utility(x), b.direct_utility(x), rtol=1e-8)


# -- a very deep tree ---------------------------------------------------------------------------


def test_thousand_deep_chain() -> None:
    """A chain of 1,000 nested groups evaluates without RecursionError; with one sigma throughout
    it equals flat CES (Sato 1967; Hardy, Littlewood and Polya 1934, ch. II) and the base bundle
    is reproduced (calibrated share form, common practice)."""
    depth = 1000
    n = depth + 1
    base = budget(9, n)
    tree: dict[str, Any] = {"sigma": 0.6, "children": [n - 2, n - 1]}
    for k in range(n - 3, -1, -1):
        tree = {"sigma": 0.6, "children": [k, tree]}
    model = NestedCES.calibrate(base, tree=tree)
    assert len(model.groups()) == depth
    p = moved(9, base)
    flat = CES.calibrate(base, sigma=0.6)
    assert_allclose(model.expenditure(p, 1.0), flat.expenditure(p, 1.0), rtol=1e-11)
    assert_allclose(model.hicksian(p, 1.0), flat.hicksian(p, 1.0), rtol=1e-10)
    assert_allclose(model.marshallian(base.prices, base.expenditure), base.quantities, rtol=1e-11)
    assert_allclose(model.direct_utility(base.quantities), base.expenditure, rtol=1e-11)


# -- zero shares ---------------------------------------------------------------------------------


def test_zero_shares_contribute_nothing() -> None:
    """Items with zero base share, and a group all of whose items have zero base share, carry
    zero weight: the model equals the same tree without them on the remaining items (a zero
    weight drops out of a weighted power mean; Hardy, Littlewood and Polya 1934, ch. II)."""
    rng = np.random.default_rng(10)
    n = 9
    prices = rng.uniform(1.0, 5.0, n)
    quantities = rng.uniform(1.0, 10.0, n)
    quantities[[2, 7, 8]] = 0.0
    base = BaseBudget.from_quantities(prices, quantities)
    tree = copy.deepcopy(TREE7)
    tree["children"].append({"name": "unused", "sigma": 0.0, "children": [7, 8]})
    model = NestedCES.calibrate(base, tree=tree)
    kept = [0, 1, 3, 4, 5, 6]
    small = BaseBudget.from_quantities(prices[kept], quantities[kept])
    small_tree = {
        "sigma": 0.3,
        "children": [
            {"name": "food", "sigma": 1.5, "children": [0, 1]},
            2,
            {"name": "transport", "sigma": 2.0,
             "children": [3, {"name": "fuel", "sigma": 0.5, "children": [4, 5]}]},
        ],
    }
    reference = NestedCES.calibrate(small, tree=small_tree)
    p = moved(10, base, spread=2.0)
    assert_allclose(model.expenditure(p, 1.0), reference.expenditure(p[kept], 1.0), rtol=1e-13)
    x = model.marshallian(p, 20.0)
    assert np.all(np.isfinite(x))
    assert np.all(x[[2, 7, 8]] == 0.0)
    assert_allclose(x[kept], reference.marshallian(p[kept], 20.0), rtol=1e-13)
    assert np.all(np.isfinite(model.group_cost_relatives(p)))
    assert_allclose(model.direct_utility(x), reference.direct_utility(x[kept]), rtol=1e-12)
    unused = [g for g in model.groups() if g["name"] == "unused"][0]
    assert unused["base_share"] == 0.0


def test_zero_quantity_in_direct_utility() -> None:
    """A zero quantity of a used item: utility 0 under sigma <= 1 (the power mean of order
    <= 0 with a zero term is 0) and positive under sigma > 1 (Hardy, Littlewood and Polya 1934,
    ch. II)."""
    model, base = model7(11)
    x = base.quantities.copy()
    x[5] = 0.0  # fuel has sigma 0.5: fuel's index is 0, transport (sigma 2) survives
    assert 0.0 < model.direct_utility(x) < base.expenditure
    x = base.quantities.copy()
    x[3] = 0.0  # directly under the root, sigma 0.3
    assert model.direct_utility(x) == 0.0


# -- large sigma and extreme prices ------------------------------------------------------------


def test_large_sigma_no_overflow() -> None:
    """sigma = 200 and price moves of e^(+-5): finite answers, shares summing to one, and the
    Konus index between the smallest and largest group relative (a power mean lies between its
    extremes; Hardy, Littlewood and Polya 1934, ch. II)."""
    base = budget(12)
    tree = copy.deepcopy(TREE7)
    tree["children"][2]["sigma"] = 200.0
    tree["children"][0]["sigma"] = 150.0
    model = NestedCES.calibrate(base, tree=tree)
    p = moved(12, base, spread=5.0)
    w = model.budget_shares(p)
    assert np.all(np.isfinite(w))
    assert_allclose(w.sum(), 1.0, rtol=1e-13)
    rel = p / base.prices
    assert rel.min() <= model.unit_cost(p) <= rel.max()


# -- the tree rules -----------------------------------------------------------------------------


def _bad(tree: Any) -> InvalidInput:
    with pytest.raises(InvalidInput) as info:
        NestedCES.calibrate(budget(1), tree=tree)
    assert info.value.parameter == "tree"
    return info.value


def _edit(path: tuple[int, ...], **changes: Any) -> dict[str, Any]:
    """TREE7 with the group at ``path`` (child positions) updated."""
    tree = copy.deepcopy(TREE7)
    node = tree
    for k in path:
        node = node["children"][k]
    for key, value in changes.items():
        if value is _DROP:
            del node[key]
        else:
            node[key] = value
    return tree


_DROP = object()

# (tree, words the message must hold), one per rule; common practice for input checks.
TREE_RULES = [
    pytest.param(_edit((0,), children=[0, 1]), "item 2 is not in the tree", id="missing item"),
    pytest.param(_edit((0,), children=[0]), "items 1, 2 are not in the tree", id="missing items"),
    pytest.param(_edit((0,), children=[0, 1, 2, 3]), "item 3 appears twice", id="duplicate"),
    pytest.param(_edit((0,), children=[0, 1, 2, 9]), "'all items > food' lists item 9",
                 id="out of range"),
    pytest.param(_edit((0,), children=[0, 1, 2, -1]), "lists item -1", id="negative position"),
    pytest.param(_edit((2, 1), children=[]), "'all items > transport > fuel' has no children",
                 id="empty group"),
    pytest.param(_edit((0,), sigma=_DROP), "'all items > food' has no sigma", id="no sigma"),
    pytest.param(_edit((0,), sigma=-0.5), "'all items > food' has sigma -0.5", id="negative"),
    pytest.param(_edit((), sigma=math.nan), "'all items' has sigma nan", id="nan sigma"),
    pytest.param(_edit((0,), sigma=math.inf), "must be a finite number", id="inf sigma"),
    pytest.param(_edit((0,), sigma="1.5"), "not a number", id="text sigma"),
    pytest.param(_edit((2, 1), name="food"), "two groups are named 'food'", id="same names"),
    pytest.param(_edit((0,), name="all items"), "two groups are named 'all items'",
                 id="root name reused"),
    pytest.param(_edit((0,), name=""), "non-empty text", id="empty name"),
    pytest.param(_edit((0,), children=[0, 1, 2.0]), "neither an item position", id="float child"),
    pytest.param(_edit((0,), children=[0, 1, True]), "neither an item position", id="bool child"),
    pytest.param(_edit((0,), weights=[1, 2]), "unknown key(s) 'weights'", id="unknown key"),
    pytest.param(None, "is required", id="none"),
    pytest.param([0, 1, 2], "must be a group", id="not a group"),
]


@pytest.mark.parametrize(("tree", "words"), TREE_RULES)
def test_tree_rules(tree: Any, words: str) -> None:
    """Each rule of the tree raises InvalidInput('tree', ...) naming the group by its path
    (common practice)."""
    assert words in _bad(tree).rule


def test_unnamed_group_path_and_self_containing_group() -> None:
    """An unnamed group is named by its position in the error; a group inside itself is refused
    rather than looping (common practice)."""
    tree = {"sigma": 1.0, "children": [0, 1, 2, 3, 4, 5, {"sigma": -1, "children": [6]}]}
    assert "'all items > group #7'" in _bad(tree).rule
    loop: dict[str, Any] = {"sigma": 1.0, "children": [0, 1, 2, 3, 4, 5, 6]}
    loop["children"].append(loop)
    assert "more than once" in _bad(loop).rule


# -- where each error points ---------------------------------------------------------------------

IDS = {"a": 0, "b": 1, "c": 2, "d": 3}


def _group(*children: Any, **keys: Any) -> dict[str, Any]:
    return {"sigma": 0.5, **keys, "children": list(children)}


def _fit_group(*children: Any, **keys: Any) -> dict[str, Any]:
    return {**keys, "children": list(children)}


def _follow(tree: Any, path: tuple[int | str, ...]) -> Any:
    """The value at ``path`` in ``tree``, or ``_DROP`` when the last key is missing."""
    node = tree
    for k, step in enumerate(path):
        if isinstance(node, dict) and step not in node and k == len(path) - 1:
            return _DROP
        node = node[step]
    return node


# (form, tree with items by id, path of the error, words of its message, what is at the path);
# one per kind of mistake. Pointing at the offending place itself is common practice for
# input checks (as JSON Pointer does, RFC 6901).
TREE_PLACES = [
    pytest.param("model", ["a", "b", "c", "d"], (), "must be a group", ["a", "b", "c", "d"],
                 id="root not a group"),
    pytest.param("model", _group(_group("a", "b"), 2.5, "c", "d"), ("children", 1),
                 "neither an item id nor a group", 2.5, id="child not a group"),
    pytest.param("model", _group(_group("a", "b", colour="red"), "c", "d"),
                 ("children", 0, "colour"), "unknown key(s) 'colour'", "red", id="unknown key"),
    pytest.param("model", _group("a", "b", _group("c", sigma=-1.0), _group("d")),
                 ("children", 2, "sigma"), "'all items > group #3' has sigma -1",
                 -1.0, id="bad sigma"),
    pytest.param("model", _group("a", "b", {"children": ["c"]}, "d"),
                 ("children", 2, "sigma"), "'all items > group #3' has no sigma", _DROP,
                 id="missing sigma"),
    pytest.param("model", _group("a", "b", _group(), "c", "d"), ("children", 2, "children"),
                 "'all items > group #3' has no children", [], id="empty children"),
    pytest.param("model", _group(_group("a", "q"), "b", "c", "d"), ("children", 0, "children", 1),
                 "lists 'q', which is not an item id listed in items", "q", id="unknown item id"),
    pytest.param("model", _group(_group("a", "b"), "c", _group("d", "b")),
                 ("children", 0, "children", 1), "item 1 appears twice", "b", id="item twice"),
    pytest.param("model", _group(_group("a", "b"), "c"), (), "item 3 is not in the tree",
                 _group(_group("a", "b"), "c"), id="item missing"),
    pytest.param("model", _group(_group(_group(_group("a"), "b"), "c"), "d"),
                 ("children", 0, "children", 0, "children", 0),
                 "deeper than the limit of 3 levels", _group("a"), id="too deep"),
    pytest.param("model", _group(_group("a", "b", name="food"), _group("c", "d", name=" food")),
                 ("children", 0, "name"), "two groups are named 'food'", "food",
                 id="duplicate group name"),
    pytest.param("model", _group(_group("a", "b", name=""), "c", "d"), ("children", 0, "name"),
                 "non-empty text", "", id="empty name"),
    pytest.param("fit", _fit_group(_fit_group("a", "b", sigma=0.5), "c", "d"),
                 ("children", 0, "sigma"), "leave it out", 0.5, id="fit: sigma not allowed"),
    pytest.param("fit", _fit_group(_fit_group("a", "b"), _fit_group("c"), "d"),
                 ("children", 1, "children"), "'group 2' needs at least two children", ["c"],
                 id="fit: two children"),
    # A group's items are placed when the group is read, before its subgroups are.
    pytest.param("fit", _fit_group(_fit_group("a", "b"), "c", "d", "b"),
                 ("children", 0, "children", 1), "item 1 is listed twice (in 'all items' and "
                 "'group 1')", "b", id="fit: item twice"),
    pytest.param("fit", _fit_group(_fit_group("a", "b", name="group 2"), _fit_group("c", "d")),
                 ("children", 1), "two groups are named 'group 2'", _fit_group("c", "d"),
                 id="fit: stand-in name taken"),
]


@pytest.mark.parametrize(("form", "tree", "path", "words", "there"), TREE_PLACES)
def test_every_tree_error_points_at_the_offending_place(form: str, tree: Any, path: tuple,
                                                        words: str, there: Any) -> None:
    """Each error of the tree reader is InvalidInput('tree', ..., index=path), where ``path``
    leads from the tree as written to the mistake (a missing key: where it belongs), and its
    message keeps naming the group (common practice)."""
    spec = ItemIdTree(tree, IDS, max_depth=3)
    with pytest.raises(InvalidInput) as info:
        parse_tree(spec, 4, form=MODEL_TREE if form == "model" else FIT_TREE)
    assert info.value.parameter == "tree"
    assert info.value.index == path
    assert words in info.value.rule
    assert _follow(tree, path) == there


def test_children_that_are_not_a_list_are_refused_as_such() -> None:
    """An array of children is not a list of items and groups: refused with the group's rule,
    not with numpy's question about the truth of an array (common practice)."""
    for form in (MODEL_TREE, FIT_TREE):
        with pytest.raises(InvalidInput) as info:
            parse_tree({"sigma": 0.5, "children": np.arange(3)} if form is MODEL_TREE
                       else {"children": np.arange(3)}, 3, form=form)
        assert info.value.index == ("children",)


def test_tree_errors_read_as_places_in_the_tree() -> None:
    """The error's text names the place as a subscript of the tree (common practice)."""
    with pytest.raises(InvalidInput) as info:
        parse_tree({"sigma": 0.5, "children": [0, {"sigma": -2.0, "children": [1]}]}, 2)
    assert str(info.value).startswith("tree['children'][1]['sigma']: group 'all items > group #2'")
    with pytest.raises(InvalidInput) as info:
        parse_tree({"sigma": 0.5, "children": [0]}, 2)
    assert str(info.value).startswith("tree: item 1 is not in the tree")


def test_a_model_reports_its_groups_in_the_order_it_always_has() -> None:
    """A model's tree numbers its groups root first, then each group's subgroups together, groups
    reached from the last listed (the order of the service's answers, kept); a fit's grouping
    numbers them in listed order (invented example)."""
    tree = {"sigma": 0.5, "children": [
        {"name": "A", "sigma": 1.0, "children": [0, {"name": "C", "sigma": 2.0, "children": [1]}]},
        {"name": "B", "sigma": 1.5, "children": [{"name": "D", "sigma": 0.0, "children": [2]}, 3]},
    ]}
    assert parse_tree(tree, 4).labels == ("all items", "A", "B", "D", "C")
    grouping = {"children": [{"name": "A", "children": [0, {"name": "C", "children": [1, 4]}]},
                             {"name": "B", "children": [{"name": "D", "children": [2, 5]}, 3]}]}
    assert parse_tree(grouping, 6, form=FIT_TREE).labels == ("all items", "A", "C", "B", "D")
    model = NestedCES.calibrate(budget(3, 4), tree=tree)
    groups = model.groups()
    assert [g["name"] for g in groups] == ["all items", "A", "B", "D", "C"]
    assert [g["sigma"] for g in groups] == [0.5, 1.0, 1.5, 0.0, 2.0]
    assert [g["items"] for g in groups] == [[], [0], [3], [2], [1]]
    assert groups[4]["path"] == "all items > A > C"


# -- registry and reporting ---------------------------------------------------------------------


def test_registry_and_report() -> None:
    """The family is registered under 'nested_ces', takes 'tree' only, and reports its groups
    with base shares adding up (common practice)."""
    base = budget(13)
    assert FAMILIES["nested_ces"] is NestedCES
    model = calibrate("nested_ces", base, {"tree": TREE7})
    groups = model.parameters()["groups"]
    by_path = {g["path"]: g for g in groups}
    assert list(by_path) == [
        "all items", "all items > food", "all items > transport",
        "all items > transport > fuel",
    ]
    assert_allclose(by_path["all items"]["base_share"], 1.0, rtol=1e-14)
    assert_allclose(by_path["all items > transport"]["base_share"],
                    base.shares[[4, 5, 6]].sum(), rtol=1e-14)
    assert by_path["all items > transport"]["items"] == [4]
    assert model.substitution_elasticity is None
    with pytest.raises(InvalidInput) as info:
        calibrate("nested_ces", base, {"tree": TREE7, "sigma": 1.0})
    assert info.value.parameter == "sigma"
    with pytest.raises(InvalidInput) as info:
        calibrate("nested_ces", base, {})
    assert info.value.parameter == "tree"


def test_a_tree_naming_items_by_id_equals_the_tree_of_positions() -> None:
    """The service hands the core a tree with item ids (ItemIdTree); it must give the same model
    as the tree of positions."""
    from dualcost.core.preferences.nested_ces import ItemIdTree

    base = BaseBudget.from_quantities([1.0, 2.0, 4.0, 3.0], [10.0, 5.0, 2.0, 1.0])
    by_position = {"sigma": 0.5, "children": [{"name": "ab", "sigma": 1.7, "children": [0, 1]}, 2, 3]}
    by_id = {"sigma": 0.5, "children": [{"name": "ab", "sigma": 1.7, "children": ["a", "b"]}, "c", "d"]}
    ids = {"a": 0, "b": 1, "c": 2, "d": 3}
    p1 = np.array([1.3, 2.0, 3.6, 3.3])
    plain = calibrate("nested_ces", base, {"tree": by_position})
    named = calibrate("nested_ces", base, {"tree": ItemIdTree(by_id, ids)})
    assert named.unit_cost(p1) == plain.unit_cost(p1)
    assert named.groups() == plain.groups()


@pytest.mark.parametrize("tree,words", [
    ({"sigma": 0.5, "children": ["a", "z", "c"]}, "'z', which is not an item id listed in items"),
    ({"sigma": 0.5, "children": ["a", "b", 2]}, "2, which is neither an item id nor a group"),
    ({"sigma": 0.5, "children": ["a", "b", "a"]}, "item 0 appears twice"),
    ({"sigma": 0.5, "children": [{"sigma": 1, "children": [{"sigma": 1, "children": ["a"]}]},
                                 "b", "c"]}, "deeper than the limit of 2 levels"),
])
def test_a_tree_of_item_ids_is_checked(tree, words) -> None:
    from dualcost.core.preferences.nested_ces import ItemIdTree

    base = BaseBudget.from_quantities([1.0, 2.0, 4.0], [10.0, 5.0, 2.0])
    with pytest.raises(InvalidInput, match=words):
        calibrate("nested_ces", base, {"tree": ItemIdTree(tree, {"a": 0, "b": 1, "c": 2},
                                                          max_depth=2)})


def test_ids_are_not_items_without_their_positions() -> None:
    base = BaseBudget.from_quantities([1.0, 2.0], [10.0, 5.0])
    with pytest.raises(InvalidInput, match="neither an item position"):
        calibrate("nested_ces", base, {"tree": {"sigma": 0.5, "children": ["a", 1]}})


def test_at_the_calibration_prices_cost_is_one_and_shares_are_the_base_shares() -> None:
    """c(p0) = 1 and w(p0) = w0 hold exactly at the calibration point (calibrated share form,
    Sato 1967); just off it the general evaluation agrees."""
    base = BaseBudget.from_quantities([1.0, 2.0, 4.0, 3.0], [10.0, 5.0, 2.0, 1.0])
    tree = {"sigma": 0.5, "children": [{"sigma": 1.7, "children": [0, 1]},
                                       {"sigma": 0.0, "children": [2, 3]}]}
    model = calibrate("nested_ces", base, {"tree": tree})
    cost, shares = model.cost_and_shares(base.prices.copy())
    assert cost == 1.0
    assert np.array_equal(shares, base.shares)
    shares[0] = 99.0  # the caller's copy: the model is not changed
    assert model.cost_and_shares(base.prices)[1][0] == base.shares[0]
    near_cost, near_shares = model.cost_and_shares(base.prices * (1.0 + 1e-14))
    assert near_cost == pytest.approx(1.0 + 1e-14, rel=1e-13)
    assert_allclose(near_shares, base.shares, rtol=1e-12)
