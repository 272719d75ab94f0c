"""Every configurable limit answers a request beyond it with its problem response (never a hung
worker, never a 500): items, tree depth, periods, panel cells, households, formula length and
nesting, fit size, and the compute deadline (common practice for a shared service). The body-size
limit (413) is in test_hardening.py."""

from __future__ import annotations

import copy

import pytest
from fastapi.testclient import TestClient

from dualcost.api.app import create_app
from dualcost.config import Settings
from tests.api.test_comparisons import small_request
from tests.conftest import EXAMPLES, load_example


def limited(**settings: object) -> TestClient:
    return TestClient(create_app(Settings(examples_dir=EXAMPLES, **settings)))


def problem(r, status: int = 422) -> dict:
    assert r.status_code == status, r.text
    assert r.headers["content-type"].startswith("application/problem+json")
    return r.json()


def pointers(body: dict) -> list[str]:
    return [e["pointer"] for e in body.get("errors", [])]


def test_items() -> None:
    body = problem(limited(max_items=2).post("/v1/comparisons", json=small_request()))
    assert "/items" in pointers(body) and "limit" in body["detail"]


def test_tree_depth() -> None:
    tree = {"sigma": 0.5, "children": ["a", {"sigma": 1.0, "children": [
        "b", {"sigma": 2.0, "children": ["c"]}]}]}
    r = limited(max_tree_depth=2).post("/v1/comparisons",
                                       json=small_request(family="nested_ces", tree=tree))
    body = problem(r)
    assert any(p.startswith("/model/tree") for p in pointers(body))
    assert "deeper than the limit of 2" in body["detail"]


def test_periods_and_panel_cells() -> None:
    series = load_example("indexSeries.wrenmouth_monthly_ces.json")
    body = problem(limited(max_periods=3).post("/v1/index-series", json=series))
    assert "/periods" in pointers(body)
    body = problem(limited(max_panel_cells=20).post("/v1/index-series", json=series))
    assert body["errors"]


def test_households() -> None:
    batch = load_example("householdIndices.wrenmouth_deciles_ces.json")
    body = problem(limited(max_households=2).post("/v1/household-indices", json=batch), 413)
    assert "/households" in pointers(body)


def test_formula_length_and_nesting() -> None:
    request = load_example("compare.wrenmouth_utility_formula.json")
    body = problem(limited(max_formula_chars=20).post("/v1/comparisons", json=request))
    assert "/model/utility_formula" in pointers(body) and "limit is 20" in body["detail"]
    deep = copy.deepcopy(request)
    deep["model"]["utility_formula"] = "(" * 10 + deep["model"]["utility_formula"] + ")" * 10
    body = problem(limited(max_formula_depth=5).post("/v1/comparisons", json=deep))
    assert "/model/utility_formula" in pointers(body) and "5 levels" in body["detail"]


def test_fit_size() -> None:
    fit = load_example("fitModel.wrenmouth_quarterly_aids.json")
    body = problem(limited(max_fit_cells=10).post("/v1/fits", json=fit))
    assert body["errors"]


@pytest.mark.parametrize("path,example", [
    ("/v1/comparisons", "compare.wrenmouth_utility_formula.json"),
    ("/v1/index-series", "indexSeries.wrenmouth_pensioner_stone_geary.json"),
    ("/v1/fits", "fitModel.wrenmouth_quarterly_aids.json"),
    ("/v1/fitted-comparisons", "fitAndCompare.wrenmouth_quarterly_aids.json"),
])
def test_compute_deadline(path, example) -> None:
    """Past the compute deadline the work stops between steps with a 503 problem."""
    r = limited(compute_deadline_seconds=1e-9).post(path, json=load_example(example))
    body = problem(r, 503)
    assert body["type"] == "/problems/deadline-exceeded" and "deadline" in body["detail"]
