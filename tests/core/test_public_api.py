"""The curated public names of the package, frozen: changing them is a deliberate act."""

from __future__ import annotations

import subprocess
import sys

import dualcost


def test_public_names_are_frozen() -> None:
    assert sorted(dualcost.__all__) == sorted([
        "FAMILIES", "FORMULAS", "BaseBudget", "Comparison", "DualcostError", "IndexData",
        "InvalidInput", "Notice", "NumericalFailure", "Preferences", "WeightReference",
        "__version__", "calibrate", "compare",
        # Answers that do not hang on one model (issue 18): the model-free bounds of a panel,
        # a sweep over models and a grid, and the band across models' arrays.
        "RevealedPreference", "revealed_preference", "Grid", "Sensitivity", "sweep", "Band",
        "band_of",
    ])
    for name in dualcost.__all__:
        assert hasattr(dualcost, name)


def test_core_imports_nothing_from_the_web_layer() -> None:
    """The numerical core is pure: importing it loads neither FastAPI nor pydantic."""
    code = ("import sys, dualcost.core.comparison, dualcost.core.preferences; "
            "bad = [m for m in ('fastapi', 'pydantic', 'starlette', 'dualcost.api') "
            "if m in sys.modules]; print(bad); sys.exit(1 if bad else 0)")
    done = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True)
    assert done.returncode == 0, done.stdout + done.stderr
