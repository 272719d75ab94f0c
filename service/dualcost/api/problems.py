"""Problem details (RFC 9457): the one place where errors become HTTP statuses.

Every error answer is ``application/problem+json`` with ``type``, ``title``, ``status``,
``detail`` and, for bad input, an ``errors`` list of ``{"pointer", "detail"}`` where ``pointer`` is
a JSON Pointer (RFC 6901) into the request body (or ``#/query/<name>`` for a query parameter).
Problem types are relative URIs served by the app at ``/problems/<slug>``.

The web layer's exceptions join the core's tree (:mod:`dualcost.core.errors`)::

    DualcostError
     ├── InvalidInput, NumericalFailure, EngineUnavailable   the core's (see core.errors)
     ├── StorageUnavailable   the database of jobs and runs is out of reach: 503, Retry-After
     ├── RequestProblem       bad input the web layer found, or a core error located in the
     │                        request (422, or the slug it carries: 400, 413, 415)
     └── ServiceProblem       the service's state refuses the request
          ├── JobNotFound     404
          ├── RunNotFound     404: no saved run with this id for this key
          ├── JobConflict     409
          ├── NotAcceptable   406: no answer format of the operation suits the Accept header
          └── JobTableFull    503, with Retry-After

    BodyTooLarge, BodyTimedOut (BaseExceptions: they must pass the framework's ``except
    Exception`` around body reading to reach the body-limit middleware, which answers 413 or 408)

Refusals made before a request reaches the application (a request head too large, or too slow to
arrive: 431, 408) are written by the server's protocol (:mod:`dualcost.api.transport`) with
:func:`problem_message`.

Every status the service answers for an error is in this module: in ``PROBLEM_TYPES`` and in
the classes above.
"""

from __future__ import annotations

import json
import logging
import math
from collections.abc import Iterable, Mapping, Sequence
from dataclasses import dataclass
from http import HTTPStatus
from typing import Any

from fastapi import FastAPI, Request
from fastapi.exceptions import RequestValidationError
from fastapi.responses import JSONResponse, PlainTextResponse, Response
from starlette.concurrency import run_in_threadpool
from starlette.exceptions import HTTPException as StarletteHTTPException
from starlette.requests import ClientDisconnect
from starlette.types import ASGIApp, Message, Receive, Scope, Send

from ..core.errors import (
    DeadlineExceeded,
    DualcostError,
    EngineUnavailable,
    InvalidInput,
    NumericalFailure,
    StorageUnavailable,
)
from .inputs import json_text

PROBLEM_MEDIA_TYPE = "application/problem+json"
log = logging.getLogger("dualcost.api")


@dataclass(frozen=True)
class ProblemType:
    slug: str
    status: int
    title: str
    description: str


PROBLEM_TYPES: dict[str, ProblemType] = {
    p.slug: p
    for p in (
        ProblemType("invalid-input", 422, "The request breaks a rule",
                    "A field of the request is missing, malformed, out of range, or inconsistent "
                    "with another field. Each entry of `errors` names the field by a JSON Pointer "
                    "and states the rule."),
        ProblemType("numerical-failure", 422, "The model cannot be evaluated at these inputs",
                    "The inputs are valid one by one, but evaluating the model with them left the "
                    "range of floating-point numbers or did not converge."),
        ProblemType("malformed-request", 400, "The request body is not valid JSON",
                    "The body could not be parsed as JSON."),
        ProblemType("payload-too-large", 413, "The request body is too large",
                    "The body is larger than the service's limit (DUALCOST_MAX_BODY_BYTES)."),
        ProblemType("request-header-fields-too-large", 431, "The request's header fields are "
                    "too large",
                    "The request line and header fields together are larger than the service's "
                    "limit (DUALCOST_MAX_HEADER_BYTES), or there are more header fields than "
                    "DUALCOST_MAX_HEADER_COUNT. The connection is closed after this answer."),
        ProblemType("request-timeout", 408, "The request took too long to arrive",
                    "The request's header fields, or its body, did not arrive within the "
                    "service's read time (DUALCOST_READ_TIMEOUT_SECONDS, and for a body one more "
                    "second per DUALCOST_READ_MIN_BYTES_PER_SECOND bytes received). Nothing was "
                    "computed; the connection is closed after this answer: send the request "
                    "again."),
        ProblemType("unsupported-media-type", 415, "The body's media type is not accepted",
                    "This operation takes a JSON body: send it with 'Content-Type: "
                    "application/json' (the CSV uploads take text/csv at their own addresses). "
                    "The Content-Type header is named in `errors`."),
        ProblemType("unauthorized", 401, "An API key is needed",
                    "This service requires an API key in the X-API-Key header (or as "
                    "'Authorization: Bearer <key>')."),
        ProblemType("too-many-requests", 429, "Too many requests",
                    "This API key (or, for requests without a valid key, this client address) "
                    "has used up its request rate; retry after the number of seconds in the "
                    "Retry-After header."),
        ProblemType("deadline-exceeded", 503, "The computation ran past its deadline",
                    "The request's computation took longer than the service's compute deadline "
                    "(DUALCOST_COMPUTE_DEADLINE_SECONDS) and was stopped. Reduce the problem's size "
                    "or ask the operator for a longer deadline."),
        ProblemType("model-not-regular", 422, "The model is outside its regular region",
                    "The figure asked for is one of the model's (a Konüs index, compensating or "
                    "equivalent variation, compensated income, a substitution bias), and the "
                    "model is not regular at these prices and incomes (a share outside [0, 1], a "
                    "negative demand, a Slutsky matrix that is not negative semidefinite or not "
                    "symmetric, ...): the figure is not a result. The detail names the reason and "
                    "the items; the formula indices remain available."),
        ProblemType("job-table-full", 503, "No room for another household job",
                    "The household-job table (one for every worker) is full of jobs that may not be "
                    "removed (running jobs, and jobs of other API keys that have not finished), "
                    "or this API key holds its share of the table "
                    "(DUALCOST_MAX_HOUSEHOLD_JOBS_PER_KEY) and all of its jobs are running. Retry "
                    "after the number of seconds in the Retry-After header, or delete a job of "
                    "yours that you no longer need."),
        ProblemType("storage-unavailable", 503, "The service's database cannot be reached",
                    "The database that keeps household jobs and saved runs did not answer, or "
                    "refused the change; nothing of this request was written (each change is "
                    "one transaction). Retry after the number of seconds in the Retry-After "
                    "header; /ready answers 503 until the database is back."),
        ProblemType("not-found", 404, "Nothing here", "No resource at this address."),
        ProblemType("not-acceptable", 406, "No acceptable answer format",
                    "The Accept header admits none of the media types this operation answers "
                    "(listed in `acceptable`). Ask for one of them, or for */*; where the "
                    "operation has a `format` query parameter, it decides over Accept. Problem "
                    "answers are always application/problem+json."),
        ProblemType("method-not-allowed", 405, "Method not allowed",
                    "This address does not answer that HTTP method."),
        ProblemType("http-error", 400, "The request was refused", "An HTTP-level refusal."),
        ProblemType("internal-error", 500, "Internal error",
                    "The service failed on a request it should have answered. This is a bug: "
                    "please report it with the request."),
    )
}


class BodyTooLarge(BaseException):
    """Raised while a request body is read, when it passes the size limit.

    Deliberately not an ``Exception``: the framework wraps body reading in ``except Exception``
    (turning anything into a 400), and this must reach the size-limit middleware, which answers
    413 (see :mod:`dualcost.api.limits`).
    """


class BodyTimedOut(BaseException):
    """Raised while a request body is read, when it has not arrived within the read time; a
    ``BaseException`` for the same reason as :class:`BodyTooLarge` (the middleware answers 408).
    """


@dataclass(frozen=True)
class FieldError:
    pointer: str
    detail: str


class RequestProblem(DualcostError):
    """Raised by the API layer for bad input it finds itself, or translated from the core."""

    def __init__(self, errors: list[FieldError], *, slug: str = "invalid-input") -> None:
        self.errors = errors
        self.slug = slug
        super().__init__("; ".join(f"{e.pointer}: {e.detail}" for e in errors))

    @classmethod
    def at(cls, pointer: str, detail: str, *, slug: str = "invalid-input") -> RequestProblem:
        """A problem with one field error."""
        return cls([FieldError(pointer, detail)], slug=slug)


class ServiceProblem(DualcostError):
    """A refusal about the service's state rather than a field of the request: no such job, a
    job in the wrong state, no room for another, a cluster that cannot be reached."""

    slug = "http-error"
    status = 400
    #: Extension members of the problem (RFC 9457, 3.2), if any.
    extensions: dict[str, Any] | None = None
    #: Seconds to send in a Retry-After header (none when None).
    retry_after: int | None = None

    def __init__(self, detail: str) -> None:
        self.detail = detail
        super().__init__(detail)


class JobNotFound(ServiceProblem):
    slug, status = "not-found", 404


class RunNotFound(ServiceProblem):
    slug, status = "not-found", 404


class JobConflict(ServiceProblem):
    slug, status = "http-error", 409


class JobTableFull(ServiceProblem):
    """No room for another household job: 503 with Retry-After (RFC 9110, 15.6.4 and 10.2.3)."""

    slug, status = "job-table-full", 503

    def __init__(self, detail: str, retry_after: int) -> None:
        super().__init__(detail)
        self.retry_after = retry_after


class NotAcceptable(ServiceProblem):
    """The Accept header admits none of the operation's media types (RFC 9110, 15.5.7);
    ``acceptable`` lists them, in the problem's ``acceptable`` member too."""

    slug, status = "not-acceptable", 406

    def __init__(self, detail: str, acceptable: Sequence[str]) -> None:
        super().__init__(detail)
        self.acceptable = list(acceptable)
        self.extensions = {"acceptable": self.acceptable}


def problem_body(slug: str, detail: str, *, status: int | None = None,
                 errors: list[FieldError] | None = None, instance: str | None = None,
                 extensions: Mapping[str, Any] | None = None) -> dict[str, Any]:
    kind = PROBLEM_TYPES[slug]
    body: dict[str, Any] = {
        "type": f"/problems/{slug}",
        "title": kind.title,
        "status": status or kind.status,
        "detail": detail,
    }
    if instance:
        body["instance"] = instance
    if errors:
        body["errors"] = [{"pointer": e.pointer, "detail": e.detail} for e in errors]
    if extensions:
        body.update(extensions)
    return body


async def send_problem(send: Send, slug: str, detail: str, *, instance: str | None = None,
                       headers: Sequence[tuple[bytes, bytes]] = ()) -> None:
    """Answer a problem straight through ASGI (for middleware that refuses a request before
    it reaches the app); the status is the problem type's."""
    body = problem_body(slug, detail, instance=instance)
    data = json.dumps(body).encode()
    await send({"type": "http.response.start", "status": body["status"],
                "headers": [(b"content-type", PROBLEM_MEDIA_TYPE.encode()),
                            (b"content-length", str(len(data)).encode()), *headers]})
    await send({"type": "http.response.body", "body": data})


def problem_message(slug: str, detail: str) -> tuple[int, bytes]:
    """A whole HTTP/1.1 answer carrying a problem, and its status, for the server's protocol
    to write before any application sees the request; it closes the connection."""
    body = problem_body(slug, detail)
    data = json.dumps(body).encode()
    status = int(body["status"])
    head = (f"HTTP/1.1 {status} {HTTPStatus(status).phrase}\r\n"
            f"content-type: {PROBLEM_MEDIA_TYPE}\r\ncontent-length: {len(data)}\r\n"
            "connection: close\r\n\r\n")
    return status, head.encode("latin-1") + data


def problem_response(slug: str, detail: str, *, status: int | None = None,
                     errors: list[FieldError] | None = None,
                     instance: str | None = None,
                     extensions: Mapping[str, Any] | None = None) -> JSONResponse:
    body = problem_body(slug, detail, status=status, errors=errors, instance=instance,
                        extensions=extensions)
    return JSONResponse(body, status_code=body["status"], media_type=PROBLEM_MEDIA_TYPE)


_NO_BODY = object()


def pointer_of(loc: tuple[Any, ...], body: Any = _NO_BODY, kind: str = "") -> str:
    """Pydantic's error location as a JSON Pointer; query parameters as ``#/query/<name>``.

    Pydantic puts the name of the union member that was tried into the location
    (``/items/3/Item``, ``/items/3/constrained-str``); those are not fields. With the request
    ``body`` given, the location is followed through it and a name that is not there is left
    out, except the last one of a ``missing`` error (``kind``), which names the absent field.
    Without the body, member names of the forms pydantic gives composite types are left out.
    """
    parts = list(loc)
    if parts and parts[0] == "body":
        parts = parts[1:]
        prefix = ""
    elif parts and parts[0] in ("query", "path", "header"):
        prefix = "#/" + str(parts.pop(0))
        body = _NO_BODY
    else:
        prefix = ""
    if body is _NO_BODY:
        kept = [p for p in parts
                if not (isinstance(p, str) and (p.startswith("function-") or "[" in p))]
    else:
        kept, node, last = [], body, len(parts) - 1
        for i, p in enumerate(parts):
            if isinstance(node, dict) and p in node:
                node = node[p]
            elif isinstance(node, list) and type(p) is int and -len(node) <= p < len(node):
                node = node[p]
            elif isinstance(p, str) and not (i == last and kind == "missing"):
                continue  # a union member's name
            else:
                node = _NO_BODY
            kept.append(p)
    return prefix + "".join("/" + str(p).replace("~", "~0").replace("/", "~1") for p in kept)


#: The rule for a number given as text, the same for every numeric field of every request.
NUMBER_NOT_TEXT = ("must be a number, written as a JSON number and not as text (0.6, not "
                   "\"0.6\"): no field of a request takes numbers as text")
NUMBER_NOT_BOOL = "must be a number, not true or false"
_NUMBER_TYPES = frozenset({"float_type", "int_type", "float_parsing", "int_parsing",
                           "int_from_float"})


def rule_of(err: Mapping[str, Any]) -> str:
    """One validation error's rule in plain words."""
    kind = err.get("type", "")
    if kind in _NUMBER_TYPES:
        given = err.get("input")
        if isinstance(given, str):
            return NUMBER_NOT_TEXT
        if isinstance(given, bool):
            return NUMBER_NOT_BOOL
    if kind == "finite_number":
        return "must be a finite number (not NaN or infinity)"
    if kind == "missing":
        return "is required"
    if kind == "extra_forbidden":
        return "is not a field of this request (check the spelling; unknown fields are not ignored)"
    return str(err.get("msg", "is not valid"))


async def _on_validation_error(request: Request, exc: RequestValidationError) -> Response:
    raw = exc.errors()
    if any(e.get("type") == "json_invalid" for e in raw):
        invalid = next(e for e in raw if e.get("type") == "json_invalid")
        message = str(invalid.get("ctx", {}).get("error", "parse error"))
        if "recursion limit" in message and isinstance(exc.body, str):
            # Valid JSON nested deeper than the parser reads: a rule of this service, at a place.
            errors = [FieldError(*await run_in_threadpool(json_text.depth_error, exc.body))]
            return problem_response("invalid-input", _summary(errors), errors=errors,
                                    instance=request.url.path)
        return problem_response("malformed-request", f"The body is not valid JSON: {message}.",
                                instance=request.url.path)
    errors = field_errors(raw, exc.body)
    if request.query_params.get("on_error") == "text":
        # The spreadsheet forms' documented switch: a 200 whose text says what is wrong.
        return PlainTextResponse(error_text(errors))
    return problem_response("invalid-input", _summary(errors), errors=errors,
                            instance=request.url.path)


def field_errors(raw: Iterable[Mapping[str, Any]], body: Any = _NO_BODY, *,
                 prefix: tuple[str, ...] = ()) -> list[FieldError]:
    """Pydantic's validation errors (``ValidationError.errors()``) as field errors pointing into
    ``body``, one per broken rule; ``prefix`` is put before each location (``("body",)`` for a
    model validated on its own, as FastAPI reports the body's errors).

    A value that fits none of the forms a field takes (an item: an id or an object; a vector: a
    list or an object) is reported by pydantic once per form. The value's own form is the one
    whose errors lie inside it, so an error saying the value is not of another form is left out
    where there are errors inside; two or more at the same place become one.
    """
    located = [(pointer_of(prefix + tuple(e.get("loc", ())), body, e.get("type", "")),
                str(e.get("type", "")), rule_of(e)) for e in raw]
    holding = set()  # every place with an error inside it
    for pointer, _, _ in located:
        cut = pointer.rfind("/")
        while cut >= 0 and pointer[:cut] not in holding:
            holding.add(pointer[:cut])
            cut = pointer.rfind("/", 0, cut)
    kept: dict[str, list[str]] = {}
    for pointer, kind, rule in located:
        if kind.endswith("_type") and pointer in holding:
            continue  # another form of the value, whose own errors are inside it
        rules = kept.setdefault(pointer, [])
        if rule not in rules:
            rules.append(rule)
    return [FieldError(pointer, rules[0] + "".join(f" (or: {r})" for r in rules[1:]))
            for pointer, rules in kept.items()]


def error_text(errors: list[FieldError]) -> str:
    """One line for a spreadsheet cell: ``ERROR: <parameter>: <rule>; ...``."""
    return "ERROR: " + "; ".join(f"{e.pointer.removeprefix('#/query/')}: {e.detail}" for e in errors)


async def _on_request_problem(request: Request, exc: RequestProblem) -> JSONResponse:
    return problem_response(exc.slug, _summary(exc.errors), errors=exc.errors,
                            instance=request.url.path)


async def _on_invalid_input(request: Request, exc: InvalidInput) -> JSONResponse:
    # Reached only when a route did not translate a core error to a pointer itself.
    errors = [FieldError("", str(exc))]
    return problem_response("invalid-input", str(exc), errors=errors, instance=request.url.path)


async def _on_service_problem(request: Request, exc: ServiceProblem) -> JSONResponse:
    response = problem_response(exc.slug, exc.detail, status=exc.status,
                                instance=request.url.path, extensions=exc.extensions)
    if exc.retry_after is not None:
        response.headers["retry-after"] = str(exc.retry_after)
    return response


async def _on_engine_unavailable(request: Request, exc: EngineUnavailable) -> JSONResponse:
    return problem_response("http-error", f"The Dask cluster cannot be used: {exc}", status=503,
                            instance=request.url.path)


async def _on_storage_unavailable(request: Request, exc: StorageUnavailable) -> JSONResponse:
    response = problem_response("storage-unavailable", str(exc), instance=request.url.path)
    response.headers["retry-after"] = str(request.app.state.settings.storage_retry_seconds)
    return response


async def _on_numerical_failure(request: Request, exc: NumericalFailure) -> JSONResponse:
    if isinstance(exc, DeadlineExceeded):
        return problem_response("deadline-exceeded", str(exc), instance=request.url.path)
    return problem_response("numerical-failure", str(exc), errors=await _likely_cause(request),
                            instance=request.url.path)


def _extreme_query_number(request: Request) -> tuple[str, str] | None:
    """The query parameter (or its position in a list) holding the number farthest from 1 in
    magnitude, at least 1e100 or 1e-100 away, in the spreadsheet forms' query strings."""
    best: tuple[float, str, str] | None = None
    for name, text in request.query_params.multi_items():
        cells = text.replace(";", ",").split(",")
        for i, cell in enumerate(cells):
            try:
                value = abs(float(cell.strip()))
            except ValueError:
                continue
            if 0.0 < value < float("inf"):
                decades = abs(math.log10(value))
                where = f"#/query/{name}" + (f"/{i}" if len(cells) > 1 else "")
                if decades >= json_text.EXTREME_DECADES and (best is None or decades > best[0]):
                    best = (decades, where, cell.strip())
    return None if best is None else (best[1], best[2])


async def _likely_cause(request: Request) -> list[FieldError]:
    """The input named by a numerical failure: the number of the request farthest from 1 in
    magnitude when one is extreme (beyond 1e100 or 1e-100). A failure without one (a fit that
    does not converge) is told by its detail alone."""
    body = getattr(request.state, "json_body", None)
    if isinstance(body, bytes):
        found = await run_in_threadpool(json_text.extreme_number, body)
    else:
        found = _extreme_query_number(request)
    if found is not None:
        where, literal = found
        return [FieldError(where, f"{literal} is the number of the request farthest from 1 in "
                           "magnitude, and the likely cause: with numbers of ordinary size the "
                           "computation stays within the floating-point range")]
    return []


async def _on_http_error(request: Request, exc: StarletteHTTPException) -> JSONResponse:
    slug = {404: "not-found", 405: "method-not-allowed"}.get(exc.status_code, "http-error")
    return problem_response(slug, str(exc.detail), status=exc.status_code,
                            instance=request.url.path)


async def _on_unexpected(request: Request, exc: Exception) -> JSONResponse:
    log.exception("unhandled error on %s", request.url.path)
    return problem_response("internal-error", "The service failed to answer this request.",
                            instance=request.url.path)


class UnexpectedErrorMiddleware:
    """A bug answers a 500 problem and the connection stays open for the client's next request.

    The framework's outermost error handler answers too, but then raises the error again to the
    server, which closes the connection: a client's next request on it is reset. This layer, just
    inside it, answers and logs the error and ends the request there. An error after the answer
    has started (a stream cut halfway) can only end the connection, as HTTP allows no second
    status; it is left to the server.
    """

    def __init__(self, app: ASGIApp) -> None:
        self.app = app

    async def __call__(self, scope: Scope, receive: Receive, send: Send) -> None:
        if scope["type"] != "http":
            await self.app(scope, receive, send)
            return
        started = False

        async def tracking_send(message: Message) -> None:
            nonlocal started
            if message["type"] == "http.response.start":
                started = True
            await send(message)

        try:
            await self.app(scope, receive, tracking_send)
        except ClientDisconnect:
            raise  # not a bug: the client left; the request context ends it quietly (499)
        except Exception:
            if started:
                raise
            log.exception("unhandled error on %s", scope.get("path"))
            await send_problem(send, "internal-error", "The service failed to answer this "
                               "request.", instance=scope.get("path"))


def _summary(errors: list[FieldError]) -> str:
    if len(errors) == 1:
        e = errors[0]
        return f"{e.pointer or 'The request'}: {e.detail}"
    return f"{len(errors)} fields break a rule; see errors."


def install(app: FastAPI) -> None:
    """Register the problem handlers on ``app``."""
    app.add_exception_handler(RequestValidationError, _on_validation_error)  # type: ignore[arg-type]
    app.add_exception_handler(RequestProblem, _on_request_problem)  # type: ignore[arg-type]
    app.add_exception_handler(InvalidInput, _on_invalid_input)  # type: ignore[arg-type]
    app.add_exception_handler(NumericalFailure, _on_numerical_failure)  # type: ignore[arg-type]
    app.add_exception_handler(ServiceProblem, _on_service_problem)  # type: ignore[arg-type]
    app.add_exception_handler(EngineUnavailable, _on_engine_unavailable)  # type: ignore[arg-type]
    app.add_exception_handler(StorageUnavailable, _on_storage_unavailable)  # type: ignore[arg-type]
    app.add_exception_handler(StarletteHTTPException, _on_http_error)  # type: ignore[arg-type]
    app.add_exception_handler(Exception, _on_unexpected)
    app.add_middleware(UnexpectedErrorMiddleware)
