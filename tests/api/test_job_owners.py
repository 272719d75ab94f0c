"""Household jobs owned by the API key that created them, and a job table that never gives a
key's unfinished job to another key (common practice for a multi-tenant service: another
tenant's resource is "not found", RFC 9110 section 15.5.5 allows 404 to hide a resource that
exists; a full table is 503 with Retry-After, RFC 9110 sections 15.6.4 and 10.2.3). The
table is in the database: each test runs on a new SQLite and a new PostgreSQL database."""

from __future__ import annotations

from typing import Any

import pytest
from fastapi.testclient import TestClient
from sqlalchemy import update

from dualcost.api.app import create_app
from dualcost.api.operations.job_store import Entry, replacement
from dualcost.api.problems import JobTableFull
from dualcost.config import Settings
from dualcost.storage.tables import JobRecord
from tests.api.test_households import example, household_csv
from tests.conftest import EXAMPLES

A = "wrenmouth-office-key-0123456789"
B = "wrenmouth-harbour-key-9876543210"


@pytest.fixture
def service(database_url: str) -> Any:
    """A service on a new database (SQLite, then PostgreSQL)."""

    def make(**settings: object) -> TestClient:
        return TestClient(create_app(Settings(examples_dir=EXAMPLES, database_url=database_url,
                                              **settings)))

    return make


def create(client: TestClient, key: str | None = None) -> Any:
    spec = {k: v for k, v in example().items() if k != "households"}
    return client.post("/v1/household-jobs", json=spec,
                       headers={"x-api-key": key} if key else {})


def job_of(client: TestClient, key: str | None = None) -> dict[str, Any]:
    r = create(client, key)
    assert r.status_code == 201, r.text
    return r.json()  # type: ignore[no-any-return]


def set_running(client: TestClient, job: dict[str, Any]) -> None:
    """The job as a worker computing it leaves it in the database (a fresh heartbeat)."""
    from dualcost.api.operations.job_store import utcnow

    store = client.app.state.jobs  # type: ignore[attr-defined]
    with store.db.transaction() as s:
        s.execute(update(JobRecord).where(JobRecord.id == job["id"])
                  .values(status="running", runner="elsewhere", heartbeat=utcnow()))


def test_a_job_is_seen_only_with_the_key_that_created_it(service: Any) -> None:
    client = service(api_keys=(A, B))
    job = job_of(client, A)
    as_b = {"x-api-key": B}
    missing = client.get("/v1/household-jobs/" + "0" * 32, headers=as_b)
    assert missing.status_code == 404
    for r in (client.get(job["links"]["self"], headers=as_b),
              client.post(job["links"]["households"], content=household_csv(example()),
                          headers=as_b | {"content-type": "text/csv"}),
              client.delete(job["links"]["self"], headers=as_b)):
        assert r.status_code == 404, r.text
        assert r.json()["type"] == missing.json()["type"] == "/problems/not-found"
        assert r.json()["detail"] == missing.json()["detail"].replace("0" * 32, job["id"])
    as_a = {"x-api-key": A}
    assert client.get(job["links"]["self"], headers=as_a).json()["status"] == "waiting_for_households"
    r = client.post(job["links"]["households"], content=household_csv(example()),
                    headers=as_a | {"content-type": "text/csv"})
    assert r.status_code == 200, r.text
    assert client.delete(job["links"]["self"], headers=as_a).status_code == 204


def test_new_jobs_never_replace_another_keys_unfinished_job(service: Any) -> None:
    """A table of 4 shared by two keys (2 each): B creating many jobs replaces only its own."""
    client = service(api_keys=(A, B), max_household_jobs=4)
    mine = [job_of(client, A) for _ in range(2)]
    set_running(client, mine[0])
    for _ in range(5):
        job_of(client, B)
    for job in mine:
        assert client.get(job["links"]["self"], headers={"x-api-key": A}).status_code == 200
    # A's share is its two jobs: a third replaces A's own waiting one, never the running one.
    third = job_of(client, A)
    assert client.get(mine[0]["links"]["self"], headers={"x-api-key": A}).status_code == 200
    assert client.get(mine[1]["links"]["self"], headers={"x-api-key": A}).status_code == 404
    assert client.get(third["links"]["self"], headers={"x-api-key": A}).status_code == 200


def test_a_key_whose_jobs_all_run_gets_503_with_retry_after(service: Any) -> None:
    client = service(api_keys=(A, B), max_household_jobs=4)
    for _ in range(2):
        set_running(client, job_of(client, A))
    r = create(client, A)
    assert r.status_code == 503
    assert r.json()["type"] == "/problems/job-table-full"
    assert int(r.headers["retry-after"]) >= 1
    assert create(client, B).status_code == 201  # B's share is untouched


def test_a_table_full_of_running_jobs_is_503_with_retry_after(service: Any) -> None:
    client = service(max_household_jobs=2)
    for _ in range(2):
        set_running(client, job_of(client))
    r = create(client)
    assert r.status_code == 503 and r.json()["type"] == "/problems/job-table-full"
    assert r.headers["content-type"].startswith("application/problem+json")
    assert int(r.headers["retry-after"]) >= 1


def test_the_order_in_which_jobs_are_replaced() -> None:
    """Own finished, own waiting without an upload, own waiting with one; then another key's
    finished; never a running job nor another key's waiting one."""

    def job(owner: str, status: str, uploads: int = 0) -> Entry:
        return Entry(f"{owner}-{status}-{uploads}", owner, status, uploads)

    def victim(jobs: list[Entry], owner: str) -> str | None:
        try:
            return replacement(jobs, owner, len(jobs), len(jobs))
        except JobTableFull:
            return None

    table = [job("b", "done"), job("a", "waiting_for_households", 1),
             job("a", "waiting_for_households"), job("a", "failed"), job("a", "running")]
    assert victim(table, "a") == "a-failed-0"
    assert victim(table[:3] + table[4:], "a") == "a-waiting_for_households-0"
    assert victim(table[:2] + table[4:], "a") == "a-waiting_for_households-1"
    assert victim(table[:1] + table[4:], "a") == "b-done-0"
    assert victim([job("b", "waiting_for_households"), job("b", "running"), job("a", "running")],
                  "a") is None


@pytest.mark.parametrize("keys,share", [((), 32), ((A,), 32), ((A, B), 16)])
def test_each_keys_share_of_the_table(keys: tuple[str, ...], share: int, service: Any) -> None:
    # The service's default table of 32 (conftest gives the tests' shared table more room).
    default = Settings.model_fields["max_household_jobs"].default
    assert default == 32
    client = service(api_keys=keys, max_household_jobs=default)
    assert client.app.state.jobs.per_owner == share  # type: ignore[attr-defined]
    explicit = service(api_keys=keys, max_household_jobs=default, max_household_jobs_per_key=5)
    assert explicit.app.state.jobs.per_owner == (5 if keys else 32)  # type: ignore[attr-defined]
