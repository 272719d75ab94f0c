"""Estimating preferences from budget data: POST /v1/fits (JSON), POST /v1/fits/csv (an upload)
and POST /v1/fitted-comparisons (fit, then compare under the fit, with intervals).

The data arrive as JSON rows or CSV records (:mod:`dualcost.api.inputs.observations`); the core
checks them and fits in one translation (:func:`dualcost.core.estimation.fit`); the answer is
the estimate with its tests, elasticities and regularity, or the parameter table as CSV. A
fitted comparison goes on into the comparison's core call with the fitted family's parameters as
the fit gave them, and into the parametric bootstrap of its intervals.
"""

from __future__ import annotations

import json
import math
from dataclasses import dataclass
from typing import Any

import numpy as np
from scipy import stats

from ...config import Settings
from ...core.estimation import FitResult, Panel, fit
from ...core.estimation.estimator import ParameterEstimate
from ...core.preferences.nested_ces import ItemIdTree
from ..inputs.csv import dialect_notices
from ..inputs.items import ItemAxis
from ..inputs.locator import Form, Locator, Place
from ..inputs.observations import Observations
from ..inputs.query import validated
from ..observability import computing
from ..problems import RequestProblem
from ..schemas.common import CAUTION
from ..schemas.estimation import FitModelIn, FitRequest

#: Where each option of a fit is, in the JSON body and in the CSV upload's query string; the
#: data's places are bound once the kind of spending is known (``observations.bind``).
PLACES: dict[str, Place] = {
    **{name: Place(f"/model/{name}", name) for name in (
        "family", "estimator", "restrictions", "quadratic", "price_terms", "alpha0")},
    "tree": Place("/model/tree", "tree", "path", json_text=True),
    "confidence_level": Place("/confidence_level", "confidence_level"),
    "max_iterations": Place("/max_iterations", "max_iterations"),
    "normalise_shares": Place("/normalise_shares", "normalise_shares"),
    "share_unit": Place("/share_unit", "share_unit"),
    "residuals": Place("/residuals", "residuals"),
    "point_expenditure": Place("/elasticities_at/expenditure", "elasticities_at"),
    "point_prices": Place("/elasticities_at/prices", "elasticities_at", "items"),
}
METHOD = ("closed form of the fitted family; delta-method standard errors (gradient by central "
          "differences); t intervals")
PARAMETER_COLUMNS = ("parameter", "symbol", "items", "group", "estimate", "std_error",
                     "t_statistic", "p_value", "ci_low", "ci_high", "kind")


@dataclass(frozen=True)
class Options:
    """How to fit, besides the model: the request's or the upload's query parameters."""

    confidence_level: float
    max_iterations: int
    normalise_shares: bool
    residuals: bool
    point: tuple[np.ndarray, float] | None = None
    share_unit: str = "fraction"


@dataclass(frozen=True)
class Outcome:
    result: FitResult
    data: Observations
    options: Options


def locator(form: Form = "json") -> Locator:
    return Locator(PLACES, form)


def options_of(request: FitRequest, axis: ItemAxis, loc: Locator) -> Options:
    point = None
    if request.elasticities_at is not None:
        point = (axis.vector(loc, "point_prices", request.elasticities_at.prices),
                 request.elasticities_at.expenditure)
    return Options(request.confidence_level, request.max_iterations, request.normalise_shares,
                   request.residuals, point, request.share_unit)


def run(data: Observations, spec: FitModelIn, options: Options, settings: Settings,
        loc: Locator, operation: str = "fitModel") -> Outcome:
    """Check the limits, build the core's panel and fit; errors point at the input."""
    n_obs, n = data.prices.shape
    if n > settings.max_items:
        raise loc.problem("items", f"has {n} items; the limit is {settings.max_items}")
    if n_obs * n > settings.max_fit_cells:
        raise loc.problem("observations", f"{n_obs} observations of {n} items are more than the "
                          f"limit of {settings.max_fit_cells} cells for one fit")
    # The core reads the grouping's item ids and depth; its errors carry their path.
    tree = None if spec.tree is None else ItemIdTree(spec.tree, data.axis.position,
                                                     settings.max_tree_depth)
    with computing(operation, settings), loc.translating():
        if data.shares is not None and data.total is not None:
            panel = Panel.checked(data.prices, data.shares, data.total, data.weights,
                                  normalise=options.normalise_shares, unit=options.share_unit)
        else:
            assert data.spending is not None
            panel = Panel.from_spending(data.prices, data.spending, data.weights)
        result = fit(
            panel, spec.family, estimator=spec.estimator, restrictions=spec.restrictions,
            quadratic=spec.quadratic, price_terms=spec.price_terms, alpha0=spec.alpha0, tree=tree,
            confidence_level=options.confidence_level, point=options.point,
            max_iterations=options.max_iterations, item_names=data.axis.ids,
            max_jacobian=settings.max_fit_jacobian)
    return Outcome(result, data, options)


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


def document(outcome: Outcome) -> dict[str, Any]:
    """The answer as plain values, in the shape of ``FitResponse``."""
    r, data = outcome.result, outcome.data
    ids, labels = data.axis.ids, data.labels
    return {
        "family": r.family, "estimator": r.estimator, "restrictions": r.restrictions,
        "method": r.method, "covariance_type": r.covariance_type,
        "confidence_level": r.confidence_level, "items": ids, "observations": labels,
        "parameters": [_parameter(p, ids) for p in r.parameters],
        "model": model_for_request(r, data.axis),
        "fit": _statistics(outcome),
        "tests": [{"hypothesis": t.hypothesis, "test": "Wald, robust covariance, chi-squared",
                   "statistic": t.statistic, "df": t.df, "p_value": t.p_value,
                   "imposed": t.imposed} for t in r.tests],
        "elasticities": _elasticities(outcome),
        "regularity": _regularity(r, labels),
        "notices": dialect_notices(outcome.data.dialect)
        + [{"code": n.code, "message": n.message} for n in r.notices],
        "caution": CAUTION,
    }


def _parameter(p: ParameterEstimate, ids: list[str]) -> dict[str, Any]:
    return {"name": p.label.text(ids), "symbol": p.label.symbol,
            "items": [ids[i] for i in p.label.items], "group": p.label.group,
            "estimate": p.estimate, "std_error": _num(p.std_error),
            "t_statistic": _num(p.t_statistic), "p_value": _num(p.p_value),
            "ci_low": _num(p.ci_low), "ci_high": _num(p.ci_high), "kind": p.kind}


def _statistics(outcome: Outcome) -> dict[str, Any]:
    f, data = outcome.result.fit, outcome.data
    ids, labels = data.axis.ids, data.labels
    weighted = bool(np.any(data.weights != data.weights[0])) if data.weights is not None else False
    return {
        "observations": f.n_obs, "equations": f.n_equations, "parameters": f.n_parameters,
        "degrees_of_freedom": f.df_resid, "iterations": f.iterations, "converged": True,
        "weighted": weighted, "r_squared": {ids[i]: _num(v) for i, v in enumerate(f.r_squared)},
        "residual_covariance": f.residual_covariance.tolist(),
        "residuals": [{"observation": labels[t], "fitted": f.fitted[t].tolist(),
                       "residuals": f.residuals[t].tolist()} for t in range(f.n_obs)]
        if outcome.options.residuals else None,
    }


def _elasticities(outcome: Outcome) -> dict[str, Any]:
    r, ids = outcome.result, outcome.data.axis.ids
    e = r.elasticities
    q = float(stats.t.ppf(0.5 + 0.5 * r.confidence_level, r.fit.df_resid))

    def est(value: float, se: float) -> dict[str, float | None]:
        v, s = _num(value), _num(se)
        if v is None or s is None:
            return {"estimate": v, "std_error": s, "ci_low": None, "ci_high": None}
        return {"estimate": v, "std_error": s, "ci_low": v - q * s, "ci_high": v + q * s}

    def matrix(values: np.ndarray, ses: np.ndarray) -> dict[str, dict[str, Any]]:
        return {ids[i]: {ids[j]: est(values[i, j], ses[i, j]) for j in range(len(ids))}
                for i in range(len(ids))}

    return {
        "prices": {ids[i]: float(v) for i, v in enumerate(e.prices)},
        "expenditure": e.expenditure_level,
        "at": "given" if outcome.options.point is not None else "sample_means",
        "shares": {ids[i]: float(v) for i, v in enumerate(e.shares)},
        "expenditure_elasticities": {ids[i]: est(e.expenditure[i], e.expenditure_se[i])
                                     for i in range(len(ids))},
        "marshallian": matrix(e.marshallian, e.marshallian_se),
        "hicksian": matrix(e.hicksian, e.hicksian_se),
        "method": METHOD,
    }


def _regularity(r: FitResult, labels: list[str]) -> dict[str, Any]:
    reg = r.regularity
    return {
        "observations_checked": reg.checked, "monotonicity_violations": len(reg.monotonicity),
        "concavity_violations": len(reg.concavity), "symmetry_violations": len(reg.symmetry),
        "outside_domain": len(reg.outside_domain),
        "monotonicity_observations": [labels[t] for t in reg.monotonicity[:50]],
        "concavity_observations": [labels[t] for t in reg.concavity[:50]],
        "notes": [{"observation": labels[t], "code": n.code, "message": n.message}
                  for t, n in reg.notes],
    }


def parameter_rows(outcome: Outcome) -> list[list[Any]]:
    """The parameter table for a CSV answer, one row per parameter."""
    ids = outcome.data.axis.ids
    rows = []
    for p in outcome.result.parameters:
        o = _parameter(p, ids)
        rows.append([o["name"], o["symbol"], " ".join(o["items"]), o["group"], o["estimate"],
                     o["std_error"], o["t_statistic"], o["p_value"], o["ci_low"], o["ci_high"],
                     o["kind"]])
    return rows


def model_from_query(query: dict[str, Any], loc: Locator) -> FitModelIn:
    """The model options of the CSV upload, from its query parameters (``tree`` as JSON)."""
    values = {k: v for k, v in query.items() if v is not None}
    if "tree" in values:
        try:
            values["tree"] = json.loads(values["tree"])
        except json.JSONDecodeError as exc:
            raise RequestProblem.at("#/query/tree", f"is not valid JSON: {exc}") from None
    return validated(FitModelIn, values, loc)
