"""Optional access control: API keys and rate limits.

Off by default (the local demo needs none); the service says so in a start-up line. When keys are
configured (``DUALCOST_API_KEYS`` as a JSON list, or ``DUALCOST_API_KEYS_FILE``, one key per
line), every ``/v1/`` request must carry one in ``X-API-Key`` or ``Authorization: Bearer``. Keys
are compared in constant time (``hmac.compare_digest`` against every configured key, so the time
taken does not tell which key came close) and never logged: logs and metrics see only a label,
the first 8 hex digits of the key's SHA-256. A verified key's whole SHA-256 is its owner id
(``scope["state"]["key_id"]``), which household jobs are kept under.

Rate limits (``DUALCOST_RATE_LIMIT_PER_MINUTE``) are token buckets (:class:`RateLimiter`) per
worker process, keyed by what the service can trust:

- a **verified** key has its own bucket;
- every other request (no key, a key that is not configured, or any key while access control
  is off) takes from the bucket of its **client address** (for IPv6, of its /64 network, which
  one host is commonly given whole). Making up a new key for each request therefore gains
  nothing, and a request refused 401 still costs its address a token, which also bounds the
  guessing of keys.

The table of buckets is bounded (``DUALCOST_RATE_LIMIT_MAX_CLIENTS``) and forgets what carries
no information: a bucket unused for a minute has filled up again and is the same as a new one,
so it is dropped; when the table is still full, the bucket unused the longest goes (its client
then starts again with a full bucket: the bound trades that for memory that cannot grow).

With N workers behind one port a client can get up to N times the rate; behind a proxy every
client has the proxy's address (uvicorn takes the client's from ``X-Forwarded-For`` only when
the proxy is in its ``FORWARDED_ALLOW_IPS``, by default 127.0.0.1 and ::1). Put a shared
limiter in front (the load balancer) where that matters.
"""

from __future__ import annotations

import hashlib
import hmac
import ipaddress
import math
import threading
import time
from collections import OrderedDict
from collections.abc import Callable, Sequence

from starlette.types import ASGIApp, Receive, Scope, Send

from .problems import send_problem

#: Paths that stay open without a key: health probes, metrics, the page and the API description.
OPEN_PREFIXES = ("/health", "/live", "/ready", "/metrics", "/problems/", "/static/", "/docs",
                 "/redoc", "/openapi.json")


def key_id(key: str) -> str:
    """A key's owner id: its whole SHA-256 (hex)."""
    return hashlib.sha256(key.encode()).hexdigest()


def key_label(key: str) -> str:
    """A key's label in logs: the first 8 hex digits of its SHA-256."""
    return key_id(key)[:8]


def client_address(scope: Scope) -> str:
    """The client's address as the rate limit sees it: IPv4 as it is, IPv6 by its /64."""
    client = scope.get("client")
    host = str(client[0]) if client else "unknown"
    try:
        address = ipaddress.ip_address(host)
    except ValueError:
        return host
    if isinstance(address, ipaddress.IPv6Address):
        if address.ipv4_mapped is not None:
            return str(address.ipv4_mapped)
        return str(ipaddress.IPv6Network((address, 64), strict=False))
    return str(address)


class _Bucket:
    __slots__ = ("tokens", "stamp")

    def __init__(self, tokens: float, stamp: float) -> None:
        self.tokens = tokens
        self.stamp = stamp


class RateLimiter:
    """Token buckets of ``per_minute`` requests, one per client name, at most ``max_clients``
    of them (see the module's notes). ``clock`` is for tests."""

    def __init__(self, per_minute: int, max_clients: int,
                 clock: Callable[[], float] = time.monotonic) -> None:
        self.per_minute = per_minute
        self.capacity = float(per_minute)
        self.rate = per_minute / 60.0
        #: Seconds after which an unused bucket is full again, the same as a new one.
        self.refill_seconds = self.capacity / self.rate
        self.max_clients = max_clients
        self.clock = clock
        self.buckets: OrderedDict[str, _Bucket] = OrderedDict()  # least recently used first
        self.lock = threading.Lock()

    def __len__(self) -> int:
        return len(self.buckets)

    def take(self, client: str) -> float:
        """0 if ``client`` may make a request now (its token is taken), else the seconds to
        wait."""
        now = self.clock()
        with self.lock:
            self._forget(now)
            bucket = self.buckets.get(client)
            if bucket is None:
                while len(self.buckets) >= self.max_clients:
                    self.buckets.popitem(last=False)
                bucket = self.buckets[client] = _Bucket(self.capacity, now)
            else:
                self.buckets.move_to_end(client)
                bucket.tokens = min(self.capacity, bucket.tokens + (now - bucket.stamp) * self.rate)
                bucket.stamp = now
            if bucket.tokens >= 1.0:
                bucket.tokens -= 1.0
                return 0.0
            return (1.0 - bucket.tokens) / self.rate

    def _forget(self, now: float) -> None:
        """Drop the buckets that have filled up again (the least recently used come first)."""
        while self.buckets:
            oldest = next(iter(self.buckets.values()))
            if now - oldest.stamp < self.refill_seconds:
                return
            self.buckets.popitem(last=False)


class AccessControlMiddleware:
    def __init__(self, app: ASGIApp, keys: Sequence[str], limiter: RateLimiter | None) -> None:
        self.app = app
        self.keys = [k.encode() for k in keys]
        self.limiter = limiter

    def _match(self, given: bytes) -> bool:
        found = False
        for key in self.keys:  # every key is compared: the time does not depend on which matched
            found |= hmac.compare_digest(given, key)
        return found

    async def __call__(self, scope: Scope, receive: Receive, send: Send) -> None:
        path = scope.get("path", "")
        if scope["type"] != "http" or not path.startswith("/v1/") or scope.get("method") == "OPTIONS":
            await self.app(scope, receive, send)
            return
        headers = dict(scope.get("headers") or [])
        given = headers.get(b"x-api-key", b"")
        auth = headers.get(b"authorization", b"")
        if not given and auth[:7].lower() == b"bearer ":
            given = auth[7:].strip()
        verified = bool(self.keys) and bool(given) and self._match(given)
        owner = key_id(given.decode("latin-1")) if verified else ""
        state = scope.setdefault("state", {})
        state["client_label"] = owner[:8] if verified else "anonymous"
        if verified:
            state["key_id"] = owner
        if self.limiter is not None:
            n = self.limiter.per_minute
            wait = self.limiter.take(f"key:{owner}" if verified
                                     else f"address:{client_address(scope)}")
            if wait > 0:
                detail = (f"This key's limit is {n} requests a minute." if verified else
                          f"Requests without a valid API key are limited to {n} a minute from "
                          "each client address.")
                await send_problem(send, "too-many-requests", detail, instance=path,
                                   headers=[(b"retry-after", str(math.ceil(wait)).encode())])
                return
        if self.keys and not verified:
            await send_problem(send, "unauthorized", "A valid API key is needed in the X-API-Key "
                               "header.", instance=path,
                               headers=[(b"www-authenticate", b'ApiKey header="X-API-Key"')])
            return
        await self.app(scope, receive, send)


def load_keys(inline: Sequence[str], file: str | None) -> list[str]:
    """Keys from the setting and from a secret file (one per line; '#' starts a comment)."""
    keys = [k.strip() for k in inline if k.strip()]
    if file:
        with open(file, encoding="utf-8") as fh:
            for line in fh:
                line = line.split("#", 1)[0].strip()
                if line:
                    keys.append(line)
    return keys
