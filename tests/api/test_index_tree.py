"""POST /v1/index-tree and GET /v1/sheet/index-tree: the Wrenmouth demo tree, JSON and CSV,
the Konüs index beside the comparison operation's, and bad input refused naming the field and
the node (RFC 9457 problems with JSON pointers, RFC 6901)."""

from __future__ import annotations

import copy
import csv
import io
import math
from typing import Any

import pytest
from fastapi.testclient import TestClient

from dualcost.api.schemas.index_tree import IndexTreeResponse
from tests.conftest import load_example

EXAMPLE = "indexTree.wrenmouth_coicop.json"


def body() -> dict[str, Any]:
    return copy.deepcopy(load_example(EXAMPLE))


def errors(r: Any) -> list[dict[str, str]]:
    assert r.status_code == 422, r.text
    assert r.headers["content-type"] == "application/problem+json"
    found: list[dict[str, str]] = r.json()["errors"]
    return found


def test_the_demo_tree_answers_every_node_in_every_period(client: TestClient) -> None:
    b = body()
    r = client.post("/v1/index-tree", json=b)
    assert r.status_code == 200, r.text
    answer = IndexTreeResponse.model_validate(r.json())
    assert answer.periods[0] == "2024-12" and answer.reference_value == 100
    assert [link.period for link in answer.links] == ["2024-12", "2025-12"]
    root = answer.nodes[0]
    assert root.name == "all items" and root.index[0] == 100 and root.konus is not None
    assert "indexation" in answer.caution
    for node in answer.nodes:
        assert len(node.index) == len(answer.periods)
        assert node.konus is not None and node.bias_points is not None
        assert all(abs(b - (i - k)) < 1e-9 for b, i, k in
                   zip(node.bias_points, node.index, node.konus, strict=True))
    assert {n["code"] for n in r.json()["notices"]} == {"quotes_not_priced"}
    assert r.json()["notices"][0]["items"][0]["id"] == "river_trout_2"


def test_the_csv_answer_has_one_row_per_period_and_node(client: TestClient) -> None:
    b = body()
    as_json = client.post("/v1/index-tree", json=b).json()
    r = client.post("/v1/index-tree", json=b, headers={"accept": "text/csv"})
    assert r.status_code == 200 and r.headers["content-type"].startswith("text/csv")
    assert r.headers["dualcost-input-digest"] == as_json["provenance"]["input_digest"]
    assert r.headers["dualcost-scale"] == ("indices: levels, 2024-12 = 100; "
                                           "bias: index points on base 100")
    rows = list(csv.DictReader(io.StringIO(r.text)))
    assert len(rows) == len(as_json["periods"]) * len(as_json["nodes"])
    trailed = client.post("/v1/index-tree?format=csv&provenance=trailer", json=b)
    assert trailed.text.splitlines()[-3].startswith("#dualcost-version,")
    assert "#dualcost-input-digest," + r.headers["dualcost-input-digest"] in trailed.text
    last = [row for row in rows if row["period"] == "2026-06" and row["node"] == "07 transport"]
    transport = next(n for n in as_json["nodes"] if n["name"] == "07 transport")
    assert float(last[0]["index"]) == pytest.approx(transport["index"][-1], rel=1e-15)


def test_the_spreadsheet_form_gives_one_node_in_one_period(client: TestClient) -> None:
    answer = client.post("/v1/index-tree", json=body()).json()
    fish = next(n for n in answer["nodes"] if n["name"] == "01.1.3 fish")
    column = answer["periods"].index("2025-09")
    for measure in ("index", "konus", "bias_points"):
        r = client.get("/v1/sheet/index-tree", params={"node": "01.1.3 fish", "period": "2025-09",
                                                       "measure": measure})
        assert r.status_code == 200, r.text
        assert float(r.text) == pytest.approx(fish[measure][column], rel=1e-12)
    comma = client.get("/v1/sheet/index-tree", params={"node": "01.1.3 fish", "period": "2025-09",
                                                       "decimal": "comma", "digits": 2})
    assert comma.text == f"{fish['index'][column]:.2f}".replace(".", ",")
    head = client.head("/v1/sheet/index-tree", params={"node": "01.1.3 fish",
                                                       "period": "2025-09"})
    assert head.status_code == 200 and head.headers["dualcost-input-digest"]
    options = client.options("/v1/sheet/index-tree")
    assert options.status_code == 204 and "GET" in options.headers["allow"]
    bad = client.get("/v1/sheet/index-tree", params={"node": "02 tobacco", "period": "2025-09"})
    assert errors(bad)[0]["pointer"] == "#/query/node"
    text = client.get("/v1/sheet/index-tree", params={"node": "01.1.3 fish", "period": "1999-01",
                                                      "on_error": "text"})
    assert text.status_code == 200 and text.text.startswith("ERROR:") and "period" in text.text


def test_young_and_carli_through_the_form_differ_from_the_demo_s_lowe_and_jevons(
        client: TestClient) -> None:
    q = {"node": "all items", "period": "2026-06"}
    lowe = float(client.get("/v1/sheet/index-tree", params=q).text)
    young = float(client.get("/v1/sheet/index-tree", params=q | {"upper_formula": "young"}).text)
    carli = float(client.get("/v1/sheet/index-tree",
                             params=q | {"elementary_formula": "carli"}).text)
    assert len({lowe, young, carli}) == 3


def comparison_as_tree(compare: dict[str, Any]) -> dict[str, Any]:
    """The nested CES comparison example as a tree: each item an elementary aggregate with one
    quote, weights the base expenditure."""
    p0, q0, p1 = (compare["base"]["prices"], compare["base"]["quantities"],
                  compare["current"]["prices"])
    groups: list[tuple[dict[str, Any], dict[str, Any]]] = [(compare["model"]["tree"], {})]
    root: dict[str, Any] = {}
    groups = [(compare["model"]["tree"], root)]
    while groups:
        given, out = groups.pop()
        out.update(name=given["name"], sigma=given["sigma"], children=[])
        for child in given["children"]:
            if isinstance(child, str):
                out["children"].append({"name": child})
            else:
                sub: dict[str, Any] = {}
                out["children"].append(sub)
                groups.append((child, sub))
    return {
        "periods": ["base", "current"], "tree": root,
        "quotes": [{"id": i, "aggregate": i, "prices": [p0[i], p1[i]]} for i in p0],
        "links": [{"period": "base", "weights": {i: p0[i] * q0[i] for i in p0}}],
        "reference_value": 1,
    }


def test_the_konus_index_equals_the_comparison_operation_s(client: TestClient) -> None:
    """The same nested CES tree and prices through POST /v1/comparisons: the same Konüs index
    at the root, and at a group the comparison of its subtree (separability)."""
    compare = load_example("compare.wrenmouth_nested_ces.json")
    tree = client.post("/v1/index-tree", json=comparison_as_tree(compare))
    assert tree.status_code == 200, tree.text
    nodes = {n["name"]: n for n in tree.json()["nodes"]}
    whole = client.post("/v1/comparisons", json=compare).json()
    assert nodes["all items"]["konus"][1] == pytest.approx(whole["konus"]["base"], rel=1e-12)
    energy = copy.deepcopy(compare)
    kept = ["peat_briquettes", "grid_electricity"]
    energy["items"] = [i for i in energy["items"] if i["id"] in kept]
    for part in ("base", "current"):
        for key in list(energy[part]):
            energy[part][key] = {i: v for i, v in energy[part][key].items() if i in kept}
    energy["model"]["tree"] = {"name": "home energy", "sigma": 1.2, "children": kept}
    energy.pop("reference_income")
    part = client.post("/v1/comparisons", json=energy).json()
    assert nodes["home energy"]["konus"][1] == pytest.approx(part["konus"]["base"], rel=1e-12)


# -- bad input: the field and the node --------------------------------------------------------


def test_weights_that_do_not_add_up_name_the_node_the_sum_and_the_tolerance(
        client: TestClient) -> None:
    b = body()
    b["links"][1]["weights"]["07 transport"] = 120.0
    [e] = errors(client.post("/v1/index-tree", json=b))
    assert e["pointer"] == "/links/1/weights/07 transport"
    assert "'all items > 07 transport'" in e["detail"] and "115" in e["detail"]
    assert "tolerance 1e-06" in e["detail"]
    b["normalise_weights"] = True
    b["links"][1]["weights"]["all items"] = 1005.0
    r = client.post("/v1/index-tree", json=b)
    assert r.status_code == 200, r.text
    notices = [n["message"] for n in r.json()["notices"] if n["code"] == "weights_normalised"]
    assert any("'all items > 07 transport'" in m and "scaled" in m for m in notices)


def test_a_quote_without_an_elementary_aggregate_is_refused_at_the_quote(
        client: TestClient) -> None:
    b = body()
    b["quotes"][3]["aggregate"] = "01.1.2 meat"
    [e] = errors(client.post("/v1/index-tree", json=b))
    assert e["pointer"] == "/quotes/3/aggregate" and "'01.1.2 meat'" in e["detail"]
    b["quotes"][3]["aggregate"] = "07 transport"
    [e] = errors(client.post("/v1/index-tree", json=b))
    assert e["pointer"] == "/quotes/3/aggregate" and "group" in e["detail"]


def test_a_repeated_node_is_refused_at_its_name(client: TestClient) -> None:
    b = body()
    b["tree"]["children"][3]["children"][0]["name"] = "01.1.3 fish"
    [e] = errors(client.post("/v1/index-tree", json=b))
    assert e["pointer"] == "/tree/children/3/children/0/name" and "twice" in e["detail"]


def flat(b: dict[str, Any]) -> list[dict[str, Any]]:
    """The demo tree as a table of nodes naming their parents."""
    out, stack = [], [(b["tree"], None)]
    while stack:
        node, parent = stack.pop()
        row = {k: v for k, v in node.items() if k != "children"} | {"parent": parent}
        out.append(row)
        stack.extend((c, node["name"]) for c in reversed(node.get("children", [])))
    return out


def test_the_flat_form_gives_the_same_index_and_a_cycle_is_refused_at_the_parent(
        client: TestClient) -> None:
    b = body()
    nested = client.post("/v1/index-tree", json=b).json()
    b["tree"] = flat(b)
    same = client.post("/v1/index-tree", json=b)
    assert same.status_code == 200, same.text
    assert same.json()["nodes"] == nested["nodes"]
    k = next(i for i, n in enumerate(b["tree"]) if n["name"] == "07 transport")
    b["tree"][k]["parent"] = "07.3.4 passenger transport by sea"
    [e] = errors(client.post("/v1/index-tree", json=b))
    assert e["pointer"].startswith("/tree/") and e["pointer"].endswith("/parent")
    assert "own ancestor" in e["detail"] and "07 transport" in e["detail"]


def test_an_aggregate_with_no_prices_in_a_period_is_refused_at_its_node(
        client: TestClient) -> None:
    b = body()
    for q in b["quotes"]:
        if q["aggregate"] == "01.1.4 cheese":
            q["prices"][20] = None
    [e] = errors(client.post("/v1/index-tree", json=b))
    assert e["pointer"] == "/tree/children/0/children/2"
    assert "'all items > 01 food and non-alcoholic beverages > 01.1.4 cheese'" in e["detail"]
    assert "'2025-09'" in e["detail"]


def test_dutot_over_quotes_in_different_units_gets_a_notice(client: TestClient) -> None:
    b = body()
    beer = [q for q in b["quotes"] if q["aggregate"] == "02.1.3 beer"]
    beer[1]["unit"] = "0.33 l"
    r = client.post("/v1/index-tree", json=b)
    assert r.status_code == 200, r.text
    [notice] = [n for n in r.json()["notices"] if n["code"] == "dutot_mixed_units"]
    assert "02.1.3 beer" in notice["message"]


@pytest.mark.parametrize(("change", "pointer", "words"), [
    (lambda b: b["links"][0]["weights"].pop("01.1.6 fruit"), "/links/0/weights",
     "'all items > 01 food and non-alcoholic beverages > 01.1.6 fruit' has no weight"),
    (lambda b: b["links"][0]["weights"].update({"01.9 other": 3.0}),
     "/links/0/weights/01.9 other", "not a node"),
    (lambda b: b["links"][1].update(period="2027-01"), "/links/1/period", "not one of"),
    (lambda b: b["links"].reverse(), "/links/1/period", "time order"),
    (lambda b: b["quotes"][0]["prices"].pop(), "/quotes/0/prices", "one per period"),
    (lambda b: b["quotes"][0]["prices"].__setitem__(4, -2.0), "/quotes/0/prices/4", "positive"),
    (lambda b: b.update(sigma_by_level=[0.3]), "/tree/children/1/sigma",
     "'all items > 02 alcoholic beverages and tobacco' has no sigma"),
    (lambda b: b["tree"]["children"][1].update(formula="carli"), "/tree/children/1/formula",
     "elementary aggregate"),
    (lambda b: b["tree"]["children"][4]["children"].append({"name": "09.5.1 books"}),
     "/tree/children/4/children/1", "no quotes"),
    (lambda b: b["periods"].__setitem__(3, "2024-03"), "/periods/3", "twice"),
])
def test_bad_input_names_the_field_and_the_node(client: TestClient, change: Any, pointer: str,
                                                words: str) -> None:
    b = body()
    change(b)
    [e] = errors(client.post("/v1/index-tree", json=b))
    assert e["pointer"] == pointer, e
    assert words in e["detail"], e


def test_a_big_tree_is_sent_to_the_compute_threads() -> None:
    """The work estimate grows with quotes, nodes and periods (api/workload.py): a two-period
    tree of fourteen items computes on the event loop, the demo tree and bigger ones in the
    compute threads."""
    from dualcost.api import workload
    from dualcost.api.schemas.index_tree import IndexTreeRequest
    from dualcost.config import Settings

    small = IndexTreeRequest.model_validate(comparison_as_tree(
        load_example("compare.wrenmouth_nested_ces.json")))
    demo = IndexTreeRequest.model_validate(body())
    assert workload.index_tree(small) < workload.index_tree(demo)
    big = body()
    big["quotes"] = big["quotes"] * 40
    for k, q in enumerate(big["quotes"]):
        q["id"] = f"q{k}"
    budget = Settings().inline_compute_max_work
    assert workload.index_tree(small) < budget < workload.index_tree(demo)
    assert workload.index_tree(IndexTreeRequest.model_validate(big)) > 3 * budget


def test_the_demo_file_is_the_example_and_the_readme_states_its_figures(
        client: TestClient) -> None:
    """The spreadsheet form reads service/dualcost/demo/wrenmouth_index_tree.json, which is the
    example; the README's figures for 2026-06 are the answer's, to the decimals written."""
    import json
    import re

    from tests.conftest import ROOT

    demo = ROOT / "service" / "dualcost" / "demo" / "wrenmouth_index_tree.json"
    assert json.loads(demo.read_text(encoding="utf-8")) == body()
    nodes = {n["name"]: n for n in client.post("/v1/index-tree", json=body()).json()["nodes"]}
    readme = re.sub(r"\s+", " ", (ROOT / "README.md").read_text(encoding="utf-8"))
    found = re.search(r"all items stand at ([\d.]+) .*? against a Konüs index of ([\d.]+): a "
                      r"bias of ([\d.]+) index points, ([\d.]+) in food", readme)
    assert found is not None
    root, food = nodes["all items"], nodes["01 food and non-alcoholic beverages"]
    for text, value in zip(found.groups(), (root["index"][-1], root["konus"][-1],
                                            root["bias_points"][-1], food["bias_points"][-1]),
                           strict=True):
        assert text == f"{value:.2f}"
    assert "applicable law or agreement" in readme.split("### The index as a statistical")[1]


def test_the_client_sends_the_tree_and_reads_the_csv_answer(client: TestClient) -> None:
    """dualcost.client.Client.index_tree posts the body (format=csv for the table) and reads
    the answer as the other operations' (here through the app in-process)."""
    import httpx

    from dualcost.client import Client, Table

    def handler(request: httpx.Request) -> httpx.Response:
        r = client.request(request.method, str(request.url.copy_with(scheme="http",
                                                                      host="testserver")),
                           content=request.content, headers=dict(request.headers))
        return httpx.Response(r.status_code, content=r.content, headers=r.headers)

    with Client("http://dualcost.test", transport=httpx.MockTransport(handler)) as dc:
        table = dc.index_tree(body(), format="csv")
        answer = dc.index_tree(body())
    assert isinstance(table, Table) and table.header[:2] == ("period", "node")
    assert len(table.rows) == len(answer["periods"]) * len(answer["nodes"])


def test_fitted_sigmas_come_with_their_standard_errors_data_and_notices(
        client: TestClient) -> None:
    """sigma_fit by_group on the demo tree: each group's estimate equals scipy.stats.linregress
    of the change of the children's log shares on the change of their log price levels (two
    links, one link pair: the CES share equation in differences, Arrow, Chenery, Minhas and
    Solow 1961), with its stderr; groups with one child are named in a notice with the
    fallback they take, and the Konüs index at every node is the model's under the sigmas
    used."""
    from scipy import stats

    r = client.post("/v1/index-tree", json=load_example("indexTree.wrenmouth_fitted_sigma.json"))
    assert r.status_code == 200, r.text
    answer = IndexTreeResponse.model_validate(r.json())
    fit = answer.sigma_fit
    assert fit is not None and fit.method == "by_group"
    data = {d.node: d for d in fit.data}
    food = next(e for e in fit.estimates if e.nodes == ["01 food and non-alcoholic beverages"])
    d = data[food.nodes[0]]
    ys = [math.log(b / a) for a, b in zip(d.shares[0], d.shares[1], strict=True)]
    xs = [math.log(b / a) for a, b in zip(d.price_levels[0], d.price_levels[1], strict=True)]
    reference = stats.linregress(xs, ys)
    assert food.sigma == pytest.approx(1.0 - reference.slope, rel=1e-9)
    assert food.standard_error == pytest.approx(reference.stderr, rel=1e-9)
    assert (food.observations, food.degrees_of_freedom) == (5, 3)
    by_node = {n.name: n for n in answer.nodes}
    assert by_node[food.nodes[0]].sigma == pytest.approx(food.sigma)
    notices = [n.message for n in answer.notices if n.code == "sigma_not_fitted"]
    assert any("'all items > 09 recreation and culture'" in m and "one child only" in m
               and "1.5 (its own sigma)" in m for m in notices)
    assert any("'all items > 07 transport'" in m and "below 0" in m for m in notices)
    assert by_node["07 transport"].sigma == 0.5  # its own sigma, as the notice says
    [over] = [n.message for n in answer.notices if n.code == "sigma_fitted_over_given"]
    assert "'01 food and non-alcoholic beverages' 0.9 (its own sigma) -> 0.9002" in over


@pytest.mark.parametrize(("change", "pointer"), [
    ({"sigma_fit": "by_item"}, "/sigma_fit"),
    ({"sigma_fit": "by_group", "sigma_fallback": -1}, "/sigma_fallback"),
])
def test_bad_fit_options_are_named_by_field(client: TestClient, change: dict[str, Any],
                                            pointer: str) -> None:
    b = body() | change
    found = errors(client.post("/v1/index-tree", json=b))
    assert found[0]["pointer"] == pointer


def test_the_readme_states_the_fitted_examples_figures(client: TestClient) -> None:
    import re

    from tests.conftest import ROOT

    readme = re.sub(r"\s+", " ", (ROOT / "README.md").read_text(encoding="utf-8"))
    found = re.search(r"give food a sigma of ([\d.]+) \(standard error ([\d.]+), three degrees "
                      r"of freedom\), and in 2026-06 all items stand at ([\d.]+) against a Konüs "
                      r"index of ([\d.]+) under the fitted sigmas", readme)
    assert found is not None
    answer = client.post("/v1/index-tree",
                         json=load_example("indexTree.wrenmouth_fitted_sigma.json")).json()
    food = next(e for e in answer["sigma_fit"]["estimates"]
                if e["nodes"] == ["01 food and non-alcoholic beverages"])
    root = answer["nodes"][0]
    values = (food["sigma"], food["standard_error"], root["index"][-1], root["konus"][-1])
    for text, value in zip(found.groups(), values, strict=True):
        assert text == f"{value:.2f}"
    assert food["degrees_of_freedom"] == 3
