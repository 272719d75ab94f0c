"""Answers of the saved runs: one run, a page of runs, and a re-run's differences."""

from __future__ import annotations

from typing import Any, Literal

from pydantic import Field

from .common import ProvenanceOut, StrictModel


class RunLinks(StrictModel):
    self: str
    rerun: str


class RunSummaryOut(StrictModel):
    id: str
    operation: str = Field(description="The operationId of the operation that ran.")
    created: str = Field(description="When the run was saved (UTC, ISO 8601).")
    version: str = Field(description="The version of the service that computed the answer.")
    input_digest: str = Field(description="The digest of the run's canonical input.")
    key: str | None = Field(description="The first 8 hex digits of the SHA-256 of the API key "
                                        "that asked (null with access control off); the key "
                                        "itself is never stored.")
    links: RunLinks


class RunRequestOut(StrictModel):
    method: str
    path: str
    query: str = Field(description="The query as sent, less save.")
    content_type: str | None


class RunOut(RunSummaryOut):
    input: Any = Field(description="The canonical input (see Provenance in the documentation).")
    request: RunRequestOut
    status: int = Field(description="The HTTP status of the saved answer.")
    answer_type: str = Field(description="The media type of the saved answer.")
    answer_encoding: Literal["json", "text", "base64"] = Field(
        description="How `answer` holds the saved answer: JSON as JSON, text (CSV, plain text) "
                    "as its text, anything else (a Parquet file) as base64 (RFC 4648).")
    answer: Any = Field(description="The saved answer, written as answer_encoding says.")
    provenance: ProvenanceOut


class RunPageOut(StrictModel):
    runs: list[RunSummaryOut] = Field(description="Newest first.")
    next: str | None = Field(description="The next (older) page, if there may be one.")


class DifferenceOut(StrictModel):
    where: str = Field(description="A JSON Pointer into the answer, or a CSV cell "
                                   "(#cell=row,column, RFC 7111).")
    saved: Any
    current: Any
    difference: float | None = Field(description="current - saved, for two numbers.")
    relative: float | None = Field(description="difference / |saved|, for two numbers.")


class RerunSideOut(StrictModel):
    version: str
    status: int
    created: str | None = None
    problem: Any = None


class RerunOut(StrictModel):
    run: str
    operation: str
    input_digest: str
    saved: RerunSideOut
    current: RerunSideOut
    identical: bool = Field(description="Every figure of the new answer equals the saved one.")
    figures_compared: int
    figures_differing: int
    largest_difference: float | None
    differences: list[DifferenceOut]
    differences_listed_at_most: int
    provenance: ProvenanceOut
