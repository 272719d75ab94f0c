"""Limits, access control and observability (common practice for a service on an office network)."""

from __future__ import annotations

import io
import json
import logging

from fastapi.testclient import TestClient

from dualcost.api.app import create_app
from dualcost.api.observability import JsonLogFormatter
from dualcost.config import Settings
from tests.api.test_comparisons import small_request
from tests.conftest import EXAMPLES

KEY = "wrenmouth-office-key-0123456789"


def make(**settings: object) -> TestClient:
    return TestClient(create_app(Settings(examples_dir=EXAMPLES, **settings)))


def test_body_over_the_limit_is_a_413_problem() -> None:
    client = make(max_body_bytes=2_000)
    body = small_request()
    body["items"] = [{"id": "a", "label": "x" * 3_000}, "b", "c"]
    r = client.post("/v1/comparisons", json=body)
    assert r.status_code == 413
    assert r.headers["content-type"].startswith("application/problem+json")
    assert "2000 bytes" in r.json()["detail"]


def test_chunked_body_over_the_limit_is_cut_off() -> None:
    client = make(max_body_bytes=2_000)
    payload = json.dumps(small_request()).encode() + b" " * 5_000

    def chunks():
        for i in range(0, len(payload), 500):
            yield payload[i : i + 500]

    r = client.post("/v1/comparisons", content=chunks(), headers={"content-type": "application/json"})
    assert r.status_code == 413


def test_api_keys_are_required_when_configured_and_compared_exactly() -> None:
    client = make(api_keys=(KEY,))
    assert client.post("/v1/comparisons", json=small_request()).status_code == 401
    wrong = client.post("/v1/comparisons", json=small_request(), headers={"x-api-key": KEY[:-1] + "X"})
    assert wrong.status_code == 401 and wrong.headers["content-type"].startswith("application/problem+json")
    assert "x-api-key" in wrong.headers["www-authenticate"].lower()
    assert client.post("/v1/comparisons", json=small_request(), headers={"x-api-key": KEY}).status_code == 200
    bearer = client.post("/v1/comparisons", json=small_request(), headers={"authorization": f"Bearer {KEY}"})
    assert bearer.status_code == 200
    assert client.get("/health").status_code == 200  # probes stay open


def test_keys_from_a_secret_file(tmp_path) -> None:
    secret = tmp_path / "keys"
    secret.write_text(f"# office keys\n{KEY}\n\n", encoding="utf-8")
    client = make(api_keys_file=secret)
    assert client.get("/v1/index-formulas", headers={"x-api-key": KEY}).status_code == 200
    assert client.get("/v1/index-formulas").status_code == 401


def test_rate_limit_per_key_answers_429_with_retry_after() -> None:
    client = make(api_keys=(KEY,), rate_limit_per_minute=2)
    headers = {"x-api-key": KEY}
    codes = [client.get("/v1/index-formulas", headers=headers).status_code for _ in range(3)]
    assert codes == [200, 200, 429]
    r = client.get("/v1/index-formulas", headers=headers)
    assert int(r.headers["retry-after"]) >= 1


def test_request_id_is_echoed_or_made(client) -> None:
    assert client.get("/health", headers={"x-request-id": "audit-42"}).headers["x-request-id"] == "audit-42"
    made = client.get("/health").headers["x-request-id"]
    assert len(made) == 32
    assert client.get("/health", headers={"x-request-id": "bad id\n"}).headers["x-request-id"] != "bad id\n"


def test_logs_are_json_lines_with_the_request_id_and_never_the_key() -> None:
    stream = io.StringIO()
    handler = logging.StreamHandler(stream)
    handler.setFormatter(JsonLogFormatter())
    logger = logging.getLogger("dualcost")
    logger.addHandler(handler)
    old_level = logger.level
    logger.setLevel(logging.INFO)
    try:
        client = make(api_keys=(KEY,))
        client.post("/v1/comparisons", json=small_request(), headers={"x-api-key": KEY,
                                                                       "x-request-id": "trace-7"})
    finally:
        logger.removeHandler(handler)
        logger.setLevel(old_level)
    lines = [json.loads(line) for line in stream.getvalue().splitlines()]
    entry = next(e for e in lines if e.get("operation") == "compare")
    assert entry["request_id"] == "trace-7" and entry["status"] == 200
    assert entry["client"] != "anonymous" and len(entry["client"]) == 8
    assert KEY not in stream.getvalue()


def test_metrics_count_requests_and_compute_time(client) -> None:
    client.post("/v1/comparisons", json=small_request())
    text = client.get("/metrics").text
    assert 'dualcost_requests_total{operation="compare",status="200"}' in text
    assert 'dualcost_compute_seconds_count{operation="compare"}' in text


def test_metrics_name_the_framework_pages_and_keep_unmatched_for_unknown_paths(client) -> None:
    """The API documents count under their handlers' names, not with requests for unknown paths
    (a bounded set of labels: one per handler; common practice for Prometheus labels)."""
    client.get("/openapi.json")
    client.get("/docs")
    client.get("/no-such-page")
    text = client.get("/metrics").text
    assert 'dualcost_requests_total{operation="openapi",status="200"}' in text
    assert 'dualcost_requests_total{operation="swagger_ui_html",status="200"}' in text
    assert 'dualcost_requests_total{operation="unmatched",status="404"}' in text


def test_liveness_and_readiness() -> None:
    app = create_app(Settings(examples_dir=EXAMPLES))
    assert TestClient(app).get("/ready").status_code == 503  # start-up has not run
    with TestClient(app) as client:  # runs the start-up (lifespan), including the warm-up
        assert client.get("/live").json()["status"] == "ok"
        assert client.get("/ready").json()["status"] == "ready"


def test_cors_origins_are_configurable_for_dashboards() -> None:
    client = make(cors_origins=("https://dashboards.wrenmouth.example",))
    r = client.options("/v1/comparisons", headers={
        "origin": "https://dashboards.wrenmouth.example", "access-control-request-method": "POST",
        "access-control-request-headers": "content-type"})
    assert r.status_code == 200
    assert r.headers["access-control-allow-origin"] == "https://dashboards.wrenmouth.example"
    other = client.options("/v1/comparisons", headers={
        "origin": "https://elsewhere.example", "access-control-request-method": "POST"})
    assert "access-control-allow-origin" not in other.headers


def test_probes_answer_while_every_compute_thread_is_busy() -> None:
    """Liveness, readiness and metrics must not queue behind long computations for a thread."""
    import threading

    import anyio.to_thread
    from fastapi.testclient import TestClient

    from dualcost.api.app import create_app
    from dualcost.config import Settings

    with TestClient(create_app(Settings(compute_threads=1))) as client:
        limiter = client.portal.call(anyio.to_thread.current_default_thread_limiter)
        holder = object()
        client.portal.call(limiter.acquire_on_behalf_of_nowait, holder)
        try:
            answers: dict[str, int] = {}

            def probe() -> None:
                for path in ("/live", "/ready", "/health", "/metrics"):
                    answers[path] = client.get(path).status_code

            worker = threading.Thread(target=probe, daemon=True)
            worker.start()
            worker.join(timeout=10)
            assert answers == {"/live": 200, "/ready": 200, "/health": 200, "/metrics": 200}
        finally:
            client.portal.call(limiter.release_on_behalf_of, holder)
