"""Many households at once: POST /v1/household-indices (a JSON batch), and what the household
jobs share with it (where the work runs, the summaries, the CSV rows of the answer).

The job common to all households and their rows are translated once
(:mod:`dualcost.api.inputs.households`); the core evaluates the rows chunk by chunk, in this
process or on a Dask cluster (:mod:`dualcost.core.households`), and gathers them; a refused row
is named by its place in the request, numbered from 1 (the n-th household of the list, or of
the CSV after its header).

Where a household's model is outside its regular region at a period's prices, that
household-period's model figures are null (empty CSV cells), ``model_regular`` is false and
``irregular_reasons`` says why; the summaries leave it out, and a notice counts them.
"""

from __future__ import annotations

import csv
import io
from collections.abc import Iterable, Iterator, Sequence
from dataclasses import dataclass
from typing import Any

import numpy as np
import orjson

from ...config import Settings
from ...core.households import (
    ChunkResult,
    HouseholdChunk,
    HouseholdJob,
    HouseholdResults,
    ItemsAt,
    PeriodSummary,
    SkipReport,
    chunks_of,
    collect,
    evaluate_locally,
    reasons_of,
)
from ...core.preferences import Notice
from ...core.sensitivity import Band, band_of
from ..inputs.households import ROW_PLACES, HouseholdRows, job_of, labels_of, rows_of
from ..inputs.items import ItemAxis
from ..inputs.locator import Locator, Place
from ..observability import computing
from ..problems import RequestProblem
from ..records import Column, Grouped, Written, json_records
from ..render import csv_line, finite, finite_or_withheld
from ..render import number_texts as _number_texts
from ..render import text_cells as _text_cells
from ..schemas.common import CAUTION, SIGN_CONVENTION
from ..schemas.households import HouseholdIndicesRequest
from . import bands
from .answers import SCALE_RATIO, notices_json

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
    "exceeds that aggregate. model_regular false: the model is outside its regular region for "
    "that household at that period's prices (irregular_reasons), its Konüs indices, CV, EV, "
    "cv_percent and biases are null, and the period's summary leaves the household out. Rows "
    "are numbered from 1."
)
MAX_IN_FLIGHT = 8


@dataclass(frozen=True)
class Outcome:
    result: HouseholdResults
    axis: ItemAxis
    labels: list[str]
    request: HouseholdIndicesRequest
    locator: Locator
    #: What the web layer filled in (weights not given).
    notices: tuple[Notice, ...] = ()
    #: On request (band_models): K(u0) across those models, periods by households.
    band: Band | None = None


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
        raise RequestProblem.at("/households/0/expenditure", f"household row 1: the {job.family} "
                                "model is not homothetic and needs each household's income "
                                "(expenditure)")
    scheduler = scheduler_for(request.engine, len(request.households), settings, loc)
    band_jobs = _band_jobs(request, rows, loc, settings)
    with computing("householdIndices", settings), loc.translating():
        chunks = chunks_of(job, rows.shares, expenditure=rows.incomes, weights=rows.weights,
                           ids=rows.ids, rows=np.arange(1, len(request.households) + 1))
        result = collect(job, evaluate(job, chunks, scheduler, settings),
                         on_bad_rows=request.bad_rows or "reject", quantiles=quantiles,
                         engine="local" if scheduler is None else "cluster")
        band, left_out = _band(band_jobs, rows, result, scheduler, settings)
    extra: tuple[Notice, ...] = () if not rows.weights_assumed else (
        weights_notice(rows.weights_assumed),)
    if left_out:
        extra += (Notice("band_households_left_out", f"{left_out} household(s) were refused by "
                         "one or more of band_models (a model's own rule for a household): "
                         "their band is over the other models (see band.models)."),)
    return Outcome(result, axis, labels_of(request), request, loc, extra, band)


def _band_jobs(request: HouseholdIndicesRequest, rows: HouseholdRows, loc: Locator,
               settings: Settings) -> list[HouseholdJob]:
    """The household job under each model of band_models (errors at /band_models/<j>)."""
    models = request.band_models or []
    n = len(request.households)
    if n * (1 + len(models)) > settings.max_households:
        raise RequestProblem.at("/band_models", f"{n} households under {1 + len(models)} models "
                                f"are more than max_households ({settings.max_households}) "
                                "household evaluations; send fewer households or models")
    jobs = []
    for j, spec in enumerate(models):
        own = bands.locator_at(f"/band_models/{j}", loc, [])
        job = job_of(request.model_copy(update={"model": spec}), own,
                     max_items=settings.max_items, max_tree_depth=settings.max_tree_depth,
                     chunk_rows=settings.household_chunk_rows)[0]
        if rows.incomes is None and job.needs_income:
            raise RequestProblem.at(f"/band_models/{j}", f"the {job.family} model is not "
                                    "homothetic and needs each household's income "
                                    "(expenditure)")
        jobs.append(job)
    return jobs


def _band(jobs: list[HouseholdJob], rows: HouseholdRows, result: HouseholdResults,
          scheduler: Any, settings: Settings) -> tuple[Band | None, int]:
    """K(u0) of the households of ``result`` across ``jobs``, and how many of those
    households some job refused (the band leaves that model out for them)."""
    if not jobs:
        return None, 0
    numbers = np.arange(1, rows.shares.shape[0] + 1)
    values, refused = [], np.zeros(result.rows.size, dtype=bool)
    for job in jobs:
        chunks = chunks_of(job, rows.shares, expenditure=rows.incomes, weights=rows.weights,
                           ids=rows.ids, rows=numbers)
        own = collect(job, evaluate(job, chunks, scheduler, settings), on_bad_rows="skip",
                      quantiles=(0.5,))
        found = np.zeros(result.rows.size, dtype=bool)
        konus = np.full((len(job.current_prices), result.rows.size), np.nan)
        if own.rows.size:  # both in row order: each kept household's place among own's
            at = np.minimum(np.searchsorted(own.rows, result.rows), own.rows.size - 1)
            found = own.rows[at] == result.rows
            konus[:, found] = own.values["konus"][:, at[found]]
        values.append(konus)
        refused |= ~found
    return band_of(values), int(refused.sum())


def weights_notice(count: int | None) -> Notice:
    """The default weight, stated: ``count`` households without one (None: no weight column)."""
    which = ("The upload has no weight column: every household" if count is None else
             f"{count} household(s) gave no weight: each")
    return Notice("weights_assumed", f"{which} counts as one household (weight 1) in the "
                  "summaries.")


# -- answers ----------------------------------------------------------------------------------


def summary_json(summary: Sequence[PeriodSummary], labels: Sequence[str]) -> list[dict[str, Any]]:
    return [{
        "period": labels[s.period], "households": s.households,
        "households_outside_regular_region": s.households_outside_regular_region,
        "weight_total": s.weight_total, "expenditure_total": s.expenditure_total,
        "compensating_variation_total": s.compensating_variation_total,
        "cv_percent_of_income": s.cv_percent_of_income,
        "indices": [{
            "index": i.index, "households": i.households, "democratic": i.democratic,
            "plutocratic": i.plutocratic,
            "quantiles": [{"probability": p, "value": v} for p, v in i.quantiles],
            "share_above_democratic": i.share_above_democratic,
            "share_above_plutocratic": i.share_above_plutocratic,
            "minimum": i.minimum, "maximum": i.maximum,
        } for i in s.indices],
    } for s in summary]


def skipped_json(report: SkipReport, loc: Locator) -> dict[str, Any]:
    """Rows left out, each with the place of its field (rows from 1; ``record``: the CSV line
    the row's record starts on, for CSV uploads)."""
    rows = []
    for p in report.listed:
        error = loc.row_error(p)
        rows.append({"row": p.row, "record": p.record, "reason": p.code,
                     "pointer": error.pointer, "detail": error.detail})
    return {"count": report.count, "by_reason": dict(report.by_reason), "rows": rows}


def document(outcome: Outcome, *, rows_as_text: bool = False) -> dict[str, Any]:
    """The JSON answer as plain data (built directly: thousands of households are common); a
    headline answer without the rows per household. ``rows_as_text``: the households as their
    JSON text, written column by column from the core's arrays
    (:func:`dualcost.api.records.json_records`; the same bytes once the answer is written, no
    Python object per number), for an answer that goes straight to orjson."""
    res, labels, axis = outcome.result, outcome.labels, outcome.axis
    job = res.job
    full = headline_left_out(outcome) == []
    rows: Any = None
    if full and rows_as_text:
        rows = json_records(household_columns(res, labels, axis.ids, outcome.band))
    elif full:
        rows = _with_band(_households(res, labels, axis.ids), outcome.band)
    return finite({
        "family": job.family, "items": axis.ids, "scale": SCALE_RATIO,
        "formulas": list(job.formulas), "periods": list(labels),
        "households": rows,
        "summary": summary_json(res.summary, labels),
        "skipped": skipped_json(res.skipped, outcome.locator),
        "engine": res.engine, "chunks": res.chunks, "definitions": DEFINITIONS,
        "sign_convention": SIGN_CONVENTION,
        "notices": notices_json((*res.notices, *outcome.notices), axis.ids, axis.labels),
        "caution": CAUTION,
        "detail": "full" if full else "headline", "left_out": headline_left_out(outcome),
    }, "households")


def headline_left_out(outcome: Outcome) -> list[str]:
    """What the answer leaves out: the rows per household in a headline answer, else nothing."""
    return ["households"] if outcome.request.detail == "headline" else []


#: The summary table's columns (a headline CSV answer): per period, then per index.
SUMMARY_PERIOD_COLUMNS = ("households_outside_regular_region", "weight_total",
                          "expenditure_total", "compensating_variation_total",
                          "cv_percent_of_income")
SUMMARY_INDEX_COLUMNS = ("households", "democratic", "plutocratic", "share_above_democratic",
                         "share_above_plutocratic", "minimum", "maximum")


def summary_table(outcome: Outcome) -> tuple[list[str], list[list[Any]]]:
    """The summaries as one CSV row per period and index (the JSON answer's summary, flat): the
    period's figures repeated on each of its rows, then the index's, then one column per
    quantile (``quantile_<probability>``)."""
    blocks = summary_json(outcome.result.summary, outcome.labels)
    probabilities = [q["probability"] for q in blocks[0]["indices"][0]["quantiles"]] if (
        blocks and blocks[0]["indices"]) else []
    header = ["period", "index", *SUMMARY_PERIOD_COLUMNS, *SUMMARY_INDEX_COLUMNS,
              *(f"quantile_{p!r}" for p in probabilities)]
    rows = [[block["period"], i["index"], *(block[c] for c in SUMMARY_PERIOD_COLUMNS),
             *(i[c] for c in SUMMARY_INDEX_COLUMNS), *(q["value"] for q in i["quantiles"])]
            for block in blocks for i in block["indices"]]
    return header, rows


def _with_band(households: list[dict[str, Any]], band: Band | None) -> list[dict[str, Any]]:
    """Each household-period with its band beside its own K(u0) (None without band_models)."""
    if band is None:
        return households
    low, high, count = (_listed(band.low), _listed(band.high), band.count.tolist())
    for j, h in enumerate(households):
        for t, period in enumerate(h["periods"]):
            lo, hi, k = low[t][j], high[t][j], period["konus"]
            period["band"] = {"konus_low": lo, "konus_high": hi, "models": count[t][j],
                              "konus_inside": None if k is None or lo is None or hi is None
                              else bool(lo * (1 - 1e-9) <= k <= hi * (1 + 1e-9))}
    return households


def _listed(column: Any) -> list[list[float | None]]:
    """A column (periods by households) as lists, NaN as None: a figure withheld or a formula
    left out (the core gives every other number finite)."""
    rows: list[list[float | None]] = column.tolist()
    if np.isnan(column).any():
        rows = [[None if x != x else x for x in row] for row in rows]
    return rows


def _flags(irregular: Any, items: ItemsAt, ids: Sequence[str]
           ) -> tuple[list[list[int]], dict[tuple[int, int], list[str]]]:
    """The regularity flags as lists, and the irregular household-periods' item ids."""
    return irregular.tolist(), {key: [ids[i] for i in at] for key, at in items.items()}


def _households(res: HouseholdResults, labels: Sequence[str],
                ids: Sequence[str]) -> list[dict[str, Any]]:
    job = res.job
    v = {name: _listed(col) for name, col in res.values.items()}
    money = "compensating_variation" in v
    flags, named = _flags(res.irregular, res.irregular_items, ids)
    out = []
    for j, row in enumerate(res.rows.tolist()):
        periods = [{
            "period": label, "model_regular": not flags[t][j],
            "irregular_reasons": list(reasons_of(flags[t][j])) if flags[t][j] else [],
            "irregular_items": named.get((t, j), []),
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


def household_columns(res: HouseholdResults, labels: Sequence[str], ids: Sequence[str],
                      band: Band | None) -> dict[str, Column]:
    """The households of the JSON answer as columns (:func:`dualcost.api.records.json_records`),
    the members in the order :func:`_households` and :func:`_with_band` give them: each
    household's periods a list of records, the core's arrays (periods by households) read
    household by household, period by period; NaN (withheld, left out) written null."""
    job, n, periods = res.job, res.rows.size, len(labels)

    def flat(column: Any) -> Any:
        return np.ascontiguousarray(np.asarray(column).T).reshape(-1)

    v = {name: flat(res.values[name]) for name in _written_values(job)
         if name in res.values}
    lines = n * periods
    nulls = Written([b"null"] * lines)
    flags = flat(res.irregular) if res.irregular.size else np.zeros(lines, dtype=np.uint32)
    reasons, named = [b"[]"] * lines, [b"[]"] * lines
    for k in map(int, np.flatnonzero(flags)):
        reasons[k] = orjson.dumps(list(reasons_of(int(flags[k]))))
    for (t, j), at in res.irregular_items.items():
        named[j * periods + t] = orjson.dumps([ids[i] for i in at])
    per_period: dict[str, Column] = {
        "period": Written([orjson.dumps(label) for label in labels] * n),
        "model_regular": flags == 0, "irregular_reasons": Written(reasons),
        "irregular_items": Written(named),
        "indices": {f: v[f] for f in job.formulas},
        "konus": v["konus"], "konus_current": v["konus_current"],
        "konus_midpoint": v["konus_midpoint"],
        "compensating_variation": v.get("compensating_variation", nulls),
        "equivalent_variation": v.get("equivalent_variation", nulls),
        "cv_percent": v["cv_percent"],
        "bias_points": {f: v[f"bias_{f}"] for f in job.formulas},
    }
    if band is not None:
        per_period["band"] = _band_columns(band, v["konus"], flat)
    weights = np.asarray(res.weights, dtype=np.float64)
    finite_or_withheld([*v.values(), weights, *(() if res.expenditure is None else
                                                 (res.expenditure,))], "households")
    return {"household": [None] * n if res.ids is None else list(res.ids), "row": res.rows,
            "weight": weights,
            "expenditure": Written([b"null"] * n) if res.expenditure is None else
            np.asarray(res.expenditure, dtype=np.float64),
            "periods": Grouped(per_period, periods)}


def _written_values(job: HouseholdJob) -> list[str]:
    """The core's value arrays the JSON answer writes per household-period."""
    return [*job.formulas, "konus", "konus_current", "konus_midpoint", "compensating_variation",
            "equivalent_variation", "cv_percent", *(f"bias_{f}" for f in job.formulas)]


def _band_columns(band: Band, konus: Any, flat: Any) -> dict[str, Column]:
    """The band's columns beside K(u0) (as :func:`_with_band`: inside within a relative 1e-9,
    null where a bound or K(u0) is withheld)."""
    low, high = flat(band.low), flat(band.high)
    finite_or_withheld([low, high], "households")
    known = ~(np.isnan(low) | np.isnan(high) | np.isnan(konus))
    with np.errstate(invalid="ignore"):
        inside = (low * (1 - 1e-9) <= konus) & (konus <= high * (1 + 1e-9))
    texts = np.where(known, np.where(inside, b"true", b"false"), b"null").tolist()
    return {"konus_low": low, "konus_high": high, "models": flat(band.count),
            "konus_inside": Written(texts)}


#: The columns that say whether the model is regular for a household-period, and why not.
FLAG_COLUMNS = ("model_regular", "irregular_reasons", "irregular_items")


def csv_header(job: HouseholdJob, with_income: bool, *, records: bool = False) -> list[str]:
    """``row`` counts households from 1; ``record`` (CSV uploads) is the line the household's
    record starts on in the upload."""
    return ["household", "row", *(("record",) if records else ()), "period", "weight",
            "expenditure", *FLAG_COLUMNS, *job.output_columns(with_income)]


#: The columns band_models adds to the CSV answer of a JSON batch, after the others.
BAND_COLUMNS = ("band_konus_low", "band_konus_high", "band_models")


def csv_rows(result: ChunkResult, job: HouseholdJob, labels: Sequence[str],
             with_income: bool, items: Sequence[str], *, records: bool = False,
             extra: Sequence[Any] = ()) -> str:
    """One CSV line per household and period, in the order of :func:`csv_header`: empty cells
    for the figures withheld (``model_regular`` false) or left out; the reasons and the items'
    ids joined by semicolons; then the ``extra`` columns (periods by households, as the
    values: the band of band_models), integers as integers. Written column by column
    (:func:`_number_texts`), the same text as :func:`dualcost.api.render.csv_lines` writes row
    by row, several times as fast."""
    periods = len(labels)
    n = result.size
    flags = result.irregular_or_zeros(periods)  # (periods, households)
    named = {key: ";".join(items[i] for i in at) for key, at in result.irregular_items.items()}
    per_house = [
        _text_cells([] if result.ids is None else result.ids, n),
        list(map(str, result.rows.tolist())),
        *([list(map(str, (result.records if result.records is not None else
                          result.rows + 1).tolist()))] if records else []),
    ]
    weights = _number_texts(result.weights)
    income = (_number_texts(result.expenditure) if result.expenditure is not None and with_income
              else [""] * n)
    columns = [_by_period(c, periods) for c in per_house]
    columns.append(_text_cells(list(labels), periods) * n)
    columns += [_by_period(weights, periods), _by_period(income, periods)]
    order = flags.T.reshape(-1)  # household by household, period by period
    columns.append(["true" if f == 0 else "false" for f in order.tolist()])
    reasons = [""] * order.size
    listed = [""] * order.size
    for k in map(int, np.flatnonzero(order)):
        j, t = divmod(k, periods)
        reasons[k] = ";".join(reasons_of(int(order[k])))
        listed[k] = named.get((t, j), "")
    columns += [_text_cells(reasons, order.size), _text_cells(listed, order.size)]
    for name in job.output_columns(with_income):
        columns.append(_number_texts(result.values[name].T.reshape(-1)))
    for column in extra:  # periods by households, as the values
        by_line = np.asarray(column).T.reshape(-1)
        columns.append(list(map(str, by_line.tolist())) if by_line.dtype.kind in "iu"
                       else _number_texts(by_line))
    if not order.size:
        return ""
    return "\r\n".join(map(",".join, zip(*columns, strict=True))) + "\r\n"


def _by_period(cells: list[str], periods: int) -> list[str]:
    """A household's cell repeated on each of its period lines."""
    return cells if periods == 1 else [c for c in cells for _ in range(periods)]


def csv_pieces(outcome: Outcome, rows: int = 4096) -> Iterator[str]:
    """A finished batch as CSV, a block of households at a time."""
    res = outcome.result
    job = res.job
    with_income = res.expenditure is not None
    band = outcome.band
    yield csv_line(csv_header(job, with_income) + ([] if band is None else list(BAND_COLUMNS)))
    extra = () if band is None else (band.low, band.high, band.count)
    whole = ChunkResult(rows=res.rows, ids=res.ids, weights=res.weights,
                        expenditure=res.expenditure, values=res.values, problems=(),
                        irregular=res.irregular, irregular_items=res.irregular_items)
    for start in range(0, res.rows.size, rows):
        part = slice(start, start + rows)
        yield csv_rows(whole.block(part), job, outcome.labels, with_income, outcome.axis.ids,
                       extra=[x[:, part] for x in extra])


# -- the rows of a job's answer, as CSV or Parquet ------------------------------------------------


class CsvAnswer:
    """A job's answer as CSV text, piece by piece; an error after the header ends it with an
    error record (``#dualcost-error`` and the reason), so that a cut table says it is cut."""

    media = "csv"

    def __init__(self, job: HouseholdJob, labels: Sequence[str], with_income: bool,
                 items: Sequence[str]) -> None:
        self.job, self.labels, self.with_income, self.items = job, labels, with_income, items

    def head(self) -> str:
        return csv_line(csv_header(self.job, self.with_income, records=True))

    def rows(self, result: ChunkResult) -> str:
        return csv_rows(result, self.job, self.labels, self.with_income, self.items,
                        records=True)

    def end(self) -> str:
        return ""

    def error(self, message: str) -> str:
        return csv_line([ERROR_KEY, message])


#: The first cell of the record that ends a CSV answer cut by an error.
ERROR_KEY = "#dualcost-error"


class ParquetAnswer:
    """A job's answer as a Parquet file, one row group per chunk, its bytes given as each row
    group is written; the provenance and the caution in the file's key-value metadata. An
    error after the first row group closes the file with ``dualcost-error`` in its metadata
    (the file stays readable and says that it is cut)."""

    media = "parquet"

    def __init__(self, job: HouseholdJob, labels: Sequence[str], with_income: bool,
                 items: Sequence[str], metadata: dict[str, str]) -> None:
        import pyarrow as pa
        import pyarrow.parquet as pq

        self.job, self.labels, self.with_income, self.items = job, labels, with_income, items
        self.schema = answer_schema(csv_header(job, with_income, records=True), metadata)
        self.sink = _Pieces()
        self.writer = pq.ParquetWriter(pa.PythonFile(self.sink, mode="w"), self.schema)

    def _drain(self) -> bytes:
        return self.sink.take()

    def head(self) -> bytes:
        return b""

    def rows(self, result: ChunkResult) -> bytes:
        self.writer.write_table(arrow_table(result, self.job, self.labels, self.with_income,
                                            self.items, self.schema))
        return self._drain()

    def end(self) -> bytes:
        self.writer.close()
        return self._drain()

    def error(self, message: str) -> bytes:
        self.writer.add_key_value_metadata({"dualcost-error": message})
        return self.end()


class _Pieces(io.RawIOBase):
    """A write-only file that keeps what is written until it is taken (so that a streamed
    file is never held whole)."""

    def __init__(self) -> None:
        super().__init__()
        self.pieces: list[bytes] = []
        self.position = 0

    def writable(self) -> bool:
        return True

    def write(self, data: Any) -> int:
        piece = bytes(data)
        self.pieces.append(piece)
        self.position += len(piece)
        return len(piece)

    def tell(self) -> int:
        return self.position

    def take(self) -> bytes:
        out, self.pieces = b"".join(self.pieces), []
        return out


def arrow_table(result: ChunkResult, job: HouseholdJob, labels: Sequence[str],
                with_income: bool, items: Sequence[str], schema: Any) -> Any:
    """One chunk's rows (household by household, period by period, as the CSV answer) as an
    Arrow table, written from the arrays: a figure withheld or left out (NaN) is null."""
    import pyarrow as pa

    n, periods = result.size, len(labels)
    house = np.repeat(np.arange(n), periods)
    period = np.tile(np.arange(periods), n)
    flags = result.irregular_or_zeros(periods)[period, house]
    reasons: list[str | None] = [None] * flags.size
    named: list[str | None] = [None] * flags.size
    for k in map(int, np.flatnonzero(flags)):
        t, j = int(period[k]), int(house[k])
        reasons[k] = ";".join(reasons_of(int(flags[k])))
        named[k] = ";".join(items[i] for i in result.irregular_items.get((t, j), ()))
    # Each household's id on each of its period lines: repeated by Arrow, not in Python.
    ids = None if result.ids is None else pa.array(result.ids, type=pa.string())
    income = (result.expenditure[house] if result.expenditure is not None and with_income
              else np.full(house.size, np.nan))
    columns = [(ids if periods == 1 else ids.take(pa.array(house))) if ids is not None else
               pa.nulls(house.size, pa.string()),
               pa.array(result.rows[house]),
               pa.array(result.records[house] if result.records is not None else
                        result.rows[house] + 1),
               pa.DictionaryArray.from_arrays(pa.array(period.astype(np.int32)),
                                              pa.array(list(labels))).cast(pa.string()),
               pa.array(result.weights[house]), pa.array(income, from_pandas=True),
               pa.array(flags == 0), pa.array(reasons, type=pa.string()),
               pa.array(named, type=pa.string())]
    for name in job.output_columns(with_income):
        columns.append(pa.array(result.values[name][period, house], from_pandas=True))
    return pa.Table.from_arrays(columns, schema=schema)


#: The types of a job answer's columns that are not figures (those are float64).
_ANSWER_TYPES = {"household": "string", "row": "int64", "record": "int64", "period": "string",
                 "model_regular": "bool", "irregular_reasons": "string",
                 "irregular_items": "string"}


def answer_schema(names: Sequence[str], metadata: dict[str, str]) -> Any:
    """The Arrow schema of a job's Parquet answer with the columns ``names`` (its CSV header):
    the figures float64, a figure withheld or left out null."""
    import pyarrow as pa

    return pa.schema([(name, pa.type_for_alias(_ANSWER_TYPES.get(name, "float64")))
                      for name in names], metadata=metadata)


def parquet_of_csv(pieces: Iterator[str], metadata: dict[str, str]) -> Iterator[bytes]:
    """A job's answer kept as CSV pieces (the header, then a chunk's rows a piece) as the
    Parquet file :class:`ParquetAnswer` writes: a row group per piece, the same columns, types
    and nulls (an empty household id; the reasons and items of a regular household-period),
    its bytes given as each row group is written. The CSV's numbers are shortest round-trip
    text, so the floats read back are the ones computed."""
    import pyarrow as pa
    import pyarrow.csv as pv
    import pyarrow.parquet as pq

    header = next(pieces, "")
    names = next(csv.reader(io.StringIO(header))) if header else []
    schema = answer_schema(names, metadata)
    sink = _Pieces()
    writer = pq.ParquetWriter(pa.PythonFile(sink, mode="w"), schema)
    read = pv.ReadOptions(column_names=names)
    parse = pv.ParseOptions(newlines_in_values=True)
    convert = pv.ConvertOptions(column_types=schema, strings_can_be_null=False,
                                quoted_strings_can_be_null=False, null_values=[""],
                                true_values=["true"], false_values=["false"])
    for piece in pieces:
        table = pv.read_csv(io.BytesIO(piece.encode("utf-8")), read_options=read,
                            parse_options=parse, convert_options=convert)
        writer.write_table(_answer_nulls(table).cast(schema))
        yield sink.take()
    writer.close()
    yield sink.take()


def _answer_nulls(table: Any) -> Any:
    """The nulls of a Parquet answer where its CSV has empty text: no household id, and no
    reasons or items where the model is regular."""
    import pyarrow as pa
    import pyarrow.compute as pc

    regular = table.column("model_regular")
    for name in ("household", "irregular_reasons", "irregular_items"):
        column = table.column(name)
        empty = (pc.equal(column, "") if name == "household" else regular)
        table = table.set_column(table.schema.get_field_index(name), name,
                                 pc.if_else(empty, pa.scalar(None, pa.string()), column))
    return table
