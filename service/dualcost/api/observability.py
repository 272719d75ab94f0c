"""Request ids, structured JSON logs and Prometheus metrics.

Every request gets an id (the caller's ``X-Request-ID`` if it sends a sane one, else a new one),
echoed in the response header and written in every log line of that request. One JSON line is
logged per request: time, level, request id, method, path, operation, status, duration. API keys
are never logged (only a short hash label, see :mod:`dualcost.api.access`).

Metrics, served at ``/metrics`` in the Prometheus text format: request counts by operation and
status, request latency by operation, and compute time by operation (the time spent in the core).
With several worker processes, set ``PROMETHEUS_MULTIPROC_DIR`` to an empty folder so that the
workers' metrics are added up (prometheus-client's multiprocess mode).
"""

from __future__ import annotations

import contextvars
import copy
import itertools
import json
import logging
import os
import re
import time
import uuid
from collections.abc import Iterator
from contextlib import contextmanager
from typing import Any

import numpy as np
from prometheus_client import CONTENT_TYPE_LATEST, CollectorRegistry, Counter, Histogram, generate_latest
from starlette.requests import ClientDisconnect
from starlette.types import ASGIApp, Message, Receive, Scope, Send

from ..core.deadline import deadline
from ..core.errors import NumericalFailure
from ..core.expressions import formula_limits

REQUEST_ID: contextvars.ContextVar[str] = contextvars.ContextVar("request_id", default="-")
_SANE_ID = re.compile(r"^[A-Za-z0-9._-]{1,64}$")
log = logging.getLogger("dualcost.requests")

_BUCKETS = (0.001, 0.0025, 0.005, 0.01, 0.025, 0.05, 0.1, 0.25, 0.5, 1.0, 2.5, 5.0, 10.0, 30.0)
REQUESTS = Counter("dualcost_requests_total", "Requests answered, by operation and status.",
                   ["operation", "status"])
LATENCY = Histogram("dualcost_request_seconds", "Time to answer a request, by operation.",
                    ["operation"], buckets=_BUCKETS)
COMPUTE = Histogram("dualcost_compute_seconds", "Time spent in the numerical core, by operation.",
                    ["operation"], buckets=_BUCKETS)


@contextmanager
def compute_time(operation: str) -> Iterator[None]:
    """Time a core call for the compute-time metric."""
    start = time.perf_counter()
    try:
        yield
    finally:
        COMPUTE.labels(operation).observe(time.perf_counter() - start)


@contextmanager
def checked_arithmetic() -> Iterator[None]:
    """Floating-point trouble as a :class:`NumericalFailure`: inside, an overflow, a division by
    zero or an undefined operation raises (numpy's error state, which is per thread and per
    context) rather than warning and carrying an infinity or NaN on into the answer, and a
    linear-algebra failure on such values (an SVD that does not converge) is one too. The core
    marks the places where it means to compute with infinities (``np.errstate`` of its own)."""
    try:
        with np.errstate(over="raise", divide="raise", invalid="raise"):
            yield
    except (FloatingPointError, OverflowError, ZeroDivisionError,
            np.linalg.LinAlgError) as exc:
        raise NumericalFailure("computation", "the arithmetic left the range of floating-point "
                               f"numbers at these inputs ({exc})") from exc


@contextmanager
def computing(operation: str, settings: Any) -> Iterator[None]:
    """A request's computation: timed for the metrics, under the compute deadline and the
    formula limits of the service's settings, with its arithmetic checked
    (:func:`checked_arithmetic`)."""
    with compute_time(operation), deadline(settings.compute_deadline_seconds), formula_limits(
            settings.max_formula_chars, settings.max_formula_depth), checked_arithmetic():
        yield


def metrics_text() -> tuple[bytes, str]:
    """The metrics in Prometheus text format (added up over workers in multiprocess mode)."""
    if os.environ.get("PROMETHEUS_MULTIPROC_DIR"):
        from prometheus_client import multiprocess

        registry = CollectorRegistry()
        multiprocess.MultiProcessCollector(registry)  # type: ignore[no-untyped-call]
        return generate_latest(registry), CONTENT_TYPE_LATEST
    return generate_latest(), CONTENT_TYPE_LATEST


class JsonLogFormatter(logging.Formatter):
    """One JSON object per line, with the request id of the request being served."""

    def format(self, record: logging.LogRecord) -> str:
        entry: dict[str, Any] = {
            "time": self.formatTime(record, "%Y-%m-%dT%H:%M:%S%z"),
            "level": record.levelname.lower(),
            "logger": record.name,
            "request_id": REQUEST_ID.get(),
            "message": record.getMessage(),
        }
        entry.update(getattr(record, "fields", {}))
        if record.exc_info:
            entry["exception"] = self.formatException(record.exc_info)
        return json.dumps(entry, ensure_ascii=False)


def logging_config(level: str = "info", *, json_lines: bool = True) -> dict[str, Any]:
    """uvicorn's logging configuration with dualcost's logs added: to standard error, as JSON
    lines unless asked otherwise.

    It is given to uvicorn as ``log_config``, which applies it in every worker process; worker
    processes start afresh, so a configuration made only in the parent would not reach them.
    """
    from uvicorn.config import LOGGING_CONFIG

    config = copy.deepcopy(LOGGING_CONFIG)
    config["formatters"]["dualcost"] = (
        {"()": f"{__name__}.JsonLogFormatter"} if json_lines
        else {"format": "%(asctime)s %(levelname)s %(name)s %(message)s"})
    config["handlers"]["dualcost"] = {"class": "logging.StreamHandler", "formatter": "dualcost",
                                      "stream": "ext://sys.stderr"}
    config["loggers"]["dualcost"] = {"handlers": ["dualcost"], "level": level.upper(),
                                     "propagate": False}
    return config


def _operation(scope: Scope) -> str:
    """The operation id of the route that answered; for the framework's own pages (the API
    documents, the static files) the name of their handler; "unmatched" when no route did."""
    route = scope.get("route")
    name = getattr(route, "operation_id", None) or getattr(route, "name", None)
    if not name and (endpoint := scope.get("endpoint")) is not None:
        name = getattr(endpoint, "__name__", None) or type(endpoint).__name__
    return str(name) if name else "unmatched"


_ID_PREFIX = uuid.uuid4().hex[:16]
_ID_COUNTER = itertools.count(1)


def _new_request_id() -> str:
    """A random prefix per process and a counter: unique across workers and restarts, and far
    cheaper per request than a fresh random UUID."""
    return f"{_ID_PREFIX}{next(_ID_COUNTER):016x}"


#: The status counted and logged for a request whose client went away before its answer
#: started (nginx's "client closed request"; not sent to anyone).
CLIENT_CLOSED = 499


class RequestContextMiddleware:
    """Request id, one log line and the metrics for every HTTP request.

    A client that goes away before the answer has started (an upload dropped halfway) ends its
    request quietly: Starlette's ``ClientDisconnect`` is not an error of the service, so it is
    neither answered 500 nor logged with a traceback; the request is counted and logged with
    the status 499 (:data:`CLIENT_CLOSED`), whatever the application then tried to answer.
    """

    def __init__(self, app: ASGIApp) -> None:
        self.app = app

    async def __call__(self, scope: Scope, receive: Receive, send: Send) -> None:
        if scope["type"] != "http":
            await self.app(scope, receive, send)
            return
        given = dict(scope.get("headers") or []).get(b"x-request-id", b"").decode("latin-1")
        request_id = given if _SANE_ID.match(given) else _new_request_id()
        token = REQUEST_ID.set(request_id)
        start = time.perf_counter()
        status = 500
        started = False
        client_gone = False

        async def watching_receive() -> Message:
            nonlocal client_gone
            message = await receive()
            if message["type"] == "http.disconnect" and not started:
                client_gone = True
            return message

        async def send_with_id(message: Message) -> None:
            nonlocal status, started
            if message["type"] == "http.response.start":
                status, started = message["status"], True
                message.setdefault("headers", [])
                message["headers"] = [*message["headers"], (b"x-request-id", request_id.encode())]
            await send(message)

        try:
            await self.app(scope, watching_receive, send_with_id)
        except ClientDisconnect:
            client_gone = client_gone or not started
        finally:
            if client_gone:
                status = CLIENT_CLOSED
            elapsed = time.perf_counter() - start
            operation = _operation(scope)
            REQUESTS.labels(operation, str(status)).inc()
            LATENCY.labels(operation).observe(elapsed)
            log.info("request", extra={"fields": {
                "method": scope.get("method"), "path": scope.get("path"), "operation": operation,
                "status": status, "duration_ms": round(elapsed * 1000, 3),
                "client": scope.get("state", {}).get("client_label", "-"),
            }})
            REQUEST_ID.reset(token)
