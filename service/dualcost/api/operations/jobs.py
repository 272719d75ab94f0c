"""Household jobs, for large CSV files: create a job with the JSON of a household batch less its
households, upload the households as CSV and read the results back as CSV while they are
computed; the job reports its progress and, at the end, the summaries and the rows skipped.

Jobs are kept in the database (:class:`~.job_store.JobStore`, :mod:`dualcost.storage`): any
worker of any instance answers for any job, and a job outlives a restart. The worker that
receives the households computes them and writes, chunk by chunk and each in one transaction,
the answer's rows and the job's progress; at the end the summaries. The upload is spooled to a
temporary file (in memory up to 8 MiB, then on disk) and read back chunk by chunk, so the
households are never held twice.

**Slots.** A job takes a slot of the table, one that newer jobs may not take from it, only
once its households have fully arrived and it runs: while an upload is on its way the job is
still waiting (and a stalled upload is ended by the body's read time, 408). **Owners.** With
access control on, a job belongs to the API key that created it (:func:`owner_of`, the key's
SHA-256): other keys are told there is no such job (404, which does not reveal that it
exists). Which job a new one replaces when the table is full: :mod:`.job_store`.

The CSV answer numbers households from 1 (``row``: the record after the header) and gives the
line each household's record starts on (``record``); ``model_regular``, ``irregular_reasons``
and ``irregular_items`` say where the model is outside its regular region (the model's figures
are then empty cells).
"""

from __future__ import annotations

import codecs
import hashlib
import io
import tempfile
import threading
import uuid
from collections.abc import Generator, Iterator
from dataclasses import replace
from datetime import datetime, timezone
from typing import Any

import orjson
from fastapi import Request

from ...config import Settings
from ...core.households import Accumulator, HouseholdJob
from ...core.preferences import Notice
from ..inputs.csv import (
    DeclaredDialect,
    check_media_type,
    dialect_notices,
    stream_dialect,
    stream_header,
)
from ..inputs.households import CsvLayout, csv_chunks, csv_layout, job_of, labels_of
from ..inputs.items import ItemAxis
from ..inputs.locator import Locator
from ..problems import RequestProblem
from ..provenance import Provenance, of_job
from ..render import csv_line
from ..schemas.common import CAUTION
from ..schemas.households import HouseholdJobSpec
from . import households
from .answers import SCALE_RATIO, notices_json
from .job_store import FINISHED, JobStore, already_received, owner_of

SPOOL_MEMORY_BYTES = 8 * 1024 * 1024

__all__ = ["FINISHED", "JobState", "JobStore", "create", "owner_of", "restore", "state_of"]


class JobState:
    """One job's spec, progress and outcome while a worker receives and computes it: built
    from the job's stored specification by whichever worker the upload reaches, and written
    back to the database (:class:`~.job_store.JobStore`) as the job goes on."""

    def __init__(self, spec: HouseholdJobSpec, job: HouseholdJob, axis: ItemAxis,
                 quantiles: tuple[float, ...], owner: str | None = None, *,
                 job_id: str | None = None, created: str | None = None) -> None:
        self.id = job_id or uuid.uuid4().hex
        self.owner = owner
        self.created = created or datetime.now(timezone.utc).isoformat(timespec="seconds")
        self.spec, self.job, self.axis, self.quantiles = spec, job, axis, quantiles
        self.labels = labels_of(spec)
        self.bad_rows = spec.bad_rows or "skip"
        self.status = "waiting_for_households"
        self.engine: str | None = None
        self.rows_read = 0
        self.rows_total: int | None = None
        self.acc = Accumulator(job)
        self.layout: CsvLayout | None = None
        self.locator = Locator(households.PLACES, "csv", items=axis.ids)
        self.summary: list[dict[str, Any]] | None = None
        self.error: str | None = None
        #: The job's input: its body, then its body and its households' CSV.
        self.provenance: Provenance = of_job(spec, None)
        #: What the web layer filled in for the upload (no weight column).
        self.defaults: tuple[Notice, ...] = ()
        self.lock = threading.Lock()
        #: Where the job is kept (set by the store that holds it).
        self.store: JobStore | None = None
        self.pieces = 0  # pieces of the CSV answer written to the store

    def reset(self) -> None:
        """The upload was refused before any work: the job waits for a corrected one."""
        with self.lock:
            self.status = "waiting_for_households"
            self.rows_read = 0
            self.rows_total = None
            self.engine = None
            self.layout = None
            self.defaults = ()
            self.acc = Accumulator(self.job)
            self.provenance = of_job(self.spec, None)
            self.pieces = 0

    def release(self) -> None:
        """The upload was refused before any work: the job waits again, in the store too."""
        self.reset()
        if self.store is not None:
            self.store.release(self)

    def count(self, n: int) -> None:
        self.rows_read += n

    def written(self, piece: str | None) -> None:
        """Progress made (and a piece of the answer, if any): into the store."""
        if self.store is not None:
            self.store.progress(self, piece)

    def finish(self) -> None:
        summary = households.summary_json(self.acc.summary(self.quantiles), self.labels)
        with self.lock:
            self.summary = summary
            self.status = "done"
            # The per-household columns served the summaries; the job keeps only counts now.
            self.acc.parts = []
        if self.store is not None:
            self.store.finish(self)

    def fail(self, status: str, message: str) -> None:
        with self.lock:
            if self.status != "running":
                return
            self.status = status
            self.error = message
        if self.store is not None:
            self.store.fail(self, status, message)

    def snapshot(self) -> dict[str, Any]:
        """The job as GET answers it (its provenance: :meth:`view`)."""
        return self.view()[0]

    def view(self) -> tuple[dict[str, Any], Provenance]:
        """The job as GET answers it, and the provenance of that answer, read together."""
        with self.lock:
            acc, total, done = self.acc, self.rows_total, self.status == "done"
            fraction = 1.0 if done else (min(1.0, self.rows_read / total) if total else None)
            notices = (*(acc.notices() if done else self.job.notices), *self.defaults)
            return {
                "id": self.id, "status": self.status, "created": self.created,
                "family": self.job.family, "periods": self.labels, "engine": self.engine,
                "bad_rows": self.bad_rows,
                "progress": {"rows_read": self.rows_read, "rows_total": total,
                             "households_done": acc.households, "rows_skipped": acc.skipped.count,
                             "chunks_done": acc.chunks, "fraction": fraction},
                "skipped": households.skipped_json(acc.skipped, self.locator),
                "summary": self.summary,
                "unused_columns": [] if self.layout is None else self.layout.unused,
                "error": self.error, "scale": SCALE_RATIO,
                "notices": self.input_notices()
                + notices_json(notices, self.axis.ids, self.axis.labels),
                "links": {"self": f"/v1/household-jobs/{self.id}",
                          "households": f"/v1/household-jobs/{self.id}/households",
                          "results": f"/v1/household-jobs/{self.id}/results"},
                "caution": CAUTION,
            }, self.provenance

    def input_notices(self) -> list[dict[str, str]]:
        """What was done in reading the upload (its dialect, when detected)."""
        return dialect_notices(None if self.layout is None else self.layout.dialect)


def state_of(spec: HouseholdJobSpec, settings: Settings, owner: str | None = None, *,
             job_id: str | None = None, created: str | None = None) -> JobState:
    """A job waiting for its households; the same checks as a batch's, before any upload."""
    loc = Locator(households.PLACES)
    job, axis, quantiles = job_of(spec, loc, max_items=settings.max_items,
                                  max_tree_depth=settings.max_tree_depth,
                                  chunk_rows=settings.household_chunk_rows)
    return JobState(spec, job, axis, quantiles, owner, job_id=job_id, created=created)


def create(spec: HouseholdJobSpec, settings: Settings, store: JobStore,
           owner: str | None = None) -> JobState:
    """A new job, checked as a batch would be, in the store."""
    state = state_of(spec, settings, owner)
    if spec.engine == "cluster":
        households.scheduler_for("cluster", None, settings, Locator(households.PLACES))
    store.add(state)
    return state


def restore(store: JobStore, job_id: str, owner: str | None, settings: Settings) -> JobState:
    """A stored job that waits for its households, rebuilt from its specification in this
    worker to receive them (409 at once when it has had them)."""
    row = store.record(job_id, owner)
    if row.status != "waiting_for_households":
        raise already_received(job_id, row.status)
    spec = HouseholdJobSpec.model_validate_json(row.spec)
    created = orjson.loads(row.document).get("created")
    state = state_of(spec, settings, row.owner, job_id=row.id, created=created)
    state.store = store
    return state


# -- the upload -------------------------------------------------------------------------------


async def spool(request: Request) -> tuple[Any, int, str]:
    """The request body in a temporary file, checked to be UTF-8; its number of lines, and the
    SHA-256 (hex) of its bytes."""
    check_media_type(request)
    file = tempfile.SpooledTemporaryFile(max_size=SPOOL_MEMORY_BYTES)
    decoder = codecs.getincrementaldecoder("utf-8")()
    lines, size, last = 0, 0, b"\n"
    digest = hashlib.sha256()
    try:
        async for piece in request.stream():
            if not piece:
                continue
            try:
                decoder.decode(piece)
            except UnicodeDecodeError as exc:
                raise RequestProblem.at("", f"the CSV body is not UTF-8 text (byte "
                                        f"{size + exc.start})") from None
            file.write(piece)
            digest.update(piece)
            size += len(piece)
            lines += piece.count(b"\n")
            last = piece[-1:]
        decoder.decode(b"", final=True)
    except UnicodeDecodeError:
        file.close()
        raise RequestProblem.at("", "the CSV body ends inside a UTF-8 character") from None
    except BaseException:
        file.close()
        raise
    if last != b"\n":
        lines += 1
    file.seek(0)
    return file, lines, digest.hexdigest()


def open_upload(state: JobState, file: Any, lines: int, settings: Settings,
                households_sha256: str, declared: DeclaredDialect | None = None
                ) -> tuple[io.TextIOWrapper, Iterator[list[str]], str | None]:
    """The upload's text, its record reader (past the header) and the scheduler's address;
    a header without an item's column is refused at once, and so is a dialect that cannot be
    told from the header and the first records (see inputs/csv.py). From here on the job's
    provenance is of its body and these households together."""
    text = io.TextIOWrapper(file, encoding="utf-8-sig", newline="")
    declared = declared or DeclaredDialect()
    header, records, separator, reason = stream_header(iter(text), declared)
    layout = csv_layout(header, state.axis, state.locator, needs_income=state.job.needs_income)
    dialect, reader = stream_dialect(records, separator, reason, declared,
                                     layout.numeric_columns)
    state.layout = replace(layout, dialect=dialect)
    if state.layout.weight_column is None:
        state.defaults = (households.weights_notice(None),)
    state.rows_total = max(0, lines - 1)
    address = households.scheduler_for(state.spec.engine, state.rows_total, settings,
                                       state.locator)
    state.engine = "local" if address is None else "cluster"
    with state.lock:
        state.provenance = of_job(state.spec, households_sha256)
    state.written(None)
    return text, reader, address


def stream(state: JobState, reader: Iterator[list[str]], text: io.TextIOWrapper | None,
           scheduler: Any, settings: Settings, *, reject: bool = False
           ) -> Generator[str, None, None]:
    """The CSV answer of a job, chunk by chunk; progress goes to the job as it is made.

    ``scheduler`` is None (this process) or a connected Dask client, closed at the end.
    """
    job = state.job
    assert state.layout is not None
    with_income = state.layout.expenditure_column is not None
    try:
        header = csv_line(households.csv_header(job, with_income, records=True))
        state.written(header)
        yield header
        chunks = csv_chunks(reader, state.layout, job.chunk_rows, state.count)
        for result in households.evaluate(job, chunks, scheduler, settings):
            state.acc.add(result)
            rows = (households.csv_rows(result, job, state.labels, with_income,
                                        state.axis.ids, records=True) if result.size else None)
            # The rows and the progress are stored (one transaction) before they are sent.
            state.written(rows)
            if rows is not None:
                yield rows
        if reject and state.acc.skipped.count:
            state.fail("failed", f"{state.acc.skipped.count} row(s) break a rule and bad_rows "
                       "is reject: no result was given")
        else:
            state.finish()
    except GeneratorExit:
        state.fail("cancelled", "the client stopped reading the answer")
        raise
    except Exception as exc:
        state.fail("failed", f"{type(exc).__name__}: {exc}")
        raise
    finally:
        state.fail("cancelled", "the answer was not read to the end")
        if text is not None:
            text.close()
        if scheduler is not None:
            scheduler.close()


def run_to_file(state: JobState, reader: Iterator[list[str]], scheduler: Any,
                settings: Settings) -> Any:
    """All or nothing (bad_rows=reject): the whole answer into a temporary file first; a bad
    row refuses the upload, each named by its cell."""
    out = tempfile.SpooledTemporaryFile(max_size=SPOOL_MEMORY_BYTES, mode="w+", encoding="utf-8",
                                        newline="")
    for piece in stream(state, reader, None, scheduler, settings, reject=True):
        out.write(piece)
    if state.acc.skipped.count:
        out.close()
        raise RequestProblem([state.locator.row_error(p) for p in state.acc.skipped.listed[:20]])
    out.seek(0)
    return out


def file_pieces(out: Any) -> Iterator[str]:
    try:
        while piece := out.read(1 << 16):
            yield piece
    finally:
        out.close()

