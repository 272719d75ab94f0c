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


BAND = "compare.wrenmouth_nested_ces_inside_bracket_and_band.json"


def test_a_comparison_s_band_equals_the_sensitivity_request_with_those_models(
        client: TestClient) -> None:
    """band_models: the band block equals POST /v1/sensitivity with the same budget, prices
    and models (its ranges and each model's Konüs indices), and konus_inside says whether the
    comparison's own K(u0) is in the konus_base range (its definition)."""
    request = load_example(BAND)
    answer = client.post("/v1/comparisons", json=request).json()
    band = answer["band"]
    sweep = {k: request[k] for k in ("items", "base", "current")} | {
        "models": request["band_models"]}
    alone = client.post("/v1/sensitivity", json=sweep).json()
    assert band["ranges"] == alone["band"]
    for mine, theirs in zip(band["models"], alone["models"], strict=True):
        assert mine["family"] == theirs["family"]
        assert [mine[f"konus_{k}"] for k in ("base", "current", "midpoint")] == [
            theirs["konus"][k] for k in ("base", "current", "midpoint")]
    k = answer["konus"]["base"]
    base = next(x for x in band["ranges"] if x["measure"] == "konus_base")
    assert band["konus_inside"] == (base["low"] <= k <= base["high"])
    bracket = answer["revealed_bounds"]
    assert all(bracket["lower"] <= m["konus_base"] <= bracket["upper"] for m in band["models"])


def test_a_comparison_s_band_in_csv_and_its_absence(client: TestClient) -> None:
    request = load_example(BAND)
    band = client.post("/v1/comparisons", json=request).json()["band"]
    r = client.post("/v1/comparisons?format=csv", json=request)
    assert r.status_code == 200, r.text
    rows = {row["measure"]: row for row in csv.DictReader(io.StringIO(r.text))}
    for x in band["ranges"]:
        if x["measure"].startswith("konus_"):
            assert float(rows[f"band_{x['measure']}_low"]["value"]) == x["low"]
            assert float(rows[f"band_{x['measure']}_high"]["value"]) == x["high"]
    plain = {k: v for k, v in request.items() if k != "band_models"}
    assert client.post("/v1/comparisons", json=plain).json()["band"] is None


def test_a_bad_band_model_is_named_by_its_position(client: TestClient) -> None:
    request = load_example(BAND)
    request["band_models"][0]["sigma"] = -1.0
    r = client.post("/v1/comparisons", json=request)
    assert r.status_code == 422, r.text
    assert [e["pointer"] for e in r.json()["errors"]] == ["/band_models/0/sigma"]
    request["band_models"] = []
    r = client.post("/v1/comparisons", json=request)
    assert r.status_code == 422, r.text
    assert [e["pointer"] for e in r.json()["errors"]] == ["/band_models"]


HOUSEHOLDS = "householdIndices.wrenmouth_household_types_band.json"


def test_each_household_s_band_is_the_range_of_its_own_indices_under_each_model(
        client: TestClient) -> None:
    """band_models on the household batch: each household-period's band is the least and
    greatest K(u0) of the same household in the batch requested alone under each model (the
    band's definition), and konus_inside compares the batch's own K(u0) with it."""
    request = load_example(HOUSEHOLDS)
    answer = client.post("/v1/household-indices", json=request)
    assert answer.status_code == 200, answer.text
    alone = []
    for spec in request["band_models"]:
        single = {k: v for k, v in request.items() if k != "band_models"} | {"model": spec}
        r = client.post("/v1/household-indices", json=single)
        assert r.status_code == 200, r.text
        alone.append(r.json()["households"])
    for j, household in enumerate(answer.json()["households"]):
        for t, period in enumerate(household["periods"]):
            values = [a[j]["periods"][t]["konus"] for a in alone]
            band = period["band"]
            assert (band["konus_low"], band["konus_high"], band["models"]) == (
                min(values), max(values), len(values))
            k = period["konus"]
            assert band["konus_inside"] == (min(values) <= k <= max(values))
    plain = {k: v for k, v in request.items() if k != "band_models"}
    first = client.post("/v1/household-indices", json=plain).json()["households"][0]
    assert first["periods"][0].get("band") is None


def test_the_household_band_in_csv(client: TestClient) -> None:
    request = load_example(HOUSEHOLDS)
    households = client.post("/v1/household-indices", json=request).json()["households"]
    r = client.post("/v1/household-indices?format=csv", json=request)
    assert r.status_code == 200, r.text
    rows = list(csv.DictReader(io.StringIO(r.text)))
    want = [p["band"] for h in households for p in h["periods"]]
    assert len(rows) == len(want)
    for row, band in zip(rows, want, strict=True):
        assert float(row["band_konus_low"]) == band["konus_low"]
        assert float(row["band_konus_high"]) == band["konus_high"]
        assert int(row["band_models"]) == band["models"]


def test_a_household_band_refuses_by_field(client: TestClient) -> None:
    """A bad band model is named by its position; a model that needs incomes the households do
    not give is named; households times models above max_households is refused."""
    from dualcost.api.app import create_app
    from dualcost.config import Settings
    from tests.conftest import EXAMPLES

    request = load_example(HOUSEHOLDS)
    request["band_models"][2] = {"family": "ces", "sigma": -2.0}
    r = client.post("/v1/household-indices", json=request)
    assert [e["pointer"] for e in r.json()["errors"]] == ["/band_models/2/sigma"], r.text
    request["band_models"][2] = {"family": "stone_geary"}
    r = client.post("/v1/household-indices", json=request)
    assert r.status_code == 422, r.text
    assert [e["pointer"] for e in r.json()["errors"]] == ["/band_models/2"]
    small = TestClient(create_app(Settings(examples_dir=EXAMPLES, max_households=8)))
    r = small.post("/v1/household-indices", json=load_example(HOUSEHOLDS))
    assert r.status_code == 422, r.text
    assert [e["pointer"] for e in r.json()["errors"]] == ["/band_models"]


def test_households_a_band_model_refuses_are_counted_not_dropped(client: TestClient) -> None:
    """A Stone-Geary band model whose subsistence cost is above the poorer deciles' incomes
    refuses them (Stone 1954: income must cover subsistence); their band is over the other
    model alone, a notice counts them, and the households the model takes have both."""
    request = load_example("householdIndices.wrenmouth_deciles_subsistence.json")
    subsistence = request["model"]["subsistence_quantities"]
    request["model"] = {"family": "ces", "sigma": 0.5}
    request["band_models"] = [
        {"family": "stone_geary",
         "subsistence_quantities": {k: 2.5 * v for k, v in subsistence.items()}},
        {"family": "cobb_douglas"}]
    r = client.post("/v1/household-indices", json=request)
    assert r.status_code == 200, r.text
    answer = r.json()
    counts = [h["periods"][0]["band"]["models"] for h in answer["households"]]
    assert 1 in counts and 2 in counts and set(counts) <= {1, 2}
    notice = next(n for n in answer["notices"] if n["code"] == "band_households_left_out")
    assert notice["message"].startswith(f"{counts.count(1)} household(s)")
    alone = {k: v for k, v in request.items() if k != "band_models"} | {
        "model": {"family": "cobb_douglas"}}
    cobb = client.post("/v1/household-indices", json=alone).json()["households"]
    for h, c in zip(answer["households"], cobb, strict=True):
        band = h["periods"][0]["band"]
        if band["models"] == 1:
            assert band["konus_low"] == band["konus_high"] == c["periods"][0]["konus"]


def test_a_series_band_is_the_range_of_each_model_s_own_series(client: TestClient) -> None:
    """band_models on POST /v1/index-series: each model's fixed-base Konüs series equals the
    series requested alone with that model, and the band is their least and greatest in every
    period (its definition), beside the series' own; as CSV, three columns more; an audit
    refuses the option by name rather than drop it."""
    request = load_example(SERIES) | {"band_models": [
        {"family": "cobb_douglas"}, {"family": "ces", "sigma": 0.3}]}
    r = client.post("/v1/index-series", json=request)
    assert r.status_code == 200, r.text
    answer = r.json()
    band = answer["band"]
    alone = []
    for spec, model in zip(request["band_models"], band["models"], strict=True):
        single = {k: v for k, v in request.items() if k != "band_models"} | {"model": spec}
        own = client.post("/v1/index-series", json=single).json()["konus"]["fixed_base"]["base"]
        assert model["fixed_base"] == own
        alone.append(own)
    mine = answer["konus"]["fixed_base"]["base"]
    for t, row in enumerate(band["rows"]):
        values = [a[t] for a in alone]
        assert (row["konus_low"], row["konus_high"], row["models"]) == (
            min(values), max(values), 2)
        assert row["konus"] == mine[t]
        assert row["konus_inside"] == (min(values) * (1 - 1e-9) <= mine[t]
                                       <= max(values) * (1 + 1e-9))
    table = list(csv.DictReader(io.StringIO(
        client.post("/v1/index-series?format=csv", json=request).text)))
    assert [float(row["band_konus_low"]) for row in table] == [
        row["konus_low"] for row in band["rows"]]
    audit = load_example("auditPublishedSeries.wrenmouth_monthly_bulletin.json")
    refused = client.post("/v1/audits", json=audit | {"band_models": [{"family": "ces",
                                                                       "sigma": 1}]})
    assert refused.status_code == 422
    assert refused.json()["errors"][0]["pointer"] == "/band_models"


def test_a_series_band_refuses_by_field() -> None:
    from dualcost.api.app import create_app
    from dualcost.config import Settings
    from tests.conftest import EXAMPLES

    request = load_example(SERIES) | {"band_models": [{"family": "ces", "sigma": -1.0}]}
    client = TestClient(create_app(Settings(examples_dir=EXAMPLES)))
    r = client.post("/v1/index-series", json=request)
    assert [e["pointer"] for e in r.json()["errors"]] == ["/band_models/0/sigma"], r.text
    cells = len(request["periods"]) * len(request["items"])
    small = TestClient(create_app(Settings(examples_dir=EXAMPLES, max_panel_cells=cells + 1)))
    request["band_models"] = [{"family": "cobb_douglas"}]
    r = small.post("/v1/index-series", json=request)
    assert r.status_code == 422, r.text
    assert [e["pointer"] for e in r.json()["errors"]] == ["/band_models"]
