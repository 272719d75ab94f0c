"""The model-free brackets and the band across models where other answers show them: the index
series' CSV table, the comparison (band_models), the household batch. Each figure is checked
against the operation that computes it alone (common practice: an option that repeats another
operation's figures must give the same figures)."""

from __future__ import annotations

import csv
import io

from fastapi.testclient import TestClient

from tests.conftest import load_example

SERIES = "indexSeries.wrenmouth_monthly_ces.json"


def test_the_series_csv_carries_the_brackets_when_asked(client: TestClient) -> None:
    """revealed_bounds: true with format=csv: one revealed_* column per figure of the JSON
    block's rows, the same numbers in the same periods, and the verdicts in the headers; without
    the option the table has no such column."""
    request = load_example(SERIES) | {"revealed_bounds": True}
    block = client.post("/v1/index-series", json=request).json()["revealed_bounds"]
    r = client.post("/v1/index-series?format=csv", json=request)
    assert r.status_code == 200, r.text
    rows = list(csv.DictReader(io.StringIO(r.text)))
    assert [row["period"] for row in rows] == [row["period"] for row in block["rows"]]
    for row, want in zip(rows, block["rows"], strict=True):
        for name in ("lower", "upper", "laspeyres", "paasche"):
            assert float(row[f"revealed_{name}"]) == want[name]
        assert row["revealed_konus_inside"] == ""  # null in JSON: the model's items differ
    assert r.headers["dualcost-garp"] == ("pass" if block["consistency"]["garp"] else "fail")
    assert r.headers["dualcost-revealed-items"].split() == block["items"]
    plain = client.post("/v1/index-series?format=csv", json=load_example(SERIES))
    assert "revealed_lower" not in plain.text.splitlines()[0]
    assert "dualcost-garp" not in plain.headers
