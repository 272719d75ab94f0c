"""dualcost: true (Konüs) cost-of-living indices beside the formula price indices.

The public core, for use from Python without the web service::

    from dualcost import BaseBudget, calibrate, compare
    base = BaseBudget.from_quantities(p0, q0)
    result = compare(calibrate("ces", base, {"sigma": 0.7}), base, p1)

Beside it, answers that do not hang on one model: ``revealed_preference(prices, quantities)``
(GARP and Varian's bounds on a panel, no model), ``sweep(base, p1, models=..., grid=Grid(...))``
(several models and one parameter's grid, with the band), ``band_of(arrays)`` (the band of
several models' arrays, element by element).
"""

from __future__ import annotations

from .core.comparison import Comparison, WeightReference, compare
from .core.errors import DualcostError, InvalidInput, NumericalFailure
from .core.indices import FORMULAS, IndexData
from .core.preferences import FAMILIES, BaseBudget, Notice, Preferences, calibrate
from .core.revealed_bounds import RevealedPreference, revealed_preference
from .core.sensitivity import Band, Grid, Sensitivity, band_of, sweep

__version__ = "0.1.0"

__all__ = [
    "FAMILIES",
    "FORMULAS",
    "Band",
    "BaseBudget",
    "Comparison",
    "DualcostError",
    "Grid",
    "IndexData",
    "InvalidInput",
    "Notice",
    "NumericalFailure",
    "Preferences",
    "RevealedPreference",
    "Sensitivity",
    "WeightReference",
    "__version__",
    "band_of",
    "calibrate",
    "compare",
    "revealed_preference",
    "sweep",
]
