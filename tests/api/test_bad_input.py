"""Every bad input gets a 422 problem (RFC 9457) naming the field by JSON Pointer and the rule.

One test per rule of the comparison operation; never a 500.
"""

from __future__ import annotations

import json
from typing import Any

import pytest

from tests.api.test_comparisons import small_request


def post(client, body: Any, raw: str | None = None):
    if raw is not None:
        return client.post("/v1/comparisons", content=raw,
                           headers={"content-type": "application/json"})
    return client.post("/v1/comparisons", json=body)


def assert_problem(r, pointer: str, *words: str, status: int = 422) -> dict:
    assert r.status_code == status, r.text
    assert r.headers["content-type"].startswith("application/problem+json")
    body = r.json()
    assert {"type", "title", "status", "detail"} <= set(body)
    assert body["status"] == status
    pointers = [e["pointer"] for e in body.get("errors", [])]
    assert pointer in pointers, (pointer, body)
    text = " ".join(e["detail"] for e in body["errors"]).lower()
    for w in words:
        assert w.lower() in text, (w, body)
    return body


@pytest.mark.parametrize("value,words", [
    (0.0, ["greater than zero"]),
    (-2.0, ["greater than zero"]),
])
def test_zero_or_negative_price(client, value, words) -> None:
    req = small_request()
    req["current"]["prices"][1] = value
    assert_problem(post(client, req), "/current/prices/1", *words)


def test_zero_base_price_keyed_by_id(client) -> None:
    req = small_request()
    req["base"]["prices"]["b"] = 0
    assert_problem(post(client, req), "/base/prices/b", "greater than zero")


@pytest.mark.parametrize("token", ["NaN", "Infinity", "-Infinity"])
def test_nan_or_infinite_price(client, token) -> None:
    raw = json.dumps(small_request()).replace('"a": 1.0', f'"a": {token}', 1)
    assert_problem(post(client, None, raw), "/base/prices/a", "finite")


def test_negative_quantity(client) -> None:
    req = small_request()
    req["base"]["quantities"][2] = -1.0
    assert_problem(post(client, req), "/base/quantities/2", "negative")


def test_vector_of_the_wrong_length(client) -> None:
    req = small_request()
    req["current"]["prices"] = [1.0, 2.0]
    assert_problem(post(client, req), "/current/prices", "2 values", "3 items")


def test_unknown_item_id(client) -> None:
    req = small_request()
    req["base"]["prices"]["z"] = 1.0
    assert_problem(post(client, req), "/base/prices/z", "not an item id")


def test_missing_item_in_a_keyed_vector(client) -> None:
    req = small_request()
    del req["base"]["prices"]["c"]
    assert_problem(post(client, req), "/base/prices", "no value", "'c'")


def test_duplicate_item_id(client) -> None:
    req = small_request()
    req["items"] = ["a", "b", "a"]
    assert_problem(post(client, req), "/items/2", "twice")


def test_shares_not_summing_to_one(client) -> None:
    req = small_request()
    req["base"] = {"prices": [1.0, 2.0, 4.0], "shares": [0.5, 0.3, 0.3], "expenditure": 100.0}
    assert_problem(post(client, req), "/base/shares", "sum to 1", "1.1")


def test_shares_normalised_only_when_asked_and_then_said(client) -> None:
    req = small_request()
    req["base"] = {"prices": [1.0, 2.0, 4.0], "shares": [0.5, 0.3, 0.3], "expenditure": 100.0}
    req["normalise_shares"] = True
    r = post(client, req)
    assert r.status_code == 200, r.text
    notices = {n["code"]: n["message"] for n in r.json()["notices"]}
    assert "shares_normalised" in notices and "1.1" in notices["shares_normalised"]


def test_negative_sigma(client) -> None:
    req = small_request(family="ces", sigma=-0.5)
    assert_problem(post(client, req), "/model/sigma", "zero or more")


def test_missing_sigma(client) -> None:
    assert_problem(post(client, small_request(family="ces")), "/model/sigma", "required")


def test_unknown_model_parameter_is_not_ignored(client) -> None:
    assert_problem(post(client, small_request(family="ces", sigma=0.5, sigmaa=1)),
                   "/model/sigmaa", "not a parameter")


def test_unknown_family(client) -> None:
    assert_problem(post(client, small_request(family="leontief_plus")), "/model/family",
                   "unknown preference family")


def test_unknown_top_level_field_is_not_ignored(client) -> None:
    req = small_request()
    req["base_prices"] = [1, 2, 3]
    assert_problem(post(client, req), "/base_prices", "not a field")


AIDS_OK: dict[str, Any] = {
    "family": "aids",
    "beta": [0.05, -0.02, -0.03],
    "gamma": [[-0.04, 0.02, 0.02], [0.02, -0.03, 0.01], [0.02, 0.01, -0.03]],
}


def test_aids_with_valid_parameters_answers(client) -> None:
    r = post(client, small_request(**AIDS_OK))
    assert r.status_code == 200, r.text
    assert r.json()["konus"]["homothetic"] is False


def test_aids_gamma_not_symmetric(client) -> None:
    model = json.loads(json.dumps(AIDS_OK))
    # An antisymmetric circulant keeps every row and column sum at zero: only symmetry breaks.
    bump = [[0, 1, -1], [-1, 0, 1], [1, -1, 0]]
    model["gamma"] = [[g + 0.01 * b for g, b in zip(row, brow, strict=True)]
                      for row, brow in zip(model["gamma"], bump, strict=True)]
    r = post(client, small_request(**model))
    assert r.status_code == 422
    (error,) = r.json()["errors"]
    assert error["pointer"] in ("/model/gamma/0/1", "/model/gamma/0/2", "/model/gamma/1/2")
    assert "symmetric" in error["detail"]


def test_aids_beta_breaking_adding_up(client) -> None:
    model = dict(AIDS_OK, beta=[0.05, 0.02, -0.03])
    assert_problem(post(client, small_request(**model)), "/model/beta", "sum")


def test_reference_income_below_subsistence(client) -> None:
    """Stone-Geary is undefined below the subsistence cost p0 . gamma (here 6+2+2 = 10)."""
    req = small_request(family="stone_geary", subsistence_quantities=[6.0, 1.0, 0.5])
    req["reference_income"] = 9.0
    assert_problem(post(client, req), "/reference_income", "subsistence")


def test_zero_quantity_where_a_formula_takes_logs(client) -> None:
    """Sato-Vartia takes logarithms of expenditure shares (Sato 1976; Vartia 1976)."""
    req = small_request()
    req["current"]["quantities"] = [8.0, 0.0, 2.5]
    # Under the default formula set it is left out, and a notice names the item.
    r = post(client, req)
    assert r.status_code == 200, r.text
    body = r.json()
    assert "sato_vartia" not in {f["formula"] for f in body["formulas"]}
    left_out = [n for n in body["notices"] if n["code"] == "formula_not_computed"
                and "Sato-Vartia" in n["message"]]
    assert [i["id"] for i in left_out[0]["items"]] == ["b"]
    # Asked for by name, it is a refusal located at the zero quantity.
    req["formulas"] = ["laspeyres", "sato_vartia"]
    assert_problem(post(client, req), "/current/quantities/1", "logarithms")
    req["formulas"] = ["laspeyres", "paasche", "fisher"]
    assert post(client, req).status_code == 200


def test_base_expenditure_inconsistent_with_basket(client) -> None:
    req = small_request()
    req["base"]["expenditure"] = 999.0
    assert_problem(post(client, req), "/base/expenditure", "differs")


def test_malformed_json_is_a_400_problem(client) -> None:
    r = post(client, None, '{"items": [')
    assert r.status_code == 400
    assert r.headers["content-type"].startswith("application/problem+json")
    # The parser says where it stopped (bodies are parsed by pydantic-core, see api/routing.py).
    assert "line 1 column 11" in r.json()["detail"]


@pytest.mark.parametrize("raw", ['{"items": ["a", "b"]} trailing', '\n\n  {"items": [1,,]}', "\ufeff"])
def test_text_that_is_not_json_is_a_400_problem(client, raw) -> None:
    r = post(client, None, raw)
    assert r.status_code == 400, r.text
    assert r.json()["type"].endswith("/malformed-request")


def test_body_parsing_keeps_the_standard_library_reading(client) -> None:
    """Bodies are parsed with pydantic-core instead of json.loads; a repeated key still means
    its last value (as json.loads reads it, Python docs, json module), so the same comparison
    comes back."""
    req = small_request()
    plain = post(client, req).json()
    first = json.dumps(req)
    raw = first.replace('"items":', '"items": ["x", "y"], "items":', 1)
    assert json.loads(raw) == req
    assert post(client, None, raw).json() == plain


def test_decode_error_position_matches_the_line_and_column() -> None:
    from dualcost.api.routing import _decode_error

    body = b'{\n  "a": [1,,\n]}'
    err = _decode_error("expected value at line 2 column 11", body)
    assert (err.lineno, err.colno) == (2, 11)


def test_bad_tree_points_into_the_tree(client) -> None:
    tree = {"sigma": 0.5, "children": [{"sigma": 1.0, "children": ["a", "q"]}, "b", "c"]}
    assert_problem(post(client, small_request(family="nested_ces", tree=tree)),
                   "/model/tree/children/0/children/1", "not an item id")


def test_tree_missing_an_item(client) -> None:
    tree = {"sigma": 0.5, "children": ["a", "b"]}
    assert_problem(post(client, small_request(family="nested_ces", tree=tree)), "/model/tree")


@pytest.mark.parametrize("family", ["translog", "quadratic", "aids"])
def test_prices_beyond_floating_point_range_are_a_numerical_failure_problem(client, family) -> None:
    """A model that cannot be evaluated at extreme prices answers a problem, never NaN or a 500."""
    model = dict(AIDS_OK) if family == "aids" else {"family": family, "sigma": 0.5}
    req = small_request(**model)
    req["current"]["prices"] = [1e300, 2.0, 1e-300]
    r = post(client, req)
    assert r.status_code == 422, r.text
    assert r.headers["content-type"].startswith("application/problem+json")
    assert r.json()["type"] == "/problems/numerical-failure"
    assert "nan" not in r.text.lower()


def test_tree_with_an_item_position_instead_of_an_id(client) -> None:
    """A request's tree names items by id; a number there is refused, not read as a position."""
    tree = {"sigma": 0.5, "children": [{"sigma": 1.0, "children": ["a", "b"]}, 2]}
    assert_problem(post(client, small_request(family="nested_ces", tree=tree)),
                   "/model/tree/children/1", "neither an item id nor a group")


def _resolves(body: Any, pointer: str, missing: bool) -> bool:
    """Whether a JSON Pointer (RFC 6901) leads to a value of the body; for a missing field,
    whether it leads to the object that lacks it."""
    parts = [p.replace("~1", "/").replace("~0", "~") for p in pointer.split("/")[1:]]
    if missing:
        parts = parts[:-1]
    node = body
    for p in parts:
        if isinstance(node, dict) and p in node:
            node = node[p]
        elif isinstance(node, list) and p.isdigit() and int(p) < len(node):
            node = node[int(p)]
        else:
            return False
    return True


def test_pointers_never_name_a_union_member(client) -> None:
    """An item or vector that fits none of its accepted forms is pointed at itself: pydantic
    puts the names of the forms it tried (``Item``, ``constrained-str``, ``list[...]``) in the
    error location, and a JSON Pointer must lead into the request (RFC 9457 problem details
    with RFC 6901 pointers; common practice for the ``errors`` member)."""
    req = small_request()
    req["items"][1] = 7  # neither an id nor an object
    req["items"][2] = {"label": "no id"}  # the object form without its id
    req["base"]["prices"] = {"a": "dear", "b": 2.0, "c": 4.0}
    body = assert_problem(post(client, req), "/items/1", "valid string")
    pointers = {e["pointer"] for e in body["errors"]}
    assert {"/items/1", "/items/2/id", "/base/prices/a"} <= pointers, body
    for e in body["errors"]:
        assert _resolves(req, e["pointer"], e["detail"] == "is required"), (e, body)
        assert "Item" not in e["pointer"] and "constrained" not in e["pointer"], body
