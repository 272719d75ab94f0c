"""Household batches: one price change (or a series) applied to many households at once.

- ``POST /v1/household-indices`` (householdIndices): JSON in; JSON out, or CSV with
  ``?format=csv`` or ``Accept: text/csv``. Bad rows fail the request by default, naming them.
- Household jobs, for large CSV files: ``POST /v1/household-jobs`` (createHouseholdJob) takes the
  same JSON without households and answers 201 with the job; ``POST
  /v1/household-jobs/{id}/households`` (householdIndicesFromCsv) takes the CSV and streams the
  results back as CSV, chunk by chunk, while ``GET /v1/household-jobs/{id}`` (getHouseholdJob)
  reports progress and, at the end, the distribution summaries and the rows skipped and why.
"""

from __future__ import annotations

from typing import Annotated, Any, Literal

from fastapi import APIRouter, Query, Request
from fastapi.responses import Response
from starlette.concurrency import run_in_threadpool

from ..deps import settings_of
from ..inputs.csv import CSV_REQUEST_BODY
from ..operations import households, jobs
from ..operations.answers import SCALE_RATIO
from ..problems import PROBLEM_MEDIA_TYPE
from ..render import CSV_ANSWER, csv_stream, json_response, negotiate
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
FormatParam = Annotated[Literal["json", "csv"] | None, Query(
    description="Answer format: json, or csv (one row per household and period). Default: "
                "from the Accept header, else json.")]


#: The scale of a CSV answer's figures, in a header (a JSON answer has it as ``scale``).
SCALE_HEADERS = {"Dualcost-Scale": "; ".join(f"{k}: {v}" for k, v in SCALE_RATIO.items())}


def _store(request: Request) -> jobs.JobStore:
    return request.app.state.jobs


@router.post("/household-indices", operation_id="householdIndices",
             summary="Cost-of-living indices for many households at once, with distribution "
                     "summaries",
             response_model=HouseholdIndicesResponse,
             responses={**PROBLEM_RESPONSES, 200: CSV_ANSWER})
def household_indices(body: HouseholdIndicesRequest, request: Request,
                      format: FormatParam = None) -> Response:
    """Apply one price change, or a series, to every household: each gets its own model,
    calibrated to its base shares (and income, for non-homothetic families), and the answer
    gives per household the formula indices, the Konüs index, compensating and equivalent
    variation and each formula's bias; then the democratic and plutocratic aggregates
    (Prais 1959), weighted quantiles and the share of households above each aggregate.
    Where a household's model is outside its regular region at a period's prices, its model
    figures there are null (model_regular false, with the reasons) and the summaries leave
    it out. Cobb-Douglas, CES and Stone-Geary are evaluated over all households at once. Bad
    rows fail the request naming each one (rows from 1), unless bad_rows is skip."""
    outcome = households.run(body, settings_of(request))
    if negotiate(request, format) == "csv":
        return csv_stream(households.csv_pieces(outcome), headers={
            "Dualcost-Skipped-Rows": str(outcome.result.skipped.count)} | SCALE_HEADERS)
    return json_response(households.document(outcome))


@router.post("/household-jobs", operation_id="createHouseholdJob", status_code=201,
             summary="Create a household job; then upload its households as CSV",
             response_model=HouseholdJobOut, responses=PROBLEM_RESPONSES)
def create_household_job(body: HouseholdJobSpec, request: Request) -> Response:
    """The same fields as householdIndices without the households. The answer is the job
    (status waiting_for_households); send its households as CSV to the households link.
    Bad rows are skipped and reported unless bad_rows is reject. Jobs live in this process's
    memory (see the service documentation)."""
    state = jobs.create(body, settings_of(request), _store(request))
    return json_response(state.snapshot(), status_code=201,
                         headers={"Location": f"/v1/household-jobs/{state.id}"})


@router.post("/household-jobs/{job_id}/households", operation_id="householdIndicesFromCsv",
             summary="Upload a job's households as CSV; the results stream back as CSV",
             responses={**PROBLEM_RESPONSES, 200: CSV_ANSWER, 404: {"description": "No such job."},
                        409: {"description": "The job already has its households."}},
             openapi_extra=CSV_REQUEST_BODY)
async def household_indices_from_csv(job_id: str, request: Request) -> Response:
    """One CSV record per household: a column per item id holding the base share, and the
    optional columns household (an id), expenditure (income; required for non-homothetic
    families) and weight. The answer streams one CSV row per household and period as
    chunks are done (row: from 1 after the header; record: the line the household's record
    starts on; model_regular, irregular_reasons and irregular_items; empty cells where the
    model's figures are withheld); GET the job meanwhile for progress, and at the end for the
    distribution summaries and the rows skipped and why. A missing item column is refused
    at once (422, #row=1). With bad_rows reject, the answer comes only when every row has
    passed, else a 422 naming each bad row by RFC 7111 fragment (#cell=row,column)."""
    settings = settings_of(request)
    state = _store(request).get(job_id)
    state.claim()
    text = None
    try:
        file, lines = await jobs.spool(request)
        text, reader, address = jobs.open_upload(state, file, lines, settings)
        # Connect before answering, so that an unreachable cluster is a 503, not a cut stream.
        scheduler = None if address is None else await run_in_threadpool(households.connect,
                                                                          address)
    except BaseException:
        if text is not None:
            text.close()
        state.release()
        raise
    headers = {"Link": f'</v1/household-jobs/{state.id}>; rel="monitor"',
               "Content-Location": f"/v1/household-jobs/{state.id}"} | SCALE_HEADERS
    if state.bad_rows == "skip":
        return csv_stream(jobs.stream(state, reader, text, scheduler, settings), headers=headers)
    try:
        out = await run_in_threadpool(jobs.run_to_file, state, reader, scheduler, settings)
    finally:
        text.close()
    return csv_stream(jobs.file_pieces(out), headers=headers)


@router.get("/household-jobs/{job_id}", operation_id="getHouseholdJob",
            summary="A household job's progress; at the end its summaries and skipped rows",
            response_model=HouseholdJobOut,
            responses={404: {"description": "No such job in this process.",
                             "content": {PROBLEM_MEDIA_TYPE: {}}}})
def get_household_job(job_id: str, request: Request) -> Response:
    """Status (waiting_for_households, running, done, failed, cancelled), rows read and
    done, rows skipped by reason with the first 100 named by CSV record and column, and when
    done the democratic and plutocratic aggregates, quantiles and shares above them."""
    return json_response(_store(request).get(job_id).snapshot())


@router.delete("/household-jobs/{job_id}", operation_id="deleteHouseholdJob", status_code=204,
               summary="Forget a household job that is not running",
               responses={404: {"description": "No such job in this process."},
                          409: {"description": "The job is running."}})
def delete_household_job(job_id: str, request: Request) -> Response:
    _store(request).remove(job_id)
    return Response(status_code=204)
