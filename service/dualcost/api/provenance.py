"""Where an answer came from: the service's version and a digest of the canonical input.

Every answer of an operation says which version of the service computed it and from which input
(``provenance`` in a JSON body; ``Dualcost-Version`` and ``Dualcost-Input-Digest`` headers on every
answer). The digest is ``sha256:`` and the SHA-256, in lowercase hexadecimal, of the UTF-8 bytes
of the **canonical input**, which is one JSON value written by the JSON Canonicalization Scheme
(RFC 8785): object members sorted by their names (as UTF-16 code units), no whitespace, strings
escaped as ECMAScript's ``JSON.stringify`` does, and every number as ECMAScript writes a double
(``12`` for 12.0, ``0.1``, ``1e-7``, ``1e+21``: the shortest text that reads back to the same
number). The canonical input is:

- **a JSON body** (comparisons, series, audits, fits, fitted comparisons, household batches, the
  creation of a household job): the body as the service validated it, with the fields the
  caller gave and no others (defaults the service fills in are not added). For a body that the
  service accepts this is the body as sent, canonicalised: two bodies that differ only in the
  order of their members, in whitespace or in how a number is spelt (``2.40``, ``2.4``,
  ``24e-1``) have the same digest; any changed value changes it, and so does a field given
  explicitly with its default value. A pipeline recomputes it from the body it sent with any
  RFC 8785 implementation and SHA-256 (:func:`canonical_json`, :func:`digest_of`).
- **a CSV or Parquet upload** (``/v1/index-series/csv``, ``/v1/fits/csv``, ``/v1/tables``): the
  object
  ``{"csv_sha256": <SHA-256 of the body's bytes, hex>, "query": {<parameter>: <text>}}`` with
  the operation's query parameters as sent (percent-decoded text; a repeated one as a list),
  leaving out ``format`` and ``provenance``. The bytes are hashed as sent, before any parsing,
  so that ``sha256sum`` of the uploaded file gives ``csv_sha256``.
- **a household job**: before its households arrive, the job's JSON body as above; once they
  are uploaded, ``{"job": <that body>, "households_csv_sha256": <SHA-256 of the upload, hex>}``.
  The results stream and the job's status carry this digest.
- **a spreadsheet form** (GET ``/v1/sheet/...``): the JSON body of the operation its query is
  read into (as ``POST /v1/comparisons`` or ``POST /v1/index-series`` take it), so the digest
  does not depend on the decimal mark or on how a number is written in the URL; the same
  comparison sent as that JSON body to ``POST /v1/comparisons`` has the same digest.
- **the demo**: its comparison request (the ``request`` of its answer).

How an answer is presented is not part of its input: ``format``, ``provenance``, the ``Accept``
header and the spreadsheet forms' ``digits``, ``decimal``, ``measure`` and ``on_error`` leave the
digest alone, so the JSON and the CSV answer of one request carry the same digest.

The version is the installed distribution's (``importlib.metadata.version("dualcost")``), or,
when the package runs from a source tree that was not installed, the ``version`` of its
``pyproject.toml``. Answers carry no timestamp: the same input to the same version gives the
same answer, byte for byte.
"""

from __future__ import annotations

import hashlib
import importlib.metadata
import re
import unicodedata
from collections.abc import Iterable, Mapping
from dataclasses import dataclass, field
from functools import cache
from pathlib import Path
from typing import Annotated, Any

from fastapi import Depends, Request
from pydantic import BaseModel

from ..canonical import canonical_json, digest_of
from .problems import RequestProblem

SERVICE = "dualcost"
VERSION_HEADER = "Dualcost-Version"
DIGEST_HEADER = "Dualcost-Input-Digest"
CAUTION_HEADER = "Dualcost-Caution"
#: Query parameters that say how to present an answer, not what to compute.
PRESENTATION = frozenset({"format", "provenance"})


# -- the version ------------------------------------------------------------------------------


@cache
def service_version() -> str:
    """The installed distribution's version; from a source tree, its pyproject.toml's."""
    try:
        return importlib.metadata.version(SERVICE)
    except importlib.metadata.PackageNotFoundError:
        return _pyproject_version(Path(__file__).resolve().parents[3] / "pyproject.toml")


def _pyproject_version(path: Path) -> str:
    """``version`` in the ``[project]`` table of ``path``; the package's own if unreadable."""
    try:
        text = path.read_text(encoding="utf-8")
    except OSError:
        text = ""
    table = re.search(r"^\[project\]\s*$(.*?)(?=^\[|\Z)", text, re.M | re.S)
    found = table and re.search(r'^version\s*=\s*"([^"]+)"', table.group(1), re.M)
    if found:
        return found.group(1)
    from .. import __version__

    return __version__


__all__ = ["Provenance", "canonical_json", "digest_of", "of_body", "of_job", "of_upload",
           "service_version"]


def given(model: BaseModel) -> Any:
    """A validated request as JSON values, with the fields the caller gave and no others."""
    return model.model_dump(mode="json", exclude_unset=True, by_alias=True)


def query_of(pairs: Iterable[tuple[str, str]], names: Iterable[str] | None = None
             ) -> dict[str, str | list[str]]:
    """Query parameters as sent (``names``: the operation's own, if known), less the ones that
    only say how to present the answer; a repeated parameter as a list."""
    wanted = None if names is None else set(names)
    out: dict[str, str | list[str]] = {}
    for name, text in pairs:
        if name in PRESENTATION or (wanted is not None and name not in wanted):
            continue
        if name in out:
            before = out[name]
            out[name] = [*before, text] if isinstance(before, list) else [before, text]
        else:
            out[name] = text
    return out


async def upload_sha256(request: Request) -> str:
    """The SHA-256 (hex) of a request's body as sent: a dependency of the CSV uploads, beside
    the one that reads the body as text (Starlette keeps the bytes, so they are read once)."""
    return hashlib.sha256(await request.body()).hexdigest()


UploadSha256 = Annotated[str, Depends(upload_sha256)]


# -- what an answer carries -------------------------------------------------------------------


@dataclass(frozen=True)
class Provenance:
    """The version that computed an answer and the digest of its canonical input."""

    input_digest: str
    version: str = ""
    #: The canonical input itself (RFC 8785 bytes), where it is known: what a saved run keeps.
    input: bytes | None = field(default=None, compare=False, repr=False)

    def __post_init__(self) -> None:
        if not self.version:
            object.__setattr__(self, "version", service_version())

    def json(self) -> dict[str, str]:
        """The ``provenance`` member of a JSON answer."""
        return {"service": SERVICE, "version": self.version, "input_digest": self.input_digest}

    def headers(self) -> dict[str, str]:
        return {VERSION_HEADER: self.version, DIGEST_HEADER: self.input_digest}


def of_body(model: BaseModel) -> Provenance:
    """A JSON body's (or a spreadsheet form's body's) provenance."""
    return _of(given(model))


def _of(value: Any) -> Provenance:
    """The provenance of a canonical input given as JSON values."""
    try:
        # The text is canonical_json's (digest_of is the SHA-256 of the same bytes), kept because a
        # saved run stores it. Every value here is of JSON's own types (model_dump(mode="json"),
        # query text, hex digests), so the quickest road may be taken (canonical.py).
        text = canonical_json(value, json_values=True)
    except (ValueError, OverflowError) as exc:  # only what validation let through: model extras
        raise RequestProblem.at("", f"the request has no canonical form: {exc}") from None
    return Provenance("sha256:" + hashlib.sha256(text).hexdigest(), input=text)


def of_upload(csv_sha256: str, query: Mapping[str, Any]) -> Provenance:
    """A CSV upload's: the hash of its bytes and its query parameters (:func:`query_of`)."""
    return _of({"csv_sha256": csv_sha256, "query": dict(query)})


def of_job(spec: BaseModel, households_sha256: str | None) -> Provenance:
    """A household job's: its body, and once uploaded the hash of its households' CSV."""
    if households_sha256 is None:
        return of_body(spec)
    return _of({"job": given(spec), "households_csv_sha256": households_sha256})


def attach(response: Any, provenance: Provenance) -> None:
    """Remember on an answer the provenance it was written with (for a saved run)."""
    response._dualcost_provenance = provenance


def attached(response: Any) -> Provenance | None:
    """The provenance an answer was written with, if it was (:func:`attach`)."""
    found = getattr(response, "_dualcost_provenance", None)
    return found if isinstance(found, Provenance) else None


# -- header values ----------------------------------------------------------------------------


def header_text(text: str) -> str:
    """``text`` as a header field value that any HTTP stack carries unchanged (RFC 9110, 5.5):
    printable ASCII and single spaces only. Letters with accents lose them (Konüs: Konus),
    anything else outside ASCII becomes '?', line breaks and tabs become spaces."""
    plain = unicodedata.normalize("NFKD", text)
    plain = "".join(c for c in plain if not unicodedata.combining(c))
    plain = "".join(c if " " <= c <= "~" else ("?" if ord(c) > 126 else " ") for c in plain)
    return " ".join(plain.split())
