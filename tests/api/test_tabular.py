"""CSV reading and writing shared by the panel and household operations (RFC 4180; RFC 7111
fragment identifiers for row and cell)."""

from __future__ import annotations

import csv
import io

import pytest

from dualcost.api.inputs.csv import parse_number, read_table
from dualcost.api.problems import RequestProblem
from dualcost.api.render import csv_text


def test_reads_numbers_with_a_decimal_point_only() -> None:
    table = read_table("period,item,price\n1,rye_loaf,2.40\n1,ferry_pass,38\n",
                       required=["period", "item", "price"], numeric=["price"])
    assert table.records == [2, 3]
    assert list(table.rows()) == [{"period": "1", "item": "rye_loaf", "price": 2.4},
                    {"period": "1", "item": "ferry_pass", "price": 38.0}]
    assert parse_number("2,40") is None and parse_number("1_000") is None
    assert parse_number("nan") is None and parse_number("inf") is None


def test_bad_cell_is_named_by_row_and_column() -> None:
    with pytest.raises(RequestProblem) as info:
        read_table("period,item,price\n1,rye_loaf,2.40\n2,rye_loaf,abc\n",
                   required=["period", "item", "price"], numeric=["price"])
    (error,) = info.value.errors
    assert error.pointer == "#cell=3,3"
    assert "'price'" in error.detail and "'abc'" in error.detail


def test_missing_column_and_ragged_row() -> None:
    with pytest.raises(RequestProblem) as info:
        read_table("period,item\n1,a\n", required=["period", "item", "price"], numeric=["price"])
    assert info.value.errors[0].pointer == "#row=1" and "'price'" in info.value.errors[0].detail
    with pytest.raises(RequestProblem) as info:
        read_table("period,item,price\n1,a\n", required=["period", "item", "price"], numeric=["price"])
    assert info.value.errors[0].pointer == "#row=2"


def test_written_csv_round_trips_through_a_csv_reader() -> None:
    text = csv_text(["period", "laspeyres"], [[1, 1.0], [2, 1.4200000000000002], [3, None]])
    rows = list(csv.reader(io.StringIO(text)))
    assert rows == [["period", "laspeyres"], ["1", "1.0"], ["2", "1.4200000000000002"], ["3", ""]]
    assert float(rows[2][1]) == 1.4200000000000002
