"""Service endpoints: health, problem-type pages, and the demo scenario."""

from __future__ import annotations

import json
from functools import cache
from importlib import resources
from typing import Any

from fastapi import APIRouter, Request
from fastapi.responses import HTMLResponse, JSONResponse, PlainTextResponse, Response

from ... import __version__
from ..deps import settings_of
from ..observability import metrics_text
from ..operations import compare
from ..problems import PROBLEM_TYPES, FieldError, RequestProblem
from ..provenance import of_body
from ..render import json_response, negotiate
from ..routing import JsonRoute
from ..schemas.comparison import ComparisonRequest
from ..schemas.service import DemoOut, HealthOut

router = APIRouter(route_class=JsonRoute)


# The probes and the metrics are coroutines: they answer on the event loop even when every
# compute thread is busy with a long computation (a plain function would queue for a thread).
@router.get("/health", operation_id="health", response_model=HealthOut, tags=["service"])
async def health() -> HealthOut:
    """Liveness for containers and load balancers."""
    return HealthOut(status="ok", version=__version__)


@router.get("/live", operation_id="live", response_model=HealthOut, tags=["service"])
async def live() -> HealthOut:
    """Liveness: the process answers."""
    return HealthOut(status="ok", version=__version__)


@router.get("/ready", operation_id="ready", response_model=HealthOut, tags=["service"],
            responses={503: {"description": "Not ready yet (or shutting down), or the database "
                                            "cannot be reached."}})
async def ready(request: Request) -> Response:
    """Readiness: start-up (including a warm-up comparison) has finished, and the database of
    jobs and runs answered when last used (the keeper asks it every few seconds)."""
    if not getattr(request.app.state, "ready", False):
        return JSONResponse({"status": "starting", "version": __version__}, status_code=503)
    if not request.app.state.db.healthy:
        return JSONResponse({"status": "database-unreachable", "version": __version__},
                            status_code=503)
    return JSONResponse({"status": "ready", "version": __version__})


@router.get("/metrics", operation_id="metrics", tags=["service"], response_class=PlainTextResponse,
            responses={200: {"content": {"text/plain": {}}}})
async def metrics() -> Response:
    """Prometheus metrics: requests, latency and compute time by operation."""
    data, media = metrics_text()
    return Response(data, media_type=media)


@router.get("/problems/{slug}", operation_id="describeProblem", response_class=HTMLResponse,
            tags=["service"])
def describe_problem(slug: str) -> HTMLResponse:
    """A human-readable page for each problem ``type`` URI."""
    kind = PROBLEM_TYPES.get(slug)
    if kind is None:
        raise RequestProblem([FieldError("#/path/slug", f"{slug!r} is not a problem type of "
                                         "this service")], slug="invalid-input")
    return HTMLResponse(f"<!doctype html><title>{kind.title}</title><h1>{kind.title}</h1>"
                        f"<p>HTTP {kind.status}.</p><p>{kind.description}</p>")


@cache
def demo_request() -> dict[str, Any]:
    """The demo scenario's comparison request (shipped with the package)."""
    text = resources.files("dualcost.demo").joinpath("wrenmouth.json").read_text("utf-8")
    return json.loads(text)


@router.get("/v1/demo", operation_id="demo", response_model=DemoOut, tags=["demo"])
def demo(request: Request) -> Response:
    """The demo scenario (an invented town's statistics office): its request and its answer,
    which is what POST /v1/comparisons answers to the request (provenance included). Send the
    request to POST /v1/comparisons and change it to explore."""
    negotiate(request, ("json",))
    body = demo_request()
    comparison = ComparisonRequest.model_validate(body)
    outcome = compare.run(comparison, settings_of(request))
    origin = of_body(comparison)
    return json_response({
        "scenario": "Wrenmouth, an invented river town: its statistics office compares the "
                    "household basket of 2025 with this year's prices under a nested CES model.",
        "request": body,
        "result": {**compare.document(outcome), "provenance": origin.json()},
    }, provenance=origin)
