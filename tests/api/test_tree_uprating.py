"""POST /v1/uprating/index-tree: uprating clauses on a node of an index tree. The factors equal
the clause worked by hand (decimal rounding half up, floor, cap: common practice in indexation
clauses) on the published series of POST /v1/index-tree for the same tree; the caution comes
first; bad clauses and nodes are named by field."""

from __future__ import annotations

import copy
import csv
import io
from decimal import ROUND_HALF_UP, Decimal
from typing import Any

import pytest
from fastapi.testclient import TestClient

from dualcost.api.schemas.common import CAUTION
from dualcost.api.schemas.tree_uprating import TreeUpratingResponse
from tests.conftest import load_example

EXAMPLE = "upratingFromIndexTree.wrenmouth_pension_from_the_tree.json"
TREE_FIELDS = ("node", "clauses", "amount")


def body(**changes: Any) -> dict[str, Any]:
    return copy.deepcopy(load_example(EXAMPLE)) | changes


def published(client: TestClient, request: dict[str, Any], node: str,
              ) -> tuple[dict[str, float], dict[str, float]]:
    """The node's published index and Konüs index by period, from POST /v1/index-tree."""
    tree = {k: v for k, v in request.items() if k not in TREE_FIELDS}
    r = client.post("/v1/index-tree", json=tree)
    assert r.status_code == 200, r.text
    answer = r.json()
    n = next(x for x in answer["nodes"] if x["name"] == node)
    return (dict(zip(answer["periods"], n["index"], strict=True)),
            dict(zip(answer["periods"], n["konus"], strict=True)))


def by_hand(later: float, earlier: float, *, decimals: int | None = None,
            floor: float | None = None, cap: float | None = None) -> float:
    """The factor a clause pays: the change in percent, rounded half up at the decimals,
    held between floor and cap, as 1 + change / 100."""
    change = Decimal(repr(100.0 * (later / earlier - 1.0)))
    if decimals is not None:
        change = change.quantize(Decimal(1).scaleb(-decimals), rounding=ROUND_HALF_UP)
    out = float(change)
    out = out if floor is None else max(out, floor)
    out = out if cap is None else min(out, cap)
    return 1.0 + out / 100.0


def factors(answer: dict[str, Any], clause: int) -> dict[str, float]:
    [step] = [s for s in answer["clauses"][clause]["upratings"] if s["paid_within_series"]]
    return {u["index"]: u["factor"] for u in step["by_index"]}


def test_the_roots_factor_is_the_clause_worked_on_the_published_root_series(
        client: TestClient) -> None:
    """Clause 0: the 12-month change read in March 2026, one decimal half up, floor 0; clause
    1: the change since December 2024 read in December 2025, capped at 5 percent. Each factor
    equals the hand computation on the root series POST /v1/index-tree publishes, for the
    published index (Lowe) and for the Konüs index."""
    request = body()
    r = client.post("/v1/uprating/index-tree", json=request)
    assert r.status_code == 200, r.text
    answer = TreeUpratingResponse.model_validate(r.json())
    assert answer.caution.endswith(CAUTION) and answer.node == "all items"
    assert answer.indices == ["lowe", "konus"] and answer.frequency == "monthly"
    index, konus = published(client, request, "all items")
    got = factors(r.json(), 0)
    for name, series in (("lowe", index), ("konus", konus)):
        assert got[name] == pytest.approx(
            by_hand(series["2026-03"], series["2025-03"], decimals=1, floor=0.0), abs=1e-12)
    got = factors(r.json(), 1)
    for name, series in (("lowe", index), ("konus", konus)):
        assert got[name] == pytest.approx(by_hand(series["2025-12"], series["2024-12"], cap=5.0),
                                          abs=1e-12)
    assert got["lowe"] == 1.05  # the cap binds: the root rose 8.3 percent in 2025
    money = r.json()["clauses"][0]["money"]
    lowe = next(m for m in money if m["index"] == "lowe")
    assert lowe["paid"][-1] == pytest.approx(1000 * factors(r.json(), 0)["lowe"])
    assert r.headers["dualcost-caution"] == " ".join(CAUTION.split())


def test_any_node_and_fitted_sigmas_and_the_csv_answer(client: TestClient) -> None:
    """A group's series (food) under fitted sigmas: the factor is the hand computation on that
    node's published series under the same request; the CSV answer has its rows."""
    request = body(node="01 food and non-alcoholic beverages", sigma_fit="by_group")
    r = client.post("/v1/uprating/index-tree", json=request)
    assert r.status_code == 200, r.text
    assert r.json()["sigma_fit"]["method"] == "by_group"
    index, konus = published(client, request, request["node"])
    got = factors(r.json(), 0)
    assert got["konus"] == pytest.approx(
        by_hand(konus["2026-03"], konus["2025-03"], decimals=1, floor=0.0), abs=1e-12)
    assert got["lowe"] == pytest.approx(
        by_hand(index["2026-03"], index["2025-03"], decimals=1, floor=0.0), abs=1e-12)
    r = client.post("/v1/uprating/index-tree?format=csv", json=request)
    assert r.status_code == 200 and r.headers["content-type"].startswith("text/csv")
    rows = list(csv.DictReader(io.StringIO(r.text)))
    assert {(x["clause"], x["index"]) for x in rows} >= {
        ("Wrenmouth harbour pension", "lowe"), ("Wrenmouth harbour pension", "konus")}


def test_the_root_is_the_default_node_with_a_notice(client: TestClient) -> None:
    request = body()
    del request["node"]
    r = client.post("/v1/uprating/index-tree", json=request)
    assert r.status_code == 200, r.text
    assert "node_assumed" in {n["code"] for n in r.json()["notices"]}


@pytest.mark.parametrize(("change", "pointer", "words"), [
    ({"node": "99 nothing"}, "/node", "not a node"),
    ({"clauses": [{"measure": "annual_average", "lag": 1}]}, "/clauses/0/measure",
     "needs periods"),
    ({"clauses": [{"measure": "twelve_month", "period_of_year": 3, "lag": 60}]},
     "/clauses/0/lag", "after the series"),
    ({"clauses": [{"measure": "cumulative", "period_of_year": 3, "lag": 1,
                   "since": "2024-01"}]}, "/clauses/0/since", "not in the series"),
    ({"sigma_fit": "by_group", "sigma_fallback": -1.0}, "/sigma_fallback", "greater than"),
])
def test_bad_clauses_and_nodes_are_named_by_field(client: TestClient, change: dict[str, Any],
                                                  pointer: str, words: str) -> None:
    r = client.post("/v1/uprating/index-tree", json=body(**change))
    assert r.status_code == 422, r.text
    [e] = r.json()["errors"]
    assert e["pointer"] == pointer, e
    assert words in e["detail"], e


def test_the_readme_states_the_examples_figures(client: TestClient) -> None:
    """The README's figures for the example are the answer's, to the decimals written."""
    import re

    from tests.conftest import ROOT

    readme = re.sub(r"\s+", " ", (ROOT / "README.md").read_text(encoding="utf-8"))
    found = re.search(r"never down: ([\d.]+) percent under the published Lowe index against "
                      r"([\d.]+) under the Konüs index, ([\d.]+) more paid by 2026-06", readme)
    assert found is not None
    answer = client.post("/v1/uprating/index-tree", json=body()).json()
    got = factors(answer, 0)
    lowe = next(m for m in answer["clauses"][0]["money"] if m["index"] == "lowe")
    values = (100 * (got["lowe"] - 1), 100 * (got["konus"] - 1), lowe["difference_vs_konus_total"])
    for text, value in zip(found.groups(), values, strict=True):
        assert text == f"{value:.{len(text.split('.')[1])}f}"
