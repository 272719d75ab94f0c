"""The request-size limit: a body over ``max_body_bytes`` is answered 413 before it is read whole.

The declared ``Content-Length`` is checked first; a body sent in chunks is counted as it
arrives and cut off at the limit.
"""

from __future__ import annotations

from starlette.types import ASGIApp, Message, Receive, Scope, Send

from .problems import BodyTooLarge, send_problem


class BodySizeLimitMiddleware:
    def __init__(self, app: ASGIApp, max_body_bytes: int) -> None:
        self.app = app
        self.limit = max_body_bytes

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

        async def counting_receive() -> Message:
            nonlocal seen
            message = await receive()
            if message["type"] == "http.request":
                seen += len(message.get("body", b""))
                if seen > self.limit:
                    raise BodyTooLarge
            return message

        async def tracking_send(message: Message) -> None:
            nonlocal started
            if message["type"] == "http.response.start":
                started = True
            await send(message)

        try:
            await self.app(scope, counting_receive, tracking_send)
        except BodyTooLarge:
            if not started:
                await self._refuse(scope, send)

    async def _refuse(self, scope: Scope, send: Send) -> None:
        await send_problem(send, "payload-too-large", f"The request body is larger than the "
                           f"limit of {self.limit} bytes (setting DUALCOST_MAX_BODY_BYTES).",
                           instance=scope.get("path"))
