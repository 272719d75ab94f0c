"""Household batches: one price change (or a series) applied to many households at once.

- ``POST /v1/household-indices`` (householdIndices): JSON in; JSON out, or CSV with
  ``?format=csv`` or ``Accept: text/csv``. Bad rows fail the request by default, naming them.
- Household jobs, for large CSV files: ``POST /v1/household-jobs`` (createHouseholdJob) takes the
  same JSON without households and answers 201 with the job; ``POST
  /v1/household-jobs/{id}/households`` (householdIndicesFromCsv) takes the CSV and streams the
  results back as CSV, chunk by chunk, while ``GET /v1/household-jobs/{id}`` (getHouseholdJob)
  reports progress and, at the end, the distribution summaries and the rows skipped and why.

Jobs live in the memory of the process that created them: with several worker processes
(``DUALCOST_WORKERS``) a client must reach the same process for all of a job's requests (one
worker, or sticky routing). The upload is spooled to a temporary file (in memory up to 8 MiB,
then on disk) and read back chunk by chunk, so the households are never held twice.
"""

# No ``from __future__ import annotations`` here: the request body's annotation carries the
# examples loaded when the router is built, and FastAPI must see it as an object, not a string.

import codecs
import csv
import io
import tempfile
import threading
import uuid
from collections import OrderedDict
from collections.abc import Iterator
from datetime import datetime, timezone
from typing import Annotated, Any, Literal

from fastapi import APIRouter, Body, Query, Request
from fastapi.responses import JSONResponse, Response, StreamingResponse
from starlette.concurrency import run_in_threadpool
from starlette.exceptions import HTTPException

from ...config import Settings
from ...core.errors import EngineUnavailable, InvalidInput, InvalidRows
from ...core.households import (
    Accumulator,
    ChunkResult,
    HouseholdChunk,
    HouseholdJob,
    HouseholdResults,
    chunks_of,
    collect,
    evaluate_locally,
)
from ..examples import load_examples
from ..observability import computing
from ..problems import PROBLEM_MEDIA_TYPE, FieldError, RequestProblem
from ..routing import JsonRoute
from ..schemas.common import ItemAxis
from ..schemas.comparison import CAUTION
from ..schemas.households import (
    CsvLayout,
    HouseholdIndicesRequest,
    HouseholdIndicesResponse,
    HouseholdJobOut,
    HouseholdJobSpec,
    csv_chunks,
    csv_header_text,
    csv_layout,
    csv_result_header,
    csv_result_rows,
    notices_json,
    results_json,
    row_detail,
    skipped_json,
    summary_json,
)
from ..tabular import CSV_MEDIA_TYPE, CSV_REQUEST_BODY, wants_csv

PROBLEM_RESPONSES: dict[int | str, dict[str, Any]] = {
    422: {"description": "The request breaks a rule (RFC 9457 problem details); a bad household "
                         "row is named by its position or CSV record.",
          "content": {PROBLEM_MEDIA_TYPE: {}}},
    400: {"description": "The body is not valid JSON (RFC 9457 problem details).",
          "content": {PROBLEM_MEDIA_TYPE: {}}},
    413: {"description": "The body is larger than DUALCOST_MAX_BODY_BYTES, or there are more "
                         "households than DUALCOST_MAX_HOUSEHOLDS.",
          "content": {PROBLEM_MEDIA_TYPE: {}}},
    503: {"description": "The Dask cluster asked for is not configured here or cannot be "
                         "reached.", "content": {PROBLEM_MEDIA_TYPE: {}}},
}
CSV_ANSWER = {"content": {CSV_MEDIA_TYPE: {"schema": {"type": "string"}}}}
SPOOL_MEMORY_BYTES = 8 * 1024 * 1024
MAX_IN_FLIGHT = 8
FormatParam = Annotated[Literal["json", "csv"] | None, Query(
    description="Answer format: json, or csv (one row per household and period). Default: "
                "from the Accept header, else json.")]


# -- where the work runs ----------------------------------------------------------------------


def _scheduler(engine: str, rows: int | None, settings: Settings) -> str | None:
    """The Dask scheduler address to use, or None for this process."""
    if engine == "local":
        return None
    if engine == "cluster":
        if not settings.dask_scheduler:
            raise RequestProblem([FieldError("/engine", "no Dask cluster is configured for this "
                                             "service (DUALCOST_DASK_SCHEDULER); use engine "
                                             "local or auto")])
        return settings.dask_scheduler
    if settings.dask_scheduler and rows is not None and rows >= settings.dask_min_households:
        return settings.dask_scheduler
    return None


def _evaluate(job: HouseholdJob, chunks: Iterator[HouseholdChunk], scheduler: Any,
              settings: Settings) -> Iterator[ChunkResult]:
    if scheduler is None:
        return evaluate_locally(job, chunks)
    from ...engines.dask import evaluate_on_cluster

    return evaluate_on_cluster(job, chunks, scheduler,
                               chunks_per_task=max(1, settings.dask_rows_per_task // job.chunk_rows),
                               max_in_flight=MAX_IN_FLIGHT)


def _cluster_failure(exc: Exception) -> HTTPException:
    return HTTPException(503, f"The Dask cluster cannot be used: {exc}")


def _is_cluster_failure(exc: Exception) -> bool:
    return isinstance(exc, EngineUnavailable)


def _connect(address: str) -> Any:
    """A Dask client for the job's stream; an unreachable scheduler is a 503."""
    from ...engines.dask import connect

    try:
        return connect(address)[0]
    except EngineUnavailable as exc:
        raise _cluster_failure(exc) from exc


# -- household jobs ---------------------------------------------------------------------------


class HouseholdJobState:
    """One job's spec, progress and outcome; read by GET while a stream writes to it."""

    def __init__(self, spec: HouseholdJobSpec, job: HouseholdJob, axis: ItemAxis,
                 quantiles: tuple[float, ...]) -> None:
        self.id = uuid.uuid4().hex
        self.created = datetime.now(timezone.utc).isoformat(timespec="seconds")
        self.spec = spec
        self.job = job
        self.axis = axis
        self.quantiles = quantiles
        self.labels = spec.period_labels()
        self.bad_rows = spec.bad_rows or "skip"
        self.status = "waiting_for_households"
        self.engine: str | None = None
        self.rows_read = 0
        self.rows_total: int | None = None
        self.acc = Accumulator(job)
        self.layout: CsvLayout | None = None
        self.summary: list[dict[str, Any]] | None = None
        self.error: str | None = None
        self.lock = threading.Lock()

    def claim(self) -> None:
        with self.lock:
            if self.status != "waiting_for_households":
                raise HTTPException(409, f"household job {self.id} has already received its "
                                    f"households (status {self.status}); create a new job")
            self.status = "running"

    def release(self) -> None:
        """The upload was refused before any work: the job waits for a corrected one."""
        with self.lock:
            self.status = "waiting_for_households"
            self.rows_read = 0
            self.rows_total = None
            self.engine = None
            self.acc = Accumulator(self.job)

    def count(self, n: int) -> None:
        self.rows_read += n

    def finish(self) -> None:
        summary = summary_json(self.acc.summary(self.quantiles), self.labels)
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

    def describe(self, p: Any) -> tuple[str, str]:
        assert self.layout is not None
        return self.layout.pointer(p, self.axis), self.layout.detail(p, self.axis)

    def snapshot(self) -> dict[str, Any]:
        with self.lock:
            acc = self.acc
            total = self.rows_total
            done = self.status == "done"
            return {
                "id": self.id,
                "status": self.status,
                "created": self.created,
                "family": self.job.family,
                "periods": self.labels,
                "engine": self.engine,
                "bad_rows": self.bad_rows,
                "progress": {
                    "rows_read": self.rows_read,
                    "rows_total": total,
                    "households_done": acc.households,
                    "rows_skipped": acc.skipped.count,
                    "chunks_done": acc.chunks,
                    "fraction": 1.0 if done else (min(1.0, self.rows_read / total) if total
                                                  else None),
                },
                "skipped": skipped_json(acc.skipped, self.describe),
                "summary": self.summary,
                "unused_columns": [] if self.layout is None else self.layout.unused,
                "error": self.error,
                "notices": notices_json(acc.notices()) if done else notices_json(self.job.notices),
                "links": {"self": f"/v1/household-jobs/{self.id}",
                          "households": f"/v1/household-jobs/{self.id}/households"},
                "caution": CAUTION,
            }


class JobStore:
    """The jobs of this process, oldest first; when full, the oldest job not running goes."""

    def __init__(self, limit: int) -> None:
        self.limit = limit
        self.jobs: OrderedDict[str, HouseholdJobState] = OrderedDict()
        self.lock = threading.Lock()

    def add(self, state: HouseholdJobState) -> None:
        with self.lock:
            while len(self.jobs) >= self.limit:
                idle = next((k for k, j in self.jobs.items() if j.status != "running"), None)
                if idle is None:
                    raise HTTPException(503, f"{self.limit} household jobs are running; try "
                                        "again when one has finished")
                del self.jobs[idle]
            self.jobs[state.id] = state

    def get(self, job_id: str) -> HouseholdJobState:
        state = self.jobs.get(job_id)
        if state is None:
            raise HTTPException(404, f"no household job {job_id!r} in this process (jobs live "
                                "in the memory of the worker that created them)")
        return state

    def remove(self, job_id: str) -> None:
        with self.lock:
            state = self.get(job_id)
            if state.status == "running":
                raise HTTPException(409, "the job is running; delete it when it has finished")
            del self.jobs[job_id]


async def _spool_csv(request: Request) -> tuple[Any, int]:
    """The request body in a temporary file, checked to be UTF-8; and its number of lines."""
    media = request.headers.get("content-type", "").split(";")[0].strip().lower()
    if media != CSV_MEDIA_TYPE:
        raise RequestProblem([FieldError("#/header/content-type", f"must be {CSV_MEDIA_TYPE} for "
                                         f"this operation, got {media or 'nothing'!r}")])
    spool = tempfile.SpooledTemporaryFile(max_size=SPOOL_MEMORY_BYTES)
    decoder = codecs.getincrementaldecoder("utf-8")()
    lines, size, last = 0, 0, b"\n"
    try:
        async for piece in request.stream():
            if not piece:
                continue
            try:
                decoder.decode(piece)
            except UnicodeDecodeError as exc:
                raise RequestProblem([FieldError("", f"the CSV body is not UTF-8 text (byte "
                                                 f"{size + exc.start})")]) from None
            spool.write(piece)
            size += len(piece)
            lines += piece.count(b"\n")
            last = piece[-1:]
        decoder.decode(b"", final=True)
    except UnicodeDecodeError:
        spool.close()
        raise RequestProblem([FieldError("", "the CSV body ends inside a UTF-8 character")]) from None
    except BaseException:
        spool.close()
        raise
    if last != b"\n":
        lines += 1
    spool.seek(0)
    return spool, lines


def _stream(state: HouseholdJobState, reader: Iterator[list[str]], text: io.TextIOWrapper | None,
            scheduler: Any, settings: Settings, *, reject: bool = False) -> Iterator[str]:
    """The CSV answer of a job, chunk by chunk; progress goes to the job as it is made.

    ``scheduler`` is None (this process) or a connected Dask client, closed at the end.
    """
    job = state.job
    assert state.layout is not None
    with_income = state.layout.expenditure_column is not None
    try:
        yield csv_header_text(csv_result_header(job, with_income))
        chunks = csv_chunks(reader, state.layout, state.axis, job.chunk_rows, state.count)
        for result in _evaluate(job, chunks, scheduler, settings):
            state.acc.add(result)
            if result.size:
                yield csv_result_rows(result, job, state.labels, with_income)
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


def _run_to_file(state: HouseholdJobState, reader: Iterator[list[str]], scheduler: Any,
                 settings: Settings) -> Any:
    """All or nothing (bad_rows=reject): the whole answer into a temporary file first."""
    out = tempfile.SpooledTemporaryFile(max_size=SPOOL_MEMORY_BYTES, mode="w+", encoding="utf-8",
                                        newline="")
    for piece in _stream(state, reader, None, scheduler, settings, reject=True):
        out.write(piece)
    out.seek(0)
    return out


def _csv_pieces(result: HouseholdResults, labels: list[str], rows: int = 4096) -> Iterator[str]:
    """A finished batch as CSV, a block of households at a time."""
    job = result.job
    with_income = result.expenditure is not None
    yield csv_header_text(csv_result_header(job, with_income))
    for start in range(0, result.rows.size, rows):
        part = slice(start, start + rows)
        block = ChunkResult(
            rows=result.rows[part], ids=None if result.ids is None else result.ids[part],
            weights=result.weights[part],
            expenditure=None if result.expenditure is None else result.expenditure[part],
            values={name: v[:, part] for name, v in result.values.items()}, problems=())
        yield csv_result_rows(block, job, labels, with_income)


def _file_pieces(out: Any) -> Iterator[str]:
    try:
        while piece := out.read(1 << 16):
            yield piece
    finally:
        out.close()


# -- the router -------------------------------------------------------------------------------


def router(settings: Settings) -> APIRouter:
    r = APIRouter(route_class=JsonRoute, prefix="/v1", tags=["households"])
    examples = load_examples(settings.examples_dir, "householdIndices")
    job_examples = {name: {"summary": ex["summary"],
                           "value": {k: v for k, v in ex["value"].items() if k != "households"}}
                    for name, ex in examples.items()}
    store = JobStore(settings.max_household_jobs)

    @r.post(
        "/household-indices",
        operation_id="householdIndices",
        summary="Cost-of-living indices for many households at once, with distribution summaries",
        response_model=HouseholdIndicesResponse,
        responses={**PROBLEM_RESPONSES, 200: CSV_ANSWER},
    )
    def household_indices(
        request: Annotated[HouseholdIndicesRequest, Body(openapi_examples=examples)],  # type: ignore[arg-type]
        http: Request,
        format: FormatParam = None,
    ) -> Response:
        """Apply one price change, or a series, to every household: each gets its own model,
        calibrated to its base shares (and income, for non-homothetic families), and the answer
        gives per household the formula indices, the Konüs index, compensating and equivalent
        variation and each formula's bias; then the democratic and plutocratic aggregates
        (Prais 1959), weighted quantiles and the share of households above each aggregate.
        Cobb-Douglas, CES and Stone-Geary are evaluated over all households at once. Bad rows
        fail the request naming each one, unless bad_rows is skip."""
        if len(request.households) > settings.max_households:
            raise RequestProblem([FieldError("/households", f"has {len(request.households)} "
                                             f"households; the limit for one request is "
                                             f"{settings.max_households}: send larger batches as "
                                             "a household job (CSV)")], slug="payload-too-large")
        job, axis, quantiles = request.build(max_items=settings.max_items,
                                             max_tree_depth=settings.max_tree_depth,
                                             chunk_rows=settings.household_chunk_rows)
        shares, incomes, weights, ids = request.arrays(axis)
        if incomes is None and job.needs_income:
            raise RequestProblem([FieldError("/households/0/expenditure", f"household row 0: the "
                                             f"{job.family} model is not homothetic and needs "
                                             "each household's income (expenditure)")])
        scheduler = _scheduler(request.engine, len(request.households), settings)
        labels = request.period_labels()
        try:
            with computing("householdIndices", settings):
                chunks = chunks_of(job, shares, expenditure=incomes, weights=weights, ids=ids)
                result = collect(job, _evaluate(job, chunks, scheduler, settings),
                                 on_bad_rows=request.bad_rows or "reject", quantiles=quantiles,
                                 engine="local" if scheduler is None else "cluster")
        except InvalidRows as exc:
            raise RequestProblem([
                FieldError(request.problem_pointer(p, axis),
                           row_detail(p, request.households[p.row].id))
                for p in exc.problems]) from exc
        except InvalidInput as exc:
            raise RequestProblem([FieldError("/households", exc.rule)]) from exc
        except Exception as exc:
            if _is_cluster_failure(exc):
                raise _cluster_failure(exc) from exc
            raise
        if wants_csv(http, format):
            return StreamingResponse(_csv_pieces(result, labels),
                                     media_type=f"{CSV_MEDIA_TYPE}; charset=utf-8",
                                     headers={"Dualcost-Skipped-Rows": str(result.skipped.count)})
        return JSONResponse(results_json(result, request, axis, labels))

    @r.post(
        "/household-jobs",
        operation_id="createHouseholdJob",
        summary="Create a household job; then upload its households as CSV",
        status_code=201,
        response_model=HouseholdJobOut,
        responses=PROBLEM_RESPONSES,
    )
    def create_household_job(
        spec: Annotated[HouseholdJobSpec, Body(openapi_examples=job_examples)],  # type: ignore[arg-type]
    ) -> JSONResponse:
        """The same fields as householdIndices without the households. The answer is the job
        (status waiting_for_households); send its households as CSV to the households link.
        Bad rows are skipped and reported unless bad_rows is reject. Jobs live in this process's
        memory (see the service documentation)."""
        job, axis, quantiles = spec.build(max_items=settings.max_items,
                                          max_tree_depth=settings.max_tree_depth,
                                          chunk_rows=settings.household_chunk_rows)
        if spec.engine == "cluster":
            _scheduler("cluster", None, settings)
        state = HouseholdJobState(spec, job, axis, quantiles)
        store.add(state)
        return JSONResponse(state.snapshot(), status_code=201,
                            headers={"Location": f"/v1/household-jobs/{state.id}"})

    @r.post(
        "/household-jobs/{job_id}/households",
        operation_id="householdIndicesFromCsv",
        summary="Upload a job's households as CSV; the results stream back as CSV",
        responses={**PROBLEM_RESPONSES, 200: CSV_ANSWER, 404: {"description": "No such job."},
                   409: {"description": "The job already has its households."}},
        openapi_extra=CSV_REQUEST_BODY,
    )
    async def household_indices_from_csv(job_id: str, request: Request) -> Response:
        """One CSV record per household: a column per item id holding the base share, and the
        optional columns household (an id), expenditure (income; required for non-homothetic
        families) and weight. The answer streams one CSV row per household and period as
        chunks are done; GET the job meanwhile for progress, and at the end for the
        distribution summaries and the rows skipped and why. A missing item column is refused
        at once (422, #row=1). With bad_rows reject, the answer comes only when every row has
        passed, else a 422 naming each bad row by RFC 7111 fragment (#cell=row,column)."""
        state = store.get(job_id)
        state.claim()
        text = None
        try:
            spool, lines = await _spool_csv(request)
            text = io.TextIOWrapper(spool, encoding="utf-8-sig", newline="")
            reader = csv.reader(text)
            try:
                header = next(reader)
            except StopIteration:
                raise RequestProblem([FieldError("#row=1", "the CSV is empty: it needs a header "
                                                 "row")]) from None
            state.layout = csv_layout(header, state.axis, needs_income=state.job.needs_income)
            state.rows_total = max(0, lines - 1)
            address = _scheduler(state.spec.engine, state.rows_total, settings)
            state.engine = "local" if address is None else "cluster"
            # Connect before answering, so that an unreachable cluster is a 503, not a cut stream.
            scheduler = None if address is None else await run_in_threadpool(_connect, address)
        except BaseException:
            if text is not None:
                text.close()
            state.release()
            raise
        headers = {"Link": f'</v1/household-jobs/{state.id}>; rel="monitor"',
                   "Content-Location": f"/v1/household-jobs/{state.id}"}
        media = f"{CSV_MEDIA_TYPE}; charset=utf-8"
        if state.bad_rows == "skip":
            return StreamingResponse(_stream(state, reader, text, scheduler, settings),
                                     media_type=media, headers=headers)
        try:
            out = await run_in_threadpool(_run_to_file, state, reader, scheduler, settings)
        finally:
            text.close()
        if state.acc.skipped.count:
            out.close()
            raise RequestProblem([FieldError(*state.describe(p))
                                  for p in state.acc.skipped.listed[:20]])
        return StreamingResponse(_file_pieces(out), media_type=media, headers=headers)

    @r.get(
        "/household-jobs/{job_id}",
        operation_id="getHouseholdJob",
        summary="A household job's progress; at the end its summaries and skipped rows",
        response_model=HouseholdJobOut,
        responses={404: {"description": "No such job in this process.",
                         "content": {PROBLEM_MEDIA_TYPE: {}}}},
    )
    def get_household_job(job_id: str) -> JSONResponse:
        """Status (waiting_for_households, running, done, failed, cancelled), rows read and
        done, rows skipped by reason with the first 100 named by CSV record and column, and when
        done the democratic and plutocratic aggregates, quantiles and shares above them."""
        return JSONResponse(store.get(job_id).snapshot())

    @r.delete(
        "/household-jobs/{job_id}",
        operation_id="deleteHouseholdJob",
        summary="Forget a household job that is not running",
        status_code=204,
        responses={404: {"description": "No such job in this process."},
                   409: {"description": "The job is running."}},
    )
    def delete_household_job(job_id: str) -> Response:
        store.remove(job_id)
        return Response(status_code=204)

    return r
