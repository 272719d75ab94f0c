"""The OpenAPI document, the catalogue, and every example request in openapi_examples/."""

from __future__ import annotations

import pytest

from dualcost.api.schemas.comparison import ComparisonResponse
from tests.conftest import EXAMPLES, load_example

EXAMPLE_FILES = sorted(p.name for p in EXAMPLES.glob("*.json"))


def test_there_are_examples() -> None:
    assert len(EXAMPLE_FILES) >= 4


@pytest.mark.parametrize("name", EXAMPLE_FILES)
def test_every_example_is_shown_in_the_openapi_document(client, name) -> None:
    operation_id, example, _ = name.split(".")
    doc = client.get("/openapi.json").json()
    ops = {op["operationId"]: op for path in doc["paths"].values() for op in path.values()}
    assert operation_id in ops, f"{name}: no operation {operation_id}"
    shown = ops[operation_id]["requestBody"]["content"]["application/json"]["examples"]
    assert shown[example]["value"] == load_example(name)


def _operation(client, operation_id: str) -> tuple[str, str]:
    doc = client.get("/openapi.json").json()
    for path, item in doc["paths"].items():
        for method, op in item.items():
            if op.get("operationId") == operation_id:
                return method, path
    raise AssertionError(f"no operation {operation_id}")


@pytest.mark.parametrize("name", EXAMPLE_FILES)
def test_every_example_gets_a_sound_answer(client, name) -> None:
    """Each example answers 200 from its own operation. Comparisons must also be regular (no
    Slutsky warning) and satisfy the Konüs (1924) bound K(u0) <= P_L."""
    operation_id = name.split(".")[0]
    method, path = _operation(client, operation_id)
    r = client.request(method.upper(), path, json=load_example(name))
    assert r.status_code == 200, r.text
    if operation_id != "compare":
        return
    body = r.json()
    ComparisonResponse.model_validate(body)  # the answer has its documented shape
    formulas = {f["formula"]: f["value"] for f in body["formulas"]}
    assert body["konus"]["base"] <= formulas["laspeyres"] * (1 + 1e-12)
    assert not [n for n in body["notices"] if n["code"].startswith("slutsky")]


def _response_models() -> dict[str, type]:
    from dualcost.api.routes import ROUTERS

    return {route.operation_id: route.response_model for router in ROUTERS
            for route in router.routes
            if getattr(route, "operation_id", None) and getattr(route, "response_model", None)}


@pytest.mark.parametrize("name", EXAMPLE_FILES)
def test_every_answer_has_its_documented_shape(client, name) -> None:
    """Answers are written from plain values for speed; each must still validate against the
    response model the OpenAPI document shows for its operation."""
    operation_id = name.split(".")[0]
    method, path = _operation(client, operation_id)
    r = client.request(method.upper(), path, json=load_example(name))
    assert r.status_code == 200, r.text
    _response_models()[operation_id].model_validate(r.json())


def test_openapi_is_3_1_with_the_caution(client) -> None:
    doc = client.get("/openapi.json").json()
    assert doc["openapi"].startswith("3.1")
    assert "indexation" in doc["info"]["description"]


def test_catalogue_lists_families_with_sources_and_parameters(client) -> None:
    families = {f["family"]: f for f in client.get("/v1/preference-families").json()}
    assert {"cobb_douglas", "ces", "nested_ces", "stone_geary", "aids", "quaids", "translog",
            "quadratic"} <= set(families)
    assert all(f["source"] for f in families.values())
    assert [p["name"] for p in families["ces"]["parameters"]] == ["sigma"]
    formulas = {f["formula"]: f for f in client.get("/v1/index-formulas").json()}
    assert formulas["fisher"]["superlative"] is True
    assert formulas["lowe"]["needs"] == ["weight_quantities"]


def test_health_and_problem_pages(client) -> None:
    assert client.get("/health").json()["status"] == "ok"
    page = client.get("/problems/invalid-input")
    assert page.status_code == 200 and "rule" in page.text
    r = client.get("/no/such/place")
    assert r.status_code == 404
    assert r.headers["content-type"].startswith("application/problem+json")
