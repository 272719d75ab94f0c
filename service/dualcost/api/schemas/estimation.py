"""Request and response of the estimation operations: POST /v1/fits (JSON), POST /v1/fits/csv (a
CSV upload) and POST /v1/fitted-comparisons (fit, then compare, with intervals).

The data are T observations (households, periods, or households in periods) of the same n items,
in the same shape as the index series: one row per observation of ``prices``, and one of
``shares`` (with ``total_expenditure`` per observation), ``expenditures`` (money spent on each
item) or ``quantities``; ``weights`` per observation (survey weights) are optional. Rows are
objects keyed by item id or lists in the order of ``items``. As CSV, the long form: one row per
observation and item (see :func:`data_from_csv`).

Errors point at the JSON field (``/prices/3/rye_loaf``), the CSV cell (``#cell=14,3``, RFC 7111)
or the query parameter (``#/query/family``).
"""

from __future__ import annotations

import csv
import io
import json
import math
from collections.abc import Sequence
from contextlib import AbstractContextManager
from dataclasses import dataclass, field
from typing import Annotated, Any, Literal

import numpy as np
from pydantic import Field, ValidationError, model_validator

from ...core.comparison import Comparison, WeightReference
from ...core.errors import InvalidInput
from ...core.estimation import ComparisonIntervals, FitResult, Interval, Panel, comparison_intervals, fit
from ...core.estimation.system import Label
from ...core.preferences import BaseBudget
from ..problems import FieldError, RequestProblem
from ..tabular import read_table
from .common import FiniteFloat, ItemAxis, ItemIn, StrictModel, VectorIn, invalid_input_as_problem
from .comparison import (
    CAUTION,
    ComparisonRequest,
    ComparisonResponse,
    CurrentIn,
    FormulaName,
    WeightReferenceIn,
)
from ..inputs.tree import tree_to_core

FittedFamily = Literal["ces", "nested_ces", "stone_geary", "aids", "quaids"]
Estimator = Literal["nonlinear", "linear_approximate"]
Restrictions = Literal["none", "homogeneity", "symmetry"]
Row = Annotated[list[FiniteFloat] | dict[str, FiniteFloat], Field(
    union_mode="left_to_right",  # the forms cannot be confused (see VectorIn)
    description="One observation: an object keyed by item id, or a list in the order of `items`.")]
ObservationLabel = Annotated[str | int, Field(description="A household id, a period, or both.")]
#: The model options, by core argument name, as (JSON Pointer, CSV query parameter).
_OPTION_PLACES = {
    name: (f"/model/{name}", name)
    for name in ("family", "estimator", "restrictions", "quadratic", "price_terms", "alpha0", "tree")
} | {
    "confidence_level": ("/confidence_level", "confidence_level"),
    "max_iterations": ("/max_iterations", "max_iterations"),
    "point_expenditure": ("/elasticities_at/expenditure", "elasticities_at"),
    "point_prices": ("/elasticities_at/prices", "elasticities_at"),
}


# -- requests ---------------------------------------------------------------------------------


class FitModelIn(StrictModel):
    """The family to fit, and how (see the operation's description for the estimators)."""

    family: FittedFamily = Field(description="ces, nested_ces, stone_geary (the linear "
                                 "expenditure system), aids or quaids.")
    estimator: Estimator | None = Field(
        None, description="aids only: nonlinear (default; iterated nonlinear least squares) or "
                          "linear_approximate (Stone's price index, linear least squares).")
    restrictions: Restrictions | None = Field(
        None, description="aids and quaids: none, homogeneity, or symmetry (default; implies "
                          "homogeneity). Adding-up is always imposed. A comparison needs symmetry.")
    quadratic: bool = Field(False, description="aids: add the quadratic expenditure term (QUAIDS).")
    price_terms: bool | None = Field(
        None, description="aids and quaids: false fixes every gamma at 0 (Engel curves only, for "
                          "a cross-section at one set of prices).")
    alpha0: FiniteFloat | None = Field(
        None, description="aids and quaids: the constant of ln a(p), fixed, not estimated "
                          "(default 0).")
    tree: dict[str, Any] | None = Field(
        None, description="nested_ces: the grouping, a group with an optional name and children "
                          "(item ids or groups); no sigma (it is what the fit estimates).")


class PointIn(StrictModel):
    """Where the elasticities are evaluated."""

    prices: VectorIn
    expenditure: FiniteFloat = Field(description="Total expenditure m.")


class FitRequest(StrictModel):
    """Budget data of T observations and the model to fit."""

    items: list[ItemIn] = Field(min_length=2, description="The items, in a fixed order.")
    observations: list[ObservationLabel] | None = Field(
        None, description="A label per observation (default: 1, 2, ...).")
    prices: list[Row] = Field(min_length=1, description="One row of prices per observation.")
    shares: list[Row] | None = Field(None, description="Budget shares, one row per observation, "
                                     "each in [0, 1] and summing to 1 (with total_expenditure).")
    total_expenditure: list[FiniteFloat] | None = Field(
        None, description="Total expenditure of each observation (with shares).")
    expenditures: list[Row] | None = Field(
        None, description="Money spent on each item, one row per observation (instead of shares).")
    quantities: list[Row] | None = Field(
        None, description="Quantities bought, one row per observation (instead of shares).")
    weights: list[FiniteFloat] | None = Field(
        None, description="A survey weight per observation, above zero (default: all 1).")
    normalise_shares: bool = Field(
        False, description="Divide shares that do not sum to 1 by their sum; the answer says so.")
    model: FitModelIn
    confidence_level: float = Field(0.95, gt=0.0, lt=1.0, description="Of every interval.")
    elasticities_at: PointIn | None = Field(
        None, description="Where to evaluate elasticities (default: the sample's weighted "
                          "geometric mean prices and total expenditure).")
    max_iterations: int = Field(200, ge=1, le=1000, description="Of the iterated least squares.")
    residuals: bool = Field(True, description="Include each observation's fitted shares and "
                            "residuals.")

    @model_validator(mode="after")
    def _one_kind_of_spending(self) -> FitRequest:
        given = [k for k in ("shares", "expenditures", "quantities") if getattr(self, k) is not None]
        if len(given) != 1:
            raise ValueError("give the spending as exactly one of shares (with total_expenditure), "
                             f"expenditures or quantities; got {', '.join(given) or 'none'}")
        if (self.shares is None) != (self.total_expenditure is None):
            raise ValueError("total_expenditure goes with shares, and shares need it")
        return self

    def data(self) -> PanelInput:
        return data_from_json(self)

    def run(self, settings: Any) -> tuple[FitResult, PanelInput]:
        return run_fit(self.data(), self.model, options_of(self), settings, csv=False)


class FitBaseIn(StrictModel):
    """Base-period prices and total expenditure; the bundle, as quantities or shares, is optional:
    without it the base bundle is the fitted model's demand at these prices and expenditure, so
    that calibrating the family keeps the fitted parameters."""

    prices: VectorIn
    expenditure: FiniteFloat | None = Field(None, description="Total base expenditure m0 "
                                            "(required unless quantities are given).")
    quantities: VectorIn | None = None
    shares: VectorIn | None = None

    @model_validator(mode="after")
    def _bundle(self) -> FitBaseIn:
        if self.quantities is not None and self.shares is not None:
            raise ValueError("give the base bundle as quantities or as shares, not both")
        if self.quantities is None and self.expenditure is None:
            raise ValueError("give the base total expenditure (expenditure)")
        return self


class FitComparisonIn(StrictModel):
    """The price change to evaluate under the fitted model (as in POST /v1/comparisons)."""

    base: FitBaseIn
    current: CurrentIn
    reference_income: FiniteFloat | None = None
    weight_reference: WeightReferenceIn | None = Field(
        None, description="An earlier period's prices with quantities or shares (Lowe, Young).")
    lloyd_moulton_sigma: FiniteFloat | None = None
    formulas: list[FormulaName] | None = None  # type: ignore[valid-type]


class UncertaintyIn(StrictModel):
    """The parametric bootstrap behind the intervals."""

    draws: int = Field(500, ge=10, description="Parameter draws.")
    seed: int = Field(0, ge=0, description="Seed of the random generator (same seed, same "
                      "interval).")


class FitAndCompareRequest(FitRequest):
    """Fit a model to budget data, then compare two price situations under it."""

    comparison: FitComparisonIn
    uncertainty: UncertaintyIn = Field(default_factory=UncertaintyIn)


# -- the data, from JSON or CSV -----------------------------------------------------------------


def _escape(token: str) -> str:
    return token.replace("~", "~0").replace("/", "~1")


@dataclass
class Locator:
    """Turns a core error's argument and index into a pointer at the JSON field or CSV cell."""

    axis: ItemAxis
    csv: bool
    spending_field: str  # "shares", "expenditures" or "quantities" (JSON), or the CSV column
    keyed: dict[str, list[bool]] = field(default_factory=dict)  # JSON rows given as objects
    rows: dict[tuple[int, int], int] = field(default_factory=dict)  # CSV row of (t, i)
    first_row: dict[int, int] = field(default_factory=dict)  # CSV first row of observation t
    columns: dict[str, int] = field(default_factory=dict)  # CSV column numbers (from 1)

    def _json_cell(self, name: str, t: int, i: int | None) -> str:
        if i is None:
            return f"/{name}/{t}"
        keyed = self.keyed.get(name, [])
        token = _escape(self.axis.ids[i]) if t < len(keyed) and keyed[t] else str(i)
        return f"/{name}/{t}/{token}"

    def _csv_cell(self, column: str, t: int, i: int | None) -> str:
        row = self.first_row.get(t, 1) if i is None else self.rows.get((t, i), 1)
        col = self.columns.get(column)
        return f"#cell={row},{col}" if col else f"#row={row}"

    def pointer(self, exc: InvalidInput) -> str:
        p, idx = exc.parameter, exc.index
        t = idx[0] if isinstance(idx, tuple) else idx
        i = idx[1] if isinstance(idx, tuple) and len(idx) > 1 else None
        if p in _OPTION_PLACES:
            where, query = _OPTION_PLACES[p]
            if p == "point_prices" and isinstance(idx, int) and not self.csv:
                return f"{where}/{_escape(self.axis.ids[idx])}"
            return f"#/query/{query}" if self.csv else where
        if p in ("prices", "shares", "expenditure", "weights") and t is None:
            column = {"prices": "price", "shares": self.spending_field}.get(p, p)
            return f"#col={self.columns.get(column, 1)}" if self.csv else f"/{_json_field(p, self)}"
        if p in ("prices", "shares", "expenditure", "weights"):
            assert isinstance(t, int)
            if self.csv:
                column = {"prices": "price", "shares": self.spending_field,
                          "expenditure": "total_expenditure" if self.spending_field == "share"
                          else self.spending_field, "weights": "weight"}[p]
                return self._csv_cell(column, t, i if p in ("prices", "shares") else None)
            name = _json_field(p, self)
            return self._json_cell(name, t, i if p in ("prices", "shares") else None)
        if p == "items" and isinstance(idx, int):
            if self.csv:
                row = min((r for (_, k), r in self.rows.items() if k == idx), default=1)
                return f"#row={row}"
            return f"/items/{idx}"
        if p == "observations":
            return "#row=1" if self.csv else "/prices"
        if p == "items":
            return "#row=1" if self.csv else "/items"
        return ""

    def _rule(self, exc: InvalidInput) -> str:
        rule, idx = exc.rule, exc.index
        if exc.parameter in ("prices", "shares") and isinstance(idx, tuple) and len(idx) == 2:
            return f"{rule} (item {self.axis.ids[idx[1]]!r})"
        if exc.parameter == "items" and isinstance(idx, int):
            return f"item {self.axis.ids[idx]!r}: {rule}"
        return rule

    def translating(self) -> AbstractContextManager[None]:
        return invalid_input_as_problem(self.pointer, self._rule)


def _json_field(core_name: str, loc: Locator) -> str:
    if core_name == "prices":
        return "prices"
    if core_name == "shares":
        return loc.spending_field
    if core_name == "expenditure":
        return "total_expenditure" if loc.spending_field == "shares" else loc.spending_field
    return "weights"


@dataclass
class PanelInput:
    """Observations in arrays, before the core's checks, with a locator for errors."""

    axis: ItemAxis
    labels: list[str]
    prices: np.ndarray
    shares: np.ndarray | None
    total: np.ndarray | None
    spending: np.ndarray | None
    weights: np.ndarray | None
    locator: Locator

    def panel(self, *, normalise: bool) -> Panel:
        loc = self.locator
        with loc.translating():
            if self.shares is not None:
                return Panel.checked(self.prices, self.shares, self.total, self.weights,
                                     normalise=normalise)
            assert self.spending is not None
            spend = self.spending
            bad = np.argwhere(spend < 0.0)
            if bad.size:
                t, i = (int(v) for v in bad[0])
                raise InvalidInput("shares", f"spending must not be negative, got {spend[t, i]!r}",
                                   (t, i))
            if not np.all(self.prices > 0.0):
                t, i = (int(v) for v in np.argwhere(self.prices <= 0.0)[0])
                raise InvalidInput("prices", f"must be greater than zero, got {self.prices[t, i]!r}",
                                   (t, i))
            total = spend.sum(axis=1)
            empty = np.flatnonzero(total <= 0.0)
            if empty.size:
                raise InvalidInput("shares", "the spending on every item of this observation is "
                                   "zero: there is no budget to share", (int(empty[0]),))
            return Panel.checked(self.prices, spend / total[:, None], total, self.weights)


def _json_rows(values: list[Any], name: str, axis: ItemAxis, n_obs: int) -> tuple[np.ndarray, list[bool]]:
    """Rows in item order; every row must have every item (the items may not change)."""
    if len(values) != n_obs:
        raise RequestProblem([FieldError(f"/{name}", f"has {len(values)} rows but prices has "
                                         f"{n_obs}: give one row per observation")])
    n = len(axis)
    out = np.empty((n_obs, n))
    keyed = []
    for t, row in enumerate(values):
        where = f"/{name}/{t}"
        keyed.append(isinstance(row, dict))
        if isinstance(row, list):
            if len(row) != n:
                raise RequestProblem([FieldError(where, f"has {len(row)} values but there are {n} "
                                                 "items: every observation must have every item, "
                                                 "in the order of items")])
            out[t] = row
            continue
        unknown = [k for k in row if k not in axis.position]
        if unknown:
            raise RequestProblem([FieldError(f"{where}/{_escape(unknown[0])}", f"{unknown[0]!r} is "
                                             "not an item id listed in items: every observation "
                                             "must have the same items")])
        missing = [i for i in axis.ids if i not in row]
        if missing:
            shown = ", ".join(repr(m) for m in missing[:5]) + (" ..." if len(missing) > 5 else "")
            raise RequestProblem([FieldError(where, f"has no value for item(s) {shown}: every "
                                             "observation must have every item (the items may "
                                             "not change between observations)")])
        out[t] = [row[i] for i in axis.ids]
    return out, keyed


def data_from_json(request: FitRequest) -> PanelInput:
    axis = ItemAxis.from_request(request.items)
    n_obs = len(request.prices)
    labels = _labels(request.observations, n_obs)
    kind = ("shares" if request.shares is not None else
            "expenditures" if request.expenditures is not None else "quantities")
    loc = Locator(axis, csv=False, spending_field=kind)
    prices, loc.keyed["prices"] = _json_rows(request.prices, "prices", axis, n_obs)
    raw = getattr(request, kind)
    values, loc.keyed[kind] = _json_rows(raw, kind, axis, n_obs)
    total = weights = None
    for name, vector in (("total_expenditure", request.total_expenditure),
                         ("weights", request.weights)):
        if vector is not None and len(vector) != n_obs:
            raise RequestProblem([FieldError(f"/{name}", f"has {len(vector)} values but there are "
                                             f"{n_obs} observations: give one per observation")])
    if request.total_expenditure is not None:
        total = np.asarray(request.total_expenditure, dtype=np.float64)
    if request.weights is not None:
        weights = np.asarray(request.weights, dtype=np.float64)
    if kind == "shares":
        return PanelInput(axis, labels, prices, values, total, None, weights, loc)
    spending = values if kind == "expenditures" else values * prices
    return PanelInput(axis, labels, prices, None, None, spending, weights, loc)


def _labels(given: Sequence[str | int] | None, n_obs: int) -> list[str]:
    if given is None:
        return [str(t + 1) for t in range(n_obs)]
    if len(given) != n_obs:
        raise RequestProblem([FieldError("/observations", f"has {len(given)} labels but there are "
                                         f"{n_obs} rows of prices: give one label per observation")])
    labels = [str(v) for v in given]
    seen: dict[str, int] = {}
    for t, label in enumerate(labels):
        if label in seen:
            raise RequestProblem([FieldError(f"/observations/{t}", f"observation {label!r} is "
                                             f"listed twice (first at position {seen[label]})")])
        seen[label] = t
    return labels


def _record_numbers(text: str) -> tuple[list[str], list[int]]:
    """The header and the row number of each non-blank record, counted as ``read_table`` does."""
    reader = csv.reader(io.StringIO(text.lstrip("\ufeff")))
    header = [h.strip() for h in next(reader, [])]
    numbers = [k for k, rec in enumerate(reader, start=2) if rec and any(c.strip() for c in rec)]
    return header, numbers


CSV_DESCRIPTION = (
    "The body is `text/csv` in long form, one row per observation and item, rows in any order, "
    "with columns: `observation` (a household id) and/or `period` (an observation is one "
    "household in one period, or one period), `item`, `price`, and the spending as one of: "
    "`share` with `total_expenditure` (the observation's total, repeated on its rows), "
    "`expenditure` (money spent on the item), or `quantity`; optionally `weight` (the "
    "observation's survey weight, repeated on its rows) and `label` (the item's name). Every "
    "observation must list the same items as the first. Errors name the row and column "
    "(`#cell=row,column`, RFC 7111)."
)


def data_from_csv(text: str, *, max_rows: int) -> PanelInput:
    """Long form (see :data:`CSV_DESCRIPTION`); items in the order the first observation lists
    them, observations in order of first appearance."""
    header, numbers = _record_numbers(text)
    columns = {h: j + 1 for j, h in enumerate(header)}
    keys = [c for c in ("observation", "period") if c in columns]
    if not keys:
        raise RequestProblem([FieldError("#row=1", "the header needs a column 'observation' (a "
                                         "household id) or 'period', or both")])
    kinds = [c for c in ("share", "expenditure", "quantity") if c in columns]
    if len(kinds) != 1:
        raise RequestProblem([FieldError("#row=1", "the header needs exactly one spending column: "
                                         "'share' (with 'total_expenditure'), 'expenditure' or "
                                         f"'quantity'; it has {', '.join(kinds) or 'none'}")])
    kind = kinds[0]
    numeric = ["price", kind] + (["total_expenditure"] if kind == "share" else [])
    rows = read_table(text, required=keys + ["item"] + numeric, numeric=numeric,
                      optional_numeric=["weight"], max_rows=max_rows)
    if not rows:
        raise RequestProblem([FieldError("#row=2", "the CSV has a header but no rows")])
    loc = Locator(ItemAxis([], []), csv=True, spending_field=kind, columns=columns)
    obs_pos: dict[tuple[str, ...], int] = {}
    item_pos: dict[str, int] = {}
    labels: dict[str, str | None] = {}
    per_obs: dict[str, dict[int, tuple[float, int]]] = {"total_expenditure": {}, "weight": {}}
    cells: list[tuple[int, int, float, float]] = []
    errors: list[FieldError] = []
    for k, row in enumerate(rows):
        r = numbers[k]
        key = tuple(row[c] for c in keys)
        if key not in obs_pos:
            obs_pos[key] = len(obs_pos)
            loc.first_row[obs_pos[key]] = r
        t = obs_pos[key]
        item = row["item"]
        if item not in item_pos:
            if t != 0:
                errors.append(FieldError(f"#cell={r},{columns['item']}", f"item {item!r} is not "
                                         "among the items of the first observation: every "
                                         "observation must list the same items"))
                break
            item_pos[item] = len(item_pos)
            labels[item] = row.get("label") or None
        i = item_pos[item]
        if (t, i) in loc.rows:
            errors.append(FieldError(f"#row={r}", f"observation {' '.join(key)!r} lists item "
                                     f"{item!r} twice (rows {loc.rows[(t, i)]} and {r})"))
            break
        loc.rows[(t, i)] = r
        for name in ("total_expenditure", "weight"):
            if name not in columns:
                continue
            value = row[name]
            if value is None:
                errors.append(FieldError(f"#cell={r},{columns[name]}", f"column {name!r} is empty"))
                continue
            seen = per_obs[name].setdefault(t, (value, r))
            if seen[0] != value:
                errors.append(FieldError(f"#cell={r},{columns[name]}", f"column {name!r} is "
                                         f"{value!r} here but {seen[0]!r} on row {seen[1]}: it is "
                                         "one number per observation"))
        cells.append((t, i, row["price"], row[kind]))
        if len(errors) >= 20:
            break
    if errors:
        raise RequestProblem(errors)
    n_obs, n = len(obs_pos), len(item_pos)
    for t in range(n_obs):
        missing = [it for it, i in item_pos.items() if (t, i) not in loc.rows]
        if missing:
            label = " ".join(next(k for k, v in obs_pos.items() if v == t))
            raise RequestProblem([FieldError(f"#row={loc.first_row[t]}", f"observation {label!r} "
                                             f"has no row for item(s) {', '.join(map(repr, missing[:5]))}"
                                             ": every observation must list the same items")])
    ids = list(item_pos)
    loc.axis = ItemAxis(ids, [labels[i] for i in ids])
    prices = np.empty((n_obs, n))
    values = np.empty((n_obs, n))
    for t, i, p, v in cells:
        prices[t, i] = p
        values[t, i] = v
    obs_labels = [" ".join(k) for k in obs_pos]
    weights = (np.array([per_obs["weight"][t][0] for t in range(n_obs)])
               if "weight" in columns else None)
    if kind == "share":
        total = np.array([per_obs["total_expenditure"][t][0] for t in range(n_obs)])
        return PanelInput(loc.axis, obs_labels, prices, values, total, None, weights, loc)
    spending = values if kind == "expenditure" else values * prices
    return PanelInput(loc.axis, obs_labels, prices, None, None, spending, weights, loc)


# -- the core call ----------------------------------------------------------------------------


@dataclass
class FitOptions:
    confidence_level: float
    point: tuple[np.ndarray, float] | None
    max_iterations: int
    normalise_shares: bool
    residuals: bool


def options_of(request: FitRequest) -> FitOptions:
    point = None
    if request.elasticities_at is not None:
        axis = ItemAxis.from_request(request.items)
        point = (axis.vector(request.elasticities_at.prices, "/elasticities_at/prices"),
                 request.elasticities_at.expenditure)
    return FitOptions(request.confidence_level, point, request.max_iterations,
                      request.normalise_shares, request.residuals)


def run_fit(data: PanelInput, spec: FitModelIn, options: FitOptions, settings: Any, *,
            csv: bool) -> tuple[FitResult, PanelInput]:
    """Check the limits, build the panel and fit; errors come back pointing at the input."""
    axis = data.axis
    n_obs, n = data.prices.shape
    if n > settings.max_items:
        raise RequestProblem([FieldError("#row=1" if csv else "/items", f"has {n} items; the "
                                         f"limit is {settings.max_items}")])
    if n_obs * n > settings.max_fit_cells:
        raise RequestProblem([FieldError("#row=1" if csv else "/prices", f"{n_obs} observations "
                                         f"of {n} items are more than the limit of "
                                         f"{settings.max_fit_cells} cells for one fit")])
    tree = None
    if spec.tree is not None:
        where = "#/query/tree" if csv else "/model/tree"
        # the fit estimates the sigmas: a group's keys go to the core, which checks them
        tree = tree_to_core(spec.tree, axis, where, settings.max_tree_depth, fields=None)
    panel = data.panel(normalise=options.normalise_shares)
    with data.locator.translating():
        result = fit(
            panel, spec.family, estimator=spec.estimator, restrictions=spec.restrictions,
            quadratic=spec.quadratic, price_terms=spec.price_terms, alpha0=spec.alpha0, tree=tree,
            confidence_level=options.confidence_level, point=options.point,
            max_iterations=options.max_iterations, item_names=axis.ids,
            max_jacobian=settings.max_fit_jacobian)
    return result, data


# -- the answer -------------------------------------------------------------------------------


def _num(value: float | None) -> float | None:
    return None if value is None or not math.isfinite(value) else float(value)


def model_for_request(result: FitResult, axis: ItemAxis) -> dict[str, Any]:
    """The fitted model as POST /v1/comparisons takes it: vectors keyed by item id, matrices as
    rows in item order, a tree with item ids."""
    out: dict[str, Any] = {"family": result.family}
    for name, value in result.spec.items():
        if name == "tree":
            out[name] = _tree_ids(value, axis)
        elif isinstance(value, np.ndarray) and value.ndim == 1:
            out[name] = {axis.ids[i]: float(v) for i, v in enumerate(value)}
        elif isinstance(value, np.ndarray):
            out[name] = value.tolist()
        else:
            out[name] = value
    return out


def _tree_ids(tree: dict[str, Any], axis: ItemAxis) -> dict[str, Any]:
    root: dict[str, Any] = {}
    stack = [(tree, root)]
    while stack:
        node, out = stack.pop()
        out.update(name=node["name"], sigma=node["sigma"], children=[])
        for child in node["children"]:
            if isinstance(child, dict):
                sub: dict[str, Any] = {}
                out["children"].append(sub)
                stack.append((child, sub))
            else:
                out["children"].append(axis.ids[child])
    return root


class ParameterOut(StrictModel):
    name: str = Field(description="The parameter with its items or group, e.g. "
                      "gamma[rye_loaf,flat_rent].")
    symbol: str
    items: list[str]
    group: str | None
    estimate: float
    std_error: float | None
    t_statistic: float | None
    p_value: float | None
    ci_low: float | None
    ci_high: float | None
    kind: Literal["estimated", "derived", "fixed"] = Field(
        description="estimated directly; derived from estimated ones by adding-up or a "
                    "restriction (its standard error by the same linear map); or fixed by a "
                    "normalisation (no standard error).")


class TestOut(StrictModel):
    hypothesis: Literal["homogeneity", "symmetry"] = Field(
        description="homogeneity: every row of gamma sums to 0; symmetry: homogeneity and "
                    "gamma symmetric.")
    test: str
    statistic: float
    df: int
    p_value: float
    imposed: bool = Field(description="Whether the fitted model imposes the hypothesis.")


class EstimateOut(StrictModel):
    estimate: float | None
    std_error: float | None
    ci_low: float | None
    ci_high: float | None


class ElasticitiesOut(StrictModel):
    prices: dict[str, float] = Field(description="The point: prices ...")
    expenditure: float = Field(description="... and total expenditure.")
    at: Literal["sample_means", "given"] = Field(
        description="sample_means: the weighted geometric means over the observations.")
    shares: dict[str, float] = Field(description="The model's shares at the point.")
    expenditure_elasticities: dict[str, EstimateOut]
    marshallian: dict[str, dict[str, EstimateOut]] = Field(
        description="marshallian[i][j] = d ln x_i / d ln p_j, income held fixed.")
    hicksian: dict[str, dict[str, EstimateOut]] = Field(
        description="hicksian[i][j]: utility held fixed (Slutsky equation).")
    method: str


class RegularityNoteOut(StrictModel):
    observation: str
    code: str
    message: str


class RegularityOut(StrictModel):
    observations_checked: int
    monotonicity_violations: int = Field(description="Observations with a fitted share outside "
                                         "[0, 1].")
    concavity_violations: int = Field(description="Observations where the Slutsky matrix is not "
                                      "negative semidefinite.")
    symmetry_violations: int = Field(description="Observations where the Slutsky matrix is not "
                                     "symmetric (symmetry not imposed).")
    outside_domain: int
    monotonicity_observations: list[str] = Field(description="The first 50 of them.")
    concavity_observations: list[str] = Field(description="The first 50 of them.")
    notes: list[RegularityNoteOut]


class ResidualOut(StrictModel):
    observation: str
    fitted: list[float] = Field(description="Fitted shares, in item order.")
    residuals: list[float] = Field(description="Observed minus fitted shares, in item order.")


class FitStatsOut(StrictModel):
    observations: int
    equations: int = Field(description="Share equations fitted (items less one: adding-up).")
    parameters: int = Field(description="Free parameters estimated.")
    degrees_of_freedom: float = Field(description="T - K/m, for the t quantiles and p-values.")
    iterations: int
    converged: bool
    weighted: bool
    r_squared: dict[str, float | None] = Field(description="Per item: 1 - weighted residual sum "
                                               "of squares / weighted total sum of squares.")
    residual_covariance: list[list[float]] = Field(
        description="Of the fitted equations (every item but the last), at the estimate.")
    residuals: list[ResidualOut] | None


class NoticeOut(StrictModel):
    code: str
    message: str


class FitResponse(StrictModel):
    family: str = Field(description="The fitted preference family (as POST /v1/comparisons "
                        "names it).")
    estimator: str | None
    restrictions: str | None
    method: str
    covariance_type: str
    confidence_level: float
    items: list[str]
    observations: list[str]
    parameters: list[ParameterOut]
    model: dict[str, Any] = Field(description="The fitted model, ready to send as `model` to POST "
                                  "/v1/comparisons with the same items.")
    fit: FitStatsOut
    tests: list[TestOut]
    elasticities: ElasticitiesOut
    regularity: RegularityOut
    notices: list[NoticeOut]
    caution: str

    @classmethod
    def from_result(cls, r: FitResult, data: PanelInput, *, residuals: bool,
                    given_point: bool) -> FitResponse:
        ids = data.axis.ids
        labels = data.labels
        f = r.fit
        e = r.elasticities
        q = _quantile(r)

        def est(value: float, se: float) -> EstimateOut:
            v, s = _num(value), _num(se)
            if v is None or s is None:
                return EstimateOut(estimate=v, std_error=s, ci_low=None, ci_high=None)
            return EstimateOut(estimate=v, std_error=s, ci_low=v - q * s, ci_high=v + q * s)

        def matrix(values: np.ndarray, ses: np.ndarray) -> dict[str, dict[str, EstimateOut]]:
            return {ids[i]: {ids[j]: est(values[i, j], ses[i, j]) for j in range(len(ids))}
                    for i in range(len(ids))}

        reg = r.regularity
        return cls(
            family=r.family, estimator=r.estimator, restrictions=r.restrictions, method=r.method,
            covariance_type=r.covariance_type, confidence_level=r.confidence_level, items=ids,
            observations=labels,
            parameters=[_parameter_out(p, ids) for p in r.parameters],
            model=model_for_request(r, data.axis),
            fit=FitStatsOut(
                observations=f.n_obs, equations=f.n_equations, parameters=f.n_parameters,
                degrees_of_freedom=f.df_resid, iterations=f.iterations, converged=True,
                weighted=bool(np.any(data.weights != data.weights[0]))
                if data.weights is not None else False,
                r_squared={ids[i]: _num(v) for i, v in enumerate(f.r_squared)},
                residual_covariance=f.residual_covariance.tolist(),
                residuals=[ResidualOut(observation=labels[t], fitted=f.fitted[t].tolist(),
                                       residuals=f.residuals[t].tolist())
                           for t in range(f.n_obs)] if residuals else None),
            tests=[TestOut(hypothesis=t.hypothesis,  # type: ignore[arg-type]
                           test="Wald, robust covariance, chi-squared", statistic=t.statistic,
                           df=t.df, p_value=t.p_value, imposed=t.imposed) for t in r.tests],
            elasticities=ElasticitiesOut(
                prices={ids[i]: float(v) for i, v in enumerate(e.prices)},
                expenditure=e.expenditure_level,
                at="given" if given_point else "sample_means",
                shares={ids[i]: float(v) for i, v in enumerate(e.shares)},
                expenditure_elasticities={ids[i]: est(e.expenditure[i], e.expenditure_se[i])
                                          for i in range(len(ids))},
                marshallian=matrix(e.marshallian, e.marshallian_se),
                hicksian=matrix(e.hicksian, e.hicksian_se),
                method="closed form of the fitted family; delta-method standard errors "
                       "(gradient by central differences); t intervals"),
            regularity=RegularityOut(
                observations_checked=reg.checked, monotonicity_violations=len(reg.monotonicity),
                concavity_violations=len(reg.concavity), symmetry_violations=len(reg.symmetry),
                outside_domain=len(reg.outside_domain),
                monotonicity_observations=[labels[t] for t in reg.monotonicity[:50]],
                concavity_observations=[labels[t] for t in reg.concavity[:50]],
                notes=[RegularityNoteOut(observation=labels[t], code=n.code, message=n.message)
                       for t, n in reg.notes]),
            notices=[NoticeOut(code=n.code, message=n.message) for n in r.notices],
            caution=CAUTION,
        )


def _quantile(r: FitResult) -> float:
    from scipy import stats

    return float(stats.t.ppf(0.5 + 0.5 * r.confidence_level, r.fit.df_resid))


def _label_items(label: Label, ids: list[str]) -> list[str]:
    return [ids[i] for i in label.items]


def _parameter_out(p: Any, ids: list[str]) -> ParameterOut:
    return ParameterOut(
        name=p.label.text(ids), symbol=p.label.symbol, items=_label_items(p.label, ids),
        group=p.label.group, estimate=p.estimate, std_error=_num(p.std_error),
        t_statistic=_num(p.t_statistic), p_value=_num(p.p_value), ci_low=_num(p.ci_low),
        ci_high=_num(p.ci_high), kind=p.kind)


PARAMETER_COLUMNS = ("parameter", "symbol", "items", "group", "estimate", "std_error",
                     "t_statistic", "p_value", "ci_low", "ci_high", "kind")


def parameter_rows(r: FitResult, ids: list[str]) -> list[list[Any]]:
    """The parameter table for a CSV answer, one row per parameter."""
    rows = []
    for p in r.parameters:
        o = _parameter_out(p, ids)
        rows.append([o.name, o.symbol, " ".join(o.items), o.group, o.estimate, o.std_error,
                     o.t_statistic, o.p_value, o.ci_low, o.ci_high, o.kind])
    return rows


# -- fit and compare --------------------------------------------------------------------------


class IntervalOut(StrictModel):
    estimate: float = Field(description="From the estimated parameters.")
    low: float
    high: float
    std_error: float = Field(description="Standard deviation over the draws.")


class FormulaIntervalOut(StrictModel):
    formula: str
    bias_points: IntervalOut
    bias_percent: IntervalOut


class IntervalsOut(StrictModel):
    method: str
    confidence_level: float
    draws: int
    draws_failed: int
    seed: int
    konus: dict[str, IntervalOut] = Field(description="base, current, midpoint (and reference).")
    formulas: list[FormulaIntervalOut]
    compensating_variation: IntervalOut
    equivalent_variation: IntervalOut
    notices: list[NoticeOut]


class FitAndCompareResponse(StrictModel):
    fit: FitResponse
    comparison: ComparisonResponse
    intervals: IntervalsOut
    caution: str


def _interval(i: Interval) -> IntervalOut:
    return IntervalOut(estimate=i.estimate, low=i.low, high=i.high, std_error=i.std_error)


def intervals_out(c: ComparisonIntervals) -> IntervalsOut:
    return IntervalsOut(
        method=c.method, confidence_level=c.confidence_level, draws=c.draws,
        draws_failed=c.failed, seed=c.seed,
        konus={k: _interval(v) for k, v in c.konus.items()},
        formulas=[FormulaIntervalOut(formula=k, bias_points=_interval(v),
                                     bias_percent=_interval(c.bias_percent[k]))
                  for k, v in c.bias_points.items()],
        compensating_variation=_interval(c.compensating_variation),
        equivalent_variation=_interval(c.equivalent_variation),
        notices=[NoticeOut(code=n.code, message=n.message) for n in c.notices])


def _prefixed(problem: RequestProblem) -> RequestProblem:
    """The comparison's errors, pointed at this request's ``comparison`` part (or its model)."""
    errors = []
    for e in problem.errors:
        if e.pointer.startswith("/model"):
            errors.append(FieldError("/model", f"the fitted model: {e.detail}"))
        else:
            errors.append(FieldError("/comparison" + e.pointer, e.detail))
    return RequestProblem(errors, slug=problem.slug)


def run_fit_and_compare(request: FitAndCompareRequest, settings: Any
                        ) -> tuple[FitResult, PanelInput, Comparison, Any, ComparisonIntervals]:
    """Fit, compare under the fitted model, and carry the parameter uncertainty over."""
    draws = request.uncertainty.draws
    if draws > settings.max_bootstrap_draws:
        raise RequestProblem([FieldError("/uncertainty/draws", f"{draws} draws are more than the "
                                         f"limit of {settings.max_bootstrap_draws}")])
    result, data = request.run(settings)
    obstacle = result.comparison_obstacle()
    if obstacle is not None:
        raise RequestProblem([FieldError("/model", obstacle)])
    axis = data.axis
    part = request.comparison
    base = part.base.model_dump(exclude_none=True)
    if part.base.quantities is None and part.base.shares is None:
        p0 = axis.vector(part.base.prices, "/comparison/base/prices")
        if not np.all(p0 > 0.0):
            raise RequestProblem([FieldError("/comparison/base/prices", "must be greater than zero")])
        m0 = float(part.base.expenditure)  # type: ignore[arg-type]
        if not m0 > 0.0:
            raise RequestProblem([FieldError("/comparison/base/expenditure", "must be greater "
                                             "than zero")])
        with data.locator.translating():
            shares = result.shares_at(p0, m0)
        if not (np.all(np.isfinite(shares)) and np.all(shares >= 0.0)):
            raise RequestProblem([FieldError("/comparison/base", "the fitted model's demand at "
                                             "these prices and expenditure has a negative share; "
                                             "give the base bundle (quantities or shares)")])
        base["shares"] = {axis.ids[i]: float(v) for i, v in enumerate(shares / shares.sum())}
    body = {
        "items": [it.model_dump(exclude_none=True) if not isinstance(it, str) else it
                  for it in request.items],
        "base": base, "current": part.current.model_dump(exclude_none=True),
        "model": model_for_request(result, axis),
        "reference_income": part.reference_income,
        "weight_reference": (None if part.weight_reference is None
                             else part.weight_reference.model_dump(exclude_none=True)),
        "lloyd_moulton_sigma": part.lloyd_moulton_sigma, "formulas": part.formulas,
    }
    try:
        from ..operations import compare

        outcome = compare.run(ComparisonRequest.model_validate(body), settings)
        point, model, caxis = outcome.result, outcome.model, outcome.axis
    except RequestProblem as exc:
        raise _prefixed(exc) from exc
    except ValidationError as exc:  # pragma: no cover - every piece was validated above
        raise RequestProblem([FieldError("/comparison", str(exc))]) from exc
    budget = BaseBudget.from_quantities(point.base_prices, point.demands.formula_base_quantities)
    options: dict[str, Any] = {
        "current_income": point.standards.current_income,
        "current_quantities": (point.demands.formula_current_quantities
                               if point.demands.current_quantities_observed else None),
        "reference_income": point.standards.reference_income,
        "lloyd_moulton_sigma": part.lloyd_moulton_sigma,
        "formulas": part.formulas,
        "weight_reference": _weight_reference(part, caxis),
    }
    try:
        intervals = comparison_intervals(result, point, budget, point.current_prices,
                                         options=options, draws=draws,
                                         seed=request.uncertainty.seed)
    except InvalidInput as exc:
        raise RequestProblem([FieldError(f"/uncertainty/{exc.parameter}", exc.rule)]) from exc
    return result, data, point, (model, caxis), intervals


def _weight_reference(part: FitComparisonIn, axis: ItemAxis) -> WeightReference | None:
    """The weight-reference period as the comparison read it (it was checked there)."""
    if part.weight_reference is None:
        return None
    given = part.weight_reference.model_dump(exclude_none=True)
    vectors = {key: axis.vector(value, f"/comparison/weight_reference/{key}")
               for key, value in given.items()}
    return WeightReference.checked(len(axis), **vectors)


def fit_spec_from_query(**values: Any) -> FitModelIn:
    """The model options of the CSV operation, from its query parameters."""
    tree = values.pop("tree", None)
    if tree is not None:
        try:
            tree = json.loads(tree)
        except json.JSONDecodeError as exc:
            raise RequestProblem([FieldError("#/query/tree", f"is not valid JSON: {exc}")]) from None
    try:
        return FitModelIn(tree=tree, **{k: v for k, v in values.items() if v is not None})
    except ValidationError as exc:
        errors = [FieldError(f"#/query/{e['loc'][0] if e.get('loc') else 'tree'}", e["msg"])
                  for e in exc.errors()]
        raise RequestProblem(errors) from None


__all__ = [
    "CSV_DESCRIPTION",
    "FitAndCompareRequest",
    "FitAndCompareResponse",
    "FitRequest",
    "FitResponse",
    "data_from_csv",
    "fit_spec_from_query",
    "intervals_out",
    "parameter_rows",
    "run_fit",
    "run_fit_and_compare",
]
