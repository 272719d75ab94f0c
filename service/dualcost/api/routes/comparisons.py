"""POST /v1/comparisons: the Konüs index beside the formula indices for one price change."""

# No ``from __future__ import annotations`` here: the request body's annotation carries the
# examples loaded when the router is built, and FastAPI must see it as an object, not a string.

from typing import Annotated

import orjson
from fastapi import APIRouter, Body
from fastapi.responses import Response

from ...config import Settings
from ...core.errors import NumericalFailure
from ..examples import load_examples
from ..observability import computing
from ..problems import PROBLEM_MEDIA_TYPE
from ..routing import JsonRoute, inline_when_small
from ..schemas.comparison import (
    ComparisonRequest,
    ComparisonResponse,
    all_finite,
    comparison_document,
)

PROBLEM_RESPONSES = {
    422: {"description": "The request breaks a rule (RFC 9457 problem details).",
          "content": {PROBLEM_MEDIA_TYPE: {}}},
    400: {"description": "The body is not valid JSON (RFC 9457 problem details).",
          "content": {PROBLEM_MEDIA_TYPE: {}}},
}


def router(settings: Settings) -> APIRouter:
    r = APIRouter(route_class=JsonRoute, prefix="/v1", tags=["comparisons"])
    examples = load_examples(settings.examples_dir, "compare")

    @r.post(
        "/comparisons",
        operation_id="compare",
        summary="Compare two price situations: Konüs index, formula indices, bias, compensation",
        response_model=ComparisonResponse,
        responses=PROBLEM_RESPONSES,  # type: ignore[arg-type]
    )
    @inline_when_small
    def compare(
        request: Annotated[ComparisonRequest, Body(openapi_examples=examples)],  # type: ignore[arg-type]
    ) -> Response:
        """Calibrate the chosen preference model to the base budget, evaluate its expenditure
        function at base and current prices, and set the true (Konüs) cost-of-living index beside
        the formula indices, with each formula's substitution bias, the compensating and
        equivalent variation, the Hicks decomposition of demand changes and each item's
        contribution to the Laspeyres gap."""
        with computing("compare", settings):
            result, model, axis = request.run(max_items=settings.max_items,
                                              max_tree_depth=settings.max_tree_depth,
                                              compute_deadline_seconds=settings.compute_deadline_seconds)
        # Rendered here in one step from plain values: building and validating one response
        # object per item would cost more than the computation for large baskets. The document
        # has the shape of ComparisonResponse (checked by the tests and the schema fuzzing).
        document = comparison_document(result, model, axis)
        if not all_finite(document["model_parameters"]):
            raise NumericalFailure("model parameters", "a calibrated parameter is not a finite "
                                   "number; the inputs are beyond what the model can evaluate")
        # Every other number was checked finite by the core (comparison._check_finite). orjson
        # writes the document three times as fast as pydantic-core for 300 items; each float
        # as its shortest text that reads back to the same number.
        return Response(orjson.dumps(document), media_type="application/json")

    return r
