"""Where each core argument came from in the request: one locator for JSON bodies, query strings
and CSV uploads.

The core names the argument that breaks a rule (:class:`~dualcost.core.errors.InvalidInput`:
``parameter``, ``rule``, ``index``). Each operation declares, once, a table from those argument
names to a :class:`Place` in its request; a :class:`Locator` binds the table to one request (its
form, its items, which vectors arrived keyed by item id, where the rows of a CSV upload lie) and
turns any core error, and any rule the web layer checks itself, into a problem that names the
field as the caller wrote it:

- a JSON body: an RFC 6901 pointer, ``/base/prices/rye_loaf`` (an item by id where the vector was
  an object keyed by id, by position where it was a list);
- a query string (the spreadsheet forms, the options of a CSV upload): ``#/query/p0/2``;
- the data of a CSV upload: an RFC 7111 fragment, ``#cell=14,3`` or ``#row=2``.

The same table converts a pointer into a body built from a query string back into the query
parameter (:meth:`Locator.at`), so the spreadsheet forms need no name map of their own.
"""

from __future__ import annotations

from collections.abc import Iterator, Mapping, Sequence
from contextlib import contextmanager
from dataclasses import dataclass, field
from typing import Any, Literal

from ...core.errors import InvalidInput, InvalidRows, RowProblem
from ..problems import FieldError, RequestProblem

Form = Literal["json", "query", "csv"]
#: How a core index is read at a place:
#: ``scalar``  the index is ignored;  ``list``  a position in a list (``/formulas/3``);
#: ``items``   an item position, or an unknown key, in a vector keyed by id or in item order;
#: ``panel``   ``(period, item)`` or ``(period,)`` in rows of vectors (``/prices/3/rye_loaf``);
#: ``matrix``  ``(row, column)``;  ``path``  keys and positions below the place (a tree).
Shape = Literal["scalar", "list", "items", "panel", "matrix", "path"]


def escape(token: str) -> str:
    """A JSON Pointer reference token (RFC 6901)."""
    return token.replace("~", "~0").replace("/", "~1")


@dataclass(frozen=True)
class Place:
    """Where one core argument lives: in the JSON body, in the query string, in a CSV column.

    ``query`` is the parameter that carries it in a query-string form (``None``: the JSON place
    prefixed by ``#/query``); ``column`` the CSV column of an upload's data; ``names_item`` adds
    ``(item 'id')`` to the rule of an error at one item (a ``column`` starting with ``#`` is a
    fixed RFC 7111 fragment, such as the header row); ``json_text`` says that the query
    parameter holds JSON text (a model), so a pointer goes on inside it.
    """

    json: str
    query: str | None = None
    shape: Shape = "scalar"
    column: str | None = None
    names_item: bool = False
    json_text: bool = False


@dataclass
class CsvRows:
    """Where the records of a CSV upload lie: record numbers (the header is 1) and columns
    (numbered from 1)."""

    columns: dict[str, int] = field(default_factory=dict)
    cells: dict[tuple[int, int], int] = field(default_factory=dict)  # (row t, item i) -> record
    first: dict[int, int] = field(default_factory=dict)  # row t -> its first record
    item_first: dict[int, int] = field(default_factory=dict)  # item i -> its first record
    #: Long uploads read column by column: the record of each (row t, item i) as a matrix,
    #: 0 where there is none (in place of ``cells``).
    cell_records: Any = None
    #: Wide uploads (one record per household): the column of each item.
    item_columns: list[int] = field(default_factory=list)
    #: The record named when a row is not found, and whether an error about a whole column
    #: names the column (``#col=3``) rather than the header.
    default_record: int = 2
    whole_column: bool = False
    #: A Parquet upload (no header record): a cell is ``#row=<row>&column=<name>``.
    parquet: bool = False

    def cell(self, column: str | None, t: int | None, i: int | None) -> str:
        return self.at(self.record(t, i), column)

    def at(self, record: int, column: str | None = None) -> str:
        """The place of ``record`` (a CSV record, the header being 1; a Parquet row, from 1) and
        ``column``: ``#cell=<record>,<number>`` or ``#row=<row>&column=<name>``; the record
        alone where the column is not known."""
        if self.parquet:
            return f"#row={record}" + (f"&column={column}" if column in self.columns else "")
        number = self.columns.get(column or "")
        return f"#cell={record},{number}" if number else f"#row={record}"

    def header(self, column: str | None = None) -> str:
        """The place of a column as a whole: the CSV header row, a Parquet file's column (the
        whole file where no column is named)."""
        if self.parquet:
            return f"#column={column}" if column else ""
        return "#row=1"

    def record(self, t: int | None, i: int | None) -> int:
        if t is None:
            return self.item_first.get(i, self.default_record) if i is not None else 1
        if i is None:
            return self.first.get(t, self.default_record)
        if self.cell_records is not None:
            rows, columns = self.cell_records.shape
            found = int(self.cell_records[t, i]) if 0 <= t < rows and 0 <= i < columns else 0
            return found or self.first.get(t, self.default_record)
        return self.cells.get((t, i), self.first.get(t, self.default_record))


class Locator:
    """A table of places bound to one request; see the module's notes."""

    def __init__(self, places: Mapping[str, Place], form: Form = "json", *,
                 items: Sequence[str] = (), csv: CsvRows | None = None) -> None:
        self.places = dict(places)
        self.form = form
        self.items = list(items)
        self.csv = csv
        #: The household id of each row of a JSON batch, for messages about refused rows.
        self.row_names: Sequence[str | None] = ()
        #: Where the request's model is: its parameters are below it (``/models/2`` for one
        #: of several models).
        self.model_root = "/model"
        self._keyed: dict[str, list[bool]] = {}

    # -- what the request looked like --------------------------------------------------------
    def given(self, name: str, value: Any) -> None:
        """Note how argument ``name`` arrived: a vector keyed by item id or a list; for rows of
        vectors (a panel), each row's form."""
        place = self.places.get(name)
        if place is not None and place.shape == "panel" and isinstance(value, list):
            self._keyed[name] = [isinstance(row, dict) for row in value]
        else:
            self._keyed[name] = [isinstance(value, dict)]

    def given_rows(self, name: str, keyed: Sequence[bool]) -> None:
        """Note, row by row, whether argument ``name``'s vectors were keyed by item id."""
        self._keyed[name] = list(keyed)

    def add(self, name: str, place: Place) -> None:
        self.places[name] = place

    def with_items(self, items: Sequence[str]) -> Locator:
        """The same places for a request whose item axis is ``items`` (a model calibrated to
        some of the request's items)."""
        out = Locator({}, self.form, items=items, csv=self.csv)
        out.places = self.places  # shared: the places the model adds serve the whole request
        out._keyed = self._keyed
        return out

    # -- pointers ------------------------------------------------------------------------------
    def pointer(self, name: str, index: Any = None) -> str:
        """Where ``index`` of core argument ``name`` is, in this request's form."""
        place = self.places.get(name)
        if place is None:
            return ""
        if self.form == "csv" and place.column is not None and self.csv is not None:
            return self._csv_pointer(place, index)
        json_pointer = place.json + self._below(name, place, index)
        if self.form == "json":
            return json_pointer
        return self.at(json_pointer)

    def at(self, json_pointer: str) -> str:
        """A pointer into the JSON body as this form names it (``#/query/p0/2`` for
        ``/base/prices/2`` in a query-string form)."""
        if self.form == "json" or not json_pointer.startswith("/"):
            return json_pointer
        best: Place | None = None
        for place in self.places.values():
            if place.query is None or not _under(json_pointer, place.json):
                continue
            if best is None or len(place.json) > len(best.json):
                best = place
        if best is None:
            return "#/query" + json_pointer
        # A spreadsheet form's lists are named down to the position; a CSV upload's options by
        # the parameter, or inside it where it holds JSON.
        inside = self.form == "query" or best.json_text
        return f"#/query/{best.query}{json_pointer[len(best.json):] if inside else ''}"

    def _below(self, name: str, place: Place, index: Any) -> str:
        if index is None or place.shape == "scalar":
            return ""
        if place.shape == "items":
            return "/" + self._item_token(name, 0, index)
        if place.shape == "panel":
            parts = index if isinstance(index, tuple) else (index,)
            if len(parts) == 2:
                return f"/{parts[0]}/{self._item_token(name, parts[0], parts[1])}"
            return f"/{parts[0]}"
        parts = index if isinstance(index, tuple) else (index,)
        return "".join("/" + escape(str(p)) for p in parts)

    def _item_token(self, name: str, row: int, index: Any) -> str:
        if isinstance(index, str):  # a key that is not an item id
            return escape(index)
        keyed = self._keyed.get(name, [])
        by_id = row < len(keyed) and keyed[row] and 0 <= index < len(self.items)
        return escape(self.items[index]) if by_id else str(index)

    def _csv_pointer(self, place: Place, index: Any) -> str:
        assert self.csv is not None
        if place.column is not None and place.column.startswith("#"):  # a fixed fragment
            return self.csv.header() if place.column == "#row=1" else place.column
        parts = index if isinstance(index, tuple) else (() if index is None else (index,))
        if not parts and self.csv.parquet:  # a Parquet file's column, by name
            return self.csv.header(place.column if place.column in self.csv.columns else None)
        if not parts:  # the whole column of a value per row, or the header
            column = self.csv.columns.get(place.column or "")
            whole = self.csv.whole_column and place.column not in ("item", "period")
            return f"#col={column}" if whole and column else "#row=1"
        if place.shape == "panel" and len(parts) == 1:
            return f"#row={self.csv.record(parts[0], None)}"
        if place.shape == "panel":
            return self.csv.cell(place.column, parts[0], parts[1])
        if place.column == "item":  # the first record of an item
            return self.csv.cell(place.column, None, parts[0])
        return self.csv.cell(place.column, parts[0], None)  # the first record of a row

    # -- problems ------------------------------------------------------------------------------
    def detail(self, name: str, rule: str, index: Any = None) -> str:
        place = self.places.get(name)
        if place is not None and place.names_item and isinstance(index, int) and (
                0 <= index < len(self.items)):
            return f"{rule} (item {self.items[index]!r})"
        if place is not None and place.names_item and isinstance(index, tuple) and len(index) == 2:
            return f"{rule} (item {self.items[index[1]]!r})"
        return rule

    def error(self, exc: InvalidInput) -> FieldError:
        """The core's error as a field error. An argument the request does not carry (the
        model's demands standing in for current quantities) is named in the rule, at the
        model's place where the request has one: the model produced it."""
        where = self.pointer(exc.parameter, exc.index)
        detail = self.detail(exc.parameter, exc.rule, exc.index)
        if where:
            return FieldError(where, detail)
        return FieldError(self.pointer("model"), f"{exc.parameter}: {detail}")

    def field(self, name: str, rule: str, index: Any = None) -> FieldError:
        """A rule the web layer checks itself, at the place of argument ``name``."""
        return FieldError(self.pointer(name, index), self.detail(name, rule, index))

    def problem(self, name: str, rule: str, index: Any = None) -> RequestProblem:
        return RequestProblem([self.field(name, rule, index)])

    def relocated(self, problem: RequestProblem) -> RequestProblem:
        """A problem raised with JSON pointers, re-pointed for this request's form."""
        if self.form == "json":
            return problem
        return RequestProblem([FieldError(self.at(e.pointer), e.detail) for e in problem.errors],
                              slug=problem.slug)

    def row_error(self, problem: RowProblem) -> FieldError:
        """A refused household row (a core :class:`RowProblem`) as a field error.

        Rows are numbered from 1 in every message: the household's place in the request's list,
        or in a CSV upload the record after the header. A JSON pointer counts from 0 (RFC 6901):
        household row 4 is ``/households/3/shares/rye_loaf`` (the place ``row:<field>``). In a
        CSV upload the pointer is the cell of the row's record (RFC 7111, the header being
        record 1: ``#cell=<row + 1>,<column>``) and the message names the line the record
        starts on where that differs (a quoted field spanning lines before it)."""
        place = self.places.get(f"row:{problem.field}")
        if self.form == "csv" and self.csv is not None:
            column, name = self._row_column(place, problem)
            if self.csv.parquet:
                where = f"#row={problem.row}" + (f"&column={name}" if name else "")
                named = f"column {name!r}: " if name else ""
                return FieldError(where, f"row {problem.row}: {named}{problem.rule}")
            record = problem.row + 1
            where = f"#cell={record},{column}" if column else f"#row={record}"
            named = f"column {name!r}: " if name else ""
            line = "" if problem.record in (None, record) else f" (line {problem.record})"
            return FieldError(where, f"row {problem.row}{line}: {named}{problem.rule}")
        position = problem.row - 1
        json_pointer = "" if place is None else place.json.format(row=position)
        if problem.item is not None and place is not None:
            keyed = self._keyed.get(f"row:{problem.field}", [])
            by_id = 0 <= position < len(keyed) and keyed[position]
            json_pointer += "/" + (escape(self.items[problem.item]) if by_id else str(problem.item))
        household = self.row_names[position] if 0 <= position < len(self.row_names) else None
        name = f"household row {problem.row}" + (f" ({household!r})" if household else "")
        return FieldError(json_pointer, f"{name}: {problem.rule}")

    def _row_column(self, place: Place | None, problem: RowProblem) -> tuple[int | None, str]:
        assert self.csv is not None
        if place is None or place.column is None:
            return None, ""
        if place.column == "*item":
            if problem.item is None:
                return None, ""
            return self.csv.item_columns[problem.item], self.items[problem.item]
        return self.csv.columns.get(place.column), place.column

    @contextmanager
    def translating(self) -> Iterator[None]:
        """Turn the core's :class:`InvalidInput` raised inside into a located problem."""
        try:
            yield
        except InvalidRows as exc:  # household rows, each named
            raise RequestProblem([self.row_error(p) for p in exc.problems]) from exc
        except InvalidInput as exc:
            raise RequestProblem([self.error(exc)]) from exc


def _under(pointer: str, prefix: str) -> bool:
    return pointer == prefix or pointer.startswith(prefix + "/")
