"""The households of a JSON household batch written column by column from the core's arrays
(service/dualcost/api/records.py, through ``households.household_columns``) are the bytes orjson
writes for the same answer built as one dict per household: the quick road checked against the
plain one, as the DEVELOPERS notes ask of every quick road. The reference is orjson's own
writing of the dicts (``households.document`` without ``rows_as_text``)."""

from __future__ import annotations

import copy
import dataclasses
import json
from typing import Any

import numpy as np
import orjson
import pytest

from dualcost.api.operations import households
from dualcost.api.records import json_records
from dualcost.api.schemas.households import HouseholdIndicesRequest
from dualcost.config import Settings
from dualcost.core.households import REASONS, HouseholdJob, HouseholdResults, SkipReport
from dualcost.core.sensitivity import Band
from tests.api.test_households_validity import panel
from tests.conftest import EXAMPLES


def _answers(body: dict[str, Any]) -> tuple[bytes, bytes]:
    outcome = households.run(HouseholdIndicesRequest.model_validate(body), Settings())
    plain = orjson.dumps(households.document(outcome), option=orjson.OPT_SERIALIZE_NUMPY)
    quick = orjson.dumps(households.document(outcome, rows_as_text=True),
                         option=orjson.OPT_SERIALIZE_NUMPY)
    return plain, quick


def _bodies() -> list[Any]:
    examples = [pytest.param(json.loads(p.read_text(encoding="utf-8")), id=p.stem)
                for p in sorted(EXAMPLES.glob("householdIndices*.json"))]
    skipped = panel(bad_rows="skip")
    skipped["households"][2]["shares"] = [0.5, 0.6, 0.1]  # refused, skipped and named
    del skipped["households"][1]["id"]
    return [*examples, pytest.param(panel(), id="translog_outside_regular_region"),
            pytest.param(panel(model={"family": "translog", "sigma": 3.0},
                               band_models=[{"family": "ces", "sigma": 0.5},
                                            {"family": "cobb_douglas"}]),
                         id="band_and_irregular"),
            pytest.param(skipped, id="skipped_row_and_an_id_left_out")]


@pytest.mark.parametrize("body", _bodies())
def test_a_household_answer_is_the_same_bytes_with_its_rows_written_as_text(body) -> None:
    """Every householdIndices example (bands, quarterly periods, a per-mille share unit,
    Stone-Geary), a translog panel outside its regular region in one period (figures
    withheld, reasons and items named), with a band across other models, and with a row
    skipped: the same bytes whichever way the households are written."""
    plain, quick = _answers(body)
    assert quick == plain
    assert json.loads(quick)["households"]


def test_the_irregular_panel_has_withheld_figures() -> None:
    """The panel above does exercise the nulls and the reasons (else the comparison says
    little)."""
    answer = json.loads(_answers(panel())[1])
    periods = [p for h in answer["households"] for p in h["periods"]]
    assert any(p["konus"] is None and p["irregular_reasons"] for p in periods)
    assert any(p["konus"] is not None for p in periods)


def test_a_headline_answer_still_leaves_the_households_out() -> None:
    plain, quick = _answers(panel(detail="headline"))
    assert quick == plain
    assert json.loads(quick)["households"] is None


def _random_results(rng: np.random.Generator, n: int, periods: int, *, money: bool,
                    ids: bool) -> HouseholdResults:
    """Core results of any shape the writer may meet: NaN where withheld or left out, tiny,
    huge and negative figures, flags with their items, ids that need escaping."""
    p0 = np.array([1.0, 2.0, 3.0])
    job = HouseholdJob.checked("ces", {"sigma": 0.5}, p0, [p0 * (1 + 0.1 * t)
                                                           for t in range(periods)],
                               formulas=["laspeyres", "paasche", "fisher"])
    names = [*job.formulas, "konus", "konus_current", "konus_midpoint", "cv_percent",
             *(f"bias_{f}" for f in job.formulas)]
    if money:
        names += ["compensating_variation", "equivalent_variation"]
    scale = 10.0 ** rng.integers(-320, 300, (len(names), periods, n))
    values = rng.normal(size=(len(names), periods, n)) * scale
    values[rng.random(values.shape) < 0.2] = np.nan
    irregular = np.where(rng.random((periods, n)) < 0.3,
                         rng.integers(1, 1 << len(REASONS), (periods, n)), 0)
    items = {(int(t), int(j)): tuple(int(i) for i in rng.choice(3, rng.integers(1, 3),
                                                                 replace=False))
             for t, j in zip(*np.nonzero(irregular), strict=True)}
    texts = ["a,b", '"', "},{", "ü", "", "h\n1"]
    return HouseholdResults(
        job=job, rows=np.arange(1, n + 1) * 2,
        ids=tuple(None if k % 4 == 3 else texts[k % len(texts)] + str(k) for k in range(n))
        if ids else None,
        weights=rng.uniform(0.1, 1e6, n), expenditure=rng.uniform(1.0, 1e5, n) if money
        else None, values=dict(zip(names, values, strict=True)), summary=(),
        skipped=SkipReport(), notices=(), engine="local", chunks=1,
        irregular=irregular.astype(np.uint32), irregular_items=items)


@pytest.mark.parametrize("seed", range(12))
def test_random_results_are_written_as_orjson_writes_the_dicts(seed: int) -> None:
    """Random results (0 to 6 households, 1 to 4 periods, incomes or none, ids or none, a band
    or none): the column writer's bytes are orjson's for the dicts."""
    rng = np.random.default_rng(seed)
    n, periods = int(rng.integers(0, 7)), int(rng.integers(1, 5))
    res = _random_results(rng, n, periods, money=bool(seed % 2), ids=seed % 3 != 0)
    band = None
    if seed % 4 < 2:
        konus = res.values["konus"]
        low = np.where(rng.random(konus.shape) < 0.2, np.nan, konus * rng.uniform(0.9, 1.0))
        high = np.where(rng.random(konus.shape) < 0.2, np.nan, konus * rng.uniform(0.95, 1.1))
        band = Band(low, high, rng.integers(0, 3, konus.shape))
    ids = ["x", "y,z", 'q"']
    plain = households._with_band(households._households(res, ["p", "q,r", "s", "t"][:periods],
                                                         ids), band)
    quick = json_records(households.household_columns(res, ["p", "q,r", "s", "t"][:periods],
                                                      ids, band))
    assert orjson.dumps({"households": quick}) == orjson.dumps({"households": plain})


def test_an_infinite_figure_fails_as_before() -> None:
    """A figure beyond floating point fails the answer, whichever way it is written."""
    res = _random_results(np.random.default_rng(1), 3, 2, money=True, ids=True)
    broken = copy.copy(res.values)
    broken["konus"] = np.where(np.isnan(broken["konus"]), 1.0, broken["konus"])
    broken["konus"][0, 0] = np.inf
    res = dataclasses.replace(res, values=broken)
    with pytest.raises(Exception, match="not a finite number"):
        households.household_columns(res, ["a", "b"], ["x", "y", "z"], None)
