"""Long tables (series panels, fit budgets) and any table the page loads, from a Parquet upload
(``application/vnd.apache.parquet``), read by the Parquet reading of :mod:`.columnar`.

The columns are found by name, the same names as a CSV header's; the other columns of the file
are not read (as a CSV's other columns are not used). A numeric column must hold numbers
(integers, floats or decimals): a column of text is refused as a whole, ``#column=<name>``,
never parsed. A text column (period, item, label, observation) may hold text, integers, dates or
any other value with a text form. Places are named as in a household upload: ``#column=<name>``
for a whole column, ``#row=<row>&column=<name>`` for a cell, rows counted from 1 in the file's
order (a Parquet file has no header record). A cell is refused where a CSV cell would be: an
empty (null) cell of a required column, NaN, infinity, or a number beyond the floating-point
range; a null in an optional numeric column (quantity, expenditure, weight) is an empty cell.
A file that cannot be read is a problem naming the byte offset where its reading stopped, when
pyarrow tells it, and the file's size (:func:`.columnar.parquet_problem`).
"""

from __future__ import annotations

from collections.abc import Sequence
from typing import Any

import numpy as np
import pyarrow as pa
import pyarrow.compute as pc

from ..problems import FieldError, RequestProblem
from .columnar import numeric_type_errors, parquet_file, parquet_problem
from .csv import Dialect, Table
from .json_text import SMALLEST_NORMAL

#: The most problems one answer lists (as the CSV reader).
MOST = 20


def opened(data: bytes) -> Any:
    """The upload as a Parquet file (a problem saying where it breaks otherwise)."""
    return parquet_file(pa.BufferReader(data), len(data))


def read(pf: Any, names: Sequence[str], size: int) -> Any:
    """The columns ``names`` of the file as an Arrow table."""
    try:
        return pf.read(columns=list(names), use_threads=True)
    except (pa.ArrowInvalid, pa.ArrowException, OSError) as exc:
        raise parquet_problem(exc, size) from None


def _header_errors(names: Sequence[str], required: Sequence[str]) -> list[FieldError]:
    seen: set[str] = set()
    errors = []
    for name in names:
        if name in seen:
            errors.append(FieldError(f"#column={name}", f"column {name!r} appears twice"))
        seen.add(name)
    errors += [FieldError(f"#column={c}", f"the Parquet file has no column {c!r} (columns "
                          f"needed: {', '.join(required)})") for c in required if c not in seen]
    return errors


def _rows_limit(pf: Any, max_rows: int | None) -> None:
    rows = int(pf.metadata.num_rows)
    if max_rows is not None and rows > max_rows:
        raise RequestProblem.at(f"#row={max_rows + 1}", f"the Parquet file has {rows} rows, more "
                                f"than {max_rows}, the limit")


def parquet_table(data: bytes, *, required: Sequence[str], numeric: Sequence[str] = (),
                  optional_numeric: Sequence[str] = (), text: Sequence[str] = (),
                  max_rows: int | None = None) -> Table:
    """The columns of a Parquet upload that a long table uses, as the CSV reader gives them
    (:func:`.csv.read_table`): text stripped, numbers as floats, ``None`` where an optional
    number is empty; ``records`` are the rows, from 1. Errors name the column and row; all bad
    cells are reported, up to 20."""
    pf = opened(data)
    names = list(pf.schema_arrow.names)
    errors = _header_errors(names, required)
    errors += numeric_type_errors(pf.schema_arrow, [*numeric, *optional_numeric])
    if errors:
        raise RequestProblem(errors[:MOST])
    _rows_limit(pf, max_rows)
    wanted = [n for n in names if n in {*required, *numeric, *optional_numeric, *text}]
    table = read(pf, wanted, len(data))
    columns: dict[str, list[Any]] = {}
    for name in wanted:
        column = table.column(name)
        if name in numeric or name in optional_numeric:
            columns[name] = _numbers(column, name, name in optional_numeric, errors)
        else:
            columns[name] = _texts(column, name, name in required, errors)
    if errors:
        errors.sort(key=_order)
        raise RequestProblem(errors[:MOST])
    return Table(names, columns, list(range(1, table.num_rows + 1)), Dialect(), parquet=True)


def _order(error: FieldError) -> int:
    found = error.pointer.removeprefix("#row=").split("&")[0]
    return int(found) if found.isdigit() else 0


def _floats(column: Any) -> np.ndarray[Any, Any]:
    """A numeric column as floats, NaN where null."""
    if column.type != pa.float64():
        column = column.cast(pa.float64(), safe=False)
    return np.asarray(column.to_numpy(zero_copy_only=False), dtype=np.float64)


def _numbers(column: Any, name: str, optional: bool, errors: list[FieldError]) -> list[Any]:
    """A numeric column as floats, ``None`` for a null of an optional one; a problem for each
    cell that is empty (where required) or not a finite number in the floating-point range."""
    values = _floats(column)
    nulls = np.asarray(column.is_null().to_numpy(zero_copy_only=False), dtype=bool)
    bad = ~np.isfinite(values) | ((values != 0.0) & (np.abs(values) < SMALLEST_NORMAL))
    if optional:
        bad &= ~nulls
    for k in np.flatnonzero(bad)[:MOST].tolist():
        v = float(values[k])
        rule = ("is empty (null)" if nulls[k] else "is NaN, not a number" if np.isnan(v) else
                f"{v!r} is not a finite number in the floating-point range")
        errors.append(FieldError(f"#row={k + 1}&column={name}", f"column {name!r} {rule}"))
    out: list[Any] = values.tolist()
    for k in np.flatnonzero(nulls).tolist():
        out[k] = None
    return out


def _texts(column: Any, name: str, required: bool, errors: list[FieldError]) -> list[Any]:
    """A text column (any type with a text form) stripped; ``""`` where null. A type without
    one (binary, lists, structures) is refused as a whole."""
    try:
        texts = pc.utf8_trim_whitespace(column.cast(pa.string()))
    except (pa.ArrowInvalid, pa.ArrowNotImplementedError):
        errors.append(FieldError(f"#column={name}", f"column {name!r} holds {column.type}, which "
                                 "has no text form (give text, integers or dates)"))
        return [""] * len(column)
    out = [v or "" for v in texts.to_pylist()]
    if required:
        empty = [k for k, v in enumerate(out) if not v]
        errors += [FieldError(f"#row={k + 1}&column={name}", f"column {name!r} is empty")
                   for k in empty[:MOST]]
    return out


# -- any table, as the page loads it ------------------------------------------------------------


def cells(data: bytes, max_cells: int) -> tuple[list[str], list[list[Any]]]:
    """Every column of a Parquet upload, row by row: integers and floats as numbers (decimals
    as floats), booleans as booleans, any other value with a text form as text, null as
    ``None``. A float that is not finite is refused at its cell, a column without a text form
    as a whole; more than ``max_cells`` cells (rows times columns) is refused."""
    pf = opened(data)
    names = list(pf.schema_arrow.names)
    errors = _header_errors(names, ())
    if errors:
        raise RequestProblem(errors[:MOST])
    _rows_limit(pf, max_cells // max(1, len(names)))
    table = read(pf, names, len(data))
    columns = [_cells(table.column(j), name, errors) for j, name in enumerate(names)]
    if errors:
        errors.sort(key=_order)
        raise RequestProblem(errors[:MOST])
    return names, [list(row) for row in zip(*columns, strict=True)] if columns else []


def _cells(column: Any, name: str, errors: list[FieldError]) -> list[Any]:
    kind = column.type
    if pa.types.is_integer(kind) or pa.types.is_boolean(kind):
        return list(column.to_pylist())
    if pa.types.is_floating(kind) or pa.types.is_decimal(kind):
        return _numbers(column, name, True, errors)
    return _nullable_texts(column, name, errors)


def _nullable_texts(column: Any, name: str, errors: list[FieldError]) -> list[Any]:
    try:
        return list(column.cast(pa.string()).to_pylist())
    except (pa.ArrowInvalid, pa.ArrowNotImplementedError):
        errors.append(FieldError(f"#column={name}", f"column {name!r} holds {column.type}, which "
                                 "has no text form (give text, numbers or dates)"))
        return [None] * len(column)
