"""POST /v1/comparisons: the shape and the economics of an answer, through HTTP."""

from __future__ import annotations

import numpy as np
import pytest
from numpy.testing import assert_allclose

from tests.conftest import load_example


def small_request(**model: object) -> dict:
    return {
        "items": [{"id": "a", "label": "Item A"}, "b", "c"],
        "base": {"prices": {"a": 1.0, "b": 2.0, "c": 4.0}, "quantities": [10.0, 5.0, 2.0]},
        "current": {"prices": [1.3, 2.0, 3.6]},
        "model": model or {"family": "ces", "sigma": 0.6},
    }


def test_ces_comparison_matches_the_lloyd_moulton_closed_form(client) -> None:
    """For CES the Konüs index is the Lloyd-Moulton index with base shares (Lloyd 1975;
    Moulton 1996); here computed by hand from the request's numbers."""
    r = client.post("/v1/comparisons", json=small_request())
    assert r.status_code == 200, r.text
    body = r.json()
    p0, p1, q0 = np.array([1.0, 2, 4]), np.array([1.3, 2, 3.6]), np.array([10.0, 5, 2])
    w0 = p0 * q0 / (p0 @ q0)
    sigma = 0.6
    expected = (w0 @ (p1 / p0) ** (1 - sigma)) ** (1 / (1 - sigma))
    assert_allclose(body["konus"]["base"], expected, rtol=1e-12)
    assert body["konus"]["homothetic"] is True
    formulas = {f["formula"]: f for f in body["formulas"]}
    assert_allclose(formulas["laspeyres"]["value"], (p1 @ q0) / (p0 @ q0), rtol=1e-12)
    assert_allclose(formulas["lloyd_moulton"]["value"], expected, rtol=1e-12)
    assert formulas["laspeyres"]["compared_with"] == "base"
    assert formulas["paasche"]["compared_with"] == "current"
    assert formulas["fisher"]["compared_with"] == "midpoint"
    assert_allclose(formulas["laspeyres"]["bias_points"], 100 * (formulas["laspeyres"]["value"]
                                                                 - expected), rtol=1e-10)


def test_item_contributions_add_up_to_the_laspeyres_gap(client) -> None:
    """The per-item split of Laspeyres minus Konüs(u0) is exact (Euler's theorem on e)."""
    body = client.post("/v1/comparisons", json=small_request()).json()
    parts = sum(i["laspeyres_gap_points"] for i in body["by_item"])
    assert_allclose(parts, body["laspeyres_gap_points"], rtol=1e-10, atol=1e-12)
    assert body["laspeyres_gap_points"] >= 0.0  # Konüs (1924): K(u0) <= Laspeyres


def test_hicks_split_adds_up_and_compensation_is_stated_as_a_loss(client) -> None:
    """Substitution plus income effect equals the quantity change; CV = e(p1,u0) - m1."""
    body = client.post("/v1/comparisons", json=small_request()).json()
    for item in body["by_item"]:
        assert_allclose(item["substitution_effect"] + item["income_effect"],
                        item["current_quantity"] - item["base_quantity"], atol=1e-12)
    comp = body["compensation"]
    m = body["living_standards"]
    assert_allclose(comp["compensating_variation"], comp["compensated_income"] - m["current_income"],
                    rtol=1e-12)
    assert comp["compensating_variation"] > 0  # prices rose on balance, income unchanged
    assert "losses" in comp["sign_convention"]
    assert "indexation" in body["caution"]


def test_observed_current_quantities_are_used_by_the_formulas(client) -> None:
    req = small_request()
    req["current"]["quantities"] = [8.0, 5.5, 2.5]
    body = client.post("/v1/comparisons", json=req).json()
    formulas = {f["formula"]: f for f in body["formulas"]}
    p0, p1, q1 = np.array([1.0, 2, 4]), np.array([1.3, 2, 3.6]), np.array([8.0, 5.5, 2.5])
    assert_allclose(formulas["paasche"]["value"], (p1 @ q1) / (p0 @ q1), rtol=1e-12)
    assert_allclose(body["living_standards"]["current_income"], p1 @ q1, rtol=1e-12)
    assert "current_quantities_from_model" not in {n["code"] for n in body["notices"]}


def test_formulas_needing_absent_inputs_are_left_out_with_a_notice(client) -> None:
    """Lowe and Young need a weight-reference period: by default they are left out, and said so."""
    body = client.post("/v1/comparisons", json=small_request()).json()
    names = {f["formula"] for f in body["formulas"]}
    assert "lowe" not in names and "young" not in names
    messages = " ".join(n["message"] for n in body["notices"] if n["code"] == "formula_not_computed")
    assert "Lowe" in messages and "Young" in messages


def test_weight_reference_gives_lowe_and_young(client) -> None:
    """Lowe = sum p1 qb / sum p0 qb; Young = sum wb p1/p0 (CPI Manual 2004, 15.33 and 15.48)."""
    req = small_request()
    req["weight_reference"] = {"prices": [0.9, 2.1, 3.8], "quantities": [11.0, 4.0, 2.0]}
    body = client.post("/v1/comparisons", json=req).json()
    formulas = {f["formula"]: f["value"] for f in body["formulas"]}
    p0, p1 = np.array([1.0, 2, 4]), np.array([1.3, 2, 3.6])
    pb, qb = np.array([0.9, 2.1, 3.8]), np.array([11.0, 4, 2])
    assert_allclose(formulas["lowe"], (p1 @ qb) / (p0 @ qb), rtol=1e-12)
    wb = pb * qb / (pb @ qb)
    assert_allclose(formulas["young"], wb @ (p1 / p0), rtol=1e-12)


def test_explicit_formula_list_is_honoured_in_order(client) -> None:
    req = small_request()
    req["formulas"] = ["fisher", "laspeyres"]
    body = client.post("/v1/comparisons", json=req).json()
    assert [f["formula"] for f in body["formulas"]] == ["fisher", "laspeyres"]


def test_reference_living_standard_for_a_non_homothetic_model(client) -> None:
    """Stone-Geary is not homothetic: the Konüs index depends on the living standard, and a
    poorer reference household (closer to subsistence) faces a different index."""
    req = small_request(family="stone_geary", subsistence_quantities=[6.0, 1.0, 0.5])
    req["reference_income"] = 25.0
    body = client.post("/v1/comparisons", json=req).json()
    assert body["konus"]["homothetic"] is False
    assert body["konus"]["reference"] != pytest.approx(body["konus"]["base"], rel=1e-6)


def test_shares_with_expenditure_are_a_base_budget(client) -> None:
    req = small_request()
    req["base"] = {"prices": [1.0, 2.0, 4.0], "shares": [0.5, 0.3, 0.2], "expenditure": 200.0}
    body = client.post("/v1/comparisons", json=req).json()
    assert_allclose([i["base_quantity"] for i in body["by_item"]], [100.0, 30.0, 10.0], rtol=1e-12)


def test_demo_scenario_answers(client) -> None:
    body = client.get("/v1/demo").json()
    assert body["result"]["family"] == "nested_ces"
    assert body["request"] == load_example("compare.wrenmouth_nested_ces.json")
    assert body["result"]["laspeyres_gap_points"] > 0


def test_negative_model_demand_leaves_out_current_weighted_formulas(client) -> None:
    """Far from its base point a flexible form (here translog with sigma 3) can demand a negative
    quantity; the formulas weighted by current quantities are then undefined and are left out
    with a notice, beside the regularity warning (never NaN, never a numpy warning)."""
    req = small_request(family="translog", sigma=3.0)
    req["current"]["prices"] = [4.0, 2.0, 0.5]
    r = client.post("/v1/comparisons", json=req)
    assert r.status_code == 200, r.text
    body = r.json()
    codes = [n["code"] for n in body["notices"]]
    assert "shares_outside_unit_interval" in codes
    names = {f["formula"] for f in body["formulas"]}
    assert "laspeyres" in names and "walsh" not in names and "paasche" not in names
    assert any("negative" in n["message"] for n in body["notices"] if n["code"] == "formula_not_computed")


@pytest.mark.parametrize("value,finite", [
    ({"groups": [{"sigma": 1.0, "items": [1, 2]}], "weights": [0.1, 0.9]}, True),
    ({"a": [1.0, 2.0, {"b": float("inf")}]}, False),
    ([1.0, float("nan")], False),
    ([1.0, 10**400, "text", None], True),
    ([[1.0, 2.0], [3.0, -float("inf")]], False),
    ({"path": "all items", "sigma": float("nan"), "items": []}, False),
    ({"name": "g", "base_share": np.float64("inf")}, False),
    ({"weights": (0.5, 0.5), "note": None, "count": 2, "flag": True}, True),
])
def test_all_finite_finds_any_nan_or_infinity(value, finite) -> None:
    """The guard before a model's parameters are written (never NaN or infinity in a 200)."""
    from dualcost.api.render import all_finite

    assert all_finite(value) is finite
