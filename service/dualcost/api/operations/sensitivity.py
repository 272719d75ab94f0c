"""How far a comparison depends on its model: POST /v1/sensitivity and the spreadsheet's sweep
form.

The request is translated once (items, the base budget and the current period as a comparison
reads them, each model's parameters at ``/models/<j>``), and the core compares under every model
and along the grid in one call (:func:`dualcost.core.sensitivity.sweep_budgets`), calibrating
each model through a callback that points its errors at that model.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Any

from ...config import Settings
from ...core.comparison import Comparison
from ...core.indices import REGISTRY
from ...core.sensitivity import Calibrator, Evaluated, Grid, Range, Sensitivity, sweep_budgets
from ..inputs.items import ItemAxis
from ..inputs.locator import Form, Locator, Place
from ..observability import computing
from ..render import all_finite
from ..schemas.common import CAUTION
from ..schemas.model import ModelSpec
from ..schemas.sensitivity import SensitivityRequest
from . import bands, compare
from .answers import SCALE_RATIO, notices_json, validity_json

#: Where each core argument is: the comparison's places for the budget and the options, the
#: grid's, and the first model's parameters that the spreadsheet form carries.
PLACES: dict[str, Place] = {
    **{name: compare.PLACES[name] for name in (
        "items", "p0", "q0", "w0", "m0", "p1", "q1", "m1", "formulas", "normalise_shares",
        "share_unit")},
    "models": Place("/models", "family", "list"),
    "grid": Place("/grid", "values"),
    "grid_model": Place("/grid/model", "values"),
    "grid_parameter": Place("/grid/parameter", "parameter"),
    "grid_group": Place("/grid/group", "values"),
    "grid_values": Place("/grid/values", "values", "list"),
    "family": Place("/models/0/family", "family"),
    "sigma": Place("/models/0/sigma", "sigma"),
    "frisch": Place("/models/0/frisch", "frisch"),
    "subsistence_quantities": Place("/models/0/subsistence_quantities", "subsistence"),
    "expenditure_elasticities": Place("/models/0/expenditure_elasticities", "elasticities"),
}


@dataclass(frozen=True)
class Outcome:
    result: Sensitivity
    axis: ItemAxis
    #: The position in the request's models of the model the grid runs (0 without a grid).
    grid_model: int = 0


def locator(form: Form = "json") -> Locator:
    return Locator(PLACES, form)


def run(request: SensitivityRequest, settings: Settings, loc: Locator | None = None,
        operation: str = "sensitivity") -> Outcome:
    """Translate the request, sweep, and point any error at the request."""
    loc = loc or locator()
    axis = ItemAxis.from_request(request.items, loc, limit=settings.max_items)
    arguments = compare.base_arguments(request, axis, loc)
    arguments |= _current(request, axis, loc)
    models = [_model(j, spec, axis, loc, settings) for j, spec in enumerate(request.models)]
    grid = _grid(request, models, loc, settings)
    with computing(operation, settings), loc.translating():
        result = sweep_budgets(**arguments, models=[m[0] for m in models], grid=grid,
                               formulas=request.formulas)
    return Outcome(result, axis, 0 if request.grid is None else request.grid.model)


def _current(request: SensitivityRequest, axis: ItemAxis, loc: Locator) -> dict[str, Any]:
    c = request.current
    if c.expenditure is None:  # a current income the core derives is about the current period
        loc.add("m1", Place("/current", loc.places["m1"].query))
    out: dict[str, Any] = {"current_prices": axis.vector(loc, "p1", c.prices),
                           "current_income": c.expenditure}
    if c.quantities is not None:
        out["current_quantities"] = axis.vector(loc, "q1", c.quantities)
    else:
        loc.places.pop("q1")
    return out


def _model(j: int, spec: ModelSpec, axis: ItemAxis, loc: Locator, settings: Settings
           ) -> tuple[Calibrator, dict[str, Any]]:
    """Model j's calibration callback, and its parameters in core form; its errors point below
    ``/models/j``."""
    return bands.calibrator(f"/models/{j}", spec, axis, loc, settings,
                            query=loc.places["family"].query if j == 0 else None)


def _grid(request: SensitivityRequest, models: list[tuple[Calibrator, dict[str, Any]]],
          loc: Locator, settings: Settings) -> Grid | None:
    g = request.grid
    if g is None:
        return None
    if g.model >= len(models):
        raise loc.problem("grid_model", f"must be the position of one of the {len(models)} "
                          "models (from 0)")
    if len(g.values) > settings.max_sweep_points:
        raise loc.problem("grid_values", f"has {len(g.values)} values; the limit is "
                          f"{settings.max_sweep_points} (max_sweep_points)")
    return Grid(request.models[g.model].family, models[g.model][1], g.parameter,
                tuple(g.values), g.group)


# -- the answer -------------------------------------------------------------------------------


def document(outcome: Outcome) -> dict[str, Any]:
    """The answer as plain JSON-ready values, in the shape of ``SensitivityResponse``."""
    r, axis = outcome.result, outcome.axis
    grid = None
    if r.grid is not None:
        g = r.grid
        grid = {"model": outcome.grid_model, "family": g.family, "parameter": g.parameter,
                "group": g.group,
                "points": [_point(e, value, axis) for e, value in zip(r.points, g.values,
                                                                      strict=True)],
                "range": _ranges(r.along_grid)}
    return {"items": axis.ids, "scale": SCALE_RATIO,
            "models": [_point(e, None, axis) for e in r.models],
            "band": _ranges(r.band), "grid": grid, "notices": [], "caution": CAUTION}


def _point(e: Evaluated, value: float | None, axis: ItemAxis) -> dict[str, Any]:
    c = e.comparison
    regular = c.validity.regular
    parameters = dict(e.model.parameters())
    if not all_finite(parameters):
        parameters = {}
    konus = {"base": c.konus.base, "current": c.konus.current, "midpoint": c.konus.midpoint}
    return {
        "family": c.family, "value": value,
        "validity": validity_json(c.validity, axis.ids, axis.labels,
                                  None if regular else {"konus": konus}),
        "konus": konus if regular else dict.fromkeys(konus),
        "formulas": [{"formula": f.name, "title": REGISTRY[f.name].title, "value": f.value,
                      "compared_with": f.target, "konus": f.konus if regular else None,
                      "bias_points": f.bias_points if regular else None,
                      "bias_percent": f.bias_percent if regular else None}
                     for f in c.formulas.values()],
        "model_parameters": parameters,
        "notices": notices_json(c.notices, axis.ids, axis.labels),
    }


def _ranges(ranges: tuple[Range, ...]) -> list[dict[str, Any]]:
    return [{"measure": x.measure, "low": x.low, "high": x.high, "count": x.count,
             "left_out": x.left_out} for x in ranges]


# -- the CSV answer ---------------------------------------------------------------------------

#: The leading columns of the CSV answer; one column per formula and per formula's bias follow.
LEADING_COLUMNS = ("kind", "family", "parameter", "value", "model_regular", "konus_base",
                   "konus_current", "konus_midpoint")


def table(outcome: Outcome) -> tuple[tuple[str, ...], list[tuple[Any, ...]]]:
    """One row per model of the set (kind ``model``) and per grid value (kind ``grid``): the
    Konüs indices, then each formula's value and bias in points (empty where the model is
    outside its regular region, or the formula was not computed)."""
    r = outcome.result
    every = [e.comparison for e in (*r.models, *r.points)]
    names = list(dict.fromkeys(n for c in every for n in c.formulas))
    header = (*LEADING_COLUMNS, *(col for n in names for col in (n, f"{n}_bias_points")))
    parameter = "" if r.grid is None else r.grid.parameter
    rows = [_row("model", e.comparison, "", None, names) for e in r.models]
    if r.grid is not None:
        rows += [_row("grid", e.comparison, parameter, v, names)
                 for e, v in zip(r.points, r.grid.values, strict=True)]
    return header, rows


def _row(kind: str, c: Comparison, parameter: str, value: float | None,
         names: list[str]) -> tuple[Any, ...]:
    ok = c.validity.regular
    cells: list[Any] = [kind, c.family, parameter, value, 1 if ok else 0]
    cells += [k if ok else None for k in (c.konus.base, c.konus.current, c.konus.midpoint)]
    for n in names:
        f = c.formulas.get(n)
        cells += [None, None] if f is None else [f.value, f.bias_points if ok else None]
    return tuple(cells)
