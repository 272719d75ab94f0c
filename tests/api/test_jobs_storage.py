"""Household jobs kept in a database: answered by any worker, read back after the stream, failed
with the reason when their worker stops, and a lost database answered 503 with Retry-After and
nothing half-written. Each test runs on a new SQLite and a new PostgreSQL database
(tests/databases.py); two apps on one database stand for two workers (the test with two real
server processes is tests/cli/test_storage_processes.py)."""

from __future__ import annotations

from datetime import timedelta
from typing import Any

import pytest
from fastapi.testclient import TestClient
from sqlalchemy import select, update

from dualcost.api.app import create_app
from dualcost.api.operations.job_store import utcnow
from dualcost.config import Settings
from dualcost.core.errors import StorageUnavailable
from dualcost.storage import database_of
from dualcost.storage.tables import JobRecord, JobResultPiece
from tests.api.test_households import create_job, example, household_csv, upload
from tests.conftest import EXAMPLES


def worker(url: str, **settings: Any) -> TestClient:
    return TestClient(create_app(Settings(examples_dir=EXAMPLES, database_url=url,
                                          **settings)))


def test_a_job_created_by_one_worker_is_answered_by_another(database_url: str) -> None:
    one, two = worker(database_url), worker(database_url)
    assert one.app.state.jobs.runner != two.app.state.jobs.runner  # type: ignore[attr-defined]
    job = create_job(one, example())
    assert two.get(job["links"]["self"]).json()["status"] == "waiting_for_households"
    streamed = upload(two, job, household_csv(example()))
    assert streamed.status_code == 200, streamed.text
    status = one.get(job["links"]["self"]).json()
    assert status["status"] == "done" and status["summary"]
    assert status["progress"]["households_done"] == len(example()["households"])
    # The answer read back from the database, by the worker that did not compute it.
    stored = one.get(f"/v1/household-jobs/{job['id']}/results")
    assert stored.status_code == 200
    assert stored.text == streamed.text
    assert stored.headers["dualcost-input-digest"] == streamed.headers["dualcost-input-digest"]
    assert one.delete(job["links"]["self"]).status_code == 204
    assert two.get(job["links"]["self"]).status_code == 404
    with one.app.state.db.transaction() as s:  # type: ignore[attr-defined]
        assert s.scalars(select(JobResultPiece.piece)
                         .where(JobResultPiece.job_id == job["id"])).all() == []


def test_results_are_given_only_for_a_job_that_is_done(database_url: str) -> None:
    client = worker(database_url)
    job = create_job(client, example())
    r = client.get(f"/v1/household-jobs/{job['id']}/results")
    assert r.status_code == 409
    assert "waiting_for_households" in r.json()["detail"]
    assert client.get("/v1/household-jobs/nothing/results").status_code == 404
    assert client.get(f"/v1/household-jobs/{job['id']}/results",
                      headers={"accept": "application/json"}).status_code == 406


def test_a_running_job_whose_worker_stopped_is_failed_with_the_reason(database_url: str) -> None:
    client = worker(database_url, job_lease_seconds=5)
    job = create_job(client, example())
    with client.app.state.db.transaction() as s:  # type: ignore[attr-defined]
        s.execute(update(JobRecord).where(JobRecord.id == job["id"])
                  .values(status="running", runner="gone:1:x",
                          heartbeat=utcnow() - timedelta(seconds=6)))
    status = client.get(job["links"]["self"]).json()
    assert status["status"] == "failed"
    assert "worker computing this job stopped" in status["error"]
    # A job whose worker is alive (a fresh heartbeat) stays running.
    other = create_job(client, example())
    with client.app.state.db.transaction() as s:  # type: ignore[attr-defined]
        s.execute(update(JobRecord).where(JobRecord.id == other["id"])
                  .values(status="running", runner="alive:1:x", heartbeat=utcnow()))
    assert client.get(other["links"]["self"]).json()["status"] == "running"


def test_a_worker_shutting_down_fails_its_running_jobs(database_url: str) -> None:
    from dualcost.api.operations.jobs import restore

    client = worker(database_url)
    store = client.app.state.jobs  # type: ignore[attr-defined]
    job = create_job(client, example())
    state = restore(store, job["id"], None, client.app.state.settings)  # type: ignore[attr-defined]
    store.claim(state)
    assert client.get(job["links"]["self"]).json()["status"] == "running"
    store.stop()
    status = client.get(job["links"]["self"]).json()
    assert status["status"] == "failed"
    assert status["error"].startswith("the service stopped while the job was running")


def test_a_change_that_fails_halfway_writes_nothing(database_url: str) -> None:
    """A transaction is all or nothing (common practice: ACID)."""
    client = worker(database_url)
    job = create_job(client, example())
    db = client.app.state.db  # type: ignore[attr-defined]
    with pytest.raises(RuntimeError), db.transaction() as s:
        s.add(JobResultPiece(job_id=job["id"], piece=0, text="half"))
        s.flush()
        raise RuntimeError("the worker fails here")
    with db.transaction() as s:
        assert s.scalars(select(JobResultPiece)).all() == []


def _lose(url: str, client: TestClient) -> None:
    """Take the database away under the service: the SQLite file (and the connections open
    on it), or the PostgreSQL database (its connections ended)."""
    if url.startswith("sqlite"):
        import os

        os.remove(url.removeprefix("sqlite:///"))
        client.app.state.db.engine.dispose()  # type: ignore[attr-defined]
        return
    import psycopg

    server, name = url.rsplit("/", 1)
    plain = server.replace("postgresql+psycopg://", "postgresql://")
    with psycopg.connect(f"{plain}/postgres", autocommit=True) as connection:
        connection.execute(f"DROP DATABASE {name} WITH (FORCE)")


def test_a_lost_database_is_503_with_retry_after_and_ready_false(
        database_url: str) -> None:
    with worker(database_url, storage_retry_seconds=7) as client:
        job = create_job(client, example())
        assert client.get("/ready").status_code == 200
        _lose(database_url, client)
        for r in (client.get(job["links"]["self"]),
                  client.post("/v1/household-jobs",
                              json={k: v for k, v in example().items() if k != "households"}),
                  client.post("/v1/comparisons?save=true",
                              json={"items": ["a", "b"], "base": {"prices": [1, 2],
                                                                  "quantities": [1, 1]},
                                    "current": {"prices": [1.1, 2]},
                                    "model": {"family": "ces", "sigma": 0.5}})):
            assert r.status_code == 503, r.text
            assert r.json()["type"] == "/problems/storage-unavailable"
            assert r.headers["retry-after"] == "7"
        ready = client.get("/ready")
        assert ready.status_code == 503 and ready.json()["status"] == "database-unreachable"
        # What needs no database still answers.
        assert client.post("/v1/comparisons", json={
            "items": ["a", "b"], "base": {"prices": [1, 2], "quantities": [1, 1]},
            "current": {"prices": [1.1, 2]},
            "model": {"family": "ces", "sigma": 0.5}}).status_code == 200


def test_an_unreachable_database_stops_the_app_from_being_made(tmp_path: Any) -> None:
    settings = Settings(examples_dir=EXAMPLES,
                        database_url="postgresql+psycopg://nobody@127.0.0.1:9/none")
    with pytest.raises(StorageUnavailable, match="cannot open the database"):
        create_app(settings)
    not_a_folder = tmp_path / "file"
    not_a_folder.touch()
    with pytest.raises(StorageUnavailable, match="cannot open the database"):
        database_of(Settings(data_dir=not_a_folder))


def test_the_migrations_make_the_tables_the_code_uses(database_url: str) -> None:
    """Alembic's comparison of the migrated database with the models finds no difference."""
    from alembic.autogenerate import compare_metadata
    from alembic.runtime.migration import MigrationContext

    from dualcost.storage.tables import Base

    db = database_of(Settings(database_url=database_url))
    with db.engine.connect() as connection:
        assert compare_metadata(MigrationContext.configure(connection), Base.metadata) == []


def test_the_migrations_are_shipped_with_the_package() -> None:
    """Every file Alembic needs is matched by the package data of pyproject.toml, so that an
    installed service (pip install, not a source tree) can migrate its database."""
    import fnmatch

    import tomllib

    from tests.conftest import ROOT

    patterns = tomllib.loads((ROOT / "pyproject.toml").read_text())["tool"]["setuptools"][
        "package-data"]["dualcost"]
    package = ROOT / "service" / "dualcost"
    needed = [p.relative_to(package).as_posix()
              for p in (package / "storage" / "migrations").rglob("*")
              if p.is_file() and "__pycache__" not in p.parts]
    assert "storage/migrations/env.py" in needed
    assert any(n.startswith("storage/migrations/versions/") for n in needed)
    for name in needed:
        assert any(fnmatch.fnmatch(name, pattern) for pattern in patterns), name


def test_a_job_s_answer_is_given_again_by_another_worker_as_csv_or_parquet(
        database_url: str) -> None:
    """The results are kept as columns whichever format the upload answered in: another
    worker gives them back as the CSV the upload gave, and as the Parquet file the upload gives
    with Accept Parquet, byte for byte (the same table, nulls and metadata, read with pyarrow,
    Apache Arrow's reference library for the format). The panel has household-periods
    outside the model's regular region (figures null, reasons named), an id with a line
    break, and a skipped row."""
    import io

    import pyarrow.parquet as pq

    from tests.api.test_households_validity import job_csv, panel

    parquet = "application/vnd.apache.parquet"
    one, two = worker(database_url), worker(database_url)
    spec = {k: v for k, v in panel().items() if k != "households"}
    data = job_csv(bad_income_row=True).encode()
    answered = {}
    for accept in ("text/csv", parquet):
        job = create_job(one, spec)
        r = two.post(job["links"]["households"], content=data,
                     headers={"content-type": "text/csv", "accept": accept})
        assert r.status_code == 200 and r.headers["content-type"].startswith(accept), r.text
        answered[accept] = (job, r)
    streamed_csv, streamed = answered["text/csv"][1], answered[parquet][1]
    table = pq.read_table(io.BytesIO(streamed.content))
    meta = pq.ParquetFile(io.BytesIO(streamed.content)).metadata.metadata
    for job, r in answered.values():
        url = f"/v1/household-jobs/{job['id']}/results"
        assert one.get(url).text == streamed_csv.text
        again = one.get(url, headers={"accept": parquet})
        assert again.status_code == 200 and again.headers["content-type"] == parquet
        assert again.headers["dualcost-input-digest"] == r.headers["dualcost-input-digest"]
        assert pq.read_table(io.BytesIO(again.content)).equals(table)
        assert again.content == streamed.content
        assert pq.ParquetFile(io.BytesIO(again.content)).metadata.metadata == meta
    rows = table.to_pylist()
    assert len(rows) == 10 and rows[6]["household"] == "pensioners\n(harbour ward)"
    irregular = [x for x in rows if not x["model_regular"]]
    assert [x["irregular_items"] for x in irregular] == ["transit", "transit"]
    assert all(x["konus"] is None for x in irregular)
    assert all(x["irregular_reasons"] is None and x["konus"] is not None
               for x in rows if x["model_regular"])


def test_sqlite_keeps_a_write_ahead_log_and_enforces_foreign_keys(tmp_path: Any) -> None:
    """The embedded database: WAL journal, synchronous NORMAL (1), foreign keys on; the
    durability this gives is stated in the README (Jobs and saved runs)."""
    from sqlalchemy import text

    db = database_of(Settings(database_url=f"sqlite:///{tmp_path}/wal.sqlite3"))
    with db.engine.connect() as connection:
        assert connection.execute(text("PRAGMA journal_mode")).scalar() == "wal"
        assert connection.execute(text("PRAGMA synchronous")).scalar() == 1
        assert connection.execute(text("PRAGMA foreign_keys")).scalar() == 1


def test_a_job_s_results_are_stored_a_few_chunks_to_a_transaction_each_chunk_a_piece(
        database_url: str, monkeypatch: pytest.MonkeyPatch) -> None:
    """Each chunk's results are one piece of columns (Arrow IPC, read back by pyarrow into the
    chunk's figures), after a first piece with the CSV header; the pieces and the progress go
    to the database a few chunks to a transaction (here two: STORE_ROWS is 4 households,
    chunks are 2), each before its rows are sent."""
    from dualcost.api.operations import job_results, jobs
    from dualcost.api.operations.job_store import JobStore

    monkeypatch.setattr(jobs, "STORE_ROWS", 4)
    calls: list[int] = []
    progress = JobStore.progress

    def counted(self: JobStore, state: Any, pieces: Any = ()) -> None:
        calls.append(len(pieces))
        progress(self, state, pieces)

    monkeypatch.setattr(JobStore, "progress", counted)
    client = worker(database_url, household_chunk_rows=2)
    body = example()
    job = create_job(client, body)
    streamed = upload(client, job, household_csv(body))
    assert streamed.status_code == 200, streamed.text
    n = len(body["households"])
    chunks = -(-n // 2)
    # Computed while the upload arrives (operations/job_intake.py): the header with the first
    # block, then the chunks two at a time, then the upload's end (no piece: its rows and
    # digest), before anything is sent.
    assert calls == [1, *([2] * (chunks // 2)), *([1] if chunks % 2 else []), 0]
    with client.app.state.db.transaction() as s:  # type: ignore[attr-defined]
        kept = s.execute(select(JobResultPiece.piece, JobResultPiece.text, JobResultPiece.data)
                         .where(JobResultPiece.job_id == job["id"])
                         .order_by(JobResultPiece.piece)).all()
    assert [k.piece for k in kept] == list(range(chunks + 1))
    assert kept[0].text == streamed.text.split("\r\n")[0] + "\r\n"
    assert all(k.text is None for k in kept[1:])
    rows = [job_results.decode(k.data).rows.tolist() for k in kept[1:]]
    assert sum(rows, []) == list(range(1, n + 1))


def test_results_kept_as_csv_before_revision_0003_are_still_given(database_url: str,
                                                                  tmp_path: Any) -> None:
    """A database at revision 0002, where a job's answer is kept as CSV pieces (the header,
    then the rows), migrated: the job's answer is given as that CSV, and as Parquet converted
    from it (the same table and metadata as the upload's Parquet answer, read with pyarrow)."""
    import io

    import pyarrow.parquet as pq
    from alembic import command
    from sqlalchemy import column, create_engine, insert, table

    from dualcost.storage import _alembic_config
    from tests.api.test_households_validity import job_csv, panel

    elsewhere = worker(f"sqlite:///{tmp_path}/elsewhere.sqlite3")
    spec = {k: v for k, v in panel().items() if k != "households"}
    answers = {}
    for accept in ("text/csv", "application/vnd.apache.parquet"):
        job = create_job(elsewhere, spec)
        answers[accept] = elsewhere.post(job["links"]["households"], content=job_csv().encode(),
                                         headers={"content-type": "text/csv", "accept": accept})
    with elsewhere.app.state.db.transaction() as s:  # type: ignore[attr-defined]
        record = s.scalar(select(JobRecord).where(JobRecord.id == job["id"]))
        assert record is not None
        fields = {c.name: getattr(record, c.name) for c in JobRecord.__table__.columns
                  if c.name != "serial"}
    header, rows = answers["text/csv"].text.split("\r\n", 1)
    engine = create_engine(database_url)
    with engine.begin() as connection:
        command.upgrade(_alembic_config(connection), "0002")
        connection.execute(insert(table("household_jobs", *map(column, fields))).values(fields))
        connection.execute(insert(table("household_job_results", *map(column, (
            "job_id", "piece", "text")))), [
            {"job_id": job["id"], "piece": 0, "text": header + "\r\n"},
            {"job_id": job["id"], "piece": 1, "text": rows}])
    engine.dispose()
    client = worker(database_url)
    url = f"/v1/household-jobs/{job['id']}/results"
    assert client.get(url).text == answers["text/csv"].text
    parquet = client.get(url, headers={"accept": "application/vnd.apache.parquet"}).content
    streamed = answers["application/vnd.apache.parquet"].content
    assert pq.read_table(io.BytesIO(parquet)).equals(pq.read_table(io.BytesIO(streamed)))
    assert (pq.ParquetFile(io.BytesIO(parquet)).metadata.metadata
            == pq.ParquetFile(io.BytesIO(streamed)).metadata.metadata)


def _lost_at_finish(client: TestClient, monkeypatch: pytest.MonkeyPatch) -> dict[str, bool]:
    """Make the database out of reach from the moment the job is recorded as done (the flag
    returned: set it false to bring the database back). Every app on the URL shares the one
    Database object of the process, so all of them lose it."""
    store = client.app.state.jobs  # type: ignore[attr-defined]
    down = {"now": False}
    transaction, finish = store.db.transaction, store.finish

    def reachable(**kw: Any) -> Any:
        if down["now"]:
            raise StorageUnavailable("the database cannot be used: connection lost (test)")
        return transaction(**kw)

    def finish_then_lose(state: Any) -> None:
        down["now"] = True
        finish(state)

    monkeypatch.setattr(store.db, "transaction", reachable)
    monkeypatch.setattr(store, "finish", finish_then_lose)
    return down


def test_a_job_whose_end_the_database_could_not_take_is_failed_once_it_can(
        database_url: str, monkeypatch: pytest.MonkeyPatch) -> None:
    """The database fails exactly when a job is recorded as done: the answer ends with the
    error, and the job is read as failed with that reason by every worker once the worker
    that ran it reaches the database again (its keeper's round), not running until its lease
    runs out; meanwhile it keeps its sign of life."""
    one, two = worker(database_url), worker(database_url)
    store = one.app.state.jobs  # type: ignore[attr-defined]
    job = create_job(one, example())
    down = _lost_at_finish(one, monkeypatch)
    answer = upload(one, job, household_csv(example()))
    assert "connection lost (test)" in answer.text.splitlines()[-1]
    assert list(store.unrecorded) == [job["id"]] and job["id"] in store.local
    down["now"] = False
    assert two.get(job["links"]["self"]).json()["status"] == "running"
    store.beat()  # the keeper's round
    for client in (two, one):
        status = client.get(job["links"]["self"]).json()
        assert status["status"] == "failed", status
        assert "connection lost (test)" in status["error"]
    assert store.unrecorded == {} and store.local == {}
    with one.app.state.db.transaction() as s:  # type: ignore[attr-defined]
        assert s.scalars(select(JobResultPiece.piece)
                         .where(JobResultPiece.job_id == job["id"])).all() == []


def test_the_worker_that_knows_the_end_writes_it_before_answering_for_the_job(
        database_url: str, monkeypatch: pytest.MonkeyPatch) -> None:
    """Before its keeper's round, the worker that ran the job writes the outcome it keeps as
    soon as it answers for the job; while the database is still out of reach that is a 503."""
    client = worker(database_url)
    store = client.app.state.jobs  # type: ignore[attr-defined]
    job = create_job(client, example())
    down = _lost_at_finish(client, monkeypatch)
    upload(client, job, household_csv(example()))
    assert client.get(job["links"]["self"]).status_code == 503
    down["now"] = False
    status = client.get(job["links"]["self"]).json()
    assert status["status"] == "failed" and "connection lost (test)" in status["error"]
    assert store.unrecorded == {}
