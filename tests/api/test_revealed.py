"""POST /v1/revealed-preference: the verdicts and bounds of the core through HTTP, JSON and CSV,
and every bad panel refused by a problem naming its field (RFC 9457; RFC 6901 pointers).

The numbers are checked against the core (dualcost.core.revealed_bounds), whose own tests check
them against Varian (1982), Afriat (1967, 1972) and brute force; here the outside fact is
Konüs (1924): at the base period's living standard the upper bound never exceeds Laspeyres.
"""

from __future__ import annotations

import copy
import csv
import io
from typing import Any

import pytest
from fastapi.testclient import TestClient

from dualcost.api.app import create_app
from dualcost.api.schemas.revealed import RevealedResponse
from dualcost.config import Settings
from dualcost.core.revealed_bounds import revealed_preference
from tests.conftest import EXAMPLES, load_example

BASKET = "revealedPreference.wrenmouth_monthly_basket.json"
DIARY = "revealedPreference.wrenmouth_household_diary.json"
PATH = "/v1/revealed-preference"


def small() -> dict[str, Any]:
    return {"periods": ["2025-Q1", "2025-Q2", "2025-Q3"], "items": ["rye_loaf", "ferry_pass"],
            "prices": [[2.4, 38.0], [2.5, 38.0], [2.5, 41.0]],
            "quantities": [[30.0, 2.0], [29.0, 2.0], [31.0, 1.8]]}


def test_a_consistent_panel_passes_and_is_bracketed(client: TestClient) -> None:
    """The Wrenmouth basket passes GARP; its base month is bracketed by exactly 1 and every
    upper bound is at most Laspeyres (Konüs 1924)."""
    r = client.post(PATH, json=load_example(BASKET))
    assert r.status_code == 200, r.text
    body = r.json()
    RevealedResponse.model_validate(body)
    assert body["consistency"]["garp"] and body["consistency"]["efficiency_index"] == 1.0
    rows = {row["period"]: row for row in body["bounds"]["rows"]}
    assert rows["2025-01"]["lower"] == pytest.approx(1.0) and rows["2025-01"]["upper"] == 1.0
    for row in rows.values():
        assert row["lower"] <= row["upper"] <= row["laspeyres"] * (1 + 1e-12)
    assert "Blundell" in body["bounds"]["method"]
    assert "varian_bounds_only" in {n["code"] for n in body["notices"]}


def test_an_inconsistent_diary_names_its_violations_and_its_efficiency(client: TestClient
                                                                        ) -> None:
    """The diary fails GARP: each violation is named by its periods, and the bounds are at the
    efficiency level the core reports, stated in a notice."""
    request = load_example(DIARY)
    body = client.post(PATH, json=request).json()
    core = revealed_preference(request["prices"], request["quantities"], utility_of=3)
    assert not body["consistency"]["garp"]
    assert body["consistency"]["efficiency_index"] == core.efficiency
    assert body["bounds"]["efficiency_level"] == core.level < 1
    first = body["consistency"]["violations"][0]
    assert first["periods"][0] == first["periods"][-1] == first["first"]
    assert body["consistency"]["violation_counts"]["GARP"] == sum(
        v.axiom == "GARP" for v in core.consistency.violations)
    assert "garp_failed" in {n["code"] for n in body["notices"]}


def test_the_csv_answer_has_the_json_answer_s_numbers(client: TestClient) -> None:
    request = load_example(DIARY)
    document = client.post(PATH, json=request).json()
    r = client.post(PATH, json=request, headers={"accept": "text/csv"})
    assert r.status_code == 200 and r.headers["content-type"].startswith("text/csv")
    assert r.headers["dualcost-garp"] == "fail"
    assert r.headers["dualcost-input-digest"] == document["provenance"]["input_digest"]
    rows = list(csv.DictReader(io.StringIO(r.text)))
    assert [float(row["lower"]) for row in rows] == [
        row["lower"] for row in document["bounds"]["rows"]]
    assert r.headers["dualcost-utility-period"] == "2025-Q4"


def test_expenditures_answer_as_their_quantities(client: TestClient) -> None:
    request = small()
    by_e = copy.deepcopy(request)
    by_e["expenditures"] = [[p * q for p, q in zip(ps, qs, strict=True)]
                            for ps, qs in zip(request["prices"], request.pop("quantities"),
                                              strict=True)]
    del by_e["quantities"]
    a = client.post(PATH, json=small()).json()["bounds"]["rows"]
    b = client.post(PATH, json=by_e).json()["bounds"]["rows"]
    assert [r["upper"] for r in a] == pytest.approx([r["upper"] for r in b], rel=1e-12)


def _problem(client: TestClient, body: dict[str, Any]) -> list[tuple[str, str]]:
    r = client.post(PATH, json=body)
    assert r.status_code == 422, r.text
    assert r.headers["content-type"] == "application/problem+json"
    return [(e["pointer"], e["detail"]) for e in r.json()["errors"]]


@pytest.mark.parametrize(("change", "pointer", "words"), [
    (lambda b: b["quantities"].__setitem__(1, [0.0, 0.0]), "/quantities/1", "expenditure"),
    (lambda b: b["quantities"].__setitem__(2, [1.0]), "/quantities/2", "2 items"),
    (lambda b: b["prices"].__setitem__(0, {"rye_loaf": 2.4}), "/prices/0/ferry_pass",
     "finite"),
    (lambda b: b["prices"][1].__setitem__(1, -1.0), "/prices/1/1", "greater than zero"),
    (lambda b: b["quantities"][0].__setitem__(0, -3.0), "/quantities/0/0", "negative"),
    (lambda b: b.update(periods=["2025-Q1"], prices=b["prices"][:1],
                        quantities=b["quantities"][:1]), "/periods", "at least 2"),
    (lambda b: b.update(base_period="2024-Q4"), "/base_period", "not a period"),
    (lambda b: b.update(utility_period="2030"), "/utility_period", "not a period"),
    (lambda b: b.update(expenditures=b["quantities"]), "", "exactly one"),
    (lambda b: b["quantities"].pop(), "/quantities", "rows"),
])
def test_bad_panels_are_refused_naming_the_field(client: TestClient, change: Any, pointer: str,
                                                 words: str) -> None:
    """Zero expenditure in a period, rows of the wrong length, an unpriced item, a price of
    zero or less, a negative quantity, a single period, unknown periods, both or neither of
    quantities and expenditures, a row missing: a 422 naming the field and the rule."""
    body = small()
    change(body)
    errors = _problem(client, body)
    assert any(p == pointer and words in d for p, d in errors), errors


def test_a_panel_beyond_the_configured_periods_is_refused() -> None:
    """DUALCOST_MAX_REVEALED_PERIODS bounds the periods (the relations grow with their
    square)."""
    client = TestClient(create_app(Settings(examples_dir=EXAMPLES, max_revealed_periods=2)))
    errors = _problem(client, small())
    assert errors[0][0] == "/periods" and "limit is 2" in errors[0][1]


def test_a_large_value_is_a_numerical_problem_not_a_crash(client: TestClient) -> None:
    """Costs beyond floating point are refused by name (no 5xx)."""
    body = small()
    body["quantities"][1] = [1e300, 1e300]
    body["prices"][1] = [1e10, 1e10]
    r = client.post(PATH, json=body)
    assert r.status_code == 422, r.text


def test_a_comparison_can_carry_the_model_free_bracket(client: TestClient) -> None:
    """POST /v1/comparisons with revealed_bounds: the bracket from the two observed bundles
    beside the model's K(u0) (inside it here), and in the CSV table two rows more; without
    current quantities the option is refused by name."""
    body = {"items": ["a", "b", "c"],
            "base": {"prices": [1.0, 2.0, 4.0], "quantities": [10.0, 5.0, 2.0]},
            "current": {"prices": [1.3, 2.0, 3.6], "quantities": [8.0, 6.0, 2.2]},
            "model": {"family": "ces", "sigma": 0.6}, "revealed_bounds": True}
    answer = client.post("/v1/comparisons", json=body).json()
    bracket = answer["revealed_bounds"]
    assert bracket["garp"] and bracket["konus_inside"]
    assert bracket["lower"] <= answer["konus"]["base"] <= bracket["upper"]
    assert bracket["upper"] <= bracket["laspeyres"] * (1 + 1e-12)  # Konüs (1924)
    table = client.post("/v1/comparisons?format=csv", json=body).text
    assert "revealed_bounds_lower" in table and "revealed_bounds_upper" in table
    assert client.post("/v1/comparisons", json=small_request()).json()["revealed_bounds"] is None
    del body["current"]["quantities"]
    refused = client.post("/v1/comparisons", json=body)
    assert refused.status_code == 422
    assert refused.json()["errors"][0]["pointer"] == "/revealed_bounds"


def small_request() -> dict[str, Any]:
    return {"items": ["a", "b"], "base": {"prices": [1.0, 2.0], "quantities": [1.0, 1.0]},
            "current": {"prices": [1.1, 2.0]}, "model": {"family": "ces", "sigma": 0.5}}


def test_a_panel_beyond_the_configured_work_is_refused() -> None:
    """DUALCOST_MAX_REVEALED_WORK bounds periods x periods x items (the linear programmes)."""
    client = TestClient(create_app(Settings(examples_dir=EXAMPLES, max_revealed_work=17)))
    errors = _problem(client, small())
    assert errors[0][0] == "/periods" and "3 x 3 x 2 = 18" in errors[0][1]


def test_an_index_series_can_carry_the_model_free_brackets(client: TestClient) -> None:
    """POST /v1/index-series with revealed_bounds: the Wrenmouth monthly panel's bounds use the
    six items priced in every month (a notice names the two others), and equal POST
    /v1/revealed-preference on those items; the model's items differ, so konus_inside is
    null."""
    request = load_example("indexSeries.wrenmouth_monthly_ces.json") | {"revealed_bounds": True}
    answer = client.post("/v1/index-series", json=request)
    assert answer.status_code == 200, answer.text
    block = answer.json()["revealed_bounds"]
    basket = load_example(BASKET)
    assert block["items"] == [item["id"] for item in basket["items"]]
    alone = client.post(PATH, json=basket).json()
    assert [(r["lower"], r["upper"]) for r in block["rows"]] == [
        (r["lower"], r["upper"]) for r in alone["bounds"]["rows"]]
    assert block["consistency"]["garp"] and all(r["konus_inside"] is None
                                                for r in block["rows"])
    assert "revealed_bounds_items" in {n["code"] for n in answer.json()["notices"]}
    audit = load_example("auditPublishedSeries.wrenmouth_monthly_bulletin.json")
    refused = client.post("/v1/audits", json=audit | {"revealed_bounds": True})
    assert refused.status_code == 422
    assert refused.json()["errors"][0]["pointer"] == "/revealed_bounds"


def test_a_series_from_a_model_s_own_choices_lies_inside_its_brackets(client: TestClient
                                                                      ) -> None:
    """Quantities a CES consumer of sigma 0.7 chose (the project's family, Arrow et al. 1961),
    every item priced in every period: its Konüs series at base utility lies inside every
    bracket (Varian 1982)."""
    import numpy as np

    from dualcost.core.preferences import BaseBudget, calibrate

    rng = np.random.default_rng(3)
    p = 1.0 + 0.2 * rng.uniform(-1, 1, (6, 4))
    model = calibrate("ces", BaseBudget.from_quantities(p[0], [3.0, 2.0, 1.0, 4.0]),
                      {"sigma": 0.7})
    x = np.asarray(model.marshallian(p, 10.0 * rng.uniform(0.9, 1.2, 6)))
    body = {"periods": [f"2025-0{t + 1}" for t in range(6)], "items": ["a", "b", "c", "d"],
            "prices": p.tolist(), "quantities": x.tolist(),
            "model": {"family": "ces", "sigma": 0.7}, "revealed_bounds": True}
    rows = client.post("/v1/index-series", json=body).json()["revealed_bounds"]["rows"]
    assert all(r["konus_inside"] for r in rows)
