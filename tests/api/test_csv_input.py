"""CSV uploads read by Python's csv module: RFC 4180 quoting, ';' and tab separators, decimal
commas, declared (``separator``, ``decimal``) or detected and stated in the answer's notices;
thousands grouping refused, not guessed; every bad cell still named by RFC 7111 fragment.

RFC 4180 (quoted fields, doubled quotes, line breaks inside quotes) and RFC 7111 (``#row=``,
``#cell=``) are the outside sources; that ';' with decimal commas is what spreadsheets export in
comma-decimal locales is common practice.
"""

from __future__ import annotations

import csv
import io
from typing import Any

import pytest
from numpy.testing import assert_allclose

from dualcost.api.inputs.csv import DeclaredDialect, read_table
from dualcost.api.problems import RequestProblem
from tests.api.test_bad_input import assert_problem
from tests.api.test_estimation_api import AIDS_EXAMPLE, _long_csv
from tests.api.test_households import SUBSISTENCE, create_job, example, household_csv
from tests.conftest import ROOT, load_example

PANEL = (ROOT / "docs/examples/wrenmouth_panel.csv").read_text(encoding="utf-8")
COLUMNS = {"required": ["period", "item", "price"], "numeric": ["price"],
           "optional_numeric": ["quantity"]}


def european(text: str, separator: str = ";") -> str:
    """The same CSV as a comma-decimal spreadsheet exports it: fields separated by ';' (or a
    tab), numbers with decimal commas."""
    rows = list(csv.reader(io.StringIO(text)))
    out = io.StringIO()
    writer = csv.writer(out, delimiter=separator, lineterminator="\r\n")
    writer.writerow(rows[0])
    for row in rows[1:]:
        writer.writerow([_comma(c) for c in row])
    return out.getvalue()


def _comma(cell: str) -> str:
    try:
        float(cell)
    except ValueError:
        return cell
    return cell.replace(".", ",")


def series(client: Any, text: str, **params: Any) -> Any:
    return client.post("/v1/index-series/csv", content=text.encode(), params=params,
                       headers={"content-type": "text/csv"})


def notice(answer: dict[str, Any]) -> dict[str, str]:
    (found,) = [n for n in answer["notices"] if n["code"] == "csv_dialect_detected"]
    return found


# -- the reader ---------------------------------------------------------------------------------


def test_quoted_fields_with_separators_doubled_quotes_and_line_breaks() -> None:
    """RFC 4180 section 2: a field with the separator, a quote or a line break is quoted, and a
    quote inside is doubled; the records after a field that spans lines keep their numbers."""
    text = ('period,item,price,label\r\n'
            '1,rye_loaf,2.40,"Rye loaf, sliced"\r\n'
            '1,trout,15.08,"the ""river"" trout"\r\n'
            '1,peat,9.47,"peat\r\nbriquettes"\r\n'
            '2,"rye_loaf",abc,\r\n')
    with pytest.raises(RequestProblem) as info:
        read_table(text, required=["period", "item", "price"], numeric=["price"])
    assert [e.pointer for e in info.value.errors] == ["#cell=5,3"]  # the 4th record, not line
    table = read_table(text.replace("abc", "2.52"), required=["period", "item", "price"],
                       numeric=["price"])
    assert table.columns["label"] == ["Rye loaf, sliced", 'the "river" trout',
                                      "peat\r\nbriquettes", ""]
    assert table.columns["item"][3] == "rye_loaf" and table.columns["price"][3] == 2.52
    assert table.records == [2, 3, 4, 5]


def test_a_stray_quote_is_refused_at_its_record() -> None:
    with pytest.raises(RequestProblem) as info:
        read_table('period,item,price\n1,a,2.4\n1,"b"x,3\n', **COLUMNS)
    (error,) = info.value.errors
    assert error.pointer == "#row=3" and "quoted" in error.detail


@pytest.mark.parametrize("separator", [";", "\t"])
def test_the_european_export_is_detected_and_reads_the_same_numbers(separator: str) -> None:
    plain = read_table(PANEL, **COLUMNS)
    other = read_table(european(PANEL, separator), **COLUMNS)
    assert other.columns == plain.columns and other.records == plain.records
    assert other.dialect.separator == ("semicolon" if separator == ";" else "tab")
    assert other.dialect.decimal == "comma"
    assert plain.dialect.separator == "comma" and plain.dialect.decimal == "point"


def test_semicolons_with_decimal_points_are_detected() -> None:
    table = read_table(PANEL.replace(",", ";"), **COLUMNS)
    assert table.dialect.decimal == "point"
    assert table.columns == read_table(PANEL, **COLUMNS).columns


def test_whole_numbers_only_are_read_the_same_either_way() -> None:
    text = "period;item;price\n1;a;2\n1;b;38\n"
    table = read_table(text, required=["period", "item", "price"], numeric=["price"])
    assert table.dialect.decimal == "comma" and table.columns["price"] == [2.0, 38.0]
    assert "whole numbers" in table.dialect.detected["decimal"]


@pytest.mark.parametrize("text, pointer, words", [
    # Both marks in one file: refused, naming the parameter that settles it.
    ("period;item;price\n1;a;2,40\n1;b;38.5\n", "#/query/decimal", ["both", "decimal=point"]),
    # Only numbers whose '.' could group thousands: 1.234 or 1234?
    ("period;item;price\n1;a;1.234\n1;b;12.500\n", "#/query/decimal", ["'1.234'", "thousands"]),
    # A header with two separators outside quotes.
    ("period;item,price\n1;a;2\n", "#/query/separator", ["separator=comma"]),
])
def test_a_dialect_that_cannot_be_told_is_refused(text: str, pointer: str,
                                                  words: list[str]) -> None:
    with pytest.raises(RequestProblem) as info:
        read_table(text, required=["period", "item", "price"], numeric=["price"])
    assert info.value.errors[0].pointer == pointer
    for word in words:
        assert word in info.value.errors[0].detail


def test_a_quoted_separator_in_the_header_does_not_count() -> None:
    table = read_table('period;item;price;"label, long"\n1;a;2,5;x\n',
                       required=["period", "item", "price"], numeric=["price"])
    assert table.dialect.separator == "semicolon" and table.columns["price"] == [2.5]


@pytest.mark.parametrize("text, declared, cell, words", [
    ('period,item,price\n1,a,"1,234.5"\n', None, "#cell=2,3", ["'1,234.5'", "no grouping"]),
    ("period;item;price\n1;a;2,5\n1;b;1.234,5\n", None, "#cell=3,3", ["'1.234,5'", "no '.'"]),
    ("period;item;price\n1;a;1 234,5\n1;b;2,5\n", None, "#cell=2,3", ["'1 234,5'"]),
    ("period;item;price\n1;a;1_234\n", DeclaredDialect("semicolon", "point"), "#cell=2,3",
     ["'1_234'"]),
    # Declared decimal points: a decimal comma is not guessed, and the hint names the option.
    ("period;item;price\n1;a;2,5\n", DeclaredDialect("semicolon", "point"), "#cell=2,3",
     ["decimal=comma"]),
])
def test_thousands_grouping_is_refused_at_its_cell(text: str, declared: DeclaredDialect | None,
                                                   cell: str, words: list[str]) -> None:
    with pytest.raises(RequestProblem) as info:
        read_table(text, required=["period", "item", "price"], numeric=["price"],
                   declared=declared)
    (error,) = info.value.errors
    assert error.pointer == cell
    for word in words:
        assert word in error.detail


# -- over HTTP -------------------------------------------------------------------------------------


def test_a_series_upload_from_a_european_spreadsheet_equals_the_plain_one(client) -> None:
    plain = series(client, PANEL, base_period="2025-01")
    assert plain.status_code == 200, plain.text
    detected = series(client, european(PANEL), base_period="2025-01")
    assert detected.status_code == 200, detected.text
    assert detected.json()["formulas"] == plain.json()["formulas"]
    message = notice(detected.json())["message"]
    assert "';'" in message and "',' as the decimal mark" in message
    # The plain upload says what it was read as, too.
    assert "','" in notice(plain.json())["message"]
    assert "'.' as the decimal mark" in notice(plain.json())["message"]
    declared = series(client, european(PANEL), base_period="2025-01", separator="semicolon",
                      decimal="comma")
    assert declared.json()["formulas"] == plain.json()["formulas"]
    assert not [n for n in declared.json()["notices"] if n["code"] == "csv_dialect_detected"]


def test_a_csv_answer_says_in_its_headers_how_the_upload_was_read(client) -> None:
    r = series(client, european(PANEL), base_period="2025-01", format="csv")
    assert r.status_code == 200
    assert r.headers["dualcost-input-separator"] == "semicolon"
    assert r.headers["dualcost-input-decimal"] == "comma"


def test_a_decimal_comma_with_comma_separated_fields_is_refused_naming_both(client) -> None:
    r = series(client, PANEL, separator="comma", decimal="comma")
    problem = assert_problem(r, "#/query/decimal", "separator=semicolon")
    assert {e["pointer"] for e in problem["errors"]} == {"#/query/decimal", "#/query/separator"}
    # Declared decimal comma, and a header separated by commas.
    problem = assert_problem(series(client, PANEL, decimal="comma"), "#/query/decimal")
    assert {e["pointer"] for e in problem["errors"]} == {"#/query/decimal", "#/query/separator"}
    assert_problem(series(client, PANEL, separator="pipe"), "#/query/separator")


def test_errors_in_a_european_upload_point_at_the_cell(client) -> None:
    lines = european(PANEL).splitlines()
    cells = lines[3].split(";")
    cells[2] = "2.345,6"
    lines[3] = ";".join(cells)
    r = series(client, "\n".join(lines) + "\n")
    assert_problem(r, "#cell=4,3", "'2.345,6'", "no grouping")
    r = series(client, PANEL.replace(",", ";"), separator="semicolon", decimal="comma")
    assert_problem(r, "#cell=2,3", "decimal=point")


def test_a_declared_separator_that_does_not_split_the_header_says_so(client) -> None:
    r = series(client, PANEL, separator="semicolon")
    assert_problem(r, "#row=1", "separator=semicolon", "is the separator comma")


def test_a_fit_upload_from_a_european_spreadsheet(client) -> None:
    body = load_example(AIDS_EXAMPLE)
    text = _long_csv(body)
    params = {"family": "aids", "estimator": "linear_approximate"}
    plain = client.post("/v1/fits/csv", content=text.encode(), params=params,
                        headers={"content-type": "text/csv"})
    assert plain.status_code == 200, plain.text
    other = client.post("/v1/fits/csv", content=european(text).encode(), params=params,
                        headers={"content-type": "text/csv"})
    assert other.status_code == 200, other.text
    assert other.json()["parameters"] == plain.json()["parameters"]
    assert "',' as the decimal mark" in notice(other.json())["message"]


def test_a_household_job_takes_a_european_upload(client) -> None:
    """The job's answer and summaries equal those of the plain upload; the job's notices say
    what was detected, and the answer's headers too."""
    body = example(SUBSISTENCE)
    answers = []
    for text in (household_csv(body), european(household_csv(body))):
        job = create_job(client, body)
        r = client.post(job["links"]["households"], content=text.encode(),
                        headers={"content-type": "text/csv"})
        assert r.status_code == 200, r.text
        status = client.get(job["links"]["self"]).json()
        assert status["status"] == "done" and status["skipped"]["count"] == 0
        answers.append((r, status))
    (plain, plain_status), (other, other_status) = answers
    assert other.text == plain.text
    assert other_status["summary"] == plain_status["summary"]
    assert other.headers["dualcost-input-separator"] == "semicolon"
    assert other.headers["dualcost-input-decimal"] == "comma"
    assert "';'" in notice(other_status)["message"]


def test_a_household_job_refuses_an_undecidable_dialect_and_waits(client) -> None:
    body = example(SUBSISTENCE)
    job = create_job(client, body)
    text = european(household_csv(body)).replace("harbour", "harbour,quay", 1)
    header, rest = text.split("\r\n", 1)
    r = client.post(job["links"]["households"], content=(header + ",x\r\n" + rest).encode(),
                    headers={"content-type": "text/csv"})
    assert_problem(r, "#/query/separator", "separator=comma")
    assert client.get(job["links"]["self"]).json()["status"] == "waiting_for_households"
    r = client.post(job["links"]["households"], content=european(household_csv(body)).encode(),
                    params={"separator": "semicolon", "decimal": "comma"},
                    headers={"content-type": "text/csv"})
    assert r.status_code == 200
    status = client.get(job["links"]["self"]).json()
    assert not [n for n in status["notices"] if n["code"] == "csv_dialect_detected"]


def test_a_bad_cell_in_a_european_household_upload_names_its_cell(client) -> None:
    body = example(SUBSISTENCE)
    job = create_job(client, body, bad_rows="reject")
    lines = european(household_csv(body)).split("\r\n")
    cells = lines[2].split(";")
    cells[4] = "0.125"  # a decimal point among decimal commas
    lines[2] = ";".join(cells)
    text = "\r\n".join(lines).encode()
    # Detected: both marks among the first rows, so the decimal mark cannot be told.
    r = client.post(job["links"]["households"], content=text, headers={"content-type": "text/csv"})
    assert_problem(r, "#/query/decimal", "#cell=3,5", "'0.125'")
    # Declared: the cell is refused, the row named.
    r = client.post(job["links"]["households"], content=text, params={"decimal": "comma"},
                    headers={"content-type": "text/csv"})
    assert_problem(r, "#cell=3,5", "'0.125'", "decimal=point")


def test_the_read_keeps_its_numbers_exact() -> None:
    """Numbers read back are the floats written (repr round-trips, Python's float())."""
    table = read_table(european(PANEL), **COLUMNS)
    plain = [float(row[2]) for row in list(csv.reader(io.StringIO(PANEL)))[1:]]
    assert_allclose(table.columns["price"], plain, rtol=0, atol=0)


@pytest.mark.parametrize("literal,words", [
    ("1e-400", "smaller in magnitude than 2.2e-308"),
    ("5e-324", "smaller in magnitude than 2.2e-308"),
    ("1e400", "beyond the range of floating-point numbers"),
])
def test_a_csv_number_outside_the_floating_point_range_is_refused_at_its_cell(
        client, literal: str, words: str) -> None:
    """The rule every number of a request follows (README, "Numbers"), in a CSV cell too: 1e-400
    would silently become 0 and 5e-324 is subnormal (IEEE 754: the smallest normal double is
    2.2250738585072014e-308)."""
    lines = PANEL.splitlines()
    cells = lines[3].split(",")
    cells[2] = literal
    lines[3] = ",".join(cells)
    assert_problem(series(client, "\n".join(lines) + "\n"), "#cell=4,3", literal, words)


def test_a_household_share_below_the_floating_point_range_refuses_its_row(client) -> None:
    body = example(SUBSISTENCE)
    text = household_csv(body).splitlines()
    header = text[0].split(",")
    cells = text[1].split(",")
    item_column = header.index("rye_loaf")
    cells[item_column] = "1e-400"
    text[1] = ",".join(cells)
    job = create_job(client, body, bad_rows="skip")
    r = client.post(job["links"]["households"], content=("\n".join(text) + "\n").encode(),
                    headers={"content-type": "text/csv"})
    assert r.status_code == 200, r.text
    skipped = client.get(job["links"]["self"]).json()["skipped"]["rows"]
    assert skipped[0]["row"] == 1 and "2.2e-308" in skipped[0]["detail"]


@pytest.mark.parametrize("parameter", ["lloyd_moulton_sigma", "new_goods_sigma"])
def test_a_query_option_below_the_floating_point_range_is_refused_by_name(
        client, parameter: str) -> None:
    """The same number rule for the CSV upload's query options: 1e-400 would read as 0."""
    r = series(client, PANEL, **{parameter: "1e-400"})
    assert_problem(r, f"#/query/{parameter}", "2.2e-308")
