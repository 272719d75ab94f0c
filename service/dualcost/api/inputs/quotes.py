"""Price quotes uploaded as a long CSV table (POST /v1/index-tree/csv): one record per quote and
period, ``quote,aggregate,period,price`` and optionally ``item``, ``outlet`` and ``unit``, read in
the declared or detected dialect of every CSV upload (:mod:`dualcost.api.inputs.csv`).

The records may come in any order (by quote, or by period). The periods are put in time order
when every label is a date of one form (``2025-01``, ``2025-Q1``, ``2025``); otherwise in the
order they first appear, and the answer says so. A quote missing in a period is not priced there
(as ``null`` in the JSON form). Each rule is checked at its cell (``#cell=row,column``): a
price that is not positive, a quote priced twice in one period, a quote whose aggregate, item,
outlet or unit differs from its first record, text longer than the JSON form allows.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Any

from ...core.series_panel import read_label
from ..problems import FieldError, RequestProblem
from .csv import DeclaredDialect, Dialect, Table, read_table
from .locator import CsvRows, Locator

COLUMNS = ("quote", "aggregate", "period", "price")
DESCRIBED = ("item", "outlet", "unit")
#: The longest text of each column, as the JSON form's fields allow.
LENGTHS = {"quote": 200, "aggregate": 200, "period": 200, "item": 300, "outlet": 300,
           "unit": 100}


@dataclass(frozen=True)
class QuoteTable:
    """The upload as the JSON form's ``periods`` and ``quotes``, how it was read, and what was
    decided about the order of the periods (a sentence, or None)."""

    periods: list[str]
    quotes: list[dict[str, Any]]
    dialect: Dialect
    period_order: str | None


def quotes_from_csv(text: str, loc: Locator, *, max_rows: int,
                    declared: DeclaredDialect | None = None) -> QuoteTable:
    """The quotes of a long CSV table, each rule checked at its cell; ``loc`` learns where each
    quote's first record is (an error about a quote points there)."""
    table = read_table(text, required=COLUMNS, numeric=("price",), max_rows=max_rows,
                       declared=declared)
    if not len(table):
        raise RequestProblem([FieldError("#row=2", "the CSV has a header but no rows")])
    column = {h: j + 1 for j, h in enumerate(table.header)}
    _check_text(table, column)
    periods, order = _periods(table.columns["period"])
    position = {p: t for t, p in enumerate(periods)}
    quotes: dict[str, dict[str, Any]] = {}
    first: dict[int, int] = {}
    errors: list[FieldError] = []
    for row, record in zip(table.rows(), table.records, strict=True):
        q = quotes.get(row["quote"])
        if q is None:
            first[len(quotes)] = record
            q = quotes[row["quote"]] = {"id": row["quote"], "aggregate": row["aggregate"],
                                        "prices": [None] * len(periods)}
            q |= {c: row[c] or None for c in DESCRIBED if c in row}
            q["_first"] = record
        errors += _row_errors(row, record, q, position, column)
        if len(errors) >= 20:
            break
    if errors:
        raise RequestProblem(errors[:20])
    loc.csv = CsvRows(columns={"aggregate": column["aggregate"]}, first=first)
    out = [{k: v for k, v in q.items() if k != "_first"} for q in quotes.values()]
    return QuoteTable(periods, out, table.dialect, order)


def _check_text(table: Table, column: dict[str, int]) -> None:
    errors = []
    for name, longest in LENGTHS.items():
        for value, record in zip(table.columns.get(name, ()), table.records, strict=False):
            if len(value) > longest:
                errors.append(FieldError(f"#cell={record},{column[name]}", f"column {name!r} "
                                         f"has {len(value)} characters; at most {longest}"))
    if errors:
        raise RequestProblem(errors[:20])


def _periods(labels: list[str]) -> tuple[list[str], str | None]:
    """The distinct period labels in time order (dates of one form), else as they appear."""
    seen = list(dict.fromkeys(labels))
    read = [read_label(p) for p in seen]
    forms = {r[0] for r in read if r is not None}
    ordinal = {p: r[1] for p, r in zip(seen, read, strict=True) if r is not None}
    if len(ordinal) == len(seen) and len(forms) == 1 and forms != {"integer"}:
        return sorted(seen, key=ordinal.__getitem__), None
    return seen, ("The period labels are not all dates of one form: the periods are taken in "
                  "the order they first appear in the CSV.")


def _row_errors(row: dict[str, Any], record: int, q: dict[str, Any], position: dict[str, int],
                column: dict[str, int]) -> list[FieldError]:
    """A record's rules: a positive price, once per quote and period, the quote's description
    as in its first record."""
    out = []
    t = position[row["period"]]
    if not row["price"] > 0.0:
        out.append(FieldError(f"#cell={record},{column['price']}", f"quote {row['quote']!r} has "
                              f"price {row['price']:g} in {row['period']!r}; a price must be "
                              "positive"))
    elif q["prices"][t] is not None:
        out.append(FieldError(f"#cell={record},{column['period']}", f"quote {row['quote']!r} is "
                              f"priced twice in {row['period']!r}; give one price per quote and "
                              "period"))
    else:
        q["prices"][t] = row["price"]
    for name in ("aggregate", *DESCRIBED):
        if name in row and (row[name] or None) != q.get(name):
            out.append(FieldError(f"#cell={record},{column[name]}", f"quote {row['quote']!r} "
                                  f"has {name} {row[name]!r} here but {q.get(name)!r} in row "
                                  f"{q['_first']}; a quote's {name} is the same in every row"))
    return out


__all__ = ["COLUMNS", "QuoteTable", "quotes_from_csv"]
