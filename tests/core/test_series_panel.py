"""The panel's checks at the core's edge: each rule names the argument and the position."""

from __future__ import annotations

import numpy as np
import pytest
from numpy.testing import assert_allclose

from dualcost.core.errors import InvalidInput
from dualcost.core.series import index_series
from dualcost.core.series_panel import Panel, check_periods, read_label

P = np.array([[1.0, 2.0], [1.1, 2.2], [1.2, 2.1]])
Q = np.array([[3.0, 1.0], [2.9, 1.1], [2.8, 1.2]])


def error(**kwargs) -> InvalidInput:
    args = {"prices": P, "quantities": Q} | kwargs
    with pytest.raises(InvalidInput) as info:
        Panel.checked(**args)
    return info.value


def test_period_labels_give_order_frequency_and_time() -> None:
    """YYYY-MM, YYYY-Qn and YYYY labels are months, quarters and years (ISO 8601 style, common
    practice); time between periods comes from the labels, gaps included."""
    assert read_label("2025-03") == ("monthly", 2025 * 12 + 2)
    assert read_label("2025-Q2") == ("quarterly", 2025 * 4 + 1)
    assert read_label("2025") == ("annual", 2025)
    assert read_label("7") == ("integer", 7)
    assert read_label("spring sale") is None
    labels, freq, times = check_periods(["2024-11", "2024-12", "2025-02"], None)
    assert freq == "monthly"
    assert_allclose(times, [0, 1, 3])
    _, freq, times = check_periods(["a", "b", "c"], "quarterly")
    assert freq == "quarterly"
    assert_allclose(times, [0, 1, 2])


def test_periods_out_of_order_or_duplicated() -> None:
    e = error(periods=["2025-02", "2025-01", "2025-03"])
    assert (e.parameter, e.index) == ("periods", 1) and "forwards" in e.rule
    e = error(periods=["x", "y", "x"])
    assert (e.parameter, e.index) == ("periods", 2) and "twice" in e.rule
    e = error(periods=["1", "2", "3"], frequency="weekly")
    assert e.parameter == "frequency"
    e = error(periods=["2025-01", "2025-02", "2025-03"], frequency="annual")
    assert e.parameter == "frequency" and "monthly" in e.rule


def test_prices_must_be_positive_where_given() -> None:
    e = error(prices=np.array([[1.0, 2.0], [1.1, -2.2], [1.2, 2.1]]))
    assert (e.parameter, e.index) == ("prices", (1, 1))
    e = error(prices=np.array([[1.0, 2.0], [1.1, np.inf], [1.2, 2.1]]))
    assert (e.parameter, e.index) == ("prices", (1, 1)) and "finite" in e.rule


def test_quantities_need_a_price_and_a_whole_period() -> None:
    p = P.copy()
    p[2, 0] = np.nan
    e = error(prices=p)
    assert (e.parameter, e.index) == ("quantities", (2, 0)) and "no price" in e.rule
    q = Q.copy()
    q[1, 1] = np.nan
    e = error(quantities=q)
    assert (e.parameter, e.index) == ("quantities", (1, 1)) and "other items" in e.rule
    e = error(quantities=np.array([[3.0, 1.0], [0.0, 0.0], [2.8, 1.2]]))
    assert (e.parameter, e.index) == ("quantities", (1,))


def test_expenditures_become_quantities_and_must_agree() -> None:
    """q = e / p; where both are given, p q must equal e (adding-up, 1e-6, common practice)."""
    panel = Panel.checked(P, expenditures=P * Q)
    assert_allclose(panel.quantities, Q, rtol=1e-15)
    bad = P * Q
    bad[0, 1] *= 1.01
    e = error(expenditures=bad)
    assert (e.parameter, e.index) == ("expenditures", (0, 1))


def test_items_and_periods_without_any_price() -> None:
    p = P.copy()
    p[:, 1] = np.nan
    e = error(prices=p, quantities=None)
    assert (e.parameter, e.index) == ("items", 1)
    p = P.copy()
    p[1] = np.nan
    e = error(prices=p, quantities=None)
    assert e.parameter == "prices" and e.index == (1,)


def test_options_outside_the_panel() -> None:
    panel = Panel.checked(P, quantities=Q, periods=["2025-01", "2025-02", "2025-03"])
    with pytest.raises(InvalidInput) as info:
        panel.period_index("base_period", "2024-12", 0)
    assert info.value.parameter == "base_period" and "not in the panel" in info.value.rule
    for kwargs, name in (({"base": 5}, "base_period"), ({"reference": -1}, "reference_period"),
                         ({"span": (2, 1)}, "span"), ({"loop": [0, 0]}, "loop"),
                         ({"geks_window": 4}, "geks_window"), ({"reference_value": 0.0},
                                                                "reference_value")):
        with pytest.raises(InvalidInput) as info:
            index_series(panel, **kwargs)
        assert info.value.parameter == name, kwargs
