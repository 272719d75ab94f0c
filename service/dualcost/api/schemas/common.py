"""Shapes shared by the operations: items, vectors keyed by item id or aligned with the item
list, and the map from core argument names back to JSON Pointers into the request."""

from __future__ import annotations

from collections.abc import Callable, Iterator
from contextlib import AbstractContextManager, contextmanager
from dataclasses import dataclass, field
from typing import Annotated, Any

import numpy as np
from pydantic import BaseModel, ConfigDict, Field

from ...core.errors import InvalidInput
from ..problems import FieldError, RequestProblem

FiniteFloat = Annotated[float, Field(allow_inf_nan=False)]

#: A vector: either an object keyed by item id, or a list aligned with ``items``. The two
#: forms cannot be confused, so the union is tried left to right: pydantic's default "smart"
#: mode tries every member and costs a third more for a list.
VectorIn = Annotated[
    list[FiniteFloat] | dict[str, FiniteFloat],
    Field(union_mode="left_to_right",
          description="One number per item: an object keyed by item id, or a list in the order "
                      "of `items`."),
]
#: A matrix: a list of rows aligned with ``items`` (row i, column j).
MatrixIn = Annotated[
    list[list[FiniteFloat]],
    Field(description="A square matrix as a list of rows, rows and columns in the order of "
                      "`items`."),
]


class StrictModel(BaseModel):
    """Unknown fields are refused (never silently dropped); NaN and infinity are refused."""

    model_config = ConfigDict(extra="forbid", allow_inf_nan=False)


class NoticeOut(StrictModel):
    """A remark that goes with an answer: a warning, or a statement of what was done."""

    code: str
    message: str


CAUTION = (
    "Model-based cost-of-living figures are estimates: they depend on the preference model and "
    "parameters chosen. For wage, pension or benefit indexation, defer to official statistics "
    "and to the applicable law or agreement."
)
SIGN_CONVENTION = (
    "Compensating and equivalent variation are stated as losses: positive when the change of "
    "prices and income leaves the household worse off. compensating_variation = e(p1,u0) - m1, "
    "money needed at current prices to keep the base living standard; equivalent_variation = "
    "m0 - e(p0,u1), the loss valued at base prices."
)


class Item(StrictModel):
    id: str = Field(min_length=1, max_length=100, description="The item's id, unique.")
    label: str | None = Field(None, max_length=300, description="A readable name.")


#: Left to right, the id first: the forms cannot be confused, and the default "smart" mode
#: would try the object form on every id (three times the cost for a list of ids).
ItemIn = Annotated[Annotated[str, Field(min_length=1, max_length=100)] | Item,
                   Field(union_mode="left_to_right",
                         description="An item: an object with id and label, or just its id.")]


def _escape(token: str) -> str:
    return token.replace("~", "~0").replace("/", "~1")


@dataclass
class ItemAxis:
    """The request's item list, and the conversions of vectors to arrays in its order."""

    ids: list[str]
    labels: list[str | None]
    position: dict[str, int] = field(init=False)

    def __post_init__(self) -> None:
        self.position = dict(zip(self.ids, range(len(self.ids)), strict=True))
        if len(self.position) < len(self.ids):  # an id is listed twice: name the first repeat
            first: dict[str, int] = {}
            for i, item_id in enumerate(self.ids):
                if item_id in first:
                    raise RequestProblem([FieldError(f"/items/{i}", f"item id {item_id!r} is "
                                                     f"listed twice (first at position "
                                                     f"{first[item_id]})")])
                first[item_id] = i

    @classmethod
    def from_request(cls, items: list[Any]) -> ItemAxis:
        if set(map(type, items)) == {str}:  # ids only, the common form
            return cls(list(items), [None] * len(items))
        ids = [it if isinstance(it, str) else it.id for it in items]
        labels = [None if isinstance(it, str) else it.label for it in items]
        return cls(ids, labels)

    def __len__(self) -> int:
        return len(self.ids)

    def vector(self, value: dict[str, float] | list[float], pointer: str) -> np.ndarray:
        """The vector as an array in item order; unknown, missing or extra entries are errors."""
        n = len(self.ids)
        if isinstance(value, list):
            if len(value) != n:
                raise RequestProblem([FieldError(pointer, f"has {len(value)} values but there are "
                                                 f"{n} items; give one value per item, in the "
                                                 "order of items")])
            return np.asarray(value, dtype=np.float64)
        out = np.empty(n)
        errors = [FieldError(f"{pointer}/{_escape(k)}", f"{k!r} is not an item id listed in items")
                  for k in value if k not in self.position]
        missing = [i for i in self.ids if i not in value]
        if missing:
            shown = ", ".join(repr(m) for m in missing[:5]) + (" ..." if len(missing) > 5 else "")
            errors.append(FieldError(pointer, f"has no value for item(s) {shown}; give one value "
                                     "per item"))
        if errors:
            raise RequestProblem(errors)
        for k, v in value.items():
            out[self.position[k]] = v
        return out

    def matrix(self, value: list[list[float]], pointer: str) -> np.ndarray:
        n = len(self.ids)
        if len(value) != n or any(len(row) != n for row in value):
            raise RequestProblem([FieldError(pointer, f"must be a {n} by {n} matrix (one row and "
                                             "one column per item, in the order of items)")])
        return np.asarray(value, dtype=np.float64)


@dataclass
class Pointers:
    """Where each core argument came from in the request, to point errors at the field."""

    axis: ItemAxis
    places: dict[str, tuple[str, bool, bool]] = field(default_factory=dict)

    def note(self, parameter: str, pointer: str, value: Any = None, *, per_item: bool = True) -> None:
        """Record that core argument ``parameter`` came from ``pointer``. Elements of per-item
        vectors given as objects are pointed at by item id, of lists by position."""
        self.places[parameter] = (pointer, isinstance(value, dict), per_item)

    def _per_item(self, exc: InvalidInput) -> bool:
        place = self.places.get(exc.parameter)
        return place is not None and place[2] and isinstance(exc.index, int)

    def pointer_for(self, exc: InvalidInput) -> str:
        if exc.parameter not in self.places:
            return ""
        pointer, keyed, _ = self.places[exc.parameter]
        if exc.index is None:
            return pointer
        if isinstance(exc.index, tuple):
            return pointer + "".join(f"/{i}" for i in exc.index)
        if keyed and self._per_item(exc):
            return f"{pointer}/{_escape(self.axis.ids[exc.index])}"
        return f"{pointer}/{exc.index}"

    def _rule(self, exc: InvalidInput) -> str:
        if self._per_item(exc):
            assert isinstance(exc.index, int)
            return f"{exc.rule} (item {self.axis.ids[exc.index]!r})"
        return exc.rule

    def translating(self) -> AbstractContextManager[None]:
        """Turn the core's :class:`InvalidInput` into a problem pointing at the request field."""
        return invalid_input_as_problem(self.pointer_for, self._rule)


def _plain_rule(exc: InvalidInput) -> str:
    return exc.rule


@contextmanager
def invalid_input_as_problem(pointer: Callable[[InvalidInput], str],
                             rule: Callable[[InvalidInput], str] = _plain_rule) -> Iterator[None]:
    """Turn the core's :class:`InvalidInput` raised inside into a problem at ``pointer(exc)``
    with detail ``rule(exc)``; one that points nowhere names the core argument instead."""
    try:
        yield
    except InvalidInput as exc:
        where = pointer(exc)
        detail = rule(exc)
        if not where:
            detail = f"{exc.parameter}: {detail}"
        raise RequestProblem([FieldError(where, detail)]) from exc
