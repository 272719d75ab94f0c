"""Headline-only household answers (``detail: "headline"``): the rows per household are left out
and the answer says so; the summaries are the full answer's, and the headline CSV answer is the
summary as a table.

The yardstick is the full answer to the same request; the Wrenmouth deciles are the project's
invented demo data.
"""

from __future__ import annotations

import csv
import io

import pytest

from tests.api.test_bad_input import assert_problem
from tests.api.test_households import CES, SUBSISTENCE, example, post


@pytest.mark.parametrize("name", [CES, SUBSISTENCE])
def test_a_headline_json_answer_leaves_out_the_households_and_says_so(client, name: str) -> None:
    body = example(name)
    full = post(client, body).json()
    headline = post(client, body | {"detail": "headline"}).json()
    assert full["detail"] == "full" and full["left_out"] == [] and full["households"]
    assert headline["detail"] == "headline" and headline["left_out"] == ["households"]
    assert headline["households"] is None
    kept = set(full) - {"households", "detail", "left_out", "provenance"}
    assert {key: headline[key] for key in kept} == {key: full[key] for key in kept}


def test_a_headline_csv_answer_is_the_summary_table(client) -> None:
    """One row per period and index, each cell the JSON summary's figure (empty where null)."""
    body = example(CES) | {"detail": "headline"}
    summary = post(client, body).json()["summary"]
    r = post(client, body, headers={"accept": "text/csv"})
    assert r.status_code == 200, r.text
    assert r.headers["dualcost-detail"] == "headline"
    assert r.headers["dualcost-left-out"] == "households"
    rows = list(csv.DictReader(io.StringIO(r.text)))
    expected = [(block, i) for block in summary for i in block["indices"]]
    assert len(rows) == len(expected) > 0
    for row, (block, i) in zip(rows, expected, strict=True):
        assert (row["period"], row["index"]) == (block["period"], i["index"])
        for key in ("democratic", "plutocratic", "share_above_democratic", "minimum"):
            assert row[key] == ("" if i[key] is None else repr(i[key]))
        assert row["weight_total"] == repr(block["weight_total"])
        for q in i["quantiles"]:
            assert row[f"quantile_{q['probability']!r}"] == repr(q["value"])


def test_an_unknown_detail_is_a_problem_naming_it(client) -> None:
    assert_problem(post(client, example(CES) | {"detail": "brief"}), "/detail", "headline")
