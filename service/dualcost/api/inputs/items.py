"""The request's items, and vectors and matrices read in their order.

A vector arrives as an object keyed by item id or as a list in the order of ``items``; either
way it becomes an array in item order, and an unknown id, a missing item or a list of the wrong
length is refused at the place the locator gives for the core argument it becomes.
"""

from __future__ import annotations

import math
from collections.abc import Sequence
from dataclasses import dataclass, field
from typing import Any

import numpy as np
from numpy.typing import NDArray

from ..problems import NUMBER_NOT_BOOL, NUMBER_NOT_TEXT, RequestProblem
from .locator import Locator

Array = NDArray[np.float64]


def is_number(value: Any) -> bool:
    return isinstance(value, (int, float)) and not isinstance(value, bool)


def number_rule(value: Any) -> str | None:
    """The rule a value the schema did not check (a model parameter) breaks as a number, in
    the words the schema's own numbers use, or ``None``."""
    if isinstance(value, str):
        return NUMBER_NOT_TEXT
    if isinstance(value, bool):
        return NUMBER_NOT_BOOL
    if not is_number(value) or not math.isfinite(value):
        return "must be a finite number"
    return None


@dataclass
class ItemAxis:
    """The request's item list, and the conversions of vectors to arrays in its order."""

    ids: list[str]
    labels: list[str | None]
    position: dict[str, int] = field(init=False)

    def __post_init__(self) -> None:
        self.position = dict(zip(self.ids, range(len(self.ids)), strict=True))

    @classmethod
    def from_request(cls, items: Sequence[Any], locator: Locator, *, limit: int | None = None,
                     name: str = "items") -> ItemAxis:
        """The items of a request (ids, or objects with an id and a label); a repeated id or
        more items than ``limit`` is refused at ``name``'s place."""
        if set(map(type, items)) == {str}:  # ids only, the common form
            axis = cls(list(items), [None] * len(items))
        else:
            axis = cls([it if isinstance(it, str) else it.id for it in items],
                       [None if isinstance(it, str) else it.label for it in items])
        if len(axis.position) < len(axis.ids):
            first: dict[str, int] = {}
            for i, item_id in enumerate(axis.ids):
                if item_id in first:
                    raise locator.problem(name, f"item id {item_id!r} is listed twice (first at "
                                          f"position {first[item_id]})", i)
                first[item_id] = i
        if limit is not None and len(axis) > limit:
            raise locator.problem(name, f"has {len(axis)} items; the limit is {limit}")
        locator.items = axis.ids
        return axis

    def __len__(self) -> int:
        return len(self.ids)

    def subset(self, positions: Sequence[int]) -> ItemAxis:
        return ItemAxis([self.ids[i] for i in positions], [self.labels[i] for i in positions])

    def vector(self, locator: Locator, name: str, value: dict[str, float] | list[float]) -> Array:
        """The vector given for core argument ``name``, as an array in item order."""
        locator.given(name, value)
        n = len(self.ids)
        if isinstance(value, list):
            if len(value) != n:
                raise locator.problem(name, f"has {len(value)} values but there are {n} items; "
                                      "give one value per item, in the order of items")
            return np.asarray(value, dtype=np.float64)
        unknown = [k for k in value if k not in self.position]
        missing = [i for i in self.ids if i not in value]
        if unknown or missing:
            errors = [locator.field(name, f"{k!r} is not an item id listed in items", k)
                      for k in unknown]
            if missing:
                shown = ", ".join(repr(m) for m in missing[:5]) + (" ..." if len(missing) > 5 else "")
                errors.append(locator.field(name, f"has no value for item(s) {shown}; give one "
                                            "value per item"))
            raise RequestProblem(errors)
        out = np.empty(n)
        for k, v in value.items():
            out[self.position[k]] = v
        return out

    def numbers(self, locator: Locator, name: str, value: Any) -> Array:
        """A vector whose entries the request's schema did not check (a model parameter); an
        entry that is not a finite number is named."""
        if not isinstance(value, (list, dict)):
            raise locator.problem(name, "must be a vector: an object keyed by item id, or a list "
                                  "in item order, of numbers")
        locator.given(name, value)
        entries = value.items() if isinstance(value, dict) else enumerate(value)
        for where, entry in entries:
            rule = number_rule(entry)
            if rule is not None:
                raise locator.problem(name, rule, where)
        return self.vector(locator, name, value)

    def matrix(self, locator: Locator, name: str, value: Any) -> Array:
        """A square matrix as rows in item order, or as an object of rows keyed by item id, each
        an object keyed by item id (entries left out are zero)."""
        n = len(self.ids)
        if isinstance(value, list) and value and all(isinstance(r, list) for r in value):
            for r, row in enumerate(value):
                for c, entry in enumerate(row):
                    rule = number_rule(entry)
                    if rule is not None:
                        raise locator.problem(name, rule, (r, c))
            if len(value) != n or any(len(row) != n for row in value):
                raise locator.problem(name, f"must be a {n} by {n} matrix (one row and one "
                                      "column per item, in the order of items)")
            return np.asarray(value, dtype=np.float64)
        if not isinstance(value, dict):
            raise locator.problem(name, "must be a matrix: a list of rows in item order, or an "
                                  "object of rows keyed by item id (entries left out are 0)")
        out = np.zeros((n, n))
        for row_id, row in value.items():
            if row_id not in self.position:
                raise locator.problem(name, f"{row_id!r} is not an item id listed in items",
                                      (row_id,))
            if not isinstance(row, dict):
                raise locator.problem(name, "must be an object keyed by item id", (row_id,))
            for col_id, v in row.items():
                if col_id not in self.position:
                    raise locator.problem(name, f"{col_id!r} is not an item id listed in items",
                                          (row_id, col_id))
                rule = number_rule(v)
                if rule is not None:
                    raise locator.problem(name, rule, (row_id, col_id))
                out[self.position[row_id], self.position[col_id]] = v
        return out
