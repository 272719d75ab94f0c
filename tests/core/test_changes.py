"""Change measures and rebasing (core/changes.py) against hand computation from their
definitions, and their place in the series."""

from __future__ import annotations

import numpy as np
import pytest
from numpy.testing import assert_allclose

from dualcost.core.changes import Calendar, Rebase, annual_averages, changes, changes_of
from dualcost.core.errors import InvalidInput
from dualcost.core.series import calibrate_to_base, index_series, series_by_label
from dualcost.core.series_panel import check_periods
from tests.core.test_series import random_panel


def calendar(labels: list[str], frequency: str | None = None) -> Calendar:
    out, freq, times = check_periods(labels, frequency)
    return Calendar.of(out, freq, times)


MONTHS = [f"{y}-{m:02d}" for y in (2024, 2025, 2026) for m in range(1, 13)][:27]  # to 2026-03


def test_monthly_measures_equal_hand_computation() -> None:
    """Period-on-period, 12-month, annual average and its change follow their definitions:
    100 (X_t/X_{t-1} - 1), 100 (X_t/X_{t-12} - 1), the mean of the calendar year's twelve
    levels and 100 (A_y/A_{y-1} - 1) (common practice; CPI Manual, ILO/IMF et al. 2004, ch. 9,
    from memory), computed here by hand with plain Python loops."""
    rng = np.random.default_rng(20)
    x = 100.0 * np.exp(np.cumsum(rng.normal(0.002, 0.01, len(MONTHS))))
    c = changes(x, calendar(MONTHS))
    for t in range(len(MONTHS)):
        pop = None if t == 0 else 100.0 * (x[t] / x[t - 1] - 1.0)
        yoy = None if t < 12 else 100.0 * (x[t] / x[t - 12] - 1.0)
        assert (np.isnan(c.period_on_period[t]) if pop is None
                else abs(c.period_on_period[t] - pop) < 1e-12)
        assert (np.isnan(c.twelve_month[t]) if yoy is None
                else abs(c.twelve_month[t] - yoy) < 1e-12)
    a24, a25 = sum(x[:12]) / 12.0, sum(x[12:24]) / 12.0
    assert c.annual.years == (2024, 2025)
    assert_allclose(c.annual.averages, [a24, a25], rtol=1e-14)
    assert np.isnan(c.annual.change_percent[0])
    assert_allclose(c.annual.change_percent[1], 100.0 * (a25 / a24 - 1.0), rtol=1e-12)
    reasons = {(e.measure, e.periods, e.years) for e in c.empty}
    assert ("twelve_month", tuple(range(12)), ()) in reasons
    assert ("annual_average", (), (2026,)) in reasons  # 2026 has three months only


def test_twelve_month_change_is_the_same_period_a_year_earlier_for_any_frequency() -> None:
    """The 12-month change compares with the same period a year earlier: four quarters back
    for quarterly data, one year for annual data (common practice)."""
    quarters = [f"{y}-Q{q}" for y in (2024, 2025) for q in range(1, 5)]
    x = np.array([100, 101, 103, 102, 104, 105, 108, 110], dtype=float)
    c = changes(x, calendar(quarters))
    assert_allclose(c.twelve_month[4:], 100.0 * (x[4:] / x[:4] - 1.0), rtol=1e-14)
    assert np.isnan(c.twelve_month[:4]).all()
    assert_allclose(c.annual.averages, [101.5, 106.75])
    years = calendar(["2023", "2024", "2025"])
    y = np.array([100.0, 103.0, 104.03])
    cy = changes(y, years)
    assert_allclose(cy.twelve_month[1:], cy.period_on_period[1:], rtol=1e-15)
    assert_allclose(cy.annual.change_percent[1:], [3.0, 1.0], rtol=1e-12)


def test_a_gap_in_the_months_leaves_the_measures_that_need_it_empty_with_the_reason() -> None:
    """A month missing from the series is never bridged: the change from it is empty, named."""
    labels = ["2025-01", "2025-02", "2025-04"]
    c = changes(np.array([100.0, 101.0, 103.0]), calendar(labels))
    assert np.isnan(c.period_on_period[2])
    empty = [e for e in c.empty if e.measure == "period_on_period"][0]
    assert empty.periods == (0, 2) and "not in the series" in empty.reason


def test_labels_that_are_not_dates_have_no_twelve_month_or_annual_measure_and_say_why() -> None:
    c = changes(np.array([100.0, 102.0, 101.0]), calendar(["a", "b", "c"]))
    assert_allclose(c.period_on_period[1:], [2.0, 100.0 * (101.0 / 102.0 - 1.0)])
    assert np.isnan(c.twelve_month).all()
    measures = {e.measure for e in c.empty}
    assert {"twelve_month", "annual_average"} <= measures


def test_rebasing_leaves_every_ratio_and_change_unchanged() -> None:
    """Rebasing multiplies a series by one number, so ratios of levels and every change
    measure are invariant (CPI Manual, ILO/IMF et al. 2004, ch. 9, from memory)."""
    rng = np.random.default_rng(7)
    x = 100.0 * np.exp(np.cumsum(rng.normal(0.0, 0.02, 24)))
    cal = calendar(MONTHS[:24])
    plain = changes(x, cal)
    for rebase in (Rebase(period=5, value=100.0), Rebase(year=2025, value=1.0)):
        c = changes(x, cal, rebase)
        assert c.rebased is not None
        assert_allclose(c.rebased[1:] / c.rebased[:-1], x[1:] / x[:-1], rtol=1e-13)
        again = changes(c.rebased, cal)
        assert_allclose(again.period_on_period[1:], plain.period_on_period[1:], rtol=1e-10)
        assert_allclose(again.twelve_month[12:], plain.twelve_month[12:], rtol=1e-10)
        assert_allclose(again.annual.change_percent[1:], plain.annual.change_percent[1:],
                        rtol=1e-10)
    on_year = changes(x, cal, Rebase(year=2025, value=100.0)).rebased
    assert on_year is not None
    assert_allclose(np.mean(on_year[12:24]), 100.0, rtol=1e-14)


def test_a_rebase_year_the_series_does_not_cover_is_refused_by_name() -> None:
    with pytest.raises(InvalidInput) as exc:
        changes_of({"x": np.ones(3)}, calendar(["2025-01", "2025-02", "2025-03"]),
                   Rebase(year=2025))
    assert exc.value.parameter == "rebase_year"


def test_withheld_levels_make_the_measures_that_use_them_empty_with_that_reason() -> None:
    x = np.array([100.0, np.nan, 102.0, 103.0])
    c = changes(x, calendar(["2025-01", "2025-02", "2025-03", "2025-04"]))
    assert np.isnan(c.period_on_period[1:3]).all() and np.isfinite(c.period_on_period[3])
    assert any(e.measure == "period_on_period" and e.periods == (1, 2) and "withheld" in e.reason
               for e in c.empty)


def test_annual_averages_need_the_whole_year() -> None:
    a = annual_averages(np.arange(1.0, 14.0), calendar(MONTHS[:13]))
    assert a.years == (2024,) and a.averages[0] == 6.5


def test_every_published_series_carries_its_change_measures() -> None:
    """The series answers the measures for each formula, GEKS and Konüs series, and the
    rebased levels on the reference value asked for."""
    labels = MONTHS[:14]
    panel = random_panel(3, n_t=14, labels=labels)
    model = calibrate_to_base(panel, 0, "ces", {"sigma": 0.5})
    r = index_series(panel, model=model, rebase=Rebase(year=2024), reference_value=1.0)
    kinds = {(c.series, c.kind, c.standard) for c in r.changes}
    assert ("laspeyres", "fixed_base", None) in kinds and ("konus", "chained", "base") in kinds
    assert ("geks_fisher", "full_span", None) in kinds
    lasp = next(c for c in r.changes if (c.series, c.kind) == ("laspeyres", "chained"))
    assert lasp.changes.rebased is not None
    assert_allclose(np.mean(lasp.changes.rebased[:12]), 1.0, rtol=1e-14)
    assert_allclose(lasp.changes.twelve_month[12:],
                    100.0 * (r.formulas["laspeyres"].chained[12:]
                             / r.formulas["laspeyres"].chained[:2] - 1.0), rtol=1e-12)


def test_series_by_label_finds_the_rebase_period_by_its_label() -> None:
    rng = np.random.default_rng(1)
    p = np.exp(rng.normal(0.0, 0.1, (4, 3)))
    out = series_by_label(p, quantities=np.ones((4, 3)), periods=MONTHS[:4], items=list("abc"),
                          rebase_period="2024-03", formulas=["laspeyres"])
    c = out.result.changes[0].changes
    assert c.rebased is not None and c.rebased[2] == pytest.approx(100.0, rel=1e-15)
    with pytest.raises(InvalidInput) as exc:
        series_by_label(p, quantities=np.ones((4, 3)), periods=MONTHS[:4], items=list("abc"),
                        rebase_period="2030-01")
    assert exc.value.parameter == "rebase_period"
