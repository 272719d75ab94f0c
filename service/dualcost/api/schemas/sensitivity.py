"""Request and answer of the sensitivity sweep (POST /v1/sensitivity): plain models, no
logic."""

from __future__ import annotations

from typing import Any

from pydantic import Field

from .common import (
    CAUTION,
    SHARE_UNIT_TEXT,
    FiniteFloat,
    ItemIn,
    NoticeOut,
    ProvenanceOut,
    ScaleOut,
    ShareUnit,
    StrictInt,
    StrictModel,
    ValidityOut,
)
from .comparison import MAX_BAND_MODELS, BaseIn, CurrentIn, FormulaName, FormulaOut, RangeOut
from .model import ModelSpec

MAX_MODELS = MAX_BAND_MODELS


class GridIn(StrictModel):
    """One model's parameter run over values, its other parameters held."""

    model: StrictInt = Field(0, ge=0, description="The position in `models` of the model whose "
                             "parameter is run.")
    parameter: str = Field(min_length=1, max_length=100, description="A number parameter of "
                           "the family (sigma, frisch, ...); for nested_ces, sigma with "
                           "`group`; for aids and quaids, gamma_scale: a factor on gamma.")
    group: str | None = Field(None, max_length=300, description="nested_ces: the name of the "
                              "group whose sigma is run.")
    values: list[FiniteFloat] = Field(min_length=1, description="The values, in the order "
                                      "answered (at most the service's max_sweep_points).")


class SensitivityRequest(StrictModel):
    """A base budget and current prices, compared under each model and along the grid."""

    items: list[ItemIn] = Field(min_length=1, description="The items, in a fixed order.")
    base: BaseIn
    current: CurrentIn
    models: list[ModelSpec] = Field(min_length=1, max_length=MAX_MODELS, description="The "
                                    "models compared side by side (the band runs across them).")
    grid: GridIn | None = None
    formulas: list[FormulaName] | None = Field(  # type: ignore[valid-type]
        None, description="Formulas to compute (default: every formula that the data allow).")
    normalise_shares: bool = Field(False, description="Divide base shares by their sum when it "
                                   "is not 1; the answer says so.")
    share_unit: ShareUnit = Field("fraction", description=SHARE_UNIT_TEXT)


class KonusPointOut(StrictModel):
    base: float | None
    current: float | None
    midpoint: float | None


class PointOut(StrictModel):
    """One comparison of the sweep: a model of the set, or a grid value."""

    family: str
    value: float | None = Field(description="The grid parameter's value (null for a model of "
                                            "the set).")
    validity: ValidityOut
    konus: KonusPointOut = Field(description="Null outside the model's regular region.")
    formulas: list[FormulaOut]
    model_parameters: dict[str, Any]
    notices: list[NoticeOut]


class GridOut(StrictModel):
    model: int
    family: str
    parameter: str
    group: str | None
    points: list[PointOut]
    range: list[RangeOut]


class SensitivityResponse(StrictModel):
    items: list[str]
    scale: ScaleOut
    models: list[PointOut]
    band: list[RangeOut] = Field(description="Across the models of the set.")
    grid: GridOut | None
    notices: list[NoticeOut]
    caution: str
    provenance: ProvenanceOut

__all__ = ["CAUTION", "MAX_MODELS", "RangeOut", "SensitivityRequest", "SensitivityResponse"]
