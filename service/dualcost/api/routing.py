"""Request bodies parsed with pydantic-core's JSON parser instead of the standard library's.

FastAPI reads a JSON body with ``json.loads`` and then validates the Python objects. For the
large bodies this service takes (hundreds of items, long series) the standard library's parser
is the costliest step before any computation: about four times slower than pydantic-core's
``from_json``, which builds the same Python objects. Every router here uses :class:`JsonRoute`,
so every operation parses its body this way.

The rules a body meets do not change. ``from_json`` accepts what ``json.loads`` accepts,
including ``NaN`` and ``Infinity`` (which validation then refuses with a problem naming the
field), big integers, and repeated keys (the last one counts, as with ``json.loads``). Text that
is not JSON still becomes the 400 ``malformed-request`` problem, with the parser's message.
"""

from __future__ import annotations

import json
import re
from collections.abc import Callable, Coroutine
from typing import Any

from fastapi import Request, Response
from fastapi.routing import APIRoute
from pydantic_core import from_json

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
    """A request whose ``json()`` uses pydantic-core's parser."""

    async def json(self) -> Any:
        if not hasattr(self, "_json"):
            body = await self.body()
            try:
                self._json = from_json(body, cache_strings="keys")
            except ValueError as exc:
                raise _decode_error(str(exc), body) from exc
        return self._json


class JsonRoute(APIRoute):
    """A route whose handler receives a :class:`JsonRequest`."""

    def get_route_handler(self) -> Callable[[Request], Coroutine[Any, Any, Response]]:
        handler = super().get_route_handler()

        async def parse_with_pydantic_core(request: Request) -> Response:
            return await handler(JsonRequest(request.scope, request.receive))

        return parse_with_pydantic_core
