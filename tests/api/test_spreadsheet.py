"""The GET forms, driven with the exact URLs a spreadsheet's web-fetch function sends, and their
bodies parsed the way a spreadsheet parses them: a header row, then cells whose numbers use '.'
as the decimal point and no grouping (what a spreadsheet reads locale-independently)."""

from __future__ import annotations

import csv
import io
import re

import numpy as np
from hypothesis import given, settings
from hypothesis import strategies as st
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


# -- decimal=comma: sheets whose locale writes decimal commas ---------------------------------

COMMA_NUMBER = re.compile(r"^-?\d+(,\d+)?([eE][-+]?\d+)?$")


def comma_sheet_number(cell: str) -> float:
    """How a comma-decimal spreadsheet reads a number: digits, one ',', no grouping."""
    assert COMMA_NUMBER.match(cell), cell
    return float(cell.replace(",", "."))


def test_value_form_writes_decimal_commas_when_asked(client) -> None:
    for measure in ("konus_base", "laspeyres", "compensating_variation"):
        point = client.get(VALUE + f"&measure={measure}")
        comma = client.get(_comma_query(VALUE) + f"&measure={measure}")
        assert comma.status_code == 200
        assert comma.text == point.text.replace(".", ",")
        assert comma_sheet_number(comma.text) == spreadsheet_number(point.text)
        assert comma.headers["dualcost-decimal"] == "comma"
        assert point.headers["dualcost-decimal"] == "point"
    w0 = P0 * Q0 / (P0 @ Q0)
    konus = (w0 @ (P1 / P0) ** 0.4) ** (1 / 0.4)  # Lloyd (1975); Moulton (1996): CES Konüs index
    fixed = client.get(_comma_query(VALUE) + "&digits=6").text
    assert re.match(r"^\d+,\d{6}$", fixed), fixed
    assert abs(comma_sheet_number(fixed) - konus) <= 5e-7


def test_comma_csv_separates_its_fields_by_semicolons(client) -> None:
    point = client.get(URL)
    comma = client.get(_comma_query(URL))
    assert comma.headers["content-type"].startswith("text/csv")
    assert (comma.headers["dualcost-decimal"], comma.headers["dualcost-separator"]) == (
        "comma", "semicolon")
    assert (point.headers["dualcost-decimal"], point.headers["dualcost-separator"]) == (
        "point", "comma")
    by_point = list(csv.reader(io.StringIO(point.text)))
    by_comma = list(csv.reader(io.StringIO(comma.text), delimiter=";"))
    assert by_comma[0] == by_point[0]
    for row_p, row_c in zip(by_point[1:], by_comma[1:], strict=True):
        assert len(row_c) == len(row_p) and row_c[0] == row_p[0] and row_c[2] == row_p[2]
        for cell_p, cell_c in zip(row_p[1:], row_c[1:], strict=True):
            if cell_p in ("", "base", "current", "midpoint"):
                assert cell_c == cell_p
            else:
                assert comma_sheet_number(cell_c) == spreadsheet_number(cell_p)
    fixed = list(csv.reader(io.StringIO(client.get(_comma_query(URL) + "&digits=4").text),
                            delimiter=";"))
    assert all(re.match(r"^-?\d+,\d{4}$", row[1]) for row in fixed[1:]), fixed


def test_comma_series_is_the_same_table_with_commas_and_semicolons(client) -> None:
    point = client.get(_series_url() + "&digits=5")
    comma = client.get(_comma_series_url() + "&digits=5")
    assert comma.headers["dualcost-separator"] == "semicolon"
    by_point = list(csv.reader(io.StringIO(point.text)))
    by_comma = list(csv.reader(io.StringIO(comma.text), delimiter=";"))
    assert [len(r) for r in by_comma] == [len(r) for r in by_point]
    for row_p, row_c in zip(by_point[1:], by_comma[1:], strict=True):
        assert row_c == [cell.replace(".", ",") for cell in row_p]


def _comma_query(url: str) -> str:
    """The README example as a comma-decimal sheet sends it: decimal commas, ';' between values."""
    return (url.replace("p0=2.40,9,38", "p0=2,40;9;38").replace("p1=2.52,12.15,41", "p1=2,52;12,15;41")
            .replace("q0=12,6,1", "q0=12;6;1").replace("sigma=0.6", "sigma=0,6") + "&decimal=comma")


def test_comma_decimal_query_is_read_as_declared(client) -> None:
    assert client.get(_comma_query(VALUE)).text == client.get(VALUE).text.replace(".", ",")
    point = ("/v1/sheet/value?items=food,fuel,other&p0=1,1,1&p1=1.06,1.25,1.02"
             "&w0=0.3,0.15,0.55&m0=1500.5&family=stone_geary&frisch=-2.5&reference_income=1000.25"
             "&measure=konus_reference")
    comma = ("/v1/sheet/value?items=food;fuel;other&p0=1;1;1&p1=1,06;1,25;1,02"
             "&w0=0,3;0,15;0,55&m0=1500,5&family=stone_geary&frisch=-2,5&reference_income=1000,25"
             "&measure=konus_reference&decimal=comma")
    assert client.get(comma).text == client.get(point).text.replace(".", ",")
    r = client.get(_comma_series_url())
    assert r.status_code == 200, r.text
    point = list(csv.reader(io.StringIO(client.get(_series_url()).text)))
    assert list(csv.reader(io.StringIO(r.text), delimiter=";")) == [
        [cell.replace(".", ",") for cell in row] for row in point]


def _comma_series_url() -> str:
    """The six-commodity panel as a comma-decimal sheet sends it."""
    url = re.sub(r"(\d)\.(\d)", r"\1,\2", _series_url().replace(",", ";"))
    assert "." not in url.split("?", 1)[1]
    return url + "&decimal=comma"


def test_ambiguous_numbers_are_refused_where_they_are(client) -> None:
    """A '.' under decimal=comma, or values joined by ',' so that no one can tell them from
    decimals, are refused with the place named, never guessed."""
    comma = _comma_query(VALUE)
    cases = {
        comma.replace("p0=2,40;9;38", "p0=2,40;9;1.234"): "#/query/p0/2",
        comma.replace("p0=2,40;9;38", "p0=2,40,9,38"): "#/query/p0/0",
        comma.replace("q0=12;6;1", "q0=12;6;1.000"): "#/query/q0/2",
        comma.replace("sigma=0,6", "sigma=0.6"): "#/query/sigma",
        comma.replace("p1=2,52;12,15;41", "p1=2,52;12,15;4 100"): "#/query/p1/2",
    }
    for url, pointer in cases.items():
        r = client.get(url)
        assert r.status_code == 422, (url, r.text)
        assert r.headers["content-type"].startswith("application/problem+json")
        assert [e["pointer"] for e in r.json()["errors"]] == [pointer]
        text = client.get(url + "&on_error=text")
        assert text.status_code == 200 and text.headers["dualcost-decimal"] == "comma"
        assert text.text.startswith("ERROR: " + pointer.removeprefix("#/query/") + ": "), text.text
    detail = client.get(comma.replace("p0=2,40;9;38", "p0=2,40;9;1.234")).json()["errors"][0]
    assert "'1.234' could be read more than one way" in detail["detail"]


def test_point_query_with_decimal_commas_says_how_to_declare_them(client) -> None:
    r = client.get(VALUE.replace("p0=2.40,9,38", "p0=2,40;9;38") + "&on_error=text")
    assert r.status_code == 200 and r.headers["dualcost-decimal"] == "point"
    assert r.text.startswith("ERROR: p0/0: '2,40' is not a finite number")
    assert "add decimal=comma" in r.text
    bad = client.get(VALUE + "&decimal=dot")
    assert bad.status_code == 422 and bad.json()["errors"][0]["pointer"] == "#/query/decimal"
    text = client.get(VALUE + "&decimal=dot&on_error=text")
    assert text.status_code == 200 and text.text.startswith("ERROR: decimal:")


def test_comma_errors_and_non_numbers_still_answer_text(client) -> None:
    comma = _comma_query(VALUE)
    r = client.get(comma.replace("p1=2,52;12,15;41", "p1=2,52;-12,15;41") + "&on_error=text")
    assert r.status_code == 200 and r.text.startswith("ERROR: p1/1: must be greater than zero")
    r = client.get(comma.replace("sigma=0,6", "sigma=abc") + "&on_error=text")
    assert r.status_code == 200 and r.text.startswith("ERROR: sigma: 'abc' is not a finite number")
    r = client.get(comma.replace("sigma=0,6", "sigma=abc"))
    assert r.status_code == 422 and r.json()["errors"][0]["pointer"] == "#/query/sigma"


# -- no number that the other convention reads as thousands ----------------------------------


def read_with_grouping(text: str, group: str) -> float | None:
    """How a sheet whose locale uses ``group`` as thousands separator reads a number that
    contains it: digits, then groups of exactly three digits after each separator, perhaps an
    exponent; anything else is not a number. Observed in LibreOffice Calc 7.4 (de-DE reads
    '0.498' as 498 and '1435.380' as 1435380, refuses '143.5380' and '1.1882'); the
    LibreOffice test in tests/e2e checks the service's answers in such a sheet."""
    match = re.fullmatch(rf"(-?\d+(?:{re.escape(group)}\d{{3}})+)([eE][-+]?\d+)?", text)
    return None if match is None else float(match.group(1).replace(group, "") + (match.group(2) or ""))


def test_three_decimals_are_written_with_one_more_zero(client) -> None:
    """0.498 would read as 498 where '.' groups thousands: the answer is 0.4980, the same number
    in its own convention and no number at all in the other one."""
    r = client.get(VALUE + "&measure=laspeyres_bias_points&digits=3")
    assert r.text == "0.4980"
    assert read_with_grouping(r.text, ".") is None
    comma = client.get(_comma_query(VALUE) + "&measure=laspeyres_bias_points&digits=3")
    assert comma.text == "0,4980" and read_with_grouping(comma.text, ",") is None
    table = client.get(URL + "&digits=3").text
    assert "compensated_income,143.5380," in table


@settings(max_examples=400, deadline=None)
@given(value=st.floats(allow_nan=False, allow_infinity=False, min_value=-1e12, max_value=1e12)
       | st.sampled_from([0.498, 1.125, 143.538, 1.125e-05, 1435.38, -0.125, 12.0]),
       digits=st.none() | st.integers(0, 8))
def test_no_number_reads_as_another_in_the_other_convention(value: float, digits: int | None) -> None:
    from dualcost.api.render import SheetNumbers, fixed_point

    expected = float(fixed_point(value, digits))
    for decimal, own_mark, other_group in (("point", ".", "."), ("comma", ",", ",")):
        text = SheetNumbers(decimal, digits).number(value)  # type: ignore[arg-type]
        assert "." not in text if decimal == "comma" else "," not in text
        assert float(text.replace(own_mark, ".")) == expected
        misread = read_with_grouping(text, other_group)
        assert misread is None or misread == expected, (text, misread)


def test_the_readme_urls_give_the_same_number_in_both_conventions(client) -> None:
    """The README's Wrenmouth URLs, one per convention, as a sheet sends them."""
    from tests.conftest import ROOT

    readme = (ROOT / "README.md").read_text(encoding="utf-8")
    urls = re.findall(r"^http://127\.0\.0\.1:8000(/v1/sheet/value\?\S+)$", readme, re.M)
    point = [u for u in urls if "decimal=comma" not in u]
    comma = [u for u in urls if "decimal=comma" in u]
    assert len(point) == len(comma) == 1
    by_point, by_comma = client.get(point[0]), client.get(comma[0])
    assert by_comma.headers["dualcost-decimal"] == "comma"
    assert comma_sheet_number(by_comma.text) == spreadsheet_number(by_point.text)
    w0 = P0 * Q0 / (P0 @ Q0)
    konus = (w0 @ (P1 / P0) ** 0.4) ** (1 / 0.4)  # Lloyd (1975); Moulton (1996): CES Konüs index
    assert_allclose(spreadsheet_number(by_point.text), konus, rtol=1e-12)
