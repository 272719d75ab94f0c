"""The household operations with a Dask scheduler configured (DUALCOST_DASK_SCHEDULER).

A LocalCluster with two in-process workers stands in for a real cluster: the JSON answer and the
streamed CSV of a job must be the same, byte for byte, whether the work ran in the service or on
the cluster.
"""

from __future__ import annotations

import copy
from collections.abc import Iterator
from typing import Any

import distributed
import pytest
from fastapi.testclient import TestClient

from dualcost.api.app import create_app
from dualcost.config import Settings
from dualcost.engines import dask as dask_engine
from tests.api.test_households import create_job, household_csv, upload
from tests.conftest import EXAMPLES, load_example


@pytest.fixture(scope="module")
def address() -> Iterator[str]:
    with distributed.LocalCluster(n_workers=2, threads_per_worker=1, processes=False,
                                  dashboard_address="127.0.0.1:0") as local:
        yield local.scheduler_address


@pytest.fixture(scope="module")
def with_cluster(address: str) -> TestClient:
    # Small chunks and tasks, so that the ten households make several tasks on two workers.
    return TestClient(create_app(Settings(examples_dir=EXAMPLES, dask_scheduler=address,
                                          household_chunk_rows=2, dask_rows_per_task=4)))


def _body(name: str, engine: str) -> dict[str, Any]:
    body = copy.deepcopy(load_example(name))
    body["engine"] = engine
    return body


@pytest.mark.parametrize("name", ["householdIndices.wrenmouth_deciles_subsistence.json",
                                  "householdIndices.wrenmouth_household_types_quarterly.json"])
def test_json_answer_is_the_same_on_the_cluster(with_cluster: TestClient, name: str) -> None:
    """Same job, partitioned over households on two workers or run in process: the same answer
    (common practice for reproducible distributed runs)."""
    here = with_cluster.post("/v1/household-indices", json=_body(name, "local"))
    there = with_cluster.post("/v1/household-indices", json=_body(name, "cluster"))
    assert here.status_code == there.status_code == 200, there.text
    a, b = here.json(), there.json()
    assert (a.pop("engine"), b.pop("engine")) == ("local", "cluster")
    # The requests differ in their engine, so their inputs' digests do too.
    assert a.pop("provenance")["input_digest"] != b.pop("provenance")["input_digest"]
    assert a == b
    assert a["chunks"] >= 2


def test_csv_job_streams_the_same_bytes_from_the_cluster(with_cluster: TestClient) -> None:
    body = copy.deepcopy(load_example("householdIndices.wrenmouth_deciles_ces.json"))
    extra = ["bad,harbour,1500.0,1.0," + ",".join(["0.3"] * 7)]
    text = household_csv(body, extra=extra)
    streamed = {}
    for engine in ("local", "cluster"):
        job = create_job(with_cluster, body, engine=engine)
        r = upload(with_cluster, job, text)
        assert r.status_code == 200, r.text
        streamed[engine] = r.text
        status = with_cluster.get(job["links"]["self"]).json()
        assert status["status"] == "done" and status["engine"] == engine
        assert status["skipped"]["count"] == 1
        streamed[engine + " summary"] = status["summary"]
    assert streamed["local"] == streamed["cluster"]
    assert streamed["local summary"] == streamed["cluster summary"]


def test_unreachable_scheduler_is_a_503(monkeypatch: pytest.MonkeyPatch) -> None:
    """A scheduler that does not answer gives 503 Service Unavailable (RFC 9110, 15.6.4)."""
    monkeypatch.setattr(dask_engine, "CONNECT_TIMEOUT", 0.5)
    # Port 9 (discard) on the loopback interface: nothing listens there.
    app = create_app(Settings(examples_dir=EXAMPLES, dask_scheduler="tcp://127.0.0.1:9"))
    client = TestClient(app)
    r = client.post("/v1/household-indices",
                    json=_body("householdIndices.wrenmouth_deciles_ces.json", "cluster"))
    assert r.status_code == 503, r.text
    assert r.headers["content-type"].startswith("application/problem+json")
    body = copy.deepcopy(load_example("householdIndices.wrenmouth_deciles_ces.json"))
    job = create_job(client, body, engine="cluster")
    assert upload(client, job, household_csv(body)).status_code == 503
    assert client.get(job["links"]["self"]).json()["status"] == "waiting_for_households"
