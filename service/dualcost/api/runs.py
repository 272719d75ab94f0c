"""Saved runs: any operation, asked with ``save=true``, keeps a record of what it computed.

The record holds the canonical input and its digest (:mod:`dualcost.api.provenance`), the
request as sent (method, path, query, and the body, to run it again; for a JSON body its
canonical input, which is that body as validated, stands for it), the answer as sent (its bytes
and media type), the version that computed it, the time, and the API key that asked, as its
SHA-256 only (with access control off, none). ``save`` is handled here once, for every route
of :class:`~dualcost.api.routing.JsonRoute` under ``/v1/`` but the household jobs (kept in the
database anyway) and the runs themselves: an operation added later is saved without a line of
its own. A request that fails saves nothing.

The answer is sent only once its run is committed, and says where it is kept in the headers
``Dualcost-Run`` (its id) and ``Link: </v1/runs/{id}>; rel="related"``; a streamed (CSV) answer
is gathered first. If the database cannot take it, the answer is a 503 problem (with
Retry-After): a caller that asked for a record never gets an answer without one. Saves are
written by one thread per process, several to a transaction (:class:`RunStore`), off the
event loop: each request waits for its own commit, none waits for a compute thread. Those
transactions are not ``durable``: on PostgreSQL their commit does not wait for the server's
disk (:meth:`~dualcost.storage.Database.transaction`). An input or an answer is stored once,
under the SHA-256 of its bytes (:class:`~dualcost.storage.tables.RunContent`), so a request
asked again with the same input adds only a small row.
"""

from __future__ import annotations

import asyncio
import base64
import hashlib
import logging
import queue
import threading
import time
import uuid
from collections.abc import Iterator
from contextlib import contextmanager
from dataclasses import dataclass
from datetime import datetime, timedelta
from typing import Any

import orjson
from fastapi import Request, Response
from fastapi.routing import APIRoute
from sqlalchemy import delete, insert, select, union
from sqlalchemy.exc import IntegrityError
from sqlalchemy.orm import joinedload
from starlette.responses import StreamingResponse

from ..canonical import canonical_json
from ..storage import Database
from ..storage.tables import RunContent, RunRecord
from .operations.job_store import owner_of, utcnow
from .problems import RequestProblem, RunNotFound
from .provenance import PRESENTATION, Provenance, attached, service_version

log = logging.getLogger("dualcost.api")
#: Paths whose operations do not take ``save``.
NOT_SAVED = ("/v1/household-jobs", "/v1/runs")
RUN_HEADER = "Dualcost-Run"
#: Runs written in one transaction at most.
BATCH = 256
#: How long the writer waits at most, after a run arrives, for the runs still being computed
#: in this process to share its commit (seconds): under load a commit then carries many runs
#: instead of one, each commit's own work (a transaction, the look-up of the contents already
#: stored) shared between them. With nothing else coming, a run is committed at once.
LINGER = 0.025
#: Times a batch is tried when another writer stored one of its contents at the same moment.
ATTEMPTS = 3
SAVE_TEXT = ("Keep a record of this run (true; default false): the canonical input, the "
             "answer, the service version, the time and the API key's SHA-256, under the id "
             "in the Dualcost-Run header, for GET /v1/runs/{id} and POST "
             "/v1/runs/{id}/rerun.")


def saves(path: str, method: str) -> bool:
    """Whether an operation takes ``save``: the operations under /v1/ (GET and POST), except
    the household jobs and the runs."""
    return (path.startswith("/v1/") and not path.startswith(NOT_SAVED)
            and method.upper() in ("GET", "POST"))


def offers_save(route: APIRoute) -> bool:
    return any(saves(route.path, method) for method in route.methods or ())


def asked_to_save(request: Request) -> bool:
    """``save`` of the query: true or false (default); anything else is a 422 naming it."""
    if b"save" not in request.scope.get("query_string", b""):
        return False
    values = request.query_params.getlist("save")
    if not values:
        return False
    if len(values) > 1 or values[0] not in ("true", "false"):
        raise RequestProblem.at("#/query/save", "must be true or false, once")
    return values[0] == "true"


@dataclass
class _Pending:
    record: dict[str, Any]
    loop: asyncio.AbstractEventLoop
    done: asyncio.Future[None]


class RunStore:
    """The saved runs of one database."""

    def __init__(self, db: Database) -> None:
        self.db = db
        self._queue: queue.SimpleQueue[_Pending] = queue.SimpleQueue()
        self._writer: threading.Thread | None = None
        self._lock = threading.Lock()
        #: Requests of this process that asked for save and are computing (counted on the
        #: event loop, read by the writer thread).
        self.coming = 0

    # -- writing ------------------------------------------------------------------------------

    async def save(self, record: dict[str, Any]) -> None:
        """Commit ``record`` (with others waiting at the same time) and return when it is;
        StorageUnavailable when the database did not take it."""
        loop = asyncio.get_running_loop()
        pending = _Pending(record, loop, loop.create_future())
        self._start_writer()
        self._queue.put(pending)
        await pending.done

    def _start_writer(self) -> None:
        with self._lock:
            if self._writer is None:
                self._writer = threading.Thread(target=self._write, name="dualcost-runs",
                                                daemon=True)
                self._writer.start()

    def _write(self) -> None:
        while True:
            batch = self._gather()
            outcome: BaseException | None = None
            try:
                self._commit([p.record for p in batch])
            except Exception as exc:
                outcome = exc
            for pending in batch:
                try:
                    pending.loop.call_soon_threadsafe(_settle, pending.done, outcome)
                except RuntimeError:  # its event loop has closed: nobody waits any more
                    pass

    def _gather(self) -> list[_Pending]:
        """The next runs to commit: the first to come, those already waiting, and, while
        requests that will save are still computing, those that come within :data:`LINGER`
        of it (at most :data:`BATCH`)."""
        batch = [self._queue.get()]
        until = time.monotonic() + LINGER
        while len(batch) < BATCH:
            try:
                batch.append(self._queue.get_nowait())
                continue
            except queue.Empty:
                pass
            left = until - time.monotonic()
            if self.coming <= 0 or left <= 0:
                break
            try:
                batch.append(self._queue.get(timeout=min(left, 0.002)))
            except queue.Empty:
                continue
        return batch

    def _commit(self, records: list[dict[str, Any]]) -> None:
        """Store ``records`` (each with its ``input`` text and ``answer`` bytes) in one
        transaction: the contents not yet stored, then the runs naming them."""
        contents: dict[str, bytes] = {}
        rows = []
        for record in records:
            row = {k: v for k, v in record.items() if k not in ("input", "answer")}
            for name, data in (("input_ref", record["input"].encode()),
                               ("answer_ref", record["answer"])):
                row[name] = content_digest(data)
                contents[row[name]] = data
            rows.append(row)
        for attempt in range(ATTEMPTS):
            try:
                with self.db.transaction(durable=False) as s:
                    known = set(s.scalars(select(RunContent.digest)
                                          .where(RunContent.digest.in_(contents))))
                    new = [{"digest": d, "data": v} for d, v in contents.items()
                           if d not in known]
                    if new:
                        s.execute(insert(RunContent), new)
                    s.execute(insert(RunRecord), rows)
                return
            except IntegrityError:  # another worker stored one of these contents meanwhile
                if attempt == ATTEMPTS - 1:
                    raise

    def purge(self, days: float | None) -> int:
        """Remove the runs older than ``days`` (none when None), then the inputs and answers
        no run names any more; how many runs went."""
        if days is None:
            return 0
        with self.db.transaction() as s:
            result = s.execute(delete(RunRecord)
                               .where(RunRecord.created < utcnow() - timedelta(days=days)))
        named = union(select(RunRecord.input_ref), select(RunRecord.answer_ref))
        try:
            with self.db.transaction() as s:
                s.execute(delete(RunContent).where(RunContent.digest.not_in(named)))
        except IntegrityError:  # a run just saved names one of them: they go next time
            log.info("unnamed run contents left for the next round (a run was being saved)")
        return int(getattr(result, "rowcount", 0) or 0)

    # -- reading ------------------------------------------------------------------------------

    def get(self, run_id: str, owner: str | None) -> RunRecord:
        with self.db.transaction() as s:
            row = s.scalar(select(RunRecord).where(RunRecord.id == run_id)
                           .options(joinedload(RunRecord.input_content),
                                    joinedload(RunRecord.answer_content)))
        if row is None or row.owner != owner:
            raise RunNotFound(f"no saved run {run_id!r} (none was saved with this id, it was "
                              "removed by the retention period, or it was saved with another "
                              "API key)")
        return row

    def page(self, owner: str | None, *, operation: str | None, since: datetime | None,
             until: datetime | None, before: int | None, limit: int) -> list[RunRecord]:
        """Runs of ``owner``, newest first, ``limit`` of them, older than the cursor."""
        query = select(RunRecord).where(RunRecord.owner.is_(None) if owner is None
                                        else RunRecord.owner == owner)
        if operation is not None:
            query = query.where(RunRecord.operation == operation)
        if since is not None:
            query = query.where(RunRecord.created >= since)
        if until is not None:
            query = query.where(RunRecord.created < until)
        if before is not None:
            query = query.where(RunRecord.serial < before)
        with self.db.transaction() as s:
            return list(s.scalars(query.order_by(RunRecord.serial.desc()).limit(limit)).all())


def content_digest(data: bytes) -> str:
    """The name a run's input or answer is stored under: ``sha256:`` and the hex digest."""
    return "sha256:" + hashlib.sha256(data).hexdigest()


def _settle(done: asyncio.Future[None], outcome: BaseException | None) -> None:
    if done.done():
        return
    if outcome is None:
        done.set_result(None)
    else:
        done.set_exception(outcome)


# -- the hook ---------------------------------------------------------------------------------


@contextmanager
def coming(request: Request) -> Iterator[None]:
    """While a request that asked for save computes: the writer may wait for its run."""
    store: RunStore = request.app.state.runs
    store.coming += 1
    try:
        yield
    finally:
        store.coming -= 1


async def keep(request: Request, route: APIRoute, response: Response) -> Response:
    """Save the run that ``response`` answers (a success); the answer, with the run's id."""
    if not 200 <= response.status_code < 300:
        return response
    body, response = await _gathered(response)
    provenance = attached(response) or Provenance(_query_digest(request))
    run_id = uuid.uuid4().hex
    record = dict(
        id=run_id, owner=owner_of(request), operation=route.operation_id or route.name,
        created=utcnow(), version=provenance.version or service_version(),
        input_digest=provenance.input_digest,
        input=(provenance.input or canonical_json({"query": _query(request)})).decode(),
        method=request.method, path=request.url.path, query=_query_string(request),
        content_type=request.headers.get("content-type"), accept=request.headers.get("accept"),
        request_body=await _body_unless_input(request, provenance),
        status_code=response.status_code,
        answer_type=response.headers.get("content-type", ""), answer=body)
    await request.app.state.runs.save(record)
    response.headers[RUN_HEADER] = run_id
    response.headers.append("Link", f'</v1/runs/{run_id}>; rel="related"')
    return response


async def _gathered(response: Response) -> tuple[bytes, Response]:
    """The answer's bytes, and an answer that sends them (a streamed one is read whole)."""
    if not isinstance(response, StreamingResponse):
        return bytes(response.body), response
    parts = []
    async for chunk in response.body_iterator:
        parts.append(chunk.encode() if isinstance(chunk, str) else bytes(chunk))
    body = b"".join(parts)
    headers = {k: v for k, v in response.headers.items() if k != "content-length"}
    whole = Response(body, status_code=response.status_code, headers=headers)
    provenance = attached(response)
    if provenance is not None:
        from .provenance import attach

        attach(whole, provenance)
    return body, whole


async def _body_unless_input(request: Request, provenance: Provenance) -> bytes:
    """The body as sent; empty for a JSON body, whose canonical input (kept beside it) is the
    same body as validated, and is what a re-run sends (a run is then about 15 % smaller)."""
    media = request.headers.get("content-type", "").split(";", 1)[0].strip().lower()
    if provenance.input is not None and (media == "application/json" or media.endswith("+json")):
        return b""
    return await request.body()


def _query(request: Request) -> dict[str, Any]:
    out: dict[str, Any] = {}
    for name, value in request.query_params.multi_items():
        if name != "save" and name not in PRESENTATION:
            out.setdefault(name, []).append(value)
    return {k: v[0] if len(v) == 1 else v for k, v in out.items()}


def _query_digest(request: Request) -> str:
    from ..canonical import digest_of

    return digest_of({"query": _query(request)})


def _query_string(request: Request) -> str:
    """The query as sent, less ``save`` (a re-run is not saved again)."""
    from urllib.parse import urlencode

    return urlencode([(k, v) for k, v in request.query_params.multi_items() if k != "save"])


def run_json(row: RunRecord) -> dict[str, Any]:
    """A saved run as ``GET /v1/runs/{id}`` answers it (without its provenance)."""
    answer, encoding = _answer_of(row.answer_type, row.answer)
    return {**run_summary(row), "input": orjson.loads(row.input),
            "request": {"method": row.method, "path": row.path, "query": row.query,
                        "content_type": row.content_type},
            "status": row.status_code, "answer_type": row.answer_type,
            "answer_encoding": encoding, "answer": answer}


def _answer_of(media: str, data: bytes) -> tuple[Any, str]:
    """A saved answer for a JSON document, with how it is written there: JSON answers as JSON
    (``json``), text answers (CSV, plain text) as their text (``text``), and anything else, a
    Parquet file, as base64 (RFC 4648 section 4; ``base64``) so its bytes come back as sent."""
    if media.startswith("application/json") or media.split(";", 1)[0].endswith("+json"):
        return orjson.loads(data), "json"
    if media.startswith("text/"):
        try:
            return data.decode("utf-8"), "text"
        except UnicodeDecodeError:
            pass
    return base64.b64encode(data).decode("ascii"), "base64"


def run_summary(row: RunRecord) -> dict[str, Any]:
    """A saved run as the listing gives it."""
    return {"id": row.id, "operation": row.operation,
            "created": row.created.isoformat(timespec="microseconds") + "Z",
            "version": row.version, "input_digest": row.input_digest,
            "key": None if row.owner is None else row.owner[:8],
            "links": {"self": f"/v1/runs/{row.id}", "rerun": f"/v1/runs/{row.id}/rerun"}}
