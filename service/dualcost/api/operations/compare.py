"""The comparison of two price situations: POST /v1/comparisons, the spreadsheet forms and the
demo all run it.

The request is translated once (items, vectors in item order, the model's parameters), the core
computes the whole comparison in one call (:func:`dualcost.core.comparison.compare_budgets`)
under one error translation, and the answer is written from the core's result in one step.
"""

from __future__ import annotations

from dataclasses import dataclass, replace
from typing import Any, Protocol

from ...config import Settings
from ...core.comparison import Comparison, compare_budgets
from ...core.errors import NumericalFailure
from ...core.indices import REGISTRY, formulas_for
from ...core.preferences import Preferences
from ...core.sensitivity import Calibrator, Sensitivity, sweep_budgets
from ..inputs.items import ItemAxis
from ..inputs.locator import Form, Locator, Place
from ..inputs.model import core_parameters
from ..observability import computing
from ..records import json_records
from ..render import all_finite
from ..schemas.comparison import (
    CAUTION,
    SIGN_CONVENTION,
    BaseIn,
    ComparisonRequest,
    CurrentIn,
    WeightReferenceIn,
)
from ..schemas.revealed import BOUNDS_METHOD
from . import bands
from .answers import SCALE_RATIO, notices_json, validity_json

#: Where each core argument of a comparison is, in the JSON body and in the spreadsheet forms'
#: query strings.
PLACES: dict[str, Place] = {
    "items": Place("/items", "items", "list"),
    "p0": Place("/base/prices", "p0", "items", names_item=True),
    "q0": Place("/base/quantities", "q0", "items", names_item=True),
    "w0": Place("/base/shares", "w0", "items", names_item=True),
    "m0": Place("/base/expenditure", "m0"),
    "p1": Place("/current/prices", "p1", "items", names_item=True),
    "q1": Place("/current/quantities", "q1", "items", names_item=True),
    "m1": Place("/current/expenditure", "m1"),
    "reference_income": Place("/reference_income", "reference_income"),
    "pb": Place("/weight_reference/prices", None, "items", names_item=True),
    "qb": Place("/weight_reference/quantities", None, "items", names_item=True),
    "wb": Place("/weight_reference/shares", None, "items", names_item=True),
    "lloyd_moulton_sigma": Place("/lloyd_moulton_sigma", "lloyd_moulton_sigma"),
    "formulas": Place("/formulas", "formulas", "list"),
    "normalise_shares": Place("/normalise_shares", "normalise_shares"),
    "share_unit": Place("/share_unit", "share_unit"),
    "revealed_bounds": Place("/revealed_bounds", "revealed_bounds"),
    "family": Place("/model/family", "family"),
    "model": Place("/model", "family"),
    # The parameters the spreadsheet forms carry as query parameters of their own.
    "sigma": Place("/model/sigma", "sigma"),
    "frisch": Place("/model/frisch", "frisch"),
    "subsistence_quantities": Place("/model/subsistence_quantities", "subsistence"),
    "expenditure_elasticities": Place("/model/expenditure_elasticities", "elasticities"),
}


@dataclass(frozen=True)
class Outcome:
    """A comparison's result with what its answer needs from the request."""

    result: Comparison
    model: Preferences
    axis: ItemAxis
    #: On request (band_models): the comparisons under those models and the band across them.
    band: Sensitivity | None = None


def locator(form: Form = "json") -> Locator:
    return Locator(PLACES, form)


def run(request: ComparisonRequest, settings: Settings, loc: Locator | None = None) -> Outcome:
    """Translate the request, compare under its model, and point any error at the request."""
    loc = loc or locator()
    axis = ItemAxis.from_request(request.items, loc, limit=settings.max_items)
    arguments = base_arguments(request, axis, loc)
    parameters = core_parameters(request.model, axis, loc, max_tree_depth=settings.max_tree_depth,
                                 deadline_seconds=settings.compute_deadline_seconds)
    arguments |= current_arguments(request, axis, loc, request.share_unit)
    band_models = [bands.calibrator(f"/band_models/{j}", spec, axis, loc, settings)[0]
                   for j, spec in enumerate(request.band_models or ())]
    with computing("compare", settings), loc.translating():
        result, model = compare_budgets(request.model.family, parameters, **arguments,
                                        revealed_bounds=request.revealed_bounds)
        band = _band(arguments, band_models, request.formulas)
    return Outcome(result, model, axis, band)


#: The arguments of a comparison that a sweep across models reads too.
_SWEPT = ("base_prices", "base_quantities", "base_shares", "base_expenditure",
          "normalise_shares", "share_unit", "current_prices", "current_income",
          "current_quantities")


def _band(arguments: dict[str, Any], models: list[Calibrator],
          formulas: list[str] | None) -> Sensitivity | None:
    """The comparisons under ``models`` at the same budget and prices, as POST /v1/sensitivity
    makes them, over the formulas that need no weight-reference period."""
    if not models:
        return None
    kept = None if formulas is None else [
        f for f in formulas if not {"weight_quantities", "weight_shares"} & set(REGISTRY[f].needs)]
    return sweep_budgets(**{k: v for k, v in arguments.items() if k in _SWEPT}, models=models,
                         formulas=kept)


class BudgetRequest(Protocol):
    """The parts of a request that describe the base budget (a comparison, a sensitivity
    sweep), read only."""

    @property
    def base(self) -> BaseIn: ...
    @property
    def normalise_shares(self) -> bool: ...
    @property
    def share_unit(self) -> str: ...


def base_arguments(request: BudgetRequest, axis: ItemAxis, loc: Locator) -> dict[str, Any]:
    """The base budget's vectors in item order, under the core's argument names."""
    b = request.base
    out: dict[str, Any] = {"base_prices": axis.vector(loc, "p0", b.prices),
                           "base_expenditure": b.expenditure,
                           "normalise_shares": request.normalise_shares}
    if b.quantities is not None:
        out["base_quantities"] = axis.vector(loc, "q0", b.quantities)
    else:  # the core derives the quantities from the shares
        loc.add("q0", PLACES["w0"])
        out["base_shares"] = axis.vector(loc, "w0", b.shares)  # type: ignore[arg-type]
        out["share_unit"] = request.share_unit
        loc.given("q0", b.shares)
    return out


#: The parts of a weight-reference period, by core argument.
_WEIGHTS = {"pb": "prices", "qb": "quantities", "wb": "shares"}


class ComparedPeriod(Protocol):
    """The parts of a request that describe the current period and the options (a comparison,
    or the comparison part of a fitted comparison)."""

    current: CurrentIn
    reference_income: float | None
    weight_reference: WeightReferenceIn | None
    lloyd_moulton_sigma: float | None
    formulas: list[str] | None


def current_arguments(request: ComparedPeriod, axis: ItemAxis, loc: Locator,
                      share_unit: str = "fraction") -> dict[str, Any]:
    """The current period's vectors and the options, under the core's argument names;
    ``share_unit`` is the unit of the weight-reference shares."""
    c = request.current
    if c.expenditure is None:  # a current income the core derives is about the current period
        loc.add("m1", replace(loc.places["m1"], json=loc.places["p1"].json.rsplit("/", 1)[0]))
    out: dict[str, Any] = {
        "current_prices": axis.vector(loc, "p1", c.prices),
        "current_income": c.expenditure, "reference_income": request.reference_income,
        "lloyd_moulton_sigma": request.lloyd_moulton_sigma, "formulas": request.formulas,
    }
    if c.quantities is not None:
        out["current_quantities"] = axis.vector(loc, "q1", c.quantities)
    else:  # the model's demands stand in for them: the core's complaints name the argument
        loc.places.pop("q1")
    wr = request.weight_reference
    given = {name: getattr(wr, part) for name, part in _WEIGHTS.items()} if wr else {}
    for name in _WEIGHTS:
        if given.get(name) is None:
            loc.places.pop(name)
    if wr is not None:
        out["weight_reference"] = {_WEIGHTS[name]: axis.vector(loc, name, value)
                                   for name, value in given.items() if value is not None}
        if given.get("wb") is not None:
            out["weight_reference"]["share_unit"] = share_unit
    return out


# -- the answer -------------------------------------------------------------------------------


def document(outcome: Outcome, *, rows_as_text: bool = False) -> dict[str, Any]:
    """The answer as plain JSON-ready values, in the shape of ``ComparisonResponse``.

    Written in one step from the core's arrays: validating one response object per item would
    cost more than the computation for large baskets (the tests validate answers against the
    response model). Every number the core computed it checked finite; the calibrated
    parameters are checked here. ``rows_as_text``: ``by_item`` as its JSON text, written
    column by column (:func:`dualcost.api.records.json_records`, the same bytes once the answer
    is written), for an answer that goes straight to orjson; most of a large basket's answer
    is that table, and its rows cost more to build as dicts than to write.
    """
    r, axis = outcome.result, outcome.axis
    parameters = dict(outcome.model.parameters())
    if not all_finite(parameters):
        raise NumericalFailure("model parameters", "a calibrated parameter is not a finite "
                               "number; the inputs are beyond what the model can evaluate")
    lasp = r.formulas.get("laspeyres")
    st = r.standards
    regular = r.validity.regular
    konus = {"base": r.konus.base, "current": r.konus.current, "midpoint": r.konus.midpoint,
             "reference": r.konus.reference, "homothetic": r.konus.homothetic}
    compensation = {"compensating_variation": r.compensating_variation,
                    "equivalent_variation": r.equivalent_variation,
                    "compensated_income": r.compensated_income}
    gap = None if lasp is None else 100.0 * (lasp.value - r.konus.base)
    figures = None if regular else {"konus": konus, "compensation": compensation,
                                    "laspeyres_gap_points": gap}
    return {
        "family": r.family,
        "items": axis.ids,
        "scale": SCALE_RATIO,
        "validity": validity_json(r.validity, axis.ids, axis.labels, figures),
        "konus": konus if regular else _withheld(konus, keep=("homothetic",)),
        "living_standards": {
            "base_income": st.base_income, "current_income": st.current_income,
            "midpoint_income": st.midpoint_income, "reference_income": st.reference_income,
            "utility_base": st.base, "utility_current": st.current,
            "utility_reference": st.reference,
        },
        "formulas": [{"formula": f.name, "title": REGISTRY[f.name].title, "value": f.value,
                      "compared_with": f.target, "konus": f.konus if regular else None,
                      "bias_points": f.bias_points if regular else None,
                      "bias_percent": f.bias_percent if regular else None}
                     for f in r.formulas.values()],
        "laspeyres_gap_points": gap if regular else None,
        "compensation": (compensation if regular else _withheld(compensation))
        | {"sign_convention": SIGN_CONVENTION},
        "by_item": (json_records(_item_columns(r, axis)) if rows_as_text else _items(r, axis)),
        "lloyd_moulton_sigma": r.lloyd_moulton_sigma,
        "model_parameters": parameters,
        "diagnostics": {"duality_residual": r.diagnostics.duality_residual,
                        "expenditure_residual": r.diagnostics.expenditure_residual,
                        "base_bundle_gap": r.diagnostics.base_bundle_gap},
        "notices": notices_json(r.notices, axis.ids, axis.labels),
        "caution": CAUTION,
        "revealed_bounds": _revealed(r),
        "band": _band_json(outcome),
    }


def _band_json(outcome: Outcome) -> dict[str, Any] | None:
    """The band across band_models beside this comparison's K(u0), when it was asked for."""
    found = outcome.band
    if found is None:
        return None
    models = []
    for e in found.models:
        c, ok = e.comparison, e.comparison.validity.regular
        models.append({"family": c.family, "regular": ok,
                       **{f"konus_{k}": getattr(c.konus, k) if ok else None
                          for k in ("base", "current", "midpoint")}})
    base = next(x for x in found.band if x.measure == "konus_base")
    r = outcome.result
    k = r.konus.base if r.validity.regular else None
    inside = None if k is None or base.low is None or base.high is None else bool(
        base.low * (1 - 1e-9) <= k <= base.high * (1 + 1e-9))
    return {"models": models,
            "ranges": [{"measure": x.measure, "low": x.low, "high": x.high, "count": x.count,
                        "left_out": x.left_out} for x in found.band],
            "konus_inside": inside}


def _revealed(r: Comparison) -> dict[str, Any] | None:
    """The model-free bracket beside the model's K(u0), when it was asked for."""
    found = r.revealed
    if found is None:
        return None
    b = found.bounds[1]
    k = r.konus.base if r.validity.regular else None
    return {"garp": found.consistency.garp, "efficiency_index": found.efficiency,
            "efficiency_level": found.level, "lower": b.lower, "upper": b.upper,
            "laspeyres": b.laspeyres, "paasche": b.paasche, "konus_base": k,
            "konus_inside": None if k is None else bool(b.lower * (1 - 1e-9) <= k
                                                        <= b.upper * (1 + 1e-9)),
            "method": BOUNDS_METHOD}


def _withheld(figures: dict[str, Any], keep: tuple[str, ...] = ()) -> dict[str, Any]:
    """``figures`` with every value but those in ``keep`` replaced by None: what an answer
    shows where the model is outside its regular region."""
    return {k: (v if k in keep else None) for k, v in figures.items()}


def _item_columns(r: Comparison, axis: ItemAxis) -> dict[str, list[Any]]:
    """The per-item table by column, in the order of an ``ItemOut`` record's members."""
    d = r.demands
    gap = r.laspeyres_gap_contributions
    none = [None] * len(axis.ids)
    gaps = none if gap is None or not r.validity.regular else (100.0 * gap).tolist()
    # Outside the regular region the model's current and compensated demands and the Hicks
    # split are not results (a negative "quantity" among them, as a rule).
    model = [d.current, d.compensated, d.substitution_effect, d.income_effect]
    current, compensated, substitution, income = (
        [v.tolist() for v in model] if r.validity.regular else [none] * 4)
    return {"item": axis.ids, "label": axis.labels, "base_price": r.base_prices.tolist(),
            "current_price": r.current_prices.tolist(),
            "price_relative": (r.current_prices / r.base_prices).tolist(),
            "base_quantity": d.base.tolist(), "current_quantity": current,
            "compensated_quantity": compensated, "substitution_effect": substitution,
            "income_effect": income, "laspeyres_gap_points": gaps}


def _items(r: Comparison, axis: ItemAxis) -> list[dict[str, Any]]:
    """One record per item."""
    columns = _item_columns(r, axis)
    return [dict(zip(columns, row, strict=True)) for row in zip(*columns.values(), strict=True)]


Row = tuple[str, float | None, str, float | None, float | None]


def measures(outcome: Outcome) -> list[Row]:
    """The headline figures one per row: (measure, value, compared_with, bias in points, bias
    in percent), as the spreadsheet forms give them. Outside the model's regular region the
    model's figures and the biases are None (empty cells); the row ``model_regular`` says
    which (1 regular, 0 not)."""
    r = outcome.result
    ok = r.validity.regular

    def model(value: float | None) -> float | None:
        return value if ok else None

    rows: list[Row] = [
        ("model_regular", 1.0 if ok else 0.0, "", None, None),
        ("konus_base", model(r.konus.base), "", None, None),
        ("konus_current", model(r.konus.current), "", None, None),
        ("konus_midpoint", model(r.konus.midpoint), "", None, None),
    ]
    if r.konus.reference is not None:
        rows.append(("konus_reference", model(r.konus.reference), "", None, None))
    rows += [(f.name, f.value, f.target, model(f.bias_points), model(f.bias_percent))
             for f in r.formulas.values()]
    rows += [("compensating_variation", model(r.compensating_variation), "", None, None),
             ("equivalent_variation", model(r.equivalent_variation), "", None, None),
             ("compensated_income", model(r.compensated_income), "", None, None)]
    if r.revealed is not None:  # on request: the model-free bracket on K(u0)
        bracket = r.revealed.bounds[1]
        rows += [("revealed_bounds_lower", bracket.lower, "base", None, None),
                 ("revealed_bounds_upper", bracket.upper, "base", None, None)]
    if outcome.band is not None:  # on request: the band of K across band_models
        rows += [(f"band_{x.measure}_{end}", getattr(x, end), x.measure.removeprefix("konus_"),
                  None, None) for x in outcome.band.band if x.measure.startswith("konus_")
                 for end in ("low", "high")]
    return rows


#: The measures that are the model's figures (withheld outside its regular region).
MODEL_MEASURES = frozenset({"konus_base", "konus_current", "konus_midpoint", "konus_reference",
                            "laspeyres_bias_points", "compensating_variation",
                            "equivalent_variation", "compensated_income"})


def measure(outcome: Outcome, name: str) -> float | None:
    """One headline figure by name (``laspeyres_bias_points`` too), or None if not computed.
    A model figure outside the model's regular region is None too: see
    ``outcome.result.validity``."""
    if name in MODEL_MEASURES and not outcome.result.validity.regular:
        return None
    for row in measures(outcome):
        if row[0] == name:
            return row[1]
    lasp = outcome.result.formulas.get("laspeyres")
    if name == "laspeyres_bias_points" and lasp is not None:
        return 100.0 * (lasp.value - outcome.result.konus.base)
    return None


#: The figures a spreadsheet can ask for one at a time: the formulas its forms can compute
#: (none needs a weight-reference period, which the forms cannot carry).
MEASURES: tuple[str, ...] = (
    "konus_base", "konus_current", "konus_midpoint", "konus_reference",
    *(name for name in formulas_for("comparison")
      if not {"weight_quantities", "weight_shares"} & set(REGISTRY[name].needs)),
    "laspeyres_bias_points", "compensating_variation", "equivalent_variation",
    "compensated_income",
)


# -- the CSV answer ---------------------------------------------------------------------------

#: The columns of a comparison as a CSV table (POST /v1/comparisons with format=csv, and the
#: spreadsheet form /v1/sheet/comparison): one row per measure of :func:`measures`.
TABLE_COLUMNS = ("measure", "value", "compared_with", "bias_points", "bias_percent")


def table(outcome: Outcome) -> tuple[tuple[str, ...], list[tuple[Any, ...]]]:
    """The comparison as one CSV table: the header, then one row per measure (the Konüs
    indices, each formula with the Konüs index it is compared with and its bias, then the
    compensation), as :func:`measures` gives them."""
    return TABLE_COLUMNS, list(measures(outcome))
