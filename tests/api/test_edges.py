"""Every number checked at the edge, and the smaller cases of a request's shape: out-of-range
literals, computations that leave the floating-point range, a bug's 500, deep bodies, the media
type, one error per broken rule, numbers given as text (service/dualcost/api/inputs/json_text.py,
routing.py, problems.py). Rules of this service, checked against Python's float (IEEE 754
binary64: largest 1.8e308, smallest normal 2.2e-308, as sys.float_info states)."""

from __future__ import annotations

import json
import socket
import sys
import threading
import time
from typing import Any

import pytest
import uvicorn

from dualcost.api.app import create_app
from dualcost.api.inputs import json_text
from dualcost.config import Settings
from tests.api.test_comparisons import small_request
from tests.api.test_number_mutations import replaced
from tests.conftest import EXAMPLES, free_port, load_example

HUGE_INTEGER = "1" + "0" * 400


def post(client: Any, url: str, text: str | bytes, media: str = "application/json") -> Any:
    return client.post(url, content=text, headers={"content-type": media})


def single_error(r: Any) -> dict[str, str]:
    assert r.status_code == 422, r.text
    assert r.headers["content-type"].startswith("application/problem+json")
    errors = r.json()["errors"]
    assert len(errors) == 1, errors
    return errors[0]  # type: ignore[no-any-return]


def test_the_float_limits_are_python_s() -> None:
    """sys.float_info, the reference for the rules below."""
    assert json_text.SMALLEST_NORMAL == sys.float_info.min
    assert json_text.number_rule(repr(sys.float_info.max)) is None
    assert json_text.number_rule(repr(sys.float_info.min)) is None
    assert json_text.number_rule("1.7976931348623159e308") == json_text.BEYOND_RANGE
    assert json_text.number_rule(str(2**1024)) == json_text.BEYOND_RANGE
    assert json_text.number_rule(str(2**1023)) is None
    assert json_text.number_rule("2.2e-308") == json_text.TOO_SMALL  # just below the smallest
    assert json_text.number_rule("5e-324") == json_text.TOO_SMALL
    assert json_text.number_rule("1e-400") == json_text.TOO_SMALL  # becomes 0 when parsed
    assert json_text.number_rule("0.0e-400") is None
    assert json_text.number_rule("0") is None and json_text.number_rule("-0.0") is None


# -- an integer too large for a float, in every kind of model parameter --------------------------

PARAMETERS = [
    ("compare.ces_from_shares.json", ("model", "sigma")),
    ("compare.aids_three_groups.json", ("model", "gamma", 1, 2)),
    ("compare.aids_three_groups.json", ("model", "beta", 0)),
    ("compare.aids_three_groups.json", ("model", "alpha0")),
    ("compare.wrenmouth_linear_demand.json", ("model", "intercepts", "rye_loaf")),
    ("compare.stone_geary_pensioner.json", ("model", "expenditure_elasticities", "food")),
    ("compare.stone_geary_pensioner.json", ("model", "frisch")),
    ("indexSeries.wrenmouth_pensioner_stone_geary.json",
     ("model", "subsistence_quantities", "flat_rent")),
    ("compare.wrenmouth_nested_ces.json", ("model", "tree", "children", 0, "sigma")),
]


@pytest.mark.parametrize("name,path", PARAMETERS, ids=[f"{n}:{p}" for n, p in PARAMETERS])
@pytest.mark.parametrize("literal", [HUGE_INTEGER, "-" + HUGE_INTEGER, "1e400", "5e-324"])
def test_a_model_parameter_out_of_float_range_is_refused_at_its_place(client, name, path,
                                                                     literal) -> None:
    body = load_example(name)
    node: Any = body
    for p in path[:-1]:
        node = node[p]
    assert path[-1] in node if isinstance(node, dict) else path[-1] < len(node)
    url = {"compare": "/v1/comparisons", "indexSeries": "/v1/index-series"}[name.split(".")[0]]
    error = single_error(post(client, url, replaced(body, path, literal)))
    assert error["pointer"] == "".join(f"/{p}" for p in path)
    assert ("beyond the range" in error["detail"]) or ("smaller in magnitude" in error["detail"])


def test_a_subnormal_base_expenditure_is_refused_before_it_divides(client) -> None:
    body = load_example("compare.ces_from_shares.json")
    error = single_error(post(client, "/v1/comparisons",
                              replaced(body, ("base", "expenditure"), "5e-324")))
    assert error["pointer"] == "/base/expenditure"
    assert "2.2e-308" in error["detail"]


def test_a_number_that_would_silently_become_zero_is_refused(client) -> None:
    """1e-400 parses as 0.0: a quantity of zero would be computed without a word."""
    body = small_request()
    body["formulas"] = ["laspeyres", "paasche"]  # (formulas that take a zero quantity)
    error = single_error(post(client, "/v1/comparisons",
                              replaced(body, ("base", "quantities", 1), "1e-400")))
    assert error["pointer"] == "/base/quantities/1"


def test_every_bad_literal_is_named_at_once(client) -> None:
    body = small_request()
    body["base"]["prices"][0] = "@1"
    body["current"]["prices"][2] = "@2"
    text = json.dumps(body).replace('"@1"', "1e999").replace('"@2"', "-" + HUGE_INTEGER)
    r = post(client, "/v1/comparisons", text)
    assert r.status_code == 422
    assert [e["pointer"] for e in r.json()["errors"]] == ["/base/prices/0", "/current/prices/2"]


def test_a_household_weight_of_1e308_is_refused_naming_it(client) -> None:
    """A weight counts households: above 1e12 it is refused by its field, before any total
    over the households could overflow."""
    body = load_example("householdIndices.wrenmouth_deciles_ces.json")
    r = post(client, "/v1/household-indices", replaced(body, ("households", 3, "weight"), "1e308"))
    assert r.status_code == 422, r.text
    problem = r.json()
    assert problem["type"] == "/problems/invalid-input"
    assert [e["pointer"] for e in problem["errors"]] == ["/households/3/weight"]
    assert "at most 1e+12" in problem["errors"][0]["detail"]


def test_an_overflowing_computation_is_a_numerical_failure_naming_the_input(client) -> None:
    body = load_example("compare.quadratic_observed_quantities.json")
    r = post(client, "/v1/comparisons",
             replaced(body, ("current", "quantities", "rye_loaf"), "1e308"))
    assert r.status_code == 422, r.text
    assert r.json()["type"] == "/problems/numerical-failure"
    assert [e["pointer"] for e in r.json()["errors"]] == ["/current/quantities/rye_loaf"]


def test_a_spreadsheet_form_refuses_out_of_range_numbers_by_position(client) -> None:
    query = {"items": "a,b", "p0": "1,2", "p1": "1.1,2", "q0": "1,1e-320", "sigma": "0.5"}
    error = single_error(client.get("/v1/sheet/value", params=query))
    assert error["pointer"] == "#/query/q0/1" and "2.2e-308" in error["detail"]
    query |= {"q0": "1,1", "sigma": HUGE_INTEGER}
    error = single_error(client.get("/v1/sheet/value", params=query))
    assert error["pointer"] == "#/query/sigma" and "beyond the range" in error["detail"]


# -- a bug answers a problem and keeps the connection --------------------------------------------


def _exchange(sock: socket.socket, path: str) -> tuple[int, bytes]:
    sock.sendall(f"GET {path} HTTP/1.1\r\nHost: test\r\n\r\n".encode())
    data = b""
    while b"\r\n\r\n" not in data:
        chunk = sock.recv(65536)
        assert chunk, "the server closed the connection"
        data += chunk
    head, _, rest = data.partition(b"\r\n\r\n")
    length = next(int(line.split(b":")[1]) for line in head.split(b"\r\n")
                  if line.lower().startswith(b"content-length"))
    while len(rest) < length:
        chunk = sock.recv(65536)
        assert chunk, "the server closed the connection"
        rest += chunk
    return int(head.split(b" ")[1]), rest


def test_a_500_is_a_problem_and_the_connection_stays_open(caplog) -> None:
    app = create_app(Settings(examples_dir=EXAMPLES))

    def broken() -> None:
        raise RuntimeError("a bug")

    app.add_api_route("/broken", broken)
    config = uvicorn.Config(app, host="127.0.0.1", port=free_port(), log_level="critical")
    server = uvicorn.Server(config)
    thread = threading.Thread(target=server.run, daemon=True)
    thread.start()
    deadline = time.monotonic() + 20
    while not server.started:
        assert time.monotonic() < deadline
        time.sleep(0.05)
    try:
        with socket.create_connection(("127.0.0.1", config.port), timeout=10) as sock:
            status, body = _exchange(sock, "/broken")
            assert status == 500
            assert json.loads(body)["type"] == "/problems/internal-error"
            status, body = _exchange(sock, "/live")  # the same connection
            assert status == 200
    finally:
        server.should_exit = True
        thread.join(timeout=10)
    assert "unhandled error on /broken" in caplog.text


# -- the shape of a body -------------------------------------------------------------------------


def _deep_tree(levels: int) -> str:
    inner = '"a"'
    for k in range(levels):
        inner = f'{{"name": "g{k}", "sigma": 0.5, "children": [{inner}]}}'
    return inner


def test_a_500_deep_tree_is_a_422_with_a_pointer(client) -> None:
    body = small_request(family="nested_ces", tree={"sigma": 0.5, "children": ["@", "b", "c"]})
    text = json.dumps(body).replace('"@"', _deep_tree(500))
    error = single_error(post(client, "/v1/comparisons", text))
    assert error["pointer"].startswith("/model/tree/children/0/children/0/children/0")
    assert "deeper than 201 levels" in error["detail"]
    # The pointer leads to a place in the body: the JSON parser's limit is at that depth.
    assert error["pointer"].count("/") == json_text.MAX_DEPTH


def test_a_tree_within_the_parser_s_depth_gets_the_tree_s_own_limit(client) -> None:
    body = small_request(family="nested_ces", tree={"sigma": 0.5, "children": ["@", "b", "c"]})
    text = json.dumps(body).replace('"@"', _deep_tree(80))
    error = single_error(post(client, "/v1/comparisons", text))
    assert error["pointer"].startswith("/model/tree/children/0/")
    assert "deeper than the limit of 64" in error["detail"]


@pytest.mark.parametrize("media", ["text/plain", "text/csv", "application/x-www-form-urlencoded",
                                   "application/xml", None])
def test_a_body_that_is_not_sent_as_json_is_a_415(client, media) -> None:
    headers = {} if media is None else {"content-type": media}
    r = client.post("/v1/comparisons", content=json.dumps(small_request()), headers=headers)
    assert r.status_code == 415, r.text
    assert r.headers["content-type"].startswith("application/problem+json")
    problem = r.json()
    assert problem["type"] == "/problems/unsupported-media-type"
    assert problem["errors"][0]["pointer"] == "#/header/content-type"


@pytest.mark.parametrize("media", ["application/json", "application/json; charset=utf-8",
                                   "application/merge-patch+json"])
def test_json_media_types_are_read_as_json(client, media) -> None:
    assert post(client, "/v1/comparisons", json.dumps(small_request()), media).status_code == 200


def test_the_csv_uploads_keep_taking_csv(client) -> None:
    text = "period,item,price,quantity\n2025-01,a,1,1\n2025-01,b,2,1\n2025-02,a,1.1,1\n" \
           "2025-02,b,2,1\n"
    r = post(client, "/v1/index-series/csv", text, "text/csv")
    assert r.status_code == 200, r.text


def test_every_operation_with_a_json_body_documents_the_415(client) -> None:
    doc = client.get("/openapi.json").json()
    with_json = [op for item in doc["paths"].values() for op in item.values()
                 if "application/json" in op.get("requestBody", {}).get("content", {})]
    assert len(with_json) >= 6
    assert all("415" in op["responses"] for op in with_json)


def test_a_label_over_300_characters_is_one_error(client) -> None:
    body = small_request()
    body["items"] = [{"id": "a", "label": "x" * 301}, "b", "c"]
    error = single_error(client.post("/v1/comparisons", json=body))
    assert error["pointer"] == "/items/0/label"


def test_a_keyed_vector_with_a_bad_entry_is_one_error(client) -> None:
    body = small_request()
    body["base"]["prices"] = {"a": 1.0, "b": "two", "c": 3.0}
    error = single_error(client.post("/v1/comparisons", json=body))
    assert error["pointer"] == "/base/prices/b"


def test_a_value_of_neither_form_is_one_error(client) -> None:
    body = small_request()
    body["base"]["prices"] = "cheap"
    error = single_error(client.post("/v1/comparisons", json=body))
    assert error["pointer"] == "/base/prices"


# -- numbers given as text: one rule for every numeric field -------------------------------------

TEXT_NUMBERS = [
    ("compare.ces_from_shares.json", ("base", "prices", 0)),
    ("compare.ces_from_shares.json", ("base", "expenditure")),
    ("compare.ces_from_shares.json", ("model", "sigma")),
    ("compare.aids_three_groups.json", ("model", "gamma", 0, 0)),
    ("compare.wrenmouth_nested_ces.json", ("model", "tree", "sigma")),
    ("fitAndCompare.wrenmouth_quarterly_aids.json", ("uncertainty", "seed")),
    ("fitAndCompare.wrenmouth_quarterly_aids.json", ("uncertainty", "draws")),
    ("householdIndices.wrenmouth_deciles_ces.json", ("households", 0, "weight")),
    ("auditPublishedSeries.wrenmouth_monthly_bulletin.json", ("published", 0, "value")),
]


@pytest.mark.parametrize("name,path", TEXT_NUMBERS, ids=[f"{n}:{p}" for n, p in TEXT_NUMBERS])
def test_a_number_written_as_text_is_refused_wherever_it_is(client, name, path) -> None:
    body = load_example(name)
    node: Any = body
    for p in path:
        node = node[p]
    url = {"compare": "/v1/comparisons", "fitAndCompare": "/v1/fitted-comparisons",
           "householdIndices": "/v1/household-indices",
           "auditPublishedSeries": "/v1/audits"}[name.split(".")[0]]
    error = single_error(post(client, url, replaced(body, path, json.dumps(str(node)))))
    assert error["pointer"] == "".join(f"/{p}" for p in path)
    assert "text" in error["detail"]


def test_true_is_not_a_number_either(client) -> None:
    body = small_request()
    body["base"]["quantities"][0] = True
    error = single_error(client.post("/v1/comparisons", json=body))
    assert error == {"pointer": "/base/quantities/0", "detail": "must be a number, not true or false"}
    series = load_example("indexSeries.wrenmouth_monthly_ces.json")
    series["reference_value"] = True
    assert single_error(client.post("/v1/index-series", json=series))["pointer"] == (
        "/reference_value")
