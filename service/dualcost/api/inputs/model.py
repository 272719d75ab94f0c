"""The preference model of a request, in the core's terms.

A request names a family and gives that family's parameters flat (``{"family": "ces",
"sigma": 0.7}``): numbers; vectors keyed by item id or in item order; matrices as rows in item
order (for the families without a closed form also as objects of rows keyed by item id); a nested
CES tree whose children are item ids or further groups; for a demand system, formulas per item,
an item id and a list of price vectors. Each parameter becomes its core form here, and gets its
place in the locator (``/model/<name>``, or below the locator's ``model_root``), so that an
error the family raises about it points at the field.
"""

from __future__ import annotations

from collections.abc import Callable
from typing import Any

from ...core.preferences import FAMILIES, BaseBudget, Preferences, calibrate
from ...core.preferences.nested_ces import ItemIdTree
from ..schemas.model import ModelSpec
from .items import ItemAxis, number_rule
from .locator import Locator, Place, Shape


def family_of(spec: ModelSpec, locator: Locator) -> type[Preferences]:
    """The requested family's class. Each parameter it takes gets its place first, so that a
    missing one is pointed at too."""
    if spec.family not in FAMILIES:
        known = ", ".join(sorted(FAMILIES))
        raise locator.problem("family", f"unknown preference family {spec.family!r}; known: "
                              f"{known}")
    cls = FAMILIES[spec.family]
    for parameter in cls.parameter_specs:
        _place(locator, parameter.name, "scalar")
    return cls


def _place(locator: Locator, name: str, shape: Shape) -> None:
    known = locator.places.get(name)
    query = known.query if known is not None else None
    locator.add(name, Place(f"{locator.model_root}/{name}", query=query, shape=shape,
                            names_item=shape == "items"))


def core_parameters(spec: ModelSpec, axis: ItemAxis, locator: Locator, *, max_tree_depth: int,
                    deadline_seconds: float | None = None) -> dict[str, Any]:
    """The family's parameters in core form, each read by the shape the family declares for it
    (:class:`~dualcost.core.preferences.base.ParameterSpec`); the family itself checks them on
    calibration, and names a parameter it does not take."""
    cls = family_of(spec, locator)
    shapes = {p.name: p.shape for p in cls.parameter_specs}
    out = {name: _read(name, shapes.get(name), value, axis, locator, max_tree_depth)
           for name, value in spec.parameters().items()}
    # What the service sets itself: the items' names, and its compute deadline (None: no
    # deadline of the family's own, for direct use from Python).
    given = {"item_names": list(axis.ids), "deadline_seconds": deadline_seconds}
    out |= {name: given[name] for name, shape in shapes.items() if shape == "service"}
    return out


def _read(name: str, shape: str | None, value: Any, axis: ItemAxis, locator: Locator,
          max_tree_depth: int) -> Any:
    _place(locator, name, _SHAPES_AT.get(shape or "", "scalar"))
    if shape is None or value is None:
        return value  # the core names a parameter its family does not take
    if shape == "tree":
        # The core reads the item ids and the depth itself; its errors carry their path.
        return ItemIdTree(value, axis.position, max_tree_depth)
    return _READERS[shape](name, value, axis, locator)


#: How an error inside a parameter of each shape is located.
_SHAPES_AT: dict[str, Shape] = {"vector": "items", "formulas": "items", "matrix": "matrix",
                                "tree": "path"}


def calibrated(spec: ModelSpec, budget: BaseBudget, axis: ItemAxis, locator: Locator, *,
               max_tree_depth: int, deadline_seconds: float | None = None) -> Preferences:
    """Calibrate the requested family to ``budget``; its errors point at the request."""
    parameters = core_parameters(spec, axis, locator, max_tree_depth=max_tree_depth,
                                 deadline_seconds=deadline_seconds)
    if "model" not in locator.places:
        locator.add("model", Place("/model"))
    with locator.translating():
        return calibrate(spec.family, budget, parameters)


def _service_set(name: str, value: Any, axis: ItemAxis, locator: Locator) -> Any:
    raise locator.problem(name, "is set by the service (from items, or from its compute "
                          "deadline setting); leave it out")


def _python_only(name: str, value: Any, axis: ItemAxis, locator: Locator) -> Any:
    raise locator.problem(name, "is available from Python only")


def _number(name: str, value: Any, axis: ItemAxis, locator: Locator) -> Any:
    rule = number_rule(value)
    if rule is not None:
        raise locator.problem(name, rule)
    return value


def _text(name: str, value: Any, axis: ItemAxis, locator: Locator) -> Any:
    if not isinstance(value, str):
        raise locator.problem(name, "must be text")
    return value


def _item(name: str, value: Any, axis: ItemAxis, locator: Locator) -> Any:
    if not isinstance(value, str) or value not in axis.position:
        raise locator.problem(name, "must be an item id listed in items")
    return axis.position[value]


def _formulas(name: str, value: Any, axis: ItemAxis, locator: Locator) -> list[str | None]:
    """Formulas keyed by item id (items left out have none) or listed in item order (null:
    none)."""
    locator.given(name, value)
    if isinstance(value, dict):
        out: list[str | None] = [None] * len(axis)
        for item_id, text in value.items():
            if item_id not in axis.position:
                raise locator.problem(name, f"{item_id!r} is not an item id listed in items",
                                      item_id)
            if not isinstance(text, str):
                raise locator.problem(name, "must be a formula written as text", item_id)
            out[axis.position[item_id]] = text
        return out
    if not isinstance(value, list):
        raise locator.problem(name, "must be an object of formulas keyed by item id, or a list "
                              "of formulas in item order")
    if len(value) != len(axis):
        raise locator.problem(name, f"has {len(value)} formulas but there are {len(axis)} "
                              "items; give one per item, in the order of items (null for none)")
    for k, text in enumerate(value):
        if text is not None and not isinstance(text, str):
            raise locator.problem(name, "must be a formula written as text, or null", k)
    return list(value)


def _path(name: str, value: Any, axis: ItemAxis, locator: Locator) -> Any:
    if not isinstance(value, list):
        raise locator.problem(name, "must be a list of price vectors")
    points = []
    for k, point in enumerate(value):
        here = f"{name}[{k}]"
        locator.add(here, Place(f"/model/{name}/{k}", shape="items", names_item=True))
        if not isinstance(point, (list, dict)):
            raise locator.problem(here, "must be a price vector: an object keyed by item id, or a "
                                  "list in item order, of numbers")
        points.append(axis.numbers(locator, here, point))
    return points


_READERS: dict[str, Callable[[str, Any, ItemAxis, Locator], Any]] = {
    "service": _service_set,
    "python": _python_only,
    "number": _number,
    "text": _text,
    "item": _item,
    "vector": lambda name, value, axis, locator: axis.numbers(locator, name, value),
    "matrix": lambda name, value, axis, locator: axis.matrix(locator, name, value),
    "formulas": _formulas,
    "path": _path,
}
