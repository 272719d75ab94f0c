"""Answers as JSON, CSV or plain text, and the one content negotiation that picks between them.

- JSON: written with orjson (every float as its shortest text that reads back to the same
  number; three times as fast as the framework's encoder for answers of hundreds of items).
  orjson would write NaN and infinity as null, so every answer is checked finite before it is
  rendered (the core checks its results; :func:`all_finite` what the core does not).
- CSV: ``text/csv; charset=utf-8``, a header row, numbers in Python's shortest round-trip form
  with '.' as the decimal point, empty cells for missing values, lines ending CRLF (RFC 4180).
- Plain text: one value, for a spreadsheet cell.
- Parquet (``application/vnd.apache.parquet``): a household job's rows, one row group per chunk,
  and the table of any other answer that has a CSV table (:func:`parquet_response`): nulls
  where the CSV has empty cells, the provenance and the caution in the file's key-value
  metadata as well as in the headers.
- Provenance (:mod:`dualcost.api.provenance`): a JSON answer ends with a ``provenance`` member
  (service, version, input digest); every answer, JSON or not, carries ``Dualcost-Version`` and
  ``Dualcost-Input-Digest`` headers, and every CSV or text answer the indexation caution in
  ``Dualcost-Caution``. A CSV table's body stays a plain table unless the caller asks for
  ``provenance=trailer``: then three rows close it (:func:`trailer_rows`). A leading comment
  line would break spreadsheet imports, and trailing rows are data to a reader that does not
  expect them, so they come only on request.
- Spreadsheet answers (:class:`SheetNumbers`): numbers with the decimal mark the caller asked
  for, a point or a comma; a comma-decimal CSV table separates its fields by semicolons, and the
  answer says both in its headers (``Dualcost-Decimal``, ``Dualcost-Separator``). A number is
  never written as a decimal mark followed by exactly three digits, which a sheet of the other
  convention would read as thousands (0.498 as 498): one more 0 is written (0.4980).

:func:`negotiate` is the one content negotiation: every operation names the formats it offers,
the default first; a ``format`` query parameter decides where the operation has one, else the
``Accept`` header (RFC 9110, 12.5.1), and an Accept header that admits none of the offers is
answered 406 (a problem naming the media types offered).
"""

from __future__ import annotations

import csv
import io
import math
import re
from collections.abc import Iterable, Iterator, Sequence
from dataclasses import dataclass
from typing import Annotated, Any, Literal, TypeVar

import numpy as np
import orjson
from fastapi import Query, Request
from fastapi.responses import PlainTextResponse, Response, StreamingResponse

from ..core.errors import NumericalFailure
from .problems import NotAcceptable, RequestProblem
from .provenance import CAUTION_HEADER, Provenance, attach, header_text
from .schemas.common import CAUTION, DecimalMark

T = TypeVar("T")
JSON_MEDIA_TYPE = "application/json"
CSV_MEDIA_TYPE = "text/csv"
TEXT_MEDIA_TYPE = "text/plain"
PARQUET_MEDIA_TYPE = "application/vnd.apache.parquet"
CSV_CONTENT_TYPE = "text/csv; charset=utf-8"
TEXT_CONTENT_TYPE = "text/plain; charset=utf-8"
Format = Literal["json", "csv", "text", "parquet"]


# -- content negotiation ----------------------------------------------------------------------

#: The media type of each answer format.
MEDIA_TYPES: dict[str, str] = {"json": JSON_MEDIA_TYPE, "csv": CSV_MEDIA_TYPE, "text": TEXT_MEDIA_TYPE,
                               "parquet": PARQUET_MEDIA_TYPE}


@dataclass(frozen=True)
class MediaRange:
    """One element of an Accept header: ``type/subtype`` (either may be ``*``) and its weight."""

    type: str
    subtype: str
    q: float

    def specificity(self, media: str) -> int:
        """How closely this range names ``media``: 2 exactly, 1 by ``type/*``, 0 by ``*/*``;
        -1 when it does not match."""
        kind, _, sub = media.partition("/")
        if self.type == "*":
            return 0
        if self.type != kind:
            return -1
        if self.subtype == "*":
            return 1
        return 2 if self.subtype == sub else -1


def accept_ranges(header: str) -> list[MediaRange]:
    """The media ranges of an Accept header (RFC 9110, 12.5.1), lower-cased. Parameters other
    than the weight are not told apart (``text/csv;header=present`` counts as ``text/csv``);
    an element that is not a media range, or whose weight is not a number from 0 to 1, is
    left out."""
    out = []
    for element in header.split(","):
        fields = [f.strip() for f in element.split(";")]
        kind, slash, sub = fields[0].lower().partition("/")
        if not (slash and kind and sub) or (kind == "*" and sub != "*"):
            continue
        q = 1.0
        for f in fields[1:]:
            name, _, value = f.partition("=")
            if name.strip().lower() == "q":
                try:
                    q = float(value.strip())
                except ValueError:
                    q = -1.0
                break  # what follows the weight is an accept-extension
        if 0.0 <= q <= 1.0:
            out.append(MediaRange(kind, sub, q))
    return out


def negotiate(request: Request, offers: Sequence[Format], format_param: str | None = None
              ) -> Format:
    """The format of an operation's answer: the one ``format`` names where the operation has
    that query parameter and it is given, else the best of ``offers`` under the Accept header.

    - No Accept header (or one without a single media range): the first offer, the default.
    - Each offer gets the weight of the most specific range that names it (``text/csv`` before
      ``text/*`` before ``*/*``; RFC 9110, 12.5.1), 0 if none does; the highest weight wins,
      then the more specific range (``text/csv, */*`` gets CSV), then the order of ``offers``.
    - ``application/problem+json`` is the media type of error answers, which are sent whatever
      the Accept header says: it admits no answer format. ``application/json,
      application/problem+json`` gets JSON; ``application/problem+json`` alone, nothing.
    - When every offer has weight 0: :class:`~dualcost.api.problems.NotAcceptable` (406),
      naming the media types the operation answers.
    """
    if format_param is not None:
        if format_param in offers:
            return format_param  # type: ignore[return-value]
        raise RequestProblem.at("#/query/format", f"must be one of {', '.join(offers)} for this "
                                f"operation, got {format_param!r}")
    header = ",".join(request.headers.getlist("accept"))
    ranges = accept_ranges(header)
    if not ranges:
        return offers[0]
    best: tuple[float, int, int] = (0.0, -1, 0)
    chosen: Format | None = None
    for order, offer in enumerate(offers):
        media = MEDIA_TYPES[offer]
        specific, q = -1, 0.0
        for r in ranges:
            s = r.specificity(media)
            if s >= 0 and (s > specific or (s == specific and r.q > q)):
                specific, q = s, r.q
        if q > 0 and (q, specific, -order) > best:
            best, chosen = (q, specific, -order), offer
    if chosen is None:
        acceptable = [MEDIA_TYPES[o] for o in offers]
        raise NotAcceptable(f"This operation answers {' or '.join(acceptable)}; the Accept "
                            f"header ({header.strip()[:200]}) admits none of them.", acceptable)
    return chosen


# -- JSON -------------------------------------------------------------------------------------


def json_response(document: Any, *, provenance: Provenance | None = None, status_code: int = 200,
                  headers: dict[str, str] | None = None) -> Response:
    """A JSON answer from plain values (dicts, lists, str, int, float, bool, None; numpy's
    scalars and arrays too). With ``provenance``, the document (an object) gets it as its
    last member, ``provenance``, and the answer its headers."""
    if provenance is not None:
        document = {**document, "provenance": provenance.json()}
        headers = {**(headers or {}), **provenance.headers()}
    response = Response(orjson.dumps(document, option=orjson.OPT_SERIALIZE_NUMPY),
                        status_code=status_code, media_type=JSON_MEDIA_TYPE, headers=headers)
    if provenance is not None:
        attach(response, provenance)
    return response


def json_numbers(values: Any) -> Any:
    """A vector of numbers for a JSON answer, kept as one float array: orjson writes it from the
    array (``OPT_SERIALIZE_NUMPY``) as the same text as the list of its floats, and a value
    that is not finite (NaN: withheld) as null, as ``None`` in the list would be; no Python
    object per number."""
    return np.ascontiguousarray(values, dtype=np.float64)


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
        raise _not_finite(what)
    return document


def finite_or_withheld(arrays: Iterable[Any], what: str) -> None:
    """Arrays written into an answer with NaN as null (withheld): no infinity among them, the
    rule :func:`finite` applies to the same numbers as lists with None for NaN."""
    if any(np.isinf(a).any() for a in arrays):
        raise _not_finite(what)


def _not_finite(what: str) -> NumericalFailure:
    return NumericalFailure(what, "a result is not a finite number: the inputs are beyond what "
                            "floating point can carry (a weight, income or price too large?)")


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


def number_texts(values: Any) -> list[str]:
    """Floats as :func:`format_cell` writes them, a column at once: repr's shortest round-trip
    text, empty where not finite. orjson writes the same digits as repr, some ten times as
    fast, for every finite float in [1e-4, 1e16) by magnitude, and 0
    (tests/api/test_provenance_and_formats.py checks the digits); the others (exponent forms
    differ: 1e-05 against 1e-5) are written by repr."""
    array = np.asarray(values, dtype=np.float64)
    if not array.size:
        return []
    text = orjson.dumps(array, option=orjson.OPT_SERIALIZE_NUMPY).decode()
    texts = text[1:-1].split(",")
    magnitude = np.abs(array)
    odd = ~np.isfinite(array) | ((magnitude < 1e-4) & (array != 0.0)) | (magnitude >= 1e16)
    for k in map(int, np.flatnonzero(odd)):
        v = float(array[k])
        texts[k] = repr(v) if math.isfinite(v) else ""
    return texts


def text_cells(values: Sequence[str | None], n: int) -> list[str]:
    """Text cells quoted as the csv module quotes them (a separator, quote or line break
    inside); None as empty; ``n`` empty cells when there are no values."""
    if not values:
        return [""] * n
    cells = ["" if v is None else v for v in values]
    joined = "".join(cells)
    if any(c in joined for c in ',"\r\n'):
        cells = [('"' + c.replace('"', '""') + '"') if any(x in c for x in ',"\r\n') else c
                 for c in cells]
    return cells


@dataclass(frozen=True)
class ByColumn:
    """A table's columns (one value per row each), written column by column: a float array by
    :func:`number_texts`, any other column cell by cell (:func:`format_cell`), quoted as the
    csv module quotes (:func:`text_cells`); the same text as :func:`csv_text` writes row by
    row, without a Python object per number."""

    columns: Sequence[Any]

    def lines(self) -> str:
        texts = [number_texts(c) if isinstance(c, np.ndarray) and c.dtype.kind == "f"
                 else text_cells([format_cell(v) for v in c], len(c)) for c in self.columns]
        if not texts or not texts[0]:
            return ""
        return "\r\n".join(map(",".join, zip(*texts, strict=True))) + "\r\n"


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


def csv_text(header: Sequence[str], rows: Iterable[Sequence[Any]] | ByColumn) -> str:
    if isinstance(rows, ByColumn):
        return csv_line(header) + rows.lines()
    buffer = io.StringIO()
    writer = csv.writer(buffer, lineterminator="\r\n")
    writer.writerow(header)
    for row in rows:
        writer.writerow([format_cell(v) for v in row])
    return buffer.getvalue()


def csv_response(header: Sequence[str], rows: Iterable[Sequence[Any]] | ByColumn, *,
                 provenance: Provenance, trailer: bool = False,
                 filename: str | None = None, headers: dict[str, str] | None = None) -> Response:
    """A CSV table with the provenance and caution headers (:func:`provenance_headers`) and any
    ``headers`` given; with ``trailer``, the :func:`trailer_rows` after the table as well."""
    headers = {**(headers or {}), **provenance_headers(provenance)}
    if filename:
        headers["content-disposition"] = f'inline; filename="{filename}"'
    text = csv_text(header, rows)
    if trailer:
        text += csv_lines(trailer_rows(provenance, len(header)))
    response = Response(text, media_type=CSV_CONTENT_TYPE, headers=headers)
    attach(response, provenance)
    return response


def csv_stream(pieces: Iterator[str], *, provenance: Provenance, trailer: bool = False,
               headers: dict[str, str] | None = None) -> StreamingResponse:
    """A CSV answer written piece by piece as it is computed (the first piece starts with the
    header row), with the provenance and caution headers; with ``trailer``, the
    :func:`trailer_rows` after the last piece."""
    if trailer:
        pieces = trailed(pieces, provenance)
    response = StreamingResponse(pieces, media_type=CSV_CONTENT_TYPE,
                                 headers={**(headers or {}), **provenance_headers(provenance)})
    attach(response, provenance)
    return response


def parquet_stream(pieces: Iterator[bytes], *, provenance: Provenance,
                   headers: dict[str, str] | None = None) -> StreamingResponse:
    """A Parquet answer written row group by row group as it is computed, with the provenance
    and caution headers (the file's key-value metadata carries them too)."""
    return StreamingResponse(pieces, media_type=PARQUET_MEDIA_TYPE,
                             headers={**(headers or {}), **provenance_headers(provenance)})


def parquet_metadata(provenance: Provenance) -> dict[str, str]:
    """The provenance and the caution, as a Parquet answer's key-value metadata."""
    return {"dualcost-version": provenance.version,
            "dualcost-input-digest": provenance.input_digest, "dualcost-caution": CAUTION}


def parquet_response(header: Sequence[str], rows: Iterable[Sequence[Any]], *,
                     provenance: Provenance, filename: str | None = None,
                     headers: dict[str, str] | None = None) -> Response:
    """The table a CSV answer writes (:func:`csv_response`), as a Parquet file: a column of
    numbers as float64 (int64 where all are whole ``int``), of booleans as bool, any other as
    text; null where the CSV has an empty cell (None, or a number that is not finite). The
    provenance and the caution are in the headers and the file's key-value metadata."""
    import pyarrow as pa
    import pyarrow.parquet as pq

    columns = list(zip(*rows, strict=True)) or [() for _ in header]
    table = pa.Table.from_arrays([_arrow_column(c) for c in columns], names=list(header))
    sink = pa.BufferOutputStream()
    pq.write_table(table.replace_schema_metadata(parquet_metadata(provenance)), sink)
    headers = {**(headers or {}), **provenance_headers(provenance)}
    if filename:
        headers["content-disposition"] = f'inline; filename="{filename}"'
    response = Response(sink.getvalue().to_pybytes(), media_type=PARQUET_MEDIA_TYPE,
                        headers=headers)
    attach(response, provenance)
    return response


def _arrow_column(values: Sequence[Any]) -> Any:
    """One column of a table as Arrow: see :func:`parquet_response`."""
    import pyarrow as pa

    given = [v for v in values if v is not None]
    if not given:  # a column of figures none of which is given (an annual average)
        return pa.nulls(len(values), pa.float64())
    if all(isinstance(v, bool) for v in given):
        return pa.array(values, type=pa.bool_())
    if all(type(v) is int for v in given):
        return pa.array(values, type=pa.int64())
    if all(isinstance(v, (int, float)) and not isinstance(v, bool) for v in given):
        return pa.array([v if v is not None and math.isfinite(v) else None for v in values],
                        type=pa.float64())
    return pa.array([None if v is None or format_cell(v) == "" else format_cell(v)
                     for v in values], type=pa.string())


def trailed(pieces: Iterator[str], provenance: Provenance, delimiter: str = ",") -> Iterator[str]:
    """``pieces`` of a CSV answer, then its :func:`trailer_rows`."""
    width = None
    for piece in pieces:
        if width is None:
            width = len(next(csv.reader(io.StringIO(piece), delimiter=delimiter), []))
        yield piece
    yield csv_lines(trailer_rows(provenance, width or 2))


# -- provenance and caution outside JSON ------------------------------------------------------

#: What a caller sets ``provenance`` to: ``headers`` (the default) or ``trailer``.
ProvenancePlace = Literal["headers", "trailer"]
#: The ``provenance`` query parameter of every operation that can answer CSV.
ProvenanceQuery = Annotated[ProvenancePlace, Query(
    description="Where a CSV answer states its provenance: headers (default: Dualcost-Version, "
                "Dualcost-Input-Digest and Dualcost-Caution), or trailer: in those headers and "
                "in three rows after the table ('#dualcost-version', "
                "'#dualcost-input-digest', '#dualcost-caution' and the value, padded to the "
                "table's width). A JSON answer always has its `provenance` member.")]
#: The first cells of the trailer's rows.
TRAILER_KEYS = ("#dualcost-version", "#dualcost-input-digest", "#dualcost-caution")


def provenance_headers(provenance: Provenance) -> dict[str, str]:
    """The headers of every answer that is not JSON: ``Dualcost-Version``,
    ``Dualcost-Input-Digest`` and ``Dualcost-Caution``, the indexation caution in printable
    ASCII (:func:`~dualcost.api.provenance.header_text`)."""
    return {**provenance.headers(), CAUTION_HEADER: header_text(CAUTION)}


def trailer_rows(provenance: Provenance, width: int) -> list[list[str]]:
    """Three rows that close a CSV table when a caller asks (``provenance=trailer``): the
    version, the input digest and the caution, each as a key starting with '#' and its value,
    padded with empty cells to the table's ``width`` so that the table stays rectangular (and
    readers that skip '#' lines, as pandas' ``comment="#"`` does, skip them)."""
    values = (provenance.version, provenance.input_digest, CAUTION)
    pad = [""] * max(0, width - 2)
    return [[key, value, *pad] for key, value in zip(TRAILER_KEYS, values, strict=True)]


# -- plain text -------------------------------------------------------------------------------


def text_response(text: str, *, provenance: Provenance,
                  headers: dict[str, str] | None = None) -> Response:
    """One value as ``text/plain``, with the provenance and caution headers."""
    response = PlainTextResponse(text, headers={**(headers or {}),
                                                **provenance_headers(provenance)})
    attach(response, provenance)
    return response


def fixed_point(value: float, digits: int | None) -> str:
    """Shortest round-trip form, or fixed-point with ``digits`` decimals (never an exponent)."""
    return repr(float(value)) if digits is None else f"{value:.{digits}f}"


CSV_ANSWER: dict[str, Any] = {"content": {CSV_MEDIA_TYPE: {"schema": {"type": "string"}}}}
#: An answer that is JSON, a CSV table or the same table as a Parquet file.
PARQUET_ANSWER: dict[str, Any] = {"content": {
    **CSV_ANSWER["content"], PARQUET_MEDIA_TYPE: {"schema": {"type": "string", "format": "binary"}}}}


def format_query(offers: Sequence[Format]) -> Any:
    """The ``format`` query parameter of an operation that offers ``offers`` (the first is the
    default): it decides over the Accept header."""
    names = ", ".join(offers)
    return Query(description=f"Answer format: {names}. Decides over the Accept header; without "
                             f"it the Accept header chooses ({offers[0]} by default), and an "
                             "Accept header that admits none of them gets 406.")


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

    def table(self, header: Sequence[str], rows: Iterable[Sequence[Any]],
              trailer: Provenance | None = None) -> str:
        """A CSV table (RFC 4180, CRLF line ends) with this decimal mark and its separator;
        with ``trailer``, closed by the :func:`trailer_rows` of that provenance."""
        buffer = io.StringIO()
        writer = csv.writer(buffer, delimiter=self.separator, lineterminator="\r\n")
        writer.writerow(header)
        for row in rows:
            writer.writerow([self.cell(v) for v in row])
        if trailer is not None:
            writer.writerows(trailer_rows(trailer, len(header)))
        return buffer.getvalue()

    def headers(self, *, table: bool) -> dict[str, str]:
        """What the answer's headers say about its numbers (and a table's separator)."""
        out: dict[str, str] = {DECIMAL_HEADER: self.decimal}
        if table:
            out[SEPARATOR_HEADER] = "semicolon" if self.separator == ";" else "comma"
        return out

    def response(self, text: str, media_type: str, provenance: Provenance) -> Response:
        """A spreadsheet answer (``text``: a number or a :meth:`table`) with the headers that
        say how its numbers are written, and the provenance and caution headers."""
        headers = self.headers(table=media_type.startswith(CSV_MEDIA_TYPE))
        response = Response(text, media_type=media_type,
                            headers=headers | provenance_headers(provenance))
        attach(response, provenance)
        return response


#: A number's text that another convention reads as a whole number with a thousands separator:
#: digits, a decimal mark, exactly three digits, perhaps an exponent ('0.498', '1.125e-05').
_LOOKS_GROUPED = re.compile(r"(-?\d+\.\d{3})([eE][-+]?\d+)?")


def _unmistakable(text: str) -> str:
    """``text`` with a 0 after its three decimals when it :data:`_LOOKS_GROUPED`."""
    match = _LOOKS_GROUPED.fullmatch(text)
    return text if match is None else match.group(1) + "0" + (match.group(2) or "")
