"""Requests and answers of the household operations, and their CSV form.

JSON (``POST /v1/household-indices``): the job (items, prices, model, formulas) and a list of
households, each with its base shares, income and weight. CSV (a household job's upload): one
record per household, one column per item id holding the base share, and the optional columns
``household`` (an id), ``expenditure`` (the income, required for non-homothetic families) and
``weight`` (how many households the row stands for; default 1). Other columns are not used, and
the answer names them.
"""

from __future__ import annotations

import csv
import io
import operator
from collections.abc import Iterable, Iterator, Sequence
from dataclasses import dataclass
from typing import Any, Literal

import numpy as np
from pydantic import Field, model_validator

from ...core import _checks
from ...core.households import (
    DEFAULT_QUANTILES,
    HOUSEHOLD_FORMULAS,
    ChunkResult,
    HouseholdChunk,
    HouseholdJob,
    HouseholdResults,
    PeriodSummary,
    RowProblem,
    SkipReport,
    check_quantiles,
)
from ...core.preferences import Notice
from ..problems import FieldError, RequestProblem
from ..tabular import format_cell, parse_number
from .common import FiniteFloat, ItemAxis, ItemIn, Pointers, StrictModel, VectorIn
from .comparison import CAUTION, SIGN_CONVENTION
from ._legacy_model import ModelSpec, model_family, parameters_to_core

HouseholdFormula = Literal[HOUSEHOLD_FORMULAS]  # type: ignore[valid-type]
ID_COLUMN, EXPENDITURE_COLUMN, WEIGHT_COLUMN = "household", "expenditure", "weight"
RESERVED_COLUMNS = (ID_COLUMN, EXPENDITURE_COLUMN, WEIGHT_COLUMN)

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


class PeriodPricesIn(StrictModel):
    """The prices of one period of a series, compared with the base prices."""

    period: str = Field(min_length=1, max_length=100, description="A label for the period.")
    prices: VectorIn


class HouseholdIn(StrictModel):
    """One household, or one group of households (a decile, a region)."""

    id: str | None = Field(None, max_length=200, description="An id for the answer.")
    shares: VectorIn = Field(description="Base expenditure shares, summing to 1.")
    expenditure: FiniteFloat | None = Field(
        None, description="Income (total base expenditure); required for non-homothetic "
                          "families, and for compensation in money and plutocratic aggregates.")
    weight: FiniteFloat = Field(1.0, description="How many households this row stands for "
                                "(a survey weight); greater than zero.")


class HouseholdJobSpec(StrictModel):
    """What is common to all households: items, prices, model and what to compute."""

    items: list[ItemIn] = Field(min_length=1, description="The items, in a fixed order.")
    base_prices: VectorIn
    current_prices: VectorIn | None = Field(
        None, description="The current prices: one price change. Give this or periods.")
    periods: list[PeriodPricesIn] | None = Field(
        None, min_length=1, description="A series of price vectors, each compared with the base "
                                        "prices. Give this or current_prices.")
    model: ModelSpec
    formulas: list[HouseholdFormula] | None = Field(  # type: ignore[valid-type]
        None, description="Formulas to compute (default: laspeyres, paasche, fisher, tornqvist, "
                          "geometric_laspeyres).")
    lloyd_moulton_sigma: FiniteFloat | None = Field(
        None, description="Elasticity for the Lloyd-Moulton index (default: the model's own).")
    quantiles: list[FiniteFloat] = Field(
        list(DEFAULT_QUANTILES), max_length=101,
        description="Probabilities of the weighted quantiles in the summaries.")
    normalise_shares: bool = Field(
        False, description="Divide shares that do not sum to 1 by their sum (counted in notices) "
                           "instead of refusing the row.")
    bad_rows: Literal["reject", "skip"] | None = Field(
        None, description="reject: any bad household row fails the request, naming every row "
                          "(up to 20); skip: bad rows are left out, counted and listed with the "
                          "reason. Default: reject for householdIndices, skip for jobs.")
    engine: Literal["auto", "local", "cluster"] = Field(
        "auto", description="Where to compute: local (this process), cluster (the Dask "
                            "scheduler configured as DUALCOST_DASK_SCHEDULER), or auto: the "
                            "cluster for jobs of at least DUALCOST_DASK_MIN_HOUSEHOLDS rows when "
                            "one is configured.")

    @model_validator(mode="after")
    def _one_price_change(self) -> HouseholdJobSpec:
        if (self.current_prices is None) == (self.periods is None):
            raise ValueError("give current_prices (one price change) or periods (a series), "
                             "exactly one")
        return self

    def period_labels(self) -> list[str]:
        return ["current"] if self.periods is None else [p.period for p in self.periods]

    def build(self, *, max_items: int, max_tree_depth: int, chunk_rows: int | None
              ) -> tuple[HouseholdJob, ItemAxis, tuple[float, ...]]:
        """The core job; errors point at the request field."""
        axis = ItemAxis.from_request(self.items)
        if len(axis) > max_items:
            raise RequestProblem([FieldError("/items", f"has {len(axis)} items; the limit is "
                                             f"{max_items}")])
        ptr = Pointers(axis)
        ptr.note("p0", "/base_prices", self.base_prices)
        p0 = axis.vector(self.base_prices, "/base_prices")
        with ptr.translating():
            _checks.positive("p0", p0)
        rows = []
        if self.periods is None:
            assert self.current_prices is not None
            given = [("/current_prices", self.current_prices)]
        else:
            given = [(f"/periods/{t}/prices", p.prices) for t, p in enumerate(self.periods)]
        for where, value in given:
            ptr.note("p1", where, value)
            vec = axis.vector(value, where)
            with ptr.translating():
                _checks.positive("p1", vec)
            rows.append(vec)
        params = model_parameters(self.model, axis, ptr, max_tree_depth)
        ptr.note("formulas", "/formulas", per_item=False)
        ptr.note("lloyd_moulton_sigma", "/lloyd_moulton_sigma", per_item=False)
        ptr.note("quantiles", "/quantiles", per_item=False)
        ptr.note("family", "/model/family", per_item=False)
        with ptr.translating():
            job = HouseholdJob.checked(
                self.model.family, params, p0, np.stack(rows), formulas=self.formulas,
                lloyd_moulton_sigma=self.lloyd_moulton_sigma,
                normalise_shares=self.normalise_shares,
                chunk_rows=chunk_rows,
            )
            quantiles = check_quantiles(self.quantiles)
        return job, axis, quantiles


def model_parameters(spec: ModelSpec, axis: ItemAxis, ptr: Pointers, max_tree_depth: int
                     ) -> dict[str, Any]:
    """The model's parameters in core form (vectors in item order), without calibrating; a
    parameter given as null is left out."""
    model_family(spec, ptr)
    out = parameters_to_core(spec, axis, ptr, max_tree_depth)
    return {k: v for k, v in out.items() if v is not None}


class HouseholdIndicesRequest(HouseholdJobSpec):
    """The job and its households."""

    households: list[HouseholdIn] = Field(min_length=1, description="One entry per household.")

    def arrays(self, axis: ItemAxis) -> tuple[np.ndarray, np.ndarray | None, np.ndarray,
                                              tuple[str | None, ...] | None]:
        """Shares (households by items), incomes, weights and ids; a malformed vector names its
        household (up to 20 at once)."""
        n = len(axis)
        shares = np.empty((len(self.households), n))
        errors: list[FieldError] = []
        incomes = [h.expenditure for h in self.households]
        given = [m is not None for m in incomes]
        if any(given) and not all(given):
            h = given.index(False)
            errors.append(FieldError(f"/households/{h}/expenditure", f"household row {h} has no "
                                     "income while others do: give every household's income, or "
                                     "none"))
        for h, hh in enumerate(self.households):
            try:
                shares[h] = axis.vector(hh.shares, f"/households/{h}/shares")
            except RequestProblem as exc:
                errors.extend(FieldError(e.pointer, f"household row {h}: {e.detail}")
                              for e in exc.errors)
            if len(errors) >= 20:
                break
        if errors:
            raise RequestProblem(errors[:20])
        m = np.array(incomes, dtype=np.float64) if all(given) else None
        weights = np.array([h.weight for h in self.households], dtype=np.float64)
        ids = tuple(h.id for h in self.households)
        return shares, m, weights, (ids if any(i is not None for i in ids) else None)

    def problem_pointer(self, problem: RowProblem, axis: ItemAxis) -> str:
        base = f"/households/{problem.row}/{problem.field}"
        if problem.item is None:
            return base
        keyed = isinstance(self.households[problem.row].shares, dict)
        return f"{base}/{_escape(axis.ids[problem.item]) if keyed else problem.item}"


def _escape(token: str) -> str:
    return token.replace("~", "~0").replace("/", "~1")


# -- answers ----------------------------------------------------------------------------------


def summary_json(summary: Sequence[PeriodSummary], labels: Sequence[str]) -> list[dict[str, Any]]:
    return [{
        "period": labels[s.period],
        "households": s.households,
        "weight_total": s.weight_total,
        "expenditure_total": s.expenditure_total,
        "compensating_variation_total": s.compensating_variation_total,
        "cv_percent_of_income": s.cv_percent_of_income,
        "indices": [{
            "index": i.index,
            "democratic": i.democratic,
            "plutocratic": i.plutocratic,
            "quantiles": [{"probability": p, "value": v} for p, v in i.quantiles],
            "share_above_democratic": i.share_above_democratic,
            "share_above_plutocratic": i.share_above_plutocratic,
            "minimum": i.minimum,
            "maximum": i.maximum,
        } for i in s.indices],
    } for s in summary]


def skipped_json(report: SkipReport, describe: Any) -> dict[str, Any]:
    """``describe(problem)`` gives the (pointer, detail) of one refused row."""
    rows = []
    for p in report.listed:
        pointer, detail = describe(p)
        rows.append({"row": p.row, "reason": p.code, "pointer": pointer, "detail": detail})
    return {"count": report.count, "by_reason": dict(report.by_reason), "rows": rows}


def notices_json(notices: Iterable[Notice]) -> list[dict[str, str]]:
    return [{"code": n.code, "message": n.message} for n in notices]


def results_json(res: HouseholdResults, request: HouseholdIndicesRequest, axis: ItemAxis,
                 labels: Sequence[str]) -> dict[str, Any]:
    """The JSON answer as plain data (built directly: thousands of households are common)."""
    job = res.job
    v = {name: col.tolist() for name, col in res.values.items()}
    money = "compensating_variation" in v
    households = []
    ids = res.ids
    for j, row in enumerate(res.rows.tolist()):
        periods = []
        for t, label in enumerate(labels):
            periods.append({
                "period": label,
                "indices": {f: v[f][t][j] for f in job.formulas},
                "konus": v["konus"][t][j],
                "konus_current": v["konus_current"][t][j],
                "konus_midpoint": v["konus_midpoint"][t][j],
                "compensating_variation": v["compensating_variation"][t][j] if money else None,
                "equivalent_variation": v["equivalent_variation"][t][j] if money else None,
                "cv_percent": v["cv_percent"][t][j],
                "bias_points": {f: v[f"bias_{f}"][t][j] for f in job.formulas},
            })
        households.append({
            "household": None if ids is None else ids[j],
            "row": row,
            "weight": float(res.weights[j]),
            "expenditure": None if res.expenditure is None else float(res.expenditure[j]),
            "periods": periods,
        })

    def describe(p: RowProblem) -> tuple[str, str]:
        return request.problem_pointer(p, axis), row_detail(p, request.households[p.row].id)

    return {
        "family": job.family,
        "items": axis.ids,
        "formulas": list(job.formulas),
        "periods": list(labels),
        "households": households,
        "summary": summary_json(res.summary, labels),
        "skipped": skipped_json(res.skipped, describe),
        "engine": res.engine,
        "chunks": res.chunks,
        "definitions": DEFINITIONS,
        "sign_convention": SIGN_CONVENTION,
        "notices": notices_json(res.notices),
        "caution": CAUTION,
    }


def row_detail(p: RowProblem, household: str | None) -> str:
    name = f"household row {p.row}" + (f" ({household!r})" if household else "")
    return f"{name}: {p.rule}"


# -- response models, for the OpenAPI document -------------------------------------------------


class QuantileOut(StrictModel):
    probability: float
    value: float


class IndexSummaryOut(StrictModel):
    index: str = Field(description="A formula, or konus (the Konüs index at base utility).")
    democratic: float = Field(description="sum a_h P_h / sum a_h (Prais 1959).")
    plutocratic: float | None = Field(description="sum a_h m_h P_h / sum a_h m_h (Prais 1959); "
                                      "null without incomes.")
    quantiles: list[QuantileOut]
    share_above_democratic: float
    share_above_plutocratic: float | None
    minimum: float
    maximum: float


class PeriodSummaryOut(StrictModel):
    period: str
    households: int
    weight_total: float
    expenditure_total: float | None
    compensating_variation_total: float | None = Field(description="sum a_h CV_h.")
    cv_percent_of_income: float | None
    indices: list[IndexSummaryOut]


class HouseholdPeriodOut(StrictModel):
    period: str
    indices: dict[str, float]
    konus: float
    konus_current: float
    konus_midpoint: float
    compensating_variation: float | None
    equivalent_variation: float | None
    cv_percent: float = Field(description="100 CV / income.")
    bias_points: dict[str, float]


class HouseholdOut(StrictModel):
    household: str | None
    row: int = Field(description="The household's position in the request (from 0).")
    weight: float
    expenditure: float | None
    periods: list[HouseholdPeriodOut]


class SkippedRowOut(StrictModel):
    row: int
    reason: str
    pointer: str
    detail: str


class SkippedOut(StrictModel):
    count: int
    by_reason: dict[str, int]
    rows: list[SkippedRowOut] = Field(description="The first 100 rows left out.")


class NoticeOut(StrictModel):
    code: str
    message: str


class HouseholdIndicesResponse(StrictModel):
    family: str
    items: list[str]
    formulas: list[str]
    periods: list[str]
    households: list[HouseholdOut]
    summary: list[PeriodSummaryOut]
    skipped: SkippedOut
    engine: Literal["local", "cluster"]
    chunks: int
    definitions: str
    sign_convention: str
    notices: list[NoticeOut]
    caution: str


class JobProgressOut(StrictModel):
    rows_read: int
    rows_total: int | None = Field(description="Lines after the header in the upload (an upper "
                                   "bound if cells hold line breaks).")
    households_done: int
    rows_skipped: int
    chunks_done: int
    fraction: float | None


class HouseholdJobOut(StrictModel):
    id: str
    status: Literal["waiting_for_households", "running", "done", "failed", "cancelled"]
    created: str
    family: str
    periods: list[str]
    engine: Literal["local", "cluster"] | None
    bad_rows: Literal["reject", "skip"]
    progress: JobProgressOut
    skipped: SkippedOut
    summary: list[PeriodSummaryOut] | None
    unused_columns: list[str]
    error: str | None
    notices: list[NoticeOut]
    links: dict[str, str]
    caution: str


# -- CSV --------------------------------------------------------------------------------------


@dataclass(frozen=True)
class CsvLayout:
    """Where the columns of a household CSV are."""

    header: list[str]
    items: list[int]  # column of each item, in item order
    id_column: int | None
    expenditure_column: int | None
    weight_column: int | None
    unused: list[str]

    def pointer(self, p: RowProblem, axis: ItemAxis) -> str:
        column = None
        if p.field == "shares" and p.item is not None:
            column = self.items[p.item]
        elif p.field == EXPENDITURE_COLUMN:
            column = self.expenditure_column
        elif p.field == WEIGHT_COLUMN:
            column = self.weight_column
        return f"#row={p.row}" if column is None else f"#cell={p.row},{column + 1}"

    def detail(self, p: RowProblem, axis: ItemAxis, household: str | None = None) -> str:
        where = ""
        if p.field == "shares" and p.item is not None:
            where = f"column {axis.ids[p.item]!r}: "
        elif p.field in (EXPENDITURE_COLUMN, WEIGHT_COLUMN):
            where = f"column {p.field!r}: "
        name = f"row {p.row}" + (f" ({household!r})" if household else "")
        return f"{name}: {where}{p.rule}"


def csv_layout(header: Sequence[str], axis: ItemAxis, *, needs_income: bool) -> CsvLayout:
    """The columns of a household CSV; a missing item column is named (``#row=1``)."""
    cleaned = [h.strip() for h in header]
    seen: dict[str, int] = {}
    for j, name in enumerate(cleaned):
        if name in seen:
            raise RequestProblem([FieldError("#row=1", f"column {name!r} appears twice in the "
                                             "header")])
        seen[name] = j
    missing = [i for i in axis.ids if i not in seen]
    errors = [FieldError("#row=1", f"the header has no column {i!r}: give one column per item "
                         "holding each household's base share") for i in missing[:20]]
    if needs_income and EXPENDITURE_COLUMN not in seen:
        errors.append(FieldError("#row=1", f"the header has no column {EXPENDITURE_COLUMN!r}: "
                                 "this model is not homothetic and needs each household's income"))
    if errors:
        raise RequestProblem(errors)
    used = set(axis.ids) | set(RESERVED_COLUMNS)
    return CsvLayout(
        header=cleaned, items=[seen[i] for i in axis.ids], id_column=seen.get(ID_COLUMN),
        expenditure_column=seen.get(EXPENDITURE_COLUMN), weight_column=seen.get(WEIGHT_COLUMN),
        unused=[c for c in cleaned if c not in used],
    )


def _number(cell: str) -> float:
    """A finite number written with '.' as decimal point, or NaN if the cell is not one."""
    value = parse_number(cell)
    return float("nan") if value is None else value


def csv_chunks(records: Iterator[list[str]], layout: CsvLayout, axis: ItemAxis, chunk_rows: int,
               progress: Any = None) -> Iterator[HouseholdChunk]:
    """Household chunks from CSV records after the header (record numbers from 2).

    A cell that is not a number, or a record of the wrong length, becomes a refused row carried
    with the chunk; the good rows of the chunk go on. ``progress(n)`` is told of each record.
    """
    width = len(layout.header)
    pick = operator.itemgetter(*layout.items)
    nan_row = [float("nan")] * len(layout.items)
    record = 1
    while True:
        rows: list[int] = []
        values: list[list[float]] = []
        incomes: list[float] = []
        weights: list[float] = []
        ids: list[str | None] = []
        problems: list[RowProblem] = []
        raw: dict[int, Sequence[str]] = {}  # the cells of rows that did not parse, for the message
        for cells in records:
            record += 1
            if progress is not None:
                progress(1)
            if not cells or all(not c.strip() for c in cells):
                continue
            rows.append(record)
            if len(cells) != width:
                problems.append(RowProblem(record, "row", f"has {len(cells)} cells but the "
                                           f"header has {width} columns", "ragged_row"))
                values.append(nan_row)
                incomes.append(1.0)
                weights.append(1.0)
                ids.append(None)
            else:
                picked = pick(cells)
                if len(layout.items) == 1:
                    picked = (picked,)
                try:
                    # float() also reads '1_000'; a CSV number has no grouping (api.tabular).
                    if "_" in "".join(picked):
                        raise ValueError("grouping")
                    values.append(list(map(float, picked)))
                except ValueError:
                    values.append([_number(c) for c in picked])
                    raw[len(rows) - 1] = picked
                incomes.append(_optional(cells, layout.expenditure_column, EXPENDITURE_COLUMN,
                                         record, problems))
                weights.append(_optional(cells, layout.weight_column, WEIGHT_COLUMN, record,
                                         problems))
                ids.append(None if layout.id_column is None else
                           (cells[layout.id_column].strip() or None))
            if len(rows) >= chunk_rows:
                break
        if not rows:
            return
        shares = np.array(values, dtype=np.float64)
        refused = {p.row for p in problems if p.field == "row"}
        bad_cells = ~np.isfinite(shares)
        for k in np.flatnonzero(bad_cells.any(axis=1)):
            if rows[k] in refused:
                continue
            i = int(np.argmax(bad_cells[k]))
            text = raw[k][i].strip() if k in raw else repr(float(shares[k, i]))
            problems.append(RowProblem(rows[k], "shares", f"{text!r} is not a finite number "
                                       "(write numbers with '.' as decimal point and no "
                                       "grouping)", "not_a_number", i))
        yield HouseholdChunk(
            rows=np.array(rows, dtype=np.int64), shares=shares,
            expenditure=None if layout.expenditure_column is None else np.array(incomes),
            weights=None if layout.weight_column is None else np.array(weights),
            ids=None if layout.id_column is None else tuple(ids), problems=tuple(problems),
        )
        if len(rows) < chunk_rows:
            return


def _optional(cells: list[str], column: int | None, name: str, record: int,
              problems: list[RowProblem]) -> float:
    if column is None:
        return 1.0
    cell = cells[column]
    value = parse_number(cell)
    if value is None:
        what = "is empty" if not cell.strip() else f"{cell.strip()!r} is not a finite number"
        problems.append(RowProblem(record, name, f"{what} (write numbers with '.' as decimal "
                                   "point and no grouping)", "not_a_number"))
        return 1.0
    return value


def csv_result_header(job: HouseholdJob, with_income: bool) -> list[str]:
    return [ID_COLUMN, "row", "period", WEIGHT_COLUMN, EXPENDITURE_COLUMN,
            *job.output_columns(with_income)]


def csv_result_rows(result: ChunkResult, job: HouseholdJob, labels: Sequence[str],
                    with_income: bool) -> str:
    """One CSV line per household and period, in the order of :func:`csv_result_header`."""
    buffer = io.StringIO()
    writer = csv.writer(buffer, lineterminator="\r\n")
    names = job.output_columns(with_income)
    cols = [result.values[n].tolist() for n in names]
    rows = result.rows.tolist()
    weights = result.weights.tolist()
    incomes = None if result.expenditure is None else result.expenditure.tolist()
    for j, row in enumerate(rows):
        hid = "" if result.ids is None or result.ids[j] is None else result.ids[j]
        m = "" if incomes is None or not with_income else format_cell(incomes[j])
        for t, label in enumerate(labels):
            writer.writerow([hid, row, label, format_cell(weights[j]), m,
                             *(format_cell(c[t][j]) for c in cols)])
    return buffer.getvalue()


def csv_header_text(header: Sequence[str]) -> str:
    buffer = io.StringIO()
    csv.writer(buffer, lineterminator="\r\n").writerow(header)
    return buffer.getvalue()
