"""Answers as JSON, CSV or plain text, and the one content negotiation that picks between them.

- JSON: written with orjson (every float as its shortest text that reads back to the same
  number; three times as fast as the framework's encoder for answers of hundreds of items).
  orjson would write NaN and infinity as null, so every answer is checked finite before it is
  rendered (the core checks its results; :func:`all_finite` what the core does not).
- CSV: ``text/csv; charset=utf-8``, a header row, numbers in Python's shortest round-trip form
  with '.' as the decimal point, empty cells for missing values, lines ending CRLF (RFC 4180).
- Plain text: one value, for a spreadsheet cell.
- Spreadsheet answers (:class:`SheetNumbers`): numbers with the decimal mark the caller asked
  for, a point or a comma; a comma-decimal CSV table separates its fields by semicolons, and the
  answer says both in its headers (``Dualcost-Decimal``, ``Dualcost-Separator``). A number is
  never written as a decimal mark followed by exactly three digits, which a sheet of the other
  convention would read as thousands (0.498 as 498): one more 0 is written (0.4980).

:func:`negotiate` decides the format from a ``format`` query parameter when given, else from the
``Accept`` header: CSV when the caller prefers ``text/csv`` to JSON, JSON otherwise.
"""

from __future__ import annotations

import csv
import io
import math
import re
from collections.abc import Iterable, Iterator, Sequence
from dataclasses import dataclass
from typing import Any, Literal, TypeVar

import orjson
from fastapi import Request
from fastapi.responses import PlainTextResponse, Response, StreamingResponse

from ..core.errors import NumericalFailure
from .schemas.common import DecimalMark

T = TypeVar("T")
JSON_MEDIA_TYPE = "application/json"
CSV_MEDIA_TYPE = "text/csv"
CSV_CONTENT_TYPE = "text/csv; charset=utf-8"
Format = Literal["json", "csv"]


# -- content negotiation ----------------------------------------------------------------------


def negotiate(request: Request, format_param: str | None) -> Format:
    """``csv`` when ``format=csv`` is asked, or when the Accept header prefers text/csv to JSON."""
    if format_param is not None:
        return "csv" if format_param == "csv" else "json"
    accept = request.headers.get("accept", "")
    best_csv = _quality(accept, CSV_MEDIA_TYPE)
    best_json = max(_quality(accept, JSON_MEDIA_TYPE), _quality(accept, "*/*") * 0.999)
    return "csv" if best_csv > 0 and best_csv >= best_json else "json"


def _quality(accept: str, media: str) -> float:
    best = 0.0
    for part in accept.split(","):
        fields = [f.strip() for f in part.split(";")]
        if not fields or fields[0].lower() != media:
            continue
        q = 1.0
        for f in fields[1:]:
            if f.startswith("q="):
                try:
                    q = float(f[2:])
                except ValueError:
                    q = 0.0
        best = max(best, q)
    return best


# -- JSON -------------------------------------------------------------------------------------


def json_response(document: Any, *, status_code: int = 200,
                  headers: dict[str, str] | None = None) -> Response:
    """A JSON answer from plain values (dicts, lists, str, int, float, bool, None; numpy's
    scalars and arrays too)."""
    return Response(orjson.dumps(document, option=orjson.OPT_SERIALIZE_NUMPY),
                    status_code=status_code,
                    media_type=JSON_MEDIA_TYPE, headers=headers)


def all_finite(value: Any) -> bool:
    """True when every number in a nested structure of dicts and lists is finite."""
    isfinite = math.isfinite
    stack = [value]
    while stack:
        v = stack.pop()
        kind = type(v)
        if kind is dict:
            # The common case, a record of text and numbers, without a trip through the stack.
            for x in v.values():
                kx = type(x)
                if kx is float:
                    if not isfinite(x):
                        return False
                elif not (kx is str or kx is int or kx is bool or x is None):
                    stack.append(x)
        elif isinstance(v, (list, tuple)):
            try:
                # A list of numbers (the common case: a parameter vector) in one pass.
                if not all(map(isfinite, v)):
                    return False
            except (TypeError, OverflowError):  # not all numbers, or an int beyond floats
                stack.extend(v)
        elif isinstance(v, float):
            if not isfinite(v):
                return False
        elif isinstance(v, dict):
            stack.extend(v.values())
    return True


def finite(document: T, what: str) -> T:
    """``document`` when every number in it is finite; otherwise the evaluation failed."""
    if not all_finite(document):
        raise NumericalFailure(what, "a result is not a finite number: the inputs are beyond "
                               "what floating point can carry (a weight, income or price too "
                               "large?)")
    return document


# -- CSV --------------------------------------------------------------------------------------


def format_cell(value: Any) -> str:
    """A CSV cell: shortest round-trip numbers, empty for None or a non-finite number."""
    if value is None:
        return ""
    if isinstance(value, bool):
        return "true" if value else "false"
    if isinstance(value, float):
        return repr(value) if math.isfinite(value) else ""
    return str(value)


def csv_line(cells: Sequence[Any]) -> str:
    """One CSV line (quoted where needed), CRLF-terminated."""
    buffer = io.StringIO()
    csv.writer(buffer, lineterminator="\r\n").writerow([format_cell(c) for c in cells])
    return buffer.getvalue()


def csv_lines(rows: Iterable[Sequence[Any]]) -> str:
    """CSV lines (quoted where needed), each CRLF-terminated, written by one writer."""
    buffer = io.StringIO()
    writerow = csv.writer(buffer, lineterminator="\r\n").writerow
    for row in rows:
        writerow([format_cell(v) for v in row])
    return buffer.getvalue()


def csv_text(header: Sequence[str], rows: Iterable[Sequence[Any]]) -> str:
    buffer = io.StringIO()
    writer = csv.writer(buffer, lineterminator="\r\n")
    writer.writerow(header)
    for row in rows:
        writer.writerow([format_cell(v) for v in row])
    return buffer.getvalue()


def csv_response(header: Sequence[str], rows: Iterable[Sequence[Any]], *,
                 filename: str | None = None, headers: dict[str, str] | None = None) -> Response:
    headers = dict(headers or {})
    if filename:
        headers["content-disposition"] = f'inline; filename="{filename}"'
    return Response(csv_text(header, rows), media_type=CSV_CONTENT_TYPE, headers=headers or None)


def csv_stream(pieces: Iterator[str], *, headers: dict[str, str] | None = None
               ) -> StreamingResponse:
    """A CSV answer written piece by piece as it is computed."""
    return StreamingResponse(pieces, media_type=CSV_CONTENT_TYPE, headers=headers)


# -- plain text -------------------------------------------------------------------------------


def text_response(text: str) -> Response:
    return PlainTextResponse(text)


def fixed_point(value: float, digits: int | None) -> str:
    """Shortest round-trip form, or fixed-point with ``digits`` decimals (never an exponent)."""
    return repr(float(value)) if digits is None else f"{value:.{digits}f}"


CSV_ANSWER: dict[str, Any] = {"content": {CSV_MEDIA_TYPE: {"schema": {"type": "string"}}}}


# -- spreadsheet answers ----------------------------------------------------------------------

#: Headers of a spreadsheet answer: the decimal mark of its numbers and, for a CSV table, the
#: field separator (the body stays a plain table: nothing in it says so).
DECIMAL_HEADER = "Dualcost-Decimal"
SEPARATOR_HEADER = "Dualcost-Separator"


@dataclass(frozen=True)
class SheetNumbers:
    """How a spreadsheet answer writes its numbers: shortest round-trip form, or fixed-point
    with ``digits`` decimals, with a '.' or a ',' as decimal mark and never any grouping.

    A comma-decimal CSV table separates its fields by ';', so that no number needs quoting and
    a sheet in a comma-decimal locale splits the table where it should.

    Where '.' separates thousands (most comma-decimal locales) '0.498' reads as 498, and where
    ',' does, '0,498' reads as 498: a sheet that misjudges the convention would take a wrong
    number without a word. So a number whose text would end in a decimal mark and exactly
    three digits (before any exponent) is written with one more 0, '0.4980': the same number
    in its own convention, and in the other one a text that is no number at all (an error in
    the cell, never a wrong figure).
    """

    decimal: DecimalMark = "point"
    digits: int | None = None

    @property
    def separator(self) -> str:
        return ";" if self.decimal == "comma" else ","

    def number(self, value: float) -> str:
        text = _unmistakable(fixed_point(value, self.digits))
        return text.replace(".", ",") if self.decimal == "comma" else text

    def cell(self, value: Any) -> str:
        """A CSV cell: numbers as :meth:`number` writes them, empty for None or a non-finite
        number, anything else as :func:`format_cell` writes it."""
        if isinstance(value, float):
            return self.number(value) if math.isfinite(value) else ""
        return format_cell(value)

    def table(self, header: Sequence[str], rows: Iterable[Sequence[Any]]) -> str:
        """A CSV table (RFC 4180, CRLF line ends) with this decimal mark and its separator."""
        buffer = io.StringIO()
        writer = csv.writer(buffer, delimiter=self.separator, lineterminator="\r\n")
        writer.writerow(header)
        for row in rows:
            writer.writerow([self.cell(v) for v in row])
        return buffer.getvalue()

    def headers(self, *, table: bool) -> dict[str, str]:
        """What the answer's headers say about its numbers (and a table's separator)."""
        out: dict[str, str] = {DECIMAL_HEADER: self.decimal}
        if table:
            out[SEPARATOR_HEADER] = "semicolon" if self.separator == ";" else "comma"
        return out


#: A number's text that another convention reads as a whole number with a thousands separator:
#: digits, a decimal mark, exactly three digits, perhaps an exponent ('0.498', '1.125e-05').
_LOOKS_GROUPED = re.compile(r"(-?\d+\.\d{3})([eE][-+]?\d+)?")


def _unmistakable(text: str) -> str:
    """``text`` with a 0 after its three decimals when it :data:`_LOOKS_GROUPED`."""
    match = _LOOKS_GROUPED.fullmatch(text)
    return text if match is None else match.group(1) + "0" + (match.group(2) or "")
