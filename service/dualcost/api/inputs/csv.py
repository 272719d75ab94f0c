"""CSV uploads: the body as text, and a table of records with numbers checked cell by cell.

A CSV upload has a header row, then one record per row; numbers are written with '.' as the
decimal point and no grouping, and NaN or infinity are refused. A bad cell is reported with an
RFC 7111 fragment identifier, ``#cell=<row>,<column>`` (rows counted from 1 with the header as
row 1, columns from 1), with the column's name in the sentence; a missing column with ``#row=1``.
"""

from __future__ import annotations

import csv
import io
import math
from collections.abc import Sequence
from typing import Any

from fastapi import Request

from ..problems import FieldError, RequestProblem

CSV_MEDIA_TYPE = "text/csv"
NUMBER_RULE = "write numbers with '.' as decimal point and no grouping"


def parse_number(text: str) -> float | None:
    """A finite number written with '.' as decimal point, or None if it is not one."""
    cleaned = text.strip()
    if not cleaned or "," in cleaned or "_" in cleaned:
        return None
    try:
        value = float(cleaned)
    except ValueError:
        return None
    return value if math.isfinite(value) else None


def record_numbers(text: str) -> tuple[list[str], list[int]]:
    """The header, and the record number of each non-blank record after it (the header is
    record 1), as :func:`read_table` counts them, for pointers at cells."""
    reader = csv.reader(io.StringIO(text.lstrip("\ufeff")))
    header = [h.strip() for h in next(reader, [])]
    numbers = [n for n, record in enumerate(reader, start=2)
               if record and any(cell.strip() for cell in record)]
    return header, numbers


def _header(reader: Any, required: Sequence[str]) -> dict[str, int]:
    try:
        header = [h.strip() for h in next(reader)]
    except StopIteration:
        raise RequestProblem([FieldError("#row=1", "the CSV is empty: it needs a header row")]) from None
    except csv.Error as exc:
        raise RequestProblem([FieldError("#row=1", f"the CSV cannot be read: {exc}")]) from None
    missing = [c for c in required if c not in header]
    if missing:
        raise RequestProblem([FieldError("#row=1", f"the header has no column {c!r} (columns "
                                         f"needed: {', '.join(required)})") for c in missing])
    seen: set[str] = set()
    for c in header:
        if c in seen:
            raise RequestProblem([FieldError("#row=1", f"column {c!r} appears twice in the header")])
        seen.add(c)
    return {name: i for i, name in enumerate(header)}


def _record(cells: list[str], row_number: int, col: dict[str, int], required: Sequence[str],
            numeric: Sequence[str], optional_numeric: Sequence[str],
            errors: list[FieldError]) -> dict[str, Any]:
    out: dict[str, Any] = {name: cells[i].strip() for name, i in col.items()}
    for name in list(numeric) + list(optional_numeric):
        if name not in col:
            continue
        cell = out[name]
        if cell == "" and name in optional_numeric:
            out[name] = None
            continue
        value = parse_number(cell)
        if value is None:
            errors.append(FieldError(f"#cell={row_number},{col[name] + 1}",
                                     f"column {name!r}: {cell!r} is not a finite number "
                                     f"({NUMBER_RULE})"))
        out[name] = value
    for name in required:
        if name not in numeric and out[name] == "":
            errors.append(FieldError(f"#cell={row_number},{col[name] + 1}",
                                     f"column {name!r} is empty"))
    return out


def read_table(
    text: str,
    *,
    required: Sequence[str],
    numeric: Sequence[str] = (),
    optional_numeric: Sequence[str] = (),
    max_rows: int | None = None,
) -> list[dict[str, Any]]:
    """Rows of a CSV text as dicts; numeric columns as floats (``None`` where an optional one is
    empty). Errors name the row and column; all bad cells are reported, up to 20."""
    reader = csv.reader(io.StringIO(text.lstrip("\ufeff")))
    col = _header(reader, required)
    rows: list[dict[str, Any]] = []
    errors: list[FieldError] = []
    try:
        for row_number, cells in enumerate(reader, start=2):
            if not cells or all(not cell.strip() for cell in cells):
                continue
            if len(cells) != len(col):
                errors.append(FieldError(f"#row={row_number}", f"has {len(cells)} cells but the "
                                         f"header has {len(col)} columns"))
                continue
            rows.append(_record(cells, row_number, col, required, numeric, optional_numeric,
                                errors))
            if max_rows is not None and len(rows) > max_rows:
                raise RequestProblem([FieldError(f"#row={row_number}", f"the CSV has more than "
                                                 f"{max_rows} rows, the limit")])
            if len(errors) >= 20:
                break
    except csv.Error as exc:
        errors.append(FieldError(f"#row={reader.line_num}", f"the CSV cannot be read: {exc}"))
    if errors:
        raise RequestProblem(errors)
    return rows


def check_media_type(request: Request) -> None:
    media = request.headers.get("content-type", "").split(";")[0].strip().lower()
    if media != CSV_MEDIA_TYPE:
        raise RequestProblem([FieldError("#/header/content-type", f"must be {CSV_MEDIA_TYPE} for "
                                         f"this operation, got {media or 'nothing'!r}")])


async def csv_body(request: Request) -> str:
    """The request body as CSV text (a dependency for plain ``def`` handlers).

    The body must be sent with ``Content-Type: text/csv`` and be UTF-8. Declare the body in the
    OpenAPI document with ``openapi_extra=CSV_REQUEST_BODY``.
    """
    check_media_type(request)
    raw = await request.body()
    try:
        return raw.decode("utf-8")
    except UnicodeDecodeError as exc:
        raise RequestProblem([FieldError("", f"the CSV body is not UTF-8 text (byte "
                                         f"{exc.start})")]) from None


CSV_REQUEST_BODY: dict[str, Any] = {
    "requestBody": {
        "required": True,
        "content": {CSV_MEDIA_TYPE: {"schema": {"type": "string", "format": "text/csv"}}},
    }
}
