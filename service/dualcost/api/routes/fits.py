"""POST /v1/fits (JSON), POST /v1/fits/csv (CSV upload) and POST /v1/fitted-comparisons: estimate
preferences from budget data, and the true index from the estimate, with its uncertainty."""

from __future__ import annotations

from typing import Annotated, Any, Literal

from fastapi import APIRouter, Depends, Query, Request
from fastapi.responses import Response
from pydantic import BeforeValidator

from ..deps import settings_of
from ..inputs import observations
from ..inputs.csv import DecimalParam, DeclaredDialect, SeparatorParam
from ..inputs.json_text import in_float_range
from ..inputs.uploads import TABLE_REQUEST_BODY, TableUpload, table_upload
from ..operations import fits, fitted
from ..operations.answers import SCALE_RATIO, scale_headers
from ..provenance import Provenance, UploadSha256, of_body, of_upload, query_of
from ..render import (
    PARQUET_ANSWER,
    Format,
    ProvenanceQuery,
    csv_response,
    format_query,
    json_response,
    negotiate,
    parquet_response,
)
from ..routing import JsonRoute
from ..schemas.common import SHARE_UNIT_TEXT, ShareUnit
from ..schemas.estimation import FitAndCompareRequest, FitAndCompareResponse, FitRequest, FitResponse

router = APIRouter(route_class=JsonRoute, prefix="/v1", tags=["estimation"])

RESPONSES: dict[int | str, dict[str, Any]] = {
    200: {"description": "The fit; its parameter table when asked: CSV (Accept: text/csv, or "
                         "format=csv) or Parquet (Accept: application/vnd.apache.parquet, or "
                         "format=parquet).", **PARQUET_ANSWER},
    422: {"description": "The request breaks a rule, or the fit does not converge (RFC 9457 "
                         "problem details)."},
}
FITTED_RESPONSES: dict[int | str, dict[str, Any]] = {
    200: {"description": "The fitted comparison; as a table when asked: CSV (Accept: text/csv, "
                         "or format=csv) or Parquet (Accept: application/vnd.apache.parquet, or "
                         "format=parquet), a row per measure of the comparison (as POST "
                         "/v1/comparisons gives it as CSV) with the interval of its value or of "
                         "its bias, then the intervals' confidence level, draws and seed. The "
                         "fit's parameters as a table: POST /v1/fits.", **PARQUET_ANSWER},
    422: RESPONSES[422],
}
OFFERS: tuple[Format, ...] = ("json", "csv", "parquet")
FormatParam = Annotated[Literal["json", "csv", "parquet"] | None, format_query(OFFERS)]

DESCRIPTION = """\
Fits a preference family to budget data of T observations (households, periods, or households in
periods) by least squares on its share equations. The last item's equation is dropped (adding-up)
and the others are fitted jointly, iterating the weighting by their residual covariance to
convergence (Zellner 1962; Barten 1969), so the estimate does not depend on which item is last.

- `ces`, `nested_ces`: nonlinear least squares on the share equations themselves (not the
  log-ratio form; zero shares are allowed); a nested CES gets one sigma per group, all jointly.
- `stone_geary`: the linear expenditure system (Stone 1954), nonlinear least squares.
- `aids`: `nonlinear` (iterated nonlinear least squares, scipy's least_squares) or
  `linear_approximate` (Stone's price index); `quaids` (or `quadratic: true`) adds the squared
  log-income term (Banks, Blundell and Lewbel 1997). Restrictions `none`, `homogeneity` or
  `symmetry` (default) are imposed on request, and homogeneity and symmetry are always tested
  (Wald statistics from the unrestricted fit, chi-squared p-values).

Standard errors: HC1 heteroskedasticity-robust, clustered by observation across the equations
(one equation: plain HC1); t intervals with T - K/m degrees of freedom. Elasticities (expenditure,
Marshallian, Hicksian) at the sample's geometric means or a given point, with delta-method
standard errors. Regularity: where over the sample the fitted model has shares outside [0, 1] or a
Slutsky matrix that is not negative semidefinite. `model` in the answer is the fitted model as POST
/v1/comparisons takes it.
"""


def _answer(outcome: fits.Outcome, fmt: str, provenance: Provenance, place: str) -> Response:
    if fmt == "parquet":
        return parquet_response(fits.PARAMETER_COLUMNS, fits.parameter_rows(outcome),
                                provenance=provenance, filename="fit-parameters.parquet")
    if fmt == "csv":
        dialect = outcome.data.dialect
        return csv_response(fits.PARAMETER_COLUMNS, fits.parameter_rows(outcome),
                            provenance=provenance, trailer=place == "trailer",
                            filename="fit-parameters.csv",
                            headers=None if dialect is None else dialect.headers())
    return json_response(fits.document(outcome), provenance=provenance)


@router.post("/fits", operation_id="fitModel", response_model=FitResponse, responses=RESPONSES,
             summary="Fit a preference model to budget data: estimates, robust errors, tests, "
                     "elasticities, regularity", description=DESCRIPTION)
def fit_model(body: FitRequest, request: Request, format: FormatParam = None,
              provenance: ProvenanceQuery = "headers") -> Response:
    fmt = negotiate(request, OFFERS, format)
    loc = fits.locator()
    data = observations.from_json(body, loc)
    outcome = fits.run(data, body.model, fits.options_of(body, data.axis, loc),
                       settings_of(request), loc)
    return _answer(outcome, fmt, of_body(body), provenance)


@router.post("/fits/csv", operation_id="fitModelCsv", response_model=FitResponse,
             responses=RESPONSES, openapi_extra=TABLE_REQUEST_BODY,
             summary="Fit a preference model to budget data uploaded as CSV (or Parquet) in "
                     "long form",
             description=observations.CSV_DESCRIPTION + " " + observations.PARQUET_DESCRIPTION
             + " Options are query parameters (`tree` "
             "as JSON text); elasticities are at the sample's geometric means.\n\n" + DESCRIPTION)
def fit_model_csv(
    upload: Annotated[TableUpload, Depends(table_upload)],
    csv_sha256: UploadSha256,
    request: Request,
    family: Annotated[Literal["ces", "nested_ces", "stone_geary", "aids", "quaids"], Query()],
    estimator: Annotated[Literal["nonlinear", "linear_approximate"] | None, Query()] = None,
    restrictions: Annotated[Literal["none", "homogeneity", "symmetry"] | None, Query()] = None,
    quadratic: Annotated[bool, Query()] = False,
    price_terms: Annotated[bool | None, Query()] = None,
    alpha0: Annotated[float | None, BeforeValidator(in_float_range),
                      Query(allow_inf_nan=False)] = None,
    tree: Annotated[str | None, Query(description="nested_ces: the grouping as JSON.")] = None,
    confidence_level: Annotated[float, BeforeValidator(in_float_range),
                                Query(gt=0.0, lt=1.0)] = 0.95,
    normalise_shares: Annotated[bool, Query()] = False,
    share_unit: Annotated[ShareUnit, Query(description=SHARE_UNIT_TEXT + " It applies to the "
                                           "share column.")] = "fraction",
    max_iterations: Annotated[int, Query(ge=1, le=1000)] = 200,
    residuals: Annotated[bool, Query()] = True,
    separator: SeparatorParam = None,
    decimal: DecimalParam = None,
    format: FormatParam = None,
    provenance: ProvenanceQuery = "headers",
) -> Response:
    names = set(locals())
    fmt = negotiate(request, OFFERS, format)
    settings = settings_of(request)
    loc = fits.locator("csv")
    spec = fits.model_from_query(dict(family=family, estimator=estimator,
                                      restrictions=restrictions, quadratic=quadratic,
                                      price_terms=price_terms, alpha0=alpha0, tree=tree), loc)
    declared = upload.dialect(DeclaredDialect(separator, decimal))
    data = (observations.from_parquet(upload.data, loc, max_rows=settings.max_fit_cells)
            if upload.data is not None else
            observations.from_csv(upload.text or "", loc, max_rows=settings.max_fit_cells,
                                  declared=declared))
    options = fits.Options(confidence_level, max_iterations, normalise_shares, residuals,
                           share_unit=share_unit)
    outcome = fits.run(data, spec, options, settings, loc, "fitModelCsv")
    origin = of_upload(csv_sha256, query_of(request.query_params.multi_items(), names))
    return _answer(outcome, fmt, origin, provenance)


@router.post("/fitted-comparisons", operation_id="fitAndCompare",
             response_model=FitAndCompareResponse, responses=FITTED_RESPONSES,
             summary="Fit a preference model to budget data, then compare two price situations "
                     "under it, with intervals from the parameter uncertainty",
             description=(
                 "One call: the fit of POST /v1/fits, the comparison of POST /v1/comparisons "
                 "under the fitted model, and percentile intervals for the Konüs indices, each "
                 "formula's substitution bias and the compensating and equivalent variation, by "
                 "a parametric bootstrap (Krinsky and Robb 1986): parameters drawn from the "
                 "estimate's normal distribution with its robust covariance, seeded "
                 "(`uncertainty.seed`). Without a base bundle the base bundle is the fitted "
                 "model's demand at the base prices and expenditure.\n\n" + DESCRIPTION))
def fit_and_compare(body: FitAndCompareRequest, request: Request, format: FormatParam = None,
                    provenance: ProvenanceQuery = "headers") -> Response:
    fmt = negotiate(request, OFFERS, format)
    outcome = fitted.run(body, settings_of(request))
    origin = of_body(body)
    if fmt == "json":
        return json_response(fitted.document(outcome), provenance=origin)
    header, rows = fitted.table(outcome)
    if fmt == "parquet":
        return parquet_response(header, rows, provenance=origin,
                                filename="fitted-comparison.parquet",
                                headers=scale_headers(SCALE_RATIO))
    return csv_response(header, rows, provenance=origin, trailer=provenance == "trailer",
                        filename="fitted-comparison.csv", headers=scale_headers(SCALE_RATIO))
