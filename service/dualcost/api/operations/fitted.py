"""A fitted comparison (POST /v1/fitted-comparisons): fit a model to budget data, compare two
price situations under it, and carry the parameters' uncertainty into the comparison's figures.

The fit is :mod:`.fits`; the comparison is the core's :func:`compare_budgets` with the fitted
family's parameters exactly as the fit gave them; the intervals are the core's parametric
bootstrap (:func:`dualcost.core.estimation.comparison_intervals`). Errors in the request's
``comparison`` part point into it; errors the fitted model causes point at ``/model``.
"""

from __future__ import annotations

from dataclasses import dataclass, replace
from typing import Any

import numpy as np

from ...config import Settings
from ...core.comparison import WeightReference, compare_budgets
from ...core.errors import InvalidInput
from ...core.estimation import ComparisonIntervals, Interval, comparison_intervals
from ...core.preferences import FAMILIES, BaseBudget
from ..inputs import observations
from ..inputs.locator import Locator, Place
from ..observability import computing
from ..problems import FieldError, RequestProblem
from ..schemas.common import CAUTION
from ..schemas.estimation import FitAndCompareRequest, FitComparisonIn
from . import compare, fits

#: The comparison's places, inside this request's ``comparison`` part; its model is the fit's.
_MODEL = Place("/model")
PLACES: dict[str, Place] = {
    name: replace(place, json="/comparison" + place.json, query=None)
    for name, place in compare.PLACES.items() if not place.json.startswith("/model")
} | {"family": _MODEL, "model": _MODEL, "tree": _MODEL}


@dataclass(frozen=True)
class Outcome:
    fit: fits.Outcome
    comparison: compare.Outcome
    intervals: ComparisonIntervals


def run(request: FitAndCompareRequest, settings: Settings) -> Outcome:
    """Fit, compare under the fitted model, and carry the parameter uncertainty over."""
    draws = request.uncertainty.draws
    if draws > settings.max_bootstrap_draws:
        raise RequestProblem.at("/uncertainty/draws", f"{draws} draws are more than the limit of "
                                f"{settings.max_bootstrap_draws}")
    floc = fits.locator()
    data = observations.from_json(request, floc)
    fitted = fits.run(data, request.model, fits.options_of(request, data.axis, floc), settings,
                      floc, "fitAndCompare")
    obstacle = fitted.result.comparison_obstacle()
    if obstacle is not None:
        raise RequestProblem.at("/model", obstacle)
    loc = Locator(PLACES, items=data.axis.ids)
    for parameter in FAMILIES[fitted.result.family].parameter_specs:
        loc.add(parameter.name, _MODEL)
    part = request.comparison
    arguments = _base(part, fitted, floc, loc, request.share_unit) | compare.current_arguments(
        part, data.axis, loc, request.share_unit)
    try:
        with computing("fitAndCompare", settings), loc.translating():
            point, model = compare_budgets(fitted.result.family, fitted.result.spec, **arguments)
            comparison = compare.Outcome(point, model, data.axis)
            intervals = _intervals(request, fitted, comparison, arguments)
    except RequestProblem as exc:
        raise RequestProblem([FieldError(e.pointer, f"the fitted model: {e.detail}"
                                         if e.pointer == "/model" else e.detail)
                              for e in exc.errors], slug=exc.slug) from exc
    return Outcome(fitted, comparison, intervals)


def _base(part: FitComparisonIn, fitted: fits.Outcome, floc: Locator, loc: Locator,
          share_unit: str = "fraction") -> dict[str, Any]:
    """The base budget; without a bundle, the fitted model's demand at the base prices and
    expenditure (so that calibrating the family keeps the fitted parameters)."""
    axis = fitted.data.axis
    b = part.base
    out: dict[str, Any] = {"base_prices": axis.vector(loc, "p0", b.prices),
                           "base_expenditure": b.expenditure}
    if b.quantities is not None:
        out["base_quantities"] = axis.vector(loc, "q0", b.quantities)
        return out
    if b.shares is not None:
        loc.add("q0", PLACES["w0"])
        out["base_shares"] = axis.vector(loc, "w0", b.shares)
        out["share_unit"] = share_unit
        loc.given("q0", b.shares)
        return out
    p0 = out["base_prices"]
    if not np.all(p0 > 0.0):
        raise RequestProblem.at("/comparison/base/prices", "must be greater than zero")
    m0 = float(b.expenditure)  # type: ignore[arg-type]
    if not m0 > 0.0:
        raise RequestProblem.at("/comparison/base/expenditure", "must be greater than zero")
    with floc.translating():
        shares = fitted.result.shares_at(p0, m0)
    if not (np.all(np.isfinite(shares)) and np.all(shares >= 0.0)):
        raise RequestProblem.at("/comparison/base", "the fitted model's demand at these prices "
                                "and expenditure has a negative share; give the base bundle "
                                "(quantities or shares)")
    loc.add("q0", PLACES["w0"])
    out["base_shares"] = shares / shares.sum()
    return out


def _intervals(request: FitAndCompareRequest, fitted: fits.Outcome, comparison: compare.Outcome,
               arguments: dict[str, Any]) -> ComparisonIntervals:
    point = comparison.result
    budget = BaseBudget.from_quantities(point.base_prices, point.demands.formula_base_quantities)
    weights = arguments.get("weight_reference")
    options: dict[str, Any] = {
        "current_income": point.standards.current_income,
        "current_quantities": (point.demands.formula_current_quantities
                               if point.demands.current_quantities_observed else None),
        "reference_income": point.standards.reference_income,
        "lloyd_moulton_sigma": arguments["lloyd_moulton_sigma"],
        "formulas": arguments["formulas"],
        "weight_reference": None if weights is None else WeightReference.checked(
            point.base_prices.size, **weights),
    }
    try:
        return comparison_intervals(fitted.result, point, budget, point.current_prices,
                                    options=options, draws=request.uncertainty.draws,
                                    seed=request.uncertainty.seed)
    except InvalidInput as exc:
        raise RequestProblem.at(f"/uncertainty/{exc.parameter}", exc.rule) from exc


# -- the answer -------------------------------------------------------------------------------


#: Said with the intervals of a comparison outside the fitted model's regular region.
WITHHELD = ("intervals_withheld", "The comparison is outside the fitted model's regular region, "
            "so its model figures are withheld (see comparison.validity), and so are their "
            "intervals: a spread of numbers the model cannot stand behind is not a result.")


def document(outcome: Outcome) -> dict[str, Any]:
    """The answer as plain values, in the shape of ``FitAndCompareResponse``. Outside the
    fitted model's regular region the intervals of the withheld figures are null too."""
    c = outcome.intervals
    regular = outcome.comparison.result.validity.regular

    def interval(i: Interval) -> dict[str, float] | None:
        if not regular:
            return None
        return {"estimate": i.estimate, "low": i.low, "high": i.high, "std_error": i.std_error}

    notices = [(n.code, n.message) for n in c.notices] + ([] if regular else [WITHHELD])
    return {
        "fit": fits.document(outcome.fit),
        "comparison": compare.document(outcome.comparison),
        "intervals": {
            "method": c.method, "confidence_level": c.confidence_level, "draws": c.draws,
            "draws_failed": c.failed, "seed": c.seed,
            "konus": {k: interval(v) for k, v in c.konus.items()},
            "formulas": [{"formula": k, "bias_points": interval(v),
                          "bias_percent": interval(c.bias_percent[k])}
                         for k, v in c.bias_points.items()],
            "compensating_variation": interval(c.compensating_variation),
            "equivalent_variation": interval(c.equivalent_variation),
            "notices": [{"code": code, "message": message} for code, message in notices],
        },
        "caution": CAUTION,
    }


# -- the table (format=csv or parquet) ------------------------------------------------------------

#: The columns of a fitted comparison as a table: the comparison's measures
#: (:data:`compare.TABLE_COLUMNS`), each with the parametric-bootstrap interval of its figure
#: where it has one: of the value (the Konüs indices, the compensating and equivalent variation)
#: or of the bias (each formula's, in points and in percent).
TABLE_COLUMNS: tuple[str, ...] = compare.TABLE_COLUMNS + (
    "value_low", "value_high", "value_std_error", "bias_points_low", "bias_points_high",
    "bias_percent_low", "bias_percent_high")


def table(outcome: Outcome) -> tuple[tuple[str, ...], list[tuple[Any, ...]]]:
    """The fitted comparison as one table: a row per measure of :func:`compare.measures` with
    its intervals, then the intervals' confidence level, draws (and how many failed) and seed.
    Outside the fitted model's regular region the model's figures are withheld (empty), and so
    are their intervals."""
    c = outcome.intervals
    regular = outcome.comparison.result.validity.regular
    of_value = {f"konus_{k}": v for k, v in c.konus.items()} | {
        "compensating_variation": c.compensating_variation,
        "equivalent_variation": c.equivalent_variation}
    rows: list[tuple[Any, ...]] = []
    for row in compare.measures(outcome.comparison):
        name = row[0]
        value, points, percent = ((of_value.get(name), c.bias_points.get(name),
                                   c.bias_percent.get(name)) if regular else (None, None, None))
        rows.append(row + _ends(value) + (None if value is None else value.std_error,)
                    + _ends(points) + _ends(percent))
    blank = (None,) * (len(TABLE_COLUMNS) - 2)
    rows += [("intervals_confidence_level", c.confidence_level, *blank),
             ("intervals_draws", float(c.draws), *blank),
             ("intervals_draws_failed", float(c.failed), *blank),
             ("intervals_seed", float(c.seed), *blank)]
    return TABLE_COLUMNS, rows


def _ends(i: Interval | None) -> tuple[float | None, float | None]:
    return (None, None) if i is None else (i.low, i.high)

