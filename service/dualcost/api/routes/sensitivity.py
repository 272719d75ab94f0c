"""POST /v1/sensitivity: the Konüs index and every bias under several models and along one
parameter's grid, with the band across the models; POST /v1/fitted-sensitivity: the same band
across families fitted to the same budget data, beside each fit's bootstrap interval."""

from __future__ import annotations

from typing import Annotated, Any, Literal

from fastapi import APIRouter, Request
from fastapi.responses import Response

from ..deps import settings_of
from ..operations import fitted_sensitivity, sensitivity
from ..operations.answers import SCALE_RATIO, scale_headers
from ..provenance import of_body
from ..render import CSV_ANSWER, Format, ProvenanceQuery, csv_response, format_query, json_response, negotiate
from ..routing import JsonRoute
from ..schemas.fitted_sensitivity import FittedSensitivityRequest, FittedSensitivityResponse
from ..schemas.sensitivity import SensitivityRequest, SensitivityResponse

router = APIRouter(route_class=JsonRoute, prefix="/v1", tags=["sensitivity"])

OFFERS: tuple[Format, ...] = ("json", "csv")
RESPONSES: dict[int | str, dict[str, Any]] = {
    200: {"description": "As JSON; or, asked for (Accept: text/csv, or format=csv), a CSV table "
                         "with one row per model and per grid value: " + ",".join(
                             sensitivity.LEADING_COLUMNS) + ", then each formula's value and "
                         "<formula>_bias_points.", **CSV_ANSWER},
}
DESCRIPTION = """\
How far the answer of a comparison depends on the preference model. Every model of `models` is
calibrated to the same base budget and compared at the same current prices and income, as
POST /v1/comparisons would one at a time; the **band** is the least and greatest Konüs index
and bias across them (models outside their regular region at these prices are counted, not
included). The optional **grid** runs one model's parameter over `values`: a number parameter
of its family (`sigma` of CES, `frisch` of Stone-Geary), the `sigma` of one named `group` of a
nested CES tree, or `gamma_scale`, a factor on the price coefficients `gamma` of AIDS and
QUAIDS. Each point equals the comparison requested alone with the parameter set to that value.
"""


@router.post("/sensitivity", operation_id="sensitivity",
             summary="Sensitivity: the Konüs index and bias across models and along a "
                     "parameter grid", description=DESCRIPTION,
             response_model=SensitivityResponse, responses=RESPONSES)
def sweep(body: SensitivityRequest, request: Request,
          format: Annotated[Literal["json", "csv"] | None, format_query(OFFERS)] = None,
          provenance: ProvenanceQuery = "headers") -> Response:
    # A plain def: up to max_sweep_points comparisons run in the compute threads.
    fmt = negotiate(request, OFFERS, format)
    outcome = sensitivity.run(body, settings_of(request))
    if fmt == "csv":
        header, rows = sensitivity.table(outcome)
        return csv_response(header, rows, provenance=of_body(body),
                            trailer=provenance == "trailer", filename="sensitivity.csv",
                            headers=scale_headers(SCALE_RATIO))
    return json_response(sensitivity.document(outcome), provenance=of_body(body))


FITTED_RESPONSES: dict[int | str, dict[str, Any]] = {
    200: {"description": "As JSON; or, asked for (Accept: text/csv, or format=csv), a CSV table: "
                         + ",".join(fitted_sensitivity.COLUMNS) + "; for every measure one row "
                         "per fitted family (kind fit: its estimate and interval) and the "
                         "band's row (kind band).", **CSV_ANSWER},
}
FITTED_DESCRIPTION = """\
How far a fitted comparison depends on the family fitted. Every family of `families` (each as
POST /v1/fits takes its `model`) is fitted to the same budget data and the same price change is
compared under it, as POST /v1/fitted-comparisons would one family at a time (its fit, its
comparison and its bootstrap intervals, without residuals). The **band** is the least and
greatest Konüs index and bias across the fitted families (a fitted model outside its regular
region at these prices is counted, not included); beside each measure of the band, every
family's interval of it. The families are fitted one after another (at most
`max_fitted_families`, with at most `max_bootstrap_draws` draws in all); an error about one
family points at `/families/<j>`.
"""


@router.post("/fitted-sensitivity", operation_id="fittedSensitivity",
             summary="Sensitivity across fitted families: each family fitted to the same data, "
                     "the band across them beside each fit's interval",
             description=FITTED_DESCRIPTION, response_model=FittedSensitivityResponse,
             responses=FITTED_RESPONSES)
def fitted_sweep(body: FittedSensitivityRequest, request: Request,
                 format: Annotated[Literal["json", "csv"] | None, format_query(OFFERS)] = None,
                 provenance: ProvenanceQuery = "headers") -> Response:
    # A plain def: several fits and their bootstraps run in the compute threads.
    fmt = negotiate(request, OFFERS, format)
    outcome = fitted_sensitivity.run(body, settings_of(request))
    if fmt == "csv":
        header, rows = fitted_sensitivity.table(outcome)
        return csv_response(header, rows, provenance=of_body(body),
                            trailer=provenance == "trailer", filename="fitted-sensitivity.csv",
                            headers=scale_headers(SCALE_RATIO))
    return json_response(fitted_sensitivity.document(outcome), provenance=of_body(body))
