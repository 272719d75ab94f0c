"""Many households: the job common to them (items, prices, model, formulas) and their rows, from
a JSON body or from a wide CSV upload (one record per household).

CSV: one column per item id holding the base share, and the optional columns ``household`` (an
id), ``expenditure`` (the income, required for non-homothetic families) and ``weight`` (how many
households the row stands for; default 1). Other columns are not used, and the answer names
them. A cell that is not a number, or a record of the wrong length, refuses that row only.

Rows are numbered from 1 everywhere: a JSON household's place in ``households`` (its pointer
counts from 0, ``/households/0``, by RFC 6901), a CSV household's record after the header (so
that its record is ``#row=<row + 1>`` in RFC 7111 terms); a CSV row also keeps the line its
record starts on (``record``), which differs from ``row + 1`` after a quoted field that spans
lines.
"""

from __future__ import annotations

import operator
from collections.abc import Callable, Iterator, Sequence
from dataclasses import dataclass
from typing import Any

import numpy as np
from numpy.typing import NDArray

from ...core import _checks
from ...core.errors import RowProblem
from ...core.households import HouseholdChunk, HouseholdJob, check_quantiles
from ..observability import checked_arithmetic
from ..problems import FieldError, RequestProblem
from ..schemas.households import HouseholdIndicesRequest, HouseholdJobSpec
from .csv import TINY_EXPONENT, Dialect
from .items import ItemAxis
from .json_text import SMALLEST_NORMAL
from .locator import CsvRows, Locator, Place
from .model import core_parameters

ID_COLUMN, EXPENDITURE_COLUMN, WEIGHT_COLUMN = "household", "expenditure", "weight"
RESERVED_COLUMNS = (ID_COLUMN, EXPENDITURE_COLUMN, WEIGHT_COLUMN)
Array = NDArray[np.float64]
VectorGiven = list[float] | dict[str, float]

#: Where a refused row's field is: in a JSON body, and in a CSV upload's columns.
ROW_PLACES: dict[str, Place] = {
    "row:shares": Place("/households/{row}/shares", column="*item"),
    "row:expenditure": Place("/households/{row}/expenditure", column=EXPENDITURE_COLUMN),
    "row:weight": Place("/households/{row}/weight", column=WEIGHT_COLUMN),
    "row:row": Place("/households/{row}"),
    # A formula named in the request that a household's data do not allow: /formulas/<i>.
    "row:formulas": Place("/formulas"),
}


def labels_of(spec: HouseholdJobSpec) -> list[str]:
    """The periods' labels: ``current`` for one price change."""
    return ["current"] if spec.periods is None else [p.period for p in spec.periods]


def job_of(spec: HouseholdJobSpec, loc: Locator, *, max_items: int, max_tree_depth: int,
           chunk_rows: int | None) -> tuple[HouseholdJob, ItemAxis, tuple[float, ...]]:
    """The core job, its items and the summaries' quantiles; errors point at the request."""
    axis = ItemAxis.from_request(spec.items, loc, limit=max_items)
    p0 = axis.vector(loc, "p0", spec.base_prices)
    with loc.translating():
        _checks.positive("p0", p0)
    given: list[tuple[str, VectorGiven]] = (
        [("/current_prices", spec.current_prices)] if spec.current_prices is not None else
        [(f"/periods/{t}/prices", p.prices) for t, p in enumerate(spec.periods or [])])
    rows = []
    for where, value in given:
        loc.add("p1", Place(where, shape="items", names_item=True))
        vector = axis.vector(loc, "p1", value)
        with loc.translating():
            _checks.positive("p1", vector)
        rows.append(vector)
    parameters = {k: v for k, v in core_parameters(
        spec.model, axis, loc, max_tree_depth=max_tree_depth).items() if v is not None}
    # Checking the job calibrates the model on a probe household: computing, checked as such.
    with loc.translating(), checked_arithmetic():
        job = HouseholdJob.checked(
            spec.model.family, parameters, p0, np.stack(rows), formulas=spec.formulas,
            lloyd_moulton_sigma=spec.lloyd_moulton_sigma,
            normalise_shares=spec.normalise_shares, chunk_rows=chunk_rows,
            share_unit=spec.share_unit)
        quantiles = check_quantiles(spec.quantiles)
    return job, axis, quantiles


@dataclass(frozen=True)
class HouseholdRows:
    """The households of a JSON request: shares (households by items), incomes, weights, ids."""

    shares: Array
    incomes: Array | None
    weights: Array
    ids: tuple[str | None, ...] | None
    #: How many households gave no weight (each counts as 1).
    weights_assumed: int = 0


def rows_of(request: HouseholdIndicesRequest, axis: ItemAxis, loc: Locator) -> HouseholdRows:
    """The households' arrays; a malformed vector names its household (up to 20 at once)."""
    households = request.households
    loc.given_rows("row:shares", [isinstance(h.shares, dict) for h in households])
    loc.row_names = [h.id for h in households]
    shares = np.empty((len(households), len(axis)))
    incomes = [h.expenditure for h in households]
    given = [m is not None for m in incomes]
    errors: list[FieldError] = []
    if any(given) and not all(given):
        h = given.index(False)
        errors.append(FieldError(f"/households/{h}/expenditure", f"household row {h + 1} has "
                                 "no income while others do: give every household's income, "
                                 "or none"))
    for h, household in enumerate(households):
        loc.add("w0", Place(f"/households/{h}/shares", shape="items"))
        try:
            shares[h] = axis.vector(loc, "w0", household.shares)
        except RequestProblem as exc:
            errors += [FieldError(e.pointer, f"household row {h + 1}: {e.detail}")
                       for e in exc.errors]
        if len(errors) >= 20:
            break
    if errors:
        raise RequestProblem(errors[:20])
    ids = tuple(h.id for h in households)
    return HouseholdRows(shares, np.array(incomes, dtype=np.float64) if all(given) else None,
                         np.array([h.weight for h in households], dtype=np.float64),
                         ids if any(i is not None for i in ids) else None,
                         sum("weight" not in h.model_fields_set for h in households))


# -- a wide CSV upload ------------------------------------------------------------------------


@dataclass(frozen=True)
class CsvLayout:
    """Where the columns of a household CSV are (numbered from 0)."""

    header: list[str]
    items: list[int]  # column of each item, in item order
    id_column: int | None
    expenditure_column: int | None
    weight_column: int | None
    unused: list[str]
    #: How the records are read: separator and decimal mark (see inputs/csv.py).
    dialect: Dialect = Dialect()

    @property
    def numeric_columns(self) -> list[int]:
        """The columns holding numbers: the items', income and weight."""
        return self.items + [j for j in (self.expenditure_column, self.weight_column)
                             if j is not None]


def csv_layout(header: Sequence[str], axis: ItemAxis, loc: Locator, *,
               needs_income: bool) -> CsvLayout:
    """The columns of a household CSV; a missing item column is named (``#row=1``). The
    locator learns the columns, to point at a refused row's cell."""
    cleaned = [h.strip() for h in header]
    seen: dict[str, int] = {}
    for j, name in enumerate(cleaned):
        if name in seen:
            raise RequestProblem.at("#row=1", f"column {name!r} appears twice in the header")
        seen[name] = j
    missing = [i for i in axis.ids if i not in seen]
    errors = [FieldError("#row=1", f"the header has no column {i!r}: give one column per item "
                         "holding each household's base share") for i in missing[:20]]
    if needs_income and EXPENDITURE_COLUMN not in seen:
        errors.append(FieldError("#row=1", f"the header has no column {EXPENDITURE_COLUMN!r}: "
                                 "this model is not homothetic and needs each household's income"))
    if errors:
        raise RequestProblem(errors)
    loc.csv = CsvRows(columns={name: j + 1 for name, j in seen.items()},
                      item_columns=[seen[i] + 1 for i in axis.ids])
    used = set(axis.ids) | set(RESERVED_COLUMNS)
    return CsvLayout(
        header=cleaned, items=[seen[i] for i in axis.ids], id_column=seen.get(ID_COLUMN),
        expenditure_column=seen.get(EXPENDITURE_COLUMN), weight_column=seen.get(WEIGHT_COLUMN),
        unused=[c for c in cleaned if c not in used],
    )


class _ChunkReader:
    """Gathers one chunk of household records."""

    def __init__(self, layout: CsvLayout) -> None:
        self.layout = layout
        self.pick = operator.itemgetter(*layout.items)
        self.rows: list[int] = []
        self.lines: list[int] = []
        self.values: list[list[float]] = []
        self.incomes: list[float] = []
        self.weights: list[float] = []
        self.ids: list[str | None] = []
        self.problems: list[RowProblem] = []
        self.raw: dict[int, Sequence[str]] = {}  # cells of rows that did not parse, for messages
        self.other_mark = "," if layout.dialect.decimal == "point" else "."

    def add(self, record: int, cells: list[str], line: int | None = None) -> None:
        """Household row ``record`` (from 1 after the header), starting on ``line``."""
        layout = self.layout
        self.rows.append(record)
        self.lines.append(record + 1 if line is None else line)
        if len(cells) != len(layout.header):
            self.problems.append(RowProblem(record, "row", f"has {len(cells)} cells but the "
                                            f"header has {len(layout.header)} columns",
                                            "ragged_row"))
            self.values.append([float("nan")] * len(layout.items))
            self.incomes.append(1.0)
            self.weights.append(1.0)
            self.ids.append(None)
            return
        picked = self.pick(cells)
        if len(layout.items) == 1:
            picked = (picked,)
        dialect = layout.dialect
        try:
            # float() also reads '1_000', and the other decimal mark is never in a number here.
            joined = "\x1f".join(picked)
            if "_" in joined or self.other_mark in joined:
                raise ValueError("grouping")
            if TINY_EXPONENT.search(joined):  # perhaps beyond floating point: cell by cell
                raise ValueError("range")
            if dialect.decimal == "comma":
                picked = tuple(joined.replace(",", ".").split("\x1f"))
            self.values.append(list(map(float, picked)))
        except ValueError:
            self.values.append([_number(c, dialect) for c in picked])
            self.raw[len(self.rows) - 1] = picked
        self.incomes.append(self._optional(cells, layout.expenditure_column, EXPENDITURE_COLUMN,
                                           record))
        self.weights.append(self._optional(cells, layout.weight_column, WEIGHT_COLUMN, record))
        self.ids.append(None if layout.id_column is None else
                        (cells[layout.id_column].strip() or None))

    def _optional(self, cells: list[str], column: int | None, name: str, record: int) -> float:
        if column is None:
            return 1.0
        cell = cells[column]
        value = self.layout.dialect.parse(cell)
        if value is None:
            what = "is empty" if not cell.strip() else self.layout.dialect.bad_number(cell)
            if not cell.strip():
                what += f" ({self.layout.dialect.number_rule})"
            self.problems.append(RowProblem(record, name, what, "not_a_number"))
            return 1.0
        return value

    def chunk(self) -> HouseholdChunk:
        shares = np.array(self.values, dtype=np.float64)
        refused = {p.row for p in self.problems if p.field == "row"}
        bad_cells = ~np.isfinite(shares) | ((shares != 0.0) & (np.abs(shares) < SMALLEST_NORMAL))
        for k in map(int, np.flatnonzero(bad_cells.any(axis=1))):
            if self.rows[k] in refused:
                continue
            i = int(np.argmax(bad_cells[k]))
            text = self.raw[k][i] if k in self.raw else repr(float(shares[k, i]))
            self.problems.append(RowProblem(self.rows[k], "shares",
                                            self.layout.dialect.bad_number(text), "not_a_number",
                                            i))
        layout = self.layout
        return HouseholdChunk(
            rows=np.array(self.rows, dtype=np.int64), shares=shares,
            expenditure=None if layout.expenditure_column is None else np.array(self.incomes),
            weights=None if layout.weight_column is None else np.array(self.weights),
            ids=None if layout.id_column is None else tuple(self.ids),
            problems=tuple(self.problems), records=np.array(self.lines, dtype=np.int64),
        )


def _number(cell: str, dialect: Dialect) -> float:
    """A finite number in the upload's dialect, or NaN if the cell is not one."""
    value = dialect.parse(cell)
    return float("nan") if value is None else value


def csv_chunks(records: Iterator[list[str]], layout: CsvLayout, chunk_rows: int,
               progress: Callable[[int], Any] | None = None, *, first_row: int = 1
               ) -> Iterator[HouseholdChunk]:
    """Household chunks from CSV records after the header: rows numbered from 1, the first
    record after the header being row 1 (a blank record keeps its number but holds no
    household), and the line each record starts on, where ``records`` tells it (a
    :func:`csv.reader`'s ``line_num``).

    A cell that is not a number, or a record of the wrong length, becomes a refused row carried
    with the chunk; the good rows of the chunk go on. ``progress(n)`` is told of each record.
    ``first_row``: the row number of the first of ``records`` (the columnar reader hands the
    rest of an upload over so).
    """
    record = first_row - 1
    last_line: int | None = getattr(records, "line_num", None)
    while True:
        reader = _ChunkReader(layout)
        for cells in records:
            record += 1
            line = None
            if last_line is not None:
                line, last_line = last_line + 1, int(getattr(records, "line_num", last_line + 1))
            if progress is not None:
                progress(1)
            if not cells or all(not c.strip() for c in cells):
                continue
            reader.add(record, cells, line)
            if len(reader.rows) >= chunk_rows:
                break
        if not reader.rows:
            return
        yield reader.chunk()
        if len(reader.rows) < chunk_rows:
            return
