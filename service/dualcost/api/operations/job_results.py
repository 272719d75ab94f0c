"""A household job's results as the database keeps them: each chunk's result columns as the
bytes of one Arrow IPC stream (Apache Arrow's columnar format), written once per chunk and read
back into the same :class:`~dualcost.core.households.ChunkResult`, from which the answer's
writers (:class:`~.households.CsvAnswer`, :class:`~.households.ParquetAnswer`) give CSV or
Parquet. The floats are kept as they were computed (their bits), so an answer written again
from the stored columns is the answer the upload streamed, byte for byte.

A chunk's stream has one record batch: ``rows``, ``records``, ``weights``, ``expenditure``
and ``ids`` (null where the chunk has none), the regularity flags and each value column per
period (``irregular@<t>``, ``<name>@<t>``); the items of irregular household-periods, which
are few, are JSON in the schema's metadata.
"""

from __future__ import annotations

from typing import Any

import numpy as np
import orjson
import pyarrow as pa

from ...core.households import ChunkResult, ItemsAt

#: The metadata keys of a stored chunk.
_PERIODS, _VALUES, _ITEMS = b"periods", b"values", b"irregular_items"


def _optional(values: Any, kind: Any, n: int) -> Any:
    return pa.nulls(n, kind) if values is None else pa.array(values, type=kind)


def encode(result: ChunkResult, periods: int) -> bytes:
    """One chunk's result columns as the bytes of an Arrow IPC stream."""
    n = result.size
    names = list(result.values)
    columns: dict[str, Any] = {
        "rows": pa.array(result.rows, type=pa.int64()),
        "records": _optional(result.records, pa.int64(), n),
        "weights": pa.array(result.weights, type=pa.float64()),
        "expenditure": _optional(result.expenditure, pa.float64(), n),
        "ids": _optional(None if result.ids is None else list(result.ids), pa.string(), n),
    }
    flags = result.irregular_or_zeros(periods)
    for t in range(periods):
        columns[f"irregular@{t}"] = pa.array(flags[t], type=pa.uint32())
        for name in names:
            columns[f"{name}@{t}"] = pa.array(result.values[name][t], type=pa.float64())
    keys = list(result.irregular_items)
    metadata = {_PERIODS: str(periods).encode(), _VALUES: orjson.dumps(names),
                _ITEMS: orjson.dumps([[t, j, [int(i) for i in result.irregular_items[t, j]]]
                                      for t, j in keys])}
    batch = pa.RecordBatch.from_pydict(columns).replace_schema_metadata(metadata)
    sink = pa.BufferOutputStream()
    with pa.ipc.new_stream(sink, batch.schema) as writer:
        writer.write_batch(batch)
    return bytes(sink.getvalue())


def _numbers(column: Any) -> np.ndarray[Any, Any]:
    return np.asarray(column.to_numpy(zero_copy_only=False))


def _given(column: Any) -> np.ndarray[Any, Any] | None:
    """A column that is null throughout (the chunk has none) as None, else as numbers."""
    return None if len(column) and column.null_count == len(column) else _numbers(column)


def decode(data: bytes) -> ChunkResult:
    """The chunk result :func:`encode` stored (no problems or notices: those are in the job's
    document)."""
    with pa.ipc.open_stream(pa.py_buffer(data)) as reader:
        table = reader.read_all()
    meta = table.schema.metadata
    periods, names = int(meta[_PERIODS]), orjson.loads(meta[_VALUES])
    items: ItemsAt = {(t, j): tuple(at) for t, j, at in orjson.loads(meta[_ITEMS])}
    n = table.num_rows

    def matrix(prefix: str, kind: Any) -> np.ndarray[Any, Any]:
        out = np.empty((periods, n), dtype=kind)
        for t in range(periods):
            out[t] = _numbers(table.column(f"{prefix}@{t}"))
        return out

    ids = table.column("ids")
    flags = matrix("irregular", np.uint32)
    return ChunkResult(
        rows=_numbers(table.column("rows")).astype(np.int64, copy=False),
        ids=None if n and ids.null_count == n else tuple(ids.to_pylist()),
        weights=_numbers(table.column("weights")).astype(np.float64, copy=False),
        expenditure=_given(table.column("expenditure")),
        values={name: matrix(name, np.float64) for name in names}, problems=(),
        irregular=flags if flags.any() else None, irregular_items=items,
        records=_given(table.column("records")))
