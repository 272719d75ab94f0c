"""POST /v1/sensitivity and GET /v1/sheet/sweep: a sweep through HTTP equals the comparisons
requested one at a time (common practice: a sweep is a loop of single requests), the band is
the range across the models, and bad grids are refused by a problem naming the field."""

from __future__ import annotations

import copy
import csv
import io
from typing import Any

import pytest
from fastapi.testclient import TestClient

from dualcost.api.app import create_app
from dualcost.api.schemas.sensitivity import SensitivityResponse
from dualcost.config import Settings
from tests.conftest import EXAMPLES, load_example

NESTED = "sensitivity.wrenmouth_nested_ces_food_group.json"
FRISCH = "sensitivity.stone_geary_pensioner_frisch.json"
PATH = "/v1/sensitivity"


def _comparison(request: dict[str, Any], model: dict[str, Any]) -> dict[str, Any]:
    body = {k: request[k] for k in ("items", "base", "current")} | {"model": model}
    r = TestClient(create_app(Settings(examples_dir=EXAMPLES))).post("/v1/comparisons",
                                                                     json=body)
    assert r.status_code == 200, r.text
    return r.json()  # type: ignore[no-any-return]


def _set_group_sigma(tree: dict[str, Any], group: str, value: float) -> None:
    if tree.get("name") == group:
        tree["sigma"] = value
    for child in tree.get("children", []):
        if isinstance(child, dict):
            _set_group_sigma(child, group, value)


def test_a_grid_equals_separate_comparisons_point_by_point(client: TestClient) -> None:
    """Each grid point of the nested CES food group's sigma is POST /v1/comparisons with the
    tree changed by hand; each model of the set is its own comparison."""
    request = load_example(NESTED)
    r = client.post(PATH, json=request)
    assert r.status_code == 200, r.text
    body = r.json()
    SensitivityResponse.model_validate(body)
    grid = request["grid"]
    for value, point in zip(grid["values"], body["grid"]["points"], strict=True):
        model = copy.deepcopy(request["models"][0])
        _set_group_sigma(model["tree"], grid["group"], value)
        alone = _comparison(request, model)
        assert point["value"] == value
        assert point["konus"]["base"] == alone["konus"]["base"]
        assert [f["bias_points"] for f in point["formulas"]] == [
            f["bias_points"] for f in alone["formulas"]]
    for model, answer in zip(request["models"], body["models"], strict=True):
        assert answer["konus"]["base"] == _comparison(request, model)["konus"]["base"]


def test_the_band_is_the_range_across_the_models(client: TestClient) -> None:
    body = client.post(PATH, json=load_example(FRISCH)).json()
    konus = [m["konus"]["base"] for m in body["models"]]
    band = {b["measure"]: b for b in body["band"]}
    assert (band["konus_base"]["low"], band["konus_base"]["high"]) == (min(konus), max(konus))
    along = {b["measure"]: b for b in body["grid"]["range"]}
    points = [p["konus"]["base"] for p in body["grid"]["points"]]
    assert along["konus_base"]["high"] == max(points)
    assert len(points) == len(load_example(FRISCH)["grid"]["values"])


def test_the_csv_answer_has_a_row_per_model_and_grid_value(client: TestClient) -> None:
    request = load_example(FRISCH)
    document = client.post(PATH, json=request).json()
    r = client.post(f"{PATH}?format=csv", json=request)
    assert r.status_code == 200 and r.headers["content-type"].startswith("text/csv")
    rows = list(csv.DictReader(io.StringIO(r.text)))
    assert [row["kind"] for row in rows] == ["model"] * 2 + ["grid"] * 6
    assert [float(row["konus_base"]) for row in rows[2:]] == [
        p["konus"]["base"] for p in document["grid"]["points"]]


def test_the_spreadsheet_sweep_is_the_sweep(client: TestClient) -> None:
    """GET /v1/sheet/sweep carries the same table as the POST of the body it stands for."""
    query = ("items=rye_loaf,peat_briquettes,ferry_pass&p0=2.40,9,38&p1=2.52,12.15,41"
             "&q0=12,6,1&family=ces&sigma=0.6&values=0.2,0.6,1,2")
    sheet = client.get(f"/v1/sheet/sweep?{query}")
    assert sheet.status_code == 200, sheet.text
    body = {"items": ["rye_loaf", "peat_briquettes", "ferry_pass"],
            "base": {"prices": [2.40, 9, 38], "quantities": [12, 6, 1]},
            "current": {"prices": [2.52, 12.15, 41]},
            "models": [{"family": "ces", "sigma": 0.6}],
            "grid": {"parameter": "sigma", "values": [0.2, 0.6, 1, 2]}}
    posted = client.post(f"{PATH}?format=csv", json=body)
    assert sheet.text == posted.text
    assert sheet.headers["dualcost-input-digest"] == posted.headers["dualcost-input-digest"]
    comma = client.get("/v1/sheet/sweep?items=a;b&p0=1;2&p1=1,5;2&q0=1;1&values=0,5;2"
                       "&sigma=0,6&decimal=comma")
    assert comma.status_code == 200 and ";" in comma.text.splitlines()[0]


@pytest.mark.parametrize(("change", "pointer", "words"), [
    (lambda b: b["grid"]["values"].__setitem__(1, -1.0), "/grid/values/1", "sigma = -1"),
    (lambda b: b["grid"].update(parameter="rho"), "/grid/parameter", "not a number"),
    (lambda b: b["grid"].update(parameter="gamma_scale"), "/grid/parameter", "AIDS"),
    (lambda b: b["grid"].update(model=3), "/grid/model", "one of the 2 models"),
    (lambda b: b["models"][1].update(sigma=-2.0), "/models/1/sigma", "zero or more"),
    (lambda b: b["models"].append({"family": "nonesuch"}), "/models/2/family", "unknown"),
    (lambda b: b["base"].update(quantities=[0.0, 0.0, 0.0]), "/base/quantities", ""),
    (lambda b: b["current"].update(prices=[1.0, 2.0]), "/current/prices", "3 items"),
    (lambda b: b["grid"].update(values=[]), "/grid/values", "at least 1"),
])
def test_bad_sweeps_are_refused_naming_the_field(client: TestClient, change: Any, pointer: str,
                                                 words: str) -> None:
    body = {"items": ["a", "b", "c"],
            "base": {"prices": [1.0, 2.0, 4.0], "quantities": [10.0, 5.0, 2.0]},
            "current": {"prices": [1.3, 2.0, 3.6]},
            "models": [{"family": "ces", "sigma": 0.6}, {"family": "ces", "sigma": 1.2}],
            "grid": {"parameter": "sigma", "values": [0.2, 0.5]}}
    change(body)
    r = client.post(PATH, json=body)
    assert r.status_code == 422, r.text
    errors = [(e["pointer"], e["detail"]) for e in r.json()["errors"]]
    assert any(p == pointer and words in d for p, d in errors), errors


def test_a_grid_beyond_the_configured_points_is_refused() -> None:
    """DUALCOST_MAX_SWEEP_POINTS bounds the grid."""
    client = TestClient(create_app(Settings(examples_dir=EXAMPLES, max_sweep_points=3)))
    body = load_example(FRISCH)
    r = client.post(PATH, json=body)
    assert r.status_code == 422
    error = r.json()["errors"][0]
    assert error["pointer"] == "/grid/values" and "limit is 3" in error["detail"]
