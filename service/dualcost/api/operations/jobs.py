"""Household jobs, for large files: create a job with the JSON of a household batch less its
households, upload the households as CSV or Parquet and read the results back as CSV or Parquet
while they are computed; the job reports its progress and, at the end, the summaries and the rows skipped.

Jobs are kept in the database (:class:`~.job_store.JobStore`, :mod:`dualcost.storage`): any
worker of any instance answers for any job, and a job outlives a restart. The worker that
receives the households computes them and writes, a few chunks at a time and each time in one
transaction, the chunks' results and the job's progress; at the end the summaries. The results
are kept as columns whatever format the upload answers in (each chunk's as an Arrow IPC
stream: :mod:`.job_results`): GET .../results writes them again as CSV or Parquet with the
writers that wrote the upload's answer (:func:`stored_answer`), so that any worker gives
either, the same bytes. A job that fails after its answer has begun ends that answer with an
error record whose reason is the job's ``error``. A CSV upload is computed while it
arrives (:mod:`.job_intake`: spooled to disk and hashed, read block by block as it is
written, its answer then written from the stored columns); a Parquet upload (whose footer
comes last), and one with bad_rows reject or for a cluster, is spooled to a temporary file (in
memory up to 8 MiB, then on disk) and read back chunk by chunk once it has arrived, so the
households are never held twice.

**Slots.** A job takes a slot of the table, one that newer jobs may not take from it, once it
runs: a CSV upload computed while it arrives when its first block is ready, any other once its
households have fully arrived. Before that the job is still waiting; a stalled upload is ended
by the body's read time (408), which leaves the job waiting again. **Owners.** With
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
import time
import uuid
from collections.abc import Generator, Iterator, Sequence
from dataclasses import dataclass, replace
from datetime import datetime, timezone
from itertools import chain, islice
from typing import TYPE_CHECKING, Any, Protocol

import orjson
from fastapi import Request

from ...config import Settings
from ...core.households import Accumulator, ChunkResult, HouseholdChunk, HouseholdJob
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
from ..problems import RequestProblem
from ..provenance import Provenance, of_job
from ..render import PARQUET_MEDIA_TYPE, parquet_metadata
from ..schemas.common import CAUTION
from ..schemas.households import HouseholdJobSpec
from . import households, job_results
from .answers import SCALE_RATIO, notices_json
from .job_store import FINISHED, JobStore, Piece, already_received, owner_of

if TYPE_CHECKING:
    from ..inputs.columnar import UploadScan



class Growing(Protocol):
    """What :func:`spool` tells the reader of a file it writes (job_intake.Growing; named
    here by its one method, so that this module does not import job_intake, which imports
    it)."""

    def wrote(self, n: int) -> None: ...


SPOOL_MEMORY_BYTES = 8 * 1024 * 1024
#: Households whose results are held before they are stored (with the progress, in one
#: transaction) and then sent; and the longest they are held, in seconds. A transaction per
#: chunk cost as much time as the chunks' computation (households_speed.py).
STORE_ROWS = 16_384
STORE_SECONDS = 1.0

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
        self.pieces = 0  # pieces of the answer written to the store

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

    def written(self, pieces: Sequence[Piece] = ()) -> None:
        """Progress made (and pieces of the answer, if any): into the store."""
        if self.store is not None:
            self.store.progress(self, pieces)

    def finish(self) -> None:
        summary = households.summary_json(self.acc.summary(self.quantiles), self.labels)
        with self.lock:
            self.summary = summary
            self.status = "done"
            # The per-household columns served the summaries; the job keeps only counts now.
            self.acc.parts = []
        if self.store is not None:
            try:
                self.store.finish(self)
            except Exception:
                # Not recorded as done (the database failed): still running, for the failure
                # that follows to end it with the reason, as the answer's last record does.
                with self.lock:
                    self.status, self.summary = "running", None
                raise

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


async def spool(request: Request, *, file: Any = None, scan: UploadScan | None = None,
                growing: Growing | None = None) -> Upload:
    """The request body in a temporary file; a CSV checked to be UTF-8 (and scanned for what
    only the reference reader reads), its number of lines; the SHA-256 of the bytes. With
    ``growing``, each piece is told to the reader of ``file`` once written (and scanned before:
    :mod:`.job_intake`)."""
    # pyarrow is imported with the first upload, not with the service: the other operations
    # never need it.
    from ..inputs.columnar import UploadScan

    parquet = upload_media(request)
    if file is None:
        file = tempfile.SpooledTemporaryFile(max_size=SPOOL_MEMORY_BYTES)
    scan = UploadScan() if scan is None else scan
    decoder = codecs.getincrementaldecoder("utf-8")()
    lines, size, last = 0, 0, b"\n"
    digest = hashlib.sha256()
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
            if growing is not None:
                growing.wrote(len(piece))
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
        closer, chunks = csv_chunks_of(state, upload, declared or DeclaredDialect())
    assert state.layout is not None
    if state.layout.weight_column is None:
        state.defaults = (households.weights_notice(None),)
    address = households.scheduler_for(state.spec.engine, state.rows_total, settings,
                                       state.locator)
    state.engine = "local" if address is None else "cluster"
    with state.lock:
        state.provenance = of_job(state.spec, upload.sha256)
    state.written()
    return closer, chunks, address


def csv_chunks_of(state: JobState, upload: Upload, declared: DeclaredDialect
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


def head_piece(state: JobState, answer: households.CsvAnswer | households.ParquetAnswer
               ) -> Piece:
    """The first piece kept of a job's answer: its CSV header, and what the answer's writers
    need to write it again from the stored columns (JSON)."""
    csv_head = households.CsvAnswer(answer.job, answer.labels, answer.with_income, answer.items)
    return Piece(csv_head.head(), orjson.dumps({"with_income": answer.with_income}))


def stream(state: JobState, chunks: Iterator[HouseholdChunk], closer: Any, scheduler: Any,
           settings: Settings, answer: households.CsvAnswer | households.ParquetAnswer, *,
           reject: bool = False) -> Generator[str | bytes, None, None]:
    """The answer of a job, chunk by chunk; progress goes to the job as it is made. Whatever
    the answer's format, the chunks' results are stored as columns (:mod:`.job_results`) with
    the job's progress, a few chunks to a transaction (:class:`_Held`), before their rows are
    sent. An error once the answer has begun ends it with the writer's error record and
    fails the job with the same reason (the job's ``error``) rather than cutting it; before
    that, or with ``reject`` (nothing sent yet), the error is raised (a lost database is then
    a 503).

    ``scheduler`` is None (this process) or a connected Dask client, closed at the end.
    """
    begun = False
    held = _Held()
    try:
        # The header and the progress are stored (one transaction) before anything is sent.
        state.written([head_piece(state, answer)])
        begun = True
        yield answer.head()
        for result in households.evaluate(state.job, chunks, scheduler, settings):
            state.acc.add(result)
            if held.add(result):
                yield from _stored_and_sent(state, held.take(), answer)
        if held.results:  # the job's end writes the progress
            yield from _stored_and_sent(state, held.take(), answer)
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
        if reject or not begun:
            raise
        # The rows computed before the error are answered (not kept: the job has failed).
        for result in held.take():
            yield answer.rows(result)
        yield answer.error(message)
    finally:
        state.fail("cancelled", "the answer was not read to the end")
        if closer is not None:
            closer.close()
        if scheduler is not None:
            scheduler.close()


def answer_of_stored(state: JobState, closer: Any,
                     answer: households.CsvAnswer | households.ParquetAnswer
                     ) -> Generator[str | bytes, None, None]:
    """The answer of a job computed while its upload arrived (:mod:`.job_intake`): written
    from its stored columns (past the stored header) by the answer's writer, the bytes
    :func:`stream` gives; then the job is done. Errors and a client that goes end it as
    :func:`stream` does."""
    begun = False
    try:
        yield answer.head()
        begun = True
        assert state.store is not None
        pieces = state.store.pieces(state.id)
        next(pieces, None)  # the stored header
        for piece in pieces:
            assert piece.data is not None
            yield answer.rows(job_results.decode(piece.data))
        state.finish()
        yield answer.end()
    except GeneratorExit:
        state.fail("cancelled", "the client stopped reading the answer")
        raise
    except Exception as exc:
        message = _failure(exc)
        state.fail("failed", message)
        if not begun:
            raise
        yield answer.error(message)
    finally:
        state.fail("cancelled", "the answer was not read to the end")
        closer.close()


class _Held:
    """The chunks' results held to be stored together: until STORE_ROWS households are held
    or STORE_SECONDS have passed (then possibly none: the progress alone is stored)."""

    def __init__(self) -> None:
        self.results: list[ChunkResult] = []
        self.rows, self.since = 0, time.monotonic()

    def add(self, result: ChunkResult) -> bool:
        """Hold a result; whether the held ones are to be stored now."""
        if result.size:
            self.results.append(result)
            self.rows += result.size
        return self.rows >= STORE_ROWS or time.monotonic() - self.since >= STORE_SECONDS

    def take(self) -> list[ChunkResult]:
        out, self.results = self.results, []
        self.rows, self.since = 0, time.monotonic()
        return out


def _stored_and_sent(state: JobState, results: list[ChunkResult],
                     answer: households.CsvAnswer | households.ParquetAnswer
                     ) -> Iterator[str | bytes]:
    """Results stored as columns with the job's progress (one transaction), then their rows."""
    periods = state.job.n_periods
    state.written([Piece(None, job_results.encode(r, periods)) for r in results])
    for result in results:
        yield answer.rows(result)


def stored_answer(store: JobStore, job_id: str, input_digest: str, spec: str, media: str,
                  settings: Settings) -> Iterator[str | bytes]:
    """A finished job's answer read back from the database, as CSV or Parquet: written from
    the stored columns by the writer of the upload's answer, rebuilt from the job's
    specification (the same bytes as the upload's answer). A job kept before its results were
    kept as columns (CSV pieces) is given as that CSV, or as Parquet converted from it."""
    pieces = store.pieces(job_id)
    head = next(pieces, None)
    metadata = parquet_metadata(Provenance(input_digest))
    if head is None or head.data is None:  # CSV pieces (before revision 0003)
        texts = (p.text or "" for p in chain([] if head is None else [head], pieces))
        return households.parquet_of_csv(texts, metadata) if media == "parquet" else texts
    state = state_of(HouseholdJobSpec.model_validate_json(spec), settings)
    with_income = bool(orjson.loads(head.data)["with_income"])
    args = (state.job, state.labels, with_income, state.axis.ids)
    answer: households.CsvAnswer | households.ParquetAnswer = (
        households.ParquetAnswer(*args, metadata=metadata) if media == "parquet"
        else households.CsvAnswer(*args))

    def written() -> Iterator[str | bytes]:
        yield answer.head()
        for piece in pieces:
            assert piece.data is not None
            yield answer.rows(job_results.decode(piece.data))
        yield answer.end()

    return written()


def _failure(exc: Exception) -> str:
    """What ended a job: a located problem's first error, or the exception."""
    if isinstance(exc, RequestProblem) and exc.errors:
        first = exc.errors[0]
        return f"{first.pointer}: {first.detail}" if first.pointer else first.detail
    return f"{type(exc).__name__}: {exc}"


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
