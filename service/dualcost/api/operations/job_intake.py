"""A CSV household upload computed while it arrives.

The body is spooled to a file on disk and hashed as it arrives (as :func:`.jobs.spool` does);
a worker thread (never the event loop) reads the same file through :class:`Growing`, which waits
for bytes not yet written, and computes the upload's chunks as pyarrow's blocks become complete
(:func:`.jobs.open_upload`'s reading), storing each few chunks' results in the database with
the job's progress, as :func:`.jobs.stream` does. When the body ends only its last block is
left to compute; the answer is then written from the stored columns (:func:`answer_of_stored`:
the same bytes as an answer computed after the upload, as GET .../results gives them). Memory
stays bounded by the read block and the chunks held before they are stored, not by the file.

**Slot.** The job takes its compute slot (:meth:`~.job_store.JobStore.claim`) when its first
block is ready: an upload that stalls before that holds none, and one that stalls after is
ended by the transport's body-read timeout (api/transport.py), which releases the job.

**Fallback.** Where the computation cannot stand as the answer (the scan finds a quote or a
number that may lie below the floating-point range, which only the reference reader reads;
the header or dialect is refused; anything fails), what was computed is discarded (the job is
released, its stored pieces dropped) and the upload is read again from the spooled file after
it has ended, exactly as an upload that was not streamed (:func:`.jobs.open_upload`), with the
same row numbers and problems. Parquet (whose footer comes last), uploads with bad_rows reject
(all or nothing) and those that may go to a Dask cluster are not streamed.
"""

from __future__ import annotations

import asyncio
import io
import os
import tempfile
import threading
from typing import TYPE_CHECKING, Any

from ...config import Settings
from ..inputs.csv import DeclaredDialect
from ..provenance import of_job
from . import households, job_results
from .job_store import JobStore, Piece

if TYPE_CHECKING:
    from .jobs import JobState, Upload


class Aborted(Exception):
    """The upload ended badly (not UTF-8, cut, the client gone): the worker stops reading."""


class Growing(io.RawIOBase):
    """A file being written by another thread, read from the start: a read waits for bytes
    not yet written until the writer says the file is complete (:meth:`end`) or abandoned
    (:meth:`abort`, then :class:`Aborted`)."""

    def __init__(self, file: Any) -> None:
        super().__init__()
        self.file, self.size, self.pos = file, 0, 0
        self.ended = self.aborted = False
        self.cond = threading.Condition()

    def wrote(self, n: int) -> None:
        with self.cond:
            self.size += n
            self.cond.notify_all()

    def end(self) -> None:
        with self.cond:
            self.ended = True
            self.cond.notify_all()

    def abort(self) -> None:
        with self.cond:
            self.aborted = True
            self.cond.notify_all()

    def readable(self) -> bool:
        return True

    def seekable(self) -> bool:
        return True

    def seek(self, offset: int, whence: int = 0) -> int:
        if whence != io.SEEK_SET:
            raise io.UnsupportedOperation("only absolute positions")
        self.pos = offset
        return offset

    def tell(self) -> int:
        return self.pos

    def readinto(self, buffer: Any) -> int:
        with self.cond:
            while self.pos >= self.size and not self.ended and not self.aborted:
                self.cond.wait()
            if self.aborted:
                raise Aborted
            n = min(len(buffer), self.size - self.pos)
        if n <= 0:
            return 0
        data = os.pread(self.file.fileno(), n, self.pos)
        buffer[:len(data)] = data
        self.pos += len(data)
        return len(data)


class Fallback(Exception):
    """What was computed while the upload arrived cannot be the answer (module docstring)."""


def spool_file() -> Any:
    """The file an upload is spooled to while it is read: on disk, unbuffered (every write
    is readable at once through :class:`Growing`)."""
    return tempfile.TemporaryFile(buffering=0)


def streams(state: JobState, upload_is_parquet: bool, settings: Settings) -> bool:
    """Whether the upload is computed while it arrives (module docstring)."""
    return (settings.stream_csv_uploads and not upload_is_parquet and state.bad_rows == "skip"
            and households.scheduler_for(state.spec.engine, None, settings,
                                         state.locator) is None
            and not (state.spec.engine == "auto" and settings.dask_scheduler))


def compute(state: JobState, upload: Upload, source: Growing, store: JobStore,
            declared: DeclaredDialect, settings: Settings) -> None:
    """In a worker thread: the upload's chunks read as they arrive, computed, and their
    results stored with the job's progress (claiming the job's slot at the first block);
    :class:`Fallback` where the result cannot stand (module docstring)."""
    from . import jobs

    reader = io.BufferedReader(source, buffer_size=1 << 16)
    try:
        # The header and the first records (a dialect to detect): awaited without a turn.
        _, chunks = jobs.csv_chunks_of(state, _Live(upload, reader),  # type: ignore[arg-type]
                                       declared)
        if not upload.scan.columnar:
            raise Fallback
        gate = _gate(settings.compute_threads)
        gate.acquire()
        try:
            _computed(state, _checked(chunks, upload, gate), store, settings)
        finally:
            gate.release()
        if not upload.scan.columnar:  # a pattern across the last two pieces
            raise Fallback
    except (Fallback, Aborted):
        raise
    except Exception as exc:
        raise Fallback from exc


def _computed(state: JobState, chunks: Any, store: JobStore, settings: Settings) -> None:
    """The chunks computed and their results stored, a few to a transaction; the job's slot
    claimed at the first result."""
    from . import jobs

    held = jobs._Held()
    first = True
    for result in households.evaluate(state.job, chunks, None, settings):
        if first:
            store.claim(state)
            state.engine = "local"
            state.written([jobs.head_piece(state, jobs.answer_for(state, "csv"))])
            first = False
        state.acc.add(result)
        if held.add(result):
            _store(state, held.take())
    if first:  # no household: the answer is made after the upload, as before
        raise Fallback
    _store(state, held.take())


def start(state: JobState, upload: Upload, source: Growing, store: JobStore,
          declared: DeclaredDialect, settings: Settings) -> asyncio.Future[None]:
    """:func:`compute` in a thread of its own (it waits for the upload's bytes: it takes no
    compute thread of the service's pool while it waits; its computing takes one of
    :func:`_gate`'s turns), and the future that the event loop awaits for its end."""
    loop = asyncio.get_running_loop()
    done: asyncio.Future[None] = loop.create_future()

    def told(exc: BaseException | None) -> None:
        if not done.done():
            done.set_result(None) if exc is None else done.set_exception(exc)

    def run() -> None:
        try:
            compute(state, upload, source, store, declared, settings)
        except BaseException as exc:  # told to the event loop, which decides
            loop.call_soon_threadsafe(told, exc)
        else:
            loop.call_soon_threadsafe(told, None)

    threading.Thread(target=run, name=f"household-job-{state.id}", daemon=True).start()
    return done


_GATES: dict[int, threading.BoundedSemaphore] = {}
_GATES_LOCK = threading.Lock()


def _gate(turns: int) -> threading.BoundedSemaphore:
    """The turns at computing of the uploads computed while they arrive (as many as the
    service's compute threads): held while a chunk is computed and stored, not while the
    upload's bytes are awaited."""
    with _GATES_LOCK:
        return _GATES.setdefault(turns, threading.BoundedSemaphore(max(1, turns)))


def arrived(state: JobState, upload: Upload) -> None:
    """What is known once a computed upload has ended: its rows and digest, stored (the job's
    provenance is now of its body and these households together)."""
    state.rows_total = max(0, upload.lines - 1)
    if state.layout is not None and state.layout.weight_column is None:
        state.defaults = (households.weights_notice(None),)
    with state.lock:
        state.provenance = of_job(state.spec, upload.sha256)
    state.written()


def _checked(chunks: Any, upload: Upload, gate: threading.BoundedSemaphore) -> Any:
    """The chunks while the scan allows pyarrow's reading (it has seen every byte of a block
    before the block can be read); the turn at computing is given up while the next is
    awaited."""
    chunks = iter(chunks)
    while True:
        gate.release()
        try:
            chunk = next(chunks, None)
        finally:
            gate.acquire()
        if chunk is None:
            return
        if not upload.scan.columnar:
            raise Fallback
        yield chunk


def _store(state: JobState, results: list[Any]) -> None:
    periods = state.job.n_periods
    state.written([Piece(None, job_results.encode(r, periods)) for r in results])


class _Live:
    """The upload as :func:`.jobs.csv_chunks_of` reads it: its file is the growing one."""

    def __init__(self, upload: Upload, file: Any) -> None:
        self.file, self.scan, self.upload = file, upload.scan, upload

    @property
    def lines(self) -> int:
        return self.upload.lines
