"""How far a fitted comparison depends on the family fitted: POST /v1/fitted-sensitivity.

Every family of ``families`` is fitted to the same budget data and compared at the same price
change, exactly as POST /v1/fitted-comparisons does for one family (:mod:`.fitted`: the fit,
the comparison under the fitted parameters, the parametric bootstrap of its intervals); the
band across the families is the core's :func:`dualcost.core.sensitivity.ranges` over their
comparisons, and each family's interval of every measure is set beside it.

One core fit per family (they do not share a call: each family has its own estimator), one
after another in the compute thread that runs the request, each under the compute deadline as
a fitted comparison is. An error about a family's model points at ``/families/<j>``.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Any

from ...config import Settings
from ...core.sensitivity import Range, ranges
from ..problems import FieldError, RequestProblem
from ..schemas.common import CAUTION
from ..schemas.estimation import FitAndCompareRequest, FitModelIn
from ..schemas.fitted_sensitivity import FittedSensitivityRequest
from . import fitted
from .answers import SCALE_RATIO

#: The request's fields that every family's fitted comparison reads as they are.
SHARED = ("items", "observations", "prices", "shares", "total_expenditure", "expenditures",
          "quantities", "weights", "normalise_shares", "share_unit", "confidence_level",
          "max_iterations", "comparison", "uncertainty")


@dataclass(frozen=True)
class Outcome:
    families: tuple[fitted.Outcome, ...]
    band: tuple[Range, ...]


def run(request: FittedSensitivityRequest, settings: Settings) -> Outcome:
    """Check the limits, fit and compare each family, and take the band across them."""
    n = len(request.families)
    if n > settings.max_fitted_families:
        raise RequestProblem.at("/families", f"has {n} families; the limit is "
                                f"{settings.max_fitted_families} (max_fitted_families)")
    draws = request.uncertainty.draws
    if n * draws > settings.max_bootstrap_draws:
        raise RequestProblem.at("/uncertainty/draws", f"{draws} draws for each of {n} families "
                                f"are more than the limit of {settings.max_bootstrap_draws} "
                                "draws in all (max_bootstrap_draws)")
    outcomes = tuple(_one(request, j, spec, settings) for j, spec in enumerate(request.families))
    return Outcome(outcomes, ranges([o.comparison.result for o in outcomes]))


def _one(request: FittedSensitivityRequest, j: int, spec: FitModelIn,
         settings: Settings) -> fitted.Outcome:
    """Family j's fitted comparison, as POST /v1/fitted-comparisons with ``model`` = the family
    (no residuals); its errors about the model point at ``/families/j``."""
    single = FitAndCompareRequest.model_construct(
        **{name: getattr(request, name) for name in SHARED}, model=spec, elasticities_at=None,
        residuals=False)
    try:
        return fitted.run(single, settings)
    except RequestProblem as exc:
        raise RequestProblem([FieldError(_at_family(e.pointer, j), e.detail)
                              for e in exc.errors], slug=exc.slug) from exc


def _at_family(pointer: str, j: int) -> str:
    if pointer == "/model" or pointer.startswith("/model/"):
        return f"/families/{j}" + pointer[len("/model"):]
    return pointer


# -- the answer -------------------------------------------------------------------------------


def document(outcome: Outcome) -> dict[str, Any]:
    """The answer as plain JSON-ready values, in the shape of ``FittedSensitivityResponse``."""
    families = [fitted.document(o) for o in outcome.families]
    return {
        "items": outcome.families[0].fit.data.axis.ids, "scale": SCALE_RATIO,
        "families": [{k: d[k] for k in ("fit", "comparison", "intervals")} for d in families],
        "band": [_band(r, outcome) for r in outcome.band],
        "notices": [], "caution": CAUTION,
    }


def _band(r: Range, outcome: Outcome) -> dict[str, Any]:
    return {"measure": r.measure, "low": r.low, "high": r.high, "count": r.count,
            "left_out": r.left_out,
            "intervals": [{"family": j, **_interval(o, r.measure)}
                          for j, o in enumerate(outcome.families)]}


def _interval(o: fitted.Outcome, measure: str) -> dict[str, float | None]:
    """The family's bootstrap interval of ``measure`` (none where its comparison is not a
    result, or the measure was not computed for it)."""
    empty: dict[str, float | None] = {"estimate": None, "low": None, "high": None}
    if not o.comparison.result.validity.regular:
        return empty
    c = o.intervals
    if measure.startswith("konus_"):
        i = c.konus.get(measure.removeprefix("konus_"))
    else:
        i = c.bias_points.get(measure.removesuffix("_bias_points"))
    return empty if i is None else {"estimate": i.estimate, "low": i.low, "high": i.high}


# -- the CSV answer ---------------------------------------------------------------------------

COLUMNS = ("kind", "family_position", "family", "measure", "estimate", "low", "high", "count")


def table(outcome: Outcome) -> tuple[tuple[str, ...], list[tuple[Any, ...]]]:
    """For every measure of the band: one row per fitted family (kind ``fit``: the estimate and
    its interval), then the band's row (kind ``band``: least and greatest across the families,
    over ``count`` of them)."""
    rows: list[tuple[Any, ...]] = []
    for r in outcome.band:
        for j, o in enumerate(outcome.families):
            i = _interval(o, r.measure)
            rows.append(("fit", j, o.fit.result.family, r.measure, i["estimate"], i["low"],
                         i["high"], None))
        rows.append(("band", None, None, r.measure, None, r.low, r.high, r.count))
    return COLUMNS, rows
