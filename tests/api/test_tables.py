"""POST /v1/tables (readTable): an uploaded table, CSV or Parquet, answered as its cells. The
Parquet files are written and read back by pyarrow, the format's reference library."""

from __future__ import annotations

import csv
import datetime
import io
from typing import Any

import pyarrow as pa
import pyarrow.parquet as pq
import pytest
from fastapi.testclient import TestClient

from dualcost.api.app import create_app
from dualcost.config import Settings
from tests.api.test_parquet_uploads import PARQUET, as_csv, as_parquet, panel_records, problem


def post(client: Any, data: bytes, media: str, **params: Any) -> Any:
    return client.post("/v1/tables", content=data, params=params,
                       headers={"content-type": media})


def parquet_of(table: Any) -> bytes:
    sink = io.BytesIO()
    pq.write_table(table, sink)
    return sink.getvalue()


@pytest.mark.parametrize("fmt", ["csv", "parquet"])
def test_a_panel_reads_into_the_same_cells_from_csv_and_parquet(client: Any, fmt: str) -> None:
    records = panel_records()
    data = as_csv(records) if fmt == "csv" else as_parquet(records)
    r = post(client, data, "text/csv" if fmt == "csv" else PARQUET)
    assert r.status_code == 200, r.text
    answer = r.json()
    assert answer["columns"] == ["period", "item", "price", "quantity"]
    # the CSV's periods are whole numbers, the Parquet file's text
    period = int if fmt == "csv" else str
    assert answer["rows"] == [[period(r["period"]), r["item"], r["price"], r["quantity"]]
                              for r in records]
    assert answer["numeric"] == (["period"] if fmt == "csv" else []) + ["price", "quantity"]
    first = 2 if fmt == "csv" else 1  # a CSV's header is record 1
    assert answer["row_numbers"] == list(range(first, first + len(records)))
    assert answer["provenance"]["input_digest"] == r.headers["dualcost-input-digest"]


def test_parquet_types_come_through_as_json_types(client: Any) -> None:
    table = pa.table({
        "item": ["rye_loaf", None], "count": pa.array([3, None], pa.int64()),
        "price": pa.array([2.5, 1.25], pa.float32()), "kept": [True, False],
        "day": [datetime.date(2026, 1, 31), datetime.date(2026, 2, 28)],
        "amount": pa.array([1, 2], pa.decimal128(5, 2))})
    r = post(client, parquet_of(table), PARQUET)
    assert r.status_code == 200, r.text
    assert r.json()["rows"] == [["rye_loaf", 3, 2.5, True, "2026-01-31", 1.0],
                                [None, None, 1.25, False, "2026-02-28", 2.0]]
    assert r.json()["numeric"] == ["count", "price", "amount"]


def test_a_csv_column_is_numeric_only_when_every_cell_is_a_number(client: Any) -> None:
    """Ids with leading zeros stay text; an empty numeric cell is null; blank lines are left
    out and every row keeps its record number; a decimal comma is detected and said."""
    text = "item;price;note\n007;2,50;a\n\n012;;3\n"
    r = post(client, text.encode(), "text/csv")
    assert r.status_code == 200, r.text
    answer = r.json()
    assert answer["rows"] == [["007", 2.5, "a"], ["012", None, "3"]]
    assert answer["numeric"] == ["price"]
    assert answer["row_numbers"] == [2, 4]
    assert [n["code"] for n in answer["notices"]] == ["csv_dialect_detected"]


def test_a_ragged_csv_is_refused_at_its_record(client: Any) -> None:
    errors = problem(post(client, b"a,b\n1,2\n3\n", "text/csv"))
    assert "#row=3" in errors and "cells" in errors["#row=3"]


@pytest.mark.parametrize(("table", "pointer", "words"), [
    (pa.table({"price": [1.0, float("nan")]}), "#row=2&column=price", "nan"),
    (pa.table({"price": [1.0, float("inf")]}), "#row=2&column=price", "finite"),
    (pa.table({"bytes": pa.array([[1], [2]])}), "#column=bytes", "no text form"),
])
def test_a_parquet_cell_or_column_without_a_json_form_is_refused(client: Any, table: Any,
                                                                 pointer: str, words: str) -> None:
    errors = problem(post(client, parquet_of(table), PARQUET))
    assert pointer in errors and words in errors[pointer].lower(), errors


def test_a_file_that_is_not_parquet_is_refused_with_its_size(client: Any) -> None:
    data = parquet_of(pa.table({"price": [1.0, 2.0]}))[:-10]
    errors = problem(post(client, data, PARQUET))
    assert f"{len(data)} bytes" in errors[""] and "cannot be read" in errors[""]


def test_a_table_over_the_cell_limit_is_refused() -> None:
    """The most cells of a panel upload (max_panel_cells), rows times columns."""
    client = TestClient(create_app(Settings(max_panel_cells=6)))
    table = pa.table({"a": [1.0, 2.0, 3.0, 4.0], "b": [1.0, 2.0, 3.0, 4.0]})
    errors = problem(post(client, parquet_of(table), PARQUET))
    assert "#row=4" in errors and "limit" in errors["#row=4"]
    errors = problem(post(client, b"a,b\n1,2\n3,4\n5,6\n7,8\n", "text/csv"))
    assert "#row=5" in errors and "limit" in errors["#row=5"]


def test_the_table_answers_as_csv_and_parquet_too(client: Any) -> None:
    data = as_parquet(panel_records())
    r = client.post("/v1/tables?format=csv", content=data, headers={"content-type": PARQUET})
    assert r.status_code == 200 and r.headers["content-type"].startswith("text/csv")
    rows = list(csv.reader(io.StringIO(r.text)))
    assert rows[0] == ["period", "item", "price", "quantity"] and len(rows) == 31
    back = client.post("/v1/tables", content=data,
                       headers={"content-type": PARQUET, "accept": PARQUET})
    assert back.headers["content-type"] == PARQUET
    assert pq.read_table(io.BytesIO(back.content)).equals(pq.read_table(io.BytesIO(data)))
