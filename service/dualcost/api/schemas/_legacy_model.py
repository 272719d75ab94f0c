"""The preference model of a request: a family name and that family's parameters, flat.

``{"family": "ces", "sigma": 0.7}``; vectors keyed by item id or aligned with ``items``;
matrices as rows in item order; a nested CES tree as groups whose children are item ids or
further groups. The families without a closed form (``demand_system``, ``utility_formula``)
declare each parameter's shape (text, item id, vector, matrix, formulas per item, a list of price
vectors); their matrices may also be objects of rows keyed by item id.
"""

from __future__ import annotations

import math
from typing import Any

import numpy as np
from pydantic import BaseModel, ConfigDict, Field

from ...core.preferences import FAMILIES, BaseBudget, Preferences, calibrate
from ...core.preferences.nested_ces import ItemIdTree
from ..problems import FieldError, RequestProblem
from .common import ItemAxis, Pointers
from .model import ModelSpec
from ..inputs.tree import tree_to_core


def _is_number(v: Any) -> bool:
    return isinstance(v, (int, float)) and not isinstance(v, bool)


def _escape(token: str) -> str:
    """A JSON Pointer reference token (RFC 6901)."""
    return token.replace("~", "~0").replace("/", "~1")


def _matrix_to_core(value: Any, axis: ItemAxis, where: str) -> Any:
    """A matrix as rows in item order, or as an object of rows keyed by item id, each an object
    keyed by item id (entries left out are zero)."""
    if isinstance(value, list) and value and all(isinstance(r, list) for r in value):
        if not all(_is_number(v) for row in value for v in row):
            raise RequestProblem([FieldError(where, "must hold numbers only")])
        return axis.matrix(value, where)
    if isinstance(value, dict):
        out = np.zeros((len(axis), len(axis)))
        for row_id, row in value.items():
            here = f"{where}/{_escape(row_id)}"
            if row_id not in axis.position:
                raise RequestProblem([FieldError(here, f"{row_id!r} is not an item id listed in items")])
            if not isinstance(row, dict):
                raise RequestProblem([FieldError(here, "must be an object keyed by item id")])
            for col_id, v in row.items():
                cell = f"{here}/{_escape(col_id)}"
                if col_id not in axis.position:
                    raise RequestProblem([FieldError(cell, f"{col_id!r} is not an item id listed in "
                                                     "items")])
                if not _is_number(v) or not math.isfinite(v):
                    raise RequestProblem([FieldError(cell, "must be a finite number")])
                out[axis.position[row_id], axis.position[col_id]] = v
        return out
    raise RequestProblem([FieldError(where, "must be a matrix: a list of rows in item order, or an "
                                     "object of rows keyed by item id (entries left out are 0)")])


def _shaped_to_core(cls: type[Preferences], name: str, value: Any, axis: ItemAxis,
                    pointers: Pointers) -> Any:
    """Convert one parameter of a family that declares its parameters' shapes."""
    where = f"/model/{name}"
    shape = cls.parameter_shapes.get(name)  # type: ignore[attr-defined]
    if shape is None:
        pointers.note(name, where, per_item=False)
        return value  # the core names the unknown parameter
    if value is None:
        pointers.note(name, where, per_item=False)
        return None
    if shape in ("item_names", "deadline"):
        raise RequestProblem([FieldError(where, "is set by the service (from items, or from its "
                                         "compute deadline setting); leave it out")])
    if shape == "python":
        raise RequestProblem([FieldError(where, "is available from Python only")])
    if shape == "number":
        if not _is_number(value) or not math.isfinite(value):
            raise RequestProblem([FieldError(where, "must be a finite number")])
        pointers.note(name, where, per_item=False)
        return value
    if shape == "text":
        if not isinstance(value, str):
            raise RequestProblem([FieldError(where, "must be text")])
        pointers.note(name, where, per_item=False)
        return value
    if shape == "item":
        if not isinstance(value, str) or value not in axis.position:
            raise RequestProblem([FieldError(where, "must be an item id listed in items")])
        pointers.note(name, where, per_item=False)
        return axis.position[value]
    if shape == "vector":
        if not isinstance(value, (list, dict)) or not all(
                _is_number(v) for v in (value.values() if isinstance(value, dict) else value)):
            raise RequestProblem([FieldError(where, "must be a vector: an object keyed by item id, "
                                             "or a list in item order, of numbers")])
        pointers.note(name, where, value)
        return axis.vector(value, where)
    if shape == "matrix":
        pointers.note(name, where, per_item=False)
        return _matrix_to_core(value, axis, where)
    if shape == "formulas":
        return _formulas_to_core(name, value, axis, where, pointers)
    if shape == "path":
        if not isinstance(value, list):
            raise RequestProblem([FieldError(where, "must be a list of price vectors")])
        points = []
        for k, point in enumerate(value):
            here = f"{where}/{k}"
            if not isinstance(point, (list, dict)) or not all(
                    _is_number(v) for v in (point.values() if isinstance(point, dict) else point)):
                raise RequestProblem([FieldError(here, "must be a price vector: an object keyed by "
                                                 "item id, or a list in item order, of numbers")])
            pointers.note(f"path[{k}]", here, point)
            points.append(axis.vector(point, here))
        pointers.note(name, where, per_item=False)
        return points
    raise AssertionError(f"unknown parameter shape {shape!r}")  # pragma: no cover


def _formulas_to_core(name: str, value: Any, axis: ItemAxis, where: str,
                      pointers: Pointers) -> list[str | None]:
    """Formulas keyed by item id (items left out have none) or listed in item order (null: none)."""
    if isinstance(value, dict):
        out: list[str | None] = [None] * len(axis)
        for item_id, text in value.items():
            here = f"{where}/{_escape(item_id)}"
            if item_id not in axis.position:
                raise RequestProblem([FieldError(here, f"{item_id!r} is not an item id listed in "
                                                 "items")])
            if not isinstance(text, str):
                raise RequestProblem([FieldError(here, "must be a formula written as text")])
            out[axis.position[item_id]] = text
    elif isinstance(value, list):
        if len(value) != len(axis):
            raise RequestProblem([FieldError(where, f"has {len(value)} formulas but there are "
                                             f"{len(axis)} items; give one per item, in the order "
                                             "of items (null for none)")])
        for k, text in enumerate(value):
            if text is not None and not isinstance(text, str):
                raise RequestProblem([FieldError(f"{where}/{k}", "must be a formula written as text, "
                                                 "or null")])
        out = list(value)
    else:
        raise RequestProblem([FieldError(where, "must be an object of formulas keyed by item id, or "
                                         "a list of formulas in item order")])
    pointers.note(name, where, value)
    return out


def model_family(spec: ModelSpec, pointers: Pointers) -> type[Preferences]:
    """The requested family's class. Each parameter it takes is given its pointer first, so that a
    missing one is pointed at too."""
    if spec.family not in FAMILIES:
        known = ", ".join(sorted(FAMILIES))
        raise RequestProblem([FieldError("/model/family", f"unknown preference family "
                                         f"{spec.family!r}; known: {known}")])
    cls = FAMILIES[spec.family]
    for known_spec in cls.parameter_specs:
        pointers.note(known_spec.name, f"/model/{known_spec.name}", per_item=False)
    return cls


def parameters_to_core(spec: ModelSpec, axis: ItemAxis, pointers: Pointers, max_tree_depth: int
                       ) -> dict[str, Any]:
    """The parameters of a family with a closed form, in core form: numbers (a null stays None),
    vectors in item order, matrices, a nested CES tree with item positions."""
    converted: dict[str, Any] = {}
    for name, value in spec.parameters().items():
        where = f"/model/{name}"
        if name == "tree":
            # The core reads item ids itself; only a tree it refuses is walked here again, to
            # point at the offending place (see model_to_core).
            converted[name] = (ItemIdTree(value, axis.position, max_tree_depth)
                               if isinstance(value, dict) else _tree_at(value, axis, max_tree_depth))
            pointers.note(name, where, per_item=False)
        elif _is_number(value) or value is None:
            converted[name] = value
            pointers.note(name, where, per_item=False)
        elif isinstance(value, list) and value and all(isinstance(r, list) for r in value):
            converted[name] = axis.matrix(value, where)
            pointers.note(name, where, per_item=False)
        elif isinstance(value, (list, dict)) and all(
            _is_number(v) for v in (value.values() if isinstance(value, dict) else value)
        ):
            converted[name] = axis.vector(value, where)
            pointers.note(name, where, value)
        else:
            raise RequestProblem([FieldError(where, "must be a number, a vector (object keyed by "
                                             "item id, or list in item order), a matrix, or a "
                                             "tree")])
    return converted


def model_to_core(spec: ModelSpec, base: BaseBudget, axis: ItemAxis, pointers: Pointers,
                  *, max_tree_depth: int, compute_deadline_seconds: float | None = None) -> Preferences:
    """Calibrate the requested family to the base budget.

    Families that declare ``parameter_shapes`` (those without a closed form) get their
    parameters converted by shape, the item ids and the service's compute deadline
    (``compute_deadline_seconds``; None for none).
    """
    cls = model_family(spec, pointers)
    shapes: dict[str, str] | None = getattr(cls, "parameter_shapes", None)
    if shapes is not None:
        converted: dict[str, Any] = {}
        for name, value in spec.parameters().items():
            converted[name] = _shaped_to_core(cls, name, value, axis, pointers)
        if "item_names" in shapes.values():
            converted["item_names"] = list(axis.ids)
        if "deadline" in shapes.values():
            # None: no deadline of the family's own (direct use from Python); the service
            # always passes its setting.
            converted["deadline_seconds"] = compute_deadline_seconds
        return _calibrated(spec, base, converted, pointers)
    converted = parameters_to_core(spec, axis, pointers, max_tree_depth)
    try:
        return _calibrated(spec, base, converted, pointers)
    except RequestProblem:
        tree = converted.get("tree")
        if isinstance(tree, ItemIdTree):
            _tree_at(tree.spec, axis, max_tree_depth)  # a more exact pointer, if there is one
        raise


def _tree_at(tree: Any, axis: ItemAxis, max_tree_depth: int) -> dict[str, Any]:
    """The tree walked in the request's terms: a problem here points into the tree."""
    return tree_to_core(tree, axis, "/model/tree", max_tree_depth, fields=("name", "sigma"))


def _calibrated(spec: ModelSpec, base: BaseBudget, converted: dict[str, Any],
                pointers: Pointers) -> Preferences:
    pointers.note("family", "/model/family", per_item=False)
    pointers.note("model", "/model", per_item=False)
    with pointers.translating():
        return calibrate(spec.family, base, converted)
