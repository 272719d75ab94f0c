"""CSV in and out, for the operations that take panels or many households.

Reading: a header row, then one record per row; numbers are written with a '.' decimal point
and no grouping, and NaN or infinity are refused. A bad cell is reported with an RFC 7111
fragment identifier, ``#cell=<row>,<column>`` (rows counted from 1 with the header as row 1,
columns from 1), and the column's name in the sentence; a missing column with ``#row=1``.

Writing: ``text/csv; charset=utf-8`` with a header row, numbers in Python's shortest
round-trip form (always '.' as decimal point), empty cells for missing values.
"""

from __future__ import annotations

import csv
import io
import math
from collections.abc import Iterable, Sequence
from typing import Any

from fastapi import Request
from fastapi.responses import Response

from .problems import FieldError, RequestProblem

CSV_MEDIA_TYPE = "text/csv"


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
    try:
        header = [h.strip() for h in next(reader)]
    except StopIteration:
        raise RequestProblem([FieldError("#row=1", "the CSV is empty: it needs a header row")]) from None
    except csv.Error as exc:
        raise RequestProblem([FieldError("#row=1", f"the CSV cannot be read: {exc}")]) from None
    missing = [c for c in required if c not in header]
    if missing:
        raise RequestProblem([FieldError("#row=1", f"the header has no column {c!r} (columns needed: "
                                         f"{', '.join(required)})") for c in missing])
    seen: set[str] = set()
    for c in header:
        if c in seen:
            raise RequestProblem([FieldError("#row=1", f"column {c!r} appears twice in the header")])
        seen.add(c)
    col = {name: i for i, name in enumerate(header)}
    rows: list[dict[str, Any]] = []
    errors: list[FieldError] = []
    try:
        for row_number, record in enumerate(reader, start=2):
            if not record or all(not cell.strip() for cell in record):
                continue
            if len(record) != len(header):
                errors.append(FieldError(f"#row={row_number}", f"has {len(record)} cells but the header "
                                         f"has {len(header)} columns"))
                continue
            out: dict[str, Any] = {name: record[i].strip() for name, i in col.items()}
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
                                             f"column {name!r}: {cell!r} is not a finite number (write "
                                             "numbers with '.' as decimal point and no grouping)"))
                out[name] = value
            for name in required:
                if name not in numeric and out[name] == "":
                    errors.append(FieldError(f"#cell={row_number},{col[name] + 1}",
                                             f"column {name!r} is empty"))
            rows.append(out)
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


def format_cell(value: Any) -> str:
    if value is None:
        return ""
    if isinstance(value, bool):
        return "true" if value else "false"
    if isinstance(value, float):
        return repr(value) if math.isfinite(value) else ""
    return str(value)


def csv_text(header: Sequence[str], rows: Iterable[Sequence[Any]]) -> str:
    buffer = io.StringIO()
    writer = csv.writer(buffer, lineterminator="\r\n")
    writer.writerow(header)
    for row in rows:
        writer.writerow([format_cell(v) for v in row])
    return buffer.getvalue()


def csv_response(
    header: Sequence[str], rows: Iterable[Sequence[Any]], *, filename: str | None = None
) -> Response:
    headers = {"content-disposition": f'inline; filename="{filename}"'} if filename else None
    return Response(csv_text(header, rows), media_type=f"{CSV_MEDIA_TYPE}; charset=utf-8", headers=headers)


def wants_csv(request: Request, format_param: str | None) -> bool:
    """CSV when ``format=csv`` is asked, or when the Accept header prefers text/csv to JSON."""
    if format_param is not None:
        return format_param == "csv"
    accept = request.headers.get("accept", "")
    best_csv = _quality(accept, CSV_MEDIA_TYPE)
    best_json = max(_quality(accept, "application/json"), _quality(accept, "*/*") * 0.999)
    return best_csv > 0 and best_csv >= best_json


def _quality(accept: str, media: str) -> float:
    best = 0.0
    for part in accept.split(","):
        fields = [f.strip() for f in part.split(";")]
        if not fields or fields[0].lower() != media:
            continue
        q = 1.0
        for f in fields[1:]:
            if f.startswith("q="):
                q = parse_number(f[2:]) or 0.0
        best = max(best, q)
    return best


async def csv_body(request: Request) -> str:
    """The request body as CSV text (a dependency for plain ``def`` handlers).

    The body must be sent with ``Content-Type: text/csv`` and be UTF-8. Declare the body in the
    OpenAPI document with ``openapi_extra=CSV_REQUEST_BODY``.
    """
    media = request.headers.get("content-type", "").split(";")[0].strip().lower()
    if media != CSV_MEDIA_TYPE:
        raise RequestProblem([FieldError("#/header/content-type", f"must be {CSV_MEDIA_TYPE} for this "
                                         f"operation, got {media or 'nothing'!r}")])
    raw = await request.body()
    try:
        return raw.decode("utf-8")
    except UnicodeDecodeError as exc:
        raise RequestProblem([FieldError("", f"the CSV body is not UTF-8 text (byte {exc.start})")]) from None


CSV_REQUEST_BODY: dict[str, Any] = {
    "requestBody": {
        "required": True,
        "content": {CSV_MEDIA_TYPE: {"schema": {"type": "string", "format": "text/csv"}}},
    }
}
