"""The table of household jobs, kept in the database (:mod:`dualcost.storage`), shared by every
worker of every instance.

**Replacement.** The table keeps at most ``limit`` jobs, and at most ``per_owner`` of one
owner's (an API key's SHA-256; None with access control off). When it is full, a new job takes
the place of, in this order, the oldest finished job of its own key, its own oldest waiting job
(one without an upload on its way first), the oldest finished job of any key; never a running
job, never another key's waiting one. A key holding its share of the table can only replace its
own jobs. No room: 503 ``job-table-full`` with Retry-After (:func:`replacement`). Each change to
the table's membership first updates the one row of ``job_table``, which makes concurrent
changes from several workers wait for each other on any database.

**Workers that stop.** The worker computing a job writes a sign of life (``heartbeat``) with
every chunk, and its keeper thread (:mod:`dualcost.api.keeper`) does so every quarter of
``job_lease_seconds`` meanwhile. A running job whose heartbeat is older than the lease belonged
to a worker that stopped (a restart, a crash): it is marked failed, with that reason, by the
next worker that looks at the table. A worker shutting down marks its own running jobs failed
at once.

**An end the database could not take.** When a job fails (the database lost while it wrote a
chunk, or while it recorded the job as done) and the database cannot take that either, the
worker keeps the outcome and the job's sign of life, and writes the outcome, with its reason,
at its keeper's next round that reaches the database (within a quarter of the lease), or
before it answers for the job itself, whichever comes first: from then on every worker reads
the job as failed with that reason, rather than running until its lease runs out.
"""

from __future__ import annotations

import logging
import os
import socket
import threading
import uuid
from collections.abc import Iterator, Sequence
from dataclasses import dataclass
from datetime import datetime, timedelta, timezone
from typing import Any, NamedTuple, Protocol

import orjson
from fastapi import Request
from pydantic import BaseModel
from sqlalchemy import delete, insert, select, update
from sqlalchemy.orm import Session

from ...core.errors import StorageUnavailable
from ...storage import Database
from ...storage.tables import JobRecord, JobResultPiece, JobTable
from ..problems import JobConflict, JobNotFound, JobTableFull
from ..provenance import Provenance


class JobState(Protocol):
    """What the store reads and writes of a job in a worker (:class:`.jobs.JobState`), named
    here so that the store does not import the module of the jobs it keeps."""

    status: str
    pieces: int
    store: JobStore | None

    @property
    def id(self) -> str: ...

    @property
    def owner(self) -> str | None: ...

    @property
    def spec(self) -> BaseModel: ...

    def view(self) -> tuple[dict[str, Any], Provenance]: ...

    def fail(self, status: str, message: str) -> None: ...


#: Seconds a client is asked to wait (Retry-After) when the job table has no room.
TABLE_FULL_RETRY_SECONDS = 30
FINISHED = ("done", "failed", "cancelled")
WAITING = "waiting_for_households"
#: Pieces of a job's answer read from the database at once.
PIECES_PER_READ = 16


class Piece(NamedTuple):
    """A piece of a job's answer as kept (:class:`~dualcost.storage.tables.JobResultPiece`):
    CSV text, or columns (bytes), or both (the first piece: the header and what the writers
    need)."""

    text: str | None
    data: bytes | None
log = logging.getLogger("dualcost.api")


def utcnow() -> datetime:
    """Now, in UTC, without a zone (as the database keeps times)."""
    return datetime.now(timezone.utc).replace(tzinfo=None)


def owner_of(request: Request) -> str | None:
    """The owner id of a request's jobs and runs: its verified API key's SHA-256 with access
    control on, else None (every job and run is everyone's)."""
    if not request.app.state.access_control:
        return None
    owner = request.scope.get("state", {}).get("key_id")
    return str(owner) if owner else None


@dataclass(frozen=True)
class Entry:
    """What the replacement policy reads of a job (the table is read oldest first)."""

    id: str
    owner: str | None
    status: str
    uploads: int = 0


def replacement(table: list[Entry], owner: str | None, limit: int, per_owner: int) -> str | None:
    """The job a new job of ``owner`` replaces, None when there is room; JobTableFull when the
    table is full of jobs it may not replace (see the module's notes)."""
    own = [j for j in table if j.owner == owner]
    if len(own) >= per_owner:
        victim = _replaceable(own)
        if victim is None:
            raise JobTableFull(f"this key holds {len(own)} household jobs, its share of the "
                               "table, and all of them are running; try again when one has "
                               "finished", TABLE_FULL_RETRY_SECONDS)
        return victim.id
    if len(table) >= limit:
        victim = _replaceable(own) or next(
            (j for j in table if j.owner != owner and j.status in FINISHED), None)
        if victim is None:
            raise JobTableFull(f"the table of {limit} household jobs is full of jobs that are "
                               "running or belong to other keys; try again later",
                               TABLE_FULL_RETRY_SECONDS)
        return victim.id
    return None


def _replaceable(own: list[Entry]) -> Entry | None:
    """Of one owner's jobs (oldest first), the one a new job of theirs replaces: finished
    first, then waiting without an upload on its way, then waiting; never a running one."""
    def rank(job: Entry) -> int:
        if job.status in FINISHED:
            return 0
        if job.status == WAITING:
            return 2 if job.uploads else 1
        return 3  # running

    ranked = [(rank(j), i, j) for i, j in enumerate(own)]
    best = min(ranked, default=None, key=lambda r: r[:2])
    return best[2] if best is not None and best[0] < 3 else None


def _json(document: Any) -> str:
    return orjson.dumps(document, option=orjson.OPT_SERIALIZE_NUMPY).decode()


class JobStore:
    """The household jobs of one database, as this worker process sees and computes them."""

    def __init__(self, db: Database, limit: int, per_owner: int | None = None,
                 lease_seconds: float = 60.0) -> None:
        self.db = db
        self.limit = limit
        self.per_owner = min(per_owner or limit, limit)
        self.lease = timedelta(seconds=lease_seconds)
        #: This process, as the runner of the jobs it computes.
        self.runner = f"{socket.gethostname()}:{os.getpid()}:{uuid.uuid4().hex[:8]}"
        #: The jobs running in this process (their heartbeats are this process's to write).
        self.local: dict[str, JobState] = {}
        #: Outcomes (status, reason, document) of jobs of this process that ended while the
        #: database could not take them, to write once it can (see the module's notes).
        self.unrecorded: dict[str, tuple[str, str, str]] = {}
        self.lock = threading.Lock()

    # -- the table's membership ---------------------------------------------------------------

    @staticmethod
    def _lock_table(session: Session) -> None:
        session.execute(update(JobTable).where(JobTable.id == 1)
                        .values(generation=JobTable.generation + 1))

    def _expire(self, session: Session, job_id: str | None = None) -> None:
        """Running jobs whose worker has stopped (or the one job ``job_id``): failed, with
        the reason."""
        seconds = int(self.lease.total_seconds())
        stale = [JobRecord.status == "running", JobRecord.heartbeat < utcnow() - self.lease]
        if job_id is not None:
            stale.append(JobRecord.id == job_id)
        session.execute(
            update(JobRecord).where(*stale)
            .values(status="failed", runner=None, updated=utcnow(),
                    error=f"the worker computing this job stopped (no sign of it for {seconds} "
                          "s: the service was restarted, or the worker ended); upload the "
                          "households to a new job"))

    def _stale(self, row: JobRecord) -> bool:
        return (row.status == "running" and row.heartbeat is not None
                and row.heartbeat < utcnow() - self.lease)

    @staticmethod
    def _delete(session: Session, job_id: str) -> None:
        session.execute(delete(JobResultPiece).where(JobResultPiece.job_id == job_id))
        session.execute(delete(JobRecord).where(JobRecord.id == job_id))

    def add(self, state: JobState) -> None:
        """A new job, in place of the one :func:`replacement` names when the table is full."""
        document, origin = state.view()
        with self.db.transaction() as s:
            self._lock_table(s)
            self._expire(s)
            rows = s.execute(select(JobRecord.id, JobRecord.owner, JobRecord.status,
                                    JobRecord.uploads).order_by(JobRecord.serial)).all()
            victim = replacement([Entry(*row) for row in rows], state.owner, self.limit,
                                 self.per_owner)
            if victim is not None:
                self._delete(s, victim)
            t = utcnow()
            s.add(JobRecord(id=state.id, owner=state.owner, status=state.status, error=None,
                            uploads=0, created=t, updated=t, spec=_json(_given(state)),
                            document=_json(document), input_digest=origin.input_digest))
        state.store = self

    def remove(self, job_id: str, owner: str | None = None) -> None:
        with self.db.transaction() as s:
            self._lock_table(s)
            self._expire(s)
            row = self._visible(s, job_id, owner)
            if row.status == "running":
                raise JobConflict("the job is running; delete it when it has finished")
            self._delete(s, job_id)

    # -- reading ------------------------------------------------------------------------------

    @staticmethod
    def _visible(session: Session, job_id: str, owner: str | None) -> JobRecord:
        row = session.scalar(select(JobRecord).where(JobRecord.id == job_id))
        if row is None or row.owner != owner:
            raise JobNotFound(f"no household job {job_id!r} (none was created with this id, "
                              "or it was replaced, deleted, or created with another API key)")
        return row

    def record(self, job_id: str, owner: str | None = None) -> JobRecord:
        """The job's row, if ``owner`` may see it; another owner's job is 'not found' too."""
        if job_id in self.unrecorded:  # its outcome, known here, is written first
            self.write_outcomes()
        with self.db.transaction() as s:
            row = self._visible(s, job_id, owner)
            if self._stale(row):  # a write only when there is something to write
                self._expire(s, job_id)
                s.refresh(row)
            return row

    def view(self, job_id: str, owner: str | None = None) -> tuple[dict[str, Any], Provenance]:
        """The job as GET answers it, and that answer's provenance."""
        row = self.record(job_id, owner)
        document = orjson.loads(row.document)
        document["status"], document["error"] = row.status, row.error
        return document, Provenance(row.input_digest)

    def pieces(self, job_id: str) -> Iterator[Piece]:
        """The pieces of a job's stored answer, in order, read a few at a time."""
        n = 0
        while True:
            with self.db.transaction() as s:
                found = s.execute(select(JobResultPiece.text, JobResultPiece.data)
                                  .where(JobResultPiece.job_id == job_id,
                                         JobResultPiece.piece >= n)
                                  .order_by(JobResultPiece.piece).limit(PIECES_PER_READ)).all()
            yield from (Piece(text, data) for text, data in found)
            if len(found) < PIECES_PER_READ:
                return
            n += len(found)

    # -- a job's upload and computation --------------------------------------------------------

    def upload_started(self, job_id: str) -> None:
        """An upload on its way to this job (counted, for the choice of a job to replace)."""
        self._count_upload(job_id, 1)

    def upload_ended(self, job_id: str) -> None:
        try:
            self._count_upload(job_id, -1)
        except StorageUnavailable as exc:
            log.warning("household job %s: upload count not updated: %s", job_id, exc)

    def _count_upload(self, job_id: str, step: int) -> None:
        with self.db.transaction() as s:
            s.execute(update(JobRecord).where(JobRecord.id == job_id)
                      .values(uploads=JobRecord.uploads + step))

    def claim(self, state: JobState) -> None:
        """The upload has arrived: the job runs here, unless it was replaced meanwhile (404) or
        another upload got there first (409)."""
        with self.db.transaction() as s:
            self._lock_table(s)
            row = s.scalar(select(JobRecord).where(JobRecord.id == state.id))
            if row is None:
                raise JobNotFound(f"household job {state.id} was replaced by newer jobs (the "
                                  "table was full) while its households were arriving; create "
                                  "a new job")
            if row.status != WAITING:
                raise already_received(state.id, row.status)
            row.status, row.error, row.runner = "running", None, self.runner
            row.heartbeat = row.updated = utcnow()
        state.status, state.store = "running", self
        with self.lock:
            self.local[state.id] = state

    def progress(self, state: JobState, pieces: Sequence[Piece] = ()) -> None:
        """The job's progress, and pieces of its answer, in one transaction."""
        document, origin = state.view()
        with self.db.transaction() as s:
            if pieces:
                s.execute(insert(JobResultPiece), [
                    {"job_id": state.id, "piece": state.pieces + k, "text": p.text,
                     "data": p.data} for k, p in enumerate(pieces)])
            s.execute(update(JobRecord)
                      .where(JobRecord.id == state.id, JobRecord.runner == self.runner)
                      .values(document=_json(document), input_digest=origin.input_digest,
                              heartbeat=utcnow(), updated=utcnow()))
        state.pieces += len(pieces)

    def finish(self, state: JobState) -> None:
        document, _ = state.view()
        with self.db.transaction() as s:
            s.execute(update(JobRecord)
                      .where(JobRecord.id == state.id, JobRecord.runner == self.runner)
                      .values(status="done", runner=None, document=_json(document),
                              updated=utcnow()))
        self._forget(state.id)

    def fail(self, state: JobState, status: str, message: str) -> None:
        """The job stopped (failed or cancelled): said so, and its partial answer dropped."""
        outcome = (status, message, _json(state.view()[0]))
        try:
            with self.db.transaction() as s:
                self._end(s, state.id, outcome)
        except StorageUnavailable as exc:  # kept, and its sign of life, until it can be written
            log.warning("household job %s %s, not recorded yet (it will be once the database "
                        "answers): %s", state.id, status, exc)
            with self.lock:
                self.unrecorded[state.id] = outcome
            return
        self._forget(state.id)

    @staticmethod
    def _end(session: Session, job_id: str, outcome: tuple[str, str, str]) -> None:
        """A running job failed or cancelled, with its reason; its partial answer dropped."""
        status, message, document = outcome
        session.execute(update(JobRecord)
                        .where(JobRecord.id == job_id, JobRecord.status == "running")
                        .values(status=status, error=message, runner=None, document=document,
                                updated=utcnow()))
        session.execute(delete(JobResultPiece).where(JobResultPiece.job_id == job_id))

    def _write_outcomes(self, session: Session) -> list[str]:
        """The outcomes kept for want of a database, written (the jobs they end)."""
        with self.lock:
            kept = dict(self.unrecorded)
        for job_id, outcome in kept.items():
            self._end(session, job_id, outcome)
        return list(kept)

    def _written(self, job_ids: list[str]) -> None:
        """The outcomes of ``job_ids`` are committed: nothing more to keep of those jobs."""
        with self.lock:
            for job_id in job_ids:
                self.unrecorded.pop(job_id, None)
                self.local.pop(job_id, None)

    def write_outcomes(self) -> None:
        """Write the outcomes kept for want of a database (StorageUnavailable while it is
        still out of reach)."""
        with self.db.transaction() as s:
            written = self._write_outcomes(s)
        self._written(written)

    def release(self, state: JobState) -> None:
        """The upload was refused before any work: the job waits for a corrected one."""
        document, origin = state.view()
        with self.db.transaction() as s:
            s.execute(delete(JobResultPiece).where(JobResultPiece.job_id == state.id))
            s.execute(update(JobRecord).where(JobRecord.id == state.id)
                      .values(status=WAITING, error=None, runner=None, document=_json(document),
                              input_digest=origin.input_digest, updated=utcnow()))
        self._forget(state.id)

    def _forget(self, job_id: str) -> None:
        with self.lock:
            self.local.pop(job_id, None)

    # -- the keeper's rounds ------------------------------------------------------------------

    def beat(self) -> None:
        """A sign of life for the jobs running here; the stopped workers' jobs failed."""
        with self.lock:
            running = [j for j in self.local if j not in self.unrecorded]
        with self.db.transaction() as s:
            written = self._write_outcomes(s)
            if running:
                s.execute(update(JobRecord)
                          .where(JobRecord.id.in_(running), JobRecord.runner == self.runner)
                          .values(heartbeat=utcnow()))
            self._expire(s)
        self._written(written)

    def stop(self) -> None:
        """This process is shutting down: its running jobs are failed, with that reason (and
        the outcomes kept for want of a database are written, if it answers now)."""
        if self.unrecorded:
            self.write_outcomes()
        with self.lock:
            running = list(self.local.values())
        for state in running:
            state.fail("failed", "the service stopped while the job was running; upload the "
                       "households to a new job")


def already_received(job_id: str, status: str) -> JobConflict:
    return JobConflict(f"household job {job_id} has already received its households "
                       f"(status {status}); create a new job")


def _given(state: JobState) -> Any:
    from ..provenance import given

    return given(state.spec)
