"""Preference families, one module each, all implementing :class:`~.base.Preferences`.

Adding a family is one module here and one line in ``FAMILIES``.
"""

from __future__ import annotations

from collections.abc import Mapping
from typing import Any

from ..errors import InvalidInput
from .aids import AIDS, QUAIDS
from .base import BaseBudget, Notice, ParameterSpec, Preferences
from .ces import CES
from .cobb_douglas import CobbDouglas
from .demand_system import DemandSystem
from .formula_utility import UtilityFormula
from .nested_ces import NestedCES
from .quadratic import HomogeneousQuadratic
from .stone_geary import StoneGeary
from .translog import Translog

FAMILIES: dict[str, type[Preferences]] = {
    cls.family: cls
    for cls in (
        CobbDouglas,
        CES,
        NestedCES,
        StoneGeary,
        Translog,
        HomogeneousQuadratic,
        AIDS,
        QUAIDS,
        DemandSystem,
        UtilityFormula,
    )
}


def calibrate(family: str, base: BaseBudget, parameters: Mapping[str, Any] | None = None) -> Preferences:
    """Calibrate the named family to ``base`` with its behavioural ``parameters``.

    Unknown family names and unknown parameter names are errors, never ignored.
    """
    try:
        cls = FAMILIES[family]
    except KeyError:
        known = ", ".join(sorted(FAMILIES))
        raise InvalidInput("family", f"unknown preference family {family!r}; known: {known}") from None
    given = dict(parameters or {})
    allowed = {spec.name for spec in cls.parameter_specs}
    for name in given:
        if name not in allowed:
            accepted = ", ".join(sorted(allowed)) or "none"
            raise InvalidInput(
                name, f"is not a parameter of the {family} family (it takes: {accepted})"
            )
    return cls.calibrate(base, **given)


__all__ = [
    "AIDS",
    "FAMILIES",
    "BaseBudget",
    "CES",
    "CobbDouglas",
    "DemandSystem",
    "NestedCES",
    "HomogeneousQuadratic",
    "Notice",
    "ParameterSpec",
    "Preferences",
    "QUAIDS",
    "StoneGeary",
    "Translog",
    "UtilityFormula",
    "calibrate",
]
