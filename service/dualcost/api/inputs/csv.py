"""CSV uploads: the body as text, its dialect (declared or detected), and a table of records with
numbers checked cell by cell.

**Reading.** Records are read by Python's ``csv`` module in strict mode, as RFC 4180 writes them:
a field may be quoted (``"Rye loaf, sliced"``), a quote inside a quoted field is doubled
(``"the ""large"" loaf"``), and a quoted field may span lines; a stray quote is refused, named
by its record. A byte-order mark before the header is ignored.

**Dialect.** The fields are separated by ``,`` ``;`` or a tab, and numbers are written with
``.`` or ``,`` as the decimal mark. The caller declares either with the query parameters
``separator=comma|semicolon|tab`` and ``decimal=point|comma``; what is not declared is detected,
conservatively, and the answer says what was used in its ``notices`` (code
``csv_dialect_detected``):

- the separator is the one of the three that the header row holds outside quotes (the header has
  names, no numbers); a header with more than one of them is refused, naming ``separator``;
- with ``,`` between fields numbers have ``.`` as decimal mark (a decimal comma would have to be
  quoted in every cell: declaring ``decimal=comma`` with ``separator=comma`` is refused, naming
  both); with ``;`` or a tab the numeric cells of the first :data:`DETECTION_ROWS` records decide:
  a ``,`` in a number is a decimal comma, a ``.`` a decimal point, unless the ``.`` could also
  group thousands (``1.234``, ``12.500``), which says nothing. Both marks in use, or only
  numbers that read two ways, is refused, naming ``decimal``. Whole numbers only: ``;``
  separated files take ``,`` (the common export of spreadsheets in comma-decimal locales), tab
  separated ones ``.``; a later number with the other mark is refused at its cell.

**Numbers.** No grouping of thousands, under either mark: a number with a ``,`` under
``decimal=point`` or a ``.`` under ``decimal=comma``, an ``_``, a space or an apostrophe inside
is refused, never guessed; NaN and infinity are refused. A bad cell is reported with an RFC 7111
fragment identifier, ``#cell=<row>,<column>`` (rows are records, counted from 1 with the header as
row 1, columns from 1), with the column's name in the sentence; a missing column with ``#row=1``.

The plain case (``,`` and ``.``) is read column by column: one check of a column's joined text
for characters that cannot be in a number, then ``float`` over the column; only a column with a
bad cell is read again cell by cell, to name the cells.
"""

from __future__ import annotations

import csv
import io
import math
import re
from collections.abc import Iterable, Iterator, Sequence
from dataclasses import dataclass, field
from itertools import chain, islice
from typing import Annotated, Any, Literal

from fastapi import Query, Request

from ..problems import FieldError, RequestProblem
from ..schemas.common import DecimalMark
from .csv_columns import arrow_columns
from .json_text import SMALLEST_NORMAL, number_rule

CSV_MEDIA_TYPE = "text/csv"
Separator = Literal["comma", "semicolon", "tab"]
SEPARATORS: dict[Separator, str] = {"comma": ",", "semicolon": ";", "tab": "\t"}
MARKS: dict[DecimalMark, str] = {"point": ".", "comma": ","}
_SHOWN = {",": "','", ";": "';'", "\t": "a tab"}
#: How many records after the header decide an undeclared decimal mark.
DETECTION_ROWS = 1000
#: Where the dialect is declared, in the upload's query string.
SEPARATOR_PARAM, DECIMAL_PARAM = "#/query/separator", "#/query/decimal"
#: A number whose '.' could group thousands as well as mark decimals: 1.234, 12.500, 1.234.567.
_GROUPED = re.compile(r"[+-]?[1-9]\d{0,2}(?:\.\d{3})+")
#: The plain case's rule (the sheet forms and the JSON-free callers use it too).
NUMBER_RULE = "write numbers with '.' as decimal point and no grouping"


def parse_number(text: str) -> float | None:
    """A finite number written with '.' as decimal point, or None if it is not one, or if it
    lies outside the floating-point range: beyond about 1.8e308, or nonzero and below 2.2e-308
    (a subnormal, or one that would silently become 0), the rule every number of a request
    follows (:func:`dualcost.api.inputs.json_text.number_rule`)."""
    cleaned = text.strip()
    if not cleaned or "," in cleaned or "_" in cleaned:
        return None
    try:
        value = float(cleaned)
    except ValueError:
        return None
    if not math.isfinite(value) or (0.0 < abs(value) < SMALLEST_NORMAL):
        return None
    if value == 0.0 and _NONZERO_DIGIT.search(cleaned.split("e")[0].split("E")[0]):
        return None  # underflowed to zero
    return value


_NONZERO_DIGIT = re.compile(r"[1-9]")
#: An exponent below -299: a number that may lie below the floating-point range.
TINY_EXPONENT = re.compile(r"[eE]-0*(?:[3-9]\d\d|\d{4,})")


def parse_number_comma(text: str) -> float | None:
    """A finite number written with ',' as decimal mark (no '.'), or None if it is not one."""
    cleaned = text.strip()
    if not cleaned or "." in cleaned or "_" in cleaned or cleaned.count(",") > 1:
        return None
    return parse_number(cleaned.replace(",", "."))


@dataclass(frozen=True)
class DeclaredDialect:
    """The ``separator`` and ``decimal`` query parameters of an upload (None: not declared)."""

    separator: Separator | None = None
    decimal: DecimalMark | None = None

    def checked(self) -> DeclaredDialect:
        if self.separator == "comma" and self.decimal == "comma":
            raise RequestProblem([
                FieldError(DECIMAL_PARAM, "a decimal comma cannot go with fields separated by "
                           "commas: give separator=semicolon (or tab) with decimal=comma"),
                FieldError(SEPARATOR_PARAM, "fields separated by commas need decimal=point")])
        return self


@dataclass(frozen=True)
class Dialect:
    """How an upload is read: its separator and decimal mark, and how each was decided."""

    separator: Separator = "comma"
    decimal: DecimalMark = "point"
    #: Which of "separator" and "decimal" were detected, each with the reason.
    detected: dict[str, str] = field(default_factory=dict)

    @property
    def delimiter(self) -> str:
        return SEPARATORS[self.separator]

    @property
    def mark(self) -> str:
        return MARKS[self.decimal]

    @property
    def number_rule(self) -> str:
        if self.decimal == "point":
            return NUMBER_RULE
        return "write numbers with ',' as decimal mark, no '.' and no grouping"

    def parse(self, text: str) -> float | None:
        return parse_number(text) if self.decimal == "point" else parse_number_comma(text)

    def bad_number(self, cell: str) -> str:
        """Why a cell is not a number here, with the parameter to declare where that may help."""
        hint = self.number_rule
        if self.decimal == "point" and "," in cell and "." not in cell:
            hint += ("; for decimal commas declare decimal=comma (with separator=semicolon or "
                     "tab)")
        elif self.decimal == "comma" and "." in cell and "," not in cell:
            hint += "; for decimal points declare decimal=point"
        rule = number_rule(cell.strip().replace(",", ".") if self.decimal == "comma"
                           else cell.strip())
        if rule is not None:
            return f"{cell.strip()!r} {rule}"
        return f"{cell.strip()!r} is not a finite number ({hint})"

    def describe(self) -> str:
        return (f"fields separated by {_SHOWN[self.delimiter]} and {self.mark!r} as the decimal "
                "mark")

    def notice(self) -> dict[str, str] | None:
        """The notice saying what was detected (None when the caller declared both)."""
        if not self.detected:
            return None
        reasons = "; ".join(f"{what}: {why}" for what, why in self.detected.items())
        declared = [f"{p}={v}" for p, v in (("separator", self.separator),
                                              ("decimal", self.decimal))
                    if p not in self.detected]
        given = f" ({', '.join(declared)} as declared)" if declared else ""
        return {"code": "csv_dialect_detected",
                "message": f"The CSV was read with {self.describe()}{given}; detected ("
                           f"{reasons}). Declare separator and decimal as query parameters to "
                           "read it otherwise."}

    def headers(self) -> dict[str, str]:
        """Response headers saying how the upload was read (for CSV answers, which have no
        notices)."""
        return {"Dualcost-Input-Separator": self.separator, "Dualcost-Input-Decimal": self.decimal}


def dialect_notices(dialect: Dialect | None) -> list[dict[str, str]]:
    """The notices of an answer about how its upload was read (none for JSON, or when the
    caller declared the dialect)."""
    notice = None if dialect is None else dialect.notice()
    return [] if notice is None else [notice]


def _unquoted(line: str) -> str:
    """The header line without its quoted parts."""
    return re.sub(r'"(?:[^"]|"")*"?', "", line)


def separator_of(header_line: str, declared: DeclaredDialect) -> tuple[Separator, str | None]:
    """The separator, and the reason when it was detected from the header line."""
    if declared.separator is not None:
        return declared.separator, None
    found, reason = _detected_separator(header_line)
    if found is None:  # one column: its separator does not show, nor matter to the header
        found = "semicolon" if declared.decimal == "comma" else "comma"
        return found, f"the header row is one column, read as {found}-separated"
    if found == "comma" and declared.decimal == "comma":
        raise RequestProblem([
            FieldError(DECIMAL_PARAM, "a decimal comma cannot go with fields separated by "
                       "commas, and the header row is separated by commas: give "
                       "separator=semicolon (or tab) with decimal=comma, and the file so"),
            FieldError(SEPARATOR_PARAM, f"not given, and detected as comma ({reason})")])
    return found, reason


def _detected_separator(header_line: str) -> tuple[Separator | None, str]:
    bare = _unquoted(header_line.lstrip("\ufeff"))
    found = [name for name, char in SEPARATORS.items() if char in bare]
    if len(found) > 1:
        shown = " and ".join(_SHOWN[SEPARATORS[n]] for n in found)
        raise RequestProblem.at(SEPARATOR_PARAM, f"the header row holds {shown} outside quotes, "
                                "so its separator cannot be told: declare separator=comma, "
                                "semicolon or tab")
    if not found:
        return None, ""
    return found[0], f"{_SHOWN[SEPARATORS[found[0]]]} is the only separator in the header row"


def decimal_of(separator: Separator, declared: DeclaredDialect, records: Sequence[Sequence[str]],
               columns: Sequence[int], first_record: int = 2) -> tuple[DecimalMark, str | None]:
    """The decimal mark, and the reason when it was detected from the numeric cells (``columns``)
    of ``records`` (the first ones after the header, numbered from ``first_record``)."""
    if declared.decimal is not None:
        return declared.decimal, None
    if separator == "comma":
        return "point", "fields separated by ',' leave '.' as the decimal mark"
    comma = point = grouped = None
    for k, record in enumerate(records):
        for j in columns:
            if j >= len(record):
                continue
            cell = record[j].strip()
            if "," in cell:
                comma = comma or (first_record + k, j + 1, cell)
            elif "." in cell:
                if _GROUPED.fullmatch(cell):
                    grouped = grouped or (first_record + k, j + 1, cell)
                else:
                    point = point or (first_record + k, j + 1, cell)
        if comma and point:
            break
    where = f"the numbers of the first {DETECTION_ROWS} rows"
    if comma and point:
        raise RequestProblem.at(DECIMAL_PARAM, f"the numbers use both ',' and '.' as decimal "
                                f"mark ({comma[2]!r} at #cell={comma[0]},{comma[1]}, {point[2]!r} "
                                f"at #cell={point[0]},{point[1]}): declare decimal=point or "
                                "decimal=comma")
    if comma:
        return "comma", f"{where} have decimal commas"
    if point:
        return "point", f"{where} have decimal points"
    if grouped:
        raise RequestProblem.at(DECIMAL_PARAM, f"{grouped[2]!r} at #cell={grouped[0]},"
                                f"{grouped[1]} could be a decimal number or a whole number with "
                                "its thousands grouped, and no other number tells which: declare "
                                "decimal=point or decimal=comma")
    if separator == "semicolon":
        return "comma", (f"{where} are whole numbers; ',' is taken as the decimal mark, as "
                         "';'-separated spreadsheet exports write it")
    return "point", f"{where} are whole numbers; '.' is taken as the decimal mark"


def csv_problem(exc: csv.Error, record: int) -> RequestProblem:
    return RequestProblem([FieldError(f"#row={record}", f"the CSV cannot be read: {exc} (a "
                                      "field with the separator, a quote or a line break in it "
                                      "must be quoted, and a quote inside doubled)")])


def records_of(lines: Iterable[str], delimiter: str) -> Records:
    """Records read strictly (RFC 4180 quoting); a malformed one is a problem at its record."""
    return Records(csv.reader(lines, delimiter=delimiter, strict=True))


class Records:
    """A strict :func:`csv.reader`'s records, each malformed one a problem at its record, with
    the reader's ``line_num`` (the line the last record read ends on)."""

    def __init__(self, reader: Any) -> None:
        self.reader = reader
        self.record = 0

    @property
    def line_num(self) -> int:
        return int(self.reader.line_num)

    def __iter__(self) -> Records:
        return self

    def __next__(self) -> list[str]:
        self.record += 1
        try:
            return list(next(self.reader))
        except csv.Error as exc:
            raise csv_problem(exc, self.record) from None


def _failing_record(text: str, delimiter: str) -> int:
    """The record at which a text stops being readable CSV."""
    reader = csv.reader(io.StringIO(text), delimiter=delimiter, strict=True)
    record = 1
    try:
        while next(reader, None) is not None:
            record += 1
    except csv.Error:
        pass
    return record


def _first_line(text: str) -> str:
    end = text.find("\n")
    return text if end < 0 else text[:end]


# -- a whole table in memory -------------------------------------------------------------------


@dataclass
class Table:
    """The records of an upload by column: text columns stripped, numeric ones as floats
    (``None`` where an optional one is empty); ``records`` holds each row's record number."""

    header: list[str]
    columns: dict[str, list[Any]]
    records: list[int]
    dialect: Dialect
    #: Read from a Parquet file (:mod:`.parquet_tables`): ``records`` are its rows, from 1,
    #: and the dialect says nothing.
    parquet: bool = False

    def __len__(self) -> int:
        return len(self.records)

    def rows(self) -> Iterator[dict[str, Any]]:
        names = list(self.columns)
        for values in zip(*self.columns.values(), strict=True):
            yield dict(zip(names, values, strict=True))


def _header(cells: list[str] | None, required: Sequence[str], dialect_hint: str) -> list[str]:
    if cells is None:
        raise RequestProblem([FieldError("#row=1", "the CSV is empty: it needs a header row")])
    header = [h.strip() for h in cells]
    missing = [c for c in required if c not in header]
    if missing:
        raise RequestProblem([FieldError("#row=1", f"the header has no column {c!r} (columns "
                                         f"needed: {', '.join(required)}){dialect_hint}")
                              for c in missing])
    seen: set[str] = set()
    for c in header:
        if c in seen:
            raise RequestProblem([FieldError("#row=1", f"column {c!r} appears twice in the header")])
        seen.add(c)
    return header


def _one_column_hint(cells: list[str] | None, separator: Separator, reason: str | None) -> str:
    """For a header read as one column with a declared separator: the separator it seems to
    have."""
    if cells is None or len(cells) != 1 or reason is not None:
        return ""
    others = [n for n, char in SEPARATORS.items() if n != separator and char in cells[0]]
    if not others:
        return ""
    return (f"; the header was read as one column with separator={separator}, as declared, but "
            f"holds {_SHOWN[SEPARATORS[others[0]]]}: is the separator {others[0]}?")


def _numbers(cells: Sequence[str], name: str, column: int, records: Sequence[int],
             dialect: Dialect, optional: bool, errors: list[FieldError]) -> list[Any]:
    """A numeric column: one pass over its joined text and ``float`` over the column when every
    cell is a number in the dialect; else cell by cell, naming each bad cell."""
    joined = "\x1f".join(cells)
    other = "," if dialect.decimal == "point" else "."
    # The fast path: no grouping, no other decimal mark, no exponent that may lie below the
    # floating-point range (1e-400 would read as 0), and every value finite and normal.
    if "_" not in joined and other not in joined and not TINY_EXPONENT.search(joined):
        try:
            if dialect.decimal == "comma":
                values = list(map(float, joined.replace(",", ".").split("\x1f")))
            else:
                values = list(map(float, cells))
            # A subnormal needs an exponent below -299 or a literal of 300 characters or more.
            if all(map(math.isfinite, values)) and max(map(len, cells), default=0) < 300:
                return values
        except ValueError:
            pass
    out: list[Any] = []
    for k, cell in enumerate(cells):
        if optional and not cell.strip():
            out.append(None)
            continue
        value = dialect.parse(cell)
        if value is None and len(errors) < 20:
            what = f": {dialect.bad_number(cell)}" if cell.strip() else " is empty"
            errors.append(FieldError(f"#cell={records[k]},{column + 1}", f"column {name!r}{what}"))
        out.append(value)
    return out


def read_table(
    text: str,
    *,
    required: Sequence[str],
    numeric: Sequence[str] = (),
    optional_numeric: Sequence[str] = (),
    max_rows: int | None = None,
    declared: DeclaredDialect | None = None,
) -> Table:
    """The records of a CSV text by column, in the declared or detected dialect. Errors name
    the row and column; all bad cells are reported, up to 20. A table without quotes is read by
    columns where that gives the same (:mod:`.csv_columns`); otherwise record by record."""
    declared = (declared or DeclaredDialect()).checked()
    text = text.lstrip("\ufeff")
    separator, separator_reason = separator_of(_first_line(text), declared)
    delimiter = SEPARATORS[separator]
    spec = _Spec(required, numeric, optional_numeric, max_rows, declared, separator,
                 separator_reason)
    if '"' not in text:
        quick = _by_columns(text, spec)
        if quick is not None:
            return quick
    reader = csv.reader(io.StringIO(text), delimiter=delimiter, strict=True)
    try:
        first = next(reader, None)
        rows = list(reader)
    except csv.Error as exc:
        raise csv_problem(exc, _failing_record(text, delimiter)) from None
    header = _header(first, required, _one_column_hint(first, separator, separator_reason))
    width = len(header)
    # Records of the header's width that are not blank (record k + 2: the header is record 1).
    kept_at = [k for k, cells in enumerate(rows) if _kept(cells, width)]
    errors: list[FieldError] = []
    if len(kept_at) == len(rows):
        kept = rows
    else:
        kept = [rows[k] for k in kept_at]
        errors = [FieldError(f"#row={k + 2}", f"has {len(cells)} cells but the header has "
                             f"{width} columns") for k, cells in enumerate(rows)
                  if len(cells) != width and "".join(cells).strip()][:20]
    records = [k + 2 for k in kept_at]
    spec.check_rows(records)
    numeric_names = spec.numeric_names(header)
    dialect = spec.dialect(header, kept[:DETECTION_ROWS])
    raw = list(zip(*kept, strict=True)) if kept else [() for _ in header]
    columns: dict[str, list[Any]] = {}
    for j, name in enumerate(header):
        if name in numeric_names:
            columns[name] = _numbers(raw[j], name, j, records, dialect,
                                     name in optional_numeric, errors)
        else:
            columns[name] = list(map(str.strip, raw[j]))
    return spec.table(header, columns, records, dialect, errors)


def _kept(cells: Sequence[str], width: int) -> bool:
    """A record of the header's width that is not blank."""
    return len(cells) == width and bool(cells[0].strip() or "".join(cells).strip())


@dataclass(frozen=True)
class _Spec:
    """What :func:`read_table` was asked for, and the steps both of its readers share."""

    required: Sequence[str]
    numeric: Sequence[str]
    optional_numeric: Sequence[str]
    max_rows: int | None
    declared: DeclaredDialect
    separator: Separator
    separator_reason: str | None

    def numeric_names(self, header: Sequence[str]) -> list[str]:
        return [c for c in list(self.numeric) + list(self.optional_numeric) if c in header]

    def check_rows(self, records: Sequence[int]) -> None:
        if self.max_rows is not None and len(records) > self.max_rows:
            raise RequestProblem([FieldError(f"#row={records[self.max_rows]}", f"the CSV has "
                                             f"more than {self.max_rows} rows, the limit")])

    def dialect(self, header: Sequence[str], head: Sequence[Sequence[str]]) -> Dialect:
        """The dialect, the decimal mark declared or detected from ``head`` (the first
        :data:`DETECTION_ROWS` records kept)."""
        position = {name: j for j, name in enumerate(header)}
        decimal, decimal_reason = decimal_of(self.separator, self.declared, head,
                                             [position[c] for c in self.numeric_names(header)])
        return Dialect(self.separator, decimal, {
            k: v for k, v in (("separator", self.separator_reason), ("decimal", decimal_reason))
            if v})

    def table(self, header: list[str], columns: dict[str, list[Any]], records: list[int],
              dialect: Dialect, errors: list[FieldError]) -> Table:
        """The table, or a problem naming its bad cells and the empty cells of required text
        columns (up to 20, in the order of the file)."""
        for j, name in enumerate(header):
            if (name in self.required and name not in self.numeric_names(header)
                    and not all(columns[name])):
                empty = [k for k, v in enumerate(columns[name]) if not v]
                errors += [FieldError(f"#cell={records[k]},{j + 1}", f"column {name!r} is "
                                      "empty") for k in empty[:20]]
        if errors:
            errors.sort(key=_order)
            raise RequestProblem(errors[:20])
        return Table(header, columns, records, dialect)


def _by_columns(text: str, spec: _Spec) -> Table | None:
    """The table read by columns (:func:`.csv_columns.arrow_columns`), or None where the
    record-by-record reader must read it. The header and the records that decide the decimal
    mark are read by the ``csv`` module first, as that reader reads them."""
    end = -1
    for _ in range(DETECTION_ROWS + 1):
        end = text.find("\n", end + 1)
        if end < 0:
            break
    head_text = text if end < 0 else text[:end + 1]
    try:
        head = list(csv.reader(io.StringIO(head_text), delimiter=SEPARATORS[spec.separator],
                               strict=True))
    except csv.Error:
        return None
    if not head or "\x00" in text:
        return None
    first, rows = head[0], head[1:]
    try:  # a problem here is left to the other reader, to be named in the order it names them
        header = _header(first, spec.required, "")
        width = len(header)
        if not all(_kept(cells, width) for cells in rows):
            return None
        dialect = spec.dialect(header, rows)
    except RequestProblem:
        return None
    numeric = spec.numeric_names(header)
    found = arrow_columns(text.encode("utf-8"), dialect.delimiter, width,
                          {j: name in spec.optional_numeric for j, name in enumerate(header)
                           if name in numeric}, dialect.mark)
    if found is None or (found and len(found[0]) < len(rows)):
        return None
    records = list(range(2, 2 + (len(found[0]) if found else 0)))
    spec.check_rows(records)
    return spec.table(header, dict(zip(header, found, strict=True)), records, dialect, [])


def _order(error: FieldError) -> tuple[int, int]:
    """Errors in the order of the file: by row, then by column."""
    found = re.match(r"#(?:cell|row)=(\d+)(?:,(\d+))?", error.pointer)
    return (int(found.group(1)), int(found.group(2) or 0)) if found else (0, 0)


# -- any table, as the page loads it -------------------------------------------------------------

#: A cell that looks like a number under either decimal mark (the columns that decide the mark).
_NUMBERISH = re.compile(r"[+-]?(?:\d+(?:[.,]\d*)?|[.,]\d+)(?:[eE][+-]?\d+)?")
#: A whole number with a leading zero (an id such as 007): its column stays text.
_LEADING_ZERO = re.compile(r"[+-]?0\d")


#: A whole number of at most 15 digits: an int in JSON (exactly a double too).
_WHOLE = re.compile(r"[+-]?\d{1,15}")


def _cell_number(cell: str, dialect: Dialect) -> int | float | None:
    """A cell of a numeric column: a whole number as an int, any other as a float (None: not a
    number, or empty)."""
    if not cell:
        return None
    return int(cell) if _WHOLE.fullmatch(cell) else dialect.parse(cell)


def read_cells(text: str, *, max_cells: int, declared: DeclaredDialect | None = None
               ) -> tuple[Table, set[str]]:
    """Every column of a CSV text, in the declared or detected dialect (:func:`read_table`'s
    rules for the records), and the names of its numeric columns: a column is numeric when
    every cell that is not empty is a number in the dialect and none is written with a leading
    zero (an id such as ``007`` stays text); its empty cells are ``None``, its whole numbers (of
    up to 15 digits) ints. The decimal mark is
    detected from the cells that look like numbers. More than ``max_cells`` cells (rows times
    columns) is refused."""
    declared = (declared or DeclaredDialect()).checked()
    raw = read_table(text, required=(), declared=DeclaredDialect(declared.separator, "point"))
    width = max(1, len(raw.header))
    if len(raw) * width > max_cells:
        raise RequestProblem.at(f"#row={raw.records[max_cells // width]}", f"the CSV has "
                                f"{len(raw)} rows of {width} columns, more than {max_cells} "
                                "cells, the limit")
    looks = [name for name, cells in raw.columns.items()
             if all(not c or _NUMBERISH.fullmatch(c) for c in cells)]
    head = [[raw.columns[name][k] for name in looks] for k in range(min(len(raw),
                                                                         DETECTION_ROWS))]
    decimal, reason = decimal_of(raw.dialect.separator, declared, head, range(len(looks)))
    detected = {k: v for k, v in raw.dialect.detected.items() if k == "separator"}
    if reason:
        detected["decimal"] = reason
    dialect = Dialect(raw.dialect.separator, decimal, detected)
    numeric = set()
    for name in looks:
        cells = raw.columns[name]
        values = [_cell_number(c, dialect) for c in cells]
        if all(v is not None for v, c in zip(values, cells, strict=True) if c) and not any(
                _LEADING_ZERO.match(c) and "." not in c and "," not in c for c in cells):
            raw.columns[name] = values
            numeric.add(name)
    return Table(raw.header, raw.columns, raw.records, dialect), numeric


# -- a stream of records (household jobs) -------------------------------------------------------


def stream_header(lines: Iterator[str], declared: DeclaredDialect
                  ) -> tuple[list[str], Iterator[list[str]], Separator, str | None]:
    """The header of a streamed upload, the records after it and the separator (with the reason
    when detected)."""
    declared = declared.checked()
    first = next(lines, "")
    separator, reason = separator_of(first, declared)
    reader = records_of(chain([first.lstrip("\ufeff")], lines), SEPARATORS[separator])
    header = next(reader, None)
    if header is None:
        raise RequestProblem.at("#row=1", "the CSV is empty: it needs a header row")
    return header, reader, separator, reason


def stream_dialect(records: Iterator[list[str]], separator: Separator, reason: str | None,
                   declared: DeclaredDialect, columns: Sequence[int]
                   ) -> tuple[Dialect, Iterator[list[str]]]:
    """The dialect of a streamed upload, from its first records' numeric ``columns``; and the
    records, the ones looked at included."""
    looks = declared.decimal is None and separator != "comma"
    start: int | None = getattr(records, "line_num", None)
    head: list[list[str]] = []
    lines: list[int] = []
    if looks:
        for record in islice(records, DETECTION_ROWS):
            head.append(record)
            lines.append(int(getattr(records, "line_num", 0)))
    decimal, decimal_reason = decimal_of(separator, declared, head, columns)
    dialect = Dialect(separator, decimal, {
        k: v for k, v in (("separator", reason), ("decimal", decimal_reason)) if v})
    if not head:
        return dialect, records
    if start is None:
        return dialect, chain(head, records)
    return dialect, _Replayed(head, lines, start, records)


class _Replayed:
    """Records already read (for detection), then the rest of the reader, with ``line_num`` as
    the :func:`csv.reader` gave it after each: the line a record ends on, so that a household
    whose quoted field spans lines is still named by its line."""

    def __init__(self, head: list[list[str]], lines: list[int], start: int,
                 rest: Iterator[list[str]]) -> None:
        self.head, self.lines, self.rest = head, lines, rest
        self.line_num = start
        self.at = 0

    def __iter__(self) -> _Replayed:
        return self

    def __next__(self) -> list[str]:
        if self.at < len(self.head):
            record = self.head[self.at]
            self.line_num = self.lines[self.at]
            self.at += 1
            return record
        record = next(self.rest)
        self.line_num = int(getattr(self.rest, "line_num", self.line_num + 1))
        return record


SeparatorParam = Annotated[Separator | None, Query(
    description="How the upload separates its fields: comma, semicolon or tab. Default: "
                "detected from the header row (stated in the answer's notices).")]
DecimalParam = Annotated[DecimalMark | None, Query(
    description="The decimal mark of the upload's numbers: point or comma (comma needs "
                "separator semicolon or tab). Default: detected (stated in the answer's "
                "notices); numbers with thousands grouped are refused either way.")]


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
