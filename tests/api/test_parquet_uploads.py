"""Series panels and fit budgets uploaded as Parquet or CSV: the same cases in both forms (a good
panel, a missing column, a wrong column type, a bad value at a row, a file cut short), the same
answers from both, and Parquet answers that read back (with pyarrow, the reference reader of the
format) as the CSV answer's table."""

from __future__ import annotations

import base64
import copy
import csv
import io
from typing import Any

import pyarrow as pa
import pyarrow.parquet as pq
import pytest
from numpy.testing import assert_allclose

from tests.api.test_series import ITEMS, PRICES, PRINTED, QUANTITIES
from tests.conftest import load_example

PARQUET = "application/vnd.apache.parquet"
FORMATS = ("csv", "parquet")
#: The CSV form declares its dialect, so that its answer has no notice the Parquet one lacks.
DECLARED = {"separator": "comma", "decimal": "point"}
SERIES = "/v1/index-series/csv"
FITS = "/v1/fits/csv"
FIT = "fitModel.wrenmouth_quarterly_aids.json"


def panel_records() -> list[dict[str, Any]]:
    """The six-commodity panel of CPI Manual (2004) Tables 19.1 and 19.2 (from memory), one
    record per period and item."""
    return [{"period": str(t + 1), "item": ITEMS[i], "price": PRICES[t][i],
             "quantity": QUANTITIES[t][i]} for t in range(5) for i in range(6)]


def fit_records() -> list[dict[str, Any]]:
    """The Wrenmouth quarterly fit example's budget data, one record per quarter and item."""
    body = load_example(FIT)
    return [{"period": str(label), "item": it["id"], "price": prices[it["id"]],
             "expenditure": spend[it["id"]]}
            for label, prices, spend in zip(body["observations"], body["prices"],
                                            body["expenditures"], strict=True)
            for it in body["items"]]


def as_csv(records: list[dict[str, Any]]) -> bytes:
    names = list(records[0])
    out = io.StringIO()
    writer = csv.writer(out, lineterminator="\n")
    writer.writerow(names)
    writer.writerows([["" if r[n] is None else r[n] for n in names] for r in records])
    return out.getvalue().encode()


def as_parquet(records: list[dict[str, Any]], types: dict[str, Any] | None = None) -> bytes:
    """The records as a Parquet file: numbers as float64, text as string, unless ``types``."""
    types = types or {}
    columns = {}
    for name in records[0]:
        values = [r[name] for r in records]
        kind = types.get(name) or (pa.string() if any(isinstance(v, str) for v in values)
                                   else pa.float64())
        if kind == pa.string():  # a column of text holds every value as text
            values = [None if v is None else str(v) for v in values]
        columns[name] = pa.array(values, type=kind)
    sink = io.BytesIO()
    pq.write_table(pa.table(columns), sink)
    return sink.getvalue()


def post(client: Any, path: str, records: list[dict[str, Any]], fmt: str,
         **params: Any) -> Any:
    if fmt == "csv":
        return client.post(path, content=as_csv(records), params={**DECLARED, **params},
                           headers={"content-type": "text/csv"})
    return client.post(path, content=as_parquet(records), params=params,
                       headers={"content-type": PARQUET})


def problem(r: Any) -> dict[str, str]:
    """The problem's errors, pointer -> detail (one sentence per place)."""
    assert r.status_code == 422, r.text
    assert r.headers["content-type"] == "application/problem+json"
    return {e["pointer"]: e["detail"] for e in r.json()["errors"]}


def without_provenance(answer: dict[str, Any]) -> dict[str, Any]:
    return {k: v for k, v in answer.items() if k != "provenance"}


# -- series panels ------------------------------------------------------------------------------


def test_printed_fixed_base_series_from_a_parquet_panel(client: Any) -> None:
    """CPI Manual (2004) Table 19.3's fixed-base Laspeyres, Paasche, Fisher and Törnqvist
    series (four decimals, recalled from memory) from the panel uploaded as a Parquet file."""
    r = post(client, SERIES, panel_records(), "parquet", reference_value=1)
    assert r.status_code == 200, r.text
    got = {f["formula"]: f for f in r.json()["formulas"]}
    for name, printed in PRINTED.items():
        assert_allclose(got[name]["fixed_base"], printed, rtol=0.0, atol=5e-5, err_msg=name)


def test_a_panel_gives_the_same_series_as_csv_and_as_parquet(client: Any) -> None:
    answers = [post(client, SERIES, panel_records(), fmt, reference_value=1,
                    model='{"family": "ces", "sigma": 0.7}') for fmt in FORMATS]
    assert all(r.status_code == 200 for r in answers), [r.text for r in answers]
    csv_answer, parquet_answer = (without_provenance(r.json()) for r in answers)
    assert csv_answer == parquet_answer
    # the digest is of the bytes sent (a different file), as a CSV upload's is
    digests = {r.headers["dualcost-input-digest"] for r in answers}
    assert len(digests) == 2


def test_a_parquet_file_with_integer_periods_and_prices_reads_as_text_and_numbers(
        client: Any) -> None:
    records = [{**r, "period": int(r["period"])} for r in panel_records()]
    types = {"period": pa.int32(), "price": pa.float32()}
    sink = as_parquet(records, types)
    r = client.post(SERIES, content=sink, params={"reference_value": 1},
                    headers={"content-type": PARQUET})
    assert r.status_code == 200, r.text
    assert r.json()["periods"] == ["1", "2", "3", "4", "5"]


@pytest.mark.parametrize("fmt", FORMATS)
def test_a_panel_without_a_price_column_names_it(client: Any, fmt: str) -> None:
    records = [{k: v for k, v in r.items() if k != "price"} for r in panel_records()]
    errors = problem(post(client, SERIES, records, fmt))
    pointer = {"csv": "#row=1", "parquet": "#column=price"}[fmt]
    assert pointer in errors and "'price'" in errors[pointer], errors


@pytest.mark.parametrize("fmt", FORMATS)
def test_a_price_column_of_text_is_refused(client: Any, fmt: str) -> None:
    """A CSV cell that is not a number is named by its cell; a Parquet column of text by its
    name (its type is wrong, whatever its cells say)."""
    records = panel_records()
    records[2]["price"] = "cheap"
    errors = problem(post(client, SERIES, records, fmt))
    if fmt == "csv":
        assert "#cell=4,3" in errors and "'cheap'" in errors["#cell=4,3"], errors
    else:
        assert "#column=price" in errors and "string" in errors["#column=price"], errors


@pytest.mark.parametrize("fmt", FORMATS)
@pytest.mark.parametrize(("value", "words"), [
    (-2.0, "greater than zero"), (None, "empty"), (float("inf"), "finite")])
def test_a_bad_price_is_named_by_its_row_and_column(client: Any, fmt: str, value: Any,
                                                    words: str) -> None:
    """Row 8 of the data (CSV record 9, the header being record 1; Parquet row 8)."""
    records = panel_records()
    records[7]["price"] = value
    if fmt == "csv" and value == float("inf"):
        records[7]["price"] = "inf"
    errors = problem(post(client, SERIES, records, fmt))
    pointer = {"csv": "#cell=9,3", "parquet": "#row=8&column=price"}[fmt]
    assert pointer in errors, errors
    assert words in errors[pointer].lower(), errors


@pytest.mark.parametrize("fmt", FORMATS)
def test_a_period_that_comes_back_is_named_by_its_row(client: Any, fmt: str) -> None:
    records = panel_records()
    records.append({**records[0], "item": "c7"})  # period 1 again after period 5
    errors = problem(post(client, SERIES, records, fmt))
    pointer = {"csv": "#cell=32,1", "parquet": "#row=31&column=period"}[fmt]
    assert pointer in errors and "grouped by period" in errors[pointer], errors


@pytest.mark.parametrize("fmt", FORMATS)
def test_a_file_cut_short_is_refused_saying_where(client: Any, fmt: str) -> None:
    """A CSV cut inside a record has a short last record (named by its record); a Parquet file
    cut anywhere has lost its footer, and the problem says the file's size."""
    whole = as_csv(panel_records()) if fmt == "csv" else as_parquet(panel_records())
    cut = whole[: len(whole) * 2 // 3]
    if fmt == "csv":
        cut = cut[: cut.rindex(b",")]  # inside a record, after a separator
        r = client.post(SERIES, content=cut, params=DECLARED, headers={"content-type": "text/csv"})
        errors = problem(r)
        assert any(p.startswith("#row=") and "cells" in d for p, d in errors.items()), errors
    else:
        r = client.post(SERIES, content=cut, headers={"content-type": PARQUET})
        errors = problem(r)
        assert "" in errors and f"{len(cut)} bytes" in errors[""], errors
        assert "cannot be read" in errors[""]


def test_a_csv_dialect_given_with_a_parquet_file_is_refused(client: Any) -> None:
    r = client.post(SERIES, content=as_parquet(panel_records()), params={"decimal": "comma"},
                    headers={"content-type": PARQUET})
    errors = problem(r)
    assert "#/query/decimal" in errors and "CSV uploads only" in errors["#/query/decimal"]


def test_another_media_type_is_refused_naming_both(client: Any) -> None:
    r = client.post(SERIES, content=b"{}", headers={"content-type": "application/json"})
    errors = problem(r)
    assert PARQUET in errors["#/header/content-type"]
    assert "text/csv" in errors["#/header/content-type"]


# -- fits -----------------------------------------------------------------------------------------


def test_a_fit_is_the_same_from_csv_and_from_parquet(client: Any) -> None:
    """Against the JSON fit of the same data too (the example's numbers, sent as they are)."""
    answers = [post(client, FITS, fit_records(), fmt, family="aids") for fmt in FORMATS]
    assert all(r.status_code == 200 for r in answers), [r.text for r in answers]
    csv_answer, parquet_answer = (without_provenance(r.json()) for r in answers)
    assert csv_answer == parquet_answer
    body = copy.deepcopy(load_example(FIT))
    body["model"] = {"family": "aids"}
    from_json = client.post("/v1/fits", json=body).json()
    assert_allclose([p["estimate"] for p in parquet_answer["parameters"]],
                    [p["estimate"] for p in from_json["parameters"]], rtol=1e-9)


@pytest.mark.parametrize("fmt", FORMATS)
def test_a_fit_without_its_spending_column_says_which_it_needs(client: Any, fmt: str) -> None:
    records = [{k: v for k, v in r.items() if k != "expenditure"} for r in fit_records()]
    errors = problem(post(client, FITS, records, fmt, family="aids"))
    pointer = {"csv": "#row=1", "parquet": ""}[fmt]
    assert pointer in errors and "spending column" in errors[pointer], errors


@pytest.mark.parametrize("fmt", FORMATS)
def test_a_fit_price_of_text_is_refused(client: Any, fmt: str) -> None:
    records = fit_records()
    records[4]["price"] = "n/a"
    errors = problem(post(client, FITS, records, fmt, family="aids"))
    pointer = {"csv": "#cell=6,3", "parquet": "#column=price"}[fmt]
    assert pointer in errors, errors


@pytest.mark.parametrize("fmt", FORMATS)
def test_a_bad_fit_value_is_named_by_its_row_and_column(client: Any, fmt: str) -> None:
    records = fit_records()
    records[4]["expenditure"] = None
    errors = problem(post(client, FITS, records, fmt, family="aids"))
    pointer = {"csv": "#cell=6,4", "parquet": "#row=5&column=expenditure"}[fmt]
    assert pointer in errors and "empty" in errors[pointer], errors


@pytest.mark.parametrize("fmt", FORMATS)
def test_a_negative_fit_price_is_named_by_the_core_at_its_cell(client: Any, fmt: str) -> None:
    records = fit_records()
    records[4]["price"] = -1.0
    errors = problem(post(client, FITS, records, fmt, family="aids"))
    pointer = {"csv": "#cell=6,3", "parquet": "#row=5&column=price"}[fmt]
    assert pointer in errors, errors


@pytest.mark.parametrize("fmt", FORMATS)
def test_a_cut_fit_upload_is_refused(client: Any, fmt: str) -> None:
    whole = as_csv(fit_records()) if fmt == "csv" else as_parquet(fit_records())
    cut = whole[: len(whole) // 2]
    if fmt == "csv":
        cut = cut[: cut.rindex(b",")]
    r = client.post(FITS, content=cut, params={"family": "aids", **(DECLARED if fmt == "csv"
                                                                    else {})},
                    headers={"content-type": "text/csv" if fmt == "csv" else PARQUET})
    errors = problem(r)
    if fmt == "csv":
        assert any(p.startswith("#row=") for p in errors), errors
    else:
        assert "" in errors and "cannot be read" in errors[""], errors


# -- Parquet answers ------------------------------------------------------------------------------


def read_back(r: Any) -> tuple[list[str], list[list[Any]], dict[bytes, bytes]]:
    assert r.status_code == 200, r.text
    assert r.headers["content-type"] == PARQUET
    table = pq.read_table(io.BytesIO(r.content))
    return table.column_names, [list(row.values()) for row in table.to_pylist()], \
        table.schema.metadata


def same_table(csv_text: str, names: list[str], rows: list[list[Any]]) -> None:
    """The CSV answer's cells and the Parquet answer's values: an empty cell is null, a number
    the same float, text the same text."""
    records = list(csv.reader(io.StringIO(csv_text)))
    assert records[0] == names
    assert len(records) - 1 == len(rows)
    for cells, values in zip(records[1:], rows, strict=True):
        for cell, value in zip(cells, values, strict=True):
            if value is None:
                assert cell == ""
            elif isinstance(value, bool):
                assert cell == ("true" if value else "false")
            elif isinstance(value, (int, float)):
                assert float(cell) == value
            else:
                assert cell == value


@pytest.mark.parametrize("how", ["accept", "format"])
def test_series_answer_as_parquet_is_the_csv_table(client: Any, how: str) -> None:
    params = {"reference_value": 1, "model": '{"family": "ces", "sigma": 0.7}'}
    as_text = post(client, SERIES, panel_records(), "parquet", format="csv", **params)
    if how == "accept":
        r = client.post(SERIES, content=as_parquet(panel_records()), params=params,
                        headers={"content-type": PARQUET, "accept": PARQUET})
    else:
        r = post(client, SERIES, panel_records(), "parquet", format="parquet", **params)
    names, rows, metadata = read_back(r)
    same_table(as_text.text, names, rows)
    assert metadata[b"dualcost-input-digest"].decode() == r.headers["dualcost-input-digest"]
    assert b"dualcost-caution" in metadata and "dualcost-caution" in r.headers
    assert r.headers["dualcost-input-digest"] == as_text.headers["dualcost-input-digest"]


def test_json_series_and_fits_answer_parquet_too(client: Any) -> None:
    from tests.api.test_series import six_commodity_request

    r = client.post("/v1/index-series?format=parquet", json=six_commodity_request())
    names, rows, _ = read_back(r)
    same_table(client.post("/v1/index-series?format=csv", json=six_commodity_request()).text,
               names, rows)
    body = copy.deepcopy(load_example(FIT))
    r = client.post("/v1/fits", json=body, headers={"accept": PARQUET})
    names, rows, _ = read_back(r)
    same_table(client.post("/v1/fits?format=csv", json=body).text, names, rows)


def test_fit_answer_as_parquet_is_the_csv_table(client: Any) -> None:
    r = post(client, FITS, fit_records(), "csv", family="aids", format="parquet")
    names, rows, _ = read_back(r)
    same_table(post(client, FITS, fit_records(), "csv", family="aids", format="csv").text,
               names, rows)
    assert names[0] == "parameter" or names  # the parameter table's own columns


def test_the_operations_document_both_upload_forms_and_answers(client: Any) -> None:
    doc = client.get("/openapi.json").json()
    for path in (SERIES, FITS, "/v1/tables"):
        op = doc["paths"][path]["post"]
        assert set(op["requestBody"]["content"]) == {"text/csv", PARQUET}, path
        assert PARQUET in op["responses"]["200"]["content"], path
    for path in ("/v1/index-series", "/v1/fits"):
        assert PARQUET in doc["paths"][path]["post"]["responses"]["200"]["content"], path


def test_a_parquet_upload_and_answer_are_kept_and_rerun_figure_by_figure(client: Any) -> None:
    data = as_parquet(panel_records())
    r = client.post(SERIES, content=data, params={"reference_value": 1, "save": "true",
                                                  "format": "parquet"},
                    headers={"content-type": PARQUET})
    assert r.status_code == 200, r.text
    kept = client.get(f"/v1/runs/{r.headers['dualcost-run']}").json()
    assert kept["answer_type"] == PARQUET and kept["answer_encoding"] == "base64"
    assert base64.b64decode(kept["answer"]) == r.content  # RFC 4648: the bytes as sent
    again = client.post(f"/v1/runs/{kept['id']}/rerun").json()
    names, rows, _ = read_back(r)
    assert again["identical"] and again["figures_compared"] == len(names) * (len(rows) + 1)


@pytest.mark.parametrize("path", [SERIES, FITS])
@pytest.mark.parametrize("value", [0.0, -1.0, 5e-324, 1e-300, 1e308, -0.0])
def test_one_parquet_number_mutated_gives_an_answer_or_a_located_problem(
        client: Any, path: str, value: float) -> None:
    """The house rule for every input form (common practice in fuzzing): a valid upload with
    one number changed to 0, a negative, a subnormal, a tiny or a huge value is answered or
    refused at its cell, never a 5xx."""
    records = panel_records() if path == SERIES else fit_records()
    records[3]["price"] = value
    r = post(client, path, records, "parquet", **({"family": "aids"} if path == FITS else {}))
    assert r.status_code in (200, 422), r.text
    if r.status_code == 422:  # at the cell, or at the row of the period it made undefined
        pointers = list(problem(r))
        assert pointers and all(p.startswith("#row=") for p in pointers), pointers
    if value in (0.0, -1.0, 5e-324):
        assert r.status_code == 422 and "#row=4&column=price" in problem(r)
