"""Request and answer of the model-free reading of a panel (POST /v1/revealed-preference):
plain models, no logic."""

from __future__ import annotations

from typing import Literal

from pydantic import Field, model_validator

from .common import (
    CAUTION,
    ItemIn,
    NoticeOut,
    ProvenanceOut,
    ScaleOut,
    StrictModel,
    VectorIn,
)
from .series import PeriodLabel

BOUNDS_METHOD = (
    "Varian (1982, 1983): the upper bound of e(p, u_r) is the least cost at p of the observed "
    "bundles revealed preferred to period r's; the lower bound the least cost at p of a bundle "
    "outside the set revealed worse than it, a linear programme (scipy HiGHS). The tighter "
    "bounds of Blundell, Browning and Crawford (2003, 2008) are not computed."
)


class RevealedRequest(StrictModel):
    """A panel of prices with the quantities (or expenditures) bought, one row per period; every
    item priced in every period (0 where nothing of it was bought)."""

    periods: list[PeriodLabel] = Field(min_length=2, description="The periods, in time order.")
    items: list[ItemIn] = Field(min_length=1, description="The items.")
    prices: list[VectorIn] = Field(description="One row per period: an object keyed by item "
                                   "id, or a list in the order of `items`.")
    quantities: list[VectorIn] | None = Field(None, description="One row per period, as "
                                              "prices.")
    expenditures: list[VectorIn] | None = Field(
        None, description="As quantities, in money; quantity = expenditure / price.")
    base_period: PeriodLabel | None = Field(
        None, description="The period every other is compared with (default: the first).")
    utility_period: PeriodLabel | None = Field(
        None, description="The period whose living standard the Konüs index holds fixed "
                          "(default: the base period).")

    @model_validator(mode="after")
    def _one_bundle(self) -> RevealedRequest:
        if (self.quantities is None) == (self.expenditures is None):
            raise ValueError("give the quantities or the expenditures (exactly one)")
        return self


class ViolationOut(StrictModel):
    axiom: Literal["GARP", "WARP", "SARP"]
    first: str = Field(description="A period revealed preferred to `second`...")
    second: str = Field(description="...which is revealed preferred back (strictly and "
                                    "directly for GARP).")
    periods: list[str] = Field(description="A cycle of periods revealing it, from `first` back "
                                           "to `first`, each step a direct revealed preference "
                                           "(p_t . x_t >= p_t . x_s).")


class ConsistencyOut(StrictModel):
    garp: bool = Field(description="The generalised axiom of revealed preference (Varian 1982): "
                                   "true when some utility function explains every choice.")
    warp: bool
    sarp: bool
    efficiency_index: float = Field(
        description="Afriat's critical cost efficiency index: the largest e <= 1 at which the "
                    "data pass GARP with every budget scaled by e (1: they pass).")
    violations: list[ViolationOut] = Field(description="Every violation of each axiom.")
    violation_counts: dict[str, int]


class BoundOut(StrictModel):
    period: str
    lower: float = Field(description="Least Konüs index from the base period to this one, at "
                                     "the utility period's living standard, that the data allow.")
    upper: float = Field(description="Greatest such index.")
    laspeyres: float = Field(description="p_t . x_base / p_base . x_base: an upper bound on the "
                                         "Konüs index at the base period's living standard "
                                         "(Konüs 1924).")
    paasche: float = Field(description="p_t . x_t / p_base . x_t: a lower bound on it at this "
                                       "period's living standard.")


class BoundsOut(StrictModel):
    base_period: str
    utility_period: str
    efficiency_level: float = Field(
        description="The efficiency at which the bounds were computed: 1 when the data pass "
                    "GARP; otherwise a level at which they pass (Afriat's index or just below "
                    "it), and the bounds hold only for preferences that explain the choices up "
                    "to that share of wasted budget.")
    method: str
    rows: list[BoundOut]


class RevealedResponse(StrictModel):
    periods: list[str]
    items: list[str]
    scale: ScaleOut
    consistency: ConsistencyOut
    bounds: BoundsOut
    expenditure: list[float] = Field(description="p_t . x_t of each period.")
    notices: list[NoticeOut]
    caution: str
    provenance: ProvenanceOut


__all__ = ["BOUNDS_METHOD", "CAUTION", "RevealedRequest", "RevealedResponse"]
