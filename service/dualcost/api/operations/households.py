"""Many households at once: POST /v1/household-indices (a JSON batch), and what the household
jobs share with it (where the work runs, the summaries, the CSV rows of the answer).

The job common to all households and their rows are translated once
(:mod:`dualcost.api.inputs.households`); the core evaluates the rows chunk by chunk, in this
process or on a Dask cluster (:mod:`dualcost.core.households`), and gathers them; a refused row
is named by its place in the request.
"""

from __future__ import annotations

from collections.abc import Iterable, Iterator, Sequence
from dataclasses import dataclass
from typing import Any

from ...config import Settings
from ...core.households import (
    ChunkResult,
    HouseholdChunk,
    HouseholdJob,
    HouseholdResults,
    PeriodSummary,
    SkipReport,
    chunks_of,
    collect,
    evaluate_locally,
)
from ...core.preferences import Notice
from ..inputs.households import ROW_PLACES, job_of, labels_of, rows_of
from ..inputs.items import ItemAxis
from ..inputs.locator import Locator, Place
from ..observability import computing
from ..problems import RequestProblem
from ..render import csv_line, csv_lines, finite
from ..schemas.common import CAUTION, SIGN_CONVENTION
from ..schemas.households import HouseholdIndicesRequest

#: Where each core argument of a household batch or job is in the request.
PLACES: dict[str, Place] = {
    "items": Place("/items", shape="list"),
    "p0": Place("/base_prices", shape="items", names_item=True),
    "p1": Place("/current_prices", shape="items", names_item=True),
    "family": Place("/model/family"),
    "model": Place("/model"),
    "formulas": Place("/formulas", shape="list"),
    "lloyd_moulton_sigma": Place("/lloyd_moulton_sigma"),
    "quantiles": Place("/quantiles", shape="list"),
    "households": Place("/households"),
    "engine": Place("/engine"),
    "share_unit": Place("/share_unit"),
} | ROW_PLACES
DEFINITIONS = (
    "Per household and period: each formula index and the Konüs index as ratios (1 = no "
    "change); konus is K(u0) = e(p1,u0)/e(p0,u0) at the household's base living standard, "
    "konus_current K(u1) and konus_midpoint at the midpoint standard; current quantities are the "
    "model's demands at current prices and the household's own income, which is held at its "
    "base value; bias_<formula> = 100 (formula - the Konüs index it targets), in index points. "
    "Summaries: democratic = sum a_h P_h / sum a_h, plutocratic = sum a_h m_h P_h / sum a_h m_h "
    "(Prais 1959) with a_h the weight and m_h the income; quantiles of the weighted distribution "
    "(inverted distribution function); share_above_* = weighted share of households whose index "
    "exceeds that aggregate."
)
MAX_IN_FLIGHT = 8


@dataclass(frozen=True)
class Outcome:
    result: HouseholdResults
    axis: ItemAxis
    labels: list[str]
    request: HouseholdIndicesRequest
    locator: Locator


def locator() -> Locator:
    return Locator(PLACES)


# -- where the work runs ----------------------------------------------------------------------


def scheduler_for(engine: str, rows: int | None, settings: Settings, loc: Locator) -> str | None:
    """The Dask scheduler address to use, or None for this process."""
    if engine == "local":
        return None
    if engine == "cluster":
        if not settings.dask_scheduler:
            raise loc.problem("engine", "no Dask cluster is configured for this service "
                              "(DUALCOST_DASK_SCHEDULER); use engine local or auto")
        return settings.dask_scheduler
    if settings.dask_scheduler and rows is not None and rows >= settings.dask_min_households:
        return settings.dask_scheduler
    return None


def evaluate(job: HouseholdJob, chunks: Iterator[HouseholdChunk], scheduler: Any,
             settings: Settings) -> Iterable[ChunkResult]:
    """The chunks' results in order, in this process or on the cluster at ``scheduler``."""
    if scheduler is None:
        return evaluate_locally(job, chunks)
    from ...engines.dask import cluster_evaluator  # Dask is imported on first use only

    return cluster_evaluator(scheduler, max_in_flight=MAX_IN_FLIGHT, chunks_per_task=max(
        1, settings.dask_rows_per_task // job.chunk_rows))(job, chunks)


def connect(address: str) -> Any:
    """A Dask client for a job's stream; an unreachable scheduler is a service problem."""
    from ...engines.dask import connect as connect_to

    return connect_to(address)[0]


# -- a JSON batch -----------------------------------------------------------------------------


def run(request: HouseholdIndicesRequest, settings: Settings) -> Outcome:
    """Every household of the request, with the summaries; a bad row fails the request unless
    ``bad_rows`` is skip."""
    loc = locator()
    if len(request.households) > settings.max_households:
        raise RequestProblem.at("/households", f"has {len(request.households)} households; the "
                                f"limit for one request is {settings.max_households}: send larger "
                                "batches as a household job (CSV)", slug="payload-too-large")
    job, axis, quantiles = job_of(request, loc, max_items=settings.max_items,
                                  max_tree_depth=settings.max_tree_depth,
                                  chunk_rows=settings.household_chunk_rows)
    rows = rows_of(request, axis, loc)
    if rows.incomes is None and job.needs_income:
        raise RequestProblem.at("/households/0/expenditure", f"household row 0: the {job.family} "
                                "model is not homothetic and needs each household's income "
                                "(expenditure)")
    scheduler = scheduler_for(request.engine, len(request.households), settings, loc)
    with computing("householdIndices", settings), loc.translating():
        chunks = chunks_of(job, rows.shares, expenditure=rows.incomes, weights=rows.weights,
                           ids=rows.ids)
        result = collect(job, evaluate(job, chunks, scheduler, settings),
                         on_bad_rows=request.bad_rows or "reject", quantiles=quantiles,
                         engine="local" if scheduler is None else "cluster")
    return Outcome(result, axis, labels_of(request), request, loc)


# -- answers ----------------------------------------------------------------------------------


def summary_json(summary: Sequence[PeriodSummary], labels: Sequence[str]) -> list[dict[str, Any]]:
    return [{
        "period": labels[s.period], "households": s.households, "weight_total": s.weight_total,
        "expenditure_total": s.expenditure_total,
        "compensating_variation_total": s.compensating_variation_total,
        "cv_percent_of_income": s.cv_percent_of_income,
        "indices": [{
            "index": i.index, "democratic": i.democratic, "plutocratic": i.plutocratic,
            "quantiles": [{"probability": p, "value": v} for p, v in i.quantiles],
            "share_above_democratic": i.share_above_democratic,
            "share_above_plutocratic": i.share_above_plutocratic,
            "minimum": i.minimum, "maximum": i.maximum,
        } for i in s.indices],
    } for s in summary]


def skipped_json(report: SkipReport, loc: Locator) -> dict[str, Any]:
    """Rows left out, each with the place of its field."""
    rows = []
    for p in report.listed:
        error = loc.row_error(p)
        rows.append({"row": p.row, "reason": p.code, "pointer": error.pointer,
                     "detail": error.detail})
    return {"count": report.count, "by_reason": dict(report.by_reason), "rows": rows}


def notices_json(notices: Iterable[Notice]) -> list[dict[str, str]]:
    return [{"code": n.code, "message": n.message} for n in notices]


def document(outcome: Outcome) -> dict[str, Any]:
    """The JSON answer as plain data (built directly: thousands of households are common)."""
    res, labels = outcome.result, outcome.labels
    job = res.job
    return finite({
        "family": job.family, "items": outcome.axis.ids, "formulas": list(job.formulas),
        "periods": list(labels), "households": _households(res, labels),
        "summary": summary_json(res.summary, labels),
        "skipped": skipped_json(res.skipped, outcome.locator),
        "engine": res.engine, "chunks": res.chunks, "definitions": DEFINITIONS,
        "sign_convention": SIGN_CONVENTION, "notices": notices_json(res.notices),
        "caution": CAUTION,
    }, "households")


def _households(res: HouseholdResults, labels: Sequence[str]) -> list[dict[str, Any]]:
    job = res.job
    v = {name: col.tolist() for name, col in res.values.items()}
    money = "compensating_variation" in v
    out = []
    for j, row in enumerate(res.rows.tolist()):
        periods = [{
            "period": label,
            "indices": {f: v[f][t][j] for f in job.formulas},
            "konus": v["konus"][t][j], "konus_current": v["konus_current"][t][j],
            "konus_midpoint": v["konus_midpoint"][t][j],
            "compensating_variation": v["compensating_variation"][t][j] if money else None,
            "equivalent_variation": v["equivalent_variation"][t][j] if money else None,
            "cv_percent": v["cv_percent"][t][j],
            "bias_points": {f: v[f"bias_{f}"][t][j] for f in job.formulas},
        } for t, label in enumerate(labels)]
        out.append({"household": None if res.ids is None else res.ids[j], "row": row,
                    "weight": float(res.weights[j]),
                    "expenditure": None if res.expenditure is None else float(res.expenditure[j]),
                    "periods": periods})
    return out


def csv_header(job: HouseholdJob, with_income: bool) -> list[str]:
    return ["household", "row", "period", "weight", "expenditure",
            *job.output_columns(with_income)]


def csv_rows(result: ChunkResult, job: HouseholdJob, labels: Sequence[str],
             with_income: bool) -> str:
    """One CSV line per household and period, in the order of :func:`csv_header`."""
    names = job.output_columns(with_income)
    cols = [result.values[n].tolist() for n in names]
    weights = result.weights.tolist()
    incomes = None if result.expenditure is None else result.expenditure.tolist()

    def lines() -> Iterator[list[Any]]:
        for j, row in enumerate(result.rows.tolist()):
            hid = "" if result.ids is None or result.ids[j] is None else result.ids[j]
            m = None if incomes is None or not with_income else incomes[j]
            for t, label in enumerate(labels):
                yield [hid, row, label, weights[j], m, *(c[t][j] for c in cols)]

    return csv_lines(lines())


def csv_pieces(outcome: Outcome, rows: int = 4096) -> Iterator[str]:
    """A finished batch as CSV, a block of households at a time."""
    result = outcome.result
    job = result.job
    with_income = result.expenditure is not None
    yield csv_line(csv_header(job, with_income))
    for start in range(0, result.rows.size, rows):
        part = slice(start, start + rows)
        block = ChunkResult(
            rows=result.rows[part], ids=None if result.ids is None else result.ids[part],
            weights=result.weights[part],
            expenditure=None if result.expenditure is None else result.expenditure[part],
            values={name: v[:, part] for name, v in result.values.items()}, problems=())
        yield csv_rows(block, job, outcome.labels, with_income)
