"""A small Python client for a running dualcost service, for pipelines that prefer code.

::

    from dualcost.client import Client
    with Client("http://127.0.0.1:8000") as dc:
        answer = dc.compare({"items": [...], "base": {...}, "current": {...}, "model": {...}})
        print(answer["konus"]["base"])

Problem responses (RFC 9457) raise :class:`ProblemError`, which carries the problem's fields.
"""

from __future__ import annotations

from collections.abc import Mapping
from typing import Any

import httpx


class ProblemError(Exception):
    """The service answered with a problem (RFC 9457); ``problem`` holds its JSON fields."""

    def __init__(self, status: int, problem: Mapping[str, Any]) -> None:
        self.status = status
        self.problem = dict(problem)
        self.errors: list[dict[str, str]] = list(self.problem.get("errors", []))
        super().__init__(f"{status} {self.problem.get('title', '')}: {self.problem.get('detail', '')}")


class Client:
    """Calls the dualcost HTTP API; every method returns the answer's JSON as plain Python."""

    def __init__(
        self,
        base_url: str = "http://127.0.0.1:8000",
        *,
        timeout: float = 60.0,
        headers: Mapping[str, str] | None = None,
        transport: httpx.BaseTransport | None = None,
    ) -> None:
        self._http = httpx.Client(base_url=base_url.rstrip("/"), timeout=timeout,
                                  headers=dict(headers or {}), transport=transport)

    def __enter__(self) -> Client:
        return self

    def __exit__(self, *exc: object) -> None:
        self.close()

    def close(self) -> None:
        self._http.close()

    def _call(self, method: str, path: str, **kwargs: Any) -> Any:
        response = self._http.request(method, path, **kwargs)
        if response.status_code >= 400:
            try:
                problem = response.json()
            except ValueError:
                problem = {"title": response.reason_phrase, "detail": response.text}
            raise ProblemError(response.status_code, problem)
        return response.json()

    def health(self) -> dict[str, Any]:
        return self._call("GET", "/health")

    def compare(self, request: Mapping[str, Any]) -> dict[str, Any]:
        """POST /v1/comparisons: the Konüs index beside the formula indices."""
        return self._call("POST", "/v1/comparisons", json=request)

    def families(self) -> list[dict[str, Any]]:
        return self._call("GET", "/v1/preference-families")

    def formulas(self) -> list[dict[str, Any]]:
        return self._call("GET", "/v1/index-formulas")

    def request(self, method: str, path: str, **kwargs: Any) -> Any:
        """Any other operation, by method and path; problems raise :class:`ProblemError`."""
        return self._call(method, path, **kwargs)
