"""A small Python client for a running dualcost service, for pipelines that prefer code.

::

    from dualcost.client import Client
    with Client("http://127.0.0.1:8000", api_key="...") as dc:
        answer = dc.compare({"items": [...], "base": {...}, "current": {...}, "model": {...}})
        print(answer["konus"]["base"])

Every method returns the answer decoded by its content type:

- JSON (``application/json``): plain Python values (dict, list, str, int, float, bool, None);
- CSV (``text/csv``, asked for with ``format="csv"``, and the household jobs' results): a
  :class:`Table`, the header and the rows, with numbers parsed (see :func:`parse_cell`) and the
  text as sent in ``Table.text``;
- other text (``text/plain``, ``text/html``...): ``str``; any other type: ``bytes``;
- 204 No Content, or any answer with an empty body: ``None``.

Every answer of an operation says where it came from: a JSON answer in its ``provenance``
member, a CSV answer in its headers, which the :class:`Table` keeps as ``Table.provenance``
(a :class:`Provenance`: the service's version, the digest of the canonical input, and the
indexation caution). :func:`provenance_of` reads either; :func:`input_digest` recomputes a
JSON body's digest here, to compare with the service's::

    answer = dc.compare(body)
    assert provenance_of(answer).input_digest == input_digest(body)

Saved runs: :meth:`Client.save` sends any operation with ``save=true`` and gives back a
:class:`Saved`, the answer and the id the service kept it under; :meth:`Client.get_run`,
:meth:`Client.list_runs` (one page), :meth:`Client.iter_runs` (every page) and
:meth:`Client.rerun` (a reproducibility check) read them::

    saved = dc.save("POST", "/v1/comparisons", json=body)
    assert dc.get_run(saved.run_id)["answer"] == saved.answer
    assert dc.rerun(saved.run_id)["identical"]

``api_key`` is sent in the ``X-API-Key`` header of every request. Options of an operation are
keyword-only arguments; options sent as query parameters take Python values (a list is sent
comma-separated, a mapping as JSON text, ``True``/``False`` as ``true``/``false``).

The client's exceptions hang under the package's one base class::

    DualcostError                  (dualcost.core.errors)
     └── ClientError               the client did not get a usable answer
          ├── ServiceUnreachable   no answer at all: connection refused, unknown host, timed out,
          │                        connection cut (also a ConnectionError)
          ├── ProblemError         the service refused the request: an RFC 9457 problem, or any
          │                        other 4xx or 5xx answer (e.g. from a proxy)
          └── UnreadableAnswer     a 2xx answer whose body does not parse as its type says
"""

from __future__ import annotations

import csv
import io
import json
import os
import re
from collections.abc import Iterator, Mapping, Sequence
from dataclasses import dataclass, field
from datetime import datetime, timezone
from pathlib import Path
from typing import IO, Any, Literal, TypeAlias, overload

import httpx

from .canonical import digest_of
from .core.errors import DualcostError

__all__ = ["Cell", "Client", "ClientError", "CsvBody", "ProblemError", "Provenance", "Saved",
           "ServiceUnreachable", "Table", "UnreadableAnswer", "input_digest", "parse_cell",
           "provenance_of"]

#: One CSV cell of an answer: a number, a truth value, None for an empty cell, else text.
Cell: TypeAlias = str | int | float | bool | None
#: A CSV upload: its text, its bytes, a path to the file, or a binary file open for reading.
CsvBody: TypeAlias = str | bytes | os.PathLike[str] | IO[bytes]
Format = Literal["json", "csv"]


# -- exceptions -------------------------------------------------------------------------------


class ClientError(DualcostError):
    """The client did not get a usable answer from the service."""


class ServiceUnreachable(ClientError, ConnectionError):
    """No answer from the service: ``url`` is where it was looked for, ``reason`` why it failed."""

    def __init__(self, url: str, reason: str) -> None:
        self.url = url
        self.reason = reason
        super().__init__(f"cannot reach the dualcost service at {url}: {reason}")


class ProblemError(ClientError):
    """The service refused the request; ``problem`` holds the answer's fields.

    For an RFC 9457 problem those are ``type``, ``title``, ``status``, ``detail`` and, for bad
    input, ``errors``: a list of ``{"pointer", "detail"}``. Any other error answer (a proxy's
    page, say) becomes a problem whose ``title`` is the HTTP reason and ``detail`` the body.
    ``request_id`` is the answer's ``X-Request-ID``, for the service's logs.
    """

    def __init__(self, status: int, problem: Mapping[str, Any], *,
                 request_id: str | None = None) -> None:
        self.status = status
        self.problem = dict(problem)
        self.errors: list[dict[str, str]] = list(self.problem.get("errors") or [])
        self.request_id = request_id
        detail = self.detail
        if len(detail) > 300:  # the message only; ``detail`` keeps the whole text
            detail = detail[:300] + "..."
        super().__init__(f"{status} {self.title}: {detail}".rstrip(": "))

    @property
    def type(self) -> str:
        return str(self.problem.get("type", "about:blank"))

    @property
    def title(self) -> str:
        return str(self.problem.get("title", ""))

    @property
    def detail(self) -> str:
        return str(self.problem.get("detail", ""))


class UnreadableAnswer(ClientError):
    """A successful answer whose body does not parse as its content type says."""


# -- provenance -------------------------------------------------------------------------------


@dataclass(frozen=True)
class Provenance:
    """Where an answer came from: the ``version`` of the service that computed it and
    ``input_digest``, ``sha256:`` and the SHA-256 of its canonical input (see
    :func:`input_digest`); for a CSV or text answer also the indexation ``caution`` of its
    ``Dualcost-Caution`` header (or of the trailer rows)."""

    version: str
    input_digest: str
    caution: str | None = None
    service: str = "dualcost"

    @classmethod
    def from_headers(cls, headers: Mapping[str, str]) -> Provenance | None:
        version, digest = headers.get("dualcost-version"), headers.get("dualcost-input-digest")
        if version is None or digest is None:
            return None
        return cls(version, digest, headers.get("dualcost-caution"))


@dataclass(frozen=True)
class Saved:
    """An answer the service kept as a run (``save=true``): ``run_id``, from its
    ``Dualcost-Run`` header, for :meth:`Client.get_run` and :meth:`Client.rerun`, and the
    ``answer``, decoded as every answer is."""

    run_id: str
    answer: Any


def _when(value: str | datetime | None) -> str | None:
    """A time for the runs' listing: text as given; a datetime in UTC (a naive one is taken
    to be UTC, as the service keeps its times)."""
    if value is None or isinstance(value, str):
        return value
    if value.tzinfo is not None:
        value = value.astimezone(timezone.utc).replace(tzinfo=None)
    return value.isoformat() + "Z"


def provenance_of(answer: Any) -> Provenance | None:
    """The provenance of a decoded answer: a JSON answer's ``provenance`` member, a
    :class:`Table`'s ``provenance``; None when the answer carries none."""
    if isinstance(answer, Table):
        return answer.provenance
    given = answer.get("provenance") if isinstance(answer, Mapping) else None
    if isinstance(given, Mapping) and "version" in given and "input_digest" in given:
        return Provenance(str(given["version"]), str(given["input_digest"]),
                          service=str(given.get("service", "dualcost")))
    return None


def input_digest(body: Any) -> str:
    """The digest the service states for a JSON ``body`` (``sha256:`` and the SHA-256 of the
    body in the JSON Canonicalization Scheme, RFC 8785), computed here. It equals the
    service's for a body the service accepts whose values have the types its schema gives them
    (numbers as numbers, not as text)."""
    return digest_of(body)


# -- CSV answers ------------------------------------------------------------------------------

# A number as the service writes one (Python's shortest round-trip form). Leading zeros are not
# numbers here, so that an id such as "007" stays text.
_NUMBER = re.compile(r"-?(?:0|[1-9][0-9]*)(\.[0-9]+)?([eE][+-]?[0-9]+)?")


def parse_cell(text: str) -> Cell:
    """A CSV cell as a value: ``""`` is None, ``true``/``false`` a bool, a number written as the
    service writes numbers an int (no fraction or exponent) or a float; anything else is text."""
    if text == "":
        return None
    if text in ("true", "false"):
        return text == "true"
    match = _NUMBER.fullmatch(text)
    if match is None:
        return text
    return float(text) if match.group(1) or match.group(2) else int(text)


#: The first cells of the rows that close a CSV table asked for with ``provenance="trailer"``.
_TRAILER = ("#dualcost-version", "#dualcost-input-digest", "#dualcost-caution")


@dataclass(frozen=True)
class Table:
    """A CSV answer: ``header`` (column names), ``rows`` (cells parsed by :func:`parse_cell`),
    ``text``, the CSV as the service sent it, and ``provenance``, from the answer's headers
    (or from its trailer rows, which are then not among ``rows``)."""

    header: tuple[str, ...]
    rows: tuple[tuple[Cell, ...], ...]
    text: str = field(repr=False, default="")
    provenance: Provenance | None = None

    @classmethod
    def from_csv(cls, text: str, provenance: Provenance | None = None) -> Table:
        """The table of a CSV text; a row whose length is not the header's raises ValueError."""
        records = list(csv.reader(io.StringIO(text)))
        if not records:
            return cls((), (), text, provenance)
        header = tuple(records[0])
        for n, record in enumerate(records[1:], start=2):
            if len(record) != len(header):
                raise ValueError(f"record {n} has {len(record)} cells, the header {len(header)}")
        body = records[1:]
        if len(body) >= 3 and tuple(r[0] for r in body[-3:]) == _TRAILER:
            version, digest, caution = (r[1] for r in body[-3:])
            provenance = provenance or Provenance(version, digest, caution)
            body = body[:-3]
        return cls(header, tuple(tuple(parse_cell(c) for c in r) for r in body), text,
                   provenance)

    def __len__(self) -> int:
        return len(self.rows)

    def column(self, name: str) -> list[Cell]:
        """The cells of one column, top to bottom; KeyError names the columns there are."""
        if name not in self.header:
            raise KeyError(f"no column {name!r}; the columns are {', '.join(self.header)}")
        k = self.header.index(name)
        return [row[k] for row in self.rows]

    def records(self) -> list[dict[str, Cell]]:
        """One dict per row, keyed by the header."""
        return [dict(zip(self.header, row, strict=True)) for row in self.rows]


# -- decoding answers -------------------------------------------------------------------------


def _media_type(response: httpx.Response) -> str:
    header: str = response.headers.get("content-type", "")
    return header.split(";", 1)[0].strip().lower()


def _problem_of(response: httpx.Response) -> ProblemError:
    try:
        problem = response.json()
    except ValueError:
        problem = None
    if not isinstance(problem, dict):
        problem = {"title": response.reason_phrase, "status": response.status_code,
                   "detail": response.text.strip()}
    return ProblemError(response.status_code, problem,
                        request_id=response.headers.get("x-request-id"))


def _decode(response: httpx.Response) -> Any:
    """The answer's body by its content type (see the module's docstring); an error status
    raises :class:`ProblemError`."""
    if response.status_code >= 400:
        raise _problem_of(response)
    if response.status_code == 204 or not response.content:
        return None
    media = _media_type(response)
    try:
        if media == "application/json" or media.endswith("+json"):
            return response.json()
        if media == "text/csv":
            return Table.from_csv(response.text, Provenance.from_headers(response.headers))
    except (ValueError, csv.Error) as exc:
        raise UnreadableAnswer(f"the {media} answer of {response.request.method} "
                               f"{response.request.url} cannot be read: {exc}") from None
    return response.text if media.startswith("text/") else response.content


def _query(options: Mapping[str, Any]) -> dict[str, str]:
    """Query parameters from Python values; None leaves an option out."""
    out = {}
    for name, value in options.items():
        if value is None:
            continue
        if isinstance(value, bool):
            out[name] = "true" if value else "false"
        elif isinstance(value, Mapping):
            out[name] = json.dumps(value)
        elif isinstance(value, (list, tuple)):
            out[name] = ",".join(str(v) for v in value)
        else:
            out[name] = str(value)
    return out


def _csv_bytes(body: CsvBody) -> bytes:
    if isinstance(body, str):
        return body.encode("utf-8")
    if isinstance(body, bytes):
        return body
    if isinstance(body, os.PathLike):
        return Path(body).read_bytes()
    return body.read()


def _reason(exc: httpx.TransportError, timeout: float) -> str:
    if isinstance(exc, httpx.TimeoutException):
        return f"no answer within {timeout:g} s ({type(exc).__name__})"
    text = str(exc).strip()
    return text or type(exc).__name__


# -- the client -------------------------------------------------------------------------------


class Client:
    """Calls the dualcost HTTP API; answers are decoded as the module's docstring says."""

    def __init__(
        self,
        base_url: str = "http://127.0.0.1:8000",
        *,
        api_key: str | None = None,
        timeout: float = 60.0,
        headers: Mapping[str, str] | None = None,
        transport: httpx.BaseTransport | None = None,
    ) -> None:
        url = httpx.URL(base_url.rstrip("/"))
        if url.scheme not in ("http", "https") or not url.host:
            raise ValueError(f"base_url must be an http:// or https:// address, got {base_url!r}")
        sent = dict(headers or {})
        if api_key is not None:
            sent["X-API-Key"] = api_key
        self.base_url = str(url)
        self.timeout = timeout
        self._http = httpx.Client(base_url=url, timeout=timeout, headers=sent,
                                  transport=transport)

    def __enter__(self) -> Client:
        return self

    def __exit__(self, *exc: object) -> None:
        self.close()

    def close(self) -> None:
        self._http.close()

    def request(self, method: str, path: str, **kwargs: Any) -> Any:
        """Any operation, by method and path (``kwargs`` as httpx takes them), decoded by
        :func:`_decode`; an unreachable service raises :class:`ServiceUnreachable`."""
        return _decode(self._send(method, path, **kwargs))

    def _send(self, method: str, path: str, **kwargs: Any) -> httpx.Response:
        try:
            return self._http.request(method, path, **kwargs)
        except httpx.TransportError as exc:
            raise ServiceUnreachable(self.base_url, _reason(exc, self.timeout)) from exc

    def _post_json(self, path: str, body: Mapping[str, Any], fmt: Format = "json") -> Any:
        params = {"format": "csv"} if fmt == "csv" else None
        return self.request("POST", path, json=body, params=params)

    def _post_csv(self, path: str, body: CsvBody, options: Mapping[str, Any]) -> Any:
        return self.request("POST", path, content=_csv_bytes(body), params=_query(options),
                            headers={"content-type": "text/csv"})

    # -- the service and the catalogue ---------------------------------------------------------

    def health(self) -> dict[str, Any]:
        """GET /health: status and version."""
        return self.request("GET", "/health")

    def families(self) -> list[dict[str, Any]]:
        """GET /v1/preference-families: families, parameters with defaults, sources."""
        return self.request("GET", "/v1/preference-families")

    def formulas(self) -> list[dict[str, Any]]:
        """GET /v1/index-formulas: the index formulas, what each needs, sources."""
        return self.request("GET", "/v1/index-formulas")

    # -- comparisons and series ----------------------------------------------------------------

    def compare(self, request: Mapping[str, Any]) -> dict[str, Any]:
        """POST /v1/comparisons: the Konüs index beside the formula indices."""
        return self._post_json("/v1/comparisons", request)

    @overload
    def index_series(self, request: Mapping[str, Any], *,
                     format: Literal["json"] = ...) -> dict[str, Any]: ...
    @overload
    def index_series(self, request: Mapping[str, Any], *, format: Literal["csv"]) -> Table: ...

    def index_series(self, request: Mapping[str, Any], *,
                     format: Format = "json") -> dict[str, Any] | Table:
        """POST /v1/index-series: the series over a panel; ``format="csv"``: one row a period."""
        return self._post_json("/v1/index-series", request, format)

    @overload
    def index_series_csv(self, panel: CsvBody, *, format: Literal["json"] = ...,
                         base_period: str | None = ..., reference_period: str | None = ...,
                         reference_value: int | None = ..., formulas: Sequence[str] | None = ...,
                         model: Mapping[str, Any] | None = ..., **options: Any) -> dict[str, Any]:
        ...
    @overload
    def index_series_csv(self, panel: CsvBody, *, format: Literal["csv"],
                         base_period: str | None = ..., reference_period: str | None = ...,
                         reference_value: int | None = ..., formulas: Sequence[str] | None = ...,
                         model: Mapping[str, Any] | None = ..., **options: Any) -> Table: ...

    def index_series_csv(self, panel: CsvBody, *, format: Format = "json",
                         base_period: str | None = None, reference_period: str | None = None,
                         reference_value: int | None = None, formulas: Sequence[str] | None = None,
                         model: Mapping[str, Any] | None = None,
                         **options: Any) -> dict[str, Any] | Table:
        """POST /v1/index-series/csv: the panel in long form (``period,item,price,quantity``);
        the other options of the operation (``frequency``, ``geks_window``...) as keywords."""
        query = dict(options, base_period=base_period, reference_period=reference_period,
                     reference_value=reference_value, formulas=formulas, model=model,
                     format=format)
        return self._post_csv("/v1/index-series/csv", panel, query)

    @overload
    def index_tree(self, request: Mapping[str, Any], *,
                   format: Literal["json"] = ...) -> dict[str, Any]: ...
    @overload
    def index_tree(self, request: Mapping[str, Any], *, format: Literal["csv"]) -> Table: ...

    def index_tree(self, request: Mapping[str, Any], *,
                   format: Format = "json") -> dict[str, Any] | Table:
        """POST /v1/index-tree: the index of a classification tree at every node beside the
        Konüs index; ``format="csv"``: one row per period and node."""
        return self._post_json("/v1/index-tree", request, format)

    def index_tree_csv(self, data: CsvBody, *, tree: Any, links: Sequence[Mapping[str, Any]],
                       format: Format = "json", sigma_by_level: Sequence[float] | None = None,
                       **options: Any) -> dict[str, Any] | Table:
        """POST /v1/index-tree/csv: ``data`` the quotes as a long CSV table
        (``quote,aggregate,period,price``), the ``tree`` and ``links`` as the JSON form's
        fields; the other options (``upper_formula``, ``sigma_fit``...) as keywords."""
        query = dict(options, tree=json.dumps(tree), links=json.dumps(list(links)),
                     sigma_by_level=sigma_by_level, format=format)
        return self._post_csv("/v1/index-tree/csv", data, query)

    def uprating_from_index_tree(self, request: Mapping[str, Any], *,
                                 format: Format = "json") -> dict[str, Any] | Table:
        """POST /v1/uprating/index-tree: uprating clauses on a node of an index tree, under its
        published index and the Konüs index (model-based: for indexation, defer to official
        statistics and the applicable law or agreement)."""
        return self._post_json("/v1/uprating/index-tree", request, format)

    def audit(self, request: Mapping[str, Any]) -> dict[str, Any]:
        """POST /v1/audits: published values against a recomputation from their panel."""
        return self._post_json("/v1/audits", request)

    # -- answers that do not hang on one model -------------------------------------------------

    @overload
    def revealed_preference(self, request: Mapping[str, Any], *,
                            format: Literal["json"] = ...) -> dict[str, Any]: ...
    @overload
    def revealed_preference(self, request: Mapping[str, Any], *,
                            format: Literal["csv"]) -> Table: ...

    def revealed_preference(self, request: Mapping[str, Any], *,
                            format: Format = "json") -> dict[str, Any] | Table:
        """POST /v1/revealed-preference: GARP, WARP, SARP, Afriat's efficiency index and
        Varian's bounds on the Konüs index; ``format="csv"``: one row a period."""
        return self._post_json("/v1/revealed-preference", request, format)

    @overload
    def sensitivity(self, request: Mapping[str, Any], *,
                    format: Literal["json"] = ...) -> dict[str, Any]: ...
    @overload
    def sensitivity(self, request: Mapping[str, Any], *, format: Literal["csv"]) -> Table: ...

    def sensitivity(self, request: Mapping[str, Any], *,
                    format: Format = "json") -> dict[str, Any] | Table:
        """POST /v1/sensitivity: the Konüs index and bias across models and along a grid;
        ``format="csv"``: one row a model or grid value."""
        return self._post_json("/v1/sensitivity", request, format)

    @overload
    def fitted_sensitivity(self, request: Mapping[str, Any], *,
                           format: Literal["json"] = ...) -> dict[str, Any]: ...
    @overload
    def fitted_sensitivity(self, request: Mapping[str, Any], *,
                           format: Literal["csv"]) -> Table: ...

    def fitted_sensitivity(self, request: Mapping[str, Any], *,
                           format: Format = "json") -> dict[str, Any] | Table:
        """POST /v1/fitted-sensitivity: several families fitted to the same data, the band
        across them beside each fit's intervals; ``format="csv"``: one row a family and
        measure, and the band's."""
        return self._post_json("/v1/fitted-sensitivity", request, format)

    # -- households ----------------------------------------------------------------------------

    @overload
    def household_indices(self, request: Mapping[str, Any], *,
                          format: Literal["json"] = ...) -> dict[str, Any]: ...
    @overload
    def household_indices(self, request: Mapping[str, Any], *,
                          format: Literal["csv"]) -> Table: ...

    def household_indices(self, request: Mapping[str, Any], *,
                          format: Format = "json") -> dict[str, Any] | Table:
        """POST /v1/household-indices: indices for many households, with summaries."""
        return self._post_json("/v1/household-indices", request,
                               format)

    def create_household_job(self, spec: Mapping[str, Any]) -> dict[str, Any]:
        """POST /v1/household-jobs: a job for a large CSV of households (the job, with its id)."""
        return self._post_json("/v1/household-jobs", spec)

    def upload_households(self, job_id: str, households: CsvBody, **options: Any) -> Table:
        """POST /v1/household-jobs/{id}/households: one CSV row a household; the results, one
        row per household and period (the job's summaries: :meth:`household_job`). The
        upload's ``separator`` and ``decimal`` as keywords, when not to be detected."""
        return self._post_csv(f"/v1/household-jobs/{job_id}/households",
                              households, dict(options))

    def household_job(self, job_id: str) -> dict[str, Any]:
        """GET /v1/household-jobs/{id}: progress; at the end the summaries and skipped rows."""
        return self.request("GET", f"/v1/household-jobs/{job_id}")

    def delete_household_job(self, job_id: str) -> None:
        """DELETE /v1/household-jobs/{id}: forget a job that is not running."""
        self.request("DELETE", f"/v1/household-jobs/{job_id}")

    # -- fits ----------------------------------------------------------------------------------

    @overload
    def fit(self, request: Mapping[str, Any], *,
            format: Literal["json"] = ...) -> dict[str, Any]: ...
    @overload
    def fit(self, request: Mapping[str, Any], *, format: Literal["csv"]) -> Table: ...

    def fit(self, request: Mapping[str, Any], *,
            format: Format = "json") -> dict[str, Any] | Table:
        """POST /v1/fits: a preference model fitted to budget data; CSV: the parameter table."""
        return self._post_json("/v1/fits", request, format)

    @overload
    def fit_csv(self, data: CsvBody, *, family: str, format: Literal["json"] = ...,
                **options: Any) -> dict[str, Any]: ...
    @overload
    def fit_csv(self, data: CsvBody, *, family: str, format: Literal["csv"],
                **options: Any) -> Table: ...

    def fit_csv(self, data: CsvBody, *, family: str, format: Format = "json",
                **options: Any) -> dict[str, Any] | Table:
        """POST /v1/fits/csv: budget data in long form; the operation's options as keywords
        (``restrictions="symmetry"``, ``tree={...}``...)."""
        query = dict(options, family=family, format=format)
        return self._post_csv("/v1/fits/csv", data, query)

    def fit_and_compare(self, request: Mapping[str, Any]) -> dict[str, Any]:
        """POST /v1/fitted-comparisons: fit, compare under the fit, with intervals."""
        return self._post_json("/v1/fitted-comparisons", request)

    # -- saved runs ----------------------------------------------------------------------------

    def save(self, method: str, path: str, **kwargs: Any) -> Saved:
        """Any operation under /v1/ (as :meth:`request` takes it) with ``save=true``: the
        answer, sent by the service only once its run is stored, and the run's id. A service
        whose database cannot take the run answers 503 (a :class:`ProblemError`)."""
        params = httpx.QueryParams(kwargs.pop("params", None)).set("save", "true")
        response = self._send(method, path, params=params, **kwargs)
        answer = _decode(response)
        run_id = response.headers.get("dualcost-run")
        if run_id is None:
            raise UnreadableAnswer(f"{method} {path} with save=true answered without a "
                                   "Dualcost-Run header: the service did not keep the run")
        return Saved(run_id, answer)

    def get_run(self, run_id: str) -> dict[str, Any]:
        """GET /v1/runs/{id}: the saved run (input, answer, version, created, key)."""
        return self.request("GET", f"/v1/runs/{run_id}")

    def list_runs(self, *, operation: str | None = None, since: str | datetime | None = None,
                  until: str | datetime | None = None, limit: int | None = None,
                  before: int | None = None) -> dict[str, Any]:
        """GET /v1/runs: one page of the caller's runs, newest first (``runs``, and ``next``
        for the older ones); times as ISO 8601 text or datetimes (naive ones in UTC)."""
        query = {"operation": operation, "since": _when(since), "until": _when(until),
                 "limit": limit, "before": before}
        return self.request("GET", "/v1/runs", params=_query(
            {k: v for k, v in query.items() if v is not None}))

    def iter_runs(self, *, operation: str | None = None, since: str | datetime | None = None,
                  until: str | datetime | None = None) -> Iterator[dict[str, Any]]:
        """Every run :meth:`list_runs` would list, newest first, page after page."""
        page = self.list_runs(operation=operation, since=since, until=until)
        while True:
            yield from page["runs"]
            if not page.get("next"):
                return
            page = self.request("GET", page["next"])

    @overload
    def rerun(self, run_id: str, *, format: Literal["json"] = ...) -> dict[str, Any]: ...
    @overload
    def rerun(self, run_id: str, *, format: Literal["csv"]) -> Table: ...

    def rerun(self, run_id: str, *, format: Format = "json") -> dict[str, Any] | Table:
        """POST /v1/runs/{id}/rerun: the saved request answered by the running version and
        compared figure by figure (``identical``, ``differences``); CSV: the differences."""
        params = {"format": "csv"} if format == "csv" else None
        return self.request("POST", f"/v1/runs/{run_id}/rerun", params=params)

    def household_job_results(self, job_id: str) -> Table:
        """GET /v1/household-jobs/{id}/results: a finished job's CSV answer, from any worker
        (a job not done yet is a 409 :class:`ProblemError`)."""
        return self.request("GET", f"/v1/household-jobs/{job_id}/results")
