"""The server's HTTP protocol with bounds on the request head: its size, its number of header
fields and the time it may take to arrive.

An ASGI application sees a request only after the server has parsed its whole head into
memory: ``scope["headers"]`` is a list the server has built. A limit applied there (as
:class:`dualcost.api.limits.HeaderLimitMiddleware` does, for any server) refuses a request
with a 1 MiB header, but only after the server has taken it all in: uvicorn's httptools
protocol keeps every header in a list, and httptools itself gathers a header's value piece by
piece until its line ends, so a header of 100 MiB took that much memory (more, while the pieces
were joined) and held the event loop while it was parsed.

:class:`BoundedHttpToolsProtocol` is uvicorn's httptools protocol with the bounds applied as the
bytes arrive, before anything is kept:

- **size**: the bytes received since a request's head began are counted while the head is
  incomplete; past ``max_header_bytes`` (request line and header fields together) the
  request is refused with 431. The count is taken per read from the socket, so a read that
  holds the end of the previous request (pipelining) is counted whole: the bound may refuse
  such a head a little early, never late.
- **count**: the header fields are counted as the parser completes each; the one after
  ``max_header_count`` refuses the request with 431, and no further field is kept.
- **time**: a connection's first request head must arrive within ``read_timeout_seconds`` of
  the connection being made, and every later one within that time of its first byte; else
  408 (or, on a connection that has sent nothing, a quiet close). The time of the body is
  the application's to bound (:mod:`dualcost.api.limits`).

A refusal is a problem answer (RFC 9457, :func:`dualcost.api.problems.problem_message`) written
straight to the socket with ``Connection: close``. The rest of what the client sends is then
read and dropped for at most :data:`LINGER_SECONDS` before the connection is closed (a socket
closed with unread data resets the connection, and the client could lose the answer). These
refusals never reach the application: they are counted in the metrics under the operation
``unmatched`` and logged, without a request id.

``dualcost serve`` runs uvicorn with this protocol (the class reads the limits from the
``DUALCOST_*`` environment, once per worker process). Run under another server, or with
``--http h11``, only the application's limits apply: after buffering (uvicorn's h11 protocol
has its own bound, ``h11_max_incomplete_event_size``, 16 KiB by default, and answers 400).
"""

from __future__ import annotations

import asyncio
import functools
import logging
from dataclasses import dataclass
from typing import Any, ClassVar

from uvicorn.protocols.http.httptools_impl import HttpToolsProtocol

from ..config import Settings
from .observability import REQUESTS
from .problems import problem_message

#: Seconds a refused connection is still read (and what arrives dropped) before it is closed.
LINGER_SECONDS = 2.0

log = logging.getLogger("dualcost.requests")


@dataclass(frozen=True)
class HeadLimits:
    max_bytes: int
    max_count: int
    timeout: float

    @classmethod
    def of(cls, settings: Settings) -> HeadLimits:
        return cls(settings.max_header_bytes, settings.max_header_count,
                   settings.read_timeout_seconds)


@functools.cache
def limits_from_environment() -> HeadLimits:
    """The limits of the ``DUALCOST_*`` environment, read once per process (a worker process
    makes its protocol objects from uvicorn's configuration, which names this class)."""
    return HeadLimits.of(Settings())


class BoundedHttpToolsProtocol(HttpToolsProtocol):
    """uvicorn's httptools protocol, refusing a request head that is too large, has too many
    header fields or arrives too slowly, before it is kept (see the module's notes)."""

    #: Limits given by :func:`protocol_for`; None: from the environment.
    limits: ClassVar[HeadLimits | None] = None

    def __init__(self, *args: Any, **kwargs: Any) -> None:
        super().__init__(*args, **kwargs)
        self.head_limits = type(self).limits or limits_from_environment()
        self.in_head = False
        self.head_began_here = False
        self.head_bytes = 0
        self.header_count = 0
        self.refused = False
        self.head_timer: asyncio.TimerHandle | None = None
        self.linger_timer: asyncio.TimerHandle | None = None

    # -- the connection ---------------------------------------------------------------------

    def connection_made(self, transport: asyncio.Transport) -> None:  # type: ignore[override]
        super().connection_made(transport)
        self._arm_head_timer()

    def connection_lost(self, exc: Exception | None) -> None:
        for timer in (self.head_timer, self.linger_timer):
            if timer is not None:
                timer.cancel()
        super().connection_lost(exc)

    def data_received(self, data: bytes) -> None:
        if self.refused:
            return  # lingering: what the client still sends is dropped
        self.head_began_here = False
        super().data_received(data)
        if self.refused or not self.in_head:
            return
        self.head_bytes = len(data) if self.head_began_here else self.head_bytes + len(data)
        if self.head_bytes > self.head_limits.max_bytes:
            self._refuse("request-header-fields-too-large", "The request line and header "
                         f"fields are larger than the limit of {self.head_limits.max_bytes} "
                         "bytes (setting DUALCOST_MAX_HEADER_BYTES).")

    # -- the parser's callbacks ---------------------------------------------------------------

    def on_message_begin(self) -> None:
        if self.refused:
            return
        self.in_head = True
        self.head_began_here = True
        self.header_count = 0
        if self.head_timer is None:
            self._arm_head_timer()
        super().on_message_begin()

    def on_url(self, url: bytes) -> None:
        if not self.refused:
            super().on_url(url)

    def on_header(self, name: bytes, value: bytes) -> None:
        if self.refused:
            return
        self.header_count += 1
        if self.header_count > self.head_limits.max_count:
            self._refuse("request-header-fields-too-large", "The request has more header "
                         f"fields than the limit of {self.head_limits.max_count} (setting "
                         "DUALCOST_MAX_HEADER_COUNT).")
            return
        super().on_header(name, value)

    def on_headers_complete(self) -> None:
        self.in_head = False
        self._cancel_head_timer()
        if not self.refused:
            super().on_headers_complete()

    def on_body(self, body: bytes) -> None:
        if not self.refused:
            super().on_body(body)

    def on_message_complete(self) -> None:
        if not self.refused:
            super().on_message_complete()

    # -- refusals -----------------------------------------------------------------------------

    def _arm_head_timer(self) -> None:
        self._cancel_head_timer()
        self.head_timer = self.loop.call_later(self.head_limits.timeout, self._head_timed_out)

    def _cancel_head_timer(self) -> None:
        if self.head_timer is not None:
            self.head_timer.cancel()
            self.head_timer = None

    def _head_timed_out(self) -> None:
        self.head_timer = None
        if self.refused or self.transport.is_closing():
            return
        if not self.in_head:  # nothing sent since the connection was made: close quietly
            self.transport.close()
            return
        self._refuse("request-timeout", "The request's header fields did not arrive within "
                     f"{self.head_limits.timeout:g} s (setting DUALCOST_READ_TIMEOUT_SECONDS).")

    def _refuse(self, slug: str, detail: str) -> None:
        self.refused = True
        self._cancel_head_timer()
        if self.cycle is not None and not self.cycle.response_complete:
            # An earlier request on this connection is still being answered: no room for a
            # second answer in the middle of its bytes.
            self.transport.close()
            return
        status, message = problem_message(slug, detail)
        REQUESTS.labels("unmatched", str(status)).inc()
        log.info("request refused before it reached the application", extra={"fields": {
            "status": status, "problem": slug, "head_bytes": self.head_bytes,
            "header_fields": self.header_count}})
        self.flow.resume_reading()
        self.transport.write(message)
        if self.transport.can_write_eof():
            self.transport.write_eof()
            self.linger_timer = self.loop.call_later(LINGER_SECONDS, self.transport.close)
        else:
            self.transport.close()


def protocol_for(settings: Settings) -> type[BoundedHttpToolsProtocol]:
    """The protocol class with the limits of ``settings`` (for a server started in this
    process; ``dualcost serve`` names :class:`BoundedHttpToolsProtocol`, which reads them from
    the environment in each worker)."""
    return type("BoundedHttpToolsProtocol", (BoundedHttpToolsProtocol,),
                {"limits": HeadLimits.of(settings)})
