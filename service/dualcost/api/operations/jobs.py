"""Household jobs, for large CSV files: create a job with the JSON of a household batch less its
households, upload the households as CSV and read the results back as CSV while they are
computed; the job reports its progress and, at the end, the summaries and the rows skipped.

Jobs live in the memory of the process that created them (:class:`JobStore`, one per app): with
several worker processes a client must reach the same process for all of a job's requests. The
upload is spooled to a temporary file (in memory up to 8 MiB, then on disk) and read back chunk
by chunk, so the households are never held twice.

**Slots.** A job takes a slot of the table, one that newer jobs may not take from it, only
once its households have fully arrived and it runs: while an upload is on its way the job is
still waiting (and a stalled upload is ended by the body's read time, 408). **Owners.** With
access control on, a job belongs to the API key that created it (:func:`owner_of`): other keys
are told there is no such job (404, which does not reveal that it exists). When the table is
full, a new job takes the place of, in this order, the oldest finished job of its own key, its
own oldest waiting job (one without an upload on its way first), the oldest finished job of any
key; never a running job, never another key's waiting one. A key holding its share of the table
(``max_household_jobs_per_key``) can only replace its own jobs. No room: 503 ``job-table-full``
with Retry-After.

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
from collections import OrderedDict
from collections.abc import Generator, Iterator
from contextlib import contextmanager
from dataclasses import dataclass, replace
from datetime import datetime, timezone
from itertools import islice
from typing import TYPE_CHECKING, Any

from fastapi import Request

from ...config import Settings
from ...core.households import Accumulator, HouseholdChunk, HouseholdJob
from ...core.preferences import Notice
from ..inputs.csv import (
    CSV_MEDIA_TYPE,
    DeclaredDialect,
    dialect_notices,
    stream_dialect,
    stream_header,
)
from ..inputs.households import (
    RESERVED_COLUMNS,
    CsvLayout,
    csv_chunks,
    csv_layout,
    job_of,
    labels_of,
)
from ..inputs.items import ItemAxis
from ..inputs.locator import CsvRows, Locator
from ..problems import JobConflict, JobNotFound, JobTableFull, RequestProblem
from ..provenance import Provenance, of_job
from ..render import PARQUET_MEDIA_TYPE
from ..schemas.common import CAUTION
from ..schemas.households import HouseholdJobSpec
from . import households
from .answers import SCALE_RATIO, notices_json

if TYPE_CHECKING:
    from ..inputs.columnar import UploadScan

SPOOL_MEMORY_BYTES = 8 * 1024 * 1024
#: Seconds a client is asked to wait (Retry-After) when the job table has no room.
TABLE_FULL_RETRY_SECONDS = 30
FINISHED = ("done", "failed", "cancelled")


def owner_of(request: Request) -> str | None:
    """The owner id of a request's jobs: its verified API key's id with access control on,
    else None (every job is everyone's)."""
    if not request.app.state.access_control:
        return None
    owner = request.scope.get("state", {}).get("key_id")
    return str(owner) if owner else None


class JobState:
    """One job's spec, progress and outcome; read by GET while a stream writes to it."""

    def __init__(self, spec: HouseholdJobSpec, job: HouseholdJob, axis: ItemAxis,
                 quantiles: tuple[float, ...], owner: str | None = None) -> None:
        self.id = uuid.uuid4().hex
        self.owner = owner
        self.uploads = 0  # uploads on their way (the job waits meanwhile)
        self.created = datetime.now(timezone.utc).isoformat(timespec="seconds")
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

    def expect_households(self) -> None:
        """Refuse at once an upload to a job that has had its households (409)."""
        with self.lock:
            self._check_waiting()

    def _check_waiting(self) -> None:
        if self.status != "waiting_for_households":
            raise JobConflict(f"household job {self.id} has already received its households "
                              f"(status {self.status}); create a new job")

    @contextmanager
    def receiving(self) -> Iterator[None]:
        """An upload on its way to this job (counted, for the choice of a job to replace)."""
        with self.lock:
            self.uploads += 1
        try:
            yield
        finally:
            with self.lock:
                self.uploads -= 1

    def claim(self) -> None:
        with self.lock:
            self._check_waiting()
            self.status = "running"

    def release(self) -> None:
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

    def count(self, n: int) -> None:
        self.rows_read += n

    def finish(self) -> None:
        summary = households.summary_json(self.acc.summary(self.quantiles), self.labels)
        with self.lock:
            self.summary = summary
            self.status = "done"
            # The per-household columns served the summaries; the job keeps only counts now.
            self.acc.parts = []

    def fail(self, status: str, message: str) -> None:
        with self.lock:
            if self.status == "running":
                self.status = status
                self.error = message

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
                          "households": f"/v1/household-jobs/{self.id}/households"},
                "caution": CAUTION,
            }, self.provenance


    def input_notices(self) -> list[dict[str, str]]:
        """What was done in reading the upload (its dialect, when detected)."""
        return dialect_notices(None if self.layout is None else self.layout.dialect)


class JobStore:
    """The jobs of this process, oldest first, at most ``limit`` of them and ``per_owner`` of
    one owner's; which job a new one replaces is in the module's notes."""

    def __init__(self, limit: int, per_owner: int | None = None) -> None:
        self.limit = limit
        self.per_owner = min(per_owner or limit, limit)
        self.jobs: OrderedDict[str, JobState] = OrderedDict()
        self.lock = threading.Lock()

    def add(self, state: JobState) -> None:
        with self.lock:
            own = [j for j in self.jobs.values() if j.owner == state.owner]
            if len(own) >= self.per_owner:
                victim = self._replaceable(own)
                if victim is None:
                    raise JobTableFull(f"this key holds {len(own)} household jobs, its share of "
                                       "the table, and all of them are running; try again when "
                                       "one has finished", TABLE_FULL_RETRY_SECONDS)
                del self.jobs[victim.id]
            elif len(self.jobs) >= self.limit:
                others = [j for j in self.jobs.values() if j.owner != state.owner]
                victim = self._replaceable(own) or next(
                    (j for j in others if j.status in FINISHED), None)
                if victim is None:
                    raise JobTableFull(f"the table of {self.limit} household jobs is full of jobs "
                                       "that are running or belong to other keys; try again "
                                       "later", TABLE_FULL_RETRY_SECONDS)
                del self.jobs[victim.id]
            self.jobs[state.id] = state

    @staticmethod
    def _replaceable(own: list[JobState]) -> JobState | None:
        """Of one owner's jobs (oldest first), the one a new job of theirs replaces: finished
        first, then waiting without an upload on its way, then waiting; never a running one."""
        def rank(job: JobState) -> int:
            if job.status in FINISHED:
                return 0
            if job.status == "waiting_for_households":
                return 2 if job.uploads else 1
            return 3  # running

        ranked = [(rank(j), i, j) for i, j in enumerate(own)]
        best = min(ranked, default=None, key=lambda r: r[:2])
        return best[2] if best is not None and best[0] < 3 else None

    def get(self, job_id: str, owner: str | None = None) -> JobState:
        """The job, if ``owner`` may see it; another owner's job is 'not found' as well."""
        state = self.jobs.get(job_id)
        if state is None or state.owner != owner:
            raise JobNotFound(f"no household job {job_id!r} in this process (jobs live in the "
                              "memory of the worker that created them)")
        return state

    def claim(self, state: JobState) -> None:
        """The upload has arrived: the job runs, unless it was replaced meanwhile (404) or
        another upload got there first (409)."""
        with self.lock:
            if self.jobs.get(state.id) is not state:
                raise JobNotFound(f"household job {state.id} was replaced by newer jobs (the "
                                  "table was full) while its households were arriving; create "
                                  "a new job")
            state.claim()

    def remove(self, job_id: str, owner: str | None = None) -> None:
        with self.lock:
            state = self.get(job_id, owner)
            if state.status == "running":
                raise JobConflict("the job is running; delete it when it has finished")
            del self.jobs[job_id]


def create(spec: HouseholdJobSpec, settings: Settings, store: JobStore,
           owner: str | None = None) -> JobState:
    """A job waiting for its households; the same checks as a batch's, before any upload."""
    loc = Locator(households.PLACES)
    job, axis, quantiles = job_of(spec, loc, max_items=settings.max_items,
                                  max_tree_depth=settings.max_tree_depth,
                                  chunk_rows=settings.household_chunk_rows)
    if spec.engine == "cluster":
        households.scheduler_for("cluster", None, settings, loc)
    state = JobState(spec, job, axis, quantiles, owner)
    store.add(state)
    return state


# -- the upload -------------------------------------------------------------------------------


@dataclass
class Upload:
    """A job's households as they arrived: spooled, hashed, and what the reading needs."""

    file: Any
    lines: int
    sha256: str
    size: int
    parquet: bool
    #: For a CSV: whether pyarrow may read it (inputs/columnar.py).
    scan: UploadScan


def upload_media(request: Request) -> bool:
    """Whether the upload is Parquet (else CSV); any other media type is refused, named."""
    media = request.headers.get("content-type", "").split(";")[0].strip().lower()
    if media == PARQUET_MEDIA_TYPE:
        return True
    if media != CSV_MEDIA_TYPE:
        raise RequestProblem.at("#/header/content-type", f"must be {CSV_MEDIA_TYPE} or "
                                f"{PARQUET_MEDIA_TYPE} for this operation, got "
                                f"{media or 'nothing'!r}")
    return False


async def spool(request: Request) -> Upload:
    """The request body in a temporary file; a CSV checked to be UTF-8 (and scanned for what
    only the reference reader reads), its number of lines; the SHA-256 of the bytes."""
    # pyarrow is imported with the first upload, not with the service: the other operations
    # never need it.
    from ..inputs.columnar import UploadScan

    parquet = upload_media(request)
    file = tempfile.SpooledTemporaryFile(max_size=SPOOL_MEMORY_BYTES)
    decoder = codecs.getincrementaldecoder("utf-8")()
    lines, size, last = 0, 0, b"\n"
    digest = hashlib.sha256()
    scan = UploadScan()
    try:
        async for piece in request.stream():
            if not piece:
                continue
            if not parquet:
                try:
                    # ASCII with nothing pending is UTF-8 (a check in C; decoding makes text)
                    if not (piece.isascii() and not decoder.getstate()[0]):
                        decoder.decode(piece)
                except UnicodeDecodeError as exc:
                    raise RequestProblem.at("", f"the CSV body is not UTF-8 text (byte "
                                            f"{size + exc.start})") from None
                scan.feed(piece)
                lines += piece.count(b"\n")
            file.write(piece)
            digest.update(piece)
            size += len(piece)
            last = piece[-1:]
        if not parquet:
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
    return Upload(file, lines, digest.hexdigest(), size, parquet, scan)


def open_upload(state: JobState, upload: Upload, settings: Settings,
                declared: DeclaredDialect | None = None
                ) -> tuple[Any, Iterator[HouseholdChunk], str | None]:
    """What to close at the end, the upload's household chunks (read as they are asked for)
    and the scheduler's address. A header (or Parquet schema) without an item's column is
    refused at once, and so is a CSV dialect that cannot be told from the header and the first
    records (see inputs/csv.py). From here on the job's provenance is of its body and these
    households together."""
    if upload.parquet:
        closer, chunks = upload.file, _parquet_chunks(state, upload)
    else:
        closer, chunks = _csv_chunks(state, upload, declared or DeclaredDialect())
    assert state.layout is not None
    if state.layout.weight_column is None:
        state.defaults = (households.weights_notice(None),)
    address = households.scheduler_for(state.spec.engine, state.rows_total, settings,
                                       state.locator)
    state.engine = "local" if address is None else "cluster"
    with state.lock:
        state.provenance = of_job(state.spec, upload.sha256)
    return closer, chunks, address


def _csv_chunks(state: JobState, upload: Upload, declared: DeclaredDialect
                ) -> tuple[io.TextIOWrapper, Iterator[HouseholdChunk]]:
    """A CSV upload's text and chunks: read by pyarrow where the scan allows, else (and from
    the first block pyarrow does not read by the rules) by the reference reader."""
    from ..inputs.columnar import Columns, csv_household_chunks
    text = io.TextIOWrapper(upload.file, encoding="utf-8-sig", newline="")
    header, records, separator, reason = stream_header(iter(text), declared)
    layout = csv_layout(header, state.axis, state.locator, needs_income=state.job.needs_income)
    dialect, reader = stream_dialect(records, separator, reason, declared,
                                     layout.numeric_columns)
    state.layout = layout = replace(layout, dialect=dialect)
    state.rows_total = max(0, upload.lines - 1)
    rows = state.job.chunk_rows
    if not upload.scan.columnar:
        return text, csv_chunks(reader, layout, rows, state.count)

    def reference(done: int) -> Iterator[HouseholdChunk]:
        """The reference reader from the row after ``done`` (the upload read again)."""
        text.seek(0)
        again = DeclaredDialect(dialect.separator, dialect.decimal)
        records = stream_header(iter(text), again)[1]
        for _ in islice(records, done):
            pass
        return csv_chunks(records, layout, rows, state.count, first_row=done + 1)

    upload.file.seek(0)
    columns = Columns(layout.items, layout.id_column, layout.expenditure_column,
                      layout.weight_column)
    return text, csv_household_chunks(upload.file, columns, len(layout.header),
                                      dialect.delimiter, dialect.mark, rows, reference,
                                      state.count)


def _parquet_chunks(state: JobState, upload: Upload) -> Iterator[HouseholdChunk]:
    """A Parquet upload's chunks; its columns checked at once (``#column=<name>``)."""
    from ..inputs.columnar import parquet_chunks, parquet_columns, parquet_file
    pf = parquet_file(upload.file, upload.size)
    columns, unused = parquet_columns(pf.schema_arrow, state.axis.ids,
                                      needs_income=state.job.needs_income,
                                      reserved=RESERVED_COLUMNS)
    names = list(pf.schema_arrow.names)
    state.locator.csv = CsvRows(columns={n: j + 1 for j, n in enumerate(names)},
                                item_columns=[j + 1 for j in columns.items], parquet=True)
    state.layout = CsvLayout(header=names, items=columns.items, id_column=columns.id_column,
                             expenditure_column=columns.expenditure_column,
                             weight_column=columns.weight_column, unused=unused)
    state.rows_total = int(pf.metadata.num_rows)
    return parquet_chunks(pf, columns, state.job.chunk_rows, upload.size, state.count)


def answer_for(state: JobState, media: str) -> households.CsvAnswer | households.ParquetAnswer:
    """The writer of a job's answer in the negotiated format."""
    assert state.layout is not None
    args = (state.job, state.labels, state.layout.expenditure_column is not None,
            state.axis.ids)
    if media == "parquet":
        return households.ParquetAnswer(*args, metadata=parquet_metadata(state.provenance))
    return households.CsvAnswer(*args)


def stream(state: JobState, chunks: Iterator[HouseholdChunk], closer: Any, scheduler: Any,
           settings: Settings, answer: households.CsvAnswer | households.ParquetAnswer, *,
           reject: bool = False) -> Generator[str | bytes, None, None]:
    """The answer of a job, chunk by chunk; progress goes to the job as it is made. An error
    once the answer has begun ends it with the writer's error record (and fails the job)
    rather than cutting it; with ``reject`` (nothing sent yet) the error is raised.

    ``scheduler`` is None (this process) or a connected Dask client, closed at the end.
    """
    job = state.job
    try:
        yield answer.head()
        for result in households.evaluate(job, chunks, scheduler, settings):
            state.acc.add(result)
            if result.size:
                yield answer.rows(result)
        if reject and state.acc.skipped.count:
            state.fail("failed", f"{state.acc.skipped.count} row(s) break a rule and bad_rows "
                       "is reject: no result was given")
        else:
            state.finish()
        yield answer.end()
    except GeneratorExit:
        state.fail("cancelled", "the client stopped reading the answer")
        raise
    except Exception as exc:
        message = _failure(exc)
        state.fail("failed", message)
        if reject:
            raise
        yield answer.error(message)
    finally:
        state.fail("cancelled", "the answer was not read to the end")
        if closer is not None:
            closer.close()
        if scheduler is not None:
            scheduler.close()


def _failure(exc: Exception) -> str:
    """What ended a job: a located problem's first error, or the exception."""
    if isinstance(exc, RequestProblem) and exc.errors:
        first = exc.errors[0]
        return f"{first.pointer}: {first.detail}" if first.pointer else first.detail
    return f"{type(exc).__name__}: {exc}"


def parquet_metadata(provenance: Provenance) -> dict[str, str]:
    """The provenance and the caution, as a Parquet answer's key-value metadata."""
    return {"dualcost-version": provenance.version,
            "dualcost-input-digest": provenance.input_digest, "dualcost-caution": CAUTION}


def run_to_file(state: JobState, chunks: Iterator[HouseholdChunk], scheduler: Any,
                settings: Settings, answer: households.CsvAnswer | households.ParquetAnswer
                ) -> Any:
    """All or nothing (bad_rows=reject): the whole answer into a temporary file first; a bad
    row refuses the upload, each named by its cell."""
    out = tempfile.SpooledTemporaryFile(max_size=SPOOL_MEMORY_BYTES)
    for piece in stream(state, chunks, None, scheduler, settings, answer, reject=True):
        out.write(piece.encode("utf-8") if isinstance(piece, str) else piece)
    if state.acc.skipped.count:
        out.close()
        raise RequestProblem([state.locator.row_error(p) for p in state.acc.skipped.listed[:20]])
    out.seek(0)
    return out


def file_pieces(out: Any, *, text: bool) -> Iterator[str | bytes]:
    """A finished answer's file, 64 KiB at a time (as text for CSV)."""
    source = io.TextIOWrapper(out, encoding="utf-8", newline="") if text else out
    try:
        while piece := source.read(1 << 16):
            yield piece
    finally:
        source.close()
