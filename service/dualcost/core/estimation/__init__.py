"""Estimating preferences from budget data, and the true index from the estimate.

- :mod:`.panel`        the data: prices, budget shares, total expenditure, survey weights;
- :mod:`.system`       iterated least squares for share-equation systems, robust covariance;
- :mod:`.ces`          CES and nested CES share equations;
- :mod:`.les`          the linear expenditure system (Stone 1954);
- :mod:`.almost_ideal` AIDS and QUAIDS, linear approximate and nonlinear, restrictions, tests;
- :mod:`.estimator`    :func:`fit`: one call from data to a fitted, checked model;
- :mod:`.uncertainty`  intervals for the Konüs index and the substitution bias.
"""

from __future__ import annotations

from .estimator import FITTED_FAMILIES, FitResult, ParameterEstimate, RegularityReport, fit
from .panel import Panel
from .uncertainty import ComparisonIntervals, Interval, comparison_intervals

__all__ = [
    "FITTED_FAMILIES",
    "ComparisonIntervals",
    "FitResult",
    "Interval",
    "Panel",
    "ParameterEstimate",
    "RegularityReport",
    "comparison_intervals",
    "fit",
]
