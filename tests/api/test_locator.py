"""The one locator (dualcost.api.inputs.locator): a core error's argument and index become the
field the caller wrote, in a JSON body (RFC 6901 pointers), a query string, or a CSV upload
(RFC 7111 fragments). Our own conventions, checked here on the tables the operations use."""

from __future__ import annotations

import pytest

from dualcost.api.inputs.locator import CsvRows, Locator, Place
from dualcost.api.operations import compare, series
from dualcost.api.problems import RequestProblem
from dualcost.core.errors import InvalidInput
from dualcost.core.households import InvalidRows, RowProblem

ITEMS = ["rye_loaf", "peat/briquettes", "ferry_pass"]


def _json(vector_keyed: bool = True) -> Locator:
    loc = Locator(compare.PLACES, items=ITEMS)
    loc.given("p0", {i: 1.0 for i in ITEMS} if vector_keyed else [1.0, 2.0, 3.0])
    return loc


def test_an_item_of_a_vector_keyed_by_id_is_named_by_its_escaped_id() -> None:
    """RFC 6901: '/' in a reference token is written '~1'."""
    loc = _json()
    error = loc.error(InvalidInput("p0", "must be greater than zero", 1))
    assert error.pointer == "/base/prices/peat~1briquettes"
    assert error.detail == "must be greater than zero (item 'peat/briquettes')"


def test_an_item_of_a_list_is_named_by_its_position() -> None:
    assert _json(vector_keyed=False).pointer("p0", 2) == "/base/prices/2"


def test_a_list_option_and_a_scalar() -> None:
    loc = _json()
    assert loc.pointer("formulas", 3) == "/formulas/3"
    assert loc.pointer("m0", 7) == "/base/expenditure"


def test_an_argument_without_a_place_names_itself_at_the_model() -> None:
    """An argument the request does not carry (the model's demands standing in for current
    quantities) is the model's: the error points at the model and names the argument."""
    error = _json().error(InvalidInput("mystery", "breaks a rule"))
    assert (error.pointer, error.detail) == ("/model", "mystery: breaks a rule")
    places = {k: v for k, v in compare.PLACES.items() if k != "model"}
    error = Locator(places, items=ITEMS).error(InvalidInput("mystery", "breaks a rule"))
    assert (error.pointer, error.detail) == ("", "mystery: breaks a rule")


def test_the_query_form_names_the_parameter_and_the_position() -> None:
    """The spreadsheet forms carry vectors as comma-separated lists: the position is the
    value's place in the list (our convention, #/query/<name>/<position>)."""
    loc = compare.locator("query")
    loc.items = ITEMS
    assert loc.pointer("p0", 1) == "#/query/p0/1"
    assert loc.at("/current/prices/2") == "#/query/p1/2"
    assert loc.at("/model") == "#/query/family"
    assert loc.at("/unknown/field") == "#/query/unknown/field"


def test_a_csv_upload_names_cells_rows_and_options() -> None:
    """RFC 7111: #cell=row,column (rows counted from 1 with the header) and #row=n; options of
    the upload are query parameters, inside the JSON of a parameter that holds JSON."""
    loc = series.locator("csv")
    loc.items = ITEMS
    loc.csv = CsvRows(columns={"period": 1, "item": 2, "price": 3}, cells={(1, 2): 9},
                      first={0: 2, 1: 7}, item_first={2: 4})
    assert loc.pointer("prices", (1, 2)) == "#cell=9,3"
    assert loc.pointer("prices", (1,)) == "#row=7"
    assert loc.pointer("prices") == "#row=1"
    assert loc.pointer("periods", 1) == "#cell=7,1"
    assert loc.pointer("items", 2) == "#cell=4,2"
    assert loc.pointer("base_period") == "#/query/base_period"
    assert loc.pointer("formulas", 4) == "#/query/formulas"
    assert loc.at("/model/sigma") == "#/query/model/sigma"


def test_translating_turns_core_errors_into_located_problems() -> None:
    loc = _json()
    with pytest.raises(RequestProblem) as info, loc.translating():
        raise InvalidInput("p1", "must be greater than zero", 0)
    assert [e.pointer for e in info.value.errors] == ["/current/prices/0"]


def test_refused_household_rows_are_named_in_json_and_in_csv() -> None:
    """A household row's field: /households/<row - 1>/<field>[/<item>] in JSON (RFC 6901
    pointers count from 0, rows from 1); the record's cell in a wide CSV upload (one column per
    item; RFC 7111, the header being record 1), and the line the record starts on where it
    differs (a quoted field spanning lines before it)."""
    problem = RowProblem(4, "shares", "must not be negative", "negative_share", 2)
    loc = Locator({"row:shares": Place("/households/{row}/shares", column="*item")}, items=ITEMS)
    loc.given_rows("row:shares", [True] * 5)
    loc.row_names = ["a", "b", "c", "d", "e"]
    error = loc.row_error(problem)
    assert error.pointer == "/households/3/shares/ferry_pass"
    assert error.detail == "household row 4 ('d'): must not be negative"
    loc.form = "csv"
    loc.csv = CsvRows(columns={"household": 1}, item_columns=[2, 3, 4])
    error = loc.row_error(problem)
    assert (error.pointer, error.detail) == ("#cell=5,4", "row 4: column 'ferry_pass': must not "
                                                          "be negative")
    on_line_5 = RowProblem(4, "shares", "must not be negative", "negative_share", 2, record=5)
    assert loc.row_error(on_line_5).detail.startswith("row 4: ")  # line 5 is record 5
    on_line_7 = RowProblem(4, "shares", "must not be negative", "negative_share", 2, record=7)
    assert loc.row_error(on_line_7).pointer == "#cell=5,4"
    assert loc.row_error(on_line_7).detail.startswith("row 4 (line 7): column 'ferry_pass'")
    with pytest.raises(RequestProblem) as info, loc.translating():
        raise InvalidRows([problem], 1)
    assert [e.pointer for e in info.value.errors] == ["#cell=5,4"]
