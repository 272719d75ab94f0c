"""Requests and answers of the household operations (POST /v1/household-indices and the household
jobs): plain models, no logic."""

from __future__ import annotations

from typing import Literal

from pydantic import Field, model_validator

from ...core.households import DEFAULT_QUANTILES
from ...core.indices import formulas_for
from .common import (
    SHARE_UNIT_TEXT,
    FiniteFloat,
    ItemIn,
    NoticeOut,
    ProvenanceOut,
    ScaleOut,
    ShareUnit,
    StrictModel,
    VectorIn,
)
from .model import ModelSpec

HouseholdFormula = Literal[formulas_for("households")]  # type: ignore[valid-type]
HOUSEHOLD_DETAIL_TEXT = (
    "How much the answer holds: full (default), or headline: the summaries (aggregates, "
    "quantiles, shares above them), skipped rows, notices and caution as in full, without the "
    "rows per household: households is null. As CSV, a headline answer is the summary table, "
    "one row per period and index (the header Dualcost-Left-Out names what was left out). The "
    "answer's detail and left_out say so; the figures are the same either way.")


class PeriodPricesIn(StrictModel):
    """The prices of one period of a series, compared with the base prices."""

    period: str = Field(min_length=1, max_length=100, description="A label for the period.")
    prices: VectorIn


class HouseholdIn(StrictModel):
    """One household, or one group of households (a decile, a region)."""

    id: str | None = Field(None, max_length=200, description="An id for the answer.")
    shares: VectorIn = Field(description="Base expenditure shares, summing to 1.")
    expenditure: FiniteFloat | None = Field(
        None, description="Income (total base expenditure); required for non-homothetic "
                          "families, and for compensation in money and plutocratic aggregates.")
    weight: FiniteFloat = Field(1.0, description="How many households this row stands for "
                                "(a survey weight); greater than zero. Default 1, stated in a "
                                "notice (weights_assumed).")


class HouseholdJobSpec(StrictModel):
    """What is common to all households: items, prices, model and what to compute."""

    items: list[ItemIn] = Field(min_length=1, description="The items, in a fixed order.")
    base_prices: VectorIn
    current_prices: VectorIn | None = Field(
        None, description="The current prices: one price change. Give this or periods.")
    periods: list[PeriodPricesIn] | None = Field(
        None, min_length=1, description="A series of price vectors, each compared with the base "
                                        "prices. Give this or current_prices.")
    model: ModelSpec
    formulas: list[HouseholdFormula] | None = Field(  # type: ignore[valid-type]
        None, description="Formulas to compute (default: laspeyres, paasche, fisher, tornqvist, "
                          "geometric_laspeyres, stated in a notice; a default formula that a "
                          "household's data do not allow is null for it, with a notice). A "
                          "formula named here that a household's data do not allow refuses "
                          "that household, pointing at /formulas/<i>.")
    lloyd_moulton_sigma: FiniteFloat | None = Field(
        None, description="Elasticity for the Lloyd-Moulton index (default: the model's own, "
                          "stated in a notice).")
    quantiles: list[FiniteFloat] = Field(
        list(DEFAULT_QUANTILES), max_length=101,
        description="Probabilities of the weighted quantiles in the summaries.")
    normalise_shares: bool = Field(
        False, description="Divide shares that do not sum to 1 by their sum (counted in notices) "
                           "instead of refusing the row.")
    share_unit: ShareUnit = Field(
        "fraction", description=SHARE_UNIT_TEXT + " It applies to every household's shares, in "
        "JSON and in a job's CSV upload.")
    bad_rows: Literal["reject", "skip"] | None = Field(
        None, description="reject: any bad household row fails the request, naming every row "
                          "(up to 20); skip: bad rows are left out, counted and listed with the "
                          "reason. Default: reject for householdIndices, skip for jobs.")
    engine: Literal["auto", "local", "cluster"] = Field(
        "auto", description="Where to compute: local (this process), cluster (the Dask "
                            "scheduler configured as DUALCOST_DASK_SCHEDULER), or auto: the "
                            "cluster for jobs of at least DUALCOST_DASK_MIN_HOUSEHOLDS rows when "
                            "one is configured.")

    @model_validator(mode="after")
    def _one_price_change(self) -> HouseholdJobSpec:
        if (self.current_prices is None) == (self.periods is None):
            raise ValueError("give current_prices (one price change) or periods (a series), "
                             "exactly one")
        return self


class HouseholdIndicesRequest(HouseholdJobSpec):
    """The job and its households."""

    households: list[HouseholdIn] = Field(min_length=1, description="One entry per household.")
    band_models: list[ModelSpec] | None = Field(
        None, min_length=1, max_length=12, description="Also evaluate every household under "
        "each of these models (same prices, shares and incomes): each household-period's band, "
        "the least and greatest K(u0) across them. Households have one bundle each, so the "
        "model-free bracket of two observed bundles does not apply; the band is what is "
        "carried. Households times (1 + models) at most max_households.")
    detail: Literal["full", "headline"] = Field("full", description=HOUSEHOLD_DETAIL_TEXT)


# -- response models, for the OpenAPI document -------------------------------------------------


class QuantileOut(StrictModel):
    probability: float
    value: float


class IndexSummaryOut(StrictModel):
    index: str = Field(description="A formula, or konus (the Konüs index at base utility).")
    households: int = Field(description="How many households it is over: the period's regular "
                                        "ones, less any for which a default formula was left "
                                        "out.")
    democratic: float = Field(description="sum a_h P_h / sum a_h (Prais 1959).")
    plutocratic: float | None = Field(description="sum a_h m_h P_h / sum a_h m_h (Prais 1959); "
                                      "null without incomes.")
    quantiles: list[QuantileOut]
    share_above_democratic: float
    share_above_plutocratic: float | None
    minimum: float
    maximum: float


class PeriodSummaryOut(StrictModel):
    """A period's aggregates, over the households whose model is regular in that period."""

    period: str
    households: int = Field(description="Households the aggregates are over.")
    households_outside_regular_region: int = Field(
        description="Households left out of every aggregate of this period: the model is "
                    "outside its regular region for them there (see their model_regular).")
    weight_total: float
    expenditure_total: float | None
    compensating_variation_total: float | None = Field(description="sum a_h CV_h.")
    cv_percent_of_income: float | None
    indices: list[IndexSummaryOut]


class HouseholdPeriodOut(StrictModel):
    period: str
    model_regular: bool = Field(
        description="False where the model is outside its regular region at this period's "
                    "prices and the household's income (a share outside [0, 1], a negative "
                    "demand, a Slutsky matrix that is not negative semidefinite or not "
                    "symmetric, ...): the Konüs indices, CV, EV, cv_percent and biases are then "
                    "null, not results. The formula indices stay.")
    irregular_reasons: list[str] = Field(description="The reason codes where model_regular is "
                                                     "false (e.g. negative_demand).")
    irregular_items: list[str] = Field(description="The ids of the items the reasons name.")
    indices: dict[str, float | None] = Field(
        description="Each formula as a ratio (1 = no change); null where a default formula "
                    "cannot be computed for this household (a notice says why).")
    konus: float | None
    konus_current: float | None
    konus_midpoint: float | None
    compensating_variation: float | None
    equivalent_variation: float | None
    cv_percent: float | None = Field(description="100 CV / income.")
    bias_points: dict[str, float | None] = Field(
        description="100 (formula - the Konüs index it targets): index points on base 100.")
    band: HouseholdBandOut | None = Field(None, description="On request (band_models).")


class HouseholdBandOut(StrictModel):
    """On request (band_models): K(u0) of this household-period across those models."""

    konus_low: float | None = Field(description="The least K(u0) among the band's models.")
    konus_high: float | None = Field(description="The greatest.")
    models: int = Field(description="The band's models whose K(u0) is a result here (a model "
                        "outside its regular region, or that refused the household, is left "
                        "out).")
    konus_inside: bool | None = Field(description="Whether this model's K(u0) lies in "
                                      "[konus_low, konus_high] (relative 1e-9); null when either "
                                      "is not a result.")


class HouseholdOut(StrictModel):
    household: str | None
    row: int = Field(description="The household's place in the request's households, from 1 "
                                 "(its JSON pointer counts from 0: row 1 is /households/0).")
    weight: float
    expenditure: float | None
    periods: list[HouseholdPeriodOut]


class SkippedRowOut(StrictModel):
    row: int = Field(description="From 1: the household's place in the request's list, or in a "
                                 "CSV upload the record after the header.")
    record: int | None = Field(description="CSV uploads: the line the household's record "
                                           "starts on (the header is line 1); null for JSON.")
    reason: str
    pointer: str = Field(description="A JSON pointer (counting from 0, RFC 6901) or, in a CSV "
                                     "upload, an RFC 7111 fragment (#cell=<row + 1>,<column>).")
    detail: str


class SkippedOut(StrictModel):
    count: int
    by_reason: dict[str, int]
    rows: list[SkippedRowOut] = Field(description="The first 100 rows left out.")


class HouseholdIndicesResponse(StrictModel):
    family: str
    items: list[str]
    scale: ScaleOut
    formulas: list[str]
    periods: list[str]
    households: list[HouseholdOut] | None = Field(description="One entry per household (null "
                                                  "in a headline answer).")
    summary: list[PeriodSummaryOut]
    skipped: SkippedOut
    engine: Literal["local", "cluster"]
    chunks: int
    definitions: str
    sign_convention: str
    notices: list[NoticeOut]
    caution: str
    detail: Literal["full", "headline"] = Field(description="full, or headline as asked.")
    left_out: list[str] = Field(description="What a headline answer left out (households); "
                                "empty in full.")
    provenance: ProvenanceOut


class JobProgressOut(StrictModel):
    rows_read: int
    rows_total: int | None = Field(description="Lines after the header in the upload (an upper "
                                   "bound if cells hold line breaks).")
    households_done: int
    rows_skipped: int
    chunks_done: int
    fraction: float | None


class HouseholdJobOut(StrictModel):
    id: str
    status: Literal["waiting_for_households", "running", "done", "failed", "cancelled"]
    created: str
    family: str
    periods: list[str]
    engine: Literal["local", "cluster"] | None
    bad_rows: Literal["reject", "skip"]
    progress: JobProgressOut
    skipped: SkippedOut
    summary: list[PeriodSummaryOut] | None
    unused_columns: list[str]
    error: str | None
    scale: ScaleOut
    notices: list[NoticeOut]
    links: dict[str, str]
    caution: str
    provenance: ProvenanceOut = Field(description="The digest is of the job's body until its "
                                      "households arrive, then of the body and the households' "
                                      "CSV together.")
