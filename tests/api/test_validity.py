"""A model outside its regular region does not headline its figures; defaults never fail a
request and are each stated; a formula asked for and not computable is a located refusal.

Sources beside each check: the Konüs (1924) bound K(u0) <= P_L; regularity of a demand system
(shares in [0, 1], demands non-negative, Slutsky matrix symmetric and negative semidefinite:
Mas-Colell, Whinston and Green 1995, 2.F and 3.G); the Lloyd-Moulton index is exact for CES
preferences with the same elasticity (Lloyd 1975; Moulton 1996; ILO et al. 2004, *Consumer
Price Index Manual*, 17.61-17.64, from memory of the paragraph numbers). Figures computed by
hand in the test are marked so.
"""

from __future__ import annotations

import csv
import io
import math
from typing import Any
from urllib.parse import urlencode

import pytest

from tests.api.test_bad_input import assert_problem, post
from tests.api.test_comparisons import small_request

ITEMS = [{"id": "bread", "label": "Rye loaf"}, {"id": "transit", "label": "Transit pass"},
         {"id": "heating", "label": "Heating"}]


def translog_far_from_base() -> dict[str, Any]:
    """Shares .3/.3/.4, base prices 2.40/9/38, current 2.52/40/41, translog with sigma 3: the
    transit price more than quadruples, far outside the region where this flexible form is
    regular (Christensen, Jorgenson and Lau 1975)."""
    return {"items": ITEMS,
            "base": {"prices": [2.40, 9.0, 38.0], "shares": [0.3, 0.3, 0.4], "expenditure": 100.0},
            "current": {"prices": [2.52, 40.0, 41.0]},
            "model": {"family": "translog", "sigma": 3.0}}


def test_irregular_model_withholds_its_figures_and_names_the_items(client) -> None:
    r = post(client, translog_far_from_base())
    assert r.status_code == 200, r.text
    out = r.json()
    validity = out["validity"]
    assert validity["state"] == "outside_regular_region" and validity["regular"] is False
    codes = {reason["code"] for reason in validity["reasons"]}
    assert {"shares_outside_unit_interval", "negative_demand"} <= codes
    # Items by id and label, never by a 0-based position.
    assert validity["items"] == [{"id": "transit", "label": "Transit pass"}]
    for reason in validity["reasons"]:
        assert reason["items"] == [{"id": "transit", "label": "Transit pass"}]
        assert "Transit pass (transit)" in reason["message"]
        assert "item 1" not in reason["message"]
    # The model's figures are not in the headline ...
    assert all(out["konus"][k] is None for k in ("base", "current", "midpoint"))
    assert out["laspeyres_gap_points"] is None
    comp = out["compensation"]
    assert comp["compensating_variation"] is None and comp["equivalent_variation"] is None
    assert comp["compensated_income"] is None
    for row in out["by_item"]:
        assert row["compensated_quantity"] is None and row["substitution_effect"] is None
        assert row["current_quantity"] is None and row["laspeyres_gap_points"] is None
    # ... the formula indices are, without a bias against a Konüs index that is not one.
    formulas = {f["formula"]: f for f in out["formulas"]}
    # Laspeyres from the shares by hand: sum_i w0_i p1_i / p0_i.
    by_hand = 0.3 * 2.52 / 2.40 + 0.3 * 40 / 9 + 0.4 * 41 / 38
    assert formulas["laspeyres"]["value"] == pytest.approx(by_hand, rel=1e-14)
    assert formulas["laspeyres"]["bias_points"] is None and formulas["laspeyres"]["konus"] is None
    # The current-weighted formulas would weight by the model's negative demand: left out, each
    # with a notice naming the item.
    assert "paasche" not in formulas and "fisher" not in formulas
    left_out = [n for n in out["notices"]
                if n["code"] == "formula_not_computed" and "negative" in n["message"]]
    assert len(left_out) >= 2
    assert all(n["items"] == [{"id": "transit", "label": "Transit pass"}] for n in left_out)
    # For diagnosis only, the figures as computed, which break the Konüs bound's spirit: a
    # "Konüs index" of about 1.067 against a Laspeyres of 2.08.
    figures = validity["figures_not_results"]
    assert figures["konus"]["base"] == pytest.approx(1.0667, abs=1e-4)
    assert figures["laspeyres_gap_points"] == pytest.approx(100 * (by_hand - 1.0667083666603263))
    assert "not results" in validity["withheld"]


def test_regular_model_says_so(client) -> None:
    out = post(client, small_request()).json()
    assert out["validity"]["state"] == "regular" and out["validity"]["reasons"] == []
    assert out["validity"]["figures_not_results"] is None
    assert out["konus"]["base"] is not None


def test_explicit_current_weighted_formula_on_negative_demand_is_a_refusal(client) -> None:
    body = translog_far_from_base() | {"formulas": ["laspeyres", "paasche"]}
    assert_problem(post(client, body), "/formulas/1", "negative", "Paasche")


def test_huge_sigma_answers_every_formula_the_data_allow(client) -> None:
    """sigma = 1e6: CES near perfect substitutes, whose demand at current prices goes to the
    item that became relatively cheapest (its other demands underflow to zero). The request does not fail: the
    formulas that take logarithms of shares are left out with a notice naming the items, and
    the Lloyd-Moulton index at the model's sigma equals the CES Konüs index (Lloyd 1975;
    Moulton 1996: exact for CES)."""
    body = small_request()
    body["model"]["sigma"] = 1e6
    r = post(client, body)
    assert r.status_code == 200, r.text
    out = r.json()
    assert out["validity"]["regular"]
    names = {f["formula"]: f["value"] for f in out["formulas"]}
    assert {"laspeyres", "paasche", "fisher", "tornqvist", "walsh"} <= set(names)
    sato = [n for n in out["notices"] if "Sato-Vartia" in n["message"]]
    assert sato[0]["code"] == "formula_not_computed"
    # Only c became relatively cheaper (3.6 from 4, against 1.3 from 1 and 2 from 2).
    assert [i["id"] for i in sato[0]["items"]] == ["a", "b"]
    assert names["lloyd_moulton"] == pytest.approx(out["konus"]["base"], rel=1e-12)
    codes = {n["code"] for n in out["notices"]}
    assert "lloyd_moulton_sigma_from_model" in codes


def extreme_prices() -> dict[str, Any]:
    body = small_request()
    body["base"]["prices"] = [1e-300, 1.0, 1e300]
    body["current"]["prices"] = [1e-300, 1.1, 1e300]
    return body


def test_prices_1e300_apart_answer_with_what_floating_point_allows(client) -> None:
    r = post(client, extreme_prices())
    assert r.status_code == 200, r.text
    out = r.json()
    formulas = {f["formula"]: f["value"] for f in out["formulas"]}
    # By hand: the 1e300 item carries the whole budget and its price did not move.
    assert formulas["laspeyres"] == 1.0 and formulas["paasche"] == 1.0
    assert "sato_vartia" not in formulas
    notes = {n["code"]: n for n in out["notices"]}
    assert any(n["code"] == "formula_not_computed" and "Sato-Vartia" in n["message"]
               for n in out["notices"])
    assert [i["id"] for i in notes["share_below_float_range"]["items"]] == ["a"]
    assert out["konus"]["midpoint"] == pytest.approx(1.0)


def test_formula_asked_for_beyond_floating_point_is_a_refusal(client) -> None:
    body = extreme_prices() | {"formulas": ["sato_vartia"]}
    # With the model's demands for current quantities the 1e-300 item's demand is zero.
    assert_problem(post(client, body), "/formulas/0", "zero", "Sato-Vartia")
    # With observed current quantities its logarithmic means leave floating point.
    body["current"]["quantities"] = [8.0, 6.0, 2.5]
    assert_problem(post(client, body), "/formulas/0", "floating point")


def test_formula_asked_for_without_its_input_is_a_refusal(client) -> None:
    body = small_request() | {"formulas": ["laspeyres", "lowe"]}
    assert_problem(post(client, body), "/formulas/1", "weight-reference")


@pytest.mark.parametrize("given,code", [
    ({}, "current_income_assumed"),
    ({"quantities": [8.0, 6.0, 2.5]}, "current_income_from_quantities"),
    ({"expenditure": 31.4}, None),
])
def test_every_income_default_is_stated(client, given, code) -> None:
    body = small_request()
    body["current"] = {"prices": body["current"]["prices"]} | given
    out = post(client, body).json()
    codes = {n["code"] for n in out["notices"]}
    defaults = {"current_income_assumed", "current_income_from_quantities"} & codes
    assert defaults == ({code} if code else set())
    if code == "current_income_assumed":
        assert out["living_standards"]["current_income"] == out["living_standards"]["base_income"]


# -- the spreadsheet forms --------------------------------------------------------------------

def sheet_query(**extra: str) -> str:
    query = {"items": "bread,transit,heating", "p0": "2.40,9,38", "w0": "0.3,0.3,0.4",
             "m0": "100", "p1": "2.52,40,41", "family": "translog", "sigma": "3"} | extra
    return urlencode(query)


def test_sheet_value_refuses_a_model_figure_outside_the_regular_region(client) -> None:
    r = client.get("/v1/sheet/value?" + sheet_query())
    assert r.status_code == 422
    problem = r.json()
    assert problem["type"] == "/problems/model-not-regular"
    assert "transit" in problem["detail"] and "not a result" in problem["detail"]
    text = client.get("/v1/sheet/value?" + sheet_query(on_error="text"))
    assert text.status_code == 200 and text.text.startswith("ERROR: ")
    assert "regular" in text.text
    # A formula index stays available.
    lasp = client.get("/v1/sheet/value?" + sheet_query(measure="laspeyres"))
    assert lasp.status_code == 200
    assert float(lasp.text) == pytest.approx(0.3 * 2.52 / 2.40 + 0.3 * 40 / 9 + 0.4 * 41 / 38)


def test_sheet_table_marks_the_model_and_leaves_its_cells_empty(client) -> None:
    r = client.get("/v1/sheet/comparison?" + sheet_query())
    assert r.status_code == 200, r.text
    rows = {row["measure"]: row for row in csv.DictReader(io.StringIO(r.text))}
    assert float(rows["model_regular"]["value"]) == 0.0
    assert rows["konus_base"]["value"] == "" and rows["compensating_variation"]["value"] == ""
    assert rows["laspeyres"]["value"] != "" and rows["laspeyres"]["bias_points"] == ""
    regular = client.get("/v1/sheet/comparison?" + sheet_query(family="ces", sigma="0.6"))
    rows = {row["measure"]: row for row in csv.DictReader(io.StringIO(regular.text))}
    assert float(rows["model_regular"]["value"]) == 1.0
    assert math.isfinite(float(rows["konus_base"]["value"]))


def test_sheet_forms_take_a_formula_list(client) -> None:
    r = client.get("/v1/sheet/comparison?" + sheet_query(family="ces", sigma="0.6",
                                                         formulas="laspeyres,paasche"))
    measures = [row["measure"] for row in csv.DictReader(io.StringIO(r.text))]
    formulas = [m for m in measures if m in {"laspeyres", "paasche", "fisher", "tornqvist"}]
    assert formulas == ["laspeyres", "paasche"]
    bad = client.get("/v1/sheet/value?" + sheet_query(formulas="laspeyres,nonesuch"))
    assert bad.status_code == 422
    assert any(e["pointer"].startswith("#/query/formulas") for e in bad.json()["errors"])
