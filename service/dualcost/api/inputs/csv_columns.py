"""A whole CSV table read by columns with Apache Arrow's reader (``pyarrow``), where it gives what
the reference reader of :func:`dualcost.api.inputs.csv.read_table` (Python's ``csv`` module, then
every numeric column checked by the number rule) gives.

Python's reader builds one list per record: 120,000 records (a panel of 1,000 items over 120
months) take it about twenty times as long as pyarrow takes for the whole table. pyarrow is
trusted where the household uploads trust it (:mod:`.columnar`, whose :class:`~.columnar.UploadScan`
decides): no quote in the upload, so every line is one record and a record's number is its
line's; no exponent below -299 and no decimal mark followed by twenty zeros (a number pyarrow
would read as 0 where the rule refuses it). Then the table must read without an error of
pyarrow's (a ragged record, a blank line, which pyarrow is told not to skip, a cell that is not
a number), every number finite and normal, no empty cell in a numeric column unless it is
optional (an empty optional cell is None, as in the reference reader) and no blank first cell
(a blank record, which the reference reader leaves out). Otherwise :func:`arrow_columns` says
None and the reference reader reads the whole table, naming every bad cell as before.
"""

from __future__ import annotations

import csv
import io
from collections.abc import Mapping
from typing import Any

import numpy as np
import pyarrow as pa
import pyarrow.csv as pacsv

from .columnar import UploadScan
from .json_text import SMALLEST_NORMAL


def arrow_columns(data: bytes, delimiter: str, width: int, numeric: Mapping[int, bool],
                  decimal_mark: str) -> list[list[Any]] | None:
    """The columns of a CSV table past its header row (``width`` columns): text stripped,
    numbers as floats, None where an optional numeric cell is empty; ``numeric`` maps each
    numeric column (from 0) to whether it is optional. None where the reference reader must
    read the table (see the module's notes)."""
    scan = UploadScan()
    scan.feed(data)
    if not scan.columnar or b"\x00" in data:
        return None
    names = [f"c{j}" for j in range(width)]
    types = {names[j]: pa.float64() if j in numeric else pa.string() for j in range(width)}
    try:
        table = pacsv.read_csv(
            io.BytesIO(data),
            read_options=pacsv.ReadOptions(skip_rows=1, column_names=names),
            parse_options=pacsv.ParseOptions(delimiter=delimiter, quote_char=False,
                                             ignore_empty_lines=False),
            convert_options=pacsv.ConvertOptions(column_types=types, decimal_point=decimal_mark,
                                                 null_values=[""], strings_can_be_null=False))
    except (pa.ArrowInvalid, OSError):
        return None
    columns: list[list[Any]] = []
    for j in range(width):
        column = table.column(j)
        values: list[Any] | None
        if j in numeric:
            values = _numbers(column, optional=numeric[j] and j > 0)
        else:
            values = _texts(column, blank_allowed=j > 0)
        if values is None:
            return None
        columns.append(values)
    return columns


def _numbers(column: Any, optional: bool) -> list[float | None] | None:
    """A numeric column's values (None where an optional cell is empty), or None when one is
    missing where it may not be, or is not finite and normal."""
    values = column.to_numpy(zero_copy_only=False)
    missing = None
    if column.null_count:
        if not optional:
            return None
        missing = column.is_null().to_numpy(zero_copy_only=False)
        values = np.where(missing, 1.0, values)
    if not np.isfinite(values).all() or bool(
            ((values != 0.0) & (np.abs(values) < SMALLEST_NORMAL)).any()):
        return None
    out: list[float | None] = values.tolist()
    if missing is not None:
        for k in np.flatnonzero(missing).tolist():
            out[k] = None
    return out


def _texts(column: Any, blank_allowed: bool) -> list[str] | None:
    """A text column, each cell stripped: each distinct text once (a panel's 120,000 cells
    hold 1,000 item ids), then spread back. None when a cell is blank where it may not be, or
    longer than the csv module reads."""
    encoded = column.combine_chunks().dictionary_encode()
    distinct = encoded.dictionary.to_pylist()
    if max(map(len, distinct), default=0) > csv.field_size_limit():
        return None  # the csv module refuses such a field
    words = [w.strip() for w in distinct]
    if not blank_allowed and not all(words):
        return None
    spread: list[str] = np.array(words, dtype=object)[encoded.indices.to_numpy()].tolist()
    return spread
