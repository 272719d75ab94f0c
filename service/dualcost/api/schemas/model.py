"""The preference model of a request: a family name and that family's parameters, flat."""

from __future__ import annotations

from typing import Any

from pydantic import BaseModel, ConfigDict, Field


class ModelSpec(BaseModel):
    """A preference family and its behavioural parameters (see GET /v1/preference-families).

    ``{"family": "ces", "sigma": 0.7}``; vectors keyed by item id or aligned with ``items``;
    matrices as rows in item order; a nested CES tree as groups whose children are item ids or
    further groups (see :mod:`dualcost.api.inputs.model`).
    """

    model_config = ConfigDict(extra="allow", allow_inf_nan=False, json_schema_extra={
        "examples": [{"family": "ces", "sigma": 0.7}],
    })

    family: str = Field(description="The preference family; see GET /v1/preference-families.")

    def parameters(self) -> dict[str, Any]:
        return dict(self.model_extra or {})
