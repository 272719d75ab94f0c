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
#: The unit expenditure shares are given in: fractions of 1, percent, per mille.
ShareUnit = Literal["fraction", "percent", "per_mille"]
SHARE_UNIT_TEXT = (
    "The unit of the request's expenditure shares: fraction (a budget sums to 1, the default), "
    "percent (100) or per_mille (1000). Shares in percent or per mille are divided by 100 or "
    "1000 before every check, and the answer's notices say so (code shares_converted); "
    "normalise_shares then applies to the converted shares.")

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


class ProvenanceOut(StrictModel):
    """Where an answer came from: the service, its version, and a digest of the canonical input
    the answer was computed from (see the service documentation, "Provenance")."""

    service: Literal["dualcost"]
    version: str = Field(description="The version of the service that computed the answer.")
    input_digest: str = Field(
        pattern=r"^sha256:[0-9a-f]{64}$",
        description="'sha256:' and the SHA-256, in lowercase hexadecimal, of the canonical "
                    "input: for a JSON body, the body as given in the JSON Canonicalization "
                    "Scheme (RFC 8785), so that member order, whitespace and the spelling of "
                    "numbers do not change it. The same in the Dualcost-Input-Digest header.")


class ItemRefOut(StrictModel):
    """An item named by its id and label."""

    id: str
    label: str | None


class NoticeOut(StrictModel):
    """A remark that goes with an answer: a warning, or a statement of what was done (every
    default the service fills in and every formula it leaves out has one)."""

    code: str = Field(description="A stable word for machines, e.g. formula_not_computed, "
                                  "current_income_assumed, shares_outside_unit_interval.")
    message: str = Field(description="One plain sentence; it names the items concerned too.")
    items: list[ItemRefOut] = Field(default_factory=list,
                                    description="The items the notice is about, by id and label.")


class ScaleOut(StrictModel):
    """The scale of the answer's figures (the same words in every answer that has them)."""

    indices: str = Field(description="How the indices are written: 'ratio, 1 = no change' "
                                     "(comparisons, households), or 'levels, <reference "
                                     "period> = <reference value>' (series).")
    bias: str = Field(description="How a bias is written: 'index points on base 100', that is "
                                  "100 (index - Konüs index), in every answer.")
    links: str | None = Field(None, description="Series only: period-to-period links, "
                                                "'ratio, 1 = no change'.")


class ValidityOut(StrictModel):
    """Whether the model stands behind its figures at the prices and incomes used."""

    state: Literal["regular", "outside_regular_region"] = Field(
        description="outside_regular_region: a share outside [0, 1], a negative demand, a "
                    "Slutsky matrix that is not negative semidefinite or not symmetric, demands "
                    "that do not add up or cannot be integrated, or a Konüs index above "
                    "Laspeyres. The model's figures are then null in the answer.")
    regular: bool
    reasons: list[NoticeOut] = Field(description="Each condition that fails, with its items.")
    items: list[ItemRefOut] = Field(description="Every item a reason names.")
    usable: str = Field(description="Which figures stay usable whatever the model does.")
    withheld: str | None = Field(description="Which figures are withheld, when not regular.")
    figures_not_results: dict[str, Any] | None = Field(
        description="Outside the regular region only: the model's figures as computed, for "
                    "diagnosing the model. They are not cost-of-living results; do not publish "
                    "or index by them.")


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
