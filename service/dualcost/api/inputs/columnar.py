"""Household uploads read by columns (Apache Arrow's ``pyarrow``): a CSV in the common case, and
Parquet files.

**CSV.** The row-by-row reader of :mod:`.households` (Python's ``csv`` module, every cell checked
by the one number rule) stays the reference; pyarrow's multi-threaded CSV reader gives the same
numbers some ten times as fast where it can be trusted to: when the upload holds no quote (so
every line is one record and a household's ``record`` is its row plus one), no exponent below
-299 and no decimal mark followed by twenty zeros (a number that may lie below the
floating-point range: pyarrow would read ``1e-400`` as 0, which the rule refuses; a subnormal it
reads is caught afterwards). :class:`UploadScan` looks for these while
the upload is spooled. Then each block pyarrow reads must have a number in every item, income
and weight cell, finite and normal; a block that has not (an empty or bad cell, ``nan``, a
ragged record, ``1e400``, a blank line, which keeps its row number in the reference reader:
pyarrow is told not to skip it, and refuses it), and any error of pyarrow's, hands the rest of
the upload, from that block's first row, to the reference reader, which names each bad cell
as before. The rows already given stay as they were: both readers give the same numbers and
the same row numbers.

**Parquet** (``application/vnd.apache.parquet``). The columns are found by name (the same names
as a CSV header's); item, ``expenditure`` and ``weight`` columns must hold numbers (integers,
floats or decimals), ``household`` anything written as text. Places in a Parquet file are named
``#column=<name>`` for a whole column and ``#row=<row>&column=<name>`` for a cell, rows counted
from 1 in the file's order (a Parquet file has no header record: a household's ``record`` is its
row). A file that cannot be read (not Parquet, cut short, a broken page) is a problem naming the
byte offset where its reading stopped, when pyarrow tells it, and the file's size.
"""

from __future__ import annotations

import re
from collections.abc import Callable, Iterator, Sequence
from dataclasses import dataclass
from typing import Any

import numpy as np
import pyarrow as pa
import pyarrow.compute as pc
import pyarrow.csv as pacsv
import pyarrow.parquet as pq

from ...core.errors import RowProblem
from ...core.households import HouseholdChunk
from ..problems import FieldError, RequestProblem
from .json_text import SMALLEST_NORMAL

#: A negative exponent of three digits or more (one below -299 may lie beyond floating point,
#: as inputs/csv.py's TINY_EXPONENT says); each pattern starts with a literal, which the regular
#: expression engine finds by a fast search.
_EXPONENTS = (re.compile(rb"e-0*([1-9]\d\d+)"), re.compile(rb"E-0*([1-9]\d\d+)"))
#: A decimal mark and 20 zeros: with an exponent of -299 or above, the only way for a number to
#: come near the end of the floating-point range (0.0000000000000000000001e-299 is 1e-321).
_ZEROS = (b"." + b"0" * 20, b"," + b"0" * 20)
#: Bytes pyarrow reads of a CSV at a time (a block's rows are then cut into the job's chunks).
BLOCK_BYTES = 4 << 20


@dataclass
class UploadScan:
    """What a CSV upload's bytes hold that only the reference reader reads by the service's
    rules; fed every piece of the upload as it arrives (a few C-level searches a piece, a
    tenth of a second for 43 MB here). A blank line needs no search: pyarrow is told not to
    skip it, and refuses it as a short record, which hands the rest to the reference reader."""

    quotes: bool = False
    tiny_numbers: bool = False
    tail: bytes = b""

    def feed(self, piece: bytes) -> None:
        text = self.tail + piece  # a pattern may straddle two pieces
        self.quotes = self.quotes or b'"' in piece
        self.tiny_numbers = self.tiny_numbers or _ZEROS[0] in text or _ZEROS[1] in text or any(
            int(found.group(1)) >= 300 for pattern in _EXPONENTS
            for found in pattern.finditer(text))
        self.tail = text[-24:]

    @property
    def columnar(self) -> bool:
        """Whether pyarrow may read the upload (block by block, still checked)."""
        return not (self.quotes or self.tiny_numbers)


@dataclass(frozen=True)
class Columns:
    """Where a household upload's columns are (numbered from 0) and what they are."""

    items: list[int]
    id_column: int | None
    expenditure_column: int | None
    weight_column: int | None


class _NotColumnar(Exception):
    """A block the columnar reader does not read by the rules: the reference reader takes it."""


def _all_numbers(batch: Any, columns: Sequence[int]) -> bool:
    return all(batch.column(j).null_count == 0 for j in columns)


def _normal(values: np.ndarray[Any, Any]) -> bool:
    """Every value finite and, if nonzero, not below the floating-point range."""
    if not np.isfinite(values).all():
        return False
    tiny = (values != 0.0) & (np.abs(values) < SMALLEST_NORMAL)
    return not bool(tiny.any())


def _ids(batch: Any, column: int | None) -> tuple[str | None, ...] | None:
    """The household ids as text, stripped; empty ones None (as the reference reader)."""
    if column is None:
        return None
    values = batch.column(column)
    if values.type != pa.string():
        values = values.cast(pa.string())
    return tuple(v or None for v in pc.utf8_trim_whitespace(values).to_pylist())


def csv_blocks(file: Any, columns: Columns, width: int, delimiter: str, decimal_mark: str,
               *, first_row: int = 1) -> Iterator[HouseholdChunk]:
    """Blocks of a CSV upload (past its header) read by pyarrow, as household chunks whose
    ``rows`` start at ``first_row``; :class:`_NotColumnar` (with the rows given so far) at the
    first block that is not read by the rules."""
    names = [f"c{j}" for j in range(width)]
    numeric = columns.items + [j for j in (columns.expenditure_column, columns.weight_column)
                               if j is not None]
    wanted = sorted({*numeric, *([] if columns.id_column is None else [columns.id_column])})
    types = {names[j]: pa.string() if j == columns.id_column else pa.float64() for j in wanted}
    include = [names[j] for j in wanted]
    at = {j: k for k, j in enumerate(wanted)}  # file column -> column of the batches
    try:
        reader = pacsv.open_csv(
            file, read_options=pacsv.ReadOptions(skip_rows=1, column_names=names,
                                                 block_size=BLOCK_BYTES),
            parse_options=pacsv.ParseOptions(delimiter=delimiter, quote_char=False,
                                             ignore_empty_lines=False),
            convert_options=pacsv.ConvertOptions(column_types=types, include_columns=include,
                                                 decimal_point=decimal_mark,
                                                 strings_can_be_null=False))
    except (pa.ArrowInvalid, OSError):
        raise _NotColumnar from None
    row = first_row
    while True:
        try:
            batch = reader.read_next_batch()
        except StopIteration:
            return
        except (pa.ArrowInvalid, OSError):
            raise _NotColumnar from None
        shares = _shares(batch, [at[j] for j in columns.items])
        extra = {name: None if j is None else np.array(batch.column(at[j]).to_numpy(
                     zero_copy_only=False), dtype=np.float64)  # a copy: the core may write
                 for name, j in (("expenditure", columns.expenditure_column),
                                 ("weight", columns.weight_column))}
        if not _all_numbers(batch, [at[j] for j in numeric]) or not _normal(shares) or not all(
                _normal(v) for v in extra.values() if v is not None):
            raise _NotColumnar
        rows = np.arange(row, row + batch.num_rows, dtype=np.int64)
        yield HouseholdChunk(
            rows=rows, shares=shares,
            expenditure=extra["expenditure"], weights=extra["weight"],
            ids=_ids(batch, None if columns.id_column is None else at[columns.id_column]),
            records=rows + 1)
        row += batch.num_rows


def rechunked(blocks: Iterator[HouseholdChunk], chunk_rows: int) -> Iterator[HouseholdChunk]:
    """Household chunks of ``chunk_rows`` rows (the last may be shorter) from blocks of any
    size; a block is cut, never copied whole again."""
    for block in blocks:
        n = block.rows.size
        for start in range(0, n, chunk_rows):
            yield _cut(block, slice(start, min(n, start + chunk_rows)))


def _cut(block: HouseholdChunk, part: slice) -> HouseholdChunk:
    if part.start == 0 and part.stop == block.rows.size:
        return block
    rows = block.rows[part]
    low, high = (int(rows[0]), int(rows[-1])) if rows.size else (0, -1)
    return HouseholdChunk(
        rows=rows, shares=block.shares[part],
        expenditure=None if block.expenditure is None else block.expenditure[part],
        weights=None if block.weights is None else block.weights[part],
        ids=None if block.ids is None else block.ids[part],
        problems=tuple(p for p in block.problems if low <= p.row <= high),
        records=None if block.records is None else block.records[part])


def csv_household_chunks(file: Any, columns: Columns, width: int, delimiter: str,
                         decimal_mark: str, chunk_rows: int,
                         reference: Callable[[int], Iterator[HouseholdChunk]],
                         progress: Callable[[int], Any] | None = None
                         ) -> Iterator[HouseholdChunk]:
    """The chunks of a CSV upload: pyarrow's blocks while they keep the rules, then
    ``reference(rows_done)``, the reference reader from the row after ``rows_done``."""
    done = 0
    try:
        for chunk in rechunked(csv_blocks(file, columns, width, delimiter, decimal_mark),
                               chunk_rows):
            done += chunk.rows.size
            if progress is not None:
                progress(chunk.rows.size)
            yield chunk
    except _NotColumnar:
        yield from reference(done)


# -- Parquet ------------------------------------------------------------------------------------


def parquet_file(file: Any, size: int) -> Any:
    """The upload as a Parquet file; a file that cannot be read is a problem saying where."""
    try:
        return pq.ParquetFile(file)
    except (pa.ArrowInvalid, pa.ArrowException, OSError) as exc:
        raise parquet_problem(exc, size) from None


def parquet_problem(exc: Exception, size: int) -> RequestProblem:
    """A Parquet file's reading stopped: the byte offset pyarrow names, if any, and the size."""
    text = str(exc).splitlines()[0] if str(exc) else type(exc).__name__
    found = re.search(r"(?:offset|position)[^0-9]{0,12}(\d+)", text)
    where = f" at byte {found.group(1)}" if found else ""
    return RequestProblem.at("", f"the Parquet file cannot be read{where} (the upload is {size} "
                             f"bytes; a Parquet file ends with its footer and 'PAR1'): {text}")


_NUMERIC = (pa.types.is_integer, pa.types.is_floating, pa.types.is_decimal)


def numeric_type_errors(schema: Any, names: Sequence[str]) -> list[FieldError]:
    """A problem for each of the columns ``names`` that the file has and that does not hold
    numbers (``#column=<name>``)."""
    errors = []
    for name in names:
        j = schema.get_field_index(name) if name in schema.names else -1
        if j >= 0:
            kind = schema.field(j).type
            if not any(test(kind) for test in _NUMERIC):
                errors.append(FieldError(f"#column={name}", f"column {name!r} holds {kind}, not "
                                         "numbers (give integers, floats or decimals)"))
    return errors


def parquet_columns(schema: Any, item_ids: Sequence[str], *, needs_income: bool,
                    reserved: tuple[str, str, str]) -> tuple[Columns, list[str]]:
    """The columns of a household Parquet file by name, and the names not used; a missing
    column, or one that does not hold numbers, is a problem naming it (``#column=<name>``)."""
    id_name, income_name, weight_name = reserved
    names = list(schema.names)
    seen: dict[str, int] = {}
    errors = []
    for j, name in enumerate(names):
        if name in seen:
            errors.append(FieldError(f"#column={name}", f"column {name!r} appears twice"))
        seen[name] = j
    wanted = list(item_ids) + ([income_name] if needs_income else [])
    errors += [FieldError(f"#column={name}", f"the Parquet file has no column {name!r}" + (
        ": give one column per item holding each household's base share" if name != income_name
        else ": this model is not homothetic and needs each household's income"))
        for name in wanted if name not in seen][:20]
    errors += numeric_type_errors(schema, [*item_ids, income_name, weight_name])
    if errors:
        raise RequestProblem(errors[:20])
    used = set(item_ids) | set(reserved)
    return Columns(items=[seen[i] for i in item_ids], id_column=seen.get(id_name),
                   expenditure_column=seen.get(income_name),
                   weight_column=seen.get(weight_name)), [n for n in names if n not in used]


def parquet_chunks(pf: Any, columns: Columns, chunk_rows: int, size: int,
                   progress: Callable[[int], Any] | None = None) -> Iterator[HouseholdChunk]:
    """Household chunks of a Parquet file, ``chunk_rows`` at a time, rows from 1; an empty or
    bad cell (null, NaN, infinity, beyond the floating-point range) refuses its row, named by
    row and column as a CSV cell would be."""
    wanted = sorted({*columns.items, *(j for j in (columns.id_column,
                                                   columns.expenditure_column,
                                                   columns.weight_column) if j is not None)})
    schema_names = pf.schema_arrow.names
    names = [schema_names[j] for j in wanted]
    at = {j: k for k, j in enumerate(wanted)}
    row = 1
    for group in range(pf.num_row_groups):
        # A row group at a time, read by Arrow's threads and let go before the next: memory
        # follows the file's row groups, not its length (pyarrow's batch iterator kept more).
        try:
            table = pf.read_row_group(group, columns=names, use_threads=True)
        except (pa.ArrowInvalid, pa.ArrowException, OSError) as exc:
            raise parquet_problem(exc, size) from None
        for batch in table.to_batches(max_chunksize=chunk_rows):
            chunk = _parquet_chunk(batch, columns, at, row)
            row += batch.num_rows
            if progress is not None:  # read before it is done: rows read >= households done
                progress(batch.num_rows)
            yield chunk
        del table


def _column(batch: Any, k: int) -> np.ndarray[Any, Any]:
    """A numeric column as floats, NaN where it is null (read-only where it is the file's)."""
    column = batch.column(k)
    if column.type != pa.float64():
        column = column.cast(pa.float64(), safe=False)
    return np.asarray(column.to_numpy(zero_copy_only=False), dtype=np.float64)


def _shares(batch: Any, columns: Sequence[int]) -> np.ndarray[Any, Any]:
    """The item columns of a batch as a (rows, items) matrix, NaN where null, in one conversion
    by Arrow (about four times as fast as column by column); chosen by Arrow too, in one call
    (twice as fast again as one Python call per column), when every one holds float64."""
    if not columns or batch.num_rows == 0:
        return np.empty((batch.num_rows, len(columns)), dtype=np.float64)
    chosen = batch.select(list(columns))
    if any(kind != pa.float64() for kind in chosen.schema.types):
        arrays = [a if a.type == pa.float64() else a.cast(pa.float64(), safe=False)
                  for a in chosen.columns]
        chosen = pa.RecordBatch.from_arrays(arrays, names=[f"i{k}" for k in range(len(arrays))])
    return np.asarray(chosen.to_tensor(null_to_nan=True, row_major=True))


def _parquet_chunk(batch: Any, columns: Columns, at: dict[int, int], row: int) -> HouseholdChunk:
    shares = _shares(batch, [at[j] for j in columns.items])
    rows = np.arange(row, row + batch.num_rows, dtype=np.int64)
    income = None if columns.expenditure_column is None else np.array(_column(
        batch, at[columns.expenditure_column]))  # copies: a refused row's cell is replaced
    weight = None if columns.weight_column is None else np.array(
        _column(batch, at[columns.weight_column]))
    problems = list(cell_problems(rows, shares, "shares"))
    for name, values in (("expenditure", income), ("weight", weight)):
        if values is not None:
            found = cell_problems(rows, values[:, None], name)
            problems += [RowProblem(p.row, name, p.rule, p.code) for p in found]
            values[~np.isfinite(values)] = 1.0  # the row is refused; any number holds its place
    return HouseholdChunk(
        rows=rows, shares=shares, expenditure=income, weights=weight,
        ids=None if columns.id_column is None else _ids(batch, at[columns.id_column]),
        problems=tuple(problems), records=rows.copy())


def cell_problems(rows: np.ndarray[Any, Any], values: np.ndarray[Any, Any],
                  field: str) -> Iterator[RowProblem]:
    """A refused row for each row of ``values`` with a cell that is empty (NaN), infinite or
    below the floating-point range: the first such cell, by its column."""
    bad = ~np.isfinite(values) | ((values != 0.0) & (np.abs(values) < SMALLEST_NORMAL))
    for k in map(int, np.flatnonzero(bad.any(axis=1))):
        i = int(np.argmax(bad[k]))
        v = float(values[k, i])
        rule = ("is empty (null or NaN)" if np.isnan(v) else
                f"{v!r} is not a finite number in the floating-point range")
        yield RowProblem(int(rows[k]), field, rule, "not_a_number", i if field == "shares"
                         else None)
