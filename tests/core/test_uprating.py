"""Uprating clauses (core/uprating.py): a clause applied by hand on a short series, rounding
against Python's decimal module, and the clause's rules named by field."""

from __future__ import annotations

import decimal
from decimal import Decimal

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st
from numpy.testing import assert_allclose

from dualcost.core.changes import Calendar
from dualcost.core.errors import InvalidInput
from dualcost.core.preferences import calibrate
from dualcost.core.series_panel import check_periods
from dualcost.core.uprating import Clause, round_percent, schedule, uprate, uprating_by_label

MONTHS = [f"{y}-{m:02d}" for y in (2023, 2024, 2025) for m in range(1, 13)]


def calendar(labels: list[str]) -> Calendar:
    out, freq, times = check_periods(labels, None)
    return Calendar.of(out, freq, times)


def test_a_clause_with_rounding_and_a_floor_equals_the_hand_computation() -> None:
    """Pensions uprated each April by the previous September's 12-month change, rounded half
    up to one decimal, floor 0 (the shape of such clauses is common practice), on a short
    monthly series; every factor and every amount is worked by hand below."""
    labels = MONTHS[8:]  # 2023-09 .. 2025-12
    x = np.full(len(labels), 100.0)
    at = {label: t for t, label in enumerate(labels)}
    x[at["2024-09"]] = 103.25   # +3.25 % on 2023-09: rounds half up to 3.3
    x[at["2025-09"]] = 101.0    # 101 / 103.25 - 1 = -2.179... %: rounds to -2.2, floored to 0
    clause = Clause("twelve_month", lag=7, period_of_year=9, decimals=1, rounding="half_up",
                    floor=0.0)
    (result,) = uprate([clause], {"idx": x}, calendar(labels), amount=1000.0)
    steps = [(labels[s.measured_at], labels[s.measured_from], s.paid_from_label)
             for s in result.steps]
    assert steps == [("2024-09", "2023-09", "2025-04"), ("2025-09", "2024-09", "2026-04")]
    f = result.by_series["idx"]
    assert_allclose(f.change_percent, [3.25, 100.0 * (101.0 / 103.25 - 1.0)], rtol=1e-12)
    assert f.applied_percent.tolist() == [3.3, 0.0]
    assert_allclose(f.factors, [1.033, 1.0], rtol=1e-15)
    assert f.paid is not None
    # 2023-09 .. 2025-03: 19 months at 1000; 2025-04 .. 2025-12: 9 months at 1033.
    assert_allclose(f.paid[:19], 1000.0)
    assert_allclose(f.paid[19:], 1033.0)
    assert f.by_year == pytest.approx({2023: 4000.0, 2024: 12000.0, 2025: 3000.0 + 9 * 1033.0})
    assert result.not_computed == ((0, "2022-09, a year earlier, is not in the series"),)


def test_annual_average_and_cumulative_clauses_by_hand() -> None:
    """Annual average over the previous annual average, read in December and paid from April
    (lag 4), truncated to whole percent with a cap of 2; and a cumulative clause from a stated
    month, then from each uprating's measure month (hand computation)."""
    x = np.concatenate([np.full(12, 100.0), np.full(12, 104.0), np.full(12, 105.04)])
    cal = calendar(MONTHS)
    avg = Clause("annual_average", lag=4, decimals=0, rounding="down", cap=2.0)
    (r,) = uprate([avg], {"i": x}, cal)
    assert [(cal.labels[s.measured_at], s.paid_from_label) for s in r.steps] == [
        ("2024-12", "2025-04"), ("2025-12", "2026-04")]
    assert_allclose(r.by_series["i"].change_percent, [4.0, 1.0], rtol=1e-12)
    # 4 capped at 2; 0.99999... truncated to 0 would be wrong: 1.0 as written is 1.
    assert r.by_series["i"].applied_percent.tolist() == [2.0, 1.0]
    cum = Clause("cumulative", lag=0, period_of_year=6, since=MONTHS.index("2023-12"))
    (c,) = uprate([cum], {"i": x}, cal)
    assert [(cal.labels[s.measured_from], cal.labels[s.measured_at]) for s in c.steps] == [
        ("2023-12", "2024-06"), ("2024-06", "2025-06")]
    assert_allclose(c.by_series["i"].factors, [1.04, 1.01], rtol=1e-12)


@pytest.mark.parametrize("method,expected", [
    ("half_up", [2.4, -2.4, 2.3, 1.0]), ("half_even", [2.4, -2.4, 2.2, 1.0]),
    ("down", [2.3, -2.3, 2.2, 1.0]), ("up", [2.4, -2.4, 2.3, 1.0])])
def test_rounding_methods_on_decimal_ties(method: str, expected: list[float]) -> None:
    """2.35 and 2.25 are decimal ties: half up goes away from zero, half even to the even digit;
    down truncates, up goes away from zero (common practice, the IEEE 754 and decimal module
    names). 2.35 is not exactly representable in binary; the rule reads it as written."""
    got = [round_percent(v, 1, method) for v in (2.35, -2.35, 2.25, 1.0)]  # type: ignore[arg-type]
    assert got == expected


MODES = {"half_up": decimal.ROUND_HALF_UP, "half_even": decimal.ROUND_HALF_EVEN,
         "down": decimal.ROUND_DOWN, "up": decimal.ROUND_UP}


@settings(max_examples=400, deadline=None)
@given(st.floats(min_value=-60.0, max_value=60.0, allow_nan=False),
       st.integers(min_value=0, max_value=4), st.sampled_from(sorted(MODES)))
def test_rounding_agrees_with_the_decimal_module(value: float, places: int, method: str) -> None:
    """Every rounding method equals Python's decimal module (reference library; its ROUND_*
    modes) quantizing the change as written to 12 significant figures."""
    written = Decimal(f"{value:.12g}")
    expected = float(written.quantize(Decimal(1).scaleb(-places), rounding=MODES[method]))
    assert round_percent(value, places, method) == expected  # type: ignore[arg-type]


@settings(max_examples=200, deadline=None)
@given(st.integers(min_value=-10**6, max_value=10**6), st.integers(min_value=0, max_value=3))
def test_exact_ties_round_half_even_like_the_decimal_module(k: int, places: int) -> None:
    """Values that are exact decimal ties (k + 1/2 units of the last place) round to the even
    neighbour, as the decimal module's ROUND_HALF_EVEN does."""
    tie = Decimal(2 * k + 1) / 2 * Decimal(1).scaleb(-places)
    expected = float(tie.quantize(Decimal(1).scaleb(-places), rounding=decimal.ROUND_HALF_EVEN))
    assert round_percent(float(tie), places, "half_even") == expected


LABELS = MONTHS[:14]


@pytest.mark.parametrize("clause,field", [
    (Clause("twelve_month", lag=0, period_of_year=1, floor=3.0, cap=1.0), "floor"),
    (Clause("twelve_month", lag=-1, period_of_year=1), "lag"),
    (Clause("twelve_month", lag=0, period_of_year=1, decimals=-1), "decimals"),
    (Clause("bogus", lag=0), "measure"),  # type: ignore[arg-type]
    (Clause("twelve_month", lag=0, period_of_year=13), "period_of_year"),
    (Clause("twelve_month", lag=0), "period_of_year"),
    (Clause("twelve_month", lag=0, period_of_year=6), "measure"),  # June 2022 not in series
    (Clause("twelve_month", lag=40, period_of_year=1), "lag"),  # paid after the series
    (Clause("annual_average", lag=0), "measure"),  # one complete year only
    (Clause("cumulative", lag=0, period_of_year=1), "since"),
])
def test_a_bad_clause_is_refused_naming_its_field(clause: Clause, field: str) -> None:
    with pytest.raises(InvalidInput) as exc:
        schedule(clause, calendar(LABELS), 2)
    assert exc.value.parameter == "clauses" and exc.value.index == (2, field)


def test_the_series_and_the_clauses_come_from_one_call() -> None:
    """Under a homothetic model the Konüs factor is read from the Konüs series like any other;
    the formula factors equal those of their own published series."""
    rng = np.random.default_rng(5)
    p = np.exp(np.cumsum(rng.normal(0.003, 0.02, (14, 3)), axis=0))
    out = uprating_by_label(
        clauses=[{"measure": "twelve_month", "period_of_year": 1, "lag": 1}],
        amount=500.0, prices=p, quantities=np.ones((14, 3)), periods=LABELS,
        items=["a", "b", "c"], formulas=["laspeyres", "fisher"],
        model=lambda budget, items: calibrate("ces", budget, {"sigma": 0.5}))
    (c,) = out.clauses
    fb = out.labelled.result.formulas["laspeyres"].fixed_base
    assert_allclose(c.by_series["laspeyres"].factors, [fb[12] / fb[0]], rtol=1e-12)
    k = out.labelled.result.konus
    assert k is not None
    assert_allclose(c.by_series["konus"].factors, [k.fixed_base["base"][12]
                                                   / k.fixed_base["base"][0]], rtol=1e-12)
    assert {n.code for n in out.notices} >= {"series_kind_assumed", "konus_standard_assumed"}
    diff = c.by_series["laspeyres"].difference
    assert diff is not None and c.by_series["konus"].difference is None


def test_a_quarterly_clause_reads_the_same_quarter_a_year_earlier() -> None:
    """The 12-month change of quarterly data compares four quarters back (common practice);
    a third-quarter measure with a lag of one quarter is paid from the fourth."""
    labels = [f"{y}-Q{q}" for y in (2024, 2025) for q in range(1, 5)]
    x = np.array([100.0, 101.0, 102.0, 103.0, 104.0, 105.0, 106.08, 107.0])
    (r,) = uprate([Clause("twelve_month", lag=1, period_of_year=3, decimals=2)],
                  {"i": x}, calendar(labels))
    (step,) = r.steps
    assert (labels[step.measured_at], labels[step.measured_from], step.paid_from_label) == (
        "2025-Q3", "2024-Q3", "2025-Q4")
    assert r.by_series["i"].applied_percent.tolist() == [4.0]
