"""Bad input to the index-series operations: a 422 problem (RFC 9457) naming the JSON field by
JSON Pointer (RFC 6901), or the CSV row and column by RFC 7111 fragment, or the query parameter."""

from __future__ import annotations

import json
from urllib.parse import quote

import pytest

from tests.api.test_bad_input import assert_problem
from tests.api.test_series import six_commodity_csv, six_commodity_request


def post(client, body):
    return client.post("/v1/index-series", json=body)


def post_csv(client, text: str, query: str = ""):
    return client.post(f"/v1/index-series/csv{query}", content=text,
                       headers={"content-type": "text/csv"})


# -- JSON -----------------------------------------------------------------------------------------


def test_periods_out_of_order(client) -> None:
    req = six_commodity_request(periods=["2025-01", "2025-03", "2025-02", "2025-04", "2025-05"])
    assert_problem(post(client, req), "/periods/2", "forwards")


def test_period_listed_twice(client) -> None:
    req = six_commodity_request(periods=[1, 2, 3, 2, 5])
    assert_problem(post(client, req), "/periods/3", "twice")


def test_price_without_an_item_id_in_a_list_row(client) -> None:
    req = six_commodity_request()
    req["prices"] = [row[:] for row in req["prices"]]
    req["prices"][2].append(1.5)
    assert_problem(post(client, req), "/prices/2/6", "no item id")


def test_price_keyed_by_an_unknown_item(client) -> None:
    req = six_commodity_request()
    req["prices"] = [dict(zip(req["items"], row, strict=True)) for row in req["prices"]]
    req["prices"][1]["c9"] = 2.0
    assert_problem(post(client, req), "/prices/1/c9", "not an item id")


def test_text_where_a_number_belongs(client) -> None:
    req = six_commodity_request()
    req["prices"] = [row[:] for row in req["prices"]]
    req["prices"][3][1] = "cheap"
    r = post(client, req)
    assert r.status_code == 422, r.text
    pointers = [e["pointer"] for e in r.json()["errors"]]
    assert "/prices/3/1" in pointers


def test_base_period_outside_the_panel(client) -> None:
    assert_problem(post(client, six_commodity_request(base_period=9)), "/base_period",
                   "not in the panel")


@pytest.mark.parametrize("field,value,pointer,word", [
    ("reference_period", "0", "/reference_period", "not in the panel"),
    ("span", {"start": 4, "end": 2}, "/span", "forwards"),
    ("loop", [1, 7], "/loop/1", "not in the panel"),
    ("weight_reference", {"period": 4}, "/weight_reference", "later than the base"),
    ("new_goods_sigma", 0.8, "/new_goods_sigma", "greater than 1"),
    ("geks", {"window": 9}, "/geks/window", "longer than the panel"),
    ("formulas", ["fisher", "lowe"], "/formulas/1", "weight-reference"),
    ("model", {"family": "ces", "sigma": -1}, "/model/sigma", "zero or more"),
    ("reference_value", 10, "/reference_value", "1 or 100"),
])
def test_options_that_break_a_rule(client, field, value, pointer, word) -> None:
    assert_problem(post(client, six_commodity_request(**{field: value})), pointer, word)


def test_weight_reference_shares_break_a_rule(client) -> None:
    shares = {"c1": 0.5, "c2": 0.5, "c3": 0.5, "c4": 0.0, "c5": 0.0, "c6": 0.0}
    req = six_commodity_request(weight_reference={"shares": shares})
    assert_problem(post(client, req), "/weight_reference/shares", "sum to 1")
    shares = {"c1": 1.5, "c2": -0.5, "c3": 0.0, "c4": 0.0, "c5": 0.0, "c6": 0.0}
    req = six_commodity_request(weight_reference={"shares": shares})
    assert_problem(post(client, req), "/weight_reference/shares/c2", "negative")
    req = six_commodity_request(weight_reference={"period": 1, "shares": shares})
    assert_problem(post(client, req), "/weight_reference", "not both")


def test_negative_price_is_named_by_item_id(client) -> None:
    req = six_commodity_request()
    req["prices"] = [dict(zip(req["items"], row, strict=True)) for row in req["prices"]]
    req["prices"][2]["c4"] = -0.5
    assert_problem(post(client, req), "/prices/2/c4", "greater than zero")


def test_quantity_for_an_item_without_a_price(client) -> None:
    req = six_commodity_request()
    req["prices"] = [row[:] for row in req["prices"]]
    req["prices"][1][0] = None
    assert_problem(post(client, req), "/quantities/1/0", "no price")


def test_quantity_missing_for_one_priced_item(client) -> None:
    req = six_commodity_request()
    req["quantities"] = [row[:] for row in req["quantities"]]
    req["quantities"][2][5] = None
    assert_problem(post(client, req), "/quantities/2/5", "other items")


def test_rows_and_periods_disagree(client) -> None:
    req = six_commodity_request()
    req["prices"] = req["prices"][:4]
    assert_problem(post(client, req), "/prices", "one row per period")


def test_too_many_periods_is_refused(client) -> None:
    req = six_commodity_request(periods=list(range(1, 1002)))
    req["prices"] = [[1.0] * 6] * 1001
    req["quantities"] = None
    assert_problem(post(client, req), "/periods", "limit")


# -- CSV ------------------------------------------------------------------------------------------


def test_csv_missing_column(client) -> None:
    text = six_commodity_csv().replace("period,item,price,quantity", "period,item,cost,quantity")
    assert_problem(post_csv(client, text), "#row=1", "'price'")


def test_csv_text_where_a_number_belongs(client) -> None:
    lines = six_commodity_csv().splitlines()
    lines[9] = "2,c3,one point three,1.9"
    assert_problem(post_csv(client, "\n".join(lines)), "#cell=10,3", "'price'", "not a finite")


def test_csv_price_without_an_item_id(client) -> None:
    lines = six_commodity_csv().splitlines()
    lines[4] = "1,,1.0,1.0"
    assert_problem(post_csv(client, "\n".join(lines)), "#cell=5,2", "'item'", "empty")


def test_csv_periods_out_of_order(client) -> None:
    lines = six_commodity_csv().splitlines()
    text = "\n".join([lines[0], *lines[7:13], *lines[1:7], *lines[13:]])
    assert_problem(post_csv(client, text), "#cell=8,1", "forwards")


def test_csv_period_rows_not_grouped(client) -> None:
    lines = six_commodity_csv().splitlines()
    text = "\n".join([*lines[:8], lines[2], *lines[8:]])
    assert_problem(post_csv(client, text), "#cell=9,1", "grouped by period")


def test_csv_duplicated_row(client) -> None:
    lines = six_commodity_csv().splitlines()
    text = "\n".join([*lines[:4], lines[2], *lines[4:]])
    assert_problem(post_csv(client, text), "#row=5", "already given in row 3")


def test_csv_negative_quantity_names_the_cell(client) -> None:
    lines = six_commodity_csv().splitlines()
    lines[14] = "3,c2,1.0,-1.1"
    assert_problem(post_csv(client, "\n".join(lines)), "#cell=15,4", "negative")


def test_csv_base_period_outside_the_panel(client) -> None:
    assert_problem(post_csv(client, six_commodity_csv(), "?base_period=2020"),
                   "#/query/base_period", "not in the panel")


def test_csv_model_parameter_errors_point_into_the_query(client) -> None:
    bad = quote(json.dumps({"family": "ces", "sigma": -2}))
    assert_problem(post_csv(client, six_commodity_csv(), f"?model={bad}"),
                   "#/query/model/sigma", "zero or more")
    assert_problem(post_csv(client, six_commodity_csv(), "?model=%7Bnot%20json"),
                   "#/query/model", "JSON object")


def test_csv_unknown_formula_in_the_query(client) -> None:
    assert_problem(post_csv(client, six_commodity_csv(), "?formulas=fisher,fisherman"),
                   "#/query/formulas")


def test_csv_needs_the_csv_media_type(client) -> None:
    r = client.post("/v1/index-series/csv", content=six_commodity_csv(),
                    headers={"content-type": "application/json"})
    assert_problem(r, "#/header/content-type", "text/csv")
