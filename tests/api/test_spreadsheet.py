"""The GET forms, driven with the exact URLs a spreadsheet's web-fetch function sends, and their
bodies parsed the way a spreadsheet parses them: a header row, then cells whose numbers use '.'
as the decimal point and no grouping (what a spreadsheet reads locale-independently)."""

from __future__ import annotations

import csv
import io
import re

import numpy as np
from numpy.testing import assert_allclose

# The Wrenmouth example of the README: three items, CES with sigma 0.6.
URL = ("/v1/sheet/comparison?items=rye_loaf,peat_briquettes,ferry_pass"
       "&p0=2.40,9,38&p1=2.52,12.15,41&q0=12,6,1&family=ces&sigma=0.6")
VALUE = URL.replace("/comparison?", "/value?")
P0, P1, Q0 = np.array([2.40, 9, 38]), np.array([2.52, 12.15, 41]), np.array([12.0, 6, 1])

LOCALE_FREE_NUMBER = re.compile(r"^-?\d+(\.\d+)?([eE][-+]?\d+)?$")


def spreadsheet_number(cell: str) -> float:
    """How a spreadsheet reads a number locale-independently: digits, one '.', no grouping."""
    assert LOCALE_FREE_NUMBER.match(cell), cell
    return float(cell)


def test_csv_form_has_a_header_row_and_locale_free_numbers(client) -> None:
    r = client.get(URL)
    assert r.status_code == 200
    assert r.headers["content-type"].startswith("text/csv")
    rows = list(csv.reader(io.StringIO(r.text)))
    assert rows[0] == ["measure", "value", "compared_with", "bias_points", "bias_percent"]
    table = {row[0]: row for row in rows[1:]}
    w0 = P0 * Q0 / (P0 @ Q0)
    konus = (w0 @ (P1 / P0) ** 0.4) ** (1 / 0.4)  # Lloyd (1975); Moulton (1996): CES Konüs index
    assert_allclose(spreadsheet_number(table["konus_base"][1]), konus, rtol=1e-12)
    assert_allclose(spreadsheet_number(table["laspeyres"][1]), (P1 @ Q0) / (P0 @ Q0), rtol=1e-12)
    assert table["laspeyres"][2] == "base"
    for row in rows[1:]:
        for cell in row[1:]:
            if cell and cell not in ("base", "current", "midpoint"):
                spreadsheet_number(cell)


def test_value_form_is_one_number_in_plain_text(client) -> None:
    r = client.get(VALUE + "&measure=laspeyres")
    assert r.headers["content-type"].startswith("text/plain")
    assert_allclose(spreadsheet_number(r.text), (P1 @ Q0) / (P0 @ Q0), rtol=1e-15)
    fixed = client.get(VALUE + "&measure=compensating_variation&digits=4").text
    assert re.match(r"^\d+\.\d{4}$", fixed), fixed


def test_head_and_options_before_the_fetch(client) -> None:
    """A spreadsheet may send OPTIONS or HEAD first, then fetch the same URL again."""
    assert client.options(URL).status_code == 204
    head = client.head(URL)
    assert head.status_code == 200 and head.content == b""
    assert client.get(URL).text == client.get(URL).text


def test_bad_request_answers_a_problem_by_default(client) -> None:
    r = client.get(VALUE.replace("p1=2.52,12.15", "p1=2.52,-12.15"))
    assert r.status_code == 422
    assert r.headers["content-type"].startswith("application/problem+json")
    assert r.json()["errors"][0]["pointer"] == "#/query/p1/1"


def test_on_error_text_answers_200_with_the_reason(client) -> None:
    """A spreadsheet hides non-2xx bodies, so with on_error=text the reason comes back as text."""
    cases = {
        "p1=2.52,-12.15": "p1/1: must be greater than zero",
        "p1=2.52,12;15,41": "p1/0: '2.52,12' is not a finite number",
        "p1=2.52,12,15": "p1: has 4 values but there are 3 items",
        "sigma=0.6": None,
    }
    for change, expected in cases.items():
        url = VALUE.replace("p1=2.52,12.15", change) if change.startswith("p1") else VALUE
        r = client.get(url + "&on_error=text")
        assert r.status_code == 200
        if expected is None:
            spreadsheet_number(r.text)
        else:
            assert r.text.startswith("ERROR: ") and expected in r.text, r.text
    r = client.get(VALUE.replace("sigma=0.6", "sigma=abc") + "&on_error=text")
    assert r.status_code == 200 and r.text.startswith("ERROR: sigma:")
    r = client.get(VALUE.replace("sigma=0.6", "sigma=-1") + "&on_error=text")
    assert r.status_code == 200 and "sigma" in r.text and "zero or more" in r.text


def test_semicolons_separate_values_for_comma_decimal_sheets(client) -> None:
    """A sheet in a comma-decimal locale joins with ';' and sends '.' decimals."""
    plain = client.get(VALUE).text
    semi = client.get(VALUE.replace("p0=2.40,9,38", "p0=2.40;9;38").replace("q0=12,6,1", "q0=12;6;1"))
    assert semi.text == plain


def test_shares_with_total_expenditure_and_a_reference_income(client) -> None:
    url = ("/v1/sheet/value?items=food,fuel,other&p0=1,1,1&p1=1.06,1.25,1.02&w0=0.3,0.15,0.55"
           "&m0=1500&family=stone_geary&frisch=-2.5&reference_income=1000&measure=konus_reference")
    r = client.get(url)
    assert r.status_code == 200, r.text
    assert 1.0 < spreadsheet_number(r.text) < 1.25


# The CPI Manual's six-commodity table as a spreadsheet would send it: one `prices` and one
# `quantities` parameter per period (ILO et al. 2004, CPI Manual ch. 19, Tables 19.1-19.3;
# recalled from memory).
def _series_url() -> str:
    from tests.reference_data import SIX_COMMODITY_PRICES as PRICES
    from tests.reference_data import SIX_COMMODITY_QUANTITIES as QUANTITIES

    def rows(name, table):
        return "".join(f"&{name}=" + ",".join(repr(float(v)) for v in row) for row in table)

    return ("/v1/sheet/series?items=c1,c2,c3,c4,c5,c6&periods=1,2,3,4,5&reference_value=1"
            "&formulas=laspeyres,paasche,fisher,tornqvist" + rows("prices", PRICES)
            + rows("quantities", QUANTITIES))


def test_series_form_gives_the_published_table_as_csv(client) -> None:
    from tests.reference_data import SIX_COMMODITY_PRINTED as PRINTED

    r = client.get(_series_url())
    assert r.status_code == 200 and r.headers["content-type"].startswith("text/csv")
    rows = list(csv.reader(io.StringIO(r.text)))
    header = rows[0]
    assert header[0] == "period"
    for formula in ("laspeyres", "paasche", "fisher", "tornqvist"):
        column = header.index(f"{formula}_fixed_base")
        values = [spreadsheet_number(row[column]) for row in rows[1:]]
        assert_allclose(values, PRINTED[formula], atol=5e-5)


def test_series_form_reports_a_bad_cell_as_text_when_asked(client) -> None:
    url = _series_url().replace("&prices=1.2,3.0", "&prices=1.2,-3.0", 1) + "&on_error=text"
    r = client.get(url)
    assert r.status_code == 200 and r.text.startswith("ERROR: prices/1/1")
    missing = client.get(_series_url().replace("&prices=1.0,1.0,1.0,1.0,1.0,1.0", "", 1))
    assert missing.status_code == 422
    assert missing.json()["errors"][0]["pointer"] == "#/query/prices"
