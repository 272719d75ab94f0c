"""A household job's results as the database keeps them (operations/job_results.py): each
chunk's columns as an Arrow IPC stream, read back into the same figures, bit for bit. The format
is Apache Arrow's columnar IPC format, written and read by pyarrow, its reference library."""

from __future__ import annotations

import numpy as np
import pyarrow as pa

from dualcost.api.operations.job_results import decode, encode
from dualcost.core.households import ChunkResult


def chunk(*, ids: bool, income: bool, records: bool, irregular: bool) -> ChunkResult:
    rng = np.random.default_rng(16)
    n, periods = 5, 2
    values = {name: rng.normal(1.0, 0.1, (periods, n)) for name in ("laspeyres", "konus")}
    values["konus"][1, 3] = np.nan  # a figure withheld
    values["laspeyres"][0, 0] = 5e-324  # the smallest subnormal, kept as it is
    flags = np.zeros((periods, n), dtype=np.uint32)
    flags[1, 3] = 4
    return ChunkResult(
        rows=np.arange(7, 7 + n, dtype=np.int64),
        ids=("a", None, "b,\n\"c\"", "", "e") if ids else None,
        weights=rng.uniform(0.5, 2.0, n), expenditure=rng.uniform(100, 900, n) if income
        else None, values=values, problems=(),
        irregular=flags if irregular else None,
        irregular_items={(1, 3): (0, 2)} if irregular else {},
        records=np.arange(9, 9 + n, dtype=np.int64) if records else None)


def same(a: ChunkResult, b: ChunkResult, periods: int) -> None:
    assert np.array_equal(a.rows, b.rows) and b.rows.dtype == np.int64
    assert a.ids == b.ids
    assert a.weights.tobytes() == b.weights.tobytes()
    assert (a.expenditure is None) == (b.expenditure is None)
    if a.expenditure is not None and b.expenditure is not None:
        assert a.expenditure.tobytes() == b.expenditure.tobytes()
    assert (a.records is None) == (b.records is None)
    if a.records is not None and b.records is not None:
        assert np.array_equal(a.records, b.records)
    assert list(a.values) == list(b.values)
    for name, v in a.values.items():
        assert v.tobytes() == b.values[name].tobytes(), name  # NaN and subnormals, bit for bit
    assert np.array_equal(a.irregular_or_zeros(periods), b.irregular_or_zeros(periods))
    assert a.irregular_items == b.irregular_items


def test_a_chunk_s_results_read_back_are_the_figures_stored_bit_for_bit() -> None:
    for ids in (True, False):
        for income in (True, False):
            for irregular in (True, False):
                original = chunk(ids=ids, income=income, records=ids, irregular=irregular)
                same(original, decode(encode(original, 2)), 2)


def test_a_stored_chunk_is_an_arrow_ipc_stream_with_a_column_per_figure_and_period() -> None:
    data = encode(chunk(ids=True, income=True, records=True, irregular=True), 2)
    with pa.ipc.open_stream(pa.py_buffer(data)) as reader:
        table = reader.read_all()
    assert table.num_rows == 5
    assert table.schema.names == ["rows", "records", "weights", "expenditure", "ids",
                                  "irregular@0", "laspeyres@0", "konus@0",
                                  "irregular@1", "laspeyres@1", "konus@1"]
    assert table.column("konus@1").to_pylist()[3] != table.column("konus@1").to_pylist()[3]
