"""A table upload, CSV or Parquet by its ``Content-Type``: the body of the long-form series and
fit uploads and of the table reader (POST /v1/tables).

``text/csv`` (the default form) is read as UTF-8 text by :mod:`.csv`;
``application/vnd.apache.parquet`` is kept as bytes for :mod:`.parquet_tables`. Any other media
type is refused, naming the header. The CSV dialect's query parameters (``separator``,
``decimal``) say how a text is written: given with a Parquet file, which has neither, they are
refused rather than ignored.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Any

from fastapi import Request

from ..problems import FieldError, RequestProblem
from ..render import PARQUET_MEDIA_TYPE
from .csv import CSV_MEDIA_TYPE, DECIMAL_PARAM, SEPARATOR_PARAM, DeclaredDialect, csv_body


@dataclass(frozen=True)
class TableUpload:
    """The body of a table upload: ``text`` for a CSV, ``data`` for a Parquet file."""

    text: str | None = None
    data: bytes | None = None

    @property
    def parquet(self) -> bool:
        return self.data is not None

    def dialect(self, declared: DeclaredDialect) -> DeclaredDialect:
        """The CSV dialect declared; with a Parquet file, a declared one is a problem."""
        if self.parquet:
            errors = [FieldError(where, f"{name} applies to CSV uploads only: a Parquet file has "
                                 "typed columns, with no separator or decimal mark")
                      for where, name, given in ((SEPARATOR_PARAM, "separator", declared.separator),
                                                 (DECIMAL_PARAM, "decimal", declared.decimal))
                      if given is not None]
            if errors:
                raise RequestProblem(errors)
        return declared


def media_of(request: Request) -> str:
    return request.headers.get("content-type", "").split(";")[0].strip().lower()


async def table_upload(request: Request) -> TableUpload:
    """The request body as a CSV text or a Parquet file (a dependency for plain ``def``
    handlers)."""
    media = media_of(request)
    if media == PARQUET_MEDIA_TYPE:
        return TableUpload(data=await request.body())
    if media != CSV_MEDIA_TYPE:
        raise RequestProblem.at("#/header/content-type", f"must be {CSV_MEDIA_TYPE} or "
                                f"{PARQUET_MEDIA_TYPE} for this operation, got "
                                f"{media or 'nothing'!r}")
    return TableUpload(text=await csv_body(request))


#: The OpenAPI request body of a table upload: CSV text or a Parquet file.
TABLE_REQUEST_BODY: dict[str, Any] = {
    "requestBody": {
        "required": True,
        "content": {
            CSV_MEDIA_TYPE: {"schema": {"type": "string", "format": "text/csv"}},
            PARQUET_MEDIA_TYPE: {"schema": {"type": "string", "format": "binary"}},
        },
    }
}
