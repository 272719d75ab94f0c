"""Change measures on the index-series answers: JSON, CSV, the CSV upload and the spreadsheet
series form, and rebasing by name."""

from __future__ import annotations

import csv
import io

from numpy.testing import assert_allclose

from tests.api.test_bad_input import assert_problem
from tests.conftest import load_example

EXAMPLE = "indexSeries.wrenmouth_monthly_ces.json"


def test_every_series_answer_carries_its_change_measures(client) -> None:
    """The 12-month change of the last month (2026-03 on 2025-03) equals the ratio of the
    published levels (definition, common practice), for a formula and the Konüs series."""
    body = load_example(EXAMPLE)
    answer = client.post("/v1/index-series", json=body).json()
    periods = answer["periods"]
    t, s = periods.index("2026-03"), periods.index("2025-03")
    by = {(c["series"], c["kind"], c["standard"]): c for c in answer["changes"]["by_series"]}
    lasp = next(f for f in answer["formulas"] if f["formula"] == "laspeyres")
    c = by[("laspeyres", "fixed_base", None)]
    assert_allclose(c["twelve_month_percent"][t],
                    100.0 * (lasp["fixed_base"][t] / lasp["fixed_base"][s] - 1.0), rtol=1e-12)
    assert c["twelve_month_percent"][s] is None
    assert any(e["measure"] == "twelve_month" and "2025-03" in e["periods"] for e in c["empty"])
    konus = by[("konus", "fixed_base", "base")]["period_on_period_percent"]
    k = answer["konus"]["fixed_base"]["base"]
    assert_allclose(konus[t], 100.0 * (k[t] / k[t - 1] - 1.0), rtol=1e-12)
    assert answer["changes"]["rebased_to"] is None


def test_rebasing_by_period_in_json_and_csv(client) -> None:
    body = load_example(EXAMPLE) | {"rebase": {"period": "2025-06"}}
    answer = client.post("/v1/index-series", json=body).json()
    t = answer["periods"].index("2025-06")
    for c in answer["changes"]["by_series"]:
        assert c["rebased"][t] == 100.0 or c["rebased"][t] is None
    r = client.post("/v1/index-series", json=body, headers={"accept": "text/csv"})
    rows = list(csv.reader(io.StringIO(r.text)))
    header = rows[0]
    col = header.index("fisher_chained_rebased")
    assert float(rows[1 + t][col]) == 100.0
    assert "laspeyres_fixed_base_twelve_month_percent" in header
    assert "konus_chained_base_annual_average_change_percent" in header
    avg = header.index("laspeyres_fixed_base_annual_average")
    dec = answer["periods"].index("2025-12")
    filled = [i for i, row in enumerate(rows[1:]) if row[avg]]
    assert filled == [dec]  # the one complete year, in its last month's row


def test_a_rebase_the_series_cannot_take_is_refused_naming_the_field(client) -> None:
    body = load_example(EXAMPLE)
    assert_problem(client.post("/v1/index-series", json=body | {"rebase": {"year": 2026}}),
                   "/rebase/year", "2026")
    assert_problem(client.post("/v1/index-series", json=body | {"rebase": {"period": "1999"}}),
                   "/rebase/period", "not in the panel")
    assert_problem(client.post("/v1/index-series", json=body | {"rebase": {}}), "/rebase")


def test_the_spreadsheet_series_form_has_the_change_columns_and_takes_a_rebase(client) -> None:
    url = ("/v1/sheet/series?items=a,b&periods=2025-01,2025-02,2025-03&prices=2,4&prices=2.2,4"
           "&prices=2.2,5&quantities=1,1&quantities=1,1&quantities=1,1&formulas=laspeyres"
           "&rebase_period=2025-02")
    r = client.get(url)
    assert r.status_code == 200, r.text
    rows = list(csv.reader(io.StringIO(r.text)))
    pop = rows[0].index("laspeyres_fixed_base_period_on_period_percent")
    assert rows[1][pop] == ""  # no month before the first
    assert_allclose(float(rows[2][pop]), 100.0 * (6.2 / 6.0 - 1.0), rtol=1e-12)
    assert float(rows[2][rows[0].index("laspeyres_fixed_base_rebased")]) == 100.0
    bad = client.get(url.replace("rebase_period=2025-02", "rebase_period=2031-01"))
    assert_problem(bad, "#/query/rebase_period", "not in the panel")


def test_the_csv_upload_takes_a_rebase_year(client) -> None:
    lines = ["period,item,price,quantity"]
    for m in range(1, 13):
        lines += [f"2025-{m:02d},a,{1 + m / 100},1", f"2025-{m:02d},b,2,1"]
    r = client.post("/v1/index-series/csv?rebase_year=2025&format=csv&formulas=laspeyres",
                    content="\n".join(lines).encode(), headers={"content-type": "text/csv"})
    assert r.status_code == 200, r.text
    rows = list(csv.reader(io.StringIO(r.text)))
    col = rows[0].index("laspeyres_fixed_base_rebased")
    assert_allclose(sum(float(row[col]) for row in rows[1:13]) / 12.0, 100.0, rtol=1e-13)
