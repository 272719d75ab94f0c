"""Index series over many periods: the printed six-commodity series, chaining identities, the
Konüs series against closed forms, bias, chain drift, items that come and go, Lowe and Young."""

from __future__ import annotations

import numpy as np
import pytest
from numpy.testing import assert_allclose

from dualcost.core.comparison import compare
from dualcost.core.errors import InvalidInput
from dualcost.core.indices import FORMULAS, IndexData
from dualcost.core.preferences import BaseBudget
from dualcost.core.series import (
    GEKS_SERIES,
    RULES,
    SERIES_FORMULAS,
    base_budget,
    calibrate_to_base,
    describe_treatment,
    index_series,
)
from dualcost.core.series_panel import Panel
from tests.reference_data import SIX_COMMODITY_PRICES, SIX_COMMODITY_QUANTITIES
from tests.reference_data import SIX_COMMODITY_PRINTED as PRINTED

# CPI Manual (2004) ch. 19, Table 19.1 prices and Table 19.2 quantities, periods 1-5 (rows),
# commodities 1-6 (columns), and Table 19.3 fixed-base indices with period 1 = 1, four printed
# decimals; recalled from memory (see /work/shared/reference/README.md).
PRICES = np.array(SIX_COMMODITY_PRICES)
QUANTITIES = np.array(SIX_COMMODITY_QUANTITIES)
BILATERAL = [n for n in FORMULAS if n not in ("lloyd_moulton", "lowe", "young")]


def six_commodity() -> Panel:
    return Panel.checked(PRICES, quantities=QUANTITIES, periods=["1", "2", "3", "4", "5"])


def random_panel(seed: int, n_t: int = 9, n: int = 7, *, holes: bool = False,
                 labels: list[str] | None = None) -> Panel:
    rng = np.random.default_rng(seed)
    p = np.exp(np.cumsum(rng.normal(0.0, 0.08, (n_t, n)), axis=0))
    q = rng.uniform(0.5, 5.0, (n_t, n))
    if holes:
        p[:3, 0] = np.nan  # item 0 appears in period 3
        p[6:, 1] = np.nan  # item 1 disappears after period 5
        p[4, 2] = np.nan  # item 2 is missing in period 4 only
        q = np.where(np.isnan(p), np.nan, q)
    return Panel.checked(p, quantities=q, periods=labels)


def test_fixed_base_series_match_the_printed_table_in_one_call() -> None:
    """Fixed-base Laspeyres, Paasche, Fisher and Törnqvist for all five periods from one call
    equal CPI Manual (2004) Table 19.3 to the four printed decimals (values from memory)."""
    result = index_series(six_commodity(), formulas=list(PRINTED), reference_value=1.0)
    for name, printed in PRINTED.items():
        assert_allclose(result.formulas[name].fixed_base, printed, rtol=0.0, atol=5e-5,
                        err_msg=name)


@pytest.mark.parametrize("base", [0, 2, 4])
def test_fixed_base_series_is_the_direct_comparison(base: int) -> None:
    """A fixed-base series is the direct bilateral comparison of each period with the base
    (definition; CPI Manual 2004, 15.83), for every formula, any base period."""
    panel = six_commodity()
    result = index_series(panel, base=base, reference_value=1.0, formulas=BILATERAL)
    for name in BILATERAL:
        for t in range(5):
            direct = FORMULAS[name].compute(IndexData(PRICES[base], PRICES[t], QUANTITIES[base],
                                                      QUANTITIES[t]))
            assert_allclose(result.formulas[name].fixed_base[t], direct, rtol=1e-13,
                            err_msg=f"{name} {t}")


def test_chained_series_is_the_product_of_its_own_links() -> None:
    """A chained series equals the product of its period-to-period links, each the bilateral
    formula between neighbouring periods (definition; CPI Manual 2004, 15.83-15.88)."""
    panel = six_commodity()
    result = index_series(panel, reference_value=1.0, formulas=BILATERAL)
    for name in BILATERAL:
        links = [FORMULAS[name].compute(IndexData(PRICES[t - 1], PRICES[t], QUANTITIES[t - 1],
                                                  QUANTITIES[t])) for t in range(1, 5)]
        assert_allclose(result.formulas[name].links, links, rtol=1e-13, err_msg=name)
        assert_allclose(result.formulas[name].chained, np.cumprod([1.0, *links]), rtol=1e-13,
                        err_msg=name)


def test_index_reference_period_rescales_without_changing_movements() -> None:
    """Rebasing to an index reference period r divides by the value at r and multiplies by 100
    (common practice); period-to-period movements are unchanged."""
    panel = six_commodity()
    one = index_series(panel, reference_value=1.0, formulas=["fisher"]).formulas["fisher"]
    hundred = index_series(panel, reference=2, reference_value=100.0,
                           formulas=["fisher"]).formulas["fisher"]
    assert hundred.fixed_base[2] == pytest.approx(100.0, rel=1e-15)
    assert_allclose(hundred.fixed_base, 100.0 * one.fixed_base / one.fixed_base[2], rtol=1e-14)
    assert_allclose(hundred.chained[1:] / hundred.chained[:-1], one.chained[1:] / one.chained[:-1],
                    rtol=1e-14)


def test_ces_konus_series_is_lloyd_moulton_and_path_independent() -> None:
    """For CES preferences calibrated to the base the Konüs index is the Lloyd-Moulton index with
    base shares and the same sigma (Lloyd 1975; Moulton 1996); a homothetic Konüs index is
    transitive, so the chained Konüs series equals the fixed-base one (Konüs 1924)."""
    panel = random_panel(3)
    model = calibrate_to_base(panel, 1, "ces", {"sigma": 0.7})
    result = index_series(panel, base=1, model=model, reference_value=1.0,
                          formulas=["lloyd_moulton", "laspeyres"])
    konus = result.konus
    assert konus is not None and konus.homothetic
    assert_allclose(konus.fixed_base["base"], result.formulas["lloyd_moulton"].fixed_base,
                    rtol=1e-12)
    assert_allclose(konus.chained["base"], konus.fixed_base["base"], rtol=1e-12)


def test_cobb_douglas_konus_is_the_geometric_laspeyres() -> None:
    """Cobb-Douglas: the geometric Laspeyres index with base shares is the Konüs index (CPI
    Manual 2004, 17.61-17.64)."""
    panel = random_panel(4)
    model = calibrate_to_base(panel, 0, "cobb_douglas")
    result = index_series(panel, model=model, reference_value=1.0,
                          formulas=["geometric_laspeyres"])
    assert result.konus is not None
    assert_allclose(result.konus.fixed_base["base"],
                    result.formulas["geometric_laspeyres"].fixed_base, rtol=1e-12)


def test_stone_geary_konus_series_match_the_closed_form() -> None:
    """Stone-Geary (Stone 1954): e(p, u) = p.gamma + u B(p) with B(p) = prod (p/p0)^beta. The
    fixed-base series at base utility and at each period's utility, and each chained link, equal
    the closed form; the midpoint series equals the comparison engine's midpoint index."""
    panel = random_panel(5)
    gamma = 0.3 * panel.quantities[0]
    model = calibrate_to_base(panel, 0, "stone_geary", {"subsistence_quantities": gamma})
    result = index_series(panel, model=model, reference_value=1.0, formulas=["laspeyres"])
    k = result.konus
    assert k is not None and not k.homothetic
    p, q = panel.prices, panel.quantities
    m = np.sum(p * q, axis=1)
    beta = p[0] * (q[0] - gamma) / float(p[0] @ (q[0] - gamma))

    def e(prices: np.ndarray, u: float) -> float:
        return float(prices @ gamma + u * np.exp(beta @ np.log(prices / p[0])))

    u = [(m[t] - p[t] @ gamma) / np.exp(beta @ np.log(p[t] / p[0])) for t in range(len(m))]
    for t in range(len(m)):
        assert_allclose(k.fixed_base["base"][t], e(p[t], u[0]) / e(p[0], u[0]), rtol=1e-12)
        assert_allclose(k.fixed_base["current"][t], e(p[t], u[t]) / e(p[0], u[t]), rtol=1e-12)
        budget = BaseBudget.from_quantities(p[0], q[0])
        assert_allclose(k.fixed_base["midpoint"][t],
                        compare(model, budget, p[t], current_income=m[t]).konus.midpoint,
                        rtol=1e-12)
    links = [e(p[t], u[t - 1]) / e(p[t - 1], u[t - 1]) for t in range(1, len(m))]
    assert_allclose(k.chained["base"], np.cumprod([1.0, *links]), rtol=1e-12)


def test_konus_bounds_hold_per_period() -> None:
    """Konüs (1924): K(u_b) <= Laspeyres and K(u_t) >= Paasche in every period, when the base
    bundle is the model's optimum and period t's bundle is its optimum at t (data from the
    model itself); so the fixed-base Laspeyres bias is never negative and Paasche's never
    positive."""
    rng = np.random.default_rng(11)
    n_t, n = 8, 5
    p = np.exp(np.cumsum(rng.normal(0.0, 0.1, (n_t, n)), axis=0))
    start = Panel.checked(p, quantities=np.ones((n_t, n)))
    model = calibrate_to_base(start, 0, "stone_geary",
                              {"subsistence_quantities": np.full(n, 0.2)})
    m = 1.05 ** np.arange(n_t) * float(p[0] @ np.ones(n))
    q = np.array([model.marshallian(p[t], m[t]) for t in range(n_t)])
    panel = Panel.checked(p, quantities=q)
    result = index_series(panel, model=model, formulas=["laspeyres", "paasche"])
    bias = {(b.series, b.kind): b for b in result.bias}
    assert np.all(bias[("laspeyres", "fixed_base")].points >= -1e-10)
    assert np.all(bias[("paasche", "fixed_base")].points <= 1e-10)
    assert bias[("laspeyres", "fixed_base")].compared_with == "base"
    assert bias[("paasche", "fixed_base")].compared_with == "current"


def test_bias_and_average_annual_bias_follow_their_definitions() -> None:
    """Bias per period is 100 (P - K) points and 100 (P/K - 1) percent; the average annual bias
    is the difference of the average annual rates of change (common practice, as in Boskin et
    al. 1996), here over 12 months = 1 year and 6 quarters = 1.5 years."""
    monthly = random_panel(6, n_t=13, labels=[f"2025-{m:02d}" for m in range(1, 13)] + ["2026-01"])
    model = calibrate_to_base(monthly, 0, "ces", {"sigma": 2.0})
    result = index_series(monthly, model=model, formulas=["laspeyres", "fisher"])
    assert result.span.frequency == "monthly" and result.span.years == pytest.approx(1.0)
    assert result.konus is not None
    k = result.konus.fixed_base["base"]
    lasp = result.formulas["laspeyres"].fixed_base
    bias = {(b.series, b.kind): b for b in result.bias}
    assert_allclose(bias[("laspeyres", "fixed_base")].points, lasp - k, rtol=1e-12, atol=1e-12)
    assert_allclose(bias[("laspeyres", "fixed_base")].percent, 100 * (lasp / k - 1), rtol=1e-12,
                    atol=1e-12)
    annual = {(a.series, a.kind): a for a in result.annual_bias}
    expected = 100 * (lasp[-1] / lasp[0]) - 100 * (k[-1] / k[0])
    assert_allclose(annual[("laspeyres", "fixed_base")].bias_pp, expected, rtol=1e-10)

    quarterly = random_panel(7, n_t=7, labels=[f"2024-Q{q}" for q in (1, 2, 3, 4)]
                             + [f"2025-Q{q}" for q in (1, 2, 3)])
    model = calibrate_to_base(quarterly, 0, "ces", {"sigma": 2.0})
    result = index_series(quarterly, model=model, formulas=["paasche"])
    assert result.span.years == pytest.approx(1.5) and result.span.periods_per_year == 4
    assert result.konus is not None
    p = result.formulas["paasche"].chained
    kc = result.konus.chained["current"]
    rate = 100 * ((p[-1] / p[0]) ** (1 / 1.5) - 1)
    k_rate = 100 * ((kc[-1] / kc[0]) ** (1 / 1.5) - 1)
    annual = {(a.series, a.kind): a for a in result.annual_bias}
    assert_allclose(annual[("paasche", "chained")].bias_pp, rate - k_rate, rtol=1e-10)


def test_chain_drift_when_prices_return_to_their_base_values() -> None:
    """Prices that return to their base values: any fixed-base index is 1 there (identity test,
    CPI Manual 2004, ch. 16; Fisher 1922), the chained Laspeyres and Paasche are not (chain drift,
    Szulc 1983), the circularity failure over the loop is the chained index times the direct
    return, and GEKS is 1 (transitivity)."""
    p = np.array([[1.0, 1.0], [2.0, 0.5], [1.0, 1.0]])
    q = np.array([[1.0, 1.0], [0.4, 2.0], [1.0, 1.0]])
    panel = Panel.checked(p, quantities=q)
    result = index_series(panel, reference_value=1.0,
                          formulas=["laspeyres", "paasche", "fisher", "geks_fisher"],
                          geks_window=2)
    assert result.chain_drift.periods_with_base_prices == (2,)
    for name in ("laspeyres", "paasche", "fisher"):
        f = result.formulas[name]
        assert f.fixed_base[2] == pytest.approx(1.0, abs=1e-15)
        drift = result.chain_drift.drift_percent[name][2]
        assert_allclose(drift, 100 * (f.chained[2] - 1.0), rtol=1e-12, atol=1e-12)
        back = FORMULAS[name].compute(IndexData(p[2], p[0], q[2], q[0]))
        assert_allclose(result.chain_drift.loop_product[name], f.chained[2] * back, rtol=1e-12)
    lasp = result.formulas["laspeyres"].chained[2]
    assert_allclose(lasp, 1.25 * (0.4 * 1 + 2 * 1) / (0.4 * 2 + 2 * 0.5), rtol=1e-12)
    assert result.chain_drift.loop_product["geks_fisher"] == pytest.approx(1.0, abs=1e-14)
    geks = next(g for g in result.multilateral if g.name == "geks_fisher")
    assert geks.full_span[2] == pytest.approx(1.0, abs=1e-14)


def test_explicit_loop_of_periods() -> None:
    """Circularity over a given loop: the product of the bilateral indices around it (Fisher's
    circular test, Fisher 1922)."""
    panel = random_panel(8)
    result = index_series(panel, formulas=["tornqvist"], loop=[0, 4, 2, 0])
    p, q = panel.prices, panel.quantities
    t = FORMULAS["tornqvist"]
    expected = np.prod([t.compute(IndexData(p[a], p[b], q[a], q[b]))
                        for a, b in ((0, 4), (4, 2), (2, 0))])
    assert result.chain_drift.loop == (0, 4, 2)
    assert_allclose(result.chain_drift.loop_product["tornqvist"], expected, rtol=1e-12)


def test_items_that_come_and_go_use_the_matched_sample() -> None:
    """Each comparison uses the items priced in both periods (matched-model method, CPI Manual
    2004, ch. 7): the same as computing the formula on those items alone."""
    panel = random_panel(9, holes=True)
    result = index_series(panel, base=3, reference_value=1.0, formulas=BILATERAL)
    p, q, priced = panel.prices, panel.quantities, panel.priced
    for name in BILATERAL:
        for t in range(panel.n_periods):
            keep = priced[3] & priced[t]
            direct = FORMULAS[name].compute(IndexData(p[3, keep], p[t, keep], q[3, keep],
                                                      q[t, keep]))
            assert_allclose(result.formulas[name].fixed_base[t], direct, rtol=1e-12,
                            err_msg=f"{name} {t}")
        for t in range(1, panel.n_periods):
            keep = priced[t - 1] & priced[t]
            link = FORMULAS[name].compute(IndexData(p[t - 1, keep], p[t, keep], q[t - 1, keep],
                                                    q[t, keep]))
            assert_allclose(result.formulas[name].links[t - 1], link, rtol=1e-12)
        assert RULES[name]


def test_matched_laspeyres_equals_imputing_the_missing_relative() -> None:
    """Leaving a disappearing item out of the Laspeyres index is the same as imputing its price
    relative by the index of the others (overall-mean imputation, CPI Manual 2004, ch. 7)."""
    panel = random_panel(10, holes=True)
    result = index_series(panel, reference_value=1.0, formulas=["laspeyres"])
    t = 7  # item 1 is gone, item 0 is there but not in the base period
    lasp = result.formulas["laspeyres"].fixed_base[t]
    p, q = panel.prices, panel.quantities
    keep = panel.priced[0] & panel.priced[t]
    imputed = np.where(keep, p[t], np.nan)
    imputed[1] = p[0, 1] * lasp
    both = panel.priced[0]
    value = np.nansum(imputed[both] * q[0, both]) / np.nansum(p[0, both] * q[0, both])
    assert_allclose(value, lasp, rtol=1e-12)


def test_every_left_out_item_is_listed() -> None:
    """Nothing is dropped silently: each period and item left out of a fixed-base comparison or
    a chain link, or valued at a carried price by the model, has an entry (common practice)."""
    panel = random_panel(12, holes=True)
    model = calibrate_to_base(panel, 3, "ces", {"sigma": 0.5})
    result = index_series(panel, base=3, model=model, formulas=["fisher"])
    listed = {(e.period, e.item): e for e in result.item_treatment}
    priced = panel.priced
    for t in range(panel.n_periods):
        for i in range(panel.n_items):
            out_fixed = not (priced[t, i] and priced[3, i])
            out_link = t > 0 and not (priced[t, i] and priced[t - 1, i])
            assert ((t, i) in listed) == (out_fixed or out_link), (t, i)
    assert listed[(4, 2)].model == "price_carried" and listed[(4, 2)].carried_from == 3
    assert listed[(1, 0)].model == "price_carried" and listed[(1, 0)].carried_from == 3
    assert listed[(7, 1)].carried_from == 5
    assert result.konus is not None and result.konus.items == (0, 1, 2, 3, 4, 5, 6)
    early = index_series(panel, base=0, model=calibrate_to_base(panel, 0, "ces", {"sigma": 0.5}),
                         formulas=["fisher"])
    listed = {(e.period, e.item): e for e in early.item_treatment}
    assert listed[(5, 0)].model == "outside_model" and listed[(5, 0)].priced
    assert "outside the model" in describe_treatment(listed[(5, 0)], panel.periods, 0)
    assert early.konus is not None and 0 not in early.konus.items


def test_model_values_a_missing_price_at_its_nearest_observation() -> None:
    """The model's Konüs index in a period where an item is missing is the CES Konüs index at the
    carried price (closed form: the power mean of order 1 - sigma of the relatives, Lloyd
    1975)."""
    panel = random_panel(13, holes=True)
    sigma = 0.5
    model = calibrate_to_base(panel, 3, "ces", {"sigma": sigma})
    result = index_series(panel, base=3, model=model, reference_value=1.0, formulas=["jevons"])
    budget, items = base_budget(panel, 3)
    idx = list(items)
    w = budget.shares
    p = panel.prices[:, idx].copy()
    p[:3, 0] = p[3, 0]  # item 0 is first priced in period 3: its first price, carried back
    p[4, 2] = p[3, 2]
    p[6:, 1] = p[5, 1]
    rel = p / p[3]
    expected = (rel ** (1 - sigma) @ w) ** (1 / (1 - sigma))
    assert result.konus is not None
    assert_allclose(result.konus.fixed_base["base"], expected, rtol=1e-12)


def test_lowe_and_young_from_an_earlier_weight_reference_period() -> None:
    """Lowe prices the period-b basket: sum p_t q_b / sum p_0 q_b (Lowe 1823); Young averages
    relatives with period-b shares (Young 1812); Young with shares price-updated from b to 0 is
    the Lowe index (CPI Manual 2004, 15.33-15.37); with b = 0 both are Laspeyres."""
    panel = random_panel(14)
    p, q = panel.prices, panel.quantities
    result = index_series(panel, base=2, weight_reference=0, reference_value=1.0,
                          formulas=["lowe", "young", "laspeyres"])
    lowe = (p @ q[0]) / (p[2] @ q[0])
    s_b = p[0] * q[0] / (p[0] @ q[0])
    young = (p / p[2]) @ s_b
    assert_allclose(result.formulas["lowe"].fixed_base, lowe, rtol=1e-12)
    assert_allclose(result.formulas["young"].fixed_base, young, rtol=1e-12)
    w = result.weights
    assert w is not None and w.price_updated is not None
    assert_allclose(w.shares, s_b, rtol=1e-12)
    assert_allclose((p / p[2]) @ w.price_updated, lowe, rtol=1e-12)
    updated = s_b * (p[2] / p[0]) / np.sum(s_b * p[2] / p[0])
    assert_allclose(w.price_updated, updated, rtol=1e-12)
    same = index_series(panel, base=2, weight_reference=2, reference_value=1.0,
                        formulas=["lowe", "young", "laspeyres"])
    for name in ("lowe", "young"):
        assert_allclose(same.formulas[name].fixed_base, same.formulas["laspeyres"].fixed_base,
                        rtol=1e-12)


def test_weight_reference_after_the_base_is_refused() -> None:
    with pytest.raises(InvalidInput) as info:
        index_series(random_panel(15), base=1, weight_reference=3, formulas=["lowe"])
    assert info.value.parameter == "weight_reference"


def test_prices_only_periods() -> None:
    """A period with prices only: unweighted formulas still work; weighted ones are left out
    with a notice, or an error when asked for; with a model, its demands fill in (as the
    comparison engine does for one period)."""
    panel = random_panel(16)
    q = panel.quantities.copy()
    q[4] = np.nan
    thin = Panel.checked(panel.prices, quantities=q)
    assert not thin.has_quantities[4]
    result = index_series(thin)
    assert "jevons" in result.formulas and "fisher" not in result.formulas
    assert any(n.code == "formula_not_computed" for n in result.notices)
    with pytest.raises(InvalidInput) as info:
        index_series(thin, formulas=["jevons", "paasche"])
    assert info.value.parameter == "formulas" and info.value.index == 1
    model = calibrate_to_base(thin, 0, "cobb_douglas")
    filled = index_series(thin, model=model, formulas=["paasche"])
    assert any(n.code == "quantities_from_model" for n in filled.notices)


def test_every_series_formula_has_a_rule_and_runs() -> None:
    """Every series name has its rule for items that come and go, and runs on a panel with
    holes (common practice: no formula is silently unavailable)."""
    panel = random_panel(17, n_t=14, holes=True,
                         labels=[f"2024-{m:02d}" for m in range(1, 13)] + ["2025-01", "2025-02"])
    model = calibrate_to_base(panel, 3, "ces", {"sigma": 1.5})
    result = index_series(panel, base=3, model=model, weight_reference=3)
    names = set(result.formulas) | {g.name for g in result.multilateral}
    assert names == set(SERIES_FORMULAS)
    assert set(RULES) == set(SERIES_FORMULAS)
    assert {g.name for g in result.multilateral} == set(GEKS_SERIES)
    assert all(g.window == 13 for g in result.multilateral)
    for f in result.formulas.values():
        assert np.all(np.isfinite(f.fixed_base)) and np.all(np.isfinite(f.chained))
