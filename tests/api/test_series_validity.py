"""The Konüs series withholds the periods where its model is outside its regular region; the
series, the audit and ``dualcost check`` say so; every period setting the service fills in is
stated.

Regularity: shares in [0, 1] and a Slutsky matrix that is symmetric and negative semidefinite
(Mas-Colell, Whinston and Green 1995, 2.F and 3.G); flexible forms are regular only near their
base point (Christensen, Jorgenson and Lau 1975). Chain linking: a chained value multiplies
every link from the base to its period (common practice), so a link that is not a result
takes every later chained value with it.
"""

from __future__ import annotations

from typing import Any

import pytest

from dualcost.cli import main

ITEMS = [{"id": "bread", "label": "Rye loaf"}, {"id": "transit", "label": "Transit pass"},
         {"id": "heating", "label": "Heating"}]
PERIODS = ["2025-01", "2025-02", "2025-03", "2025-04"]
#: The transit pass jumps to more than four times its base price in 2025-03 and comes back.
PRICES = [[2.40, 9.0, 38.0], [2.45, 9.5, 38.5], [2.52, 40.0, 41.0], [2.55, 10.0, 40.0]]
QUANTITIES = [[12.5, 3.33, 1.05], [12.0, 3.3, 1.05], [12.2, 1.0, 1.1], [12.0, 3.2, 1.0]]


def series_request(**extra: Any) -> dict[str, Any]:
    return {"items": ITEMS, "periods": PERIODS, "prices": PRICES, "quantities": QUANTITIES,
            "model": {"family": "translog", "sigma": 3.0}} | extra


def test_konus_series_is_null_where_the_model_is_not_regular(client) -> None:
    r = client.post("/v1/index-series", json=series_request())
    assert r.status_code == 200, r.text
    out = r.json()
    k = out["konus"]
    validity = k["validity"]
    assert validity["state"] == "outside_regular_region"
    outside = validity["periods_outside_regular_region"]
    assert [p["period"] for p in outside] == ["2025-03"]
    reason = outside[0]["reasons"][0]
    assert reason["code"] == "shares_outside_unit_interval"
    assert reason["items"] == [{"id": "transit", "label": "Transit pass"}]
    for target in ("base", "current", "midpoint"):
        fixed, chained = k["fixed_base"][target], k["chained"][target]
        assert fixed[2] is None and None not in (fixed[0], fixed[1], fixed[3])
        assert chained[2] is None and chained[3] is None  # the link into 2025-03 is lost
        assert chained[0] == pytest.approx(100.0) and chained[1] is not None
    # Bias follows the Konüs value it is measured against.
    lasp = next(b for b in out["bias"] if b["series"] == "laspeyres" and b["kind"] == "fixed_base")
    assert lasp["points"][2] is None and lasp["points"][3] is not None
    # The formula series are all there.
    laspeyres = next(f for f in out["formulas"] if f["formula"] == "laspeyres")
    assert None not in laspeyres["fixed_base"]
    codes = {n["code"] for n in out["notices"]}
    assert "konus_outside_regular_region" in codes


def test_series_csv_leaves_the_withheld_cells_empty(client) -> None:
    r = client.post("/v1/index-series?format=csv", json=series_request())
    assert r.status_code == 200, r.text
    lines = [line.split(",") for line in r.text.strip().splitlines()]
    header = lines[0]
    col = header.index("konus_fixed_base_base")
    assert [row[col] == "" for row in lines[1:]] == [False, False, True, False]


def test_every_period_default_is_stated(client) -> None:
    out = client.post("/v1/index-series", json=series_request(model=None)).json()
    codes = {n["code"] for n in out["notices"]}
    assert {"base_period_assumed", "reference_period_assumed", "frequency_from_labels"} <= codes
    given = client.post("/v1/index-series", json=series_request(
        model=None, base_period="2025-01", reference_period="2025-01",
        frequency="monthly")).json()
    codes = {n["code"] for n in given["notices"]}
    assert not {"base_period_assumed", "reference_period_assumed",
                "frequency_from_labels"} & codes
    assert given["scale"]["indices"] == "levels, 2025-01 = 100"


def test_formulas_named_say_which_defaults_were_left_out(client) -> None:
    out = client.post("/v1/index-series", json=series_request(
        model=None, formulas=["laspeyres", "fisher"])).json()
    asked = [n for n in out["notices"] if n["code"] == "formulas_as_asked"]
    assert asked and "geks" in asked[0]["message"]


def test_lloyd_moulton_sigma_from_the_model_is_stated(client) -> None:
    body = series_request(model={"family": "ces", "sigma": 0.7})
    out = client.post("/v1/index-series", json=body).json()
    notice = [n for n in out["notices"] if n["code"] == "lloyd_moulton_sigma_from_model"]
    assert notice and "0.7" in notice[0]["message"]
    body["lloyd_moulton_sigma"] = 0.5
    out = client.post("/v1/index-series", json=body).json()
    assert "lloyd_moulton_sigma_from_model" not in {n["code"] for n in out["notices"]}


def audit_request() -> dict[str, Any]:
    # Laspeyres by hand, fixed base, on 100: 100 sum p_t q_0 / sum p_0 q_0.
    base = sum(p * q for p, q in zip(PRICES[0], QUANTITIES[0], strict=True))
    values = [100 * sum(p * q for p, q in zip(PRICES[t], QUANTITIES[0], strict=True)) / base
              for t in range(4)]
    published = [{"formula": "laspeyres", "series": "fixed_base", "period": PERIODS[t],
                  "value": round(values[t], 4), "decimals": 4} for t in range(4)]
    return series_request(published=published)


def test_the_audit_reports_the_model_validity(client) -> None:
    out = client.post("/v1/audits", json=audit_request()).json()
    assert out["passed"], out
    validity = out["model_validity"]
    assert validity["family"] == "translog" and validity["state"] == "outside_regular_region"
    period = validity["periods_outside_regular_region"][0]
    assert period["period"] == "2025-03"
    assert period["reasons"][0]["items"][0]["id"] == "transit"
    plain = audit_request()
    plain.pop("model")
    assert client.post("/v1/audits", json=plain).json()["model_validity"] is None


def test_dualcost_check_warns_about_the_model(tmp_path, capsys) -> None:
    panel = tmp_path / "panel.csv"
    lines = ["period,item,price,quantity"]
    for t, period in enumerate(PERIODS):
        for i, item in enumerate(ITEMS):
            lines.append(f"{period},{item['id']},{PRICES[t][i]},{QUANTITIES[t][i]}")
    panel.write_text("\n".join(lines) + "\n", encoding="utf-8")
    published = tmp_path / "published.csv"
    rows = ["formula,series,period,value"] + [
        f"{p['formula']},{p['series']},{p['period']},{p['value']:.4f}"
        for p in audit_request()["published"]]
    published.write_text("\n".join(rows) + "\n", encoding="utf-8")
    code = main(["check", str(published), str(panel), "--model",
                 '{"family": "translog", "sigma": 3}'])
    out = capsys.readouterr().out
    assert code == 0, out
    assert "warning: the translog model is outside its regular region in 1 period(s) (2025-03" \
        in out


def test_every_answer_states_its_scale_in_the_same_words(client) -> None:
    """Comparisons and series say how their indices and biases are scaled, in JSON and in a
    CSV answer's Dualcost-Scale header."""
    from tests.api.test_comparisons import small_request

    comparison = client.post("/v1/comparisons", json=small_request())
    assert comparison.json()["scale"] == {"indices": "ratio, 1 = no change",
                                          "bias": "index points on base 100"}
    as_csv = client.post("/v1/comparisons", json=small_request(), headers={"accept": "text/csv"})
    assert as_csv.headers["dualcost-scale"] == ("indices: ratio, 1 = no change; "
                                                "bias: index points on base 100")
    series = client.post("/v1/index-series", json=series_request(model=None)).json()
    assert series["scale"] == {"indices": "levels, 2025-01 = 100",
                               "bias": "index points on base 100",
                               "links": "ratio, 1 = no change"}
    series_csv = client.post("/v1/index-series?format=csv", json=series_request(model=None))
    assert series_csv.headers["dualcost-scale"].startswith("indices: levels, 2025-01 = 100; ")
