"""Where a computation runs: on the event loop for a cheap request, in a thread for one that may
be slow (service/dualcost/api/routing.py, service/dualcost/api/workload.py)."""

from __future__ import annotations

import threading

import pytest
from fastapi import APIRouter, FastAPI
from fastapi.testclient import TestClient

from dualcost.api.app import create_app
from dualcost.api.routing import JsonRoute, inline_when_cheap
from dualcost.config import Settings
from tests.api.test_comparisons import small_request


def _app(limit: int, max_work: int = 10_000) -> FastAPI:
    app = FastAPI()
    app.state.settings = Settings(inline_compute_max_bytes=limit, inline_compute_max_work=max_work)
    router = APIRouter(route_class=JsonRoute)

    @router.get("/loop")
    async def loop_thread() -> int:
        return threading.get_ident()

    def work_of(arguments) -> float:
        """A made-up estimate: the number the request names as its work."""
        body = arguments.get("body") or {}
        return float(body.get("work", arguments.get("x", 0)))

    @router.post("/work")
    @inline_when_cheap(work_of)
    def work(body: dict[str, int]) -> dict[str, int]:
        return {"thread": threading.get_ident(), "keys": len(body)}

    @router.get("/work")
    @inline_when_cheap(work_of)
    def work_get(x: int = 0) -> dict[str, int]:
        return {"thread": threading.get_ident(), "keys": x}

    app.include_router(router)
    return app


@pytest.mark.parametrize("limit,inline", [(1_000, True), (10, False), (0, False)])
def test_small_bodies_compute_on_the_event_loop(limit, inline) -> None:
    with TestClient(_app(limit)) as client:
        loop = client.get("/loop").json()
        r = client.post("/work", json={"work": 10, "padding": 10**20})
        assert r.status_code == 200
        assert r.json()["keys"] == 2
        assert (r.json()["thread"] == loop) is inline


@pytest.mark.parametrize("work,max_work,inline", [(10, 10_000, True), (10_000, 10_000, True),
                                                  (10_001, 10_000, False), (1, 0, False)])
def test_the_estimated_work_decides_and_not_the_size(work, max_work, inline) -> None:
    """A small body whose work is estimated above the budget goes to a thread, and so does every
    request when the budget is 0."""
    with TestClient(_app(100_000, max_work)) as client:
        loop = client.get("/loop").json()
        r = client.post("/work", json={"work": work})
        assert (r.json()["thread"] == loop) is inline
        assert (client.get("/work", params={"x": work}).json()["thread"] == loop) is inline


def test_a_get_has_no_body_and_computes_on_the_event_loop() -> None:
    with TestClient(_app(0)) as client:
        assert client.get("/work", params={"x": 3}).json()["thread"] == client.get("/loop").json()


def test_a_body_of_unknown_length_goes_to_a_thread() -> None:
    def chunks():
        yield b'{"work": '
        yield b'1}'

    with TestClient(_app(1_000_000)) as client:
        r = client.post("/work", content=chunks(), headers={"content-type": "application/json"})
        assert r.status_code == 200, r.text
        assert r.json()["thread"] != client.get("/loop").json()


@pytest.mark.parametrize("limit", [0, 65_536])
def test_the_answer_does_not_depend_on_where_it_is_computed(limit) -> None:
    """The same comparison, computed in a thread and on the event loop."""
    with TestClient(create_app(Settings(inline_compute_max_bytes=limit))) as client:
        r = client.post("/v1/comparisons", json=small_request())
        assert r.status_code == 200
        with TestClient(create_app()) as other:
            assert other.post("/v1/comparisons", json=small_request()).json() == r.json()


@pytest.mark.parametrize("limit", [0, 65_536])
def test_problems_are_the_same_wherever_computed(limit) -> None:
    req = small_request()
    req["current"]["prices"][1] = -1.0
    with TestClient(create_app(Settings(inline_compute_max_bytes=limit))) as client:
        r = client.post("/v1/comparisons", json=req)
        assert r.status_code == 422
        assert r.json()["errors"][0]["pointer"] == "/current/prices/1"


@pytest.mark.parametrize("model", [
    {"family": "ces", "sigma": 0.6},
    {"family": "nested_ces", "tree": {"sigma": 0.4, "children": [
        {"name": "ab", "sigma": 1.7, "children": ["a", "b"]}, "c"]}},
])
def test_the_rendered_answer_reads_back_to_the_same_numbers(client, model) -> None:
    """The comparison answer is written with orjson; every float must read back bit for bit
    (json.dumps writes Python's shortest round-trip repr, the reference here)."""
    import json

    from dualcost.api.operations import compare
    from dualcost.api.schemas.comparison import ComparisonRequest

    req = small_request(**model)
    outcome = compare.run(ComparisonRequest.model_validate(req), Settings())
    expected = json.loads(json.dumps(compare.document(outcome)))
    r = client.post("/v1/comparisons", json=req)
    assert r.status_code == 200
    answer = json.loads(r.content)
    assert answer.pop("provenance")["service"] == "dualcost"
    assert answer == expected


def _examples_by_model():
    """Each example body with the body model of its operation (the routers' JsonRoutes)."""
    from dualcost.api.routes import ROUTERS
    from dualcost.api.routing import _body_model
    from tests.conftest import EXAMPLES

    models = {}
    for router in ROUTERS:
        for route in router.routes:
            if isinstance(route, JsonRoute) and _body_model(route) is not None:
                models[route.operation_id] = _body_model(route)
    cases = [(models[path.name.split(".")[0]], path) for path in sorted(EXAMPLES.glob("*.json"))
             if path.name.split(".")[0] in models]
    assert len(cases) >= 15
    return cases


@pytest.mark.parametrize("model,path", _examples_by_model(), ids=lambda v: getattr(v, "name", ""))
def test_validating_bytes_equals_validating_parsed_json(model, path) -> None:
    """The body model validated straight from bytes (as JsonRequest does) equals the model
    validated from the standard library's parse (as FastAPI does), for every example body."""
    import json

    raw = path.read_bytes()
    assert model.model_validate_json(raw) == model.model_validate(json.loads(raw))


def test_a_body_that_breaks_rules_is_reported_field_by_field(client) -> None:
    """The bytes path gives up on a failing body; FastAPI's validation then names each field."""
    req = small_request()
    req["current"]["prices"] = "cheap"
    req["base"]["expenditure"] = "lots"
    r = client.post("/v1/comparisons", json=req)
    assert r.status_code == 422
    pointers = {e["pointer"] for e in r.json()["errors"]}
    assert {"/current/prices", "/base/expenditure"} <= pointers, r.json()
