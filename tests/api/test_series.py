"""POST /v1/index-series and /v1/index-series/csv: the printed six-commodity series through HTTP,
JSON and CSV in and out, and the Wrenmouth examples' items that come and go."""

from __future__ import annotations

import csv
import io
import json

import numpy as np
import pytest
from numpy.testing import assert_allclose

from tests.conftest import load_example

# CPI Manual (2004) ch. 19: Table 19.1 prices, Table 19.2 quantities (periods 1-5 by
# commodities 1-6), and Table 19.3 fixed-base indices to four decimals; recalled from memory.
from tests.reference_data import SIX_COMMODITY_PRICES as PRICES
from tests.reference_data import SIX_COMMODITY_PRINTED as PRINTED
from tests.reference_data import SIX_COMMODITY_QUANTITIES as QUANTITIES

ITEMS = ["c1", "c2", "c3", "c4", "c5", "c6"]


def six_commodity_request(**extra: object) -> dict:
    body = {"periods": [1, 2, 3, 4, 5], "items": ITEMS, "prices": PRICES,
            "quantities": QUANTITIES, "reference_value": 1}
    return body | extra


def six_commodity_csv() -> str:
    lines = ["period,item,price,quantity"]
    for t in range(5):
        for i in range(6):
            lines.append(f"{t + 1},{ITEMS[i]},{PRICES[t][i]},{QUANTITIES[t][i]}")
    return "\n".join(lines) + "\n"


def formulas(body: dict) -> dict[str, dict]:
    return {f["formula"]: f for f in body["formulas"]}


def test_printed_fixed_base_series_in_one_json_call(client) -> None:
    """One request gives all five periods of the fixed-base Laspeyres, Paasche, Fisher and
    Törnqvist series of CPI Manual (2004) Table 19.3, to the four printed decimals (from
    memory)."""
    r = client.post("/v1/index-series", json=six_commodity_request())
    assert r.status_code == 200, r.text
    got = formulas(r.json())
    for name, printed in PRINTED.items():
        assert_allclose(got[name]["fixed_base"], printed, rtol=0.0, atol=5e-5, err_msg=name)


def test_printed_fixed_base_series_from_a_csv_upload(client) -> None:
    """The same printed values (CPI Manual 2004, Table 19.3, from memory) from the long-form CSV
    upload, answered as CSV (format=csv) and as JSON."""
    r = client.post("/v1/index-series/csv?reference_value=1&format=csv", content=six_commodity_csv(),
                    headers={"content-type": "text/csv"})
    assert r.status_code == 200, r.text
    assert r.headers["content-type"].startswith("text/csv")
    rows = list(csv.DictReader(io.StringIO(r.text)))
    assert [row["period"] for row in rows] == ["1", "2", "3", "4", "5"]
    for name, printed in PRINTED.items():
        assert_allclose([float(row[f"{name}_fixed_base"]) for row in rows], printed, rtol=0.0,
                        atol=5e-5, err_msg=name)
    as_json = client.post("/v1/index-series/csv?reference_value=1", content=six_commodity_csv(),
                          headers={"content-type": "text/csv"}).json()
    from_json = client.post("/v1/index-series", json=six_commodity_request()).json()
    assert as_json["formulas"] == from_json["formulas"]


def test_chaining_identity_through_the_api(client) -> None:
    """The chained series is the running product of its own links (CPI Manual 2004, 15.83-15.88),
    and the GEKS series is transitive: GEKS(a, c) = GEKS(a, b) GEKS(b, c) across bases, to
    1e-12 (Eltetö and Köves 1964; Szulc 1964)."""
    body = client.post("/v1/index-series", json=six_commodity_request()).json()
    for f in body["formulas"]:
        assert_allclose(f["chained"], np.cumprod([1.0, *f["links"]]), rtol=1e-13)
    at = {}
    for base in (1, 3):
        answer = client.post("/v1/index-series", json=six_commodity_request(
            base_period=base, formulas=["geks_fisher"])).json()
        at[base] = answer["multilateral"][0]["full_span"]
    assert_allclose(at[1][4], at[1][2] * at[3][4], rtol=1e-12)


def test_accept_header_chooses_csv(client) -> None:
    """Content negotiation (RFC 9110, 12.5.1): Accept: text/csv gets the per-period table."""
    r = client.post("/v1/index-series", json=six_commodity_request(),
                    headers={"accept": "text/csv"})
    assert r.status_code == 200 and r.headers["content-type"].startswith("text/csv")
    header = next(csv.reader(io.StringIO(r.text)))
    assert header[0] == "period" and "fisher_chained" in header and "geks_fisher" in header
    assert "items_not_priced" in header


def test_konus_series_bias_and_annual_bias_through_the_api(client) -> None:
    """With a CES model calibrated to period 1 the Konüs series is the Lloyd-Moulton series at
    the same sigma (Lloyd 1975; Moulton 1996); the bias in points is 100 (P - K) on reference 100
    and the annual bias the gap of average annual rates (common practice), here over 4 years."""
    body = client.post("/v1/index-series", json=six_commodity_request(
        model={"family": "ces", "sigma": 0.6}, frequency="annual", reference_value=100)).json()
    f = formulas(body)
    assert_allclose(body["konus"]["fixed_base"]["base"], f["lloyd_moulton"]["fixed_base"],
                    rtol=1e-12)
    bias = {(b["series"], b["kind"]): b for b in body["bias"]}
    lasp = np.array(f["laspeyres"]["fixed_base"])
    k = np.array(body["konus"]["fixed_base"]["base"])
    assert_allclose(bias[("laspeyres", "fixed_base")]["points"], lasp - k, atol=1e-10)
    annual = body["annual_bias"]
    assert annual["span"]["years"] == 4 and annual["span"]["frequency"] == "annual"
    row = next(a for a in annual["by_series"] if (a["series"], a["kind"]) == ("laspeyres",
                                                                                 "fixed_base"))
    expected = 100 * ((lasp[4] / lasp[0]) ** 0.25 - (k[4] / k[0]) ** 0.25)
    assert_allclose(row["bias_pp_per_year"], expected, rtol=1e-10)
    assert body["caution"]


def test_wrenmouth_example_lists_items_that_come_and_go(client) -> None:
    """The monthly example: oat milk arrives in 2025-06 and paraffin leaves after 2025-09; both
    are listed per period, the rules are stated, and Feenstra's series (sigma 1.8 > 1) lies below
    the Sato-Vartia one once the new item is there (Feenstra 1994)."""
    req = load_example("indexSeries.wrenmouth_monthly_ces.json")
    r = client.post("/v1/index-series", json=req)
    assert r.status_code == 200, r.text
    body = r.json()
    treated = {(e["period"], e["item"]): e for e in body["item_treatment"]}
    assert treated[("2025-06", "oat_milk")]["chained"] == "left_out"
    assert treated[("2025-07", "oat_milk")]["chained"] == "used"
    assert treated[("2025-07", "oat_milk")]["fixed_base"] == "left_out"
    assert treated[("2025-07", "oat_milk")]["model"] == "outside_model"
    gone = treated[("2025-11", "paraffin_lamp_oil")]
    assert gone["model"] == "price_carried" and gone["carried_from"] == "2025-09"
    assert not [e for e in body["item_treatment"] if e["item"] not in ("oat_milk",
                                                                       "paraffin_lamp_oil")]
    f = formulas(body)
    assert all(x["rule_for_items_that_come_and_go"] for x in body["formulas"])
    t = body["periods"].index("2025-07")
    assert f["feenstra"]["chained"][t] < f["sato_vartia"]["chained"][t]
    assert body["weights"]["period"] == "2024-12"
    geks = {g["method"]: g for g in body["multilateral"]}
    assert geks["geks_fisher"]["window"] == 13 and len(geks["geks_fisher"]["rolling"]) == 16


def test_json_rows_as_lists_with_nulls_equal_keyed_rows(client) -> None:
    """A row is an object keyed by item id or a list in item order with null where not priced;
    both say the same (common practice for JSON tables)."""
    req = load_example("indexSeries.wrenmouth_monthly_ces.json")
    ids = [i["id"] for i in req["items"]]
    as_lists = json.loads(json.dumps(req))
    for key in ("prices", "quantities"):
        as_lists[key] = [[row.get(i) for i in ids] for row in req[key]]
    a = client.post("/v1/index-series", json=req).json()
    b = client.post("/v1/index-series", json=as_lists).json()
    assert a["formulas"] == b["formulas"] and a["konus"] == b["konus"]


@pytest.mark.parametrize("splice", ["movement", "window", "half", "mean"])
def test_every_splice_is_offered(client, splice: str) -> None:
    req = load_example("indexSeries.wrenmouth_monthly_ces.json") | {
        "geks": {"window": 5, "splice": splice}, "formulas": ["geks_tornqvist"]}
    body = client.post("/v1/index-series", json=req).json()
    assert body["multilateral"][0]["splice"] == splice


def test_weight_reference_basket_given_in_the_request(client) -> None:
    """Young with given shares s_b: sum s_b p_t / p_0 (Young 1812); Lowe with a given basket q_b:
    sum p_t q_b / sum p_0 q_b (Lowe 1823), and the answer's price-updated shares are
    proportional to p_0 q_b (CPI Manual 2004, 15.33-15.37)."""
    p = np.array(PRICES)
    shares = dict(zip(ITEMS, [0.1, 0.2, 0.3, 0.1, 0.2, 0.1], strict=True))
    body = client.post("/v1/index-series", json=six_commodity_request(
        weight_reference={"shares": shares}, formulas=["young"])).json()
    s = np.array(list(shares.values()))
    assert_allclose(formulas(body)["young"]["fixed_base"], (p / p[0]) @ s, rtol=1e-12)
    basket = [2.0, 1.0, 0.5, 3.0, 1.0, 1.0]
    body = client.post("/v1/index-series", json=six_commodity_request(
        base_period=2, weight_reference={"quantities": basket}, formulas=["lowe"])).json()
    qb = np.array(basket)
    assert_allclose(formulas(body)["lowe"]["fixed_base"], (p @ qb) / (p[1] @ qb), rtol=1e-12)
    updated = [w["price_updated_share"] for w in body["weights"]["items"]]
    assert_allclose(updated, p[1] * qb / (p[1] @ qb), rtol=1e-12)
