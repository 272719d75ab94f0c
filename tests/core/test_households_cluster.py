"""The Dask engine (dualcost.engines.dask) against the in-process path: the same bits.

A LocalCluster of two in-process workers (dask.distributed's own test set-up) runs the same job
partitioned over households; every output column and every summary must be identical, not
merely close, because both paths evaluate the same chunks with the same function.
"""

from __future__ import annotations

import subprocess
import sys
from collections.abc import Iterator
from typing import Any

import distributed
import numpy as np
import pytest

from dualcost.core.households import HouseholdJob, HouseholdResults, run_households
from dualcost.engines.dask import cluster_evaluator


@pytest.fixture(scope="module")
def client() -> Iterator[Any]:
    with distributed.LocalCluster(n_workers=2, threads_per_worker=1, processes=False,
                                  dashboard_address="127.0.0.1:0") as cluster:
        with distributed.Client(cluster, set_as_default=False) as c:
            yield c


def _assert_identical(a: HouseholdResults, b: HouseholdResults) -> None:
    assert a.rows.tolist() == b.rows.tolist()
    assert a.ids == b.ids
    assert set(a.values) == set(b.values)
    for name in a.values:
        assert np.array_equal(a.values[name], b.values[name]), name
    assert a.summary == b.summary
    assert a.skipped.count == b.skipped.count and a.skipped.listed == b.skipped.listed
    assert a.notices == b.notices


CASES = [
    ("ces", {"sigma": 0.7}),
    ("stone_geary", {"expenditure_elasticities": np.linspace(0.4, 1.6, 8), "frisch": -2.5}),
    ("nested_ces", {"tree": {"sigma": 0.5, "children": [
        {"sigma": 1.5, "children": [0, 1, 2]}, {"sigma": 0.2, "children": [3, 4, 5, 6, 7]}]}}),
]


@pytest.mark.parametrize("family,params", CASES)
def test_cluster_and_in_process_agree_exactly(client: Any, family: str,
                                              params: dict[str, Any]) -> None:
    """Same job, same chunks: identical results on two Dask workers and in process (the
    partitioning over households is the only difference; common practice for reproducible
    distributed runs)."""
    rng = np.random.default_rng(31)
    households = 120 if family == "nested_ces" else 700
    p0 = rng.uniform(1.0, 4.0, 8)
    series = p0 * np.exp(rng.normal(0.03, 0.12, (2, 8)))
    w = rng.dirichlet(np.full(8, 1.5), households)
    m = rng.uniform(100.0, 900.0, households)
    a = rng.uniform(0.5, 2.0, households)
    w[5] *= 1.2  # one bad row, skipped the same way on both paths
    ids = [f"hh{h}" for h in range(households)]
    job = HouseholdJob.checked(family, params, p0, series, chunk_rows=64)
    here = run_households(job, w, expenditure=m, weights=a, ids=ids, on_bad_rows="skip")
    there = run_households(job, w, expenditure=m, weights=a, ids=ids, on_bad_rows="skip",
                           evaluate=cluster_evaluator(client, chunks_per_task=3),
                           engine="cluster")
    assert here.engine == "local" and there.engine == "cluster"
    assert here.skipped.count == 1
    _assert_identical(here, there)


def test_cluster_by_address(client: Any) -> None:
    """The scheduler can be named by its address, as the service's setting does."""
    rng = np.random.default_rng(32)
    p0 = np.ones(5)
    w = rng.dirichlet(np.ones(5), 50)
    job = HouseholdJob.checked("cobb_douglas", {}, p0, p0 * 1.1, chunk_rows=16)
    address = client.scheduler.address
    _assert_identical(run_households(job, w),
                      run_households(job, w, evaluate=cluster_evaluator(address), engine="cluster"))


def test_dask_is_imported_only_when_used() -> None:
    """The service runs without Dask: importing the household core loads no part of it."""
    code = ("import sys, dualcost.core.households, dualcost.engines.dask, dualcost.api.app; "
            "bad = [m for m in ('dask', 'distributed') if m in sys.modules]; print(bad); "
            "sys.exit(1 if bad else 0)")
    done = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True)
    assert done.returncode == 0, done.stdout + done.stderr
