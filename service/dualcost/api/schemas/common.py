"""Shapes shared by the operations' requests and answers: items, vectors keyed by item id or
aligned with the item list, notices, and the texts every answer carries."""

from __future__ import annotations

from typing import Annotated, Any, Literal

from pydantic import BaseModel, BeforeValidator, ConfigDict, Field
from pydantic_core import PydanticCustomError

#: One rule for every number of every request: a JSON number, never text (``0.6``, not
#: ``"0.6"``) and never ``true``/``false``; strict validation refuses the others, naming the
#: field (see ``problems.rule_of``). Integers are accepted where a number is.
FiniteFloat = Annotated[float, Field(allow_inf_nan=False, strict=True)]
StrictInt = Annotated[int, Field(strict=True)]


def _whole_number(value: Any) -> Any:
    """A JSON integer, not text, a bool or a float (for a choice of numbers, ``Literal[1, 100]``,
    which takes no ``strict``)."""
    if isinstance(value, bool) or not isinstance(value, int):
        raise PydanticCustomError("int_type", "Input should be a valid integer")
    return value


#: Marks a ``Literal`` of integers as taking JSON integers only.
WholeNumber = BeforeValidator(_whole_number)
#: The decimal mark a spreadsheet form reads and writes numbers with (its ``decimal`` option).
DecimalMark = Literal["point", "comma"]

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
