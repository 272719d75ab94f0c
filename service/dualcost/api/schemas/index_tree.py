"""Request and answer of the index tree (POST /v1/index-tree): the index as a statistical office
builds it, beside the Konüs index of a nested CES model on the same tree. Plain models, no
logic."""

from __future__ import annotations

from typing import Annotated, Literal

from pydantic import Field

from .common import FiniteFloat, NoticeOut, ProvenanceOut, ScaleOut, StrictModel, WholeNumber

Name = Annotated[str, Field(min_length=1, max_length=200)]
Sigma = Annotated[FiniteFloat, Field(ge=0.0, description="Elasticity of substitution between "
                                     "the node's children (a group) or quotes (an elementary "
                                     "aggregate), for the nested CES model.")]
ElementaryFormula = Literal["jevons", "carli", "dutot"]
FORMULA_TEXT = ("The elementary formula of this elementary aggregate (default: the request's "
                "elementary_formula); only on a node without children.")


class NodeIn(StrictModel):
    """A node of the classification, with its children nested: a group, or an elementary
    aggregate (no children) whose quotes name it."""

    name: Name = Field(description="The node's name, unique in the tree (a code and a title "
                                   "will do: '01.1.1 bread and cereals').")
    sigma: Sigma | None = None
    formula: ElementaryFormula | None = Field(None, description=FORMULA_TEXT)
    children: list[NodeIn] | None = Field(None, description="Subgroups and elementary "
                                                            "aggregates; none for an elementary "
                                                            "aggregate.")


class FlatNodeIn(StrictModel):
    """A node of the classification as a row of a table: its parent named."""

    name: Name
    parent: Name | None = Field(None, description="The parent's name; none for the root.")
    sigma: Sigma | None = None
    formula: ElementaryFormula | None = Field(None, description=FORMULA_TEXT)


TreeIn = Annotated[NodeIn | Annotated[list[FlatNodeIn], Field(min_length=1)], Field(
    union_mode="left_to_right",
    description="The classification: a root node with nested children, or a list of nodes "
                "each naming its parent (one root).")]


class QuoteIn(StrictModel):
    """A price quote: one item in one outlet, priced over the periods."""

    id: Name = Field(description="The quote's id, unique.")
    aggregate: Name = Field(description="The elementary aggregate it belongs to (a node "
                                        "without children).")
    item: str | None = Field(None, max_length=300)
    outlet: str | None = Field(None, max_length=300)
    unit: str | None = Field(None, max_length=100, description="The quantity priced (e.g. "
                             "'800 g'); Dutot over quotes in different units gets a notice.")
    prices: list[FiniteFloat | None] = Field(description="One price per period, in the order "
                                                         "of `periods`; null where not priced.")


class LinkIn(StrictModel):
    """A segment of the chain: its price reference period (the link) and its weights."""

    period: Name = Field(description="The price reference period: the month the new weights "
                                     "are linked in (e.g. December, or January).")
    weights: dict[str, FiniteFloat] = Field(description="Weights keyed by node name, in any "
                                            "unit (per mille is usual): every elementary "
                                            "aggregate; a group's, where given, must equal its "
                                            "children's sum.")
    weight_reference: list[Name] | None = Field(None, description="The periods the weights "
                                                "refer to (one, or e.g. the twelve months of a "
                                                "year), at or before the link; for Lowe the "
                                                "weights are price-updated from them to the "
                                                "link. None: the link period itself.")


class IndexTreeRequest(StrictModel):
    periods: list[Name] = Field(min_length=1, description="Period labels in time order.")
    tree: TreeIn
    quotes: list[QuoteIn] = Field(min_length=1)
    links: list[LinkIn] = Field(min_length=1, description="One per segment, in time order; "
                                "the first link is the index reference period.")
    elementary_formula: ElementaryFormula = "jevons"
    upper_formula: Literal["lowe", "young"] = Field(
        "lowe", description="lowe: the weight reference period's basket (shares price-updated "
                            "to the link); young: its shares as they are.")
    sigma_by_level: list[Sigma] | None = Field(None, description="Sigma of each level (the root "
                                               "0) for nodes without their own.")
    sigma_fit: Literal["by_group", "by_level"] | None = Field(
        None, description="Fit each group's sigma (by_group) or each level's (by_level) from "
                          "the links' weights and the children's indices, by least squares on "
                          "the CES share equation; given sigmas then serve as fallbacks.")
    sigma_fallback: FiniteFloat = Field(1.0, ge=0.0, description="With sigma_fit: the sigma of "
                                        "a group that cannot be fitted and has none given (a "
                                        "notice names each).")
    weight_tolerance: FiniteFloat = Field(1e-6, gt=0.0, le=0.1, description="Relative "
                                          "tolerance of a group's weight against its "
                                          "children's sum.")
    normalise_weights: bool = Field(False, description="Scale children's weights that do not "
                                    "add up to their group's (a notice says where).")
    reference_value: Annotated[Literal[1, 100], WholeNumber] = 100


class NodeOut(StrictModel):
    name: str
    path: str
    parent: str | None
    depth: int
    kind: Literal["group", "elementary"]
    formula: str = Field(description="jevons, carli or dutot for an elementary aggregate; the "
                                     "upper formula (lowe or young) for a group.")
    sigma: float | None
    weights: list[float] = Field(description="The node's share of the basket in each segment, "
                                             "as given.")
    weights_used: list[float] = Field(description="As used: price-updated for Lowe.")
    index: list[float] = Field(description="The chained index per period.")
    konus: list[float] | None
    bias_points: list[float] | None
    quotes: int = Field(description="Quotes in an elementary aggregate (0 for a group).")


class SigmaEstimateOut(StrictModel):
    nodes: list[str] = Field(description="The group, or (by_level) every group of the level.")
    level: int | None
    sigma: float | None = Field(description="The fitted sigma; null where not identified.")
    standard_error: float | None = Field(description="Its OLS standard error; null without "
                                         "degrees of freedom.")
    observations: int
    degrees_of_freedom: int
    used: list[float] = Field(description="The sigma the model takes at each of `nodes`.")
    fitted: bool = Field(description="Whether the model uses the fit (else the fallback).")
    reason: str | None


class SigmaDataOut(StrictModel):
    node: str
    children: list[str]
    shares: list[list[float]] = Field(description="Per link: each child's share of the group's "
                                      "weight.")
    price_levels: list[list[float]] = Field(description="Per link: each child's index in the "
                                            "weight reference period, first link = 1.")


class SigmaFitOut(StrictModel):
    method: str
    equation: str
    estimates: list[SigmaEstimateOut]
    data: list[SigmaDataOut]


class LinkOut(StrictModel):
    period: str
    weight_reference: list[str]
    periods: list[str]


class IndexTreeResponse(StrictModel):
    periods: list[str]
    reference_period: str
    reference_value: float
    upper_formula: str
    links: list[LinkOut]
    nodes: list[NodeOut]
    sigma_fit: SigmaFitOut | None = None
    notices: list[NoticeOut]
    scale: ScaleOut
    caution: str
    provenance: ProvenanceOut
