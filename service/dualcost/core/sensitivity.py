"""How far a comparison's answer depends on the preference model: one parameter run over a grid,
and several families side by side, each through the one comparison core
(:func:`dualcost.core.comparison.compare`).

- A **grid** runs one model's parameter over values, the others held: a family's number
  parameter (``sigma`` of CES, ``frisch`` of Stone-Geary, ...), the ``sigma`` of one named group
  of a nested CES tree, or ``gamma_scale``, a factor on the AIDS or QUAIDS price coefficients
  ``gamma`` (0: no price effects beyond the share intercepts; 1: as given). Every point is
  calibrated to the same base budget and compared at the same current prices and income.
- The **band** across models is, for each Konüs index and each formula's bias, the least and
  the greatest value among the models whose answer is a result (the models outside their
  regular region at these prices are counted, not included; :mod:`dualcost.core.validity`).

The points are computed one after another (each family's own methods broadcast over
households and periods, not over its parameters).
"""

from __future__ import annotations

import math
from collections.abc import Callable, Mapping, Sequence
from dataclasses import dataclass, replace
from typing import Any

import numpy as np
import numpy.typing as npt

from . import deadline
from .comparison import Comparison, base_budget, compare
from .errors import InvalidInput
from .preferences import FAMILIES, calibrate
from .preferences.base import BaseBudget, Preferences
from .preferences.nested_ces import ItemIdTree

#: A model of the set: calibrated to the base budget when the sweep calls it.
Calibrator = Callable[[BaseBudget], Preferences]
#: The factor on AIDS's price coefficients, the one grid parameter that is not a family's own.
GAMMA_SCALE = "gamma_scale"


@dataclass(frozen=True)
class Grid:
    """``parameter`` of the ``family`` model with ``parameters`` (core form) run over
    ``values``; ``group`` names the nested CES group whose ``sigma`` is run."""

    family: str
    parameters: Mapping[str, Any]
    parameter: str
    values: tuple[float, ...]
    group: str | None = None


@dataclass(frozen=True)
class Range:
    """The least and greatest value of one measure over the comparisons that are results
    (``count`` of them; ``left_out`` were outside their model's regular region)."""

    measure: str
    low: float | None
    high: float | None
    count: int
    left_out: int


@dataclass(frozen=True)
class Evaluated:
    """One model, calibrated, and its comparison."""

    model: Preferences
    comparison: Comparison


@dataclass(frozen=True)
class Sensitivity:
    """One comparison per model of the set, one per grid value, and their ranges."""

    models: tuple[Evaluated, ...]
    grid: Grid | None
    points: tuple[Evaluated, ...]
    band: tuple[Range, ...]
    along_grid: tuple[Range, ...]


def sweep(base: BaseBudget, current_prices: npt.ArrayLike, *,
          models: Sequence[Calibrator] = (), grid: Grid | None = None,
          current_income: float | None = None, current_quantities: npt.ArrayLike | None = None,
          formulas: Sequence[str] | None = None) -> Sensitivity:
    """Compare ``base`` with ``current_prices`` under every model of ``models`` and at every
    value of ``grid``, each by :func:`dualcost.core.comparison.compare` with the same options.
    An error at a grid value is ``InvalidInput("grid_values", ..., k)`` at its position."""
    if not models and grid is None:
        raise InvalidInput("models", "give at least one model, or a grid")

    def one(model: Preferences) -> Evaluated:
        deadline.check("comparing the models of a sweep")
        return Evaluated(model, compare(model, base, current_prices,
                                        current_income=current_income,
                                        current_quantities=current_quantities,
                                        formulas=formulas))

    across = tuple(one(calibrator(base)) for calibrator in models)
    points = () if grid is None else tuple(one(m) for m in _grid_models(base, grid))
    return Sensitivity(across, grid, points, ranges([e.comparison for e in across]),
                       ranges([e.comparison for e in points]))


def sweep_budgets(base_prices: npt.ArrayLike, current_prices: npt.ArrayLike, *,
                  base_quantities: npt.ArrayLike | None = None,
                  base_shares: npt.ArrayLike | None = None,
                  base_expenditure: float | None = None, normalise_shares: bool = False,
                  share_unit: str = "fraction", models: Sequence[Calibrator] = (),
                  grid: Grid | None = None, current_income: float | None = None,
                  current_quantities: npt.ArrayLike | None = None,
                  formulas: Sequence[str] | None = None) -> Sensitivity:
    """:func:`sweep` from plain arrays: the base budget as
    :func:`dualcost.core.comparison.compare_budgets` reads it (``p0`` with ``q0``, or ``w0``
    with ``m0``), then the sweep."""
    budget = base_budget(base_prices, base_quantities=base_quantities, base_shares=base_shares,
                         base_expenditure=base_expenditure, normalise_shares=normalise_shares,
                         share_unit=share_unit)
    return sweep(budget, current_prices, models=models, grid=grid,
                 current_income=current_income, current_quantities=current_quantities,
                 formulas=formulas)


def _grid_models(base: BaseBudget, grid: Grid) -> list[Preferences]:
    out = []
    for k, value in enumerate(grid.values):
        if not math.isfinite(value):
            raise InvalidInput("grid_values", "must be a finite number", k)
        parameters = with_parameter(grid, value)
        try:
            out.append(calibrate(grid.family, base, parameters))
        except InvalidInput as exc:
            raise InvalidInput("grid_values", f"at {grid.parameter} = {value:.10g}, "
                               f"{exc.parameter}: {exc.rule}", k) from exc
    return out


def with_parameter(grid: Grid, value: float) -> dict[str, Any]:
    """The model's parameters with the grid's parameter set to ``value``."""
    out = dict(grid.parameters)
    cls = FAMILIES.get(grid.family)
    if cls is None:
        raise InvalidInput("grid_model", f"unknown preference family {grid.family!r}")
    if grid.group is not None:
        if grid.parameter != "sigma" or "tree" not in out:
            raise InvalidInput("grid_group", "a group is named only for the sigma of a nested "
                               "CES model's tree")
        out["tree"] = _tree_with_sigma(out["tree"], grid.group, value)
        return out
    if grid.parameter == GAMMA_SCALE:
        if grid.family not in ("aids", "quaids") or out.get("gamma") is None:
            raise InvalidInput("grid_parameter", "gamma_scale runs over a factor on the price "
                               "coefficients gamma of an AIDS or QUAIDS model that gives them")
        out["gamma"] = value * np.asarray(out["gamma"], dtype=np.float64)
        return out
    numbers = [s.name for s in cls.parameter_specs if s.shape == "number"]
    if grid.parameter not in numbers:
        takes = ", ".join(numbers) or "none"
        raise InvalidInput("grid_parameter", f"{grid.parameter!r} is not a number parameter of "
                           f"the {grid.family} family (its number parameters: {takes})")
    out[grid.parameter] = value
    return out


def _tree_with_sigma(tree: Any, group: str, value: float) -> Any:
    """The tree with the ``sigma`` of the group named ``group`` set to ``value``."""
    spec = tree.spec if isinstance(tree, ItemIdTree) else tree
    found: list[bool] = []

    def walk(node: Any) -> Any:
        if not isinstance(node, Mapping):
            return node
        children = node.get("children")
        out = dict(node)
        if isinstance(children, list):
            out["children"] = [walk(child) for child in children]
        if node.get("name") == group:
            out["sigma"] = value
            found.append(True)
        return out

    new = walk(spec)
    if len(found) != 1:
        raise InvalidInput("grid_group", f"the tree has {len(found)} groups named {group!r}; "
                           "name exactly one")
    return replace(tree, spec=new) if isinstance(tree, ItemIdTree) else new


def ranges(results: Sequence[Comparison]) -> tuple[Range, ...]:
    """For each Konüs index and each formula's bias in points, its least and greatest value
    over the comparisons that are results (none for no comparisons)."""
    if not results:
        return ()
    kept = [c for c in results if c.validity.regular]
    left_out = len(results) - len(kept)
    measures: dict[str, list[float]] = {"konus_base": [], "konus_current": [],
                                        "konus_midpoint": []}
    for c in results:
        for name in c.formulas:
            measures.setdefault(f"{name}_bias_points", [])
    for c in kept:
        measures["konus_base"].append(c.konus.base)
        measures["konus_current"].append(c.konus.current)
        measures["konus_midpoint"].append(c.konus.midpoint)
        for name, f in c.formulas.items():
            measures[f"{name}_bias_points"].append(f.bias_points)
    return tuple(Range(name, min(v) if v else None, max(v) if v else None, len(v), left_out)
                 for name, v in measures.items())


@dataclass(frozen=True)
class Band:
    """Element by element, the least and greatest of several models' values and how many of
    them are results (NaN: withheld or not computed; ``low`` and ``high`` are NaN where none
    is)."""

    low: npt.NDArray[np.float64]
    high: npt.NDArray[np.float64]
    count: npt.NDArray[np.int64]


def band_of(values: Sequence[npt.ArrayLike]) -> Band:
    """The band across models of arrays of one shape (one per model, e.g. periods by
    households), leaving out NaN: ``low = min_j v_j`` and ``high = max_j v_j`` over the models
    whose value is a result."""
    if not values:
        raise InvalidInput("models", "give at least one model")
    stack = np.stack([np.asarray(v, dtype=np.float64) for v in values])
    # fmin/fmax skip NaN unless every value is NaN, without nanmin's warning for that case.
    return Band(np.fmin.reduce(stack, axis=0), np.fmax.reduce(stack, axis=0),
                np.isfinite(stack).sum(axis=0).astype(np.int64))
