"""Household batches: one price change (or a series) applied to many households at once.

- ``POST /v1/household-indices`` (householdIndices): JSON in; JSON out, or CSV with
  ``?format=csv`` or ``Accept: text/csv``. Bad rows fail the request by default, naming them.
- Household jobs, for large CSV files: ``POST /v1/household-jobs`` (createHouseholdJob) takes the
  same JSON without households and answers 201 with the job; ``POST
  /v1/household-jobs/{id}/households`` (householdIndicesFromCsv) takes the CSV (or Parquet) and
  streams the results back as CSV (or Parquet), chunk by chunk, while ``GET
  /v1/household-jobs/{id}`` (getHouseholdJob) reports progress and, at the end, the distribution
  summaries and the rows skipped and why; ``GET /v1/household-jobs/{id}/results``
  (getHouseholdJobResults) gives a finished job's answer again, from any worker.
"""

from __future__ import annotations

import asyncio
import inspect
import io
import itertools
from collections.abc import Generator, Iterator
from typing import Annotated, Any, Literal

import anyio
from fastapi import APIRouter, Request
from fastapi.responses import Response, StreamingResponse
from starlette.concurrency import run_in_threadpool
from starlette.types import Receive, Scope, Send

from ..deps import settings_of
from ..inputs.csv import CSV_REQUEST_BODY, DecimalParam, DeclaredDialect, SeparatorParam
from ..operations import households, job_intake, jobs
from ..operations.answers import SCALE_RATIO, scale_headers
from ..problems import PROBLEM_MEDIA_TYPE, JobConflict
from ..provenance import Provenance, of_body
from ..render import (
    CSV_ANSWER,
    CSV_CONTENT_TYPE,
    PARQUET_MEDIA_TYPE,
    Format,
    ProvenanceQuery,
    csv_response,
    csv_stream,
    format_query,
    json_response,
    negotiate,
    parquet_stream,
    provenance_headers,
    trailed,
)
from ..routing import JsonRoute
from ..schemas.households import (
    HouseholdIndicesRequest,
    HouseholdIndicesResponse,
    HouseholdJobOut,
    HouseholdJobSpec,
)

router = APIRouter(route_class=JsonRoute, prefix="/v1", tags=["households"])

PROBLEM_RESPONSES: dict[int | str, dict[str, Any]] = {
    422: {"description": "The request breaks a rule (RFC 9457 problem details); a bad household "
                         "row is named by its position or CSV record."},
    413: {"description": "The body is larger than DUALCOST_MAX_BODY_BYTES, or there are more "
                         "households than DUALCOST_MAX_HOUSEHOLDS."},
    503: {"description": "The Dask cluster asked for is not configured here or cannot be "
                         "reached."},
}
OFFERS: tuple[Format, ...] = ("json", "csv")
FormatParam = Annotated[Literal["json", "csv"] | None, format_query(OFFERS)]
#: A job's answer: CSV (the default) or Parquet.
JOB_OFFERS: tuple[Format, ...] = ("csv", "parquet")
NO_JOB = {"description": "No such job (or it belongs to another API key)."}


#: The scale of a CSV answer's figures, in a header (a JSON answer has it as ``scale``).
SCALE_HEADERS = scale_headers(SCALE_RATIO)


def _store(request: Request) -> jobs.JobStore:
    return request.app.state.jobs


class _JobAnswer(StreamingResponse):
    """A job's streamed answer (CSV or Parquet) that ends the job's stream as soon as the
    answer ends.

    When the client goes away, Starlette stops sending but leaves the stream (a generator
    that computes in the compute threads) to be collected whenever that happens; until then
    the job would count as running, holding its slot, and its upload's file would stay open.
    Here the job is marked cancelled at once and the stream is closed (after the chunk it may
    be computing), which runs its clean-up. The stream has yielded its first piece (the CSV
    header) before: closing a generator that has not started would skip its clean-up.
    """

    def __init__(self, state: jobs.JobState, pieces: Generator[Any, None, None],
                 headers: dict[str, str], provenance: Provenance, trailer: bool,
                 fmt: Format) -> None:
        first = next(pieces)
        body: Iterator[Any] = itertools.chain([first], pieces)
        if trailer and fmt == "csv":
            body = trailed(body, provenance)
        media = CSV_CONTENT_TYPE if fmt == "csv" else PARQUET_MEDIA_TYPE
        super().__init__(body, media_type=media,
                         headers={**headers, **provenance_headers(provenance)})
        self.state, self.pieces = state, pieces

    async def __call__(self, scope: Scope, receive: Receive, send: Send) -> None:
        try:
            await super().__call__(scope, receive, send)
        finally:
            with anyio.CancelScope(shield=True):
                await run_in_threadpool(self.state.fail, "cancelled",
                                        "the client stopped reading the answer")
                while inspect.getgeneratorstate(self.pieces) == inspect.GEN_RUNNING:
                    # a chunk is computing in a thread
                    await anyio.sleep(0.01)
                self.pieces.close()


@router.post("/household-indices", operation_id="householdIndices",
             summary="Cost-of-living indices for many households at once, with distribution "
                     "summaries",
             response_model=HouseholdIndicesResponse,
             responses={**PROBLEM_RESPONSES, 200: CSV_ANSWER})
def household_indices(body: HouseholdIndicesRequest, request: Request,
                      format: FormatParam = None,
                      provenance: ProvenanceQuery = "headers") -> Response:
    """Apply one price change, or a series, to every household: each gets its own model,
    calibrated to its base shares (and income, for non-homothetic families), and the answer
    gives per household the formula indices, the Konüs index, compensating and equivalent
    variation and each formula's bias; then the democratic and plutocratic aggregates
    (Prais 1959), weighted quantiles and the share of households above each aggregate.
    Where a household's model is outside its regular region at a period's prices, its model
    figures there are null (model_regular false, with the reasons) and the summaries leave
    it out. Cobb-Douglas, CES and Stone-Geary are evaluated over all households at once. Bad
    rows fail the request naming each one (rows from 1), unless bad_rows is skip. With
    detail headline, the answer leaves out the rows per household (households null; as CSV,
    the summary table, one row per period and index) and says so (detail, left_out; the
    headers Dualcost-Detail and Dualcost-Left-Out)."""
    fmt = negotiate(request, OFFERS, format)
    outcome = households.run(body, settings_of(request))
    left_out = households.headline_left_out(outcome)
    if fmt == "csv" and left_out:
        header, rows = households.summary_table(outcome)
        return csv_response(header, rows, provenance=of_body(body),
                            trailer=provenance == "trailer",
                            headers={"Dualcost-Skipped-Rows": str(outcome.result.skipped.count),
                                     "Dualcost-Detail": "headline",
                                     "Dualcost-Left-Out": " ".join(left_out)} | SCALE_HEADERS)
    if fmt == "csv":
        return csv_stream(households.csv_pieces(outcome), provenance=of_body(body),
                          trailer=provenance == "trailer",
                          headers={"Dualcost-Skipped-Rows": str(outcome.result.skipped.count)}
                          | SCALE_HEADERS)
    return json_response(households.document(outcome, rows_as_text=True),
                         provenance=of_body(body))


@router.post("/household-jobs", operation_id="createHouseholdJob", status_code=201,
             summary="Create a household job; then upload its households as CSV",
             response_model=HouseholdJobOut, responses={**PROBLEM_RESPONSES, 503: {
                 "description": "The Dask cluster asked for cannot be used, or the job table "
                                "has no room (job-table-full, with Retry-After)."}})
def create_household_job(body: HouseholdJobSpec, request: Request) -> Response:
    """The same fields as householdIndices without the households. The answer is the job
    (status waiting_for_households); send its households as CSV to the households link.
    Bad rows are skipped and reported unless bad_rows is reject. Jobs are kept in the
    service's database: any worker answers for them, and they outlive a restart; with API
    keys, a job is seen only with the key that created it."""
    negotiate(request, ("json",))
    state = jobs.create(body, settings_of(request), _store(request), jobs.owner_of(request))
    document, origin = state.view()
    return json_response(document, provenance=origin, status_code=201,
                         headers={"Location": f"/v1/household-jobs/{state.id}"})


#: A job's upload and answer: CSV or Parquet.
_BINARY = {"schema": {"type": "string", "format": "binary"}}
JOB_UPLOAD: dict[str, Any] = {"requestBody": {
    "required": True, "content": CSV_REQUEST_BODY["requestBody"]["content"]
    | {PARQUET_MEDIA_TYPE: _BINARY}}}
JOB_ANSWER: dict[str, Any] = {"content": CSV_ANSWER["content"] | {PARQUET_MEDIA_TYPE: _BINARY}}


@router.post("/household-jobs/{job_id}/households", operation_id="householdIndicesFromCsv",
             summary="Upload a job's households as CSV or Parquet; the results stream back as "
                     "CSV or Parquet",
             responses={**PROBLEM_RESPONSES, 200: JOB_ANSWER, 404: NO_JOB,
                        409: {"description": "The job already has its households."}},
             openapi_extra=JOB_UPLOAD)
async def household_indices_from_csv(job_id: str, request: Request,
                                     provenance: ProvenanceQuery = "headers",
                                     separator: SeparatorParam = None,
                                     decimal: DecimalParam = None) -> Response:
    """One CSV record per household: a column per item id holding the base share, and the
    optional columns household (an id), expenditure (income; required for non-homothetic
    families) and weight. The answer streams one CSV row per household and period as
    chunks are done (row: from 1 after the header; record: the line the household's record
    starts on; model_regular, irregular_reasons and irregular_items; empty cells where the
    model's figures are withheld); GET the job meanwhile for progress, and at the end for the
    distribution summaries and the rows skipped and why. A missing item column is refused
    at once (422, #row=1). With bad_rows reject, the answer comes only when every row has
    passed, else a 422 naming each bad row by RFC 7111 fragment (#cell=row,column).
    Fields may be quoted (RFC 4180); the separator (comma, semicolon or tab) and the decimal
    mark are declared with separator and decimal, or detected from the header and the first
    1000 rows: the answer's Dualcost-Input-Separator and Dualcost-Input-Decimal headers, and
    the job's notices, say which. The same columns may come as a Parquet file
    (Content-Type application/vnd.apache.parquet; a cell is named #row=<row>&column=<name>,
    a column #column=<name>), and the answer is Parquet with Accept:
    application/vnd.apache.parquet. An error once the answer has begun ends it with an error
    record (a last CSV row #dualcost-error, or dualcost-error in the Parquet file's
    metadata) and fails the job. The answer's Dualcost-Input-Digest is the job's: of its body
    and these households together."""
    fmt = negotiate(request, JOB_OFFERS)
    settings = settings_of(request)
    store = _store(request)
    owner = jobs.owner_of(request)
    state = await run_in_threadpool(jobs.restore, store, job_id, owner, settings)
    declared = DeclaredDialect(separator, decimal)
    trailer = provenance == "trailer"
    if job_intake.streams(state, jobs.upload_media(request), settings):
        # Computed while it arrives; the slot is taken at the first block (job_intake).
        streamed = await _streamed(state, request, store, declared)
        if isinstance(streamed, jobs.Upload):  # fallen back: read again as if spooled
            try:
                state = await run_in_threadpool(jobs.restore, store, job_id, owner, settings)
            except BaseException:
                streamed.file.close()
                raise
            return await _spooled_answer(state, streamed, request, fmt, declared, trailer)
        upload, closer = streamed
        try:
            await run_in_threadpool(job_intake.arrived, state, upload)
        except BaseException:
            closer.close()
            await run_in_threadpool(state.release)
            raise
        return await run_in_threadpool(
            _JobAnswer, state, jobs.answer_of_stored(state, closer, jobs.answer_for(state, fmt)),
            _job_headers(state, upload), state.provenance, trailer, fmt)
    # Not streamed (Parquet, reject, a cluster): the job takes its slot only once its
    # households have arrived; a stalled upload holds none (and is ended by the body's read
    # time).
    await run_in_threadpool(store.upload_started, job_id)
    try:
        upload = await jobs.spool(request)
    finally:
        await run_in_threadpool(store.upload_ended, job_id)
    return await _spooled_answer(state, upload, request, fmt, declared, trailer)


async def _streamed(state: jobs.JobState, request: Request, store: jobs.JobStore,
                    declared: DeclaredDialect) -> jobs.Upload | tuple[jobs.Upload, Any]:
    """A CSV upload spooled while a worker thread computes it (job_intake): the upload and
    what to close once answered; or, where the computation cannot stand, the spooled upload
    alone, the job released (waiting) to be read again."""
    from ..inputs.columnar import UploadScan

    scan, file = UploadScan(), job_intake.spool_file()
    source = job_intake.Growing(file)
    live = jobs.Upload(file, 0, "", 0, False, scan)
    worker = job_intake.start(state, live, source, store, declared, settings_of(request))
    await run_in_threadpool(store.upload_started, state.id)
    try:
        upload = await jobs.spool(request, file=file, scan=scan, growing=source)
    except BaseException:
        source.abort()
        with anyio.CancelScope(shield=True):
            await asyncio.wait([worker])
            worker.exception()
            file.close()
            await run_in_threadpool(_released, state)
        raise
    finally:
        with anyio.CancelScope(shield=True):
            await run_in_threadpool(store.upload_ended, state.id)
    source.end()
    try:
        await worker
    except (job_intake.Fallback, job_intake.Aborted):
        await run_in_threadpool(_released, state)
        upload.file = io.BufferedRandom(file)
        upload.file.seek(0)
        return upload
    return upload, file


def _released(state: jobs.JobState) -> None:
    """A job claimed by an upload that did not stand: waiting again, nothing kept."""
    if state.status == "running":
        state.release()


def _job_headers(state: jobs.JobState, upload: jobs.Upload) -> dict[str, str]:
    headers = {"Link": f'</v1/household-jobs/{state.id}>; rel="monitor"',
               "Content-Location": f"/v1/household-jobs/{state.id}"} | SCALE_HEADERS
    if state.layout is not None and not upload.parquet:
        headers |= state.layout.dialect.headers()
    return headers


async def _spooled_answer(state: jobs.JobState, upload: jobs.Upload, request: Request,
                          fmt: Format, declared: DeclaredDialect, trailer: bool) -> Response:
    """The answer to an upload that has fully arrived: the job takes its slot, then its
    households are read chunk by chunk and computed."""
    settings, store = settings_of(request), _store(request)
    try:
        await run_in_threadpool(store.claim, state)
    except BaseException:
        upload.file.close()
        raise
    closer = None
    try:
        # The header or schema and, for a dialect to detect, the first records: off the event
        # loop.
        closer, chunks, address = await run_in_threadpool(
            jobs.open_upload, state, upload, settings, declared)
        # Connect before answering, so that an unreachable cluster is a 503, not a cut stream.
        scheduler = None if address is None else await run_in_threadpool(households.connect,
                                                                          address)
    except BaseException:
        (upload.file if closer is None else closer).close()
        await run_in_threadpool(state.release)
        raise
    headers = _job_headers(state, upload)
    answer = jobs.answer_for(state, fmt)
    if state.bad_rows == "skip":
        # The answer's first piece is written to the database: off the event loop too.
        return await run_in_threadpool(
            _JobAnswer, state, jobs.stream(state, chunks, closer, scheduler, settings, answer),
            headers, state.provenance, trailer, fmt)
    try:
        out = await run_in_threadpool(jobs.run_to_file, state, chunks, scheduler, settings,
                                      answer)
    finally:
        closer.close()
    if fmt == "parquet":
        return parquet_stream(jobs.file_pieces(out, text=False),  # type: ignore[arg-type]
                              provenance=state.provenance, headers=headers)
    return csv_stream(jobs.file_pieces(out, text=True),  # type: ignore[arg-type]
                      provenance=state.provenance, trailer=trailer, headers=headers)


@router.get("/household-jobs/{job_id}", operation_id="getHouseholdJob",
            summary="A household job's progress; at the end its summaries and skipped rows",
            response_model=HouseholdJobOut,
            responses={404: {**NO_JOB, "content": {PROBLEM_MEDIA_TYPE: {}}}})
def get_household_job(job_id: str, request: Request) -> Response:
    """Status (waiting_for_households, running, done, failed, cancelled), rows read and
    done, rows skipped by reason with the first 100 named by CSV record and column, and when
    done the democratic and plutocratic aggregates, quantiles and shares above them."""
    negotiate(request, ("json",))
    document, origin = _store(request).view(job_id, jobs.owner_of(request))
    return json_response(document, provenance=origin)


@router.get("/household-jobs/{job_id}/results", operation_id="getHouseholdJobResults",
            summary="A finished household job's results as CSV or Parquet, from any worker",
            responses={200: JOB_ANSWER, 404: NO_JOB,
                       409: {"description": "The job has not finished (status is not done)."}})
def get_household_job_results(job_id: str, request: Request,
                              provenance: ProvenanceQuery = "headers") -> Response:
    """The answer of a job that is done, as its upload streamed it (the same rows and
    columns), read back from the service's database: any worker of any instance answers it,
    after a restart too. The results are kept as columns (Arrow IPC), whichever format the
    upload answered in, and written as CSV, or with Accept: application/vnd.apache.parquet as
    the Parquet file the upload gives (a row group per chunk, the provenance and caution in
    its metadata), by the same writers: the same bytes. A job that is still waiting or
    running, or that failed or was cancelled (whose partial answer is not kept; its error says
    why it ended), is a 409."""
    fmt = negotiate(request, JOB_OFFERS)
    store = _store(request)
    row = store.record(job_id, jobs.owner_of(request))
    if row.status != "done":
        raise JobConflict(f"household job {job_id} is {row.status}: its results are given "
                          "once it is done")
    origin = Provenance(row.input_digest)
    pieces = jobs.stored_answer(store, job_id, row.input_digest, row.spec, fmt,
                                settings_of(request))
    if fmt == "parquet":
        return parquet_stream(pieces,  # type: ignore[arg-type]
                              provenance=origin, headers=dict(SCALE_HEADERS))
    return csv_stream(pieces, provenance=origin,  # type: ignore[arg-type]
                      trailer=provenance == "trailer", headers=dict(SCALE_HEADERS))


@router.delete("/household-jobs/{job_id}", operation_id="deleteHouseholdJob", status_code=204,
               summary="Forget a household job that is not running",
               responses={404: NO_JOB, 409: {"description": "The job is running."}})
def delete_household_job(job_id: str, request: Request) -> Response:
    _store(request).remove(job_id, jobs.owner_of(request))
    return Response(status_code=204)
