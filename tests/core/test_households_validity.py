"""Where a household batch's model is outside its regular region (dualcost.core.households and
dualcost.core.validity): the same households, reasons and items as each household's own single
comparison, found on arrays for the families that broadcast.

Regularity: shares in [0, 1], demands (Marshallian and Hicksian) non-negative, a Slutsky matrix
symmetric and negative semidefinite (Mas-Colell, Whinston and Green 1995, *Microeconomic
Theory*, 2.F and 3.G). Cobb-Douglas, CES with sigma >= 0 and Stone-Geary above subsistence come
from increasing, quasi-concave utility functions and are regular by construction (ibid., 3.E);
with a subsistence quantity below zero a Stone-Geary demand can still fall below zero, which is
how the tests below leave the regular region of a family that broadcasts.
"""

from __future__ import annotations

from typing import Any

import numpy as np
import pytest

from dualcost.core.comparison import compare
from dualcost.core.households import HouseholdJob, reasons_of, run_households
from dualcost.core.preferences import FAMILIES, BaseBudget, Preferences, calibrate
from dualcost.core.preferences.ces import CES

P0 = np.array([1.0, 2.0, 4.0, 3.0])
GAMMA = np.array([-3.0, 0.5, 0.5, 0.5])  # a negative subsistence quantity of item 0


def panel(seed: int = 5, households: int = 12) -> dict[str, Any]:
    rng = np.random.default_rng(seed)
    return {"w": rng.dirichlet(np.full(4, 2.0), households),
            "m": rng.uniform(80.0, 400.0, households)}


def single(w: np.ndarray, m: float, p1: np.ndarray, family: str = "stone_geary",
           params: dict[str, Any] | None = None) -> Any:
    base = BaseBudget.from_shares(P0, w, m)
    model = calibrate(family, base, {"subsistence_quantities": GAMMA} if params is None
                      else params)
    return compare(model, base, p1, current_income=m)


@pytest.mark.parametrize("factors", [[6.0, 1.0, 1.05, 1.0],  # item 0 dear: x(p1, m) < 0
                                     [3.0, 0.5, 0.5, 0.5]])  # only h(p1, u0) < 0 for some
def test_broadcasting_family_flags_the_households_its_single_comparisons_flag(
        factors: list[float]) -> None:
    """Stone-Geary with gamma_0 < 0: x_0 = gamma_0 + beta_0 (m - p . gamma) / p_0 (Stone 1954)
    falls below zero when p_0 rises far enough, and the Hicksian h_0(p1, u0) can fall below
    zero while the Marshallian demand does not (when the other prices fall, e(p1, u0) < m). The
    batch, evaluated on arrays, flags exactly the households whose own comparison is
    irregular, with the same reasons and items; their model figures are withheld (NaN)."""
    p1 = P0 * np.array(factors)
    b = panel()
    res = run_households(HouseholdJob.checked("stone_geary", {"subsistence_quantities": GAMMA},
                                              P0, p1), b["w"], expenditure=b["m"])
    assert res.skipped.count == 0
    flagged = []
    for h in range(len(b["m"])):
        r = single(b["w"][h], b["m"][h], p1)
        assert (res.irregular[0, h] != 0) == (not r.validity.regular), h
        if r.validity.regular:
            assert res.values["konus"][0, h] == pytest.approx(r.konus.base, rel=1e-12)
            assert res.values["paasche"][0, h] == pytest.approx(r.formulas["paasche"].value,
                                                                rel=1e-12)
            continue
        flagged.append(h)
        assert set(reasons_of(int(res.irregular[0, h]))) == {n.code for n in r.validity.reasons}
        assert res.irregular_items[(0, h)] == r.validity.items == (0,)
        for name in ("konus", "konus_current", "konus_midpoint", "compensating_variation",
                     "equivalent_variation", "cv_percent", "bias_laspeyres"):
            assert np.isnan(res.values[name][0, h]), name
        assert res.values["laspeyres"][0, h] == pytest.approx(r.formulas["laspeyres"].value,
                                                              rel=1e-14)
        # Paasche weights by x(p1, m): left out where that is negative, kept otherwise.
        x_negative = "paasche" not in r.formulas
        assert np.isnan(res.values["paasche"][0, h]) == x_negative
    assert flagged
    (period,) = res.summary
    assert period.households_outside_regular_region == len(flagged)
    assert period.households == len(b["m"]) - len(flagged)
    konus = next(s for s in period.indices if s.index == "konus")
    kept = [h for h in range(len(b["m"])) if h not in flagged]
    assert konus.democratic == pytest.approx(np.mean(res.values["konus"][0, kept]), rel=1e-14)
    codes = {n.code for n in res.notices}
    assert {"households_outside_regular_region", "negative_demand"} <= codes


def test_a_named_formula_refuses_the_household_where_the_data_do_not_allow_it() -> None:
    p1 = P0 * np.array([6.0, 1.0, 1.05, 1.0])
    b = panel()
    job = HouseholdJob.checked("stone_geary", {"subsistence_quantities": GAMMA}, P0, p1,
                               formulas=["laspeyres", "paasche"])
    res = run_households(job, b["w"], expenditure=b["m"], on_bad_rows="skip")
    negative = [h for h in range(len(b["m"]))
                if "paasche" not in single(b["w"][h], b["m"][h], p1).formulas]
    assert negative and sorted(p.row for p in res.skipped.listed) == negative
    assert all(p.field == "formulas" and p.item == 1 and p.code == "formula_not_computed"
               for p in res.skipped.listed)


@pytest.mark.parametrize("family,params", [("cobb_douglas", {}), ("ces", {"sigma": 0.0}),
                                           ("ces", {"sigma": 4.0}), ("stone_geary", {})])
def test_families_regular_by_construction_are_never_flagged(family: str,
                                                            params: dict[str, Any]) -> None:
    """Large price changes, both ways: no flag, as the theory says (module docstring)."""
    b = panel(7, 200)
    rng = np.random.default_rng(7)
    periods = P0 * np.exp(rng.normal(0.0, 0.8, (3, 4)))
    res = run_households(HouseholdJob.checked(family, params, P0, periods), b["w"],
                         expenditure=b["m"], on_bad_rows="skip")
    assert res.rows.size and not res.irregular.any()
    assert "households_outside_regular_region" not in {n.code for n in res.notices}


def test_no_family_that_broadcasts_has_regularity_conditions_of_its_own() -> None:
    """The batch checks a family that broadcasts on arrays (negative demands) and never calls
    its ``regularity``; that is complete only while no such family reports conditions there.
    A family added with ``broadcasts = True`` and its own ``regularity`` fails here: the batch
    must then check its conditions too."""
    broadcasting = [cls for cls in FAMILIES.values() if cls.broadcasts]
    assert {cls.family for cls in broadcasting} == {"cobb_douglas", "ces", "stone_geary"}
    for cls in broadcasting:
        assert cls.regularity is Preferences.regularity, cls.family


def test_the_vectorised_path_never_loops_over_households_for_regularity(
        monkeypatch: pytest.MonkeyPatch) -> None:
    def fail(*args: Any, **kwargs: Any) -> list[Any]:
        raise AssertionError("regularity called per household")

    monkeypatch.setattr(CES, "regularity", fail)
    b = panel(8, 50)
    res = run_households(HouseholdJob.checked("ces", {"sigma": 0.7}, P0, P0 * 1.1), b["w"])
    assert res.rows.size == 50 and not res.irregular.any()


def test_defaults_are_stated() -> None:
    b = panel(9, 5)
    default = run_households(HouseholdJob.checked("ces", {"sigma": 0.7}, P0, P0 * 1.1), b["w"])
    notices = {n.code: n.message for n in default.notices}
    assert "sato_vartia" in notices["default_formulas"]
    assert "current_income_assumed" in notices
    named = HouseholdJob.checked("ces", {"sigma": 0.7}, P0, P0 * 1.1,
                                 formulas=["laspeyres", "lloyd_moulton"])
    codes = [n.code for n in named.notices]
    assert "lloyd_moulton_sigma_from_model" in codes and "default_formulas" not in codes
    given = HouseholdJob.checked("ces", {"sigma": 0.7}, P0, P0 * 1.1,
                                 formulas=["lloyd_moulton"], lloyd_moulton_sigma=0.5)
    assert "lloyd_moulton_sigma_from_model" not in [n.code for n in given.notices]
