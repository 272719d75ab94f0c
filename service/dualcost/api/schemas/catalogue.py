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
