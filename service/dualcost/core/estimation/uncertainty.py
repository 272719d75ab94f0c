"""Intervals for the Konüs index, the substitution bias and the compensation, carried over from
the uncertainty of the fitted parameters by a parametric bootstrap.

Method (Krinsky and Robb 1986, "On approximating the statistical properties of elasticities",
Review of Economics and Statistics 68(4)): draw ``theta*_b ~ N(theta_hat, V_hat)``,
``b = 1..B``, from the estimate's asymptotic distribution with its robust covariance; calibrate the
family with each draw to the same base budget and repeat the same comparison; the interval is the
percentile interval of the draws at the fit's confidence level (Efron and Tibshirani 1993, *An
Introduction to the Bootstrap*, ch. 13), and the standard error their standard deviation. The
point estimate stays the one from ``theta_hat``. The generator is numpy's default (PCG64) seeded
with ``seed``: the same request gives the same interval.

A draw at which the family cannot be calibrated or evaluated (a drawn sigma below zero, a QUAIDS
draw whose cost function is undefined at the base) is counted and reported, never replaced; the
interval then describes the draws that could be evaluated, and a notice says how many could not.
"""

from __future__ import annotations

from collections.abc import Mapping
from dataclasses import dataclass, field
from typing import Any

import numpy as np
import numpy.typing as npt

from ..comparison import Comparison, compare
from ..deadline import check as check_deadline
from ..errors import DualcostError, InvalidInput, NumericalFailure
from ..preferences import calibrate
from ..preferences.base import BaseBudget, Notice
from .estimator import FitResult

METHOD = ("parametric bootstrap: parameters drawn from the normal distribution of the estimate "
          "with its robust covariance (Krinsky and Robb 1986), percentile intervals")


@dataclass(frozen=True)
class Interval:
    """A point estimate with the percentile interval and standard deviation of its draws."""

    estimate: float
    low: float
    high: float
    std_error: float


@dataclass(frozen=True)
class ComparisonIntervals:
    """Intervals for one comparison's Konüs indices, formula biases and variations."""

    method: str
    draws: int
    failed: int
    seed: int
    confidence_level: float
    konus: dict[str, Interval]
    bias_points: dict[str, Interval]
    bias_percent: dict[str, Interval]
    compensating_variation: Interval
    equivalent_variation: Interval
    notices: tuple[Notice, ...] = field(default=())


def _square_root(cov: npt.NDArray[np.float64]) -> npt.NDArray[np.float64]:
    """``S`` with ``S S' = V``, from the eigen-decomposition (V may be only semidefinite)."""
    values, vectors = np.linalg.eigh(0.5 * (cov + cov.T))
    return vectors * np.sqrt(np.clip(values, 0.0, None))


def _record(c: Comparison) -> dict[str, float]:
    out = {"konus.base": c.konus.base, "konus.current": c.konus.current,
           "konus.midpoint": c.konus.midpoint,
           "cv": c.compensating_variation, "ev": c.equivalent_variation}
    if c.konus.reference is not None:
        out["konus.reference"] = c.konus.reference
    for name, f in c.formulas.items():
        out[f"points.{name}"] = f.bias_points
        out[f"percent.{name}"] = f.bias_percent
    return out


def comparison_intervals(
    result: FitResult,
    point: Comparison,
    base: BaseBudget,
    current_prices: npt.ArrayLike,
    *,
    options: Mapping[str, Any],
    draws: int = 500,
    seed: int = 0,
) -> ComparisonIntervals:
    """Percentile intervals for ``point`` (the comparison under the fitted model), by drawing
    the parameters and repeating ``compare(model, base, current_prices, **options)``."""
    if int(draws) < 10:
        raise InvalidInput("draws", f"must be at least 10, got {draws}")
    if int(seed) < 0:
        raise InvalidInput("seed", f"must be zero or more, got {seed}")
    rng = np.random.default_rng(int(seed))
    root = _square_root(result.covariance)
    thetas = result.theta + rng.standard_normal((int(draws), result.theta.size)) @ root.T
    values: dict[str, list[float]] = {key: [] for key in _record(point)}
    failed = 0
    first: str | None = None
    for theta in thetas:
        check_deadline("drawing parameters for the intervals")
        # A drawn model may leave the floating-point range (a NaN the comparison then refuses):
        # such a draw counts as failed, so numpy's warnings on the way are not wanted.
        try:
            with np.errstate(all="ignore"):
                model = calibrate(result.family, base, result.spec_for(theta))
                record = _record(compare(model, base, current_prices, **options))
        except (DualcostError, ArithmeticError, ValueError) as exc:
            failed += 1
            first = first or str(exc)
            continue
        for key in values:
            values[key].append(record[key])
    kept = int(draws) - failed
    if kept < 2:
        raise NumericalFailure("uncertainty", f"only {kept} of {draws} parameter draws could be "
                               f"evaluated (first failure: {first}); the interval cannot be formed")
    level = result.confidence_level
    lo_q, hi_q = 0.5 - 0.5 * level, 0.5 + 0.5 * level
    centre = _record(point)

    def interval(key: str) -> Interval:
        arr = np.asarray(values[key])
        low, high = np.quantile(arr, [lo_q, hi_q])
        return Interval(centre[key], float(low), float(high), float(np.std(arr, ddof=1)))

    notices: list[Notice] = []
    if failed:
        notices.append(Notice("draws_failed", f"{failed} of {draws} parameter draws could not be "
                              f"evaluated and are left out of the intervals (first: {first})."))
    konus = {k.split(".", 1)[1]: interval(k) for k in values if k.startswith("konus.")}
    return ComparisonIntervals(
        method=METHOD, draws=int(draws), failed=failed, seed=int(seed), confidence_level=level,
        konus=konus,
        bias_points={k.split(".", 1)[1]: interval(k) for k in values if k.startswith("points.")},
        bias_percent={k.split(".", 1)[1]: interval(k) for k in values if k.startswith("percent.")},
        compensating_variation=interval("cv"), equivalent_variation=interval("ev"),
        notices=tuple(notices),
    )
