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
    ShareUnit,
    StrictModel,
    VectorIn,
)
from .model import ModelSpec

HouseholdFormula = Literal[formulas_for("households")]  # type: ignore[valid-type]


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
                                "(a survey weight); greater than zero.")


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
                          "geometric_laspeyres).")
    lloyd_moulton_sigma: FiniteFloat | None = Field(
        None, description="Elasticity for the Lloyd-Moulton index (default: the model's own).")
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


# -- response models, for the OpenAPI document -------------------------------------------------


class QuantileOut(StrictModel):
    probability: float
    value: float


class IndexSummaryOut(StrictModel):
    index: str = Field(description="A formula, or konus (the Konüs index at base utility).")
    democratic: float = Field(description="sum a_h P_h / sum a_h (Prais 1959).")
    plutocratic: float | None = Field(description="sum a_h m_h P_h / sum a_h m_h (Prais 1959); "
                                      "null without incomes.")
    quantiles: list[QuantileOut]
    share_above_democratic: float
    share_above_plutocratic: float | None
    minimum: float
    maximum: float


class PeriodSummaryOut(StrictModel):
    period: str
    households: int
    weight_total: float
    expenditure_total: float | None
    compensating_variation_total: float | None = Field(description="sum a_h CV_h.")
    cv_percent_of_income: float | None
    indices: list[IndexSummaryOut]


class HouseholdPeriodOut(StrictModel):
    period: str
    indices: dict[str, float]
    konus: float
    konus_current: float
    konus_midpoint: float
    compensating_variation: float | None
    equivalent_variation: float | None
    cv_percent: float = Field(description="100 CV / income.")
    bias_points: dict[str, float]


class HouseholdOut(StrictModel):
    household: str | None
    row: int = Field(description="The household's position in the request (from 0).")
    weight: float
    expenditure: float | None
    periods: list[HouseholdPeriodOut]


class SkippedRowOut(StrictModel):
    row: int
    reason: str
    pointer: str
    detail: str


class SkippedOut(StrictModel):
    count: int
    by_reason: dict[str, int]
    rows: list[SkippedRowOut] = Field(description="The first 100 rows left out.")


class HouseholdIndicesResponse(StrictModel):
    family: str
    items: list[str]
    formulas: list[str]
    periods: list[str]
    households: list[HouseholdOut]
    summary: list[PeriodSummaryOut]
    skipped: SkippedOut
    engine: Literal["local", "cluster"]
    chunks: int
    definitions: str
    sign_convention: str
    notices: list[NoticeOut]
    caution: str
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
    notices: list[NoticeOut]
    links: dict[str, str]
    caution: str
    provenance: ProvenanceOut = Field(description="The digest is of the job's body until its "
                                      "households arrive, then of the body and the households' "
                                      "CSV together.")
