"""Requests and answers of POST /v1/uprating: an index-series request with uprating clauses and
an optional amount; plain models, no logic."""

from __future__ import annotations

from typing import Literal

from pydantic import Field

from .common import FiniteFloat, NoticeOut, ProvenanceOut, ScaleOut, StrictInt, StrictModel
from .series import PeriodLabel, SeriesFormula, SeriesRequest  # noqa: F401 (the plugin reads SeriesFormula)

MEASURE_TEXT = (
    "twelve_month: the 12-month change in the period of the year period_of_year (the same period "
    "a year earlier, for any frequency); annual_average: a calendar year's average over the "
    "previous year's, read at the year's last period; cumulative: the change since `since` up to "
    "the first measure period, then since each uprating's measure period.")


class RoundingIn(StrictModel):
    decimals: StrictInt = Field(ge=0, le=10, description="Round the percentage change to this "
                                "many decimal places (1: 2.35 -> 2.4 half up).")
    method: Literal["half_up", "half_even", "down", "up"] = Field(
        description="half_up: ties away from zero; half_even: ties to the even digit; down: "
                    "towards zero (truncate); up: away from zero.")


class ClauseIn(StrictModel):
    """An uprating clause as data."""

    name: str | None = Field(None, max_length=200, description="A name for the clause.")
    measure: Literal["twelve_month", "annual_average", "cumulative"] = Field(
        description=MEASURE_TEXT)
    period_of_year: StrictInt | None = Field(
        None, ge=1, le=12, description="The month (1-12) or quarter (1-4) the change is read in "
                                       "(twelve_month and cumulative; 1 or left out for annual "
                                       "data).")
    since: PeriodLabel | None = Field(None, description="cumulative: the period it counts from.")
    lag: StrictInt = Field(ge=0, le=1200, description="Periods from the measure period to the "
                           "first payment at the new amount (September read, paid from April: "
                           "7).")
    rounding: RoundingIn | None = Field(None, description="Rounding of the percentage change "
                                        "(none when left out).")
    floor: FiniteFloat | None = Field(None, description="Lowest change applied, in percent "
                                      "(0: the amount never falls), after rounding.")
    cap: FiniteFloat | None = Field(None, description="Highest change applied, in percent, "
                                    "after rounding.")


class UpratingRequest(SeriesRequest):
    """An index-series request, and the clauses to run under each of its indices."""

    clauses: list[ClauseIn] = Field(min_length=1, max_length=20)
    amount: FiniteFloat | None = Field(None, gt=0, le=1e15, description="An amount paid each period of "
                                       "the series before any uprating (a monthly pension).")
    series_kind: Literal["fixed_base", "chained"] | None = Field(
        None, description="Which series the clauses read (default fixed_base, with a notice).")
    konus_standard: Literal["base", "current", "midpoint"] | None = Field(
        None, description="The Konüs index's living standard (default base, with a notice).")


# -- response ------------------------------------------------------------------------------------


class UnderIndexOut(StrictModel):
    index: str = Field(description="A formula, or konus.")
    change_percent: float | None = Field(description="The measured change, before rounding.")
    applied_percent: float | None = Field(description="Rounded, then held between floor and "
                                          "cap.")
    factor: float | None = Field(description="1 + applied_percent / 100; null where the index "
                                 "has no level (the model outside its regular region).")


class UpratingOut(StrictModel):
    measured_in: str
    measured_from: str
    paid_from: str
    paid_within_series: bool
    by_index: list[UnderIndexOut]


class NotComputedOut(StrictModel):
    measured_in: str
    reason: str


class YearPaidOut(StrictModel):
    year: int
    paid: float | None


class MoneyOut(StrictModel):
    index: str
    paid: list[float | None] = Field(description="The amount paid in each period.")
    total: float | None
    by_year: list[YearPaidOut]
    cumulative_difference_vs_konus: list[float | None] | None = Field(
        description="Running total of (paid under this index - paid under the Konüs index).")
    difference_vs_konus_total: float | None


class ClauseOut(StrictModel):
    clause: ClauseIn
    definition: str
    upratings: list[UpratingOut]
    not_computed: list[NotComputedOut]
    money: list[MoneyOut] | None


class UpratingResponse(StrictModel):
    caution: str
    periods: list[str]
    frequency: str | None
    series_kind: str
    konus_standard: str
    indices: list[str]
    amount: float | None
    clauses: list[ClauseOut]
    notices: list[NoticeOut]
    scale: ScaleOut
    provenance: ProvenanceOut


__all__ = ["ClauseIn", "RoundingIn", "UpratingRequest", "UpratingResponse"]
