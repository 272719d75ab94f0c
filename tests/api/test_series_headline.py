"""Headline-only series answers (``detail: "headline"``): the rows per item are left out and the
answer says so; every figure, flag and notice is the full answer's.

The yardstick is the full answer to the same request (an answer that leaves out rows must not
change what it keeps); the Wrenmouth panel is the project's invented demo data.
"""

from __future__ import annotations

import csv
import io
from typing import Any

from tests.api.test_bad_input import assert_problem
from tests.conftest import ROOT, load_example

EXAMPLE = "indexSeries.wrenmouth_monthly_ces.json"
PANEL = (ROOT / "docs/examples/wrenmouth_panel.csv").read_text(encoding="utf-8")
PER_ITEM_COLUMNS = {"items_not_priced", "items_left_out_fixed_base", "items_left_out_of_link"}
CSV_QUERY = ("/v1/index-series/csv?base_period=2024-12"
             "&model=%7B%22family%22%3A%22ces%22%2C%22sigma%22%3A0.7%7D")


def _gappy() -> dict[str, Any]:
    """The example with one item unpriced in one month, so that there are rows per item."""
    body = load_example(EXAMPLE)
    item = list(body["prices"][3])[1]
    for name in ("prices", "quantities", "expenditures"):
        if body.get(name) and body[name][3]:
            body[name][3].pop(item, None)
    return body


def _table(text: str) -> dict[str, list[str]]:
    rows = list(csv.reader(io.StringIO(text)))
    return {name: [row[j] for row in rows[1:]] for j, name in enumerate(rows[0])}


def test_a_headline_json_answer_leaves_out_the_rows_per_item_and_says_so(client) -> None:
    """Every member the headline answer keeps equals the full answer's, number for number."""
    full = client.post("/v1/index-series", json=_gappy()).json()
    headline = client.post("/v1/index-series", json=_gappy() | {"detail": "headline"}).json()
    assert full["detail"] == "full" and full["left_out"] == []
    assert full["item_treatment"] and full["weights"]["items"]
    assert headline["detail"] == "headline"
    assert headline["left_out"] == ["item_treatment", "weights.items"]
    assert headline["item_treatment"] is None and headline["weights"]["items"] is None
    kept = set(full) - {"item_treatment", "weights", "detail", "left_out", "provenance"}
    assert {key: headline[key] for key in kept} == {key: full[key] for key in kept}
    assert {k: v for k, v in headline["weights"].items() if k != "items"} == {
        k: v for k, v in full["weights"].items() if k != "items"}


def test_a_headline_csv_answer_leaves_out_the_per_item_columns_and_says_so(client) -> None:
    """The JSON body answered as CSV and the CSV upload: the same table without the three
    columns of item ids, named in Dualcost-Left-Out."""
    for post in (lambda extra: client.post("/v1/index-series?format=csv", json=_gappy() | extra),
                 lambda extra: client.post(CSV_QUERY + "".join(f"&{k}={v}" for k, v in
                                                               extra.items()),
                                           content=PANEL, headers={"content-type": "text/csv",
                                                                   "accept": "text/csv"})):
        full, headline = post({}), post({"detail": "headline"})
        assert full.status_code == headline.status_code == 200, headline.text
        assert "dualcost-left-out" not in full.headers
        assert headline.headers["dualcost-detail"] == "headline"
        assert set(headline.headers["dualcost-left-out"].split()) == PER_ITEM_COLUMNS
        whole, short = _table(full.text), _table(headline.text)
        assert PER_ITEM_COLUMNS <= set(whole) and not PER_ITEM_COLUMNS & set(short)
        assert short == {k: v for k, v in whole.items() if k not in PER_ITEM_COLUMNS}


def test_an_unknown_detail_is_a_problem_naming_it(client) -> None:
    r = client.post("/v1/index-series", json=_gappy() | {"detail": "brief"})
    assert_problem(r, "/detail", "full", "headline")
    r = client.post(CSV_QUERY + "&detail=brief", content=PANEL,
                    headers={"content-type": "text/csv"})
    assert_problem(r, "#/query/detail")
