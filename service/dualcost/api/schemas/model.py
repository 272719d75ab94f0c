"""The preference model of a request: a family name and that family's parameters, flat.

``{"family": "ces", "sigma": 0.7}``; vectors keyed by item id or aligned with ``items``;
matrices as rows in item order; a nested CES tree as groups whose children are item ids or
further groups.
"""

from __future__ import annotations

from typing import Any

from pydantic import BaseModel, ConfigDict, Field

from ...core.preferences import FAMILIES, BaseBudget, Preferences, calibrate
from ..problems import FieldError, RequestProblem
from .common import ItemAxis, Pointers


class ModelSpec(BaseModel):
    """A preference family and its behavioural parameters (see GET /v1/preference-families)."""

    model_config = ConfigDict(extra="allow", allow_inf_nan=False, json_schema_extra={
        "examples": [{"family": "ces", "sigma": 0.7}],
    })

    family: str = Field(description="The preference family; see GET /v1/preference-families.")

    def parameters(self) -> dict[str, Any]:
        return dict(self.model_extra or {})


def _is_number(v: Any) -> bool:
    return isinstance(v, (int, float)) and not isinstance(v, bool)


def _tree_to_core(tree: Any, axis: ItemAxis, pointer: str, max_depth: int) -> dict[str, Any]:
    """Replace item ids by positions; walk with an explicit stack so depth costs no recursion."""
    if not isinstance(tree, dict):
        raise RequestProblem([FieldError(pointer, "must be a group: an object with sigma and "
                                         "children")])
    root: dict[str, Any] = {}
    stack: list[tuple[Any, dict[str, Any], str, int]] = [(tree, root, pointer, 1)]
    while stack:
        node, out, where, depth = stack.pop()
        if depth > max_depth:
            raise RequestProblem([FieldError(where, f"the tree is deeper than the limit of "
                                             f"{max_depth} levels")])
        unknown = set(node) - {"name", "sigma", "children"}
        if unknown:
            key = sorted(unknown)[0]
            raise RequestProblem([FieldError(f"{where}/{key}", "is not a field of a group (a "
                                             "group has name, sigma and children)")])
        for key in ("name", "sigma"):
            if key in node:
                out[key] = node[key]
        children = node.get("children")
        if not isinstance(children, list):
            raise RequestProblem([FieldError(f"{where}/children", "must be a list of item ids "
                                             "and groups")])
        out["children"] = []
        for j, child in enumerate(children):
            here = f"{where}/children/{j}"
            if isinstance(child, str):
                if child not in axis.position:
                    raise RequestProblem([FieldError(here, f"{child!r} is not an item id listed "
                                                     "in items")])
                out["children"].append(axis.position[child])
            elif isinstance(child, dict):
                sub: dict[str, Any] = {}
                out["children"].append(sub)
                stack.append((child, sub, here, depth + 1))
            else:
                raise RequestProblem([FieldError(here, "must be an item id or a group")])
    return root


def model_to_core(spec: ModelSpec, base: BaseBudget, axis: ItemAxis, pointers: Pointers,
                  *, max_tree_depth: int) -> Preferences:
    """Calibrate the requested family to the base budget."""
    if spec.family not in FAMILIES:
        known = ", ".join(sorted(FAMILIES))
        raise RequestProblem([FieldError("/model/family", f"unknown preference family "
                                         f"{spec.family!r}; known: {known}")])
    for known in FAMILIES[spec.family].parameter_specs:  # a missing one is pointed at too
        pointers.note(known.name, f"/model/{known.name}", per_item=False)
    converted: dict[str, Any] = {}
    for name, value in spec.parameters().items():
        where = f"/model/{name}"
        if name == "tree":
            converted[name] = _tree_to_core(value, axis, where, max_tree_depth)
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
    pointers.note("family", "/model/family", per_item=False)
    pointers.note("model", "/model", per_item=False)
    with pointers.translating():
        return calibrate(spec.family, base, converted)
