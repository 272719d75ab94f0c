"""Household job uploads read by columns: CSV through pyarrow (with the reference reader where
pyarrow cannot keep a rule) and Parquet, with the same cases for both; answers as CSV or
Parquet.

The numbers are checked against the JSON batch of the same households (the reference path of
the service, itself checked against the core and published values in test_households.py), and
the Parquet files are written and read back with pyarrow, Apache Arrow's reference library for
the format.
"""

from __future__ import annotations

import copy
import csv
import dataclasses
import io
from typing import Any

import numpy as np
import pyarrow as pa
import pyarrow.parquet as pq
import pytest
from fastapi.testclient import TestClient

from dualcost.api.inputs import columnar
from dualcost.api.operations.households import ERROR_KEY
from tests.api.test_households import SUBSISTENCE, create_job, example, household_csv

PARQUET = "application/vnd.apache.parquet"
FORMS = ["csv", "parquet"]


def parquet_of(body: dict[str, Any], *, drop: str | None = None,
               change: dict[tuple[int, str], Any] | None = None,
               types: dict[str, Any] | None = None) -> bytes:
    """The example's households as a Parquet file, the same columns as household_csv."""
    ids = [i["id"] if isinstance(i, dict) else i for i in body["items"]]
    rows = body["households"]
    data: dict[str, list[Any]] = {
        "household": [h["id"] for h in rows], "region": ["harbour"] * len(rows),
        "expenditure": [h["expenditure"] for h in rows], "weight": [h["weight"] for h in rows]}
    for i in ids:
        if i != drop:
            data[i] = [h["shares"][i] for h in rows]
    for (k, name), value in (change or {}).items():
        data[name][k] = value
    fields = [pa.field(n, (types or {}).get(n, pa.string() if n in ("household", "region")
                                             else pa.float64())) for n in data]
    table = pa.table({n: pa.array(v, type=f.type) for (n, v), f in zip(data.items(), fields,
                                                                         strict=True)})
    sink = io.BytesIO()
    pq.write_table(table, sink)
    return sink.getvalue()


def csv_of(body: dict[str, Any], *, drop: str | None = None,
           change: dict[tuple[int, str], Any] | None = None) -> bytes:
    body = copy.deepcopy(body)
    for (k, name), value in (change or {}).items():
        target = body["households"][k]
        if name in ("expenditure", "weight"):
            target[name] = value
        else:
            target["shares"][name] = value
    text = household_csv(body, drop=drop)
    return text.replace("None", "").replace("nan", "").encode()


def send(client: TestClient, job: dict[str, Any], form: str, data: bytes,
         accept: str | None = None):
    headers = {"content-type": "text/csv" if form == "csv" else PARQUET}
    if accept:
        headers["accept"] = accept
    return client.post(job["links"]["households"], content=data, headers=headers)


def upload_of(form: str, body: dict[str, Any], **kw: Any) -> bytes:
    return csv_of(body, **kw) if form == "csv" else parquet_of(body, **kw)


def file_metadata(data: bytes) -> dict[str, str]:
    """A Parquet file's key-value metadata (in its footer)."""
    found = pq.ParquetFile(io.BytesIO(data)).metadata.metadata or {}
    return {k.decode(): v.decode() for k, v in found.items()}


def rows_of(r) -> list[dict[str, str]]:
    return list(csv.DictReader(io.StringIO(r.text)))


@pytest.mark.parametrize("form", FORMS)
def test_an_upload_gives_the_json_batch_s_figures(client: TestClient, form: str) -> None:
    """Each household's Konüs and Laspeyres indices equal the JSON batch's to the last digit,
    rows numbered from 1 (a CSV record is its row plus one; a Parquet record is its row)."""
    body = example(SUBSISTENCE)
    job = create_job(client, body)
    r = send(client, job, form, upload_of(form, body))
    assert r.status_code == 200, r.text
    rows = rows_of(r)
    direct = client.post("/v1/household-indices", json=body).json()["households"]
    assert [int(x["row"]) for x in rows] == list(range(1, 11))
    assert [int(x["record"]) for x in rows] == list(range(2 if form == "csv" else 1,
                                                          12 if form == "csv" else 11))
    for ours, theirs in zip(rows, direct, strict=True):
        figures = theirs["periods"][0]
        common = [n for n in figures if n in ours and isinstance(figures[n], float)]
        assert "konus" in common and len(common) >= 5
        for name in common:
            assert float(ours[name]) == figures[name]
    status = client.get(job["links"]["self"]).json()
    assert status["status"] == "done" and status["unused_columns"] == ["region"]
    assert status["progress"]["rows_read"] == status["progress"]["rows_total"] == 10


@pytest.mark.parametrize("form", FORMS)
def test_a_missing_column_is_refused_naming_it(client: TestClient, form: str) -> None:
    body = example(SUBSISTENCE)
    job = create_job(client, body)
    r = send(client, job, form, upload_of(form, body, drop="peat_briquettes"))
    assert r.status_code == 422
    error = r.json()["errors"][0]
    assert error["pointer"] == ("#row=1" if form == "csv" else "#column=peat_briquettes")
    assert "peat_briquettes" in error["detail"]
    assert client.get(job["links"]["self"]).json()["status"] == "waiting_for_households"


@pytest.mark.parametrize("form", FORMS)
@pytest.mark.parametrize("bad", [None, float("nan"), float("inf")])
def test_an_empty_or_bad_cell_refuses_its_row_named_by_row_and_column(
        client: TestClient, form: str, bad: float | None) -> None:
    """Row 3's rye_loaf cell (column 5 of the CSV) empty, NaN or infinite: that row is
    skipped, named by its cell; the other nine are answered."""
    body = example(SUBSISTENCE)
    job = create_job(client, body)
    data = parquet_of(body, change={(2, "rye_loaf"): bad}) if form == "parquet" else csv_of(body)
    if form == "csv":
        lines = data.split(b"\r\n")
        cells = lines[3].split(b",")
        cells[4] = {None: b"", "nan": b"nan", "inf": b"inf"}[None if bad is None else repr(bad)]
        lines[3] = b",".join(cells)
        data = b"\r\n".join(lines)
    r = send(client, job, form, data)
    assert r.status_code == 200, r.text
    assert [int(x["row"]) for x in rows_of(r)] == [1, 2, 4, 5, 6, 7, 8, 9, 10]
    skipped = client.get(job["links"]["self"]).json()["skipped"]["rows"]
    assert len(skipped) == 1 and skipped[0]["row"] == 3
    assert skipped[0]["pointer"] == ("#cell=4,5" if form == "csv" else
                                     "#row=3&column=rye_loaf")
    assert "rye_loaf" in skipped[0]["detail"]


@pytest.mark.parametrize("form", FORMS)
def test_a_column_of_words_is_refused(client: TestClient, form: str) -> None:
    """A column of text where numbers belong: a Parquet column of strings is refused as a
    whole (its type says so); a CSV's cells are each refused with their row."""
    body = example(SUBSISTENCE)
    job = create_job(client, body)
    if form == "parquet":
        data = parquet_of(body, types={"weight": pa.string()},
                          change={(k, "weight"): "many" for k in range(10)})
        r = send(client, job, form, data)
        assert r.status_code == 422
        assert r.json()["errors"][0]["pointer"] == "#column=weight"
        assert "not numbers" in r.json()["errors"][0]["detail"]
        return
    lines = csv_of(body).split(b"\r\n")
    for k in range(1, 11):
        cells = lines[k].split(b",")
        cells[3] = b"many"
        lines[k] = b",".join(cells)
    data = b"\r\n".join(lines)
    r = send(client, job, form, data)
    assert r.status_code == 200
    skipped = client.get(job["links"]["self"]).json()["skipped"]["rows"]
    assert [s["pointer"] for s in skipped] == [f"#cell={k + 1},4" for k in range(1, 11)]


def test_parquet_integers_and_decimals_are_numbers(client: TestClient) -> None:
    body = example(SUBSISTENCE)
    for k, h in enumerate(body["households"]):
        h["weight"] = float(k + 1)
    job = create_job(client, body)
    r = send(client, job, "parquet", parquet_of(body, types={"weight": pa.int32()},
                                                change={(k, "weight"): k + 1 for k in range(10)}))
    assert r.status_code == 200, r.text
    assert [float(x["weight"]) for x in rows_of(r)] == [float(k + 1) for k in range(10)]


@pytest.mark.parametrize("cut", [0, 4, 100, -12, -1])
def test_a_broken_or_cut_parquet_file_is_a_problem_saying_where(client: TestClient,
                                                                cut: int) -> None:
    """Not Parquet at all, or a file cut short (its footer and 'PAR1' missing): a 422 that
    gives the upload's size, never a 500."""
    body = example(SUBSISTENCE)
    job = create_job(client, body)
    whole = parquet_of(body)
    data = b"not a parquet file" if cut == 0 else whole[:cut] if cut > 0 else whole[:cut]
    r = send(client, job, "parquet", data)
    assert r.status_code == 422, r.text
    detail = r.json()["errors"][0]["detail"]
    assert "cannot be read" in detail and f"{len(data)} bytes" in detail
    assert client.get(job["links"]["self"]).json()["status"] == "waiting_for_households"


@pytest.mark.parametrize("form", FORMS)
def test_a_parquet_answer_holds_the_csv_answer_s_rows(client: TestClient, form: str) -> None:
    """Accept: application/vnd.apache.parquet gives the same rows as the CSV answer, with
    nulls for empty cells, and the provenance in the file's metadata."""
    body = example(SUBSISTENCE)
    as_csv = rows_of(send(client, create_job(client, body), form, upload_of(form, body)))
    job = create_job(client, body)
    r = send(client, job, form, upload_of(form, body), accept=PARQUET)
    assert r.status_code == 200 and r.headers["content-type"] == PARQUET
    table = pq.read_table(io.BytesIO(r.content))
    assert table.column_names == list(as_csv[0])
    meta = file_metadata(r.content)
    assert meta["dualcost-input-digest"] == r.headers["dualcost-input-digest"]
    assert "dualcost-error" not in meta
    for name in ("row", "record", "konus", "laspeyres", "weight"):
        assert table.column(name).to_pylist() == [
            (int(x[name]) if name in ("row", "record") else float(x[name])) for x in as_csv]
    assert table.column("household").to_pylist() == [x["household"] for x in as_csv]


def big_csv(n: int, items: list[str], *, quote_at: int | None = None,
            bad_at: int | None = None, bad: str = "x") -> bytes:
    rng = np.random.default_rng(16)
    shares = rng.dirichlet(np.ones(len(items)), size=n)
    lines = [",".join(["household", *items])]
    for h in range(n):
        cells = [f"h{h}", *map(repr, shares[h].tolist())]
        if h + 1 == quote_at:
            cells[0] = '"h, quoted"'
        if h + 1 == bad_at:
            cells[1] = bad
        lines.append(",".join(cells))
    return ("\n".join(lines) + "\n").encode()


def ces_job(client: TestClient, items: list[str]) -> dict[str, Any]:
    spec = {"items": items, "base_prices": [1.0] * len(items),
            "current_prices": [1.0 + 0.01 * k for k in range(len(items))],
            "model": {"family": "ces", "sigma": 0.6}, "formulas": ["laspeyres", "fisher"]}
    r = client.post("/v1/household-jobs", json=spec)
    assert r.status_code == 201, r.text
    return r.json()  # type: ignore[no-any-return]


@pytest.mark.parametrize("bad", ["x", "1e400", "1e-400", "", "nan"])
def test_a_bad_cell_in_a_later_block_hands_the_rest_to_the_reference_reader(
        client: TestClient, monkeypatch: pytest.MonkeyPatch, bad: str) -> None:
    """pyarrow reads blocks until one breaks a rule (a word, 1e400 beyond floating point,
    1e-400 that would read as 0, an empty cell, NaN); from that block on the reference reader
    goes on: the rows before and after keep their numbers and figures, and the bad cell is
    named as the reference reader names it. The answer equals the one of the same upload
    made unreadable for pyarrow by a quoted field (all of it by the reference reader)."""
    monkeypatch.setattr(columnar, "BLOCK_BYTES", 4096)
    items = [f"item_{k}" for k in range(6)]
    fast = send(client, ces_job(client, items), "csv", big_csv(400, items, bad_at=300, bad=bad))
    job = ces_job(client, items)
    slow = send(client, job, "csv", big_csv(400, items, bad_at=300, bad=bad, quote_at=1))
    assert fast.status_code == slow.status_code == 200
    a, b = rows_of(fast), rows_of(slow)
    assert len(a) == 399 and [x["row"] for x in a] == [x["row"] for x in b]
    assert [x["konus"] for x in a] == [x["konus"] for x in b]
    assert [x["record"] for x in a] == [str(r + 1) for r in range(1, 401) if r != 300]
    skipped = client.get(job["links"]["self"]).json()["skipped"]["rows"]
    assert [s["pointer"] for s in skipped] == ["#cell=301,2"]


@pytest.mark.parametrize("blank", [b"\n", b"\r\n", b" , \n", b",,,,,,,\n"])
def test_a_blank_line_keeps_its_row_number_on_both_readers(
        client: TestClient, monkeypatch: pytest.MonkeyPatch, blank: bytes) -> None:
    """A blank record after row 250 (empty, or only separators and spaces) is row 251 holding
    no household, on the columnar path as on the reference reader's."""
    monkeypatch.setattr(columnar, "BLOCK_BYTES", 4096)
    items = [f"item_{k}" for k in range(6)]
    data = big_csv(400, items)
    at = data.index(b"\nh250,") + 1
    fast = send(client, ces_job(client, items), "csv", data[:at] + blank + data[at:])
    quoted = big_csv(400, items, quote_at=1)
    at = quoted.index(b"\nh250,") + 1
    slow = send(client, ces_job(client, items), "csv", quoted[:at] + blank + quoted[at:])
    a, b = rows_of(fast), rows_of(slow)
    assert [x["row"] for x in a] == [x["row"] for x in b] == [
        str(r) for r in range(1, 402) if r != 251]
    assert [x["konus"] for x in a] == [x["konus"] for x in b]


def test_the_scan_keeps_uploads_pyarrow_would_read_otherwise() -> None:
    """Quotes, a decimal mark followed by twenty zeros and exponents below -299 leave the upload
    to the reference reader; a pattern split between two pieces of the upload is still seen.
    Exponents from -1 to -299 and long mantissas do not."""
    for pieces in ([b'a,b\n"x",1\n'], [b"a\n1e-3", b"00\n"], [b"a\n1E-00", b"0400\n"],
                   [b"a\n0.0000000000", b"00000000001e-299\n"], [b"a\n5e-1000\n"]):
        scan = columnar.UploadScan()
        for piece in pieces:
            scan.feed(piece)
        assert not scan.columnar, pieces
    scan = columnar.UploadScan()
    scan.feed(b"a,b\n1e-5,0.25\n0.004500000000000001,1000000000000.5\n2.5e-299,1E-120\n")
    assert scan.columnar


@pytest.mark.parametrize("accept", [None, PARQUET])
def test_an_error_after_the_answer_began_ends_it_with_an_error_record(
        client: TestClient, monkeypatch: pytest.MonkeyPatch, accept: str | None) -> None:
    """A stray quote in row 300 (record 301: the CSV cannot be read past it) after 256-row chunks have
    been answered: the answer ends with an error record naming the row (a last CSV row
    '#dualcost-error', or 'dualcost-error' in the Parquet file's metadata), and the job has
    failed, saying why. Nothing is cut without saying so."""
    monkeypatch.setenv("DUALCOST_HOUSEHOLD_CHUNK_ROWS", "256")
    from dualcost.api.app import create_app
    from dualcost.config import Settings
    from tests.conftest import EXAMPLES

    client = TestClient(create_app(Settings(examples_dir=EXAMPLES, household_chunk_rows=256)))
    items = [f"item_{k}" for k in range(4)]
    data = big_csv(400, items).replace(b"\nh299,", b'\n"h299,')
    job = ces_job(client, items)
    r = send(client, job, "csv", data, accept=accept)
    assert r.status_code == 200
    status = client.get(job["links"]["self"]).json()
    assert status["status"] == "failed" and "#row=301" in status["error"]
    if accept is None:
        last = list(csv.reader(io.StringIO(r.text)))[-1]
        assert last[0] == ERROR_KEY and "#row=301" in last[1]
        assert last[1] == status["error"]  # the record and the stored job give one reason
        assert len(rows_of(r)) == 256 + 1  # the rows answered, and the error record
    else:
        table = pq.read_table(io.BytesIO(r.content))
        assert table.num_rows == 256
        meta = file_metadata(r.content)
        assert "#row=301" in meta["dualcost-error"]
        assert meta["dualcost-error"] == status["error"]


def _rows_by_cell(result: Any, job: Any, labels: list[str], items: list[str],
                  extra: tuple[Any, ...] = ()) -> str:
    """The CSV rows as the csv module writes them cell by cell (the earlier writer), with the
    ``extra`` columns (periods by households) after the others."""
    from dualcost.api.render import csv_lines
    from dualcost.core.households import reasons_of

    names = job.output_columns(True)
    cols = [result.values[n].tolist() for n in names] + [x.tolist() for x in extra]
    flags = result.irregular_or_zeros(len(labels)).tolist()
    named = {key: [items[i] for i in at] for key, at in result.irregular_items.items()}
    out = []
    for j, row in enumerate(result.rows.tolist()):
        hid = None if result.ids is None else result.ids[j]
        for t, label in enumerate(labels):
            flag = flags[t][j]
            why = ("true", "", "") if not flag else (
                "false", ";".join(reasons_of(flag)), ";".join(named.get((t, j), ())))
            out.append([hid or "", row, int(result.records[j]), label,
                        float(result.weights[j]), float(result.expenditure[j]), *why,
                        *(c[t][j] for c in cols)])
    return csv_lines(out)


def test_the_column_wise_csv_writer_writes_what_the_csv_module_writes() -> None:
    """Two periods, ids with a comma, a quote and none, weights from 1.5e-5 to 1.5e10, item ids
    with a comma, household-periods outside the regular region (figures withheld: empty
    cells, the reasons and items named): the same text, byte for byte, as the csv module's."""
    from dualcost.api.operations.households import csv_rows
    from dualcost.core.households import HouseholdChunk, HouseholdJob, evaluate_chunk

    rng = np.random.default_rng(7)
    items = ["rye_loaf", "peat, briquettes", "ferry_pass"]
    p0 = np.array([2.4, 9.0, 38.0])
    p1 = np.array([[2.5, 10.5, 38.0], [2.7, 30.0, 41.0]])
    job = HouseholdJob.checked("stone_geary", {"subsistence_quantities": [1.0, 2.0, 0.2]}, p0,
                               p1, formulas=["laspeyres", "fisher"])
    n = 40
    shares = rng.dirichlet(np.ones(3), size=n)
    income = np.where(np.arange(n) % 7 == 0, 40.0, rng.uniform(200, 900, n))
    weights = 10.0 ** np.arange(-5, 11).repeat(3)[:n] * 1.5  # weights are at most 1e12
    ids = tuple([None, 'h "2"', "h,3", "h4"] * 10)
    chunk = HouseholdChunk(rows=np.arange(1, n + 1), shares=shares, expenditure=income,
                           weights=weights, ids=ids, records=np.arange(2, n + 2))
    result = evaluate_chunk(job, chunk)
    labels = ["2025-01", "2025-02"]
    assert result.size >= 20
    # Household-periods outside the model's regular region, as the validity checks mark them:
    # a code, the items named, the model's figures withheld (NaN).
    irregular = np.zeros((2, result.size), dtype=np.uint32)
    irregular[1, ::5] = 1
    irregular[0, 3] = 3
    values = {k: v.copy() for k, v in result.values.items()}
    for name in ("konus", "bias_laspeyres"):
        values[name][irregular != 0] = np.nan
    result = dataclasses.replace(result, irregular=irregular, values=values,
                                 irregular_items={(1, 0): (0, 1), (0, 3): (2,)})
    text = csv_rows(result, job, labels, True, items, records=True)
    assert text == _rows_by_cell(result, job, labels, items)
    assert ",false," in text and ",true," in text and '"h ""2"""' in text and "e-05" in text
    # With band_models' columns after the others (floats with gaps, and a count): the same.
    low = values["konus"] * 0.99
    low[0, ::4] = 1.5e-5
    band = (low, values["konus"] * 1.01, np.where(np.isnan(low), 0, 3).astype(np.int64))
    banded = csv_rows(result, job, labels, True, items, records=True, extra=band)
    assert banded == _rows_by_cell(result, job, labels, items, band)
    assert banded.count(",,0\r\n") == int(np.isnan(low).sum()) > 0
