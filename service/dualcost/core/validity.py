"""Whether a model stands behind its Konüs figures at the prices and incomes used.

A Konüs index ``K = e(p1, u) / e(p0, u)`` is a cost-of-living index only where the expenditure
function comes from a well-behaved utility: ``e`` increasing and concave in prices, its
Hicksian demands ``h = grad_p e`` non-negative, the Slutsky matrix ``S = d h / d p``
symmetric and negative semidefinite (Mas-Colell, Whinston and Green 1995, *Microeconomic
Theory*, 2.F and 3.G). A flexible form (translog, AIDS, QUAIDS, the quadratic model, demand
systems given by formula) is regular only near the point it was fitted at (Christensen,
Jorgenson and Lau 1975; Deaton and Muellbauer 1980); far from it the "index" it computes can
fall below every bound (Konüs 1924: ``K(u0) <= P_L``) and its compensated demands turn
negative.

This module names the conditions whose failure makes the model's figures unusable (the
Konüs indices, compensating and equivalent variation, compensated income, the bias of each
formula and the Hicks decomposition) and collects the notices that report them into one
:class:`Validity`. The formula indices (Laspeyres, Paasche, Fisher, ...) use only prices and
quantities and stay usable whatever the model does.
"""

from __future__ import annotations

from collections.abc import Iterable, Mapping
from dataclasses import dataclass
from typing import Literal

import numpy as np

from .preferences.base import Notice, Vector

#: Notice codes that take a model outside its regular region: its Konüs figures are then not
#: results. Each is raised where the condition is checked (the family's ``regularity``, the
#: comparison's own checks).
IRREGULAR: frozenset[str] = frozenset({
    "shares_outside_unit_interval",  # monotonicity: a share below 0 is a negative demand
    "negative_demand",  # a Marshallian or Hicksian demand below zero
    "slutsky_not_negative_semidefinite",  # e not concave in prices
    "slutsky_not_symmetric",  # the demands come from no utility function
    "not_integrable",  # no expenditure function integrates the demands
    "adding_up_failed",  # the demands do not spend the income: e(p, u) != p . h(p, u)
    "konus_bound_failed",  # K(u0) > P_L, which no regular model can give (Konüs 1924)
})

State = Literal["regular", "outside_regular_region"]

#: What stays usable when the model is outside its regular region.
USABLE_FIGURES = ("The formula indices (Laspeyres, Paasche, Fisher, Törnqvist and the others) "
                  "use only prices and quantities and remain usable.")
#: What is withheld then.
MODEL_FIGURES = ("The model's figures (Konüs indices, compensating and equivalent variation, "
                 "compensated income, each formula's substitution bias and the Hicks "
                 "decomposition) are not results: the model is outside its regular region at "
                 "these prices and incomes.")


@dataclass(frozen=True)
class Validity:
    """Whether the model is regular where it was evaluated, and the notices that say why not."""

    reasons: tuple[Notice, ...] = ()

    @property
    def regular(self) -> bool:
        return not self.reasons

    @property
    def state(self) -> State:
        return "regular" if self.regular else "outside_regular_region"

    @property
    def items(self) -> tuple[int, ...]:
        """Every item a reason names (0-based positions), in order, each once."""
        return tuple(dict.fromkeys(i for n in self.reasons for i in n.items))


REGULAR = Validity()


def assess(notices: Iterable[Notice]) -> Validity:
    """The validity that ``notices`` imply: irregular when any has an :data:`IRREGULAR` code."""
    return Validity(tuple(n for n in notices if n.code in IRREGULAR))


def negative_demands(where: str, demands: Mapping[str, Vector], *,
                     tolerance: float = 1e-12) -> list[Notice]:
    """One ``negative_demand`` notice per named demand vector with entries below zero.

    ``tolerance`` is relative to the largest demand of the vector, so that rounding at an exact
    zero (a Leontief corner) is not reported. ``where`` starts the sentence ("At current
    prices"); the notice's ``items`` name the items concerned.
    """
    out = []
    for name, x in demands.items():
        if x.min() >= 0.0:  # the common case, in one reduction
            continue
        floor = -tolerance * max(float(np.max(np.abs(x))), 1e-300)
        bad = np.flatnonzero(x < floor)
        if bad.size:
            out.append(Notice("negative_demand", f"{where}: the model's {name} of "
                              f"{_count(bad.size)} is negative (lowest {float(x[bad].min()):.6g}); "
                              "no household can buy a negative quantity, so the model is not "
                              "regular there.", tuple(int(i) for i in bad)))
    return out


def _count(n: int) -> str:
    return "1 item" if n == 1 else f"{n} items"


__all__ = ["IRREGULAR", "MODEL_FIGURES", "REGULAR", "USABLE_FIGURES", "Validity", "assess",
           "negative_demands"]
