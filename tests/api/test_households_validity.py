"""Household answers that say where the model stands behind its figures, state every default,
number rows from 1 everywhere and state their scale.

A household panel under a translog model with sigma = 3 (three items, base prices 2.40/9/38),
in two periods: a mild one, and one where the transit price more than quadruples. A flexible
form is regular only near the point it was calibrated at (Christensen, Jorgenson and Lau 1975):
for the households that spend little on transit the transit share turns negative at the
second period's prices, a negative demand, which no regular model gives (shares in [0, 1],
demands non-negative, Slutsky matrix symmetric and negative semidefinite: Mas-Colell, Whinston
and Green 1995, *Microeconomic Theory*, 2.F and 3.G). Which households those are is not taken
from the service: each household's own single comparison, through the core, says so, and the
Laspeyres figures and summaries the tests compare with are computed by hand (marked so).
"""

from __future__ import annotations

import copy
import csv
import io
from typing import Any

import numpy as np
import pytest
from fastapi.testclient import TestClient

from dualcost.api.operations.answers import SCALE_RATIO
from dualcost.api.schemas.households import HouseholdIndicesResponse, HouseholdJobOut
from dualcost.core.comparison import compare
from dualcost.core.preferences import BaseBudget, calibrate
from tests.api.test_bad_input import assert_problem
from tests.api.test_households import create_job, post, upload

ITEMS = [{"id": "bread", "label": "Rye loaf"}, {"id": "transit", "label": "Transit pass"},
         {"id": "heating", "label": "Heating"}]
P0 = np.array([2.40, 9.0, 38.0])
PERIODS = {"mild": np.array([2.52, 9.9, 41.0]), "transit_quadruples": np.array([2.52, 40.0, 41.0])}
#: id, shares, income, weight (None: not given).
HOUSEHOLDS: list[tuple[str, tuple[float, float, float], float, float | None]] = [
    ("bakers", (0.3, 0.3, 0.4), 100.0, 2.0),
    ("commuters", (0.1, 0.8, 0.1), 250.0, 1.0),
    ("long_commute", (0.05, 0.9, 0.05), 400.0, 3.0),
    ("pensioners", (0.5, 0.1, 0.4), 150.0, None),
    ("students", (0.1, 0.75, 0.15), 120.0, 1.5),
]


def panel(**extra: Any) -> dict[str, Any]:
    households = []
    for hid, shares, income, weight in HOUSEHOLDS:
        h: dict[str, Any] = {"id": hid, "shares": list(shares), "expenditure": income}
        if weight is not None:
            h["weight"] = weight
        households.append(h)
    return {"items": ITEMS, "base_prices": P0.tolist(),
            "periods": [{"period": k, "prices": v.tolist()} for k, v in PERIODS.items()],
            "model": {"family": "translog", "sigma": 3.0}, "households": households} | extra


def single(h: int, period: str) -> Any:
    """The household's own single comparison (the core's comparison, with its validity)."""
    _, shares, income, _ = HOUSEHOLDS[h]
    base = BaseBudget.from_shares(P0, np.array(shares), income)
    model = calibrate("translog", base, {"sigma": 3.0})
    return compare(model, base, PERIODS[period], current_income=income)


def irregular_in(period: str) -> list[int]:
    return [h for h in range(len(HOUSEHOLDS)) if not single(h, period).validity.regular]


def weights() -> np.ndarray:
    return np.array([1.0 if w is None else w for *_, w in HOUSEHOLDS])


def laspeyres_by_hand(h: int, period: str) -> float:
    """sum_i w0_i p1_i / p0_i, by hand."""
    return float(np.dot(HOUSEHOLDS[h][1], PERIODS[period] / P0))


def test_the_panel_has_regular_and_irregular_households() -> None:
    """The premise, from the households' own comparisons: every household is regular at the
    mild prices; at the second period's, some are not (a negative transit demand)."""
    assert irregular_in("mild") == []
    assert irregular_in("transit_quadruples") == [0, 3]
    for h in (0, 3):
        codes = {n.code for n in single(h, "transit_quadruples").validity.reasons}
        assert {"shares_outside_unit_interval", "negative_demand"} <= codes


def test_irregular_household_periods_are_flagged_and_their_model_figures_null(
        client: TestClient) -> None:
    r = post(client, panel())
    assert r.status_code == 200, r.text
    out = r.json()
    HouseholdIndicesResponse.model_validate(out)
    assert out["scale"] == SCALE_RATIO
    for j, hh in enumerate(out["households"]):
        assert hh["row"] == j + 1 and hh["household"] == HOUSEHOLDS[j][0]
        mild, big = hh["periods"]
        assert mild["model_regular"] is True and mild["konus"] is not None
        reference = single(j, "transit_quadruples")
        if reference.validity.regular:
            assert big["model_regular"] is True and big["irregular_reasons"] == []
            assert big["konus"] == pytest.approx(reference.konus.base, rel=1e-12)
            # Konüs (1924): K(u0) <= Laspeyres for a regular model.
            assert big["konus"] <= big["indices"]["laspeyres"]
            assert big["bias_points"]["laspeyres"] == pytest.approx(
                100 * (big["indices"]["laspeyres"] - big["konus"]), rel=1e-12)
            continue
        assert big["model_regular"] is False
        assert set(big["irregular_reasons"]) == {n.code for n in reference.validity.reasons}
        assert big["irregular_items"] == ["transit"]
        for key in ("konus", "konus_current", "konus_midpoint", "compensating_variation",
                    "equivalent_variation", "cv_percent"):
            assert big[key] is None, key
        assert all(v is None for v in big["bias_points"].values())
        # The formula indices stay: Laspeyres from the shares, by hand ...
        assert big["indices"]["laspeyres"] == pytest.approx(
            laspeyres_by_hand(j, "transit_quadruples"), rel=1e-14)
        assert big["indices"]["geometric_laspeyres"] is not None
        # ... but those weighting by the model's (negative) current demand are left out.
        for name in ("paasche", "fisher", "tornqvist"):
            assert big["indices"][name] is None, name
    notices = {n["code"]: n for n in out["notices"]}
    outside = notices["households_outside_regular_region"]["message"]
    assert outside.startswith("2 household-period(s)") and "in order: 0, 2" in outside
    left_out = notices["formula_not_computed"]
    assert left_out["message"].startswith("2 household-period(s)")
    assert left_out["items"] == [{"id": "transit", "label": "Transit pass"}]
    assert "Transit pass (transit)" in notices["shares_outside_unit_interval"]["message"]


def test_summaries_leave_irregular_households_out(client: TestClient) -> None:
    """Each period's democratic and plutocratic means (Prais 1959) are over the households
    whose model is regular there: by hand, weighted means of the regular households' own
    figures."""
    out = post(client, panel()).json()
    a = weights()
    m = np.array([income for _, _, income, _ in HOUSEHOLDS])
    mild, big = out["summary"]
    assert (mild["households"], mild["households_outside_regular_region"]) == (5, 0)
    assert (big["households"], big["households_outside_regular_region"]) == (3, 2)
    regular = [1, 2, 4]
    assert big["weight_total"] == pytest.approx(a[regular].sum())
    assert big["expenditure_total"] == pytest.approx((a * m)[regular].sum())
    by_index = {s["index"]: s for s in big["indices"]}
    lasp = np.array([laspeyres_by_hand(h, "transit_quadruples") for h in regular])
    assert by_index["laspeyres"]["households"] == 3
    assert by_index["laspeyres"]["democratic"] == pytest.approx(
        np.average(lasp, weights=a[regular]), rel=1e-14)
    assert by_index["laspeyres"]["plutocratic"] == pytest.approx(
        np.average(lasp, weights=(a * m)[regular]), rel=1e-14)
    konus = np.array([single(h, "transit_quadruples").konus.base for h in regular])
    assert by_index["konus"]["democratic"] == pytest.approx(
        np.average(konus, weights=a[regular]), rel=1e-12)
    cv = np.array([single(h, "transit_quadruples").compensating_variation for h in regular])
    assert big["compensating_variation_total"] == pytest.approx(np.sum(a[regular] * cv),
                                                                rel=1e-12)
    everyone = [laspeyres_by_hand(h, "mild") for h in range(5)]
    lasp_mild = next(s for s in mild["indices"] if s["index"] == "laspeyres")
    assert lasp_mild["democratic"] == pytest.approx(np.average(everyone, weights=a), rel=1e-14)


def test_a_period_where_no_household_is_regular(client: TestClient) -> None:
    body = panel()
    body["households"] = [body["households"][0], body["households"][3]]
    out = post(client, body).json()
    big = out["summary"][1]
    assert big["households"] == 0 and big["households_outside_regular_region"] == 2
    assert big["indices"] == [] and big["compensating_variation_total"] is None


def test_every_default_is_stated(client: TestClient) -> None:
    out = post(client, panel()).json()
    notices = {n["code"]: n["message"] for n in out["notices"]}
    assert "walsh" in notices["default_formulas"] and "lloyd_moulton" in notices["default_formulas"]
    assert "current_income_assumed" in notices
    assert "current_quantities_from_model" in notices
    assert notices["weights_assumed"].startswith("1 household(s) gave no weight")
    assert "lloyd_moulton_sigma_from_model" not in notices
    ces = panel(model={"family": "ces", "sigma": 0.7},
                formulas=["laspeyres", "lloyd_moulton"])
    notices = {n["code"]: n["message"] for n in post(client, ces).json()["notices"]}
    assert "0.7" in notices["lloyd_moulton_sigma_from_model"] and "default_formulas" not in notices


def test_a_named_formula_that_cannot_be_computed_refuses_the_household(
        client: TestClient) -> None:
    """Named in formulas, Paasche cannot weight by a negative quantity: the households where the
    model's demand is negative are refused, each pointing at /formulas/1 and named by its row
    (from 1); the default set never fails the request."""
    body = panel(formulas=["laspeyres", "paasche"])
    problem = assert_problem(post(client, body), "/formulas/1", "household row 1", "Paasche")
    assert [e["pointer"] for e in problem["errors"]] == ["/formulas/1", "/formulas/1"]
    assert "household row 4 ('pensioners')" in problem["errors"][1]["detail"]
    skipped = post(client, body | {"bad_rows": "skip"}).json()
    assert [h["row"] for h in skipped["households"]] == [2, 3, 5]
    assert [(s["row"], s["reason"], s["pointer"]) for s in skipped["skipped"]["rows"]] == [
        (1, "formula_not_computed", "/formulas/1"), (4, "formula_not_computed", "/formulas/1")]
    assert post(client, panel()).status_code == 200


def test_csv_answer_flags_and_leaves_cells_empty(client: TestClient) -> None:
    r = post(client, panel(), headers={"accept": "text/csv"})
    assert r.status_code == 200, r.text
    assert r.headers["dualcost-scale"] == ("indices: ratio, 1 = no change; "
                                           "bias: index points on base 100")
    rows = list(csv.reader(io.StringIO(r.text)))
    assert rows[0][:9] == ["household", "row", "period", "weight", "expenditure",
                           "model_regular", "irregular_reasons", "irregular_items", "laspeyres"]
    table = [dict(zip(rows[0], row, strict=True)) for row in rows[1:]]
    assert [int(t["row"]) for t in table] == [1, 1, 2, 2, 3, 3, 4, 4, 5, 5]
    bakers = table[1]
    assert (bakers["household"], bakers["period"]) == ("bakers", "transit_quadruples")
    assert bakers["model_regular"] == "false"
    assert bakers["irregular_reasons"] == "negative_demand;shares_outside_unit_interval"
    assert bakers["irregular_items"] == "transit"
    assert bakers["konus"] == bakers["compensating_variation"] == bakers["bias_laspeyres"] == ""
    assert bakers["paasche"] == "" and float(bakers["laspeyres"]) == pytest.approx(
        laspeyres_by_hand(0, "transit_quadruples"), rel=1e-14)
    commuters = table[3]
    assert commuters["model_regular"] == "true" and commuters["irregular_reasons"] == ""
    assert float(commuters["konus"]) == pytest.approx(
        single(1, "transit_quadruples").konus.base, rel=1e-12)


def job_csv(bad_income_row: bool = False) -> str:
    """The panel as a CSV upload; the pensioners' id holds a line break, so their record spans
    two lines (RFC 4180 quoting) and every later record starts one line further down."""
    lines = ["household,expenditure,weight,bread,transit,heating"]
    for hid, shares, income, weight in HOUSEHOLDS:
        name = '"pensioners\n(harbour ward)"' if hid == "pensioners" else hid
        lines.append(",".join([name, repr(income), repr(1.0 if weight is None else weight),
                               *map(repr, shares)]))
    if bad_income_row:
        lines.append("nobody,-5.0,1.0,0.3,0.3,0.4")
    return "\r\n".join(lines) + "\r\n"


def test_csv_job_numbers_rows_from_1_and_gives_the_record_line(client: TestClient) -> None:
    spec = {k: v for k, v in panel().items() if k != "households"}
    job = create_job(client, spec)
    r = upload(client, job, job_csv(bad_income_row=True))
    assert r.status_code == 200, r.text
    assert r.headers["dualcost-scale"].startswith("indices: ratio, 1 = no change")
    rows = list(csv.reader(io.StringIO(r.text)))
    assert rows[0][:9] == ["household", "row", "record", "period", "weight", "expenditure",
                           "model_regular", "irregular_reasons", "irregular_items"]
    table = [dict(zip(rows[0], row, strict=True)) for row in rows[1:]]
    # Rows count households from 1 after the header; record is the line a household's record
    # starts on: the pensioners' record spans lines 5 and 6, so the students start on line 7.
    assert [(int(t["row"]), int(t["record"])) for t in table[::2]] == [
        (1, 2), (2, 3), (3, 4), (4, 5), (5, 7)]
    assert table[6]["household"] == "pensioners\n(harbour ward)"
    flags = [(t["household"].split("\n")[0], t["period"], t["model_regular"]) for t in table]
    assert [f for f in flags if f[2] == "false"] == [("bakers", "transit_quadruples", "false"),
                                                     ("pensioners", "transit_quadruples", "false")]
    assert table[7]["konus"] == "" and table[7]["irregular_items"] == "transit"

    status = client.get(job["links"]["self"]).json()
    HouseholdJobOut.model_validate(status)
    assert status["scale"] == SCALE_RATIO
    (bad,) = status["skipped"]["rows"]
    # The sixth record after the header: row 6, on line 8; its cell is RFC 7111 record 7.
    assert (bad["row"], bad["record"], bad["pointer"]) == (6, 8, "#cell=7,2")
    assert bad["detail"].startswith("row 6 (line 8): column 'expenditure'")
    big = status["summary"][1]
    assert (big["households"], big["households_outside_regular_region"]) == (3, 2)
    codes = {n["code"] for n in status["notices"]}
    assert {"households_outside_regular_region", "default_formulas",
            "current_income_assumed"} <= codes
    assert "weights_assumed" not in codes  # the upload has a weight column


def test_csv_job_without_a_weight_column_says_so(client: TestClient) -> None:
    spec = {k: v for k, v in panel().items() if k != "households"}
    job = create_job(client, spec)
    text = "household,bread,transit,heating\r\ncommuters,0.1,0.8,0.1\r\n"
    assert upload(client, job, text).status_code == 200
    notices = {n["code"]: n for n in client.get(job["links"]["self"]).json()["notices"]}
    assert "no weight column" in notices["weights_assumed"]["message"]


def test_comparison_and_households_state_the_same_scale(client: TestClient) -> None:
    body = copy.deepcopy(panel())
    comparison = {"items": ITEMS,
                  "base": {"prices": P0.tolist(), "shares": [0.1, 0.8, 0.1], "expenditure": 250},
                  "current": {"prices": PERIODS["mild"].tolist()},
                  "model": {"family": "translog", "sigma": 3.0}}
    one = client.post("/v1/comparisons", json=comparison).json()
    assert one["scale"] == post(client, body).json()["scale"] == SCALE_RATIO
    assert SCALE_RATIO == {"indices": "ratio, 1 = no change", "bias": "index points on base 100"}


def test_weights_whose_total_would_overflow_are_refused_by_row(client: TestClient) -> None:
    """Two household weights of 1e308 would make the period's weight total infinite after the
    rows were streamed (a cut answer, a failed job). Weights are counts of households, so the
    rule bounds them at 1e12 (and incomes at 1e100): such a row is refused by its row and
    field, before anything is computed, and the job completes (common practice: survey weights
    gross a sample up to a population)."""
    from tests.api.test_households import create_job, upload

    lines = job_csv().split("\r\n")
    for k in (1, 2):
        cells = lines[k].split(",")
        cells[2] = "1e308"
        lines[k] = ",".join(cells)
    job = create_job(client, panel())
    r = upload(client, job, "\r\n".join(lines))
    assert r.status_code == 200, r.text
    status = client.get(job["links"]["self"]).json()
    assert status["status"] == "done"
    skipped = status["skipped"]["rows"]
    assert [(s["row"], s["reason"]) for s in skipped] == [(1, "bad_weight"), (2, "bad_weight")]
    assert "at most 1e+12" in skipped[0]["detail"]
    body = panel()
    body["households"][0]["weight"] = 1e308
    refused = client.post("/v1/household-indices", json=body)
    assert refused.status_code == 422
    assert "at most 1e+12" in refused.text
