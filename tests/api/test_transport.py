"""Bounded transport, over real sockets against the service as ``dualcost serve`` runs it:
header fields too large or too many (431, RFC 6585 section 5), a request too slow to arrive
(408, RFC 9110 section 15.5.9), an upload dropped halfway (ended quietly: no 5xx, no traceback),
stalled uploads that hold no household-job slot. The limits' values are common practice for a
web server (a head of tens of KiB, about a hundred header fields, tens of seconds to read)."""

from __future__ import annotations

import json
import logging
import re
import socket
import time
from collections.abc import Iterator
from contextlib import contextmanager
from typing import Any
from urllib.parse import urlsplit

import httpx
import pytest
from fastapi.testclient import TestClient

from dualcost.api.app import create_app
from dualcost.config import Settings
from tests.api.test_comparisons import small_request
from tests.api.test_households import example, household_csv
from tests.conftest import EXAMPLES, running_service


@pytest.fixture(scope="module")
def service() -> Iterator[str]:
    """The service with its default limits (a job table of 32, 30 s to read a request)."""
    with running_service(Settings(examples_dir=EXAMPLES)) as url:
        yield url


@pytest.fixture(scope="module")
def quick() -> Iterator[str]:
    """The service with one second to read a head or a body, plus a second per 1000 bytes."""
    with running_service(Settings(examples_dir=EXAMPLES, read_timeout_seconds=1.0,
                                  read_min_bytes_per_second=1000)) as url:
        yield url


def connect(url: str, timeout: float = 15.0) -> socket.socket:
    parts = urlsplit(url)
    sock = socket.create_connection((parts.hostname, parts.port), timeout=timeout)
    return sock


def read_all(sock: socket.socket) -> bytes:
    """Everything the server sends until it closes the connection (a socket timeout fails)."""
    out = b""
    while True:
        try:
            piece = sock.recv(65536)
        except ConnectionResetError:
            return out
        if not piece:
            return out
        out += piece


def exchange(url: str, data: bytes) -> bytes:
    """Send ``data`` (as much as the server takes) and read the answer to the end."""
    with connect(url) as sock:
        try:
            sock.sendall(data)
        except (BrokenPipeError, ConnectionResetError):
            pass
        return read_all(sock)


def status(answer: bytes) -> int:
    found = re.match(rb"HTTP/1\.1 (\d{3}) ", answer)
    assert found, answer[:200]
    return int(found.group(1))


def problem(answer: bytes, expected: int) -> dict[str, Any]:
    assert status(answer) == expected, answer[:500]
    head, _, body = answer.partition(b"\r\n\r\n")
    assert b"content-type: application/problem+json" in head.lower()
    assert b"connection: close" in head.lower()
    return json.loads(body)  # type: ignore[no-any-return]


def server_errors(url: str) -> float:
    """Requests counted with a 5xx status in /metrics."""
    text = httpx.get(url + "/metrics").text
    return sum(float(line.rsplit(" ", 1)[1]) for line in text.splitlines()
               if line.startswith("dualcost_requests_total{") and 'status="5' in line)


def counted(url: str, operation: str, code: int) -> float:
    text = httpx.get(url + "/metrics").text
    prefix = f'dualcost_requests_total{{operation="{operation}",status="{code}"}} '
    return sum(float(line[len(prefix):]) for line in text.splitlines() if line.startswith(prefix))


@contextmanager
def errors_logged() -> Iterator[list[logging.LogRecord]]:
    """Records at ERROR or above from the service and the server while the block runs."""
    records: list[logging.LogRecord] = []

    class Keep(logging.Handler):
        def emit(self, record: logging.LogRecord) -> None:
            records.append(record)

    handler = Keep(logging.ERROR)
    loggers = [logging.getLogger(), logging.getLogger("uvicorn"), logging.getLogger("dualcost")]
    for logger in loggers:
        logger.addHandler(handler)
    try:
        yield records
    finally:
        for logger in loggers:
            logger.removeHandler(handler)


def create_job(url: str, client: httpx.Client | None = None) -> dict[str, Any]:
    spec = {k: v for k, v in example().items() if k != "households"}
    r = (client or httpx).post(url + "/v1/household-jobs", json=spec)  # type: ignore[attr-defined]
    assert r.status_code == 201, r.text
    return r.json()  # type: ignore[no-any-return]


def upload_head(path: str, length: int) -> bytes:
    return (f"POST {path} HTTP/1.1\r\nHost: dualcost\r\nContent-Type: text/csv\r\n"
            f"Content-Length: {length}\r\n\r\n").encode()


def wait_for(condition: Any, seconds: float = 10.0) -> None:
    deadline = time.monotonic() + seconds
    while not condition():
        assert time.monotonic() < deadline, "the service did not get there in time"
        time.sleep(0.05)


# -- the head: 431 ------------------------------------------------------------------------------


def test_a_header_of_one_mebibyte_is_refused_431(service: str) -> None:
    answer = exchange(service, b"GET /live HTTP/1.1\r\nHost: dualcost\r\nX-Big: "
                      + b"a" * (1 << 20) + b"\r\n\r\n")
    body = problem(answer, 431)
    assert body["type"] == "/problems/request-header-fields-too-large"
    assert "32768 bytes" in body["detail"] and "DUALCOST_MAX_HEADER_BYTES" in body["detail"]
    assert httpx.get(service + "/live").status_code == 200


def test_ten_thousand_header_fields_are_refused_431(service: str) -> None:
    fields = b"".join(b"X-Field-%d: v\r\n" % i for i in range(10_000))
    answer = exchange(service, b"GET /live HTTP/1.1\r\nHost: dualcost\r\n" + fields + b"\r\n")
    body = problem(answer, 431)
    assert body["type"] == "/problems/request-header-fields-too-large"
    # A head under the byte limit with too many fields is refused for their number.
    answer = exchange(service, b"GET /live HTTP/1.1\r\nHost: d\r\n"
                      + b"".join(b"X-%d: v\r\n" % i for i in range(150)) + b"\r\n")
    assert "limit of 100" in problem(answer, 431)["detail"]


def test_a_head_within_the_limits_is_answered(service: str) -> None:
    fields = b"".join(b"X-Field-%d: %s\r\n" % (i, b"v" * 200) for i in range(90))
    answer = exchange(service, b"GET /live HTTP/1.1\r\nHost: dualcost\r\nConnection: close\r\n"
                      + fields + b"\r\n")
    assert status(answer) == 200


def test_the_application_refuses_large_heads_under_any_server() -> None:
    """Run by another server, the application still answers 431 (after that server has
    buffered the head)."""
    client = TestClient(create_app(Settings(examples_dir=EXAMPLES)))
    many = {f"x-field-{i}": "v" for i in range(101)}
    r = client.get("/live", headers=many)
    assert r.status_code == 431 and r.json()["type"] == "/problems/request-header-fields-too-large"
    r = client.get("/live", headers={"x-big": "a" * 40_000})
    assert r.status_code == 431 and "DUALCOST_MAX_HEADER_BYTES" in r.json()["detail"]
    assert client.get("/live", headers={"x-big": "a" * 30_000}).status_code == 200


# -- time: 408 ----------------------------------------------------------------------------------


def test_a_stalled_body_is_answered_408_within_the_read_time(quick: str) -> None:
    with connect(quick) as sock:
        sock.sendall(b"POST /v1/comparisons HTTP/1.1\r\nHost: dualcost\r\nContent-Type: "
                     b"application/json\r\nContent-Length: 5000\r\n\r\n{\"items\": ")
        start = time.monotonic()
        answer = read_all(sock)
        elapsed = time.monotonic() - start
    body = problem(answer, 408)
    assert body["type"] == "/problems/request-timeout"
    assert "DUALCOST_READ_TIMEOUT_SECONDS" in body["detail"]
    assert 0.9 <= elapsed < 3.0, elapsed


def test_a_stalled_head_is_answered_408_within_the_read_time(quick: str) -> None:
    with connect(quick) as sock:
        sock.sendall(b"GET /live HTTP/1.1\r\nHost: dualcost\r\nX-Slow: ")
        start = time.monotonic()
        answer = read_all(sock)
        elapsed = time.monotonic() - start
    assert problem(answer, 408)["type"] == "/problems/request-timeout"
    assert 0.9 <= elapsed < 3.0, elapsed


def test_a_slow_body_that_keeps_coming_earns_its_time(quick: str) -> None:
    """1000 bytes every half second: 2 s in all, past the read time of 1 s, but each 1000
    bytes earn one more second."""
    payload = json.dumps(small_request()).encode()
    payload += b" " * (4000 - len(payload))
    with connect(quick) as sock:
        sock.sendall(b"POST /v1/comparisons HTTP/1.1\r\nHost: dualcost\r\nConnection: close\r\n"
                     b"Content-Type: application/json\r\nContent-Length: 4000\r\n\r\n")
        for i in range(0, 4000, 1000):
            sock.sendall(payload[i:i + 1000])
            time.sleep(0.5)
        answer = read_all(sock)
    assert status(answer) == 200, answer[:500]


# -- an upload dropped halfway ------------------------------------------------------------------


def test_an_upload_dropped_halfway_ends_quietly(service: str) -> None:
    """No 5xx in the metrics, nothing at ERROR in the logs; the request is counted as closed by
    the client (499), and the job still waits for its households."""
    job = create_job(service)
    text = household_csv(example()).encode()
    before = server_errors(service)
    dropped = counted(service, "householdIndicesFromCsv", 499)
    dropped_json = counted(service, "compare", 499)
    with errors_logged() as records:
        with connect(service) as sock:
            sock.sendall(upload_head(job["links"]["households"], 1_000_000) + text * 50)
            time.sleep(0.2)
        with connect(service) as sock:
            sock.sendall(b"POST /v1/comparisons HTTP/1.1\r\nHost: dualcost\r\nContent-Type: "
                         b"application/json\r\nContent-Length: 100000\r\n\r\n{\"items\": [")
            time.sleep(0.2)
        wait_for(lambda: counted(service, "householdIndicesFromCsv", 499) == dropped + 1
                 and counted(service, "compare", 499) == dropped_json + 1)
    assert server_errors(service) == before
    assert [r.getMessage() for r in records] == []
    assert httpx.get(service + job["links"]["self"]).json()["status"] == "waiting_for_households"
    r = httpx.post(service + job["links"]["households"], content=text,
                   headers={"content-type": "text/csv"})
    assert r.status_code == 200, r.text


# -- job slots ----------------------------------------------------------------------------------


def test_stalled_uploads_hold_no_job_slot(service: str) -> None:
    """Every job of the table (32) with an upload stalled halfway: a new job is still created,
    in place of the oldest one, and its households computed. A job takes its slot when its
    first block is ready (operations/job_intake.py): these stall in their header, before any
    block, and hold none; one stalled after its first block holds its slot until the body's
    read time ends it (test_streamed_uploads.py)."""
    stalled: list[socket.socket] = []
    with httpx.Client() as client:
        for _ in range(33):
            job = create_job(service, client)
            sock = connect(service)
            sock.sendall(upload_head(job["links"]["households"], 100_000) + b"household,")
            stalled.append(sock)
        try:
            time.sleep(0.3)  # every upload has reached the service and waits for the rest
            fresh = create_job(service, client)
            r = client.post(service + fresh["links"]["households"],
                            content=household_csv(example()).encode(),
                            headers={"content-type": "text/csv"})
            assert r.status_code == 200, r.text
            assert client.get(service + fresh["links"]["self"]).json()["status"] == "done"
        finally:
            for sock in stalled:
                sock.close()


def test_a_client_that_leaves_before_reading_the_answer_frees_the_jobs_slot(service: str) -> None:
    """The households arrive whole, the client goes: the job ends (cancelled, or done if it
    was quicker) at once, not whenever its abandoned stream is collected; until then it would
    hold its slot as a running job, which no new job may replace."""
    text = household_csv(example()).encode()
    lines = text.split(b"\r\n")
    text = b"\r\n".join([lines[0], *lines[1:-1] * 2000]) + b"\r\n"
    job = create_job(service)
    with connect(service) as sock:
        sock.sendall(upload_head(job["links"]["households"], len(text)) + text)
    # The job waits until its first block is computed (operations/job_intake.py), then runs:
    # the wait is for its end, not for any status but running.
    wait_for(lambda: httpx.get(service + job["links"]["self"]).json()["status"]
             in ("cancelled", "done"), 5.0)
    assert httpx.get(service + job["links"]["self"]).json()["status"] in ("cancelled", "done")
