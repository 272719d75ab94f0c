"""Answers of the service's own operations: the probes and the demo."""

from __future__ import annotations

from typing import Any

from pydantic import Field

from .common import ProvenanceOut, StrictModel
from .comparison import ComparisonResponse


class HealthOut(StrictModel):
    status: str
    version: str


class DemoOut(StrictModel):
    scenario: str
    request: dict[str, Any]
    result: ComparisonResponse = Field(description="The answer POST /v1/comparisons gives to "
                                       "`request`, provenance included.")
    provenance: ProvenanceOut
