"""dualcost: true (Konüs) cost-of-living indices beside the formula price indices.

The public core, for use from Python without the web service::

    from dualcost import BaseBudget, calibrate, compare
    base = BaseBudget.from_quantities(p0, q0)
    result = compare(calibrate("ces", base, {"sigma": 0.7}), base, p1)
"""

from __future__ import annotations

from .core.comparison import Comparison, WeightReference, compare
from .core.errors import DualcostError, InvalidInput, NumericalFailure
from .core.indices import FORMULAS, IndexData
from .core.preferences import FAMILIES, BaseBudget, Notice, Preferences, calibrate

__version__ = "0.1.0"

__all__ = [
    "FAMILIES",
    "FORMULAS",
    "BaseBudget",
    "Comparison",
    "DualcostError",
    "IndexData",
    "InvalidInput",
    "Notice",
    "NumericalFailure",
    "Preferences",
    "WeightReference",
    "__version__",
    "calibrate",
    "compare",
]
