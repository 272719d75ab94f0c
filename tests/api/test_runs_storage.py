"""How saved runs are written: their contents compressed with LZ4 on PostgreSQL, their
transactions committed without waiting for the server's disk, and two writers (of two worker
processes) storing the same new content at once. What each PostgreSQL setting means is
PostgreSQL's own documentation (version 15): ``ALTER TABLE ... SET COMPRESSION`` and
``SET STORAGE``, the catalogue ``pg_attribute`` (``attcompression`` 'l' for LZ4,
``attstorage`` 'e' for external, uncompressed), the function ``pg_column_compression``, and
the setting ``synchronous_commit`` (Write Ahead Log settings; ``SET LOCAL`` lasts until the
end of the transaction). What these changes gain is measured by benchmarks/save_runs.py, not
here."""

from __future__ import annotations

import threading
from pathlib import Path
from typing import Any

import orjson
import pytest
from sqlalchemy import func, select, text

from dualcost.api.runs import content_digest
from dualcost.storage import Database
from dualcost.storage.tables import RunContent, RunRecord
from tests.api.test_comparisons import small_request
from tests.api.test_runs import rows, service
from tests.databases import new_database


def postgresql(request: pytest.FixtureRequest, tmp_path: Path) -> str:
    return new_database("postgresql", request, tmp_path)


def test_run_contents_are_compressed_with_lz4_on_postgresql(
        request: pytest.FixtureRequest, tmp_path: Path) -> None:
    """After the migrations, the column of stored inputs and answers compresses with LZ4 where
    the server offers it (Debian's PostgreSQL 15 does), else keeps them uncompressed; a
    saved run's answer is stored so and reads back byte for byte."""
    client = service(postgresql(request, tmp_path))
    db: Database = client.app.state.db  # type: ignore[attr-defined]
    with db.engine.connect() as connection:
        lz4 = connection.execute(text(
            "SELECT 'lz4' = ANY(enumvals) FROM pg_settings "
            "WHERE name = 'default_toast_compression'")).scalar()
        compression, storage = connection.execute(text(
            "SELECT attcompression, attstorage FROM pg_attribute "
            "WHERE attrelid = 'run_contents'::regclass AND attname = 'data'")).one()
    assert (compression, storage) == (("l", "x") if lz4 else ("", "e"))
    saved = client.post("/v1/comparisons?save=true", json=small_request())
    (row,) = rows(client)
    fresh = {c.name: getattr(row, c.name) for c in RunRecord.__table__.columns
             if c.name not in ("serial", "input_ref", "answer_ref")}
    # An answer of about 170 kB, as large as the 300-item comparison's: kept out of the row.
    answer = b'{"x":[' + b",".join(str(i * 1.5).encode() for i in range(20000)) + b"]}"
    client.app.state.runs._commit([fresh | {  # type: ignore[attr-defined]
        "id": "c" * 32, "input": '{"large":1}', "answer": answer}])
    assert client.get(f"/v1/runs/{'c' * 32}").json()["answer"] == orjson.loads(answer)
    assert client.get(f"/v1/runs/{saved.headers['dualcost-run']}").json()["answer"] == (
        saved.json())
    with db.engine.connect() as connection:
        stored, method = connection.execute(select(
            RunContent.data, func.pg_column_compression(RunContent.data))
            .where(RunContent.digest == content_digest(answer))).one()
    assert bytes(stored) == answer
    assert method == ("lz4" if lz4 else None)  # None: stored uncompressed


def test_the_writer_s_transactions_do_not_wait_for_the_disk_on_postgresql(
        request: pytest.FixtureRequest, tmp_path: Path) -> None:
    """A transaction that is not durable commits with synchronous_commit off, for itself only:
    the next transaction on the same pooled connection has the server's setting again."""
    client = service(postgresql(request, tmp_path))
    db: Database = client.app.state.db  # type: ignore[attr-defined]
    with db.transaction(durable=False) as s:
        assert s.scalar(text("SHOW synchronous_commit")) == "off"
    with db.transaction() as s:
        assert s.scalar(text("SHOW synchronous_commit")) == "on"


def test_saved_runs_are_written_in_transactions_that_are_not_durable(
        database_url: str, monkeypatch: pytest.MonkeyPatch) -> None:
    """The run writer asks for durable=False, and only it: a saved run is written so and read
    back (on SQLite the setting changes nothing; its WAL with synchronous NORMAL already
    makes that trade)."""
    client = service(database_url)
    db: Database = client.app.state.db  # type: ignore[attr-defined]
    asked: list[bool] = []
    real = db.transaction

    def spy(*, durable: bool = True) -> Any:
        asked.append(durable)
        return real(durable=durable)

    monkeypatch.setattr(db, "transaction", spy)
    saved = client.post("/v1/comparisons?save=true", json=small_request())
    assert saved.status_code == 200
    assert False in asked
    asked.clear()
    assert client.get(f"/v1/runs/{saved.headers['dualcost-run']}").status_code == 200
    assert asked == [True]


def test_two_writers_storing_the_same_new_input_at_once_store_it_once(
        database_url: str) -> None:
    """Two transactions (the writers of two worker processes) commit runs naming the same new
    input and answer at the same moment: both runs are stored, the input and the answer once
    (the one that finds them stored by the other tries again: the unique key of run_contents
    decides)."""
    client = service(database_url)
    store = client.app.state.runs  # type: ignore[attr-defined]
    saved = client.post("/v1/comparisons?save=true", json=small_request())
    (row,) = rows(client)
    fresh = {c.name: getattr(row, c.name) for c in RunRecord.__table__.columns
             if c.name not in ("serial", "input_ref", "answer_ref")}
    start = threading.Barrier(2)
    failures: list[BaseException] = []

    def commit(run_id: str) -> None:
        start.wait()
        try:
            store._commit([fresh | {"id": run_id, "input": '{"same":1}',
                                    "answer": b'{"same":2}'}])
        except BaseException as exc:  # reported below
            failures.append(exc)

    threads = [threading.Thread(target=commit, args=(c * 32,)) for c in "ab"]
    for t in threads:
        t.start()
    for t in threads:
        t.join(30)
    assert failures == []
    assert {r.id for r in rows(client)} == {saved.headers["dualcost-run"], "a" * 32, "b" * 32}
    with client.app.state.db.transaction() as s:  # type: ignore[attr-defined]
        assert s.scalar(select(func.count()).select_from(RunContent)) == 4
