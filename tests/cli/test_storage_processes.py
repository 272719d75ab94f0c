"""Jobs and saved runs across real server processes: two `dualcost serve` processes on one
database answer for each other's jobs and runs, a restarted service finds them, and a service
whose database cannot be opened does not start and says why (exit status 2). On SQLite and on
PostgreSQL (tests/databases.py)."""

from __future__ import annotations

import os
import subprocess
import sys
import time
from collections.abc import Iterator
from contextlib import contextmanager
from pathlib import Path

import httpx

from tests.api.test_comparisons import small_request
from tests.api.test_households import example, household_csv
from tests.conftest import free_port


@contextmanager
def serving(database_url: str) -> Iterator[httpx.Client]:
    """`dualcost serve` (one worker) on a free port and the database, until the block ends
    (then stopped as an operator stops it, by SIGTERM)."""
    port = free_port()
    env = os.environ | {"DUALCOST_DATABASE_URL": database_url}
    proc = subprocess.Popen([sys.executable, "-m", "dualcost.cli", "serve", "--port", str(port),
                             "--log-level", "warning"], env=env, stdout=subprocess.DEVNULL,
                            stderr=subprocess.PIPE, text=True)
    client = httpx.Client(base_url=f"http://127.0.0.1:{port}", timeout=30)
    try:
        deadline = time.monotonic() + 90
        while True:
            try:
                if client.get("/ready").status_code == 200:
                    break
            except httpx.TransportError:
                pass
            assert proc.poll() is None, proc.stderr.read() if proc.stderr else ""
            assert time.monotonic() < deadline, "the service did not start in 90 s"
            time.sleep(0.2)
        yield client
    finally:
        client.close()
        proc.terminate()
        proc.communicate(timeout=30)


def test_two_workers_answer_for_each_other_and_a_restart_finds_jobs_and_runs(
        database_url: str) -> None:
    spec = {k: v for k, v in example().items() if k != "households"}
    with serving(database_url) as one, serving(database_url) as two:
        job = one.post("/v1/household-jobs", json=spec).json()
        # The households go to the other process, which computes them.
        streamed = two.post(job["links"]["households"], content=household_csv(example()),
                            headers={"content-type": "text/csv"})
        assert streamed.status_code == 200, streamed.text
        status = one.get(job["links"]["self"]).json()
        assert status["status"] == "done" and status["summary"]
        assert one.get(job["links"]["results"]).text == streamed.text
        saved = two.post("/v1/comparisons?save=true", json=small_request())
        run_id = saved.headers["dualcost-run"]
        assert one.get(f"/v1/runs/{run_id}").json()["answer"] == saved.json()
    with serving(database_url) as again:
        assert again.get(job["links"]["self"]).json() == status
        assert again.get(job["links"]["results"]).text == streamed.text
        assert again.get(f"/v1/runs/{run_id}").json()["answer"] == saved.json()
        assert again.post(f"/v1/runs/{run_id}/rerun").json()["identical"] is True


def _serve_fails(env: dict[str, str]) -> subprocess.CompletedProcess[str]:
    return subprocess.run([sys.executable, "-m", "dualcost.cli", "serve", "--port",
                           str(free_port())], env=os.environ | env, capture_output=True,
                          text=True, timeout=60)


def test_a_database_that_cannot_be_opened_stops_the_service_with_the_reason(
        tmp_path: Path) -> None:
    unreachable = _serve_fails({"DUALCOST_DATABASE_URL": "postgresql+psycopg://dualcost:"
                                "secret@127.0.0.1:9/none?connect_timeout=3"})
    assert unreachable.returncode == 2
    assert "dualcost: not starting: cannot open the database" in unreachable.stderr
    assert "127.0.0.1:9" in unreachable.stderr and "secret" not in unreachable.stderr
    unknown = _serve_fails({"DUALCOST_DATABASE_URL": "nosuchdatabase://somewhere/x"})
    assert unknown.returncode == 2 and "nosuchdatabase" in unknown.stderr
    a_file = tmp_path / "not-a-folder"
    a_file.touch()
    not_a_folder = _serve_fails({"DUALCOST_DATA_DIR": str(a_file)})
    assert not_a_folder.returncode == 2 and str(a_file) in not_a_folder.stderr
