"""A CSV table read by columns (pyarrow) gives what the record-by-record reader (Python's csv
module, then the number rule cell by cell) gives: the same columns, records and dialect for a
good table, and the same problem, naming the same rows and cells, for a bad one.

The outside references are RFC 4180 (records, quoting) and RFC 7111 (``#row=``, ``#cell=``);
the record-by-record reader, which the other CSV tests check against them, is the yardstick here.
"""

from __future__ import annotations

from typing import Any

import pytest

from dualcost.api.inputs import csv as csv_input
from dualcost.api.inputs.csv import DeclaredDialect, read_table
from dualcost.api.problems import RequestProblem

COLUMNS: dict[str, Any] = {"required": ["period", "item", "price"], "numeric": ["price"],
                           "optional_numeric": ["quantity", "expenditure"]}
HEAD = "period,item,price,quantity\n"
GOOD = HEAD + "2024-01,bread,2.5,10\n2024-01, milk ,1.25,4\n2024-02,bread,2.75,9\n2024-02,milk,1.5,\n"

CASES = [
    GOOD,
    GOOD.replace("\n", "\r\n"),
    GOOD.replace(",", ";").replace(".", ","),
    GOOD.replace(",", "\t"),
    HEAD,
    HEAD + "2024-01,bread,+2.5,1e3\n2024-01,milk,.5,5.\n",
    HEAD + "2024-01,bread,2.5,10\n\n2024-02,bread,2.6,10\n",  # a blank line: left out
    HEAD + "2024-01,bread,2.5,10\n,,,\n2024-02,bread,2.6,10\n",  # a blank record: left out
    GOOD + "\n\n",
    HEAD + "2024-01,bread,2.5,10,7\n",  # ragged
    HEAD + "2024-01,bread,nan,10\n",
    HEAD + "2024-01,bread,inf,10\n",
    HEAD + "2024-01,bread,Infinity,10\n",
    HEAD + "2024-01,bread,1e400,10\n",
    HEAD + "2024-01,bread,1e-400,10\n",
    HEAD + "2024-01,bread,1e-310,10\n",
    HEAD + "2024-01,bread,0.000000000000000000000001e-299,10\n",
    HEAD + "2024-01,bread, 2.5 ,10\n",
    HEAD + "2024-01,bread,1_000,10\n",
    HEAD + "2024-01,bread,0x10,10\n",
    HEAD + "2024-01,bread,\u0661\u0662,10\n",  # Arabic-Indic digits: float() reads them
    HEAD + "2024-01,bread,1e,10\n",
    HEAD + "2024-01,bread,,10\n",  # a required number missing
    HEAD + "2024-01,,2.5,10\n",  # a required text missing
    HEAD + " ,bread,2.5,10\n",
    HEAD + "2024-01,bread,2.5,  \n",
    HEAD + "2024-01,bread,2.5,-0\n2024-01,milk,0,0.0\n",
    "period,item\n2024-01,bread\n",  # a column missing
    "period,item,price,price\n2024-01,bread,1,2\n",
    HEAD + '2024-01,"bread, sliced",2.5,10\n',  # quoted: the other reader alone
]


def _read(text: str, declared: DeclaredDialect | None = None) -> Any:
    try:
        table = read_table(text, declared=declared, **COLUMNS)
    except RequestProblem as problem:
        return [(e.pointer, e.detail) for e in problem.errors]
    return table.header, table.columns, table.records, table.dialect


@pytest.mark.parametrize("text", CASES)
def test_reading_by_columns_gives_what_reading_by_records_gives(
        text: str, monkeypatch: pytest.MonkeyPatch) -> None:
    """The same table, or the same problem, from both readers."""
    by_columns = _read(text)
    monkeypatch.setattr(csv_input, "_by_columns", lambda *_: None)
    assert by_columns == _read(text)


def test_a_large_table_is_read_by_columns_and_its_numbers_are_the_same(
        monkeypatch: pytest.MonkeyPatch) -> None:
    """2,000 records with numbers of 17 significant digits (and empty optional cells): read by
    columns (the csv module is not asked for more than the records that decide the dialect),
    every float equal to what ``float`` reads from the same text."""
    rows = [f"p{t},item {i},{(i + 1) * 1.1 / (t + 3)!r},{'' if i % 7 == 0 else repr(i / 3)}"
            for t in range(20) for i in range(100)]
    text = HEAD + "\n".join(rows) + "\n"
    calls: list[int] = []
    real = csv_input.arrow_columns

    def spy(*args: Any) -> Any:
        found = real(*args)
        calls.append(found is not None)
        return found

    monkeypatch.setattr(csv_input, "arrow_columns", spy)
    header, columns, records, _ = _read(text)
    assert calls == [True]
    assert records == list(range(2, 2002))
    assert columns["price"] == [float(r.split(",")[2]) for r in rows]
    assert columns["quantity"] == [float(q) if q else None for q in
                                   (r.split(",")[3] for r in rows)]
    monkeypatch.setattr(csv_input, "_by_columns", lambda *_: None)
    assert _read(text) == (header, columns, records, _read(text)[3])
