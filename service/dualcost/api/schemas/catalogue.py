"""Answers of the catalogue (GET /v1/preference-families, GET /v1/index-formulas)."""

from __future__ import annotations

from typing import Any, Literal

from pydantic import Field

from .common import StrictModel


class ParameterOut(StrictModel):
    name: str
    meaning: str
    required: bool
    default: Any = None
    shape: str = Field("number", description="How it is given: number, vector (keyed by item id "
                       "or in item order), matrix (rows in item order), tree, text, item, "
                       "formulas (one per item), path (price vectors), service (set by the "
                       "service), python (from Python only).")


class FamilyOut(StrictModel):
    family: str
    title: str
    source: str
    homothetic: bool
    parameters: list[ParameterOut]


class FormulaInfoOut(StrictModel):
    formula: str
    title: str
    source: str
    compared_with: Literal["base", "current", "midpoint"]
    needs: list[str] = Field(description="Optional inputs the formula cannot do without.")
    superlative: bool
    symmetric: bool = Field(description="Treats the two periods alike (time reversal).")
    weighted: bool = Field(description="False for the unweighted elementary formulas.")
    operations: list[str] = Field(description="Which operations compute it: comparison, series, "
                                  "households.")
