"""Household batches (dualcost.core.households): closed forms, published identities and scipy.

Each check names its outside source; the batch is also held to the single-comparison engine,
which its own tests check against the same sources.
"""

from __future__ import annotations

from typing import Any

import numpy as np
import pytest
from numpy.testing import assert_allclose
from scipy.optimize import minimize

from dualcost.core.comparison import compare
from dualcost.core.errors import InvalidInput, InvalidRows
from dualcost.core.households import (
    HouseholdJob,
    reasons_of,
    run_households,
    weighted_quantiles,
)
from dualcost.core.preferences import BaseBudget, calibrate

N_ITEMS = 6
ALL = ["laspeyres", "paasche", "fisher", "tornqvist", "geometric_laspeyres", "walsh",
       "marshall_edgeworth", "sato_vartia", "lloyd_moulton"]


def batch(seed: int, households: int = 40, n: int = N_ITEMS) -> dict[str, Any]:
    rng = np.random.default_rng(seed)
    p0 = rng.uniform(1.0, 5.0, n)
    return {
        "p0": p0,
        "p1": p0 * np.exp(rng.normal(0.03, 0.15, n)),
        "w": rng.dirichlet(np.full(n, 2.0), households),
        "m": rng.uniform(80.0, 400.0, households),
        "a": rng.uniform(0.5, 3.0, households),
    }


def job_for(family: str, params: dict[str, Any], b: dict[str, Any], **kw: Any) -> HouseholdJob:
    return HouseholdJob.checked(family, params, b["p0"], b["p1"], **kw)


CASES = [
    ("cobb_douglas", {}),
    ("ces", {"sigma": 0.0}),
    ("ces", {"sigma": 0.6}),
    ("ces", {"sigma": 1.0}),
    ("ces", {"sigma": 3.5}),
    ("stone_geary", {}),
    ("stone_geary", {"frisch": -3.0}),
    ("stone_geary", {"subsistence_quantities": np.full(N_ITEMS, 0.5)}),
    ("translog", {"sigma": 0.7}),
]


@pytest.mark.parametrize("family,params", CASES)
def test_each_household_equals_its_own_comparison(family: str, params: dict[str, Any]) -> None:
    """Each household's batch result is the comparison of that household alone: calibrated to its
    shares and income, current quantities x(p1, m) (Konüs 1924 definitions as in
    dualcost.core.comparison)."""
    b = batch(11)
    formulas = [f for f in ALL if not (f == "lloyd_moulton" and family in ("stone_geary",
                                                                             "translog"))]
    job = job_for(family, params, b, formulas=formulas, chunk_rows=16)
    res = run_households(job, b["w"], expenditure=b["m"], weights=b["a"])
    assert res.skipped.count == 0 and res.rows.tolist() == list(range(40))
    for h in range(40):
        base = BaseBudget.from_shares(b["p0"], b["w"][h], b["m"][h])
        model = calibrate(family, base, params)
        r = compare(model, base, b["p1"], current_income=b["m"][h], formulas=formulas,
                    lloyd_moulton_sigma=job.lloyd_moulton_sigma)
        expected = {f: r.formulas[f].value for f in formulas}
        expected.update(konus=r.konus.base, konus_current=r.konus.current,
                        konus_midpoint=r.konus.midpoint,
                        compensating_variation=r.compensating_variation,
                        equivalent_variation=r.equivalent_variation)
        for name, value in expected.items():
            assert_allclose(res.values[name][0, h], value, rtol=1e-12, atol=1e-10, err_msg=name)
        for f in formulas:
            assert_allclose(res.values[f"bias_{f}"][0, h], r.formulas[f].bias_points,
                            rtol=1e-9, atol=1e-10)


def test_ces_konus_is_the_lloyd_moulton_index() -> None:
    """With base-share weights and the model's sigma, the Lloyd-Moulton index is the CES Konüs
    index exactly (Lloyd 1975; Moulton 1996; CPI Manual 17.61); at sigma = 1 both are the
    geometric Laspeyres index (Cobb-Douglas: CPI Manual 17.64)."""
    b = batch(12, households=300)
    for sigma in (0.0, 0.4, 1.0, 2.5):
        job = job_for("ces", {"sigma": sigma}, b, formulas=["lloyd_moulton", "geometric_laspeyres",
                                                             "laspeyres"])
        res = run_households(job, b["w"])
        assert_allclose(res.values["konus"], res.values["lloyd_moulton"], rtol=1e-13)
        if sigma == 1.0:
            assert_allclose(res.values["konus"], res.values["geometric_laspeyres"], rtol=1e-13)
        if sigma == 0.0:
            assert_allclose(res.values["konus"], res.values["laspeyres"], rtol=1e-13)


@pytest.mark.parametrize("family,params", [("ces", {"sigma": 0.8}), ("stone_geary", {}),
                                           ("stone_geary", {"frisch": -1.5})])
def test_konus_bounds_for_every_household(family: str, params: dict[str, Any]) -> None:
    """K(u0) <= Laspeyres and K(u1) >= Paasche for every household (Konüs 1924; CPI Manual
    17.14-17.19)."""
    b = batch(13, households=500)
    res = run_households(job_for(family, params, b), b["w"], expenditure=b["m"])
    assert np.all(res.values["konus"] <= res.values["laspeyres"] * (1 + 1e-13))
    assert np.all(res.values["konus_current"] >= res.values["paasche"] * (1 - 1e-13))


def test_stone_geary_konus_against_scipy_cost_minimisation() -> None:
    """K(u0) = e(p1, u0) / m by direct minimisation of p1 . x subject to
    sum beta ln(x - gamma) >= u0 with scipy's SLSQP (scipy as reference library), with the
    household's own Stone-Geary parameters beta = p0 (q0 - gamma) / (m - p0 . gamma) (Stone 1954;
    Geary 1950)."""
    b = batch(14, households=5)
    gamma = 0.4 * (b["w"] * b["m"][:, None] / b["p0"]).min(axis=0)
    res = run_households(job_for("stone_geary", {"subsistence_quantities": gamma}, b), b["w"],
                         expenditure=b["m"])
    for h in range(5):
        m = b["m"][h]
        q0 = b["w"][h] * m / b["p0"]
        beta = b["p0"] * (q0 - gamma) / (m - b["p0"] @ gamma)
        u0 = beta @ np.log(q0 - gamma)
        # In y = ln(x - gamma) the feasible set is a half-space and the problem is smooth.
        done = minimize(lambda y, m=m: b["p1"] @ (gamma + np.exp(y)) / m, np.log(q0 - gamma),
                        jac=lambda y, m=m: b["p1"] * np.exp(y) / m, method="SLSQP",
                        constraints=[{"type": "ineq", "fun": lambda y, beta=beta, u0=u0:
                                      beta @ y - u0, "jac": lambda y, beta=beta: beta}],
                        options={"ftol": 1e-15, "maxiter": 1000})
        assert done.success, done.message
        assert_allclose(res.values["konus"][0, h], done.fun, rtol=1e-9)


def test_prais_democratic_and_plutocratic_aggregates() -> None:
    """The democratic index is the household-weighted mean of the households' Laspeyres indices;
    the plutocratic one the expenditure-weighted mean, which equals the Laspeyres index of the
    aggregate basket sum_h a_h q0_h (Prais 1959, Review of Economic Studies 26(2))."""
    b = batch(15, households=250)
    res = run_households(job_for("ces", {"sigma": 0.7}, b), b["w"], expenditure=b["m"],
                         weights=b["a"])
    lasp = res.values["laspeyres"][0]
    (summary,) = [s for s in res.summary[0].indices if s.index == "laspeyres"]
    assert_allclose(summary.democratic, np.average(lasp, weights=b["a"]), rtol=1e-14)
    assert_allclose(summary.plutocratic, np.average(lasp, weights=b["a"] * b["m"]), rtol=1e-14)
    basket = (b["a"][:, None] * b["w"] * b["m"][:, None] / b["p0"]).sum(axis=0)
    assert_allclose(summary.plutocratic, (b["p1"] @ basket) / (b["p0"] @ basket), rtol=1e-13)
    above = lasp > summary.plutocratic
    assert_allclose(summary.share_above_plutocratic, b["a"][above].sum() / b["a"].sum(),
                    rtol=1e-14)
    assert_allclose(res.summary[0].compensating_variation_total,
                    np.sum(b["a"] * res.values["compensating_variation"][0]), rtol=1e-13)


def test_weighted_quantiles_match_numpy() -> None:
    """Weighted quantiles by inverting the weighted distribution function agree with numpy's
    ``quantile(method="inverted_cdf", weights=...)`` (numpy as reference library; Hyndman and
    Fan 1996, definition 1)."""
    if not hasattr(np, "quantile") or int(np.__version__.split(".")[0]) < 2:
        pytest.skip("numpy's weighted quantiles need numpy 2")
    rng = np.random.default_rng(16)
    values = rng.normal(size=501)
    weights = rng.uniform(0.1, 5.0, 501)
    probs = [0.0, 0.05, 0.1, 0.25, 0.5, 0.75, 0.9, 0.99, 1.0]
    ours = weighted_quantiles(values, weights, probs)
    theirs = np.quantile(values, probs, method="inverted_cdf", weights=weights)
    assert_allclose(ours, theirs, rtol=0, atol=0)
    # Equal weights: the plain inverted-cdf quantile (Hyndman and Fan 1996, definition 1).
    assert_allclose(weighted_quantiles(values, np.ones(501), probs),
                    np.quantile(values, probs, method="inverted_cdf"), rtol=0, atol=0)


def test_a_series_is_each_period_on_its_own() -> None:
    """A series of price vectors gives, period by period, the single-change answers (each period
    compared with the base: a fixed-base series, CPI Manual 15.3)."""
    b = batch(17, households=60)
    rng = np.random.default_rng(17)
    series = b["p0"] * np.exp(rng.normal(0.02, 0.1, (3, N_ITEMS)))
    job = HouseholdJob.checked("stone_geary", {}, b["p0"], series)
    whole = run_households(job, b["w"], expenditure=b["m"])
    for t in range(3):
        one = run_households(HouseholdJob.checked("stone_geary", {}, b["p0"], series[t]),
                             b["w"], expenditure=b["m"])
        for name, values in one.values.items():
            assert np.array_equal(whole.values[name][t], values[0]), name


def test_homothetic_without_incomes() -> None:
    """Homothetic families need no incomes: CV is stated as 100 (K - 1) percent of income,
    since e(p1, u0) = m K (Konüs 1924 with e = u c(p)); a non-homothetic family without incomes
    is refused (common practice)."""
    b = batch(18)
    res = run_households(job_for("ces", {"sigma": 0.5}, b), b["w"])
    assert "compensating_variation" not in res.values and res.expenditure is None
    assert_allclose(res.values["cv_percent"], 100 * (res.values["konus"] - 1), rtol=1e-12)
    assert res.summary[0].indices[0].plutocratic is None
    assert "no_incomes" in [n.code for n in res.notices]
    with pytest.raises(InvalidInput, match="not homothetic"):
        run_households(job_for("stone_geary", {}, b), b["w"])


def test_bad_rows_are_named_or_skipped_without_losing_the_good_ones() -> None:
    """A row whose shares do not sum to one, a negative income and a household below subsistence
    are refused by row; skipping them leaves every other household's answer unchanged (common
    practice)."""
    b = batch(19, households=30)
    gamma = np.full(N_ITEMS, 0.05)
    w, m = b["w"].copy(), b["m"].copy()
    w[3] *= 1.1  # shares sum to 1.1
    m[7] = -20.0  # negative income
    m[12] = 0.5  # too little to buy the subsistence bundle
    job = job_for("stone_geary", {"subsistence_quantities": gamma}, b, chunk_rows=8)
    with pytest.raises(InvalidRows) as info:
        run_households(job, w, expenditure=m)
    problems = {p.row: p for p in info.value.problems}
    assert set(problems) == {3, 7, 12} and info.value.count == 3
    assert problems[3].code == "shares_sum" and "sum to 1.1" in problems[3].rule
    assert problems[7].field == "expenditure" and "greater than zero" in problems[7].rule
    assert problems[12].code == "below_subsistence" and "subsistence" in problems[12].rule

    skipped = run_households(job, w, expenditure=m, on_bad_rows="skip")
    assert skipped.skipped.count == 3
    assert skipped.skipped.by_reason == {"shares_sum": 1, "bad_income": 1, "below_subsistence": 1}
    good = [h for h in range(30) if h not in (3, 7, 12)]
    assert skipped.rows.tolist() == good
    clean = run_households(job, b["w"][good], expenditure=b["m"][good])
    for name, values in clean.values.items():
        assert_allclose(skipped.values[name], values, rtol=1e-14, err_msg=name)


def test_normalised_shares_are_counted() -> None:
    """Shares off by more than 1e-6 are refused unless normalising is asked, and then counted
    (nothing is repaired silently; common practice)."""
    b = batch(20, households=10)
    w = b["w"] * 1.001
    job = job_for("ces", {"sigma": 0.5}, b, normalise_shares=True)
    res = run_households(job, w)
    assert "shares_normalised" in [n.code for n in res.notices]
    plain = run_households(job_for("ces", {"sigma": 0.5}, b), b["w"])
    assert_allclose(res.values["konus"], plain.values["konus"], rtol=1e-14)


def test_results_do_not_depend_on_the_chunk_size() -> None:
    """Households are independent: chunking changes nothing beyond rounding (common practice)."""
    b = batch(21, households=101)
    small = run_households(job_for("ces", {"sigma": 0.9}, b, chunk_rows=7), b["w"],
                           expenditure=b["m"])
    large = run_households(job_for("ces", {"sigma": 0.9}, b, chunk_rows=1000), b["w"],
                           expenditure=b["m"])
    for name, values in large.values.items():
        assert_allclose(small.values[name], values, rtol=1e-14, atol=1e-12, err_msg=name)


def test_job_level_errors_name_the_argument() -> None:
    """Unknown formulas, a negative sigma or a wrong-length price vector are argument errors
    (common practice)."""
    b = batch(22)
    with pytest.raises(InvalidInput, match="not a formula"):
        job_for("ces", {"sigma": 0.5}, b, formulas=["carli"])
    with pytest.raises(InvalidInput, match="zero or more"):
        job_for("ces", {"sigma": -1.0}, b)
    with pytest.raises(InvalidInput) as info:
        HouseholdJob.checked("ces", {"sigma": 0.5}, b["p0"], b["p1"][:3])
    assert info.value.parameter == "p1"
    with pytest.raises(InvalidInput) as info:
        job_for("translog", {"sigma": 0.5, "gamma": np.eye(N_ITEMS)}, b)
    assert info.value.parameter == "gamma"


@pytest.mark.parametrize("family", ["ces", "stone_geary", "translog"])
def test_a_chunk_of_only_bad_rows(family: str) -> None:
    """A chunk whose every row is refused yields nothing and the next chunks go on (common
    practice)."""
    b = batch(23, households=5)
    w = b["w"].copy()
    w[1:3] *= 2.0
    params = {"sigma": 0.5} if family != "stone_geary" else {}
    res = run_households(job_for(family, params, b, chunk_rows=2), w, expenditure=b["m"],
                         on_bad_rows="skip")
    assert res.rows.tolist() == [0, 3, 4] and res.skipped.count == 2 and res.chunks == 3


def test_one_by_one_families_flag_households_where_the_model_is_not_regular() -> None:
    """A flexible form is regular only near its base point (Christensen, Jorgenson and Lau 1975;
    Diewert 1976): a large price change sends some households' translog shares outside [0, 1],
    that is, a negative current demand (Mas-Colell, Whinston and Green 1995, 2.F and 3.G). With
    the default formulas those households are kept and flagged, exactly the ones whose single
    comparison is irregular, with its reasons and items; their model figures are NaN (withheld)
    and the current-weighted formulas, undefined at a negative quantity, are left out for them.
    Named explicitly, such a formula refuses those households instead, at ``formulas``."""
    rng = np.random.default_rng(24)
    p0, p1 = np.ones(4), np.array([0.4, 1.0, 1.6, 1.0])
    w = rng.dirichlet(np.ones(4), 20)
    job = HouseholdJob.checked("translog", {"sigma": 3.0}, p0, p1)
    res = run_households(job, w)
    assert res.skipped.count == 0 and res.rows.tolist() == list(range(20))
    irregular = []
    for h in range(20):
        base = BaseBudget.from_shares(p0, w[h], 1.0)
        r = compare(calibrate("translog", base, {"sigma": 3.0}), base, p1, current_income=1.0)
        assert (res.irregular[0, h] != 0) == (not r.validity.regular)
        if r.validity.regular:
            assert res.values["konus"][0, h] == pytest.approx(r.konus.base, rel=1e-12)
            continue
        irregular.append(h)
        assert set(reasons_of(int(res.irregular[0, h]))) == {n.code for n in r.validity.reasons}
        assert res.irregular_items[(0, h)] == r.validity.items
        assert np.isnan(res.values["konus"][0, h]) and np.isnan(res.values["bias_laspeyres"][0, h])
        assert res.values["laspeyres"][0, h] == pytest.approx(r.formulas["laspeyres"].value)
        assert np.isnan(res.values["paasche"][0, h])  # weights by the negative demand
    assert 0 < len(irregular) < 20
    codes = {n.code for n in res.notices}
    assert {"households_outside_regular_region", "formula_not_computed",
            "shares_outside_unit_interval"} <= codes
    named = HouseholdJob.checked("translog", {"sigma": 3.0}, p0, p1,
                                 formulas=["laspeyres", "paasche"])
    refused = run_households(named, w, on_bad_rows="skip")
    assert sorted(p.row for p in refused.skipped.listed) == irregular
    assert all(p.field == "formulas" and p.item == 1 and "negative" in p.rule
               for p in refused.skipped.listed)
