"""Saved runs (save=true on any operation): what is kept, who sees it, the listing, the re-run
with its differences figure by figure, retention. Each test runs on a new SQLite and a new
PostgreSQL database (tests/databases.py). The canonical input's digest is checked against an
independent RFC 8785 writing (tests/api/test_provenance_and_formats.py) through
dualcost.canonical, which that test checks."""

from __future__ import annotations

import hashlib
from datetime import timedelta
from typing import Any

import orjson
import pytest
from fastapi.testclient import TestClient
from sqlalchemy import select, update

from dualcost.api.app import create_app
from dualcost.api.keeper import Keeper
from dualcost.api.operations.job_store import utcnow
from dualcost.api.runs import content_digest
from dualcost.api.schemas.runs import RerunOut, RunOut, RunPageOut
from dualcost.canonical import digest_of
from dualcost.config import Settings
from dualcost.storage.tables import RunContent, RunRecord
from tests.api.test_comparisons import small_request
from tests.conftest import EXAMPLES, ROOT

A = "wrenmouth-office-key-0123456789"
B = "wrenmouth-harbour-key-9876543210"


def service(url: str, **settings: Any) -> TestClient:
    return TestClient(create_app(Settings(examples_dir=EXAMPLES, database_url=url,
                                          **settings)))


def replace_content(client: TestClient, run_id: str, field: str, data: bytes,
                    **values: Any) -> None:
    """Make the run's input or answer (``field``) ``data``, as an older version might have
    stored it: a new content under its digest, named by the run."""
    digest = content_digest(data)
    with client.app.state.db.transaction() as s:  # type: ignore[attr-defined]
        if s.get(RunContent, digest) is None:
            s.add(RunContent(digest=digest, data=data))
            s.flush()
        s.execute(update(RunRecord).where(RunRecord.id == run_id)
                  .values({f"{field}_ref": digest, **values}))


def rows(client: TestClient) -> list[RunRecord]:
    with client.app.state.db.transaction() as s:  # type: ignore[attr-defined]
        return list(s.scalars(select(RunRecord)).all())


def test_a_run_is_kept_only_when_asked(database_url: str) -> None:
    client = service(database_url)
    body = small_request()
    plain = client.post("/v1/comparisons", json=body)
    assert "dualcost-run" not in plain.headers and rows(client) == []
    r = client.post("/v1/comparisons?save=true", json=body)
    assert r.status_code == 200
    run_id = r.headers["dualcost-run"]
    assert f'</v1/runs/{run_id}>; rel="related"' in r.headers["link"]
    assert r.content == plain.content  # saving changes nothing in the answer itself
    run = client.get(f"/v1/runs/{run_id}")
    assert run.status_code == 200
    RunOut.model_validate(run.json())
    kept = run.json()
    assert kept["operation"] == "compare" and kept["key"] is None
    assert kept["input"] == body
    assert kept["input_digest"] == digest_of(body) == r.headers["dualcost-input-digest"]
    assert kept["answer"] == r.json()
    assert kept["version"] == r.headers["dualcost-version"]
    assert kept["request"] == {"method": "POST", "path": "/v1/comparisons", "query": "",
                               "content_type": "application/json"}


def test_save_is_true_or_false_and_a_refused_request_keeps_nothing(database_url: str) -> None:
    client = service(database_url)
    for value in ("yes", "1", "maybe"):
        r = client.post(f"/v1/comparisons?save={value}", json=small_request())
        assert r.status_code == 422
        assert r.json()["errors"][0]["pointer"] == "#/query/save"
    bad = small_request() | {"model": {"family": "ces", "sigma": -1}}
    assert client.post("/v1/comparisons?save=true", json=bad).status_code == 422
    assert client.post("/v1/comparisons?save=false", json=small_request()).status_code == 200
    assert rows(client) == []


def test_a_csv_upload_and_a_spreadsheet_form_are_kept_and_rerun(database_url: str) -> None:
    client = service(database_url)
    panel = (ROOT / "docs/examples/wrenmouth_panel.csv").read_bytes()
    r = client.post("/v1/index-series/csv?base_period=2025-01&format=csv&save=true",
                    content=panel, headers={"content-type": "text/csv"})
    assert r.status_code == 200, r.text
    kept = client.get(f"/v1/runs/{r.headers['dualcost-run']}").json()
    assert kept["input"] == {"csv_sha256": hashlib.sha256(panel).hexdigest(),
                             "query": {"base_period": "2025-01"}}
    assert kept["answer"] == r.text and kept["answer_type"].startswith("text/csv")
    again = client.post(f"/v1/runs/{kept['id']}/rerun").json()
    assert again["identical"] and again["figures_compared"] > 100
    sheet = client.get("/v1/sheet/value?items=rye_loaf,peat_briquettes,ferry_pass&p0=2.40,9,38"
                       "&p1=2.52,12.15,41&q0=12,6,1&family=ces&sigma=0.6&save=true")
    again = client.post(f"/v1/runs/{sheet.headers['dualcost-run']}/rerun").json()
    assert again["identical"] and again["figures_compared"] == 1


def test_a_rerun_gives_the_differences_figure_by_figure(database_url: str) -> None:
    client = service(database_url)
    r = client.post("/v1/comparisons?save=true", json=small_request())
    run_id = r.headers["dualcost-run"]
    same = client.post(f"/v1/runs/{run_id}/rerun")
    RerunOut.model_validate(same.json())
    assert same.json()["identical"] and same.json()["figures_differing"] == 0
    # The saved answer as an older version might have written it: one figure otherwise.
    answer = r.json()
    answer["konus"]["base"] += 0.001
    replace_content(client, run_id, "answer", orjson.dumps(answer), version="0.0.9")
    found = client.post(f"/v1/runs/{run_id}/rerun").json()
    assert not found["identical"] and found["figures_differing"] == 1
    (diff,) = found["differences"]
    assert diff["where"] == "/konus/base"
    assert diff["difference"] == pytest.approx(-0.001)
    assert diff["relative"] == pytest.approx(-0.001 / answer["konus"]["base"])
    assert found["saved"]["version"] == "0.0.9"
    table = client.post(f"/v1/runs/{run_id}/rerun", headers={"accept": "text/csv"})
    assert table.text.splitlines()[0] == "where,saved,current,difference,relative"
    assert table.text.splitlines()[1].startswith("/konus/base,")
    assert client.post(f"/v1/runs/{run_id}/rerun",
                       headers={"accept": "image/png"}).status_code == 406


def test_a_rerun_whose_input_is_refused_now_reports_the_problem(database_url: str) -> None:
    client = service(database_url)
    run_id = client.post("/v1/comparisons?save=true",
                         json=small_request()).headers["dualcost-run"]
    refused = small_request() | {"model": {"family": "ces", "sigma": -1}}
    replace_content(client, run_id, "input", orjson.dumps(refused))
    found = client.post(f"/v1/runs/{run_id}/rerun").json()
    assert found["current"]["status"] == 422 and not found["identical"]
    assert found["current"]["problem"]["errors"][0]["pointer"] == "/model/sigma"


def test_runs_are_seen_only_with_their_key_which_is_not_stored(database_url: str) -> None:
    client = service(database_url, api_keys=(A, B))
    r = client.post("/v1/comparisons?save=true", json=small_request(), headers={"x-api-key": A})
    run_id = r.headers["dualcost-run"]
    mine = client.get(f"/v1/runs/{run_id}", headers={"x-api-key": A})
    assert mine.status_code == 200
    assert mine.json()["key"] == hashlib.sha256(A.encode()).hexdigest()[:8]
    for path, method in ((f"/v1/runs/{run_id}", "GET"), (f"/v1/runs/{run_id}/rerun", "POST")):
        other = client.request(method, path, headers={"x-api-key": B})
        assert other.status_code == 404 and other.json()["type"] == "/problems/not-found"
    assert client.get("/v1/runs", headers={"x-api-key": B}).json()["runs"] == []
    assert [x["id"] for x in client.get("/v1/runs", headers={"x-api-key": A}).json()["runs"]] \
        == [run_id]
    (row,) = rows(client)
    assert row.owner == hashlib.sha256(A.encode()).hexdigest()
    stored = b"".join(str(getattr(row, c.name)).encode() for c in RunRecord.__table__.columns)
    assert A.encode() not in stored and A.encode() not in row.request_body


def test_runs_are_listed_by_operation_and_time_page_by_page(database_url: str) -> None:
    client = service(database_url)
    ids = [client.post("/v1/comparisons?save=true", json=small_request())
           .headers["dualcost-run"] for _ in range(3)]
    sheet = client.get("/v1/sheet/value?items=a,b&p0=1,2&p1=1.1,2&q0=1,1&family=ces&sigma=0.5"
                       "&save=true").headers["dualcost-run"]
    page = client.get("/v1/runs?limit=2").json()
    RunPageOut.model_validate(page)
    assert [r["id"] for r in page["runs"]] == [sheet, ids[2]]
    rest = client.get(page["next"]).json()
    assert [r["id"] for r in rest["runs"]] == [ids[1], ids[0]]
    compares = client.get("/v1/runs?operation=compare").json()["runs"]
    assert [r["id"] for r in compares] == ids[::-1]
    later = (utcnow() + timedelta(minutes=1)).isoformat() + "Z"
    assert client.get(f"/v1/runs?since={later}").json()["runs"] == []
    assert len(client.get(f"/v1/runs?until={later}").json()["runs"]) == 4
    bad = client.get("/v1/runs?since=yesterday")
    assert bad.status_code == 422 and bad.json()["errors"][0]["pointer"] == "#/query/since"


def test_old_runs_are_removed_after_the_retention_period(database_url: str) -> None:
    client = service(database_url, run_retention_days=30)
    old, new = (client.post("/v1/comparisons?save=true", json=small_request())
                .headers["dualcost-run"] for _ in range(2))
    with client.app.state.db.transaction() as s:  # type: ignore[attr-defined]
        s.execute(update(RunRecord).where(RunRecord.id == old)
                  .values(created=utcnow() - timedelta(days=31)))
    app = client.app
    Keeper(app.state.jobs, app.state.runs, app.state.settings).round()  # type: ignore[attr-defined]
    assert client.get(f"/v1/runs/{old}").status_code == 404
    assert client.get(f"/v1/runs/{new}").status_code == 200


def test_every_operation_offers_save_in_the_openapi_document(database_url: str) -> None:
    doc = service(database_url).get("/openapi.json").json()
    for path, item in doc["paths"].items():
        for method, op in item.items():
            names = [p["name"] for p in op.get("parameters", [])]
            offered = (path.startswith("/v1/") and method in ("get", "post")
                       and not path.startswith(("/v1/household-jobs", "/v1/runs")))
            assert ("save" in names) == offered, (method, path)


def contents(client: TestClient) -> set[str]:
    with client.app.state.db.transaction() as s:  # type: ignore[attr-defined]
        return set(s.scalars(select(RunContent.digest)).all())


def test_an_input_and_an_answer_are_stored_once_however_often_asked(database_url: str) -> None:
    """The same request saved three times: three runs naming one input and one answer, each
    stored under the SHA-256 of its bytes (hashlib); a new input adds its own two. Once the
    runs that name a content are removed by the retention period, the content goes too."""
    client = service(database_url, run_retention_days=30)
    body = small_request()
    answers = [client.post("/v1/comparisons?save=true", json=body) for _ in range(3)]
    assert len({r.headers["dualcost-run"] for r in answers}) == 3
    answer_digest = "sha256:" + hashlib.sha256(answers[0].content).hexdigest()
    input_digest = answers[0].headers["dualcost-input-digest"]  # the canonical input's
    assert contents(client) == {input_digest, answer_digest}
    assert {(r.input_ref, r.answer_ref) for r in rows(client)} == {(input_digest,
                                                                    answer_digest)}
    other = small_request() | {"model": {"family": "ces", "sigma": 0.25}}
    newer = client.post("/v1/comparisons?save=true", json=other).headers["dualcost-run"]
    assert len(contents(client)) == 4
    for r in answers:
        assert client.get(f"/v1/runs/{r.headers['dualcost-run']}").json()["answer"] == r.json()
    with client.app.state.db.transaction() as s:  # type: ignore[attr-defined]
        s.execute(update(RunRecord).where(RunRecord.id != newer)
                  .values(created=utcnow() - timedelta(days=31)))
    client.app.state.runs.purge(30)  # type: ignore[attr-defined]
    (kept,) = rows(client)
    assert contents(client) == {kept.input_ref, kept.answer_ref}
    assert client.get(f"/v1/runs/{newer}").json()["input"] == other


def test_runs_saved_before_contents_were_shared_are_moved_by_the_migration(
        database_url: str) -> None:
    """A database at revision 0001 (input and answer in each run's row), migrated: each run
    reads as it was saved, its input and answer stored once under their SHA-256 (hashlib)."""
    from alembic import command
    from sqlalchemy import column, create_engine, insert, table

    from dualcost.storage import _alembic_config

    engine = create_engine(database_url)
    answer = orjson.dumps({"konus": {"base": 1.25}})
    runs = table("runs", *(column(n) for n in (
        "id", "owner", "operation", "created", "version", "input_digest", "input", "method",
        "path", "query", "content_type", "accept", "request_body", "status_code",
        "answer_type", "answer")))
    with engine.begin() as connection:
        command.upgrade(_alembic_config(connection), "0001")
        for run_id in ("a" * 32, "b" * 32):
            connection.execute(insert(runs).values(
                id=run_id, owner=None, operation="compare", created=utcnow(), version="0.9",
                input_digest=digest_of({"x": 1}), input='{"x":1}', method="POST",
                path="/v1/comparisons", query="", content_type="application/json",
                accept=None, request_body=b"", status_code=200,
                answer_type="application/json", answer=answer))
    engine.dispose()
    client = service(database_url)
    for run_id in ("a" * 32, "b" * 32):
        run = client.get(f"/v1/runs/{run_id}").json()
        assert run["input"] == {"x": 1} and run["answer"] == {"konus": {"base": 1.25}}
    assert contents(client) == {digest_of({"x": 1}),
                                "sha256:" + hashlib.sha256(answer).hexdigest()}


def test_a_batch_of_runs_that_cannot_be_stored_leaves_nothing_behind(
        database_url: str) -> None:
    """The writer's transaction is all or nothing: a batch whose second run cannot be stored
    (its id is taken) stores neither run, nor the new input and answer the first had stored
    in the same transaction, after the attempts a concurrent writer would be given."""
    from sqlalchemy.exc import IntegrityError

    client = service(database_url)
    taken = client.post("/v1/comparisons?save=true",
                        json=small_request()).headers["dualcost-run"]
    before_rows, before_contents = len(rows(client)), contents(client)
    (row,) = rows(client)
    fresh = {c.name: getattr(row, c.name) for c in RunRecord.__table__.columns
             if c.name not in ("serial", "input_ref", "answer_ref")}
    batch = [fresh | {"id": "f" * 32, "input": '{"new":1}', "answer": b'{"new":2}'},
             fresh | {"id": taken, "input": '{"new":3}', "answer": b'{"new":4}'}]
    with pytest.raises(IntegrityError):
        client.app.state.runs._commit(batch)  # type: ignore[attr-defined]
    assert len(rows(client)) == before_rows and contents(client) == before_contents
    assert client.app.state.db.healthy  # type: ignore[attr-defined]  # refused, not lost
