"""How routes read their bodies and where their computations run.

**Bodies.** FastAPI reads a JSON body with ``json.loads`` and then validates the Python objects.
For the large bodies this service takes (hundreds of items, long series) the standard library's
parser is the costliest step before any computation: about four times slower than pydantic-core's
``from_json``, which builds the same Python objects. Every router here uses :class:`JsonRoute`:
when an operation's body is one model, the bytes are validated straight into it (0.13 ms for a
300-item comparison, against 0.45 ms for ``json.loads`` and validation); a body that breaks a rule,
and any other body, is parsed with ``from_json`` and left to FastAPI's validation, which names
every broken rule as before. A body above 64 kB is parsed and validated in a compute thread,
not on the event loop (tens of milliseconds for a 5 MB panel).

The rules a body meets do not change. ``from_json`` accepts what ``json.loads`` accepts,
including ``NaN`` and ``Infinity`` (which validation then refuses with a problem naming the
field) and repeated keys (the last one counts, as with ``json.loads``). Text that is not JSON
still becomes the 400 ``malformed-request`` problem, with the parser's message. Before parsing,
:func:`check_json_body` refuses a body that is not sent as JSON (415) and any number literal
beyond the floating-point range or below the smallest normal float, wherever it is (422 with a
pointer to each); a body nesting deeper than the parser reads is refused with a pointer too
(:mod:`dualcost.api.inputs.json_text`, :mod:`dualcost.api.problems`).

**Where a computation runs.** FastAPI runs a plain (``def``) endpoint in a thread, so the event
loop stays free while it computes. For a cheap request the handoff costs more than the
computation: in a loaded worker, moving a 300-item comparison (27 kB) to a thread and back
costs about a fifth of its throughput, because the computation holds the interpreter lock
either way. An endpoint decorated with :func:`inline_when_cheap` therefore runs on the event
loop when the work its request asks for, estimated from its model and sizes by
:mod:`dualcost.api.workload`, is at most ``inline_compute_max_work`` (about microseconds) and its
body is at most ``inline_compute_max_bytes``; otherwise, and always for the families that solve
numerically (utility formulas, demand systems integrated along a path), in the compute threads,
where the interpreter switches to the event loop every few milliseconds and the probes keep
answering. Only operations whose work can be small use it (comparisons, index series, audits,
the spreadsheet forms); model fits and household batches always use the threads.
"""

from __future__ import annotations

import contextlib
import contextvars
import functools
import json
import re
from collections.abc import Callable, Coroutine, Mapping
from typing import Any, ParamSpec, TypeVar

from fastapi import Request, Response, params
from fastapi.routing import APIRoute
from pydantic import BaseModel, ValidationError
from pydantic_core import from_json
from starlette.concurrency import run_in_threadpool
from starlette.types import Receive, Scope

from . import runs
from .inputs import json_text
from .problems import FieldError, RequestProblem

P = ParamSpec("P")
T = TypeVar("T")

#: The work (in :mod:`~dualcost.api.workload` units) up to which the request being served may
#: compute on the event loop; negative when its body is too large for that.
_INLINE_BUDGET: contextvars.ContextVar[float] = contextvars.ContextVar("inline_budget",
                                                                       default=-1.0)

_WHERE = re.compile(r"line (\d+) column (\d+)")


def _decode_error(message: str, body: bytes) -> json.JSONDecodeError:
    """The standard library's error for the same failure, so the handlers see one kind."""
    text = body.decode("utf-8", errors="replace")
    found = _WHERE.search(message)
    position = 0
    if found:
        line, column = int(found.group(1)), int(found.group(2))
        starts = [0] + [m.end() for m in re.finditer("\n", text)]
        position = min(starts[min(line, len(starts)) - 1] + max(column - 1, 0), len(text))
    return json.JSONDecodeError(message, text, position)


class JsonRequest(Request):
    """A request whose ``json()`` uses pydantic-core's parser.

    With the route's body model given, ``json()`` first validates the bytes straight into the
    model (one pass, no intermediate Python objects) and returns the model object, which
    FastAPI's own validation then accepts as it is (pydantic does not revalidate an instance of
    the model). A body that fails is parsed plainly instead, so that FastAPI's validation
    reports every broken rule exactly as before.
    """

    def __init__(self, scope: Scope, receive: Receive, model: type[BaseModel] | None = None) -> None:
        super().__init__(scope, receive)
        self._body_model = model

    async def json(self) -> Any:
        if not hasattr(self, "_json"):
            body = await self.body()
            if len(body) <= _PARSE_INLINE_BYTES:
                self._json = _parsed(body, self._body_model)
            else:
                self._json = await run_in_threadpool(_parsed, body, self._body_model)
        return self._json


#: Bodies up to this size are parsed and validated on the event loop (a 300-item comparison,
#: 27 kB, in 0.13 ms); larger ones, which take milliseconds to tens of milliseconds (a 5 MB
#: series panel), in a compute thread, so that the probes keep answering meanwhile.
_PARSE_INLINE_BYTES = 65_536


def _parsed(body: bytes, model: type[BaseModel] | None) -> Any:
    """The body validated straight into ``model`` when it meets the model's rules, else parsed
    plainly for FastAPI's validation to name every broken rule (see :class:`JsonRequest`)."""
    if model is not None:
        try:
            return model.model_validate_json(body)
        except ValidationError:
            pass
    try:
        return from_json(body, cache_strings="keys")
    except ValueError as exc:
        raise _decode_error(str(exc), body) from exc


def _body_model(route: APIRoute) -> type[BaseModel] | None:
    """The model of the route's body when the body is that one model (not several embedded
    parameters, not a form)."""
    field = route.body_field
    if field is None or getattr(route, "_embed_body_fields", True):
        return None
    annotation = field.field_info.annotation
    if isinstance(annotation, type) and issubclass(annotation, BaseModel) and (
            annotation.model_config.get("revalidate_instances", "never") == "never"):
        return annotation
    return None


def _inline_budget(request: Request) -> float:
    """The service's ``inline_compute_max_work`` for a body of at most its
    ``inline_compute_max_bytes`` (none for GET and HEAD), else -1: a body of unknown length,
    sent in chunks, counts as large."""
    settings = request.app.state.settings
    if request.method not in ("GET", "HEAD"):
        length = request.headers.get("content-length")
        if not (length is not None and length.isdigit()
                and int(length) <= settings.inline_compute_max_bytes):
            return -1.0
    return float(settings.inline_compute_max_work)


def _is_json(media_type: str) -> bool:
    """``application/json`` or ``application/<anything>+json``, with any parameters."""
    main, _, sub = media_type.split(";", 1)[0].strip().lower().partition("/")
    return main == "application" and (sub == "json" or sub.endswith("+json"))


#: Bodies up to this size are checked for out-of-range numbers on the event loop (0.1 ms at
#: most, a few milliseconds where a suspect spelling makes a scan needed); larger ones in a
#: compute thread.
_SCAN_INLINE_BYTES = 65_536


def _number_errors(body: bytes) -> list[tuple[str, str]]:
    return json_text.number_errors(body) if json_text.may_hold(body) else []


async def check_json_body(request: Request) -> None:
    """The rules a JSON body meets before it is parsed: a JSON media type (415 otherwise, and
    for a body without a Content-Type, which FastAPI would not read as JSON), and no number
    literal beyond the floating-point range or below the smallest normal float (422 naming
    each; see :mod:`dualcost.api.inputs.json_text`)."""
    body = await request.body()
    media = request.headers.get("content-type")
    if body and (media is None or not _is_json(media)):
        sent = "without a Content-Type" if media is None else f"as {media!r}"
        raise RequestProblem.at("#/header/content-type", "must be application/json: this "
                                f"operation takes a JSON body, and the body was sent {sent}",
                                slug="unsupported-media-type")
    request.state.json_body = body  # for a problem that names an input (problems.py)
    if len(body) <= _SCAN_INLINE_BYTES:
        errors = _number_errors(body)
    else:
        errors = await run_in_threadpool(_number_errors, body)
    if errors:
        raise RequestProblem([FieldError(*error) for error in errors])


class JsonRoute(APIRoute):
    """A route whose handler receives a :class:`JsonRequest` whose body met
    :func:`check_json_body`, and knows how much work its request may do on the event loop (for
    :func:`inline_when_cheap`). An operation's route also takes ``save=true``, and then keeps
    its run (:mod:`dualcost.api.runs`), whatever the operation."""

    def get_route_handler(self) -> Callable[[Request], Coroutine[Any, Any, Response]]:
        handler = super().get_route_handler()
        model = _body_model(self)
        takes_json = self.body_field is not None and not isinstance(self.body_field.field_info,
                                                                    params.Form)
        saving = runs.offers_save(self)

        async def parse_with_pydantic_core(request: Request) -> Response:
            save = saving and runs.asked_to_save(request)
            token = _INLINE_BUDGET.set(_inline_budget(request))
            coming = runs.coming(request) if save else contextlib.nullcontext()
            try:
                with coming:
                    json_request = JsonRequest(request.scope, request.receive, model)
                    if takes_json:
                        await check_json_body(json_request)
                    response = await handler(json_request)
                if save:
                    response = await runs.keep(json_request, self, response)
                return response
            finally:
                _INLINE_BUDGET.reset(token)

        return parse_with_pydantic_core


def inline_when_cheap(estimate: Callable[[Mapping[str, Any]], float],
                      ) -> Callable[[Callable[P, T]], Callable[P, Coroutine[Any, Any, T]]]:
    """Run a plain endpoint on the event loop when ``estimate`` of its arguments (by name, as
    FastAPI passes them) is within the request's inline budget, else in a compute thread (see
    the module's notes). The endpoint keeps its signature for FastAPI."""

    def decorate(endpoint: Callable[P, T]) -> Callable[P, Coroutine[Any, Any, T]]:
        @functools.wraps(endpoint)
        async def dispatch(*args: P.args, **kwargs: P.kwargs) -> T:
            budget = _INLINE_BUDGET.get()
            if budget >= 0 and estimate(kwargs) <= budget:
                return endpoint(*args, **kwargs)
            return await run_in_threadpool(endpoint, *args, **kwargs)

        return dispatch

    return decorate
