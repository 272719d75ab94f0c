"""Shares given in percent or per mille: the explicit option ``share_unit`` (fraction, percent,
per_mille) on every request that takes shares, a ``shares_converted`` notice when it is used, and
a refusal under the default that names the option when the shares add up to about 100 or 1000.

The checks are against the same request in fractions, built by dividing by 100 or 1000 in
Python: IEEE 754 division is correctly rounded, so the service's conversion must give the same
floats and the same answers exactly (common practice: a change of units is a scaling).
"""

from __future__ import annotations

import copy
import io
from typing import Any

import pytest

from dualcost.core import _checks
from dualcost.core.errors import InvalidInput
from dualcost.core.preferences import BaseBudget
from tests.api.test_bad_input import assert_problem
from tests.api.test_estimation_api import _post_csv
from tests.api.test_households import CES, create_job, example, household_csv, upload
from tests.conftest import load_example

SCALE = {"percent": 100.0, "per_mille": 1000.0}


def in_unit(values: Any, unit: str) -> Any:
    """Shares written in ``unit`` (rounded as a person would write them)."""
    if isinstance(values, dict):
        return {k: in_unit(v, unit) for k, v in values.items()}
    if isinstance(values, list):
        return [in_unit(v, unit) for v in values]
    return round(values * SCALE[unit], 9)


def as_fraction(values: Any, unit: str) -> Any:
    """The same shares as fractions, divided in Python as the service divides them."""
    if isinstance(values, dict):
        return {k: as_fraction(v, unit) for k, v in values.items()}
    if isinstance(values, list):
        return [as_fraction(v, unit) for v in values]
    return values / SCALE[unit]


def without_notices(answer: dict[str, Any]) -> dict[str, Any]:
    """The answer's figures: without its notices and its provenance (the inputs differ in how
    they are written, so their digests do)."""
    return {k: v for k, v in answer.items() if k not in ("notices", "provenance")}


def codes(answer: dict[str, Any]) -> list[str]:
    return [n["code"] for n in answer["notices"]]


def comparison_pair(unit: str) -> tuple[dict[str, Any], dict[str, Any]]:
    """A comparison with its base shares in ``unit``, and the same in fractions."""
    given = load_example("compare.ces_from_shares.json")
    given["base"]["shares"] = in_unit(given["base"]["shares"], unit)
    given["share_unit"] = unit
    plain = copy.deepcopy(given)
    plain["base"]["shares"] = as_fraction(given["base"]["shares"], unit)
    del plain["share_unit"]
    return given, plain


# -- comparisons ----------------------------------------------------------------------------------


@pytest.mark.parametrize("unit", ["percent", "per_mille"])
def test_shares_in_percent_or_per_mille_give_the_same_comparison(client, unit: str) -> None:
    given, plain = comparison_pair(unit)
    ours, theirs = client.post("/v1/comparisons", json=given), client.post("/v1/comparisons",
                                                                           json=plain)
    assert ours.status_code == 200, ours.text
    assert without_notices(ours.json()) == without_notices(theirs.json())
    (converted,) = [n for n in ours.json()["notices"] if n["code"] == "shares_converted"]
    assert f"share_unit={unit}" in converted["message"]
    assert f"divided by {SCALE[unit]:g}" in converted["message"]
    assert "shares_converted" not in codes(theirs.json())


@pytest.mark.parametrize("unit", ["percent", "per_mille"])
def test_the_default_refusal_names_the_option(client, unit: str) -> None:
    given, _ = comparison_pair(unit)
    del given["share_unit"]
    r = client.post("/v1/comparisons", json=given)
    assert_problem(r, "/base/shares", f"give share_unit={unit}", "must sum to 1")


def test_shares_near_but_not_at_100_get_the_hint_and_far_ones_do_not(client) -> None:
    """Within 5% of a whole budget in another unit the refusal suggests it; otherwise not."""
    given, _ = comparison_pair("percent")
    del given["share_unit"]
    given["base"]["shares"] = [24, 31, 12, 7, 11, 14.5]  # 99.5
    assert_problem(client.post("/v1/comparisons", json=given), "/base/shares",
                   "give share_unit=percent")
    given["base"]["shares"] = [24, 31, 12, 7, 11, 60]  # 145
    body = assert_problem(client.post("/v1/comparisons", json=given), "/base/shares")
    assert "share_unit" not in body["errors"][0]["detail"]
    # Fractions declared as percent: the refusal points back at fractions.
    plain = load_example("compare.ces_from_shares.json") | {"share_unit": "percent"}
    assert_problem(client.post("/v1/comparisons", json=plain), "/base/shares", "sum to 100",
                   "give share_unit=fraction")


def test_normalise_shares_is_unchanged_and_applies_after_the_conversion(client) -> None:
    """Under fraction, normalise_shares divides shares summing to 100 by 100 as before; under
    percent it divides the converted shares by their sum, and both notices are given."""
    given, plain = comparison_pair("percent")
    old = copy.deepcopy(given)
    del old["share_unit"]
    old["normalise_shares"] = True
    r = client.post("/v1/comparisons", json=old)
    assert r.status_code == 200 and codes(r.json())[:1] == ["shares_normalised"]
    assert "shares_converted" not in codes(r.json())
    off = copy.deepcopy(given)
    off["base"]["shares"][-1] -= 0.5  # sums to 99.5
    assert_problem(client.post("/v1/comparisons", json=off), "/base/shares", "must sum to 100",
                   "99.5")
    off["normalise_shares"] = True
    r = client.post("/v1/comparisons", json=off)
    assert r.status_code == 200
    assert codes(r.json())[:2] == ["shares_converted", "shares_normalised"]
    assert "0.995" in r.json()["notices"][1]["message"]


def test_weight_reference_shares_in_percent(client) -> None:
    """The Young index from weight-reference shares in percent equals the one in fractions."""
    body = load_example("compare.ces_from_shares.json")
    shares = [0.2, 0.3, 0.15, 0.05, 0.1, 0.2]
    body["weight_reference"] = {"shares": as_fraction(in_unit(shares, "percent"), "percent")}
    plain = client.post("/v1/comparisons", json=body).json()
    body["weight_reference"]["shares"] = in_unit(shares, "percent")
    r = client.post("/v1/comparisons", json=body)
    assert_problem(r, "/weight_reference/shares", "give share_unit=percent")
    body["share_unit"] = "percent"
    body["base"]["shares"] = in_unit(body["base"]["shares"], "percent")
    ours = client.post("/v1/comparisons", json=body).json()
    assert ours["formulas"] == plain["formulas"]
    messages = " ".join(n["message"] for n in ours["notices"] if n["code"] == "shares_converted")
    assert "weight-reference shares" in messages and "base expenditure shares" in messages


def test_an_unknown_unit_is_refused_naming_the_field(client) -> None:
    given, _ = comparison_pair("percent")
    given["share_unit"] = "basis_points"
    assert_problem(client.post("/v1/comparisons", json=given), "/share_unit")


# -- series, households, fits, fitted comparisons, spreadsheets -----------------------------------


def test_series_weight_reference_shares_in_per_mille(client) -> None:
    body = load_example("indexSeries.wrenmouth_monthly_ces.json")
    n = len(body["items"])
    shares = [round(1.0 / n, 3)] * (n - 1)
    shares.append(round(1.0 - sum(shares), 3))
    prices = next(row for row in body["prices"] if None not in (
        row.values() if isinstance(row, dict) else row) and len(row) == n)
    plain = copy.deepcopy(body)
    plain["weight_reference"] = {"prices": prices,
                                 "shares": as_fraction(in_unit(shares, "per_mille"), "per_mille")}
    given = copy.deepcopy(body)
    given["weight_reference"] = {"prices": prices, "shares": in_unit(shares, "per_mille")}
    assert_problem(client.post("/v1/index-series", json=given), "/weight_reference/shares",
                   "give share_unit=per_mille")
    given["share_unit"] = "per_mille"
    ours = client.post("/v1/index-series", json=given)
    assert ours.status_code == 200, ours.text
    theirs = client.post("/v1/index-series", json=plain).json()
    assert ours.json()["formulas"] == theirs["formulas"]
    assert ours.json()["weights"] == theirs["weights"]
    assert "shares_converted" in codes(ours.json())


def test_household_shares_in_per_mille_match_the_fraction_example(client) -> None:
    """The per-mille OpenAPI example is the CES deciles example in per mille."""
    ours = client.post("/v1/household-indices",
                       json=load_example("householdIndices.wrenmouth_deciles_per_mille.json"))
    theirs = client.post("/v1/household-indices", json=example(CES))
    assert ours.status_code == 200, ours.text
    assert ours.json()["summary"] == theirs.json()["summary"]
    assert [h["periods"] for h in ours.json()["households"]] == [
        h["periods"] for h in theirs.json()["households"]]
    assert "shares_converted" in codes(ours.json())


def test_a_household_in_percent_under_fraction_is_refused_by_row_naming_the_option(client) -> None:
    body = example(CES)
    body["households"][3]["shares"] = in_unit(body["households"][3]["shares"], "percent")
    assert_problem(client.post("/v1/household-indices", json=body), "/households/3/shares",
                   "household row 4", "give share_unit=percent")  # rows from 1


def test_a_household_job_upload_in_percent(client) -> None:
    body = example(CES)
    plain_job = create_job(client, body)
    plain = upload(client, plain_job, household_csv(body))
    percent = copy.deepcopy(body)
    for h in percent["households"]:
        h["shares"] = in_unit(h["shares"], "percent")
    job = create_job(client, percent, share_unit="percent")
    ours = upload(client, job, household_csv(percent))
    assert ours.status_code == 200, ours.text
    ids = [row.split(",", 1)[0] for row in io.StringIO(ours.text)]
    assert len(ids) == len(body["households"]) + 1
    status = client.get(job["links"]["self"]).json()
    assert status["skipped"]["count"] == 0
    assert "shares_converted" in codes(status)
    mine = client.get(plain_job["links"]["self"]).json()
    for a, b in zip(status["summary"][0]["indices"], mine["summary"][0]["indices"], strict=True):
        assert a["democratic"] == pytest.approx(b["democratic"], rel=1e-14)
    assert plain.status_code == 200
    # Without the option, every row is skipped, each naming it.
    job = create_job(client, percent)
    upload(client, job, household_csv(percent))
    status = client.get(job["links"]["self"]).json()
    assert status["skipped"]["count"] == len(body["households"])
    assert "give share_unit=percent" in status["skipped"]["rows"][0]["detail"]


def fit_pair(unit: str) -> tuple[dict[str, Any], dict[str, Any]]:
    given = load_example("fitModel.wrenmouth_survey_linear_expenditure.json")
    given["shares"] = in_unit(given["shares"], unit)
    given["share_unit"] = unit
    plain = copy.deepcopy(given)
    plain["shares"] = as_fraction(given["shares"], unit)
    del plain["share_unit"]
    return given, plain


def test_fit_shares_in_percent(client) -> None:
    given, plain = fit_pair("percent")
    ours, theirs = client.post("/v1/fits", json=given), client.post("/v1/fits", json=plain)
    assert ours.status_code == 200, ours.text
    assert ours.json()["parameters"] == theirs.json()["parameters"]
    assert "shares_converted" in codes(ours.json())
    del given["share_unit"]
    assert_problem(client.post("/v1/fits", json=given), "/shares/0/0", "give share_unit=percent",
                   "got 14.37")


def test_fit_upload_with_a_share_column_in_percent(client) -> None:
    given, plain = fit_pair("percent")
    ids = [i["id"] if isinstance(i, dict) else i for i in given["items"]]

    def long_csv(body: dict[str, Any]) -> str:
        lines = ["observation,item,price,share,total_expenditure"]
        for t, label in enumerate(body["observations"]):
            for k, item in enumerate(ids):
                price, share = body["prices"][t], body["shares"][t]
                price = price[item] if isinstance(price, dict) else price[k]
                share = share[item] if isinstance(share, dict) else share[k]
                lines.append(f"{label},{item},{price!r},{share!r},"
                             f"{body['total_expenditure'][t]!r}")
        return "\n".join(lines) + "\n"

    family = given["model"]["family"]
    ours = _post_csv(client, long_csv(given), family=family, share_unit="percent")
    theirs = _post_csv(client, long_csv(plain), family=family)
    assert ours.status_code == 200, ours.text
    assert ours.json()["parameters"] == theirs.json()["parameters"]
    assert "shares_converted" in codes(ours.json())
    r = _post_csv(client, long_csv(given), family=family)
    assert_problem(r, "#cell=2,4", "give share_unit=percent")


def test_fitted_comparison_base_shares_in_per_mille(client) -> None:
    body = load_example("fitAndCompare.wrenmouth_quarterly_aids.json")
    body["uncertainty"] = {"draws": 20, "seed": 3}
    ids = [i["id"] if isinstance(i, dict) else i for i in body["items"]]
    raw = [round(1.0 / len(ids), 3)] * (len(ids) - 1)
    raw.append(round(1.0 - sum(raw), 3))
    plain = copy.deepcopy(body)
    plain["comparison"]["base"].pop("quantities", None)
    plain["comparison"]["base"]["shares"] = as_fraction(in_unit(raw, "per_mille"), "per_mille")
    plain["comparison"]["base"].setdefault("expenditure", 1000.0)
    given = copy.deepcopy(plain)
    given["comparison"]["base"]["shares"] = in_unit(raw, "per_mille")
    assert_problem(client.post("/v1/fitted-comparisons", json=given),
                   "/comparison/base/shares", "give share_unit=per_mille")
    given["share_unit"] = "per_mille"
    ours = client.post("/v1/fitted-comparisons", json=given)
    assert ours.status_code == 200, ours.text
    theirs = client.post("/v1/fitted-comparisons", json=plain).json()
    assert ours.json()["comparison"]["konus"] == theirs["comparison"]["konus"]
    assert "shares_converted" in codes(ours.json()["comparison"])


def test_the_spreadsheet_form_takes_share_unit(client) -> None:
    query = {"items": "food,housing,transport", "p0": "1,1,1", "p1": "1.06,1.09,1.03",
             "m0": "2150", "sigma": "0.7", "on_error": "text"}
    plain = client.get("/v1/sheet/value", params=query | {"w0": "0.25,0.35,0.4"})
    refused = client.get("/v1/sheet/value", params=query | {"w0": "25,35,40"})
    assert refused.text.startswith("ERROR:") and "share_unit=percent" in refused.text
    ours = client.get("/v1/sheet/value", params=query | {"w0": "25,35,40",
                                                         "share_unit": "percent"})
    assert ours.text == plain.text and not ours.text.startswith("ERROR")
    table = client.get("/v1/sheet/comparison", params=query | {"w0": "250;350;400",
                                                               "share_unit": "per_mille"})
    assert table.status_code == 200 and "konus_base" in table.text


# -- the core ---------------------------------------------------------------------------------------


def test_the_core_budget_converts_and_says_so() -> None:
    budget = BaseBudget.from_shares([1.0, 2.0], [40.0, 60.0], 100.0, unit="percent")
    assert budget.shares.tolist() == [0.4, 0.6]
    assert [n.code for n in budget.notices] == ["shares_converted"]
    with pytest.raises(InvalidInput) as info:
        BaseBudget.from_shares([1.0, 2.0], [40.0, 60.0], 100.0)
    assert info.value.parameter == "w0" and "share_unit=percent" in info.value.rule
    with pytest.raises(InvalidInput) as info:
        BaseBudget.from_shares([1.0, 2.0], [0.4, 0.6], 100.0, unit="permille")
    assert info.value.parameter == "share_unit"


@pytest.mark.parametrize("total, unit, hint", [
    (100.0, "fraction", "percent"), (95.5, "fraction", "percent"), (94.0, "fraction", None),
    (1000.0, "fraction", "per_mille"), (1.0, "percent", "fraction"), (1.2, "fraction", None),
])
def test_the_unit_hint_band(total: float, unit: str, hint: str | None) -> None:
    text = _checks.unit_hint(total, unit)
    assert (f"share_unit={hint}" in text) if hint else text == ""
