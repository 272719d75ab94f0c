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
from .csv import read_table, record_numbers
from .items import ItemAxis
from .locator import CsvRows, Locator

Array = NDArray[np.float64]

CSV_COLUMNS = ("period", "item", "price")
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


def panel_from_csv(text: str, limits: Limits, loc: Locator) -> PanelArrays:
    """Long form: one record per period and item; records grouped by period, in time order."""
    rows = read_table(text, required=CSV_COLUMNS, numeric=("price",),
                      optional_numeric=("quantity", "expenditure"), max_rows=limits.cells)
    header, numbers = record_numbers(text)
    where = CsvRows(columns={h: j + 1 for j, h in enumerate(header)})
    loc.csv = where
    if not rows:
        raise RequestProblem([FieldError("#row=2", "the CSV has a header but no rows")])
    period_pos, item_pos, labels, cells = _read_records(rows, numbers, where)
    periods, ids = list(period_pos), list(item_pos)
    loc.items = ids
    _check_limits(len(periods), len(ids), limits, loc)
    axis = ItemAxis(ids, [labels[i] for i in ids])
    shape = (len(periods), len(ids))
    prices = np.full(shape, np.nan)
    quantities = np.full(shape, np.nan) if "quantity" in where.columns else None
    expenditures = np.full(shape, np.nan) if "expenditure" in where.columns else None
    for t, i, p, q, e in cells:
        prices[t, i] = p
        if quantities is not None and q is not None:
            quantities[t, i] = q
        if expenditures is not None and e is not None:
            expenditures[t, i] = e
    return PanelArrays(periods, axis, prices, quantities, expenditures)


Cell = tuple[int, int, float, "float | None", "float | None"]


def _read_records(rows: list[dict[str, Any]], numbers: list[int], where: CsvRows
                  ) -> tuple[dict[str, int], dict[str, int], dict[str, str | None], list[Cell]]:
    """Periods and items in order of appearance, each cell's place, and the cells."""
    period_pos: dict[str, int] = {}
    item_pos: dict[str, int] = {}
    labels: dict[str, str | None] = {}
    cells: list[Cell] = []
    current: str | None = None
    for k, row in enumerate(rows):
        record = numbers[k]
        period, item = row["period"], row["item"]
        if period != current:
            if period in period_pos:
                raise RequestProblem([FieldError(
                    f"#cell={record},{where.columns['period']}", f"period {period!r} appears "
                    f"again after period {current!r} began: rows must be grouped by period, in "
                    "time order")])
            period_pos[period] = len(period_pos)
            where.first[period_pos[period]] = record
            current = period
        if item not in item_pos:
            item_pos[item] = len(item_pos)
            where.item_first[item_pos[item]] = record
            labels[item] = row.get("label") or None
        t, i = period_pos[period], item_pos[item]
        if (t, i) in where.cells:
            raise RequestProblem([FieldError(f"#row={record}", f"period {period!r} and item "
                                             f"{item!r} were already given in row "
                                             f"{where.cells[(t, i)]}")])
        where.cells[(t, i)] = record
        cells.append((t, i, row["price"], row.get("quantity"), row.get("expenditure")))
    return period_pos, item_pos, labels, cells
