"""POST /v1/fitted-sensitivity: several families fitted to the same budget data in one request.
Each family equals POST /v1/fits and POST /v1/fitted-comparisons requested alone with that
family (common practice: a request over several models is a loop of single requests); the band
is the least and greatest value across the families (its definition), so it contains every
family's Konüs index; bad input is refused by a problem naming the field."""

from __future__ import annotations

import copy
import csv
import io
from typing import Any

from fastapi.testclient import TestClient

from dualcost.api.app import create_app
from dualcost.api.schemas.fitted_sensitivity import FittedSensitivityResponse
from dualcost.config import Settings
from tests.conftest import EXAMPLES, load_example

EXAMPLE = "fittedSensitivity.wrenmouth_quarterly_three_families.json"
PATH = "/v1/fitted-sensitivity"


def _alone(request: dict[str, Any], family: dict[str, Any]) -> dict[str, Any]:
    return {k: v for k, v in request.items() if k != "families"} | {"model": family,
                                                                   "residuals": False}


def _answer(client: TestClient, request: dict[str, Any]) -> dict[str, Any]:
    r = client.post(PATH, json=request)
    assert r.status_code == 200, r.text
    body: dict[str, Any] = r.json()
    FittedSensitivityResponse.model_validate(body)
    return body


def test_each_family_equals_its_own_fit_and_fitted_comparison(client: TestClient) -> None:
    """Family j's fit, comparison and intervals are exactly what POST /v1/fits and POST
    /v1/fitted-comparisons answer for the same data with model = families[j]."""
    request = load_example(EXAMPLE)
    body = _answer(client, request)
    assert len(body["families"]) == len(request["families"])
    for family, answer in zip(request["families"], body["families"], strict=True):
        single = _alone(request, family)
        r = client.post("/v1/fitted-comparisons", json=single)
        assert r.status_code == 200, r.text
        alone = r.json()
        for part in ("fit", "comparison", "intervals"):
            assert answer[part] == alone[part], part
        fit_only = {k: v for k, v in single.items() if k not in ("comparison", "uncertainty")}
        r = client.post("/v1/fits", json=fit_only)
        assert r.status_code == 200, r.text
        assert answer["fit"] == {k: v for k, v in r.json().items() if k != "provenance"}


def test_the_band_is_the_range_of_the_families_and_contains_every_konus(
        client: TestClient) -> None:
    """The band's ends are the least and greatest Konüs index and bias across the fitted
    families (its definition), so every family's figure lies inside it; beside each measure,
    every family's bootstrap interval as the family's own intervals give it."""
    body = _answer(client, load_example(EXAMPLE))
    band = {b["measure"]: b for b in body["band"]}
    for kind in ("base", "current", "midpoint"):
        values = [f["comparison"]["konus"][kind] for f in body["families"]]
        b = band[f"konus_{kind}"]
        assert (b["low"], b["high"], b["count"], b["left_out"]) == (min(values), max(values),
                                                                    len(values), 0)
        assert all(b["low"] <= v <= b["high"] for v in values)
        for j, (i, f) in enumerate(zip(b["intervals"], body["families"], strict=True)):
            own = f["intervals"]["konus"][kind]
            assert i == {"family": j, "estimate": own["estimate"], "low": own["low"],
                         "high": own["high"]}
    for f in body["families"]:
        for formula in f["comparison"]["formulas"]:
            b = band[f"{formula['formula']}_bias_points"]
            assert b["low"] <= formula["bias_points"] <= b["high"]


def test_the_csv_answer_has_a_row_per_family_and_measure_and_the_band(
        client: TestClient) -> None:
    request = load_example(EXAMPLE)
    body = _answer(client, request)
    r = client.post(PATH + "?format=csv", json=request)
    assert r.status_code == 200, r.text
    assert r.headers["content-type"].startswith("text/csv")
    rows = list(csv.DictReader(io.StringIO(r.text)))
    n = len(request["families"])
    assert len(rows) == len(body["band"]) * (n + 1)
    for b, chunk in zip(body["band"], [rows[k:k + n + 1] for k in range(0, len(rows), n + 1)],
                        strict=True):
        assert [row["kind"] for row in chunk] == ["fit"] * n + ["band"]
        assert {row["measure"] for row in chunk} == {b["measure"]}
        assert float(chunk[-1]["low"]) == b["low"] and float(chunk[-1]["high"]) == b["high"]
        for row, i in zip(chunk, b["intervals"], strict=False):
            assert float(row["low"]) == i["low"] and float(row["high"]) == i["high"]


def _problem(client: TestClient, request: dict[str, Any]) -> list[dict[str, str]]:
    r = client.post(PATH, json=request)
    assert r.status_code == 422, r.text
    assert r.headers["content-type"].startswith("application/problem+json")
    errors: list[dict[str, str]] = r.json()["errors"]
    return errors


def test_a_family_that_cannot_be_compared_is_named_by_its_position(client: TestClient) -> None:
    request = load_example(EXAMPLE)
    request["families"][2] = {"family": "aids", "restrictions": "none"}
    errors = _problem(client, request)
    assert [e["pointer"] for e in errors] == ["/families/2"]
    assert "symmetry" in errors[0]["detail"]


def test_a_bad_grouping_points_inside_its_family(client: TestClient) -> None:
    request = load_example(EXAMPLE)
    request["families"][1] = {"family": "nested_ces",
                              "tree": {"children": ["no_such_item", "rye_loaf"]}}
    assert [e["pointer"] for e in _problem(client, request)] == ["/families/1/tree/children/0"]


def test_an_unknown_family_and_a_missing_list_are_named(client: TestClient) -> None:
    request = load_example(EXAMPLE)
    request["families"][2] = {"family": "translog"}
    assert [e["pointer"] for e in _problem(client, request)] == ["/families/2/family"]
    request["families"] = []
    assert [e["pointer"] for e in _problem(client, request)] == ["/families"]


def test_families_and_draws_are_bounded_by_the_settings() -> None:
    """More families than max_fitted_families, or more draws in all than max_bootstrap_draws,
    are refused before any fit, naming the field."""
    client = TestClient(create_app(Settings(examples_dir=EXAMPLES, max_fitted_families=2,
                                            max_bootstrap_draws=250)))
    request = load_example(EXAMPLE)
    errors = _problem(client, request)
    assert [e["pointer"] for e in errors] == ["/families"]
    assert "max_fitted_families" in errors[0]["detail"]
    two = copy.deepcopy(request)
    two["families"] = two["families"][:2]
    two["uncertainty"]["draws"] = 200
    errors = _problem(client, two)
    assert [e["pointer"] for e in errors] == ["/uncertainty/draws"]
    assert "max_bootstrap_draws" in errors[0]["detail"]


def test_data_errors_keep_their_place(client: TestClient) -> None:
    request = load_example(EXAMPLE)
    request["comparison"]["base"]["expenditure"] = -5.0
    errors = _problem(client, request)
    assert all(e["pointer"].startswith("/comparison/base") for e in errors), errors
