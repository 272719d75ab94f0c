"""The request-body limits: its size (413) and the time it may take to arrive (408).

**Size.** A body over ``max_body_bytes`` is answered 413 before it is read whole: the declared
``Content-Length`` is checked first; a body sent in chunks is counted as it arrives and cut off at
the limit.

**Time.** A body must have arrived within ``read_timeout_seconds`` of the request reaching the
application, plus one second for every ``read_min_bytes_per_second`` bytes received so far (the
rule of a minimum rate, as web servers' request-read timeouts have it: a large upload on a slow
link keeps going, a stalled or trickling one does not hold its connection, its memory and its
household job for ever). Past that the request is answered 408 and the connection closed. Only
the reading of the body is timed: once it has arrived, or once the answer has started, the
application's later ``receive`` calls (waiting for a disconnect) pass through untimed. The time
the head may take is bounded by the server's protocol (:mod:`dualcost.api.transport`).
"""

from __future__ import annotations

import asyncio

from starlette.types import ASGIApp, Message, Receive, Scope, Send

from .problems import BodyTimedOut, BodyTooLarge, send_problem

#: Sent with refusals made while a body may still be on its way: the rest of the request is not
#: read, so the connection cannot carry another request.
CLOSE = [(b"connection", b"close")]


async def _within(receive: Receive, seconds: float) -> Message:
    """``receive()``, or BodyTimedOut once ``seconds`` have passed: one timer handle that
    cancels the waiting task when it fires. A cancel scope per receive (anyio.move_on_after)
    cost about 9 µs a call here against about 1 µs; the servers that run the service (uvicorn)
    and its tests run on asyncio."""
    task = asyncio.current_task()
    assert task is not None
    fired = False

    def expire() -> None:
        nonlocal fired
        fired = True
        task.cancel()

    handle = asyncio.get_running_loop().call_later(seconds, expire)
    try:
        return await receive()
    except asyncio.CancelledError:
        uncancel = getattr(task, "uncancel", None)  # Python 3.11 counts cancellations
        if fired and (uncancel is None or uncancel() == 0):  # ours, and no one else's
            raise BodyTimedOut from None
        raise
    finally:
        handle.cancel()


class BodyLimitMiddleware:
    def __init__(self, app: ASGIApp, max_body_bytes: int, read_timeout_seconds: float,
                 read_min_bytes_per_second: int) -> None:
        self.app = app
        self.limit = max_body_bytes
        self.timeout = read_timeout_seconds
        self.rate = read_min_bytes_per_second

    async def __call__(self, scope: Scope, receive: Receive, send: Send) -> None:
        if scope["type"] != "http":
            await self.app(scope, receive, send)
            return
        declared = dict(scope.get("headers") or []).get(b"content-length")
        if declared is not None and declared.isdigit() and int(declared) > self.limit:
            await self._refuse(scope, send)
            return
        seen = 0
        started = False
        arrived = False
        loop = asyncio.get_running_loop()
        start = loop.time()

        async def limited_receive() -> Message:
            nonlocal seen, arrived
            if arrived or started:
                return await receive()
            remaining = start + self.timeout + seen / self.rate - loop.time()
            if remaining <= 0:
                raise BodyTimedOut
            message = await _within(receive, remaining)
            if message["type"] == "http.request":
                seen += len(message.get("body", b""))
                if seen > self.limit:
                    raise BodyTooLarge
                arrived = not message.get("more_body", False)
            else:  # http.disconnect: nothing more will come
                arrived = True
            return message

        async def tracking_send(message: Message) -> None:
            nonlocal started
            if message["type"] == "http.response.start":
                started = True
            await send(message)

        try:
            await self.app(scope, limited_receive, tracking_send)
        except BodyTooLarge:
            if not started:
                await self._refuse(scope, send)
        except BodyTimedOut:
            if not started:
                await send_problem(
                    send, "request-timeout", f"The request body did not arrive in time: "
                    f"{seen} bytes came within {self.timeout:g} s plus one second per "
                    f"{self.rate} bytes received (settings DUALCOST_READ_TIMEOUT_SECONDS, "
                    "DUALCOST_READ_MIN_BYTES_PER_SECOND).", instance=scope.get("path"),
                    headers=CLOSE)

    async def _refuse(self, scope: Scope, send: Send) -> None:
        await send_problem(send, "payload-too-large", f"The request body is larger than the "
                           f"limit of {self.limit} bytes (setting DUALCOST_MAX_BODY_BYTES).",
                           instance=scope.get("path"))


class HeaderLimitMiddleware:
    """The head's limits for any server: more than ``max_header_count`` header fields, or a
    request line and header fields of more than ``max_header_bytes``, are answered 431.

    The server has parsed the whole head into memory before the application sees it: this
    refuses the request, but bounds no memory. ``dualcost serve`` bounds the head as it arrives
    (:mod:`dualcost.api.transport`), so under it this check is a second line.
    """

    def __init__(self, app: ASGIApp, max_header_bytes: int, max_header_count: int) -> None:
        self.app = app
        self.max_bytes = max_header_bytes
        self.max_count = max_header_count

    async def __call__(self, scope: Scope, receive: Receive, send: Send) -> None:
        if scope["type"] != "http":
            await self.app(scope, receive, send)
            return
        headers = scope.get("headers") or ()
        if len(headers) > self.max_count:
            await self._refuse(scope, send, f"The request has {len(headers)} header fields; the "
                               f"limit is {self.max_count} (setting DUALCOST_MAX_HEADER_COUNT).")
            return
        # As on the wire: "METHOD target HTTP/1.1\r\n" and "name: value\r\n" per field.
        size = (len(scope.get("method", "")) + len(scope.get("raw_path") or b"")
                + len(scope.get("query_string") or b"") + 12
                + sum(len(name) + len(value) + 4 for name, value in headers))
        if size > self.max_bytes:
            await self._refuse(scope, send, f"The request line and header fields are about "
                               f"{size} bytes; the limit is {self.max_bytes} (setting "
                               "DUALCOST_MAX_HEADER_BYTES).")
            return
        await self.app(scope, receive, send)

    @staticmethod
    async def _refuse(scope: Scope, send: Send, detail: str) -> None:
        await send_problem(send, "request-header-fields-too-large", detail,
                           instance=scope.get("path"), headers=CLOSE)
