"""Index series over a panel: POST /v1/index-series (JSON), its CSV upload, the spreadsheet's
series form and the audit all run it.

The panel arrives as JSON rows or as CSV records (:mod:`dualcost.api.inputs.panels`); the core
computes the whole series in one call (:func:`dualcost.core.series.series_by_label`), calling
back for the model once it knows the base period's items; the answer is JSON or a CSV table with
one row per period.
"""

from __future__ import annotations

import math
from collections.abc import Mapping
from dataclasses import dataclass, replace
from typing import Any

import numpy as np

from ...config import Settings
from ...core.preferences import BaseBudget, Preferences
from ...core.revealed_bounds import RevealedPreference
from ...core.sensitivity import Band, band_of
from ...core.series import MODEL_RULE, IndexSeries, LabelledSeries, describe_treatment, series_by_label
from ..inputs.csv import Dialect, dialect_notices
from ..inputs.items import ItemAxis
from ..inputs.locator import Form, Locator, Place
from ..inputs.model import calibrated
from ..inputs.panels import Limits, PanelArrays
from ..inputs.query import json_parameter, names
from ..observability import computing
from ..problems import RequestProblem
from ..render import ByColumn, json_numbers
from ..schemas.common import CAUTION
from ..schemas.model import ModelSpec
from ..schemas.revealed import BOUNDS_METHOD
from ..schemas.series import HEADLINE_LEFT_OUT, Detail, SeriesOptions
from . import bands, changes
from .answers import SCALE_RATIO, notices_json
from .revealed import consistency_json, rows_json

#: Where each core argument of a series is: in the JSON body, in the query string (the CSV
#: upload's options and the spreadsheet form) and in the CSV upload's columns.
PLACES: dict[str, Place] = {
    "prices": Place("/prices", "prices", "panel", column="price"),
    "quantities": Place("/quantities", "quantities", "panel", column="quantity"),
    "expenditures": Place("/expenditures", "expenditures", "panel", column="expenditure"),
    "periods": Place("/periods", "periods", "list", column="period"),
    "items": Place("/items", "items", "list", column="item"),
    "base_period": Place("/base_period", "base_period"),
    "reference_period": Place("/reference_period", "reference_period"),
    "reference_value": Place("/reference_value", "reference_value"),
    "frequency": Place("/frequency", "frequency"),
    "formulas": Place("/formulas", "formulas", "list"),
    "lloyd_moulton_sigma": Place("/lloyd_moulton_sigma", "lloyd_moulton_sigma"),
    "new_goods_sigma": Place("/new_goods_sigma", "new_goods_sigma"),
    "weight_reference": Place("/weight_reference", "weight_reference_period"),
    "weight_reference_period": Place("/weight_reference/period", "weight_reference_period"),
    "pb": Place("/weight_reference/prices", "weight_reference_period", "items"),
    "qb": Place("/weight_reference/quantities", "weight_reference_period", "items"),
    "wb": Place("/weight_reference/shares", "weight_reference_period", "items"),
    "geks": Place("/geks", "geks_window"),
    "geks_window": Place("/geks/window", "geks_window"),
    "window": Place("/geks/window", "geks_window"),
    "splice": Place("/geks/splice", "geks_splice"),
    "span": Place("/span", "span_start"),
    "span_start": Place("/span/start", "span_start"),
    "span_end": Place("/span/end", "span_end"),
    "loop": Place("/loop", "loop", "list"),
    "model": Place("/model", "model", json_text=True),
    "share_unit": Place("/share_unit", "share_unit"),
    "rebase": Place("/rebase", "rebase_period"),
    "rebase_period": Place("/rebase/period", "rebase_period"),
    "rebase_year": Place("/rebase/year", "rebase_year"),
    "revealed_bounds": Place("/revealed_bounds", "revealed_bounds"),
}

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


@dataclass(frozen=True)
class Outcome:
    result: IndexSeries
    axis: ItemAxis
    model: Preferences | None
    frequency: str | None
    #: How a CSV upload was read (None for JSON).
    dialect: Dialect | None = None
    #: On request: the model-free reading of the panel, and the items it used.
    revealed: RevealedPreference | None = None
    revealed_items: tuple[int, ...] = ()
    #: On request (band_models): each model's family and fixed-base Konüs series at base
    #: utility, and the band across them.
    band_series: tuple[tuple[str, np.ndarray], ...] = ()
    band: Band | None = None
    #: full, or headline: the answer without its rows per item (HEADLINE_LEFT_OUT).
    detail: Detail = "full"


def locator(form: Form = "json") -> Locator:
    return Locator(PLACES, form)


def limits(settings: Settings) -> Limits:
    return Limits(settings.max_periods, settings.max_items, settings.max_panel_cells)


def run(options: SeriesOptions, panel: PanelArrays, settings: Settings, loc: Locator,
        operation: str = "indexSeries") -> Outcome:
    """Check the panel, calibrate the model to the base period and compute the series."""
    arguments = core_arguments(options, panel, settings, loc)
    specs = getattr(options, "band_models", None) or []
    cells = panel.prices.size * (1 + len(specs))
    if specs and cells > settings.max_panel_cells:
        raise RequestProblem.at("/band_models", f"{panel.prices.size} cells under "
                                f"{1 + len(specs)} models are more than max_panel_cells "
                                f"({settings.max_panel_cells}); ask for fewer models")
    with computing(operation, settings), loc.translating():
        labelled = series_by_label(**arguments)
        band = tuple(_band_series(j, spec, arguments, panel.axis, loc, settings)
                     for j, spec in enumerate(specs))
    outcome = replace(_outcome(labelled, panel.axis), dialect=panel.dialect, band_series=band,
                      detail=options.detail)
    return replace(outcome, band=band_of([v for _, v in band])) if band else outcome


def _band_series(j: int, spec: ModelSpec, arguments: dict[str, Any], axis: ItemAxis,
                 loc: Locator, settings: Settings) -> tuple[str, np.ndarray]:
    """Band model j's fixed-base Konüs series at base utility, the rest of the request as
    given; its errors point below ``/band_models/j``."""
    own = bands.locator_at(f"/band_models/{j}", loc, axis.ids)

    def model(budget: BaseBudget, items: tuple[int, ...]) -> Preferences:
        sub = own.with_items([axis.ids[i] for i in items])
        sub.model_root = own.model_root
        return calibrated(spec, budget, axis.subset(items), sub,
                          max_tree_depth=settings.max_tree_depth,
                          deadline_seconds=settings.compute_deadline_seconds)

    konus = series_by_label(**(arguments | {"model": model, "revealed_bounds": False})
                            ).result.konus
    assert konus is not None  # a model was given
    return spec.family, konus.fixed_base["base"]


def core_arguments(options: SeriesOptions, panel: PanelArrays, settings: Settings,
                   loc: Locator) -> dict[str, Any]:
    """The arguments of :func:`dualcost.core.series.series_by_label` for this request; the model
    is calibrated when the core calls back with the base period's budget."""
    axis = panel.axis

    def model(budget: BaseBudget, items: tuple[int, ...]) -> Preferences:
        assert options.model is not None
        return calibrated(options.model, budget, axis.subset(items), loc.with_items(
            [axis.ids[i] for i in items]), max_tree_depth=settings.max_tree_depth,
            deadline_seconds=settings.compute_deadline_seconds)

    return dict(
        prices=panel.prices, quantities=panel.quantities, expenditures=panel.expenditures,
        periods=panel.periods, items=axis.ids, frequency=options.frequency,
        **_periods(options), weight_reference=_weights(options, axis, loc),
        model=None if options.model is None else model,
        reference_value=float(options.reference_value), formulas=options.formulas,
        lloyd_moulton_sigma=options.lloyd_moulton_sigma, new_goods_sigma=options.new_goods_sigma,
        geks_window=options.geks.window, geks_splice=options.geks.splice,
        revealed_bounds=options.revealed_bounds)


def _outcome(labelled: LabelledSeries, axis: ItemAxis) -> Outcome:
    frequency = labelled.result.span.frequency or labelled.panel.frequency
    return Outcome(labelled.result, axis, labelled.model, frequency,
                   revealed=labelled.revealed, revealed_items=labelled.revealed_items)


def _periods(options: SeriesOptions) -> dict[str, Any]:
    """The periods the options name, by label (the core finds them in the panel)."""
    def label(value: Any) -> str | None:
        return None if value is None else str(value)

    wr = options.weight_reference
    return {
        "base_period": label(options.base_period),
        "reference_period": label(options.reference_period),
        "span": None if options.span is None else (label(options.span.start),
                                                   label(options.span.end)),
        "loop": None if options.loop is None else [str(x) for x in options.loop],
        "weight_reference_period": None if wr is None else label(wr.period),
        "rebase_period": None if options.rebase is None else label(options.rebase.period),
        "rebase_year": None if options.rebase is None else options.rebase.year,
    }


def _weights(options: SeriesOptions, axis: ItemAxis, loc: Locator) -> dict[str, Any] | None:
    """A weight-reference basket given as vectors, in item order."""
    wr = options.weight_reference
    if wr is None or wr.period is not None:
        return None
    given = {"prices": ("pb", wr.prices), "quantities": ("qb", wr.quantities),
             "shares": ("wb", wr.shares)}
    out: dict[str, Any] = {key: axis.vector(loc, name, value)
                           for key, (name, value) in given.items() if value is not None}
    if wr.shares is not None:
        out["share_unit"] = options.share_unit
    return out


# -- the answer -------------------------------------------------------------------------------


def document(outcome: Outcome) -> dict[str, Any]:
    """The answer as JSON-ready values, in the shape of ``SeriesResponse``: the series as float
    arrays (:func:`~dualcost.api.render.json_numbers`), null where withheld; in a headline
    answer, without its rows per item."""
    r = outcome.result
    labels = list(r.periods)
    drift = r.chain_drift
    full = outcome.detail == "full"
    return {
        "periods": labels, "items": outcome.axis.ids, "frequency": outcome.frequency,
        "base_period": labels[r.base], "reference_period": labels[r.reference],
        "reference_value": r.reference_value,
        "formulas": [{
            "formula": f.name, "title": f.title, "compared_with": f.target,
            "fixed_base": json_numbers(f.fixed_base), "chained": json_numbers(f.chained),
            "links": json_numbers(f.links),
            "chain_drift_percent": json_numbers(drift.drift_percent[f.name]),
            "loop_product": drift.loop_product[f.name],
            "circularity_failure_percent": 100.0 * (drift.loop_product[f.name] - 1.0),
            "rule_for_items_that_come_and_go": f.rule} for f in r.formulas.values()],
        "konus": _konus(outcome),
        "multilateral": [{
            "method": g.name, "bilateral": g.link, "full_span": json_numbers(g.full_span),
            "rolling": None if g.rolling is None else json_numbers(g.rolling), "window": g.window,
            "splice": g.splice, "loop_product": drift.loop_product[g.name],
            "rule_for_items_that_come_and_go": g.rule} for g in r.multilateral],
        "bias": [{"series": b.series, "kind": b.kind, "compared_with": b.compared_with,
                  "points": json_numbers(b.points), "percent": json_numbers(b.percent)}
                 for b in r.bias],
        "annual_bias": _annual(r, labels),
        "chain_drift": {"loop": [labels[t] for t in drift.loop],
                        "periods_with_base_prices": [labels[t] for t in
                                                     drift.periods_with_base_prices],
                        "definition": DRIFT_DEFINITION},
        "item_treatment": _treatment(r, labels, outcome.axis.ids) if full else None,
        "weights": _weights_out(r, labels, outcome.axis.ids, full),
        "lloyd_moulton_sigma": r.lloyd_moulton_sigma, "new_goods_sigma": r.new_goods_sigma,
        "changes": changes.document(r),
        "notices": dialect_notices(outcome.dialect)
        + notices_json(r.notices, outcome.axis.ids, outcome.axis.labels),
        "scale": scale(outcome),
        "caution": CAUTION,
        "detail": outcome.detail,
        "left_out": [] if full else list(HEADLINE_LEFT_OUT),
        "revealed_bounds": _revealed(outcome, labels),
        "band": _band_json(outcome, labels),
    }


BAND_MEASURE = ("The fixed-base Konüs index at base utility of each model of band_models, on "
                "the series' scale; the band is its least and greatest value in each period "
                "over the models whose value is a result there.")


def _band_json(outcome: Outcome, labels: list[str]) -> dict[str, Any] | None:
    """The band across band_models beside the series' own fixed-base Konüs index."""
    band = outcome.band
    if band is None:
        return None
    k = outcome.result.konus
    own = [None] * len(labels) if k is None else _values(k.fixed_base["base"])
    low, high = _values(band.low), _values(band.high)
    rows = [{"period": label, "konus_low": lo, "konus_high": hi, "models": int(n), "konus": x,
             "konus_inside": None if x is None or lo is None or hi is None
             else bool(lo * (1 - 1e-9) <= x <= hi * (1 + 1e-9))}
            for label, lo, hi, n, x in zip(labels, low, high, band.count.tolist(), own,
                                           strict=True)]
    return {"measure": BAND_MEASURE, "rows": rows,
            "models": [{"family": f, "fixed_base": json_numbers(v)}
                       for f, v in outcome.band_series]}


def _revealed(outcome: Outcome, labels: list[str]) -> dict[str, Any] | None:
    """The model-free brackets beside the model's fixed-base Konüs index at base utility."""
    found = outcome.revealed
    if found is None:
        return None
    rows = rows_json(found, labels)
    k = outcome.result.konus
    same_items = k is not None and tuple(k.items) == outcome.revealed_items
    base = outcome.result.base
    for row, t in zip(rows, range(len(labels)), strict=True):
        level = None if k is None else k.fixed_base["base"]
        ratio = None if level is None or not (np.isfinite(level[t]) and np.isfinite(level[base])) \
            else float(level[t] / level[base])
        row["konus_base"] = ratio
        row["konus_inside"] = None if ratio is None or not same_items else bool(
            row["lower"] * (1 - 1e-9) <= ratio <= row["upper"] * (1 + 1e-9))
    return {"items": [outcome.axis.ids[i] for i in outcome.revealed_items],
            "consistency": consistency_json(found, labels), "base_period": labels[found.base],
            "efficiency_level": found.level, "method": BOUNDS_METHOD, "rows": rows}


def _konus(outcome: Outcome) -> dict[str, Any] | None:
    k = outcome.result.konus
    if k is None:
        return None
    return {
        "family": k.family, "homothetic": k.homothetic,
        "fixed_base": {t: json_numbers(v) for t, v in k.fixed_base.items()},
        "chained": {t: json_numbers(v) for t, v in k.chained.items()},
        "validity": _validity(outcome),
        "incomes": json_numbers(k.incomes), "utilities": json_numbers(k.utilities),
        "items": [outcome.axis.ids[i] for i in k.items],
        "model_parameters": dict(outcome.model.parameters()) if outcome.model is not None else {},
        "rule_for_items_that_come_and_go": MODEL_RULE,
    }


def scale(outcome: Outcome) -> dict[str, str]:
    """How the series' levels, links and biases are written (the words every answer uses)."""
    r = outcome.result
    return {"indices": f"levels, {r.periods[r.reference]} = {r.reference_value:g}",
            "bias": SCALE_RATIO["bias"], "links": SCALE_RATIO["indices"]}


def _values(values: np.ndarray) -> list[float | None]:
    """A series as JSON: None where it has no value (NaN: the model's value withheld outside its
    regular region)."""
    return [x if math.isfinite(x) else None for x in values.tolist()]


def _validity(outcome: Outcome) -> dict[str, Any]:
    """Whether the model is regular in every period, and the periods where it is not, each with
    its reasons naming the items by id and label."""
    k, labels, axis = outcome.result.konus, outcome.result.periods, outcome.axis
    assert k is not None
    outside = [{"period": labels[t], "reasons": notices_json(v.reasons, axis.ids, axis.labels)}
               for t, v in enumerate(k.validity) if not v.regular]
    return {"state": "outside_regular_region" if outside else "regular",
            "periods_outside_regular_region": outside,
            "rule": "Where the model is not regular in a period, its fixed-base Konüs values "
                    "there, its chained values across that period, and their bias are null: "
                    "not results. The formula series are unaffected."}


def _annual(r: IndexSeries, labels: list[str]) -> dict[str, Any] | None:
    if r.span.years is None:
        return None
    return {
        "span": {"start": labels[r.span.start], "end": labels[r.span.end], "years": r.span.years,
                 "frequency": r.span.frequency, "periods_per_year": r.span.periods_per_year},
        "definition": ANNUAL_DEFINITION,
        "by_series": [{"series": a.series, "kind": a.kind, "compared_with": a.compared_with,
                       "annual_rate_percent": a.rate_percent,
                       "konus_annual_rate_percent": _num(a.konus_rate_percent),
                       "bias_pp_per_year": _num(a.bias_pp)} for a in r.annual_bias],
    }


def _treatment(r: IndexSeries, labels: list[str], ids: list[str]) -> list[dict[str, Any]]:
    """One row per period and item left out of a comparison or valued otherwise."""
    return [{"period": labels[e.period], "item": ids[e.item], "priced": e.priced,
             "fixed_base": e.fixed_base, "chained": e.chained, "model": e.model,
             "carried_from": None if e.carried_from is None else labels[e.carried_from],
             "detail": describe_treatment(e, labels, r.base)} for e in r.item_treatment]


def _weights_out(r: IndexSeries, labels: list[str], ids: list[str], full: bool = True
                 ) -> dict[str, Any] | None:
    w = r.weights
    if w is None:
        return None
    updated = [None] * len(ids) if w.price_updated is None else _values(w.price_updated)
    return {"period": None if w.period is None else labels[w.period],
            "items": [{"item": item, "share": share, "price_updated_share": p}
                      for item, share, p in zip(ids, _values(w.shares), updated, strict=True)]
            if full else None,
            "rule": WEIGHTS_RULE}


def _num(x: float) -> float | None:
    return None if not math.isfinite(x) else float(x)


#: The columns the model-free brackets add to the CSV table (revealed_bounds: true), after
#: the others: the JSON block's rows, one per period.
REVEALED_COLUMNS = ("lower", "upper", "laspeyres", "paasche", "konus_base", "konus_inside")


def _revealed_columns(outcome: Outcome) -> list[tuple[str, list[Any]]]:
    block = _revealed(outcome, list(outcome.result.periods))
    if block is None:
        return []
    return [(f"revealed_{name}", [row[name] for row in block["rows"]])
            for name in REVEALED_COLUMNS]


def _band_columns(outcome: Outcome) -> list[tuple[str, list[Any]]]:
    band = outcome.band
    if band is None:
        return []
    return [("band_konus_low", band.low), ("band_konus_high", band.high),
            ("band_models", band.count.tolist())]


#: The CSV columns a headline answer leaves out (the rows per item, one cell per period).
HEADLINE_COLUMNS = ("items_not_priced", "items_left_out_fixed_base", "items_left_out_of_link")


def detail_headers(outcome: Outcome) -> dict[str, str]:
    """What a headline CSV answer says it left out (nothing for a full answer)."""
    if outcome.detail == "full":
        return {}
    return {"Dualcost-Detail": outcome.detail, "Dualcost-Left-Out": " ".join(HEADLINE_COLUMNS)}


def revealed_headers(outcome: Outcome) -> dict[str, str]:
    """The verdicts and the efficiency level of the brackets, as a CSV answer states them
    (none without revealed_bounds)."""
    found = outcome.revealed
    if found is None:
        return {}
    return {"Dualcost-Garp": "pass" if found.consistency.garp else "fail",
            "Dualcost-Efficiency-Index": repr(found.efficiency),
            "Dualcost-Revealed-Items": " ".join(outcome.axis.ids[i]
                                                for i in outcome.revealed_items)}


def table(outcome: Outcome) -> tuple[list[str], list[list[Any]]]:
    """The per-period table: one row per period, one column per series."""
    header, columns = _columns(outcome)
    lists = [c.tolist() if isinstance(c, np.ndarray) else c for c in columns]
    return header, [list(row) for row in zip(*lists, strict=True)]


def csv_table(outcome: Outcome) -> tuple[list[str], ByColumn]:
    """The per-period table as the CSV answer writes it, column by column (the same text as
    :func:`table`'s rows give)."""
    header, columns = _columns(outcome)
    return header, ByColumn(columns)


def _columns(outcome: Outcome) -> tuple[list[str], list[Any]]:
    """The table's header and columns: the periods, then each series (a float array, NaN
    where empty) or list of cells."""
    r = outcome.result
    treatment = _treatment_columns(r, outcome.axis.ids) if outcome.detail == "full" else []
    columns = (_konus_columns(r) + _formula_columns(r) + treatment + changes.columns(r)
               + _revealed_columns(outcome) + _band_columns(outcome))
    header = ["period"] + [name for name, _ in columns]
    return header, [list(r.periods)] + [values for _, values in columns]


#: A column's name and its values, one per period: a float array or a list of cells.
Column = tuple[str, Any]


def _konus_columns(r: IndexSeries) -> list[Column]:
    if r.konus is None:
        return []
    return [(f"konus_{kind}_{target}", values)
            for kind, block in (("fixed_base", r.konus.fixed_base), ("chained", r.konus.chained))
            for target, values in block.items()]


def _formula_columns(r: IndexSeries) -> list[Column]:
    bias = {(b.series, b.kind): b for b in r.bias}
    columns: list[Column] = []
    for f in r.formulas.values():
        columns += [(f"{f.name}_fixed_base", f.fixed_base),
                    (f"{f.name}_chained", f.chained),
                    (f"{f.name}_link", np.concatenate(([np.nan], f.links))),
                    (f"{f.name}_chain_drift_percent", r.chain_drift.drift_percent[f.name])]
        columns += [(f"{f.name}_bias_{kind}_percent", bias[(f.name, kind)].percent)
                    for kind in ("fixed_base", "chained") if (f.name, kind) in bias]
    for g in r.multilateral:
        columns.append((g.name, g.full_span))
        if (g.name, "full_span") in bias:
            columns.append((f"{g.name}_bias_percent", bias[(g.name, "full_span")].percent))
        if g.rolling is not None:
            columns.append((f"{g.name}_rolling", g.rolling))
            if (g.name, "rolling") in bias:
                columns.append((f"{g.name}_rolling_bias_percent",
                                bias[(g.name, "rolling")].percent))
    return columns


def _treatment_columns(r: IndexSeries, ids: list[str]) -> list[Column]:
    n_t = len(r.periods)
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
    return [("items_not_priced", [";".join(x) for x in not_priced]),
            ("items_left_out_fixed_base", [";".join(x) for x in out_fixed]),
            ("items_left_out_of_link", [";".join(x) for x in out_link])]


# -- the request from a query string ------------------------------------------------------------


def options_body(query: Mapping[str, Any]) -> dict[str, Any]:
    """The options of the CSV upload, from its query parameters, as a JSON body would give them."""
    body: dict[str, Any] = {key: query[key] for key in (
        "base_period", "reference_period", "reference_value", "frequency",
        "lloyd_moulton_sigma", "new_goods_sigma") if query.get(key) is not None}
    for key in ("formulas", "loop"):
        if query.get(key):
            body[key] = names(query[key])
    if query.get("rebase_period") is not None or query.get("rebase_year") is not None:
        body["rebase"] = {key: query[f"rebase_{key}"] for key in ("period", "year")
                          if query.get(f"rebase_{key}") is not None}
    if query.get("weight_reference_period") is not None:
        body["weight_reference"] = {"period": query["weight_reference_period"]}
    body["geks"] = {key: query[f"geks_{key}"] for key in ("window", "splice")
                    if query.get(f"geks_{key}") is not None}
    if query.get("span_start") is not None or query.get("span_end") is not None:
        body["span"] = {"start": query.get("span_start"), "end": query.get("span_end")}
    if query.get("detail") is not None:
        body["detail"] = query["detail"]
    if query.get("model"):
        body["model"] = json_parameter("model", query["model"], '{"family": "ces", "sigma": 0.7}')
    return body
