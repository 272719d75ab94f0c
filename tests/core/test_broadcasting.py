"""Every family's public methods broadcast over leading axes (periods, households).

The reference for the broadcasting rules is numpy itself: ``numpy.vectorize`` with a core
signature applies a scalar function element by element over broadcast leading axes (numpy as
reference library; the rules are those of numpy's broadcasting, "General broadcasting rules" in
the numpy manual). A model over T periods must give what the same model gives period by period;
a model calibrated to H households at once (``calibrate_many``) must give, at each household,
what that household's own model (``calibrate`` on its own budget) gives. Each draw is seeded.
"""

from __future__ import annotations

from collections.abc import Callable
from typing import Any

import numpy as np
import pytest
from numpy.testing import assert_allclose

from dualcost.core._means import log_power_mean, power_mean_shares
from dualcost.core.errors import InvalidInput
from dualcost.core.preferences import FAMILIES, BaseBudget, Preferences, calibrate
from dualcost.core.preferences.ces import CES

from .family_cases import CASE_IDS, CASES, aids_parameters, nested_ces_tree, random_budget

N_ITEMS, N_PERIODS, N_HOUSEHOLDS = 5, 3, 4


def _rng_budget(seed: int) -> tuple[np.random.Generator, BaseBudget]:
    rng = np.random.default_rng(seed)
    return rng, random_budget(rng, N_ITEMS)


def _prices(rng: np.random.Generator, p0: np.ndarray, *lead: int) -> np.ndarray:
    """Base prices each moved by a factor between exp(-0.4) and exp(0.4)."""
    return p0 * np.exp(rng.uniform(-0.4, 0.4, (*lead, p0.size)))


def _vectorised(method: Callable[..., Any], items: bool) -> Any:
    """numpy.vectorize over one price vector and one number (the reference)."""
    return np.vectorize(method, signature="(n),()->(n)" if items else "(n),()->()")


@pytest.mark.parametrize("case", CASES, ids=CASE_IDS)
def test_one_model_over_periods_equals_period_by_period(case: Any) -> None:
    """Prices (T, N) with utilities and incomes (T,): each period's result is the scalar call's,
    the element-by-element rule of numpy.vectorize (numpy as reference library)."""
    rng, base = _rng_budget(31)
    model = case.build(rng, base)
    p = _prices(rng, base.prices, N_PERIODS)
    m = np.array([model.income_floor(row) for row in p]) + base.expenditure * rng.uniform(
        0.8, 1.2, N_PERIODS)
    u = np.array([model.indirect_utility(p[t], float(m[t])) for t in range(N_PERIODS)])
    for name, number, items in (("expenditure", u, False), ("indirect_utility", m, False),
                                ("marshallian", m, True), ("hicksian", u, True)):
        method = getattr(model, name)
        expected = _vectorised(lambda pt, x, f=method: f(pt, float(x)), items)(p, number)
        assert_allclose(method(p, number), expected, rtol=1e-13, atol=0.0, err_msg=name)
    floors = np.array([model.income_floor(row) for row in p])
    assert_allclose(model.income_floor(p), floors, rtol=1e-13, atol=0.0)
    # A price vector against several numbers, and one number against several price vectors.
    assert_allclose(model.expenditure(p[0], u), [model.expenditure(p[0], float(x)) for x in u],
                    rtol=1e-13)
    assert_allclose(model.indirect_utility(p, float(m[0])),
                    [model.indirect_utility(row, float(m[0])) for row in p], rtol=1e-13)


def _batch_parameters(family: str, base: BaseBudget, rng: np.random.Generator) -> dict[str, Any]:
    """Parameters common to all households (the form a household batch takes)."""
    return {
        "cobb_douglas": {},
        "ces": {"sigma": 0.6},
        "nested_ces": {"tree": nested_ces_tree(base.n_items)},
        "stone_geary": {"frisch": -2.5},
        "translog": {"sigma": 0.6},
        "quadratic": {"sigma": 0.4},
        "aids": aids_parameters(rng, base),
        "quaids": aids_parameters(rng, base, quadratic=True),
        # Cobb-Douglas demands x_i = s_i m / p_i as a constant-elasticity system, and as a
        # utility formula (Cobb and Douglas 1928); both are evaluated numerically.
        "demand_system": {"form": "log_linear", "intercepts": np.log(base.shares),
                          "price_elasticities": -np.eye(base.n_items),
                          "income_elasticities": np.ones(base.n_items)},
        "utility_formula": {"utility_formula": " + ".join(
            f"{w:.3f}*log(x{i + 1})" for i, w in enumerate(base.shares))},
    }[family]


BATCH_FAMILIES = ["cobb_douglas", "ces", "nested_ces", "stone_geary", "translog", "quadratic",
                  "aids", "quaids", "demand_system", "utility_formula"]


def _households(rng: np.random.Generator, p0: np.ndarray) -> BaseBudget:
    shares = rng.dirichlet(np.full(p0.size, 3.0), N_HOUSEHOLDS)
    return BaseBudget.from_rows(p0, shares, rng.uniform(40.0, 120.0, N_HOUSEHOLDS))


@pytest.mark.parametrize("family", BATCH_FAMILIES)
def test_many_households_equal_each_household_alone(family: str) -> None:
    """A model calibrated to H households at once, at prices (T, H, N) and numbers (T, H), gives
    at [t, h] what household h's own model gives at its own prices and number (numpy.vectorize
    over the household's model as reference; numpy as reference library)."""
    rng, reference = _rng_budget(32)
    params = _batch_parameters(family, reference, rng)
    many = _households(rng, reference.prices)
    done = FAMILIES[family].calibrate_many(many, **params)
    assert done.refused == () and done.model.batch_shape == (N_HOUSEHOLDS,)
    assert done.model.broadcasts or not FAMILIES[family].broadcasts
    alone = [calibrate(family, many.row(h), params) for h in range(N_HOUSEHOLDS)]
    p = _prices(rng, many.prices, N_PERIODS, N_HOUSEHOLDS)
    m = many.expenditure * rng.uniform(0.9, 1.1, (N_PERIODS, N_HOUSEHOLDS))
    u = np.array([[alone[h].indirect_utility(p[t, h], float(m[t, h]))
                   for h in range(N_HOUSEHOLDS)] for t in range(N_PERIODS)])
    which = np.broadcast_to(np.arange(N_HOUSEHOLDS), (N_PERIODS, N_HOUSEHOLDS))
    for name, number, items in (("expenditure", u, False), ("indirect_utility", m, False),
                                ("marshallian", m, True), ("hicksian", u, True)):
        one = np.vectorize(lambda pt, x, h, n=name: getattr(alone[h], n)(pt, float(x)),
                           signature="(n),(),()->(n)" if items else "(n),(),()->()")
        assert_allclose(getattr(done.model, name)(p, number), one(p, number, which),
                        rtol=1e-12, atol=0.0, err_msg=name)
    # One price vector for every household broadcasts against the household axis.
    assert_allclose(done.model.indirect_utility(many.prices, many.expenditure),
                    [a.indirect_utility(many.prices, float(x))
                     for a, x in zip(alone, many.expenditure, strict=True)], rtol=1e-12)
    kept = done.model.take([2, 0])
    assert_allclose(kept.indirect_utility(p[0, [2, 0]], m[0, [2, 0]]),
                    [alone[2].indirect_utility(p[0, 2], float(m[0, 2])),
                     alone[0].indirect_utility(p[0, 0], float(m[0, 0]))], rtol=1e-12)


def test_scalar_calls_keep_their_types() -> None:
    """One price vector with one float gives a Python float (and a vector of demands), as the
    single comparison expects (common practice for a scalar API)."""
    rng, base = _rng_budget(33)
    for case in CASES:
        model = case.build(rng, base)
        u = model.indirect_utility(base.prices, base.expenditure)
        assert type(u) is float and type(model.expenditure(base.prices, u)) is float
        assert type(model.income_floor(base.prices)) is float
        assert model.marshallian(base.prices, base.expenditure).shape == (N_ITEMS,)
        # numpy scalars take the general path and come back as floats too.
        assert type(model.expenditure(base.prices, np.float64(u))) is float


def test_the_ces_calibration_point_is_evaluated_bit_for_bit() -> None:
    """At base prices the CES unit cost and shares come without a pass over the items; they are
    the general power-mean formulas' values there to the last bit (Hardy, Littlewood and Polya
    1934, ch. II: every relative is 1, so the power mean is 1)."""
    rng = np.random.default_rng(34)
    many = _households(rng, rng.uniform(1.0, 5.0, N_ITEMS))
    for sigma in (0.0, 0.4, 1.0, 2.5):
        for model in (CES.calibrate(many.row(0), sigma=sigma),
                      CES.calibrate_many(many, sigma=sigma).model):
            zero = model._log_relatives(many.prices)
            t = 1.0 - sigma
            assert np.array_equal(model.unit_cost(many.prices),
                                  np.exp(log_power_mean(zero, model.shares, t)))
            assert np.array_equal(model.budget_shares(many.prices),
                                  power_mean_shares(zero, model.shares, t))


def test_households_that_cannot_be_calibrated_are_refused_by_row() -> None:
    """Calibrating to many budgets refuses the rows the family cannot take, naming each, and
    keeps the others: a Stone-Geary household below its subsistence bundle (Stone 1954), and a
    QUAIDS household whose budget lies outside the region where the cost function is defined
    (Banks, Blundell and Lewbel 1997)."""
    rng, reference = _rng_budget(35)
    many = _households(rng, reference.prices)
    gamma = 0.5 * many.quantities.min(axis=0)
    gamma[1] = 1.5 * many.quantities[2, 1]  # household 2 buys less than subsistence of item 1
    done = FAMILIES["stone_geary"].calibrate_many(many, subsistence_quantities=gamma)
    assert [(r.row, r.code, r.error.index) for r in done.refused] == [
        (h, "below_subsistence", 1) for h in range(N_HOUSEHOLDS)
        if many.quantities[h, 1] < gamma[1]]
    assert 2 not in done.kept.tolist() and done.kept.size + len(done.refused) == N_HOUSEHOLDS
    params = aids_parameters(rng, reference, quadratic=True)
    params["lambda"] = 50.0 * params["lambda"]
    many = BaseBudget.from_rows(many.prices, many.shares, np.array([40.0, 60.0, 1e8, 80.0]))
    done = FAMILIES["quaids"].calibrate_many(many, **params)
    failing = []
    for h in range(N_HOUSEHOLDS):
        try:
            calibrate("quaids", many.row(h), params)
        except InvalidInput as exc:
            failing.append((h, "model_failed", str(exc)))
    assert [(r.row, r.code, str(r.error)) for r in done.refused] == failing
    assert 0 < len(failing) < N_HOUSEHOLDS
    assert done.kept.tolist() == [h for h in range(N_HOUSEHOLDS) if h not in
                                  [f[0] for f in failing]]


def test_shapes_that_do_not_broadcast_are_refused() -> None:
    """Prices whose last axis is not the items, or leading axes that do not broadcast, are
    argument errors (numpy broadcasting rules)."""
    rng, base = _rng_budget(36)
    model: Preferences = CES.calibrate(base, sigma=0.5)
    with pytest.raises(InvalidInput, match="prices"):
        model.expenditure(np.ones((2, N_ITEMS + 1)), np.ones(2))
    with pytest.raises(InvalidInput, match="do not broadcast"):
        model.expenditure(np.ones((2, N_ITEMS)), np.ones(3))
