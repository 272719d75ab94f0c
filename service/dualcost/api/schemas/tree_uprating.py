"""Request and answer of POST /v1/uprating/index-tree: an index-tree request (how the index is
built) with uprating clauses (how an amount is uprated from it); plain models, no logic."""

from __future__ import annotations

from pydantic import Field

from .common import FiniteFloat, NoticeOut, ProvenanceOut, ScaleOut, StrictModel
from .index_tree import IndexTreeRequest, Name, SigmaFitOut
from .uprating import ClauseIn, ClauseOut


class TreeUpratingRequest(IndexTreeRequest):
    """An index-tree request, the node whose series the clauses read, and the clauses."""

    node: Name | None = Field(None, description="The node whose published series the clauses "
                              "read (default: the root, the all-items index).")
    clauses: list[ClauseIn] = Field(min_length=1, max_length=20)
    amount: FiniteFloat | None = Field(None, gt=0, le=1e15, description="An amount paid each "
                                       "period from the first link before any uprating (a "
                                       "monthly pension).")


class TreeUpratingResponse(StrictModel):
    caution: str
    node: str
    path: str
    periods: list[str] = Field(description="The tree's periods from the first link on.")
    frequency: str | None
    upper_formula: str
    indices: list[str] = Field(description="The published index (named by its upper formula) "
                               "and konus, the nested CES model's index at the node.")
    amount: float | None
    clauses: list[ClauseOut]
    sigma_fit: SigmaFitOut | None = None
    notices: list[NoticeOut]
    scale: ScaleOut
    provenance: ProvenanceOut


__all__ = ["TreeUpratingRequest", "TreeUpratingResponse"]
