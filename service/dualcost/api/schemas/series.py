"""Request and response of the index-series operations (POST /v1/index-series and its CSV form).

A panel arrives as JSON (one row of prices per period, keyed by item id or in item order, null or
absent where an item is not priced) or as CSV in long form (one row per period and item). Both
become the same core call; errors point at the JSON field (``/prices/3/rye_loaf``) or at the CSV
cell (``#cell=14,3``, RFC 7111) or query parameter (``#/query/base_period``).
"""

from __future__ import annotations

import csv
import io
import json
from collections.abc import Sequence
from contextlib import AbstractContextManager
from dataclasses import dataclass, field
from typing import Annotated, Any, Literal

import numpy as np
from pydantic import Field, ValidationError, model_validator

from ...core.comparison import WeightReference
from ...core.errors import InvalidInput
from ...core.preferences import Preferences
from ...core.series import (
    MODEL_RULE,
    SERIES_FORMULAS,
    IndexSeries,
    base_budget,
    describe_treatment,
    index_series,
)
from ...core.series_panel import Panel
from ..problems import FieldError, RequestProblem
from ..tabular import read_table
from .common import (
    FiniteFloat,
    ItemAxis,
    ItemIn,
    Pointers,
    StrictModel,
    VectorIn,
    invalid_input_as_problem,
)
from .comparison import CAUTION
from .model import ModelSpec, model_to_core

SeriesFormula = Literal[tuple(SERIES_FORMULAS)]  # type: ignore[valid-type]
PeriodLabel = Annotated[str | int, Field(description="A period label: YYYY-MM, YYYY-Qn, YYYY, an "
                                         "integer, or any other text.")]
Cell = FiniteFloat | None
Row = Annotated[list[Cell] | dict[str, Cell], Field(
    union_mode="left_to_right",  # the forms cannot be confused (see VectorIn)
    description="One period: an object keyed by item id, or a list in the order of `items`; "
                "null (or, in an object, no entry) where the item is not priced.")]

FREQUENCY_TEXT = ("monthly, quarterly or annual; inferred from period labels of the form YYYY-MM, "
                  "YYYY-Qn or YYYY")


class WeightReferenceIn(StrictModel):
    """The weight-reference period for the Lowe and Young series: a period of the panel, or a
    basket (quantities, or shares, with that period's prices) given here."""

    period: PeriodLabel | None = Field(None, description="A panel period at or before the base.")
    prices: VectorIn | None = None
    quantities: VectorIn | None = None
    shares: VectorIn | None = None

    @model_validator(mode="after")
    def _one_source(self) -> WeightReferenceIn:
        vectors = (self.prices, self.quantities, self.shares)
        if (self.period is None) == all(v is None for v in vectors):
            raise ValueError("give the weight-reference period, or its basket (quantities or "
                             "shares, with prices), not both")
        return self


class GeksIn(StrictModel):
    window: int | None = Field(None, ge=2, description="Rolling window in periods (default: a "
                               "year and one period, 13 for monthly data).")
    splice: Literal["movement", "window", "half", "mean"] = Field(
        "movement", description="How each new window joins the published series (Ivancic, "
                                "Diewert and Fox 2011); see the operation's description.")


class SpanIn(StrictModel):
    start: PeriodLabel | None = Field(None, description="First period (default: the first).")
    end: PeriodLabel | None = Field(None, description="Last period (default: the last).")


class SeriesOptions(StrictModel):
    """Everything but the panel: shared by the JSON and the CSV operation."""

    base_period: PeriodLabel | None = Field(None, description="The base (price-reference) period; "
                                            "the model is calibrated to it. Default: the first.")
    reference_period: PeriodLabel | None = Field(None, description="The index reference period "
                                                 "(default: the base period).")
    reference_value: Literal[1, 100] = Field(100, description="The series' value in the index "
                                             "reference period.")
    frequency: Literal["monthly", "quarterly", "annual"] | None = Field(
        None, description=FREQUENCY_TEXT + ".")
    formulas: list[SeriesFormula] | None = Field(  # type: ignore[valid-type]
        None, description="Formula series to compute (default: every one the data allow).")
    model: ModelSpec | None = Field(None, description="A preference model, calibrated to the base "
                                    "period, for the Konüs series and the bias.")
    lloyd_moulton_sigma: FiniteFloat | None = Field(None, description="Lloyd-Moulton elasticity "
                                                    "(default: the model's own).")
    new_goods_sigma: FiniteFloat | None = Field(
        None, description="Elasticity (> 1) for Feenstra's new-goods adjustment (default: the "
                          "model's own when above 1).")
    weight_reference: WeightReferenceIn | None = None
    geks: GeksIn = Field(default_factory=GeksIn)
    span: SpanIn | None = Field(None, description="Span of the average annual bias.")
    loop: list[PeriodLabel] | None = Field(
        None, min_length=2, description="Periods of the circularity check, in order (default: the "
                                        "span's periods, closing back to its first).")


class SeriesRequest(SeriesOptions):
    """A panel of prices, with quantities or expenditures where known, and the options."""

    periods: list[PeriodLabel] = Field(min_length=2, description="The periods, in time order.")
    items: list[ItemIn] = Field(min_length=1, description="The items.")
    prices: list[Row] = Field(description="One row per period, in the order of `periods`.")
    quantities: list[Row | None] | None = Field(
        None, description="One row per period (null for a period with prices only).")
    expenditures: list[Row | None] | None = Field(
        None, description="As quantities, in money; quantity = expenditure / price.")


# -- where errors point ----------------------------------------------------------------------------


def _escape(token: str) -> str:
    return token.replace("~", "~0").replace("/", "~1")


#: Core argument -> (JSON Pointer in the request, CSV query parameter).
OPTION_PLACES: dict[str, tuple[str, str]] = {
    "base_period": ("/base_period", "base_period"),
    "reference_period": ("/reference_period", "reference_period"),
    "reference_value": ("/reference_value", "reference_value"),
    "frequency": ("/frequency", "frequency"),
    "formulas": ("/formulas", "formulas"),
    "lloyd_moulton_sigma": ("/lloyd_moulton_sigma", "lloyd_moulton_sigma"),
    "new_goods_sigma": ("/new_goods_sigma", "new_goods_sigma"),
    "weight_reference": ("/weight_reference", "weight_reference_period"),
    "qb": ("/weight_reference/quantities", "weight_reference_period"),
    "wb": ("/weight_reference/shares", "weight_reference_period"),
    "pb": ("/weight_reference/prices", "weight_reference_period"),
    "geks_window": ("/geks/window", "geks_window"),
    "window": ("/geks/window", "geks_window"),
    "splice": ("/geks/splice", "geks_splice"),
    "span": ("/span", "span_start"),
    "loop": ("/loop", "loop"),
    "model": ("/model", "model"),
}
_LISTED = {"formulas", "loop"}
_PANEL = {"prices", "quantities", "expenditures"}


@dataclass
class Locator:
    """Turns a core error's argument and index into a pointer at the JSON field or CSV cell."""

    periods: list[str]
    items: list[str]
    csv: bool = False
    keyed: dict[str, list[bool]] = field(default_factory=dict)  # JSON: row given as object?
    rows: dict[tuple[int, int], int] = field(default_factory=dict)  # CSV: (t, i) -> row number
    first_row: dict[int, int] = field(default_factory=dict)  # CSV: period -> first row
    item_row: dict[int, int] = field(default_factory=dict)  # CSV: item -> first row
    columns: dict[str, int] = field(default_factory=dict)  # CSV: column name -> number from 1
    model_pointers: Pointers | None = None

    def option(self, name: str, index: int | None = None) -> str:
        json_path, query = OPTION_PLACES[name]
        if self.csv:
            return f"#/query/{query}"
        if index is not None and name in _LISTED:
            return f"{json_path}/{index}"
        return json_path

    def pointer(self, exc: InvalidInput) -> str:
        name, index = exc.parameter, exc.index
        if name in _PANEL:
            return self._panel(name, index)
        if name == "periods":
            if self.csv:
                row = self.first_row.get(index if isinstance(index, int) else 0, 2)
                return f"#cell={row},{self.columns.get('period', 1)}"
            return "/periods" if index is None else f"/periods/{index}"
        if name == "items":
            if self.csv:
                row = self.item_row.get(index if isinstance(index, int) else 0, 2)
                return f"#cell={row},{self.columns.get('item', 2)}"
            return "/items" if index is None else f"/items/{index}"
        if name in ("qb", "wb", "pb") and isinstance(index, int) and not self.csv:
            keyed = self.keyed.get(name, [False])[0]
            return f"{self.option(name)}/{_escape(self.items[index]) if keyed else index}"
        if name in OPTION_PLACES:
            return self.option(name, index if isinstance(index, int) else None)
        if self.model_pointers is not None and name in self.model_pointers.places:
            where = self.model_pointers.pointer_for(exc)
            return self._model_place(where)
        return self.option("model") if self.csv else ""

    def _model_place(self, json_pointer: str) -> str:
        if self.csv and json_pointer.startswith("/model"):
            return "#/query/model" + json_pointer[len("/model"):]
        return json_pointer

    def _panel(self, name: str, index: Any) -> str:
        column = {"prices": "price", "quantities": "quantity", "expenditures": "expenditure"}[name]
        if isinstance(index, tuple) and len(index) == 2:
            t, i = index
            if self.csv:
                row = self.rows.get((t, i), self.first_row.get(t, 2))
                col = self.columns.get(column, self.columns.get("price", 3))
                return f"#cell={row},{col}"
            keyed = self.keyed.get(name, [])
            key = _escape(self.items[i]) if t < len(keyed) and keyed[t] else str(i)
            return f"/{name}/{t}/{key}"
        if isinstance(index, tuple) and len(index) == 1:
            (t,) = index
            if self.csv:
                return f"#row={self.first_row.get(t, 2)}"
            return f"/{name}/{t}"
        return "#row=1" if self.csv else f"/{name}"

    def translating(self) -> AbstractContextManager[None]:
        return invalid_input_as_problem(self.pointer)

    def rewrite(self, problem: RequestProblem) -> RequestProblem:
        """A problem raised with JSON pointers into ``/model``, re-pointed for the CSV form."""
        if not self.csv:
            return problem
        return RequestProblem([FieldError(self._model_place(e.pointer), e.detail)
                               for e in problem.errors], slug=problem.slug)


# -- the panel from JSON or CSV ------------------------------------------------------------------


@dataclass
class PanelInput:
    """The panel as arrays (``NaN`` where not given), with labels and where errors point."""

    periods: list[str]
    axis: ItemAxis
    prices: np.ndarray
    quantities: np.ndarray | None
    expenditures: np.ndarray | None
    locator: Locator


def _check_limits(n_periods: int, n_items: int, *, max_periods: int, max_items: int,
                  max_cells: int, where: tuple[str, str, str]) -> None:
    if n_periods > max_periods:
        raise RequestProblem([FieldError(where[0], f"has {n_periods} periods; the limit is "
                                         f"{max_periods}")], slug="invalid-input")
    if n_items > max_items:
        raise RequestProblem([FieldError(where[1], f"has {n_items} items; the limit is "
                                         f"{max_items}")])
    if n_periods * n_items > max_cells:
        raise RequestProblem([FieldError(where[2], f"the panel has {n_periods} x {n_items} = "
                                         f"{n_periods * n_items} cells; the limit is {max_cells}")])


def _rows_to_matrix(rows: Sequence[Any], name: str, axis: ItemAxis, n_periods: int,
                    keyed: list[bool], allow_null_row: bool) -> np.ndarray:
    n = len(axis)
    if len(rows) != n_periods:
        raise RequestProblem([FieldError(f"/{name}", f"has {len(rows)} rows but there are "
                                         f"{n_periods} periods; give one row per period")])
    out = np.full((n_periods, n), np.nan)
    errors: list[FieldError] = []
    for t, row in enumerate(rows):
        keyed.append(isinstance(row, dict))
        if row is None:
            if not allow_null_row:
                errors.append(FieldError(f"/{name}/{t}", "must be a row of prices"))
            continue
        if isinstance(row, dict):
            for key, value in row.items():
                i = axis.position.get(key)
                if i is None:
                    errors.append(FieldError(f"/{name}/{t}/{_escape(key)}", f"{key!r} is not an "
                                             "item id listed in items: every value needs an item"))
                elif value is not None:
                    out[t, i] = value
        else:
            if len(row) > n:
                errors.append(FieldError(f"/{name}/{t}/{n}", f"the row has {len(row)} values but "
                                         f"items lists only {n} ids: a value at position {n} has "
                                         "no item id"))
            elif len(row) < n:
                errors.append(FieldError(f"/{name}/{t}", f"has {len(row)} values but there are {n} "
                                         "items; give one per item (null where not priced)"))
            else:
                out[t] = [np.nan if v is None else v for v in row]
        if len(errors) >= 20:
            break
    if errors:
        raise RequestProblem(errors)
    return out


def panel_from_json(req: SeriesRequest, *, max_periods: int, max_items: int,
                    max_cells: int) -> PanelInput:
    periods = [str(p) for p in req.periods]
    axis = ItemAxis.from_request(req.items)
    _check_limits(len(periods), len(axis), max_periods=max_periods, max_items=max_items,
                  max_cells=max_cells, where=("/periods", "/items", "/prices"))
    locator = Locator(periods, axis.ids)
    mats: dict[str, np.ndarray | None] = {}
    for name, rows, nullable in (("prices", req.prices, False), ("quantities", req.quantities, True),
                                 ("expenditures", req.expenditures, True)):
        if rows is None:
            mats[name] = None
            continue
        keyed: list[bool] = []
        mats[name] = _rows_to_matrix(rows, name, axis, len(periods), keyed, nullable)
        locator.keyed[name] = keyed
    prices = mats["prices"]
    assert prices is not None
    return PanelInput(periods, axis, prices, mats["quantities"], mats["expenditures"], locator)


CSV_COLUMNS = ("period", "item", "price")


def _record_numbers(text: str) -> tuple[list[str], list[int]]:
    """The header, and the record number of each non-blank record after it, counted as
    :func:`read_table` counts them (the header is record 1), for pointers at cells."""
    reader = csv.reader(io.StringIO(text.lstrip("\ufeff")))
    header = [h.strip() for h in next(reader)]
    numbers = [n for n, record in enumerate(reader, start=2)
               if record and any(cell.strip() for cell in record)]
    return header, numbers
CSV_OPTIONAL = ("quantity", "expenditure", "label")


def panel_from_csv(text: str, *, max_periods: int, max_items: int, max_cells: int) -> PanelInput:
    """Long form: one row per period and item; rows grouped by period, in time order."""
    rows = read_table(text, required=CSV_COLUMNS, numeric=("price",),
                      optional_numeric=("quantity", "expenditure"), max_rows=max_cells)
    header, numbers = _record_numbers(text)
    columns = {h: j + 1 for j, h in enumerate(header)}
    if not rows:
        raise RequestProblem([FieldError("#row=2", "the CSV has a header but no rows")])
    period_pos: dict[str, int] = {}
    item_pos: dict[str, int] = {}
    labels: dict[str, str | None] = {}
    locator = Locator([], [], csv=True, columns=columns)
    cells: list[tuple[int, int, float, float | None, float | None]] = []
    errors: list[FieldError] = []
    current: str | None = None
    for k, row in enumerate(rows):
        row_number = numbers[k]
        period, item = row["period"], row["item"]
        if period != current:
            if period in period_pos:
                errors.append(FieldError(f"#cell={row_number},{columns['period']}",
                                         f"period {period!r} appears again after period "
                                         f"{current!r} began: rows must be grouped by period, in "
                                         "time order"))
                break
            period_pos[period] = len(period_pos)
            locator.first_row[period_pos[period]] = row_number
            current = period
        if item not in item_pos:
            item_pos[item] = len(item_pos)
            locator.item_row[item_pos[item]] = row_number
            labels[item] = row.get("label") or None
        t, i = period_pos[period], item_pos[item]
        if (t, i) in locator.rows:
            errors.append(FieldError(f"#row={row_number}", f"period {period!r} and item {item!r} "
                                     f"were already given in row {locator.rows[(t, i)]}"))
            break
        locator.rows[(t, i)] = row_number
        cells.append((t, i, row["price"], row.get("quantity"), row.get("expenditure")))
    if errors:
        raise RequestProblem(errors)
    periods, ids = list(period_pos), list(item_pos)
    locator.periods, locator.items = periods, ids
    _check_limits(len(periods), len(ids), max_periods=max_periods, max_items=max_items,
                  max_cells=max_cells, where=("#row=1", "#row=1", "#row=1"))
    axis = ItemAxis(ids, [labels[i] for i in ids])
    shape = (len(periods), len(ids))
    prices = np.full(shape, np.nan)
    quantities = np.full(shape, np.nan) if "quantity" in columns else None
    expenditures = np.full(shape, np.nan) if "expenditure" in columns else None
    for t, i, p, q, e in cells:
        prices[t, i] = p
        if quantities is not None and q is not None:
            quantities[t, i] = q
        if expenditures is not None and e is not None:
            expenditures[t, i] = e
    return PanelInput(periods, axis, prices, quantities, expenditures, locator)


# -- the core call --------------------------------------------------------------------------------


@dataclass
class SeriesRun:
    result: IndexSeries
    axis: ItemAxis
    model: Preferences | None
    panel: Panel


def _period(panel: Panel, locator: Locator, name: str, label: Any, default: int) -> int:
    with locator.translating():
        return panel.period_index(name, None if label is None else str(label), default)


def run_series(data: PanelInput, options: SeriesOptions, *, max_tree_depth: int,
               compute_deadline_seconds: float | None = None) -> SeriesRun:
    """Check the panel, calibrate the model to the base period and compute the series."""
    loc = data.locator
    with loc.translating():
        panel = Panel.checked(data.prices, quantities=data.quantities,
                              expenditures=data.expenditures, periods=data.periods,
                              items=data.axis.ids, frequency=options.frequency)
    base = _period(panel, loc, "base_period", options.base_period, 0)
    reference = _period(panel, loc, "reference_period", options.reference_period, base)
    span = None
    if options.span is not None:
        span = (_period(panel, loc, "span", options.span.start, 0),
                _period(panel, loc, "span", options.span.end, panel.n_periods - 1))
    loop = None
    if options.loop is not None:
        loop = []
        for j, label in enumerate(options.loop):
            if str(label) not in panel.periods:
                raise RequestProblem([FieldError(loc.option("loop", j), f"period {str(label)!r} is "
                                                 "not in the panel")])
            loop.append(panel.periods.index(str(label)))
    weights: WeightReference | int | None = None
    wr = options.weight_reference
    if wr is not None and wr.period is not None:
        weights = _period(panel, loc, "weight_reference", wr.period, 0)
    elif wr is not None:
        vectors = {}
        for key, core, value in (("prices", "pb", wr.prices), ("quantities", "qb", wr.quantities),
                                 ("shares", "wb", wr.shares)):
            if value is not None:
                loc.keyed[core] = [isinstance(value, dict)]
                vectors[key] = data.axis.vector(value, f"/weight_reference/{key}")
        with loc.translating():
            weights = WeightReference.checked(len(data.axis), **vectors)

    model = None
    if options.model is not None:
        with loc.translating():
            budget, items = base_budget(panel, base)
        sub = ItemAxis([data.axis.ids[i] for i in items], [data.axis.labels[i] for i in items])
        ptr = Pointers(sub)
        loc.model_pointers = ptr
        try:
            model = model_to_core(options.model, budget, sub, ptr, max_tree_depth=max_tree_depth,
                                  compute_deadline_seconds=compute_deadline_seconds)
        except RequestProblem as problem:
            raise loc.rewrite(problem) from problem
    with loc.translating():
        result = index_series(
            panel, base=base, reference=reference, reference_value=float(options.reference_value),
            formulas=options.formulas, model=model,
            lloyd_moulton_sigma=options.lloyd_moulton_sigma, weight_reference=weights,
            new_goods_sigma=options.new_goods_sigma, geks_window=options.geks.window,
            geks_splice=options.geks.splice, span=span, loop=loop)
    return SeriesRun(result, data.axis, model, panel)


def options_from_query(query: dict[str, Any]) -> SeriesOptions:
    """The CSV operation's query parameters as options; errors point at ``#/query/<name>``."""
    body: dict[str, Any] = {}
    for key in ("base_period", "reference_period", "reference_value", "frequency",
                "lloyd_moulton_sigma", "new_goods_sigma"):
        if query.get(key) is not None:
            body[key] = query[key]
    for key in ("formulas", "loop"):
        if query.get(key):
            body[key] = [x.strip() for x in str(query[key]).split(",") if x.strip()]
    if query.get("weight_reference_period") is not None:
        body["weight_reference"] = {"period": query["weight_reference_period"]}
    geks: dict[str, Any] = {}
    if query.get("geks_window") is not None:
        geks["window"] = query["geks_window"]
    if query.get("geks_splice") is not None:
        geks["splice"] = query["geks_splice"]
    body["geks"] = geks
    if query.get("span_start") is not None or query.get("span_end") is not None:
        body["span"] = {"start": query.get("span_start"), "end": query.get("span_end")}
    if query.get("model"):
        try:
            body["model"] = json.loads(query["model"])
        except json.JSONDecodeError as exc:
            raise RequestProblem([FieldError("#/query/model", f"must be a JSON object such as "
                                             f'{{"family": "ces", "sigma": 0.7}}: {exc.msg}')]) from None
    try:
        return SeriesOptions.model_validate(body)
    except ValidationError as exc:
        names = {"weight_reference": "weight_reference_period", "span": "span_start",
                 "geks": "geks_window"}
        errors = []
        for err in exc.errors():
            loc = [str(x) for x in err.get("loc", ())]
            head = loc[0] if loc else ""
            if head == "geks" and len(loc) > 1:
                name = f"geks_{loc[1]}"
            elif head == "model":
                name = "model" + "".join(f"/{x}" for x in loc[1:])
            else:
                name = names.get(head, head)
            errors.append(FieldError(f"#/query/{name}", str(err.get("msg", "is not valid"))))
        raise RequestProblem(errors) from None


# -- response ------------------------------------------------------------------------------------


class NoticeOut(StrictModel):
    code: str
    message: str


class FormulaSeriesOut(StrictModel):
    formula: str
    title: str
    compared_with: Literal["base", "current", "midpoint"] = Field(
        description="Which Konüs series the bias is measured against.")
    fixed_base: list[float] = Field(description="Direct comparisons with the base period, on the "
                                    "index reference period.")
    chained: list[float] = Field(description="Period-to-period links multiplied, on the index "
                                 "reference period.")
    links: list[float] = Field(description="P(t-1, t) for the second period on, as ratios.")
    chain_drift_percent: list[float] = Field(description="100 (chained / fixed-base - 1), both "
                                             "from the base period.")
    loop_product: float = Field(description="The product of the formula's bilateral indices "
                                "around the loop (1 for a transitive index).")
    circularity_failure_percent: float = Field(description="100 (loop_product - 1).")
    rule_for_items_that_come_and_go: str


class KonusSeriesOut(StrictModel):
    family: str
    homothetic: bool
    fixed_base: dict[str, list[float]] = Field(
        description="base: e(p_t,u_b)/e(p_b,u_b); current: e(p_t,u_t)/e(p_b,u_t); midpoint.")
    chained: dict[str, list[float]] = Field(
        description="Links t-1 -> t at u_{t-1} (base), at u_t (current) or at their midpoint.")
    incomes: list[float] = Field(description="Spending on the model's items per period.")
    utilities: list[float] = Field(description="u_t = v(p_t, m_t), the model's own scale.")
    items: list[str] = Field(description="The model's items: those priced in the base period.")
    model_parameters: dict[str, Any]
    rule_for_items_that_come_and_go: str


class MultilateralOut(StrictModel):
    method: str
    bilateral: str
    full_span: list[float] = Field(description="GEKS over the whole panel.")
    rolling: list[float] | None = Field(description="Rolling-window GEKS, spliced.")
    window: int | None
    splice: str
    loop_product: float
    rule_for_items_that_come_and_go: str


class BiasOut(StrictModel):
    series: str
    kind: Literal["fixed_base", "chained", "full_span", "rolling"]
    compared_with: Literal["base", "current", "midpoint"]
    points: list[float] = Field(description="100 (P_t - K_t), on reference 100.")
    percent: list[float] = Field(description="100 (P_t / K_t - 1).")


class AnnualBiasOut(StrictModel):
    series: str
    kind: Literal["fixed_base", "chained", "full_span", "rolling"]
    compared_with: Literal["base", "current", "midpoint"]
    annual_rate_percent: float
    konus_annual_rate_percent: float
    bias_pp_per_year: float = Field(description="Difference of the average annual rates, in "
                                    "percentage points.")


class SpanOut(StrictModel):
    start: str
    end: str
    years: float | None
    frequency: str | None
    periods_per_year: int | None


class AnnualBiasBlock(StrictModel):
    span: SpanOut
    definition: str
    by_series: list[AnnualBiasOut]


class ChainDriftOut(StrictModel):
    loop: list[str]
    periods_with_base_prices: list[str] = Field(
        description="Periods whose prices all equal the base period's: a transitive index is at "
                    "the base value there.")
    definition: str


class ItemTreatmentOut(StrictModel):
    period: str
    item: str
    priced: bool
    fixed_base: Literal["used", "left_out"]
    chained: Literal["used", "left_out", "none"]
    model: Literal["used", "price_carried", "outside_model", "no_model"]
    carried_from: str | None
    detail: str


class WeightItemOut(StrictModel):
    item: str
    share: float | None = Field(description="Expenditure share in the weight-reference period.")
    price_updated_share: float | None = Field(
        description="Share price-updated to the base period: s_w p_b / p_w, rescaled.")


class WeightsOut(StrictModel):
    period: str | None
    items: list[WeightItemOut]
    rule: str


class SeriesResponse(StrictModel):
    periods: list[str]
    items: list[str]
    frequency: str | None
    base_period: str
    reference_period: str
    reference_value: float
    formulas: list[FormulaSeriesOut]
    konus: KonusSeriesOut | None
    multilateral: list[MultilateralOut]
    bias: list[BiasOut]
    annual_bias: AnnualBiasBlock | None
    chain_drift: ChainDriftOut
    item_treatment: list[ItemTreatmentOut]
    weights: WeightsOut | None
    lloyd_moulton_sigma: float | None
    new_goods_sigma: float | None
    notices: list[NoticeOut]
    caution: str

    @classmethod
    def from_run(cls, run: SeriesRun) -> SeriesResponse:
        r = run.result
        labels = list(r.periods)
        ids = run.axis.ids
        drift = r.chain_drift
        konus = None
        if r.konus is not None:
            k = r.konus
            konus = KonusSeriesOut(
                family=k.family, homothetic=k.homothetic,
                fixed_base={t: v.tolist() for t, v in k.fixed_base.items()},
                chained={t: v.tolist() for t, v in k.chained.items()},
                incomes=k.incomes.tolist(), utilities=k.utilities.tolist(),
                items=[ids[i] for i in k.items],
                model_parameters=dict(run.model.parameters()) if run.model is not None else {},
                rule_for_items_that_come_and_go=MODEL_RULE)
        annual = None
        if r.span.years is not None:
            annual = AnnualBiasBlock(
                span=SpanOut(start=labels[r.span.start], end=labels[r.span.end],
                             years=r.span.years, frequency=r.span.frequency,
                             periods_per_year=r.span.periods_per_year),
                definition=ANNUAL_DEFINITION,
                by_series=[AnnualBiasOut(series=a.series, kind=a.kind,  # type: ignore[arg-type]
                                         compared_with=a.compared_with,
                                         annual_rate_percent=a.rate_percent,
                                         konus_annual_rate_percent=a.konus_rate_percent,
                                         bias_pp_per_year=a.bias_pp) for a in r.annual_bias])
        weights = None
        if r.weights is not None:
            w = r.weights
            weights = WeightsOut(
                period=None if w.period is None else labels[w.period],
                items=[WeightItemOut(item=ids[i], share=_num(w.shares[i]),
                                     price_updated_share=None if w.price_updated is None
                                     else _num(w.price_updated[i])) for i in range(len(ids))],
                rule=WEIGHTS_RULE)
        return cls(
            periods=labels, items=ids, frequency=r.span.frequency or run.panel.frequency,
            base_period=labels[r.base], reference_period=labels[r.reference],
            reference_value=r.reference_value,
            formulas=[FormulaSeriesOut(
                formula=f.name, title=f.title, compared_with=f.target,
                fixed_base=f.fixed_base.tolist(), chained=f.chained.tolist(),
                links=f.links.tolist(), chain_drift_percent=drift.drift_percent[f.name].tolist(),
                loop_product=drift.loop_product[f.name],
                circularity_failure_percent=100.0 * (drift.loop_product[f.name] - 1.0),
                rule_for_items_that_come_and_go=f.rule) for f in r.formulas.values()],
            konus=konus,
            multilateral=[MultilateralOut(
                method=g.name, bilateral=g.link, full_span=g.full_span.tolist(),
                rolling=None if g.rolling is None else g.rolling.tolist(), window=g.window,
                splice=g.splice, loop_product=drift.loop_product[g.name],
                rule_for_items_that_come_and_go=g.rule) for g in r.multilateral],
            bias=[BiasOut(series=b.series, kind=b.kind,  # type: ignore[arg-type]
                          compared_with=b.compared_with, points=b.points.tolist(),
                          percent=b.percent.tolist()) for b in r.bias],
            annual_bias=annual,
            chain_drift=ChainDriftOut(loop=[labels[t] for t in drift.loop],
                                      periods_with_base_prices=[labels[t] for t in
                                                                drift.periods_with_base_prices],
                                      definition=DRIFT_DEFINITION),
            item_treatment=[ItemTreatmentOut(
                period=labels[e.period], item=ids[e.item], priced=e.priced,
                fixed_base=e.fixed_base, chained=e.chained, model=e.model,  # type: ignore[arg-type]
                carried_from=None if e.carried_from is None else labels[e.carried_from],
                detail=describe_treatment(e, labels, r.base)) for e in r.item_treatment],
            weights=weights,
            lloyd_moulton_sigma=r.lloyd_moulton_sigma,
            new_goods_sigma=r.new_goods_sigma,
            notices=[NoticeOut(code=n.code, message=n.message) for n in r.notices],
            caution=CAUTION,
        )


def _num(x: float) -> float | None:
    return None if not np.isfinite(x) else float(x)


ANNUAL_DEFINITION = (
    "For a series P and its Konüs series K over the span from a to c of Y years: average annual "
    "rates 100((P_c/P_a)^(1/Y) - 1) and 100((K_c/K_a)^(1/Y) - 1); the bias is their difference "
    "in percentage points per year."
)
DRIFT_DEFINITION = (
    "chain_drift_percent = 100 (chained_t / fixed_base_t - 1), both from the base period; "
    "loop_product multiplies the formula's bilateral indices around the loop, closing back to its "
    "first period (Fisher's circular test: 1 for a transitive index)."
)
WEIGHTS_RULE = (
    "Lowe prices the weight-reference basket q_w: sum p_t q_w / sum p_b q_w. Young averages price "
    "relatives with the weight-reference shares s_w. Price-updated shares "
    "s_w (p_b / p_w) / sum_j s_w,j (p_b,j / p_w,j) turn Young into Lowe (CPI Manual 2004, ch. 15)."
)


# -- CSV answer ---------------------------------------------------------------------------------


def csv_table(run: SeriesRun) -> tuple[list[str], list[list[Any]]]:
    """The per-period table: one row per period, one column per series (see the docs)."""
    r = run.result
    ids = run.axis.ids
    n_t = len(r.periods)
    columns: list[tuple[str, Sequence[Any]]] = []
    if r.konus is not None:
        for kind, block in (("fixed_base", r.konus.fixed_base), ("chained", r.konus.chained)):
            for target, values in block.items():
                columns.append((f"konus_{kind}_{target}", values.tolist()))
    bias = {(b.series, b.kind): b for b in r.bias}
    for f in r.formulas.values():
        columns.append((f"{f.name}_fixed_base", f.fixed_base.tolist()))
        columns.append((f"{f.name}_chained", f.chained.tolist()))
        columns.append((f"{f.name}_link", [None, *f.links.tolist()]))
        columns.append((f"{f.name}_chain_drift_percent",
                        r.chain_drift.drift_percent[f.name].tolist()))
        for kind in ("fixed_base", "chained"):
            if (f.name, kind) in bias:
                columns.append((f"{f.name}_bias_{kind}_percent",
                                bias[(f.name, kind)].percent.tolist()))
    for g in r.multilateral:
        columns.append((g.name, g.full_span.tolist()))
        if (g.name, "full_span") in bias:
            columns.append((f"{g.name}_bias_percent", bias[(g.name, "full_span")].percent.tolist()))
        if g.rolling is not None:
            columns.append((f"{g.name}_rolling", g.rolling.tolist()))
            if (g.name, "rolling") in bias:
                columns.append((f"{g.name}_rolling_bias_percent",
                                bias[(g.name, "rolling")].percent.tolist()))
    not_priced: list[list[str]] = [[] for _ in range(n_t)]
    out_fixed: list[list[str]] = [[] for _ in range(n_t)]
    out_link: list[list[str]] = [[] for _ in range(n_t)]
    for e in r.item_treatment:
        if not e.priced:
            not_priced[e.period].append(ids[e.item])
        if e.fixed_base == "left_out":
            out_fixed[e.period].append(ids[e.item])
        if e.chained == "left_out":
            out_link[e.period].append(ids[e.item])
    columns.append(("items_not_priced", [";".join(x) for x in not_priced]))
    columns.append(("items_left_out_fixed_base", [";".join(x) for x in out_fixed]))
    columns.append(("items_left_out_of_link", [";".join(x) for x in out_link]))
    header = ["period"] + [name for name, _ in columns]
    rows = [[r.periods[t]] + [values[t] for _, values in columns] for t in range(n_t)]
    return header, rows


__all__ = [
    "SeriesOptions",
    "SeriesRequest",
    "SeriesResponse",
    "csv_table",
    "options_from_query",
    "panel_from_csv",
    "panel_from_json",
    "run_series",
]
