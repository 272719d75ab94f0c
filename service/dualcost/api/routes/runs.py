"""Saved runs (``save=true`` on any operation; see :mod:`dualcost.api.runs`):

- ``GET /v1/runs/{id}`` (getRun): the run, its canonical input and its saved answer;
- ``GET /v1/runs`` (listRuns): the caller's runs, newest first, by operation and time, paged;
- ``POST /v1/runs/{id}/rerun`` (rerunRun): the saved input run again on this version, and the
  differences from the saved answer figure by figure (JSON, or CSV: one row per difference).

With access control on, a run is seen only with the key that saved it (any other: 404).
"""

from __future__ import annotations

from datetime import datetime, timezone
from typing import Annotated, Literal

from fastapi import APIRouter, Query, Request
from fastapi.responses import Response
from starlette.concurrency import run_in_threadpool

from ..operations import reruns
from ..operations.job_store import owner_of
from ..problems import RequestProblem
from ..provenance import Provenance
from ..render import (
    CSV_ANSWER,
    Format,
    ProvenanceQuery,
    csv_response,
    format_query,
    json_response,
    negotiate,
)
from ..routing import JsonRoute
from ..runs import RunStore, run_json, run_summary
from ..schemas.runs import RerunOut, RunOut, RunPageOut

router = APIRouter(route_class=JsonRoute, prefix="/v1", tags=["runs"])
NO_RUN = {"description": "No saved run with this id (or it belongs to another API key)."}
OFFERS: tuple[Format, ...] = ("json", "csv")
FormatParam = Annotated[Literal["json", "csv"] | None, format_query(OFFERS)]


def _store(request: Request) -> RunStore:
    return request.app.state.runs


@router.get("/runs/{run_id}", operation_id="getRun", summary="A saved run",
            response_model=RunOut, responses={404: NO_RUN})
def get_run(run_id: str, request: Request) -> Response:
    """The run saved under this id: the operation, when, which version computed it, the
    canonical input and its digest, the request as sent, and the answer as saved."""
    negotiate(request, ("json",))
    row = _store(request).get(run_id, owner_of(request))
    return json_response(run_json(row), provenance=Provenance(row.input_digest, row.version))


def _time(value: str | None, name: str) -> datetime | None:
    if value is None:
        return None
    try:
        t = datetime.fromisoformat(value.replace("Z", "+00:00"))
    except ValueError:
        raise RequestProblem.at(f"#/query/{name}", "must be a time in ISO 8601 "
                                "(2026-12-02T13:00:00Z, or a date)") from None
    return t.astimezone(timezone.utc).replace(tzinfo=None) if t.tzinfo else t


@router.get("/runs", operation_id="listRuns", summary="Saved runs, newest first",
            response_model=RunPageOut)
def list_runs(request: Request,
              operation: Annotated[str | None, Query(description="Only this operationId.")] = None,
              since: Annotated[str | None, Query(description="Saved at or after (ISO 8601, "
                                                 "UTC unless a zone is given).")] = None,
              until: Annotated[str | None, Query(description="Saved before.")] = None,
              limit: Annotated[int, Query(ge=1, le=500)] = 50,
              before: Annotated[int | None, Query(ge=1, description="The cursor of the "
                                                  "next page (from `next`).")] = None) -> Response:
    """The runs saved with the caller's key (all runs with access control off), newest first;
    `next` leads to the older ones."""
    negotiate(request, ("json",))
    rows = _store(request).page(owner_of(request), operation=operation,
                                since=_time(since, "since"), until=_time(until, "until"),
                                before=before, limit=limit)
    following = None
    if len(rows) == limit:
        query = {k: v for k, v in request.query_params.items() if k != "before"}
        query["before"] = str(rows[-1].serial)
        following = "/v1/runs?" + "&".join(f"{k}={v}" for k, v in query.items())
    return json_response({"runs": [run_summary(r) for r in rows], "next": following})


@router.post("/runs/{run_id}/rerun", operation_id="rerunRun",
             summary="Run a saved input again on this version; the differences figure by figure",
             response_model=RerunOut, responses={404: NO_RUN, 200: CSV_ANSWER})
async def rerun_run(run_id: str, request: Request, format: FormatParam = None,
                    provenance: ProvenanceQuery = "headers") -> Response:
    """A reproducibility check: the saved request is answered again by this version (as the
    same key), and the new answer compared with the saved one, each number with the number at
    the same place (JSON Pointer, or CSV cell), every other value by equality; `identical` when
    nothing differs. A new answer that is a problem is given in `current.problem`."""
    fmt = negotiate(request, OFFERS, format)
    row = await run_in_threadpool(_store(request).get, run_id, owner_of(request))
    new = await reruns.run_again(request.app, request, row)
    found = (reruns.differences(row, new) if 200 <= new.status < 300 else None)
    doc = reruns.document(row, new, found)
    origin = Provenance(row.input_digest)
    if fmt == "csv":
        return csv_response(reruns.COLUMNS, reruns.table(doc), provenance=origin,
                            trailer=provenance == "trailer")
    return json_response(doc, provenance=origin)
