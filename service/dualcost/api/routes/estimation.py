"""POST /v1/fits (JSON), POST /v1/fits/csv (CSV upload) and POST /v1/fitted-comparisons: estimate
preferences from budget data, and the true index from the estimate, with its uncertainty."""

# No ``from __future__ import annotations`` here: the request body's annotation carries the
# examples loaded when the router is built, and FastAPI must see it as an object, not a string.

from typing import Annotated, Any, Literal

from fastapi import APIRouter, Body, Depends, Query, Request
from fastapi.responses import Response

from ...config import Settings
from ..examples import load_examples
from ..observability import computing
from ..operations import compare
from ..problems import PROBLEM_MEDIA_TYPE
from ..routing import JsonRoute
from ..schemas.comparison import CAUTION, ComparisonResponse
from ..schemas.estimation import (
    CSV_DESCRIPTION,
    PARAMETER_COLUMNS,
    FitAndCompareRequest,
    FitAndCompareResponse,
    FitOptions,
    FitRequest,
    FitResponse,
    data_from_csv,
    fit_spec_from_query,
    intervals_out,
    parameter_rows,
    run_fit,
    run_fit_and_compare,
)
from ..tabular import CSV_REQUEST_BODY, csv_body, csv_response, wants_csv

RESPONSES: dict[int | str, dict[str, Any]] = {
    200: {"content": {"text/csv": {}}, "description": "The fit; as CSV (the parameter table) when "
          "asked (Accept: text/csv, or format=csv)."},
    422: {"description": "The request breaks a rule, or the fit does not converge (RFC 9457 "
          "problem details).", "content": {PROBLEM_MEDIA_TYPE: {}}},
    400: {"description": "The body is not valid JSON (RFC 9457 problem details).",
          "content": {PROBLEM_MEDIA_TYPE: {}}},
}

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


def _fit_answer(result: Any, data: Any, request: Request, fmt: str | None, *, residuals: bool,
                given_point: bool) -> Response:
    if wants_csv(request, fmt):
        return csv_response(PARAMETER_COLUMNS, parameter_rows(result, data.axis.ids),
                            filename="fit-parameters.csv")
    answer = FitResponse.from_result(result, data, residuals=residuals, given_point=given_point)
    return Response(answer.model_dump_json(), media_type="application/json")


def router(settings: Settings) -> APIRouter:
    r = APIRouter(route_class=JsonRoute, prefix="/v1", tags=["estimation"])
    fit_examples = load_examples(settings.examples_dir, "fitModel")
    compare_examples = load_examples(settings.examples_dir, "fitAndCompare")

    @r.post(
        "/fits",
        operation_id="fitModel",
        summary="Fit a preference model to budget data: estimates, robust errors, tests, "
                "elasticities, regularity",
        description=DESCRIPTION,
        response_model=FitResponse,
        responses=RESPONSES,  # type: ignore[arg-type]
    )
    def fit_model(
        body: Annotated[FitRequest, Body(openapi_examples=fit_examples)],  # type: ignore[arg-type]
        request: Request,
        format: Annotated[Literal["json", "csv"] | None, Query(
            description="Answer format; default by the Accept header (JSON unless text/csv is "
                        "preferred). CSV gives the parameter table.")] = None,
    ) -> Response:
        with computing("fitModel", settings):
            result, data = body.run(settings)
        return _fit_answer(result, data, request, format, residuals=body.residuals,
                           given_point=body.elasticities_at is not None)

    @r.post(
        "/fits/csv",
        operation_id="fitModelCsv",
        summary="Fit a preference model to budget data uploaded as CSV in long form",
        description=CSV_DESCRIPTION + " Options are query parameters (`tree` as JSON text); "
        "elasticities are at the sample's geometric means.\n\n" + DESCRIPTION,
        response_model=FitResponse,
        responses=RESPONSES,  # type: ignore[arg-type]
        openapi_extra=CSV_REQUEST_BODY,
    )
    def fit_model_csv(
        text: Annotated[str, Depends(csv_body)],
        request: Request,
        family: Annotated[Literal["ces", "nested_ces", "stone_geary", "aids", "quaids"], Query()],
        estimator: Annotated[Literal["nonlinear", "linear_approximate"] | None, Query()] = None,
        restrictions: Annotated[Literal["none", "homogeneity", "symmetry"] | None, Query()] = None,
        quadratic: Annotated[bool, Query()] = False,
        price_terms: Annotated[bool | None, Query()] = None,
        alpha0: Annotated[float | None, Query(allow_inf_nan=False)] = None,
        tree: Annotated[str | None, Query(description="nested_ces: the grouping as JSON.")] = None,
        confidence_level: Annotated[float, Query(gt=0.0, lt=1.0)] = 0.95,
        normalise_shares: Annotated[bool, Query()] = False,
        max_iterations: Annotated[int, Query(ge=1, le=1000)] = 200,
        residuals: Annotated[bool, Query()] = True,
        format: Annotated[Literal["json", "csv"] | None, Query()] = None,
    ) -> Response:
        spec = fit_spec_from_query(family=family, estimator=estimator, restrictions=restrictions,
                                   quadratic=quadratic, price_terms=price_terms, alpha0=alpha0,
                                   tree=tree)
        data = data_from_csv(text, max_rows=settings.max_fit_cells)
        options = FitOptions(confidence_level, None, max_iterations, normalise_shares, residuals)
        with computing("fitModelCsv", settings):
            result, data = run_fit(data, spec, options, settings, csv=True)
        return _fit_answer(result, data, request, format, residuals=residuals, given_point=False)

    @r.post(
        "/fitted-comparisons",
        operation_id="fitAndCompare",
        summary="Fit a preference model to budget data, then compare two price situations under "
                "it, with intervals from the parameter uncertainty",
        description=(
            "One call: the fit of POST /v1/fits, the comparison of POST /v1/comparisons under the "
            "fitted model, and percentile intervals for the Konüs indices, each formula's "
            "substitution bias and the compensating and equivalent variation, by a parametric "
            "bootstrap (Krinsky and Robb 1986): parameters drawn from the estimate's normal "
            "distribution with its robust covariance, seeded (`uncertainty.seed`). Without a "
            "base bundle the base bundle is the fitted model's demand at the base prices and "
            "expenditure.\n\n" + DESCRIPTION),
        response_model=FitAndCompareResponse,
        responses={k: v for k, v in RESPONSES.items() if k != 200},
    )
    def fit_and_compare(
        body: Annotated[FitAndCompareRequest, Body(openapi_examples=compare_examples)],  # type: ignore[arg-type]
    ) -> Response:
        with computing("fitAndCompare", settings):
            result, data, point, (model, axis), intervals = run_fit_and_compare(body, settings)
        answer = FitAndCompareResponse(
            fit=FitResponse.from_result(result, data, residuals=body.residuals,
                                        given_point=body.elasticities_at is not None),
            comparison=ComparisonResponse.model_validate(compare.document(
                compare.Outcome(point, model, axis))),
            intervals=intervals_out(intervals),
            caution=CAUTION,
        )
        return Response(answer.model_dump_json(), media_type="application/json")

    return r
