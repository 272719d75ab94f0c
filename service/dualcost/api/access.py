"""Optional access control: API keys and per-key rate limits.

Off by default (the local demo needs none); the service says so in a start-up line. When keys are
configured (``DUALCOST_API_KEYS`` as a JSON list, or ``DUALCOST_API_KEYS_FILE``, one key per
line), every ``/v1/`` request must carry one in ``X-API-Key`` or ``Authorization: Bearer``. Keys
are compared in constant time (``hmac.compare_digest`` against every configured key, so the time
taken does not tell which key came close) and never logged: logs and metrics see only a label,
the first 8 hex digits of the key's SHA-256. A verified key's whole SHA-256 is its owner id
(``scope["state"]["key_id"]``), which household jobs are kept under.

Rate limits (``DUALCOST_RATE_LIMIT_PER_MINUTE``) are a token bucket per key and per worker
process: with N workers behind one port a key can get up to N times the rate. Put a shared
limiter in front (the load balancer) where that matters.
"""

from __future__ import annotations

import hashlib
import hmac
import math
import threading
import time
from collections.abc import Sequence

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


class _Bucket:
    def __init__(self, per_minute: int) -> None:
        self.capacity = float(per_minute)
        self.tokens = float(per_minute)
        self.rate = per_minute / 60.0
        self.stamp = time.monotonic()

    def take(self) -> float:
        """0 if a request may pass now, else the seconds to wait."""
        now = time.monotonic()
        self.tokens = min(self.capacity, self.tokens + (now - self.stamp) * self.rate)
        self.stamp = now
        if self.tokens >= 1.0:
            self.tokens -= 1.0
            return 0.0
        return (1.0 - self.tokens) / self.rate


class AccessControlMiddleware:
    def __init__(self, app: ASGIApp, keys: Sequence[str], rate_limit_per_minute: int | None) -> None:
        self.app = app
        self.keys = [k.encode() for k in keys]
        self.rate = rate_limit_per_minute
        self.buckets: dict[str, _Bucket] = {}
        self.lock = threading.Lock()

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
        if self.keys and not (given and self._match(given)):
            await send_problem(send, "unauthorized", "A valid API key is needed in the X-API-Key "
                               "header.", instance=path,
                               headers=[(b"www-authenticate", b'ApiKey header="X-API-Key"')])
            return
        label = key_label(given.decode("latin-1")) if given else "anonymous"
        scope.setdefault("state", {})["client_label"] = label
        if self.keys:  # verified: the owner of the household jobs this request makes
            scope["state"]["key_id"] = key_id(given.decode("latin-1"))
        if self.rate:
            with self.lock:
                bucket = self.buckets.setdefault(label, _Bucket(self.rate))
                wait = bucket.take()
            if wait > 0:
                await send_problem(send, "too-many-requests", f"This key's limit is {self.rate} "
                                   "requests a minute.", instance=path,
                                   headers=[(b"retry-after", str(math.ceil(wait)).encode())])
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
