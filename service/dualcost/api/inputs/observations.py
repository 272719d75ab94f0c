"""Budget data for a model fit: T observations of the same n items, from a JSON body or a CSV
upload in long form.

JSON: one row of ``prices`` per observation, and one of ``shares`` (with ``total_expenditure`` per
observation), ``expenditures`` (money spent on each item) or ``quantities``; ``weights`` per
observation are optional; rows are objects keyed by item id or lists in the order of ``items``,
and every observation has every item. CSV: one record per observation and item (see
:data:`CSV_DESCRIPTION`). The locator learns where every value came from.
"""

from __future__ import annotations

import io
from collections.abc import Sequence
from dataclasses import dataclass, replace
from typing import Any

import numpy as np
from numpy.typing import NDArray

from ..problems import FieldError, RequestProblem
from .csv import (
    SEPARATORS,
    DeclaredDialect,
    Dialect,
    Table,
    read_table,
    records_of,
    separator_of,
)
from .items import ItemAxis
from .locator import CsvRows, Locator, Place

Array = NDArray[np.float64]

CSV_DESCRIPTION = (
    "The body is `text/csv` in long form, one row per observation and item, rows in any order, "
    "with columns: `observation` (a household id) and/or `period` (an observation is one "
    "household in one period, or one period), `item`, `price`, and the spending as one of: "
    "`share` with `total_expenditure` (the observation's total, repeated on its rows), "
    "`expenditure` (money spent on the item), or `quantity`; optionally `weight` (the "
    "observation's survey weight, repeated on its rows) and `label` (the item's name). Every "
    "observation must list the same items as the first. Fields may be quoted (RFC 4180); "
    "fields separated by `,`, `;` or a tab and numbers with `.` or `,` as decimal mark, declared "
    "by `separator` and `decimal` or detected (stated in `notices`, code "
    "`csv_dialect_detected`); no grouping of thousands. Errors name the row and column "
    "(`#cell=row,column`, RFC 7111)."
)
PARQUET_DESCRIPTION = (
    "The same columns may come as a Parquet file (Content-Type "
    "`application/vnd.apache.parquet`), found by name: `price`, the spending column, "
    "`total_expenditure` and `weight` hold numbers (integers, floats or decimals), the others "
    "text (or integers, dates); a null `weight` is an empty cell. Errors name the column "
    "(`#column=price`) or the cell (`#row=3&column=price`, rows from 1), or the byte where a "
    "file that cannot be read breaks."
)
#: The spending a request gives: its JSON field, its CSV column, and the total's field and column.
SPENDING = {
    "shares": ("shares", "share", "total_expenditure", "total_expenditure"),
    "expenditures": ("expenditures", "expenditure", "expenditures", "expenditure"),
    "quantities": ("quantities", "quantity", "quantities", "quantity"),
}


@dataclass
class Observations:
    """The data in arrays, before the core's checks: ``shares`` with ``total``, or ``spending``
    (money per item)."""

    axis: ItemAxis
    labels: list[str]
    prices: Array
    shares: Array | None
    total: Array | None
    spending: Array | None
    weights: Array | None
    #: How a CSV upload was read (None for JSON).
    dialect: Dialect | None = None


def bind(loc: Locator, kind: str) -> None:
    """The places of the data's core arguments, once the kind of spending is known."""
    field, column, total_field, total_column = SPENDING[kind]
    loc.add("prices", Place("/prices", shape="panel", column="price", names_item=True))
    loc.add("shares", Place(f"/{field}", shape="panel", column=column, names_item=True))
    loc.add("expenditure", Place(f"/{total_field}", shape="list", column=total_column))
    loc.add("weights", Place("/weights", shape="list", column="weight"))
    loc.add("items", Place("/items", shape="list", column="item", names_item=True))
    loc.add("observations", Place("/prices", column="#row=1"))


def _json_rows(values: list[Any], name: str, axis: ItemAxis, n_obs: int, loc: Locator) -> Array:
    """Rows in item order; every row must have every item (the items may not change)."""
    if len(values) != n_obs:
        raise RequestProblem.at(f"/{name}", f"has {len(values)} rows but prices has {n_obs}: give "
                                "one row per observation")
    n = len(axis)
    out = np.empty((n_obs, n))
    for t, row in enumerate(values):
        where = f"/{name}/{t}"
        if isinstance(row, list):
            if len(row) != n:
                raise RequestProblem.at(where, f"has {len(row)} values but there are {n} items: "
                                        "every observation must have every item, in the order "
                                        "of items")
            out[t] = row
            continue
        unknown = [k for k in row if k not in axis.position]
        if unknown:
            raise RequestProblem.at(f"{where}/{unknown[0].replace('~', '~0').replace('/', '~1')}",
                                    f"{unknown[0]!r} is not an item id listed in items: every "
                                    "observation must have the same items")
        missing = [i for i in axis.ids if i not in row]
        if missing:
            shown = ", ".join(repr(m) for m in missing[:5]) + (" ..." if len(missing) > 5 else "")
            raise RequestProblem.at(where, f"has no value for item(s) {shown}: every observation "
                                    "must have every item (the items may not change between "
                                    "observations)")
        out[t] = [row[i] for i in axis.ids]
    return out


def from_json(request: Any, loc: Locator) -> Observations:
    """The data of a fit request (``FitRequest``)."""
    axis = ItemAxis.from_request(request.items, loc)
    n_obs = len(request.prices)
    labels = _labels(request.observations, n_obs)
    kind = ("shares" if request.shares is not None else
            "expenditures" if request.expenditures is not None else "quantities")
    bind(loc, kind)
    loc.given("prices", request.prices)
    prices = _json_rows(request.prices, "prices", axis, n_obs, loc)
    raw = getattr(request, kind)
    loc.given("shares", raw)
    values = _json_rows(raw, kind, axis, n_obs, loc)
    for name, vector in (("total_expenditure", request.total_expenditure),
                         ("weights", request.weights)):
        if vector is not None and len(vector) != n_obs:
            raise RequestProblem.at(f"/{name}", f"has {len(vector)} values but there are "
                                    f"{n_obs} observations: give one per observation")
    total = None if request.total_expenditure is None else np.asarray(request.total_expenditure,
                                                                      dtype=np.float64)
    weights = None if request.weights is None else np.asarray(request.weights, dtype=np.float64)
    if kind == "shares":
        return Observations(axis, labels, prices, values, total, None, weights)
    spending = values if kind == "expenditures" else values * prices
    return Observations(axis, labels, prices, None, None, spending, weights)


def _labels(given: Sequence[str | int] | None, n_obs: int) -> list[str]:
    if given is None:
        return [str(t + 1) for t in range(n_obs)]
    if len(given) != n_obs:
        raise RequestProblem.at("/observations", f"has {len(given)} labels but there are {n_obs} "
                                "rows of prices: give one label per observation")
    labels = [str(v) for v in given]
    seen: dict[str, int] = {}
    for t, label in enumerate(labels):
        if label in seen:
            raise RequestProblem.at(f"/observations/{t}", f"observation {label!r} is listed twice "
                                    f"(first at position {seen[label]})")
        seen[label] = t
    return labels


def _csv_kind(where: CsvRows) -> tuple[list[str], str]:
    columns = where.columns
    keys: list[str] = [c for c in ("observation", "period") if c in columns]
    if not keys:
        raise RequestProblem.at(where.header(), "the upload needs a column 'observation' (a "
                                "household id) or 'period', or both")
    kinds: list[str] = [c for c in ("share", "expenditure", "quantity") if c in columns]
    if len(kinds) != 1:
        raise RequestProblem.at(where.header(), "the upload needs exactly one spending column: "
                                "'share' (with 'total_expenditure'), 'expenditure' or "
                                f"'quantity'; it has {', '.join(kinds) or 'none'}")
    return keys, kinds[0]


def _columns(header: list[str], loc: Locator, *, parquet: bool = False
             ) -> tuple[CsvRows, list[str], str, list[str]]:
    """Where the upload's columns are; its key columns, its spending column and its numeric
    columns (the locator bound to the kind of spending)."""
    where = CsvRows(columns={h: j + 1 for j, h in enumerate(header)}, default_record=1,
                    whole_column=True, parquet=parquet)
    loc.csv = where
    keys, column = _csv_kind(where)
    bind(loc, {"share": "shares", "expenditure": "expenditures", "quantity": "quantities"}[column])
    numeric = ["price", column] + (["total_expenditure"] if column == "share" else [])
    return where, keys, column, numeric


def from_csv(text: str, loc: Locator, *, max_rows: int,
             declared: DeclaredDialect | None = None) -> Observations:
    """Long form (:data:`CSV_DESCRIPTION`); items in the order the first observation lists
    them, observations in order of first appearance. The dialect is as declared, or detected
    (:mod:`dualcost.api.inputs.csv`)."""
    declared = (declared or DeclaredDialect()).checked()
    text = text.lstrip("\ufeff")
    where, keys, column, numeric = _columns(_header_names(text, declared), loc)
    table = read_table(text, required=keys + ["item"] + numeric, numeric=numeric,
                       optional_numeric=["weight"], max_rows=max_rows, declared=declared)
    return replace(_from_table(table, where, keys, column, loc), dialect=table.dialect)


def from_parquet(data: bytes, loc: Locator, *, max_rows: int) -> Observations:
    """The long form of :func:`from_csv` as a Parquet file: the same columns, by name
    (:mod:`dualcost.api.inputs.parquet_tables`)."""
    from .parquet_tables import opened, parquet_table  # pyarrow only for Parquet uploads

    header = list(opened(data).schema_arrow.names)
    where, keys, column, numeric = _columns(header, loc, parquet=True)
    table = parquet_table(data, required=keys + ["item"] + numeric, numeric=numeric,
                          optional_numeric=["weight"], text=["label"], max_rows=max_rows)
    return _from_table(table, where, keys, column, loc)


def _from_table(table: Table, where: CsvRows, keys: list[str], column: str,
                loc: Locator) -> Observations:
    if not len(table):
        raise RequestProblem.at(where.at(2 - table.parquet), "the upload has column names but "
                                "no rows")
    csv_table = _CsvTable(keys, column, where)
    for record, row in zip(table.records, table.rows(), strict=True):
        csv_table.add(row, record)
        if len(csv_table.errors) >= 20:
            break
    if csv_table.errors:
        raise RequestProblem(csv_table.errors)
    return csv_table.observations(loc)


def _header_names(text: str, declared: DeclaredDialect) -> list[str]:
    """The header's column names, read in the declared or detected separator."""
    first = text.split("\n", 1)[0]
    separator, _ = separator_of(first, declared)
    cells = next(records_of(io.StringIO(text), SEPARATORS[separator]), [])
    return [h.strip() for h in cells]


class _CsvTable:
    """The records of a fit upload, gathered by observation and item."""

    def __init__(self, keys: list[str], column: str, where: CsvRows) -> None:
        self.keys, self.column, self.where = keys, column, where
        self.obs: dict[tuple[str, ...], int] = {}
        self.items: dict[str, int] = {}
        self.labels: dict[str, str | None] = {}
        self.per_obs: dict[str, dict[int, tuple[float, int]]] = {"total_expenditure": {},
                                                                 "weight": {}}
        self.cells: list[tuple[int, int, float, float]] = []
        self.errors: list[FieldError] = []

    def add(self, row: dict[str, Any], record: int) -> None:
        key = tuple(row[c] for c in self.keys)
        if key not in self.obs:
            self.obs[key] = len(self.obs)
            self.where.first[self.obs[key]] = record
        t, item = self.obs[key], row["item"]
        if item not in self.items:
            if t != 0:
                self._stop(FieldError(self.where.at(record, "item"), f"item "
                                      f"{item!r} is not among the items of the first observation: "
                                      "every observation must list the same items"))
                return
            self.items[item] = len(self.items)
            self.where.item_first[self.items[item]] = record
            self.labels[item] = row.get("label") or None
        i = self.items[item]
        if (t, i) in self.where.cells:
            self._stop(FieldError(self.where.at(record), f"observation {' '.join(key)!r} lists item "
                                  f"{item!r} twice (rows {self.where.cells[(t, i)]} and {record})"))
            return
        self.where.cells[(t, i)] = record
        self._per_observation(row, t, record)
        self.cells.append((t, i, row["price"], row[self.column]))

    def _stop(self, error: FieldError) -> None:
        self.errors.append(error)
        raise RequestProblem(self.errors)

    def _per_observation(self, row: dict[str, Any], t: int, record: int) -> None:
        for name in ("total_expenditure", "weight"):
            if name not in self.where.columns:
                continue
            value = row[name]
            at = self.where.at(record, name)
            if value is None:
                self.errors.append(FieldError(at, f"column {name!r} is empty"))
                continue
            seen = self.per_obs[name].setdefault(t, (value, record))
            if seen[0] != value:
                self.errors.append(FieldError(at, f"column {name!r} is "
                                              f"{value!r} here but {seen[0]!r} on row {seen[1]}: "
                                              "it is one number per observation"))

    def observations(self, loc: Locator) -> Observations:
        n_obs, n = len(self.obs), len(self.items)
        for key, t in self.obs.items():
            missing = [it for it, i in self.items.items() if (t, i) not in self.where.cells]
            if missing:
                raise RequestProblem.at(self.where.at(self.where.first[t]), f"observation "
                                        f"{' '.join(key)!r} has no row for item(s) "
                                        f"{', '.join(map(repr, missing[:5]))}: every observation "
                                        "must list the same items")
        ids = list(self.items)
        axis = ItemAxis(ids, [self.labels[i] for i in ids])
        loc.items = ids
        prices, values = np.empty((n_obs, n)), np.empty((n_obs, n))
        for t, i, p, v in self.cells:
            prices[t, i], values[t, i] = p, v
        labels = [" ".join(k) for k in self.obs]
        weights = (np.array([self.per_obs["weight"][t][0] for t in range(n_obs)])
                   if "weight" in self.where.columns else None)
        if self.column == "share":
            total = np.array([self.per_obs["total_expenditure"][t][0] for t in range(n_obs)])
            return Observations(axis, labels, prices, values, total, None, weights)
        spending = values if self.column == "expenditure" else values * prices
        return Observations(axis, labels, prices, None, None, spending, weights)
