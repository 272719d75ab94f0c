"""A panel of prices over periods (and quantities or expenditures where known), from a JSON body
or a CSV upload in long form, as arrays with ``NaN`` where a value is not given.

JSON: one row per period, an object keyed by item id or a list in the order of ``items``, null
(or, in an object, no entry) where the item is not priced. CSV: one record per period and item,
columns ``period``, ``item``, ``price`` and, where known, ``quantity`` and/or ``expenditure`` (and
an optional item ``label``), records grouped by period in time order. The locator learns where
every value came from, so the core's errors point at the JSON field or the CSV cell.
"""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass
from typing import Any

import numpy as np
from numpy.typing import NDArray

from ..problems import FieldError, RequestProblem
from .csv import DeclaredDialect, Dialect, Table, read_table
from .items import ItemAxis
from .locator import CsvRows, Locator

Array = NDArray[np.float64]

CSV_COLUMNS = ("period", "item", "price")
OPTIONAL_NUMBERS = ("quantity", "expenditure")
#: The panel's vectors: the core argument, the JSON field and the CSV column are one name here.
PANEL_FIELDS = ("prices", "quantities", "expenditures")


@dataclass(frozen=True)
class Limits:
    periods: int
    items: int
    cells: int


@dataclass
class PanelArrays:
    """The panel as arrays in period and item order, ``NaN`` where not given."""

    periods: list[str]
    axis: ItemAxis
    prices: Array
    quantities: Array | None
    expenditures: Array | None
    #: How a CSV upload was read (None for JSON).
    dialect: Dialect | None = None


def _check_limits(n_periods: int, n_items: int, limits: Limits, loc: Locator) -> None:
    if n_periods > limits.periods:
        raise loc.problem("periods", f"has {n_periods} periods; the limit is {limits.periods}")
    if n_items > limits.items:
        raise loc.problem("items", f"has {n_items} items; the limit is {limits.items}")
    if n_periods * n_items > limits.cells:
        raise loc.problem("prices", f"the panel has {n_periods} x {n_items} = "
                          f"{n_periods * n_items} cells; the limit is {limits.cells}")


def _row_errors(row: Any, t: int, name: str, axis: ItemAxis, out: Array, loc: Locator,
                allow_null_row: bool) -> list[FieldError]:
    """Fill period ``t`` of ``out`` from one row; the row's errors."""
    n = len(axis)
    if row is None:
        return [] if allow_null_row else [loc.field(name, "must be a row of prices", (t,))]
    if isinstance(row, dict):
        errors = []
        for key, value in row.items():
            i = axis.position.get(key)
            if i is None:
                errors.append(loc.field(name, f"{key!r} is not an item id listed in items: "
                                        "every value needs an item", (t, key)))
            elif value is not None:
                out[t, i] = value
        return errors
    if len(row) > n:
        return [loc.field(name, f"the row has {len(row)} values but items lists only {n} ids: "
                          f"a value at position {n} has no item id", (t, n))]
    if len(row) < n:
        return [loc.field(name, f"has {len(row)} values but there are {n} items; give one per "
                          "item (null where not priced)", (t,))]
    out[t] = [np.nan if v is None else v for v in row]
    return []


def _rows_to_matrix(rows: Sequence[Any], name: str, axis: ItemAxis, n_periods: int,
                    loc: Locator, allow_null_row: bool) -> Array:
    if len(rows) != n_periods:
        raise loc.problem(name, f"has {len(rows)} rows but there are {n_periods} periods; give "
                          "one row per period")
    loc.given(name, list(rows))
    out = np.full((n_periods, len(axis)), np.nan)
    errors: list[FieldError] = []
    for t, row in enumerate(rows):
        errors += _row_errors(row, t, name, axis, out, loc, allow_null_row)
        if len(errors) >= 20:
            break
    if errors:
        raise RequestProblem(errors)
    return out


def panel_from_json(periods: Sequence[Any], items: Sequence[Any], rows: dict[str, Any],
                    limits: Limits, loc: Locator) -> PanelArrays:
    """``rows`` maps each of :data:`PANEL_FIELDS` to its rows (or None)."""
    labels = [str(p) for p in periods]
    axis = ItemAxis.from_request(items, loc)
    _check_limits(len(labels), len(axis), limits, loc)
    mats = {name: None if rows.get(name) is None else
            _rows_to_matrix(rows[name], name, axis, len(labels), loc, name != "prices")
            for name in PANEL_FIELDS}
    prices = mats["prices"]
    assert prices is not None
    return PanelArrays(labels, axis, prices, mats["quantities"], mats["expenditures"])


def panel_from_csv(text: str, limits: Limits, loc: Locator,
                   declared: DeclaredDialect | None = None) -> PanelArrays:
    """Long form: one record per period and item; records grouped by period, in time order.
    The dialect is as declared, or detected (:mod:`dualcost.api.inputs.csv`)."""
    table = read_table(text, required=CSV_COLUMNS, numeric=("price",),
                       optional_numeric=OPTIONAL_NUMBERS, max_rows=limits.cells,
                       declared=declared)
    return panel_from_table(table, limits, loc)


def panel_from_parquet(data: bytes, limits: Limits, loc: Locator) -> PanelArrays:
    """The long form of :func:`panel_from_csv` as a Parquet file: the same columns, by name
    (:mod:`dualcost.api.inputs.parquet_tables`)."""
    from .parquet_tables import parquet_table  # pyarrow only for Parquet uploads

    table = parquet_table(data, required=CSV_COLUMNS, numeric=("price",),
                          optional_numeric=OPTIONAL_NUMBERS, text=("label",),
                          max_rows=limits.cells)
    return panel_from_table(table, limits, loc)


def panel_from_table(table: Table, limits: Limits, loc: Locator) -> PanelArrays:
    """The panel of a long table read from a CSV or a Parquet upload."""
    where = CsvRows(columns={h: j + 1 for j, h in enumerate(table.header)},
                    parquet=table.parquet)
    loc.csv = where
    if not len(table):
        raise RequestProblem([FieldError(where.at(2 - table.parquet),
                                         "the upload has column names but no rows")])
    periods, ids, labels, t_at, i_at = _read_records(table, where)
    loc.items = ids
    _check_limits(len(periods), len(ids), limits, loc)
    axis = ItemAxis(ids, labels)
    shape = (len(periods), len(ids))
    prices = np.full(shape, np.nan)
    prices[t_at, i_at] = table.columns["price"]
    quantities = _optional(table, "quantity", shape, t_at, i_at)
    expenditures = _optional(table, "expenditure", shape, t_at, i_at)
    return PanelArrays(periods, axis, prices, quantities, expenditures,
                       None if table.parquet else table.dialect)


def _optional(table: Table, column: str, shape: tuple[int, int], t_at: NDArray[np.intp],
              i_at: NDArray[np.intp]) -> Array | None:
    """An optional numeric column as a matrix, NaN where not given (an empty cell too)."""
    if column not in table.columns:
        return None
    out = np.full(shape, np.nan)
    out[t_at, i_at] = np.array(table.columns[column], dtype=np.float64)  # None -> NaN
    return out


def _read_records(table: Table, where: CsvRows
                  ) -> tuple[list[str], list[str], list[str | None], NDArray[np.intp],
                             NDArray[np.intp]]:
    """Periods and items in order of appearance, their labels, and each record's period and
    item positions; ``where`` learns each cell's record. Column by column: the records'
    positions are looked up in one pass each, and the rules (periods grouped, no cell twice)
    are checked on the arrays."""
    period_column, item_column = table.columns["period"], table.columns["item"]
    records = np.asarray(table.records, dtype=np.intp)
    period_pos = {p: t for t, p in enumerate(dict.fromkeys(period_column))}
    item_pos = {i: k for k, i in enumerate(dict.fromkeys(item_column))}
    t_at = np.fromiter(map(period_pos.__getitem__, period_column), dtype=np.intp,
                       count=len(records))
    i_at = np.fromiter(map(item_pos.__getitem__, item_column), dtype=np.intp, count=len(records))
    back = np.flatnonzero(np.diff(t_at) < 0)
    if back.size:  # a period that appears again after a later one began
        k = int(back[0]) + 1
        earlier = int(np.flatnonzero(t_at[:k] == t_at[k])[-1])
        raise RequestProblem([FieldError(
            where.at(int(records[k]), "period"), f"period {period_column[k]!r} "
            f"appears again after period {period_column[earlier + 1]!r} began: rows must be "
            "grouped by period, in time order")])
    n_items = len(item_pos)
    flat = t_at * n_items + i_at
    order = np.argsort(flat, kind="stable")
    twice = np.flatnonzero(flat[order][1:] == flat[order][:-1])
    if twice.size:  # the same period and item again: name the earliest repeat in the file
        second = order[twice + 1]
        j = int(np.argmin(second))
        k, first = int(second[j]), int(order[twice[j]])
        raise RequestProblem([FieldError(where.at(int(records[k])), f"period {period_column[k]!r} and "
                                         f"item {item_column[k]!r} were already given in row "
                                         f"{records[first]}")])
    _, first_of_period = np.unique(t_at, return_index=True)
    _, first_of_item = np.unique(i_at, return_index=True)
    where.first.update(enumerate(records[first_of_period].tolist()))
    where.item_first.update(enumerate(records[first_of_item].tolist()))
    cell_records = np.zeros((len(period_pos), n_items), dtype=np.intp)
    cell_records[t_at, i_at] = records
    where.cell_records = cell_records
    label_column = table.columns.get("label")
    labels: list[str | None] = (
        [None] * n_items if label_column is None else
        [label_column[k] or None for k in first_of_item.tolist()])
    return list(period_pos), list(item_pos), labels, t_at, i_at
