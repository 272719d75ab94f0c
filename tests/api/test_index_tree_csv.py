"""POST /v1/index-tree/csv: the Wrenmouth demo tree's quotes as a long CSV table (RFC 4180, as
Python's csv module writes it) give exactly the JSON form's answer, in any row order and in the
comma-decimal dialect of spreadsheets; bad cells are named by row and column (RFC 7111
fragments), bad tree or links by query parameter and the place inside its JSON."""

from __future__ import annotations

import copy
import csv
import io
import json
import random
from typing import Any
from urllib.parse import urlencode

import pytest
from fastapi.testclient import TestClient

from dualcost.api.schemas.index_tree import IndexTreeResponse
from tests.api.test_provenance_and_formats import assert_headers, expected_digest
from tests.conftest import load_example

EXAMPLE = "indexTree.wrenmouth_coicop.json"
HEADER = ["quote", "aggregate", "period", "price", "item", "outlet", "unit"]
UPLOAD = {"content-type": "text/csv"}


def demo() -> dict[str, Any]:
    return copy.deepcopy(load_example(EXAMPLE))


def records(body: dict[str, Any]) -> list[list[Any]]:
    """One record per quote and period priced, by quote (as the JSON form lists them)."""
    return [[q["id"], q["aggregate"], t, p, q.get("item") or "", q.get("outlet") or "",
             q.get("unit") or ""]
            for q in body["quotes"] for t, p in zip(body["periods"], q["prices"], strict=True)
            if p is not None]


def as_csv(rows: list[list[Any]], delimiter: str = ",", comma: bool = False) -> str:
    out = io.StringIO()
    writer = csv.writer(out, delimiter=delimiter, lineterminator="\n")
    writer.writerow(HEADER)
    for row in rows:
        cells = [str(c) for c in row]
        if comma:
            cells[3] = cells[3].replace(".", ",")
        writer.writerow(cells)
    return out.getvalue()


def query(body: dict[str, Any], **more: str) -> dict[str, str]:
    return {"tree": json.dumps(body["tree"]), "links": json.dumps(body["links"]),
            "sigma_by_level": ",".join(str(s) for s in body["sigma_by_level"]), **more}


def post(client: TestClient, text: str, params: dict[str, str]) -> Any:
    return client.post("/v1/index-tree/csv?" + urlencode(params), content=text.encode(),
                       headers=UPLOAD)


def test_the_demo_has_808_priced_quote_periods() -> None:
    assert len(records(demo())) == 808


def test_the_upload_gives_the_json_forms_answer_in_any_row_order_and_dialect(
        client: TestClient) -> None:
    """By quote, shuffled, and with ';' between fields and decimal commas: every node's index
    and Konüs index equal POST /v1/index-tree on the same tree (the dialect detected and said)."""
    body = demo()
    want = client.post("/v1/index-tree", json=body).json()
    rows = records(body)
    shuffled = rows[:]
    random.Random(20).shuffle(shuffled)
    for text in (as_csv(rows), as_csv(shuffled), as_csv(shuffled, ";", comma=True)):
        r = post(client, text, query(body))
        assert r.status_code == 200, r.text
        got = IndexTreeResponse.model_validate(r.json())
        assert got.periods == want["periods"]
        for node, expected in zip(got.nodes, want["nodes"], strict=True):
            assert node.index == expected["index"] and node.konus == expected["konus"]
        codes = [n.code for n in got.notices]
        assert codes[0] == "csv_dialect_detected" and "quotes_not_priced" in codes
    assert "';'" in got.notices[0].message and "','" in got.notices[0].message


def test_the_csv_answer_and_the_provenance_of_the_upload(client: TestClient) -> None:
    """The answer's digest is that of the upload's SHA-256 and its query (presentation
    parameters left out), as for every CSV upload."""
    import hashlib

    body = demo()
    text = as_csv(records(body))
    params = query(body, upper_formula="young")
    r = post(client, text, params | {"format": "csv"})
    assert r.status_code == 200 and r.headers["content-type"].startswith("text/csv")
    rows = list(csv.DictReader(io.StringIO(r.text)))
    assert len(rows) == 19 * 19 and rows[0]["formula"] == "young"
    sha = hashlib.sha256(text.encode()).hexdigest()
    assert_headers(r, expected_digest({"csv_sha256": sha, "query": params}))


def test_periods_that_are_not_dates_keep_their_order_with_a_notice(client: TestClient) -> None:
    body = demo()
    labels = {p: f"P{k:02d}" for k, p in enumerate(body["periods"])}
    rows = [[r[0], r[1], labels[r[2]], *r[3:]] for r in records(body)]
    for link in body["links"]:
        link["period"] = labels[link["period"]]
        link["weight_reference"] = [labels[p] for p in link["weight_reference"]]
    r = post(client, as_csv(rows), query(body))
    assert r.status_code == 200, r.text
    assert "periods_in_order_of_appearance" in {n["code"] for n in r.json()["notices"]}


def _replace(text: str, old: str, new: str, count: int = 1) -> str:
    assert old in text
    return text.replace(old, new, count)


@pytest.mark.parametrize(("change", "pointer", "words"), [
    (lambda t, q: (_replace(t, ",2.4,Rye", ",-2.4,Rye"), q), "#cell=2,4", "positive"),
    (lambda t, q: (_replace(t, ",2.4,Rye", ",1.234,5,Rye"), q), "#row=2", "cells"),
    # The first record again at the end: record 810 (808 quote-periods after the header).
    (lambda t, q: (t + t.splitlines()[1] + "\n", q), "#cell=810,3", "priced twice"),
    (lambda t, q: (_replace(t, "01.1.1 bread and cereals", "01.1.1 bread", -1), q),
     "#cell=2,2", "not a node of the tree"),
    (lambda t, q: (_replace(t, "quote,", "id,"), q), "#row=1", "no column 'quote'"),
    (lambda t, q: (t, q | {"tree": "{\"name\": "}), "#/query/tree", "JSON"),
    (lambda t, q: (t, q | {"links": q["links"].replace("\"07 transport\": 113.0",
                                                       "\"07 transport\": 1.0")}),
     "#/query/links/0/weights/07 transport", "add up"),
    (lambda t, q: (t, q | {"sigma_by_level": "0.3,a"}), "#/query/sigma_by_level/1",
     "not a number"),
    (lambda t, q: (t, q | {"sigma_fit": "by_group", "sigma_fallback": "-1"}),
     "#/query/sigma_fallback", "greater than"),
])
def test_bad_input_names_the_cell_or_the_query_parameter(client: TestClient, change: Any,
                                                         pointer: str, words: str) -> None:
    body = demo()
    text, params = change(as_csv(records(body)), query(body))
    r = post(client, text, params)
    assert r.status_code == 422, r.text
    first = r.json()["errors"][0]
    assert first["pointer"] == pointer, first
    assert words in first["detail"], first


def test_the_shipped_files_are_the_demo_tree_and_the_upload_answers_as_the_json_form(
        client: TestClient) -> None:
    """docs/examples/wrenmouth_quotes.csv, wrenmouth_tree.json and wrenmouth_links.json (the
    README's command) are the demo tree's quotes, tree and links."""
    from tests.conftest import ROOT

    folder = ROOT / "docs" / "examples"
    body = demo()
    text = (folder / "wrenmouth_quotes.csv").read_text(encoding="utf-8")
    assert text == as_csv(records(body))
    tree = (folder / "wrenmouth_tree.json").read_text(encoding="utf-8")
    links = (folder / "wrenmouth_links.json").read_text(encoding="utf-8")
    assert json.loads(tree) == body["tree"] and json.loads(links) == body["links"]
    r = post(client, text, {"tree": tree, "links": links, "sigma_by_level": "0.3,0.7,1,1"})
    want = client.post("/v1/index-tree", json=body).json()
    assert r.status_code == 200 and r.json()["nodes"] == want["nodes"]


def test_the_client_uploads_the_quotes_and_runs_clauses_on_the_tree(client: TestClient) -> None:
    """dualcost.client.Client.index_tree_csv and uprating_from_index_tree, through the app
    in-process: the same answers as the operations give."""
    import httpx

    from dualcost.client import Client

    def handler(request: httpx.Request) -> httpx.Response:
        r = client.request(request.method, str(request.url.copy_with(scheme="http",
                                                                      host="testserver")),
                           content=request.content, headers=dict(request.headers))
        return httpx.Response(r.status_code, content=r.content, headers=r.headers)

    body = demo()
    clauses = load_example("upratingFromIndexTree.wrenmouth_pension_from_the_tree.json")
    with Client("http://dualcost.test", transport=httpx.MockTransport(handler)) as dc:
        answer = dc.index_tree_csv(as_csv(records(body)), tree=body["tree"], links=body["links"],
                                   sigma_by_level=body["sigma_by_level"])
        upratings = dc.uprating_from_index_tree(clauses)
    assert isinstance(answer, dict) and isinstance(upratings, dict)
    assert answer["nodes"] == client.post("/v1/index-tree", json=body).json()["nodes"]
    assert upratings["clauses"] == client.post("/v1/uprating/index-tree",
                                               json=clauses).json()["clauses"]
