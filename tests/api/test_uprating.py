"""POST /v1/uprating and the spreadsheet clause form: the Wrenmouth pensions example, a clause
worked by hand through HTTP, CSV and the one-number form, the caution, and bad clauses named by
field."""

from __future__ import annotations

import copy
import csv
import io
from typing import Any

import pytest
from numpy.testing import assert_allclose

from dualcost.api.schemas.common import CAUTION
from tests.api.test_bad_input import assert_problem
from tests.api.test_series_validity import PERIODS, PRICES, QUANTITIES, series_request
from tests.conftest import load_example

EXAMPLE = "uprating.wrenmouth_pensions_april.json"


def example(**changes: Any) -> dict[str, Any]:
    return copy.deepcopy(load_example(EXAMPLE)) | changes


def clause(**fields: Any) -> dict[str, Any]:
    body = example()
    body["clauses"] = [body["clauses"][0] | fields]
    return body


def short_request() -> dict[str, Any]:
    """Two items over 2024-01..2025-03; laspeyres moves only by the first item's price."""
    periods = [f"2024-{m:02d}" for m in range(1, 13)] + ["2025-01", "2025-02", "2025-03"]
    prices = [[10.0, 10.0] for _ in periods]
    prices[periods.index("2025-01")] = [10.45, 10.0]  # Laspeyres +2.25 % on 2024-01
    return {"periods": periods, "items": ["a", "b"], "prices": prices,
            "quantities": [[1.0, 1.0] for _ in periods], "formulas": ["laspeyres"],
            "clauses": [{"measure": "twelve_month", "period_of_year": 1, "lag": 2,
                         "rounding": {"decimals": 1, "method": "half_even"}, "floor": 0.0}],
            "amount": 100.0}


def test_a_clause_worked_by_hand_through_http(client) -> None:
    """Laspeyres of two equally weighted items, one up 4.5 %: a 12-month change of 2.25 %,
    a decimal tie that half-even rounds to 2.2 (hand computation; common practice for the
    rounding names); paid from 2025-03 (January plus a lag of 2)."""
    r = client.post("/v1/uprating", json=short_request())
    assert r.status_code == 200, r.text
    (c,) = r.json()["clauses"]
    (u,) = c["upratings"]
    assert (u["measured_in"], u["measured_from"], u["paid_from"]) == ("2025-01", "2024-01",
                                                                       "2025-03")
    (lasp,) = u["by_index"]
    assert_allclose(lasp["change_percent"], 2.25, rtol=1e-12)
    assert lasp["applied_percent"] == 2.2 and lasp["factor"] == pytest.approx(1.022, abs=1e-15)
    (money,) = c["money"]
    assert_allclose(money["paid"], [100.0] * 14 + [102.2], rtol=1e-15)
    assert money["by_year"] == [{"year": 2024, "paid": 1200.0},
                                {"year": 2025, "paid": pytest.approx(302.2)}]
    assert money["cumulative_difference_vs_konus"] is None  # no model, said in a notice
    assert "no_model" in {n["code"] for n in r.json()["notices"]}


def test_the_example_answers_every_index_with_the_caution_first(client) -> None:
    r = client.post("/v1/uprating", json=example())
    assert r.status_code == 200, r.text
    answer = r.json()
    assert next(iter(answer)) == "caution" and CAUTION in answer["caution"]
    assert r.headers["dualcost-caution"].startswith("Model-based cost-of-living figures")
    assert answer["indices"] == ["laspeyres", "paasche", "fisher", "tornqvist", "jevons", "konus"]
    pension = answer["clauses"][0]
    assert [u["paid_from"] for u in pension["upratings"]] == ["2025-04", "2026-04"]
    assert pension["not_computed"][0]["measured_in"] == "2023-09"
    for u in pension["upratings"]:
        for x in u["by_index"]:
            assert x["applied_percent"] == round(x["applied_percent"], 1) >= 0.0
    money = {m["index"]: m for m in pension["money"]}
    lasp = money["laspeyres"]
    assert_allclose(lasp["difference_vs_konus_total"],
                    lasp["total"] - money["konus"]["total"], rtol=1e-9)


def test_the_csv_answer_has_one_row_per_clause_uprating_and_index(client) -> None:
    r = client.post("/v1/uprating", json=example(), headers={"accept": "text/csv"})
    assert r.status_code == 200 and r.headers["content-type"].startswith("text/csv")
    assert "dualcost-caution" in r.headers and "dualcost-input-digest" in r.headers
    rows = list(csv.DictReader(io.StringIO(r.text)))
    assert len(rows) == (2 + 1) * 6  # two pension upratings and one wage uprating, six indices
    row = next(x for x in rows if x["index"] == "konus" and x["paid_from"] == "2025-04")
    json_answer = client.post("/v1/uprating", json=example()).json()
    konus = next(x for x in json_answer["clauses"][0]["upratings"][0]["by_index"]
                 if x["index"] == "konus")
    assert float(row["factor"]) == konus["factor"]
    assert client.post("/v1/uprating", json=example(),
                       headers={"accept": "image/png"}).status_code == 406


@pytest.mark.parametrize("fields,pointer,words", [
    ({"measure": "weekly"}, "/clauses/0/measure", ()),
    ({"rounding": {"decimals": -1, "method": "half_up"}}, "/clauses/0/rounding/decimals", ()),
    ({"floor": 3.0, "cap": 1.0}, "/clauses/0/floor", ("cap",)),
    ({"lag": 30}, "/clauses/0/lag", ("after",)),
    ({"measure": "cumulative"}, "/clauses/0/since", ()),
    ({"measure": "cumulative", "since": "1999-01"}, "/clauses/0/since", ("not in the series",)),
])
def test_a_bad_clause_is_a_problem_naming_its_field(client, fields, pointer, words) -> None:
    """Unknown measure, negative decimals, floor above cap, a lag beyond the series and a
    measure needing periods the series lacks (March 2023 is before the series)."""
    body = clause(**fields)
    assert_problem(client.post("/v1/uprating", json=body), pointer, *words)


def test_a_measure_needing_periods_the_series_lacks_is_named(client) -> None:
    """An annual-average clause on a series with one complete calendar year, and a 12-month
    clause read in April when the series has no April a year before another."""
    body = short_request()
    body["clauses"] = [{"measure": "annual_average", "lag": 0}]
    assert_problem(client.post("/v1/uprating", json=body), "/clauses/0/measure", "2023")
    body["clauses"] = [{"measure": "twelve_month", "period_of_year": 4, "lag": 0}]
    assert_problem(client.post("/v1/uprating", json=body), "/clauses/0/measure",
                   "2023-04", "not in the series")


SHEET = ("/v1/sheet/uprating?items=a,b&periods=" + ",".join(short_request()["periods"])
         + "".join("&prices=" + ",".join(str(p) for p in row)
                   for row in short_request()["prices"])
         + "&measure=twelve_month&period_of_year=1&lag=2&decimals=1&rounding=half_even&floor=0"
         + "&formulas=laspeyres&index=laspeyres")


def test_the_spreadsheet_form_gives_the_factor_as_one_number(client) -> None:
    r = client.get(SHEET + "".join("&quantities=1,1" for _ in range(15)))
    assert r.status_code == 200, r.text
    assert r.headers["content-type"].startswith("text/csv")
    # Three decimals get a fourth 0 so that no locale reads them as thousands (render.py).
    assert r.text == "1.0220\r\n"
    assert r.headers["dualcost-uprating"].startswith("laspeyres: measured 2025-01 against 2024-01")
    assert "dualcost-caution" in r.headers
    comma = client.get(SHEET.replace("prices=10.45,10.0", "prices=10,45;10,0").replace(
        "prices=10.0,10.0", "prices=10;10") + "&decimal=comma"
        + "".join("&quantities=1;1" for _ in range(15)))
    assert comma.status_code == 200, comma.text
    assert comma.text == "1,0220\r\n"


def test_the_spreadsheet_form_names_bad_parameters(client) -> None:
    q = "".join("&quantities=1,1" for _ in range(15))
    assert_problem(client.get(SHEET.replace("index=laspeyres", "index=konus") + q),
                   "#/query/index", "laspeyres")
    assert_problem(client.get(SHEET.replace("decimals=1", "decimals=-2") + q),
                   "#/query/decimals")
    assert_problem(client.get(SHEET.replace("lag=2", "lag=99") + q), "#/query/lag")
    assert_problem(client.get(SHEET + q + "&paid_from=2024-05"), "#/query/paid_from")
    text = client.get(SHEET.replace("floor=0", "floor=5&cap=1") + q + "&on_error=text")
    assert text.status_code == 200 and text.text.startswith("ERROR:") and "floor" in text.text


def test_a_konus_factor_outside_the_regular_region_is_not_a_result(client) -> None:
    """Where the model is outside its regular region at a period a clause reads, the Konüs
    factor is null with a notice (and the sheet form answers model-not-regular), while the
    formula factors stand (the regular-region panel of tests/api/test_series_validity.py)."""
    body = series_request(formulas=["laspeyres"], amount=100.0, clauses=[
        {"measure": "cumulative", "since": "2025-01", "period_of_year": 3, "lag": 1}])
    r = client.post("/v1/uprating", json=body)
    assert r.status_code == 200, r.text
    answer = r.json()
    (u,) = answer["clauses"][0]["upratings"]
    by = {x["index"]: x for x in u["by_index"]}
    assert by["konus"]["factor"] is None and by["laspeyres"]["factor"] > 1.0
    assert "uprating_withheld" in {n["code"] for n in answer["notices"]}
    money = {m["index"]: m for m in answer["clauses"][0]["money"]}
    assert money["konus"]["paid"][-1] is None and money["laspeyres"]["paid"][-1] is not None
    url = ("/v1/sheet/uprating?items=bread,transit,heating&periods=" + ",".join(PERIODS)
           + "".join("&prices=" + ",".join(map(str, p)) for p in PRICES)
           + "".join("&quantities=" + ",".join(map(str, q)) for q in QUANTITIES)
           + "&family=translog&sigma=3&measure=cumulative&since=2025-01&period_of_year=3"
           + "&lag=1&index=konus")
    sheet = client.get(url)
    assert sheet.status_code == 422 and sheet.json()["type"].endswith("model-not-regular")
