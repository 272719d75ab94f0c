"""The formula (bilateral) price indices, vectorised along the last axis.

Every formula takes an :class:`IndexData` and returns the index as a ratio (1.0 = no change).
Arrays may carry leading axes (periods, households); sums run over the last axis, the items.
Formulas and their names follow ILO, IMF, OECD, UNECE, Eurostat and World Bank (2004),
*Consumer Price Index Manual: Theory and Practice* (the CPI Manual), chapters 15 to 17.

Items that come and go: a comparison between periods whose items differ uses the items priced in
both (the matched sample, :func:`matched_sample`); an :class:`IndexData` built that way carries
the mask ``matched``, which the unweighted formulas need to count items and the Sato-Vartia index
to give a zero share no weight.

Adding a formula is one function here and one :class:`IndexFormula` line in ``FORMULAS``.
"""

from __future__ import annotations

from collections.abc import Callable
from dataclasses import dataclass
from functools import cached_property
from typing import Any, Literal

import numpy as np
from numpy.typing import NDArray

from ._means import log_mean, log_power_mean
from .errors import InvalidInput

Array = NDArray[np.float64]
Mask = NDArray[np.bool_]

#: What a formula's substitution bias is measured against: the Konüs index at base utility
#: (base-weighted and unweighted formulas), at current utility (current-weighted), or at the
#: midpoint living standard (symmetric formulas; see :mod:`dualcost.core.comparison`).
Target = Literal["base", "current", "midpoint"]


@dataclass(frozen=True)
class IndexData:
    """Prices and quantities for one comparison (or many, along leading axes).

    ``weight_quantities`` and ``weight_shares`` describe an earlier weight-reference period b
    (Lowe and Young indices); ``sigma`` is the elasticity for the Lloyd-Moulton index.

    ``matched`` marks the items priced in both periods when the comparison is over a matched
    sample (:func:`matched_sample`): the other items then have price 1 and quantity 0.
    """

    p0: Array
    p1: Array
    q0: Array
    q1: Array
    weight_quantities: Array | None = None
    weight_shares: Array | None = None
    sigma: float | None = None
    matched: Mask | None = None

    # Computed once per comparison, shared by all the formulas that use them.
    @cached_property
    def relatives(self) -> Array:
        return self.p1 / self.p0

    @cached_property
    def log_relatives(self) -> Array:
        return np.log(self.relatives)

    @cached_property
    def w0(self) -> Array:
        v = self.p0 * self.q0
        return v / v.sum(axis=-1, keepdims=True)

    @cached_property
    def w1(self) -> Array:
        v = self.p1 * self.q1
        return v / v.sum(axis=-1, keepdims=True)


def matched_sample(
    p0: Array,
    p1: Array,
    q0: Array,
    q1: Array,
    matched: Mask,
    *,
    weight_quantities: Array | None = None,
    weight_shares: Array | None = None,
    sigma: float | None = None,
) -> IndexData:
    """The comparison over the items where ``matched`` is true (priced in both periods).

    Elsewhere prices become 1 and quantities 0, so an item left out has no weight in a weighted
    formula; the weight-reference basket is kept over the matched items and the weight-reference
    shares are rescaled to sum to one over them. The mask travels with the data for the
    formulas that count items (Carli, Jevons, Dutot) and for Sato-Vartia.
    """
    qb = wb = None
    if weight_quantities is not None:
        qb = np.where(matched, weight_quantities, 0.0)
    if weight_shares is not None:
        wb = np.where(matched, weight_shares, 0.0)
        wb = wb / np.sum(wb, axis=-1, keepdims=True)
    return IndexData(p0=np.where(matched, p0, 1.0), p1=np.where(matched, p1, 1.0),
                     q0=np.where(matched, q0, 0.0), q1=np.where(matched, q1, 0.0),
                     weight_quantities=qb, weight_shares=wb, sigma=sigma, matched=matched)


def laspeyres(d: IndexData) -> Any:
    """P_L = sum p1 q0 / sum p0 q0 (Laspeyres 1871; CPI Manual 15.14)."""
    return (d.p1 * d.q0).sum(axis=-1) / (d.p0 * d.q0).sum(axis=-1)


def paasche(d: IndexData) -> Any:
    """P_P = sum p1 q1 / sum p0 q1 (Paasche 1874; CPI Manual 15.15)."""
    return (d.p1 * d.q1).sum(axis=-1) / (d.p0 * d.q1).sum(axis=-1)


def fisher(d: IndexData) -> Any:
    """P_F = (P_L P_P)^(1/2) (Fisher 1922; CPI Manual 15.20)."""
    return np.sqrt(laspeyres(d) * paasche(d))


def tornqvist(d: IndexData) -> Any:
    """ln P_T = sum (w0 + w1)/2 ln(p1/p0) (Törnqvist 1936; CPI Manual 15.81)."""
    return np.exp((0.5 * (d.w0 + d.w1) * d.log_relatives).sum(axis=-1))


def walsh(d: IndexData) -> Any:
    """P_W = sum p1 (q0 q1)^(1/2) / sum p0 (q0 q1)^(1/2) (Walsh 1901; CPI Manual 15.24)."""
    g = np.sqrt(d.q0 * d.q1)
    return (d.p1 * g).sum(axis=-1) / (d.p0 * g).sum(axis=-1)


def marshall_edgeworth(d: IndexData) -> Any:
    """P_ME = sum p1 (q0 + q1) / sum p0 (q0 + q1) (Marshall 1887; Edgeworth 1925)."""
    q = d.q0 + d.q1
    return (d.p1 * q).sum(axis=-1) / (d.p0 * q).sum(axis=-1)


def sato_vartia(d: IndexData) -> Any:
    """ln P_SV = sum phi_i ln(p1_i/p0_i), phi_i = L(w1_i, w0_i) / sum_j L(w1_j, w0_j),
    with L the logarithmic mean (Sato 1976; Vartia 1976; CPI Manual 17.69).

    Over all items, shares must be positive in both periods: the logarithmic mean takes their
    logarithms. Over a matched sample (``d.matched`` given) an item with a zero share in one
    period has ``L = 0``, the limit of the logarithmic mean, so it has no weight.
    """
    if d.matched is not None:
        return _sato_vartia_zero_shares(d)
    lm = log_mean(d.w1, d.w0)
    phi = lm / lm.sum(axis=-1, keepdims=True)
    return np.exp((phi * d.log_relatives).sum(axis=-1))


def _sato_vartia_zero_shares(d: IndexData) -> Array:
    """Sato-Vartia with ``L(w1_i, w0_i) = 0`` where a share is zero (Sato 1976; Vartia 1976)."""
    both = (d.w0 > 0.0) & (d.w1 > 0.0)
    lm = np.where(both, log_mean(np.where(both, d.w1, 1.0), np.where(both, d.w0, 1.0)), 0.0)
    phi = lm / np.sum(lm, axis=-1, keepdims=True)
    return np.asarray(np.exp(np.sum(phi * d.log_relatives, axis=-1)))


def geometric_laspeyres(d: IndexData) -> Any:
    """ln P_GL = sum w0 ln(p1/p0) (CPI Manual 15.69; Konüs for Cobb-Douglas)."""
    return np.exp((d.w0 * d.log_relatives).sum(axis=-1))


def lloyd_moulton(d: IndexData) -> Any:
    """P_LM = (sum w0 (p1/p0)^(1-sigma))^(1/(1-sigma)) (Lloyd 1975; Moulton 1996;
    CPI Manual 17.61); the geometric Laspeyres at sigma = 1, Laspeyres at sigma = 0."""
    assert d.sigma is not None
    return np.exp(log_power_mean(d.log_relatives, d.w0, 1.0 - d.sigma))


def lowe(d: IndexData) -> Any:
    """P_Lo = sum p1 qb / sum p0 qb, basket of an earlier period b (Lowe 1823; CPI Manual 15.33)."""
    assert d.weight_quantities is not None
    qb = d.weight_quantities
    return (d.p1 * qb).sum(axis=-1) / (d.p0 * qb).sum(axis=-1)


def young(d: IndexData) -> Any:
    """P_Y = sum wb (p1/p0), shares of an earlier period b (Young 1812; CPI Manual 15.48)."""
    assert d.weight_shares is not None
    return (d.weight_shares * d.relatives).sum(axis=-1)


def _count(matched: Mask) -> Array:
    return np.sum(matched, axis=-1).astype(np.float64)


def carli(d: IndexData) -> Any:
    """P_C = mean(p1/p0), unweighted arithmetic mean of relatives (Carli 1764; CPI Manual 20.32),
    over the matched items when ``d.matched`` is given."""
    if d.matched is None:
        return d.relatives.mean(axis=-1)
    return np.sum(np.where(d.matched, d.relatives, 0.0), axis=-1) / _count(d.matched)


def jevons(d: IndexData) -> Any:
    """P_J = prod (p1/p0)^(1/N), unweighted geometric mean (Jevons 1863; CPI Manual 20.35),
    over the N matched items when ``d.matched`` is given."""
    if d.matched is None:
        return np.exp(d.log_relatives.mean(axis=-1))
    return np.exp(np.sum(np.where(d.matched, d.log_relatives, 0.0), axis=-1) / _count(d.matched))


def dutot(d: IndexData) -> Any:
    """P_D = mean(p1) / mean(p0), ratio of average prices (Dutot 1738; CPI Manual 20.30), over
    the matched items when ``d.matched`` is given."""
    if d.matched is None:
        return d.p1.mean(axis=-1) / d.p0.mean(axis=-1)
    return (np.sum(np.where(d.matched, d.p1, 0.0), axis=-1)
            / np.sum(np.where(d.matched, d.p0, 0.0), axis=-1))


@dataclass(frozen=True)
class IndexFormula:
    """A formula with what a listing and the comparison need to know about it."""

    name: str
    title: str
    source: str
    target: Target
    compute: Callable[[IndexData], Any]
    #: Optional inputs the formula cannot do without ("weight_quantities", "weight_shares", "sigma").
    needs: tuple[str, ...] = ()
    #: True when the formula takes logarithms of expenditure shares (zero shares not allowed).
    logs_of_shares: bool = False
    superlative: bool = False


FORMULAS: dict[str, IndexFormula] = {
    f.name: f
    for f in (
        IndexFormula("laspeyres", "Laspeyres", "Laspeyres (1871)", "base", laspeyres),
        IndexFormula("paasche", "Paasche", "Paasche (1874)", "current", paasche),
        IndexFormula("fisher", "Fisher ideal", "Fisher (1922)", "midpoint", fisher,
                     superlative=True),
        IndexFormula("tornqvist", "Törnqvist", "Törnqvist (1936)", "midpoint", tornqvist,
                     superlative=True),
        IndexFormula("walsh", "Walsh", "Walsh (1901)", "midpoint", walsh, superlative=True),
        IndexFormula("marshall_edgeworth", "Marshall-Edgeworth", "Marshall (1887); Edgeworth "
                     "(1925)", "midpoint", marshall_edgeworth),
        IndexFormula("sato_vartia", "Sato-Vartia", "Sato (1976); Vartia (1976)", "midpoint",
                     sato_vartia, logs_of_shares=True),
        IndexFormula("geometric_laspeyres", "Geometric Laspeyres", "CPI Manual (2004) 15.69",
                     "base", geometric_laspeyres),
        IndexFormula("lloyd_moulton", "Lloyd-Moulton", "Lloyd (1975); Moulton (1996)", "base",
                     lloyd_moulton, needs=("sigma",)),
        IndexFormula("lowe", "Lowe", "Lowe (1823)", "base", lowe, needs=("weight_quantities",)),
        IndexFormula("young", "Young", "Young (1812)", "base", young, needs=("weight_shares",)),
        IndexFormula("carli", "Carli (unweighted)", "Carli (1764)", "base", carli),
        IndexFormula("jevons", "Jevons (unweighted)", "Jevons (1863)", "base", jevons),
        IndexFormula("dutot", "Dutot (unweighted)", "Dutot (1738)", "base", dutot),
    )
}


def check_formula_names(names: list[str] | tuple[str, ...]) -> tuple[str, ...]:
    """Known, distinct formula names, in the order given."""
    seen: set[str] = set()
    for i, name in enumerate(names):
        if name not in FORMULAS:
            known = ", ".join(FORMULAS)
            raise InvalidInput("formulas", f"unknown index formula {name!r}; known: {known}", i)
        if name in seen:
            raise InvalidInput("formulas", f"formula {name!r} is named twice", i)
        seen.add(name)
    return tuple(names)


def check_positive_shares(d: IndexData, formula: IndexFormula) -> None:
    """Raise when a formula that takes logarithms of shares meets a zero quantity."""
    if not formula.logs_of_shares:
        return
    for name, q in (("q0", d.q0), ("q1", d.q1)):
        zero = np.flatnonzero(np.asarray(q).reshape(-1) <= 0.0)
        if zero.size:
            raise InvalidInput(
                name,
                f"the {formula.title} index takes logarithms of expenditure shares, so every "
                "quantity must be greater than zero; leave this formula out to compute the others",
                int(zero[0]),
            )
