"""Records written column by column (service/dualcost/api/records.py) are the bytes orjson writes
for the same list of dicts: the quick road checked against the plain one, as the DEVELOPERS
notes ask of every quick road. The reference is orjson's own writing of the dicts."""

from __future__ import annotations

import json
import math
from typing import Any

import numpy as np
import orjson
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from dualcost.api.operations import compare
from dualcost.api.records import Grouped, Written, json_records
from dualcost.api.schemas.comparison import ComparisonRequest
from dualcost.config import Settings
from tests.api.test_validity import translog_far_from_base
from tests.conftest import EXAMPLES

_CELLS = (st.floats() | st.integers(-(2 ** 63), 2 ** 63 - 1) | st.none() | st.booleans()
          | st.text(max_size=6) | st.sampled_from(["a,b", '"', "},{", "1.0,", "\\", "ü", ""]))


def _plain(columns: dict[str, list[Any]]) -> bytes:
    rows = [dict(zip(columns, row, strict=True)) for row in zip(*columns.values(), strict=True)]
    return orjson.dumps(rows)


@settings(max_examples=300, deadline=None, derandomize=True)
@given(st.integers(0, 7).flatmap(lambda n: st.dictionaries(
    st.text(max_size=5) | st.sampled_from(['a"b', "x,y", "item"]),
    st.lists(_CELLS, min_size=n, max_size=n), max_size=6)))
def test_records_are_the_bytes_orjson_writes_for_the_dicts(columns) -> None:
    """Any columns (numbers, NaN and infinity, text with commas and quotes, None, booleans,
    keys that need escaping, no rows, no columns) give orjson's bytes for the dicts."""
    assert orjson.dumps({"rows": json_records(columns)}) == orjson.dumps(
        {"rows": orjson.Fragment(_plain(columns))})


def test_columns_of_different_lengths_are_refused() -> None:
    with pytest.raises(ValueError, match="differ in length"):
        json_records({"a": [1.0, 2.0], "b": [1.0]})


def test_a_column_of_floats_keeps_every_digit() -> None:
    values = [0.1, 1 / 3, 2.0 ** -1074, 1.7976931348623157e308, -0.0, 12.0, math.pi]
    text = orjson.dumps(json_records({"v": values, "k": [str(v) for v in values]}))
    assert [row["v"] for row in json.loads(text)] == values


def _bodies() -> list[Any]:
    examples = [pytest.param(json.loads(p.read_text(encoding="utf-8")), id=p.stem)
                for p in sorted(EXAMPLES.glob("compare.*.json"))]
    return [*examples, pytest.param(translog_far_from_base(), id="outside_regular_region")]


@pytest.mark.parametrize("body", _bodies())
def test_a_comparison_answer_is_the_same_bytes_with_its_rows_written_as_text(body) -> None:
    """Every comparison example, and a model outside its regular region (the model's columns
    null), answers the same bytes whichever way by_item is written."""
    outcome = compare.run(ComparisonRequest.model_validate(body), Settings())
    plain = orjson.dumps(compare.document(outcome), option=orjson.OPT_SERIALIZE_NUMPY)
    quick = orjson.dumps(compare.document(outcome, rows_as_text=True),
                         option=orjson.OPT_SERIALIZE_NUMPY)
    assert quick == plain


@settings(max_examples=200, deadline=None, derandomize=True)
@given(st.integers(0, 5), st.integers(0, 3), st.lists(st.floats(), min_size=15, max_size=15))
def test_nested_objects_lists_of_records_and_arrays_are_orjson_bytes(n, per_row, floats) -> None:
    """Columns as numpy arrays (NaN and infinity null, as orjson writes them in a list), texts
    written before, an object in each row (also one without members) and a list of
    ``per_row`` records in each row: orjson's bytes for the nested dicts and lists."""
    values = np.array((floats * 2)[:n])
    inner = np.array((floats * 4)[:n * per_row])
    labels = [f"r{i}," for i in range(n * per_row)]
    columns: dict[str, Any] = {
        "x": values, "flag": values > 0, "count": np.arange(n),
        "said": Written([orjson.dumps(["a", i]) for i in range(n)]),
        "nested": {"y": values, "empty": {}, "z": [None] * n},
        "rows": Grouped({"label": labels, "v": inner, "o": {"w": inner}}, per_row)}
    plain = [{"x": float(values[i]), "flag": bool(values[i] > 0), "count": i, "said": ["a", i],
              "nested": {"y": float(values[i]), "empty": {}, "z": None},
              "rows": [{"label": labels[i * per_row + t], "v": float(inner[i * per_row + t]),
                        "o": {"w": float(inner[i * per_row + t])}} for t in range(per_row)]}
             for i in range(n)]
    assert orjson.dumps({"rows": json_records(columns)}) == orjson.dumps({"rows": plain})


def test_nested_columns_of_different_lengths_are_refused() -> None:
    with pytest.raises(ValueError, match="differ in length"):
        json_records({"a": [1.0, 2.0], "b": {"c": [1.0]}})
    with pytest.raises(ValueError, match="differ in length"):
        json_records({"a": [1.0, 2.0], "b": Grouped({"c": [1.0, 2.0, 3.0]}, 2)})
