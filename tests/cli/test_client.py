"""The Python client against the service on a loopback socket."""

from __future__ import annotations

import pytest
from numpy.testing import assert_allclose

from dualcost.client import Client, ProblemError
from tests.api.test_comparisons import small_request


def test_client_compares_and_lists(live_url) -> None:
    with Client(live_url) as dc:
        assert dc.health()["status"] == "ok"
        answer = dc.compare(small_request())
        lasp = next(f for f in answer["formulas"] if f["formula"] == "laspeyres")
        assert_allclose(lasp["value"], (1.3 * 10 + 2 * 5 + 3.6 * 2) / (10 + 10 + 8), rtol=1e-12)
        assert "ces" in {f["family"] for f in dc.families()}
        assert "fisher" in {f["formula"] for f in dc.formulas()}


def test_client_raises_the_problem_with_its_pointer(live_url) -> None:
    bad = small_request()
    bad["current"]["prices"][0] = 0
    with Client(live_url) as dc, pytest.raises(ProblemError) as info:
        dc.compare(bad)
    assert info.value.status == 422
    assert info.value.errors[0]["pointer"] == "/current/prices/0"
