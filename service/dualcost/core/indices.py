"""The formula price indices, vectorised along the last axis, and their registry.

Every formula takes an :class:`IndexData` and returns the index as a ratio (1.0 = no change).
Arrays may carry leading axes (periods, households); sums run over the last axis, the items.
Formulas and their names follow ILO, IMF, OECD, UNECE, Eurostat and World Bank (2004),
*Consumer Price Index Manual: Theory and Practice* (the CPI Manual), chapters 15 to 17 and 20.

``REGISTRY`` declares each formula once (:class:`IndexFormula`): its function, label and source,
what data it needs, whether it is symmetric, which Konüs index it is compared with, its rule for
items that come and go, and which operations compute it. The comparison, the series, the
households and the web layer read it: :func:`formulas_for` gives the names an operation offers,
``FORMULAS`` the formulas a comparison computes, ``HOUSEHOLD_DEFAULT`` the households' default.

Items that come and go: a comparison between periods whose items differ uses the items priced in
both (the matched sample, :func:`matched_sample`); an :class:`IndexData` built that way carries
the mask ``matched``, which the unweighted formulas need to count items and the Sato-Vartia index
to give a zero share no weight. Feenstra's (1994) index instead reads which items were on sale in
each period (``available0``, ``available1``), since its whole point is the items that differ.

Adding a formula is one function here and one :class:`IndexFormula` entry in ``REGISTRY``.
"""

from __future__ import annotations

from collections.abc import Callable, Collection
from dataclasses import KW_ONLY, dataclass
from functools import cached_property
from typing import Any, Literal, get_args

import numpy as np
from numpy.typing import NDArray

from ._means import log_mean, log_power_mean
from .errors import InvalidInput
from .multilateral import Link

Array = NDArray[np.float64]
Mask = NDArray[np.bool_]

#: What a formula's substitution bias is measured against: the Konüs index at base utility
#: (base-weighted and unweighted formulas), at current utility (current-weighted), or at the
#: midpoint living standard (symmetric formulas; see :mod:`dualcost.core.comparison`).
Target = Literal["base", "current", "midpoint"]

#: What a formula needs beyond the two periods' prices, in the order a missing one is reported:
#: - ``new_goods_sigma``, ``sigma``: an elasticity of substitution (Feenstra, Lloyd-Moulton);
#: - ``weight_quantities``, ``weight_shares``: an earlier weight-reference period's basket or
#:   shares (Lowe, Young);
#: - ``period_quantities``: quantities of the compared periods themselves (every period of a
#:   series);
#: - ``positive_shares``: it takes logarithms of expenditure shares, so every share of a
#:   comparison over all items must be above zero;
#: - ``availability``: which items were on sale in each period, with their own prices and
#:   quantities (not only the matched sample).
Need = Literal["new_goods_sigma", "sigma", "weight_quantities", "weight_shares",
               "period_quantities", "positive_shares", "availability"]
NEEDS: tuple[Need, ...] = get_args(Need)
#: The needs a caller supplies as options (the catalogue lists them as a formula's ``needs``).
INPUTS: tuple[Need, ...] = ("new_goods_sigma", "sigma", "weight_quantities", "weight_shares")

#: The operations that compute formulas.
Scope = Literal["comparison", "series", "households"]
SCOPES: tuple[Scope, ...] = get_args(Scope)
#: ``bilateral``: a comparison of two periods; ``multilateral``: a series over all the periods
#: of a panel at once, built from a bilateral ``link`` (:mod:`dualcost.core.multilateral`).
Kind = Literal["bilateral", "multilateral"]


@dataclass(frozen=True)
class IndexData:
    """Prices and quantities for one comparison (or many, along leading axes).

    ``weight_quantities`` and ``weight_shares`` describe an earlier weight-reference period b
    (Lowe and Young indices); ``sigma`` is the elasticity for the Lloyd-Moulton index.

    ``matched`` marks the items priced in both periods when the comparison is over a matched
    sample (:func:`matched_sample`): the other items then have price 1 and quantity 0. For
    Feenstra's index, ``available0`` and ``available1`` mark the items on sale in each period
    and ``new_goods_sigma`` is its elasticity (above 1).
    """

    p0: Array
    p1: Array
    q0: Array
    q1: Array
    weight_quantities: Array | None = None
    weight_shares: Array | None = None
    sigma: float | None = None
    matched: Mask | None = None
    available0: Mask | None = None
    available1: Mask | None = None
    new_goods_sigma: float | None = None

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
    return np.asarray(np.sum(matched, axis=-1), dtype=np.float64)


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
class NewGoodsIndex:
    """Feenstra's index, its two parts, and which items were common, along leading axes."""

    index: Array
    sato_vartia_common: Array
    common_share_base: Array  # lambda_0
    common_share_current: Array  # lambda_1
    common: Mask


def check_new_goods_sigma(name: str, sigma: float) -> float:
    """The adjustment needs an elasticity above 1 (items that are not essential)."""
    value = float(sigma)
    if not np.isfinite(value) or value <= 1.0:
        raise InvalidInput(name, "the new-goods adjustment (Feenstra 1994) needs an elasticity "
                           f"of substitution greater than 1, got {value:g}")
    return value


def new_goods_index(d: IndexData) -> NewGoodsIndex:
    """Feenstra's (1994) CES index between two periods whose items differ, with its parts.

    An item is *bought* when it is on sale (``available0``, ``available1``) and its quantity is
    above zero, and *common* when bought in both periods; prices and quantities of items not on
    sale are ignored. ``P = P_SV(I) (lambda_1 / lambda_0)^(1 / (sigma - 1))`` with ``P_SV(I)``
    the Sato-Vartia index over the common items and ``lambda_t`` their share of period t's
    spending (Feenstra 1994, *American Economic Review* 84(1), Proposition 1; see
    :mod:`dualcost.core.new_goods`).
    """
    assert d.available0 is not None and d.available1 is not None
    assert d.new_goods_sigma is not None
    s = check_new_goods_sigma("new_goods_sigma", d.new_goods_sigma)
    bought0 = d.available0 & (np.where(d.available0, d.q0, 0.0) > 0.0)
    bought1 = d.available1 & (np.where(d.available1, d.q1, 0.0) > 0.0)
    common = bought0 & bought1
    if not np.all(np.any(common, axis=-1)):
        raise InvalidInput("quantities", "the new-goods adjustment needs at least one item bought "
                           "in both periods of each comparison")
    p0 = np.where(bought0, d.p0, 1.0)
    p1 = np.where(bought1, d.p1, 1.0)
    v0 = np.where(bought0, p0 * d.q0, 0.0)
    v1 = np.where(bought1, p1 * d.q1, 0.0)
    lam0 = np.sum(np.where(common, v0, 0.0), axis=-1) / np.sum(v0, axis=-1)
    lam1 = np.sum(np.where(common, v1, 0.0), axis=-1) / np.sum(v1, axis=-1)
    sv = sato_vartia(matched_sample(p0, p1, d.q0, d.q1, common))
    index = sv * np.exp((np.log(lam1) - np.log(lam0)) / (s - 1.0))
    return NewGoodsIndex(index=np.asarray(index), sato_vartia_common=sv, common_share_base=lam0,
                         common_share_current=lam1, common=common)


def feenstra(d: IndexData) -> Any:
    """P = P_SV(I) (lambda_1 / lambda_0)^(1/(sigma - 1)), Sato-Vartia over the common items
    times the change in their share of spending (Feenstra 1994, Proposition 1;
    :func:`new_goods_index`)."""
    return new_goods_index(d).index


# -- the registry ----------------------------------------------------------------------------------


@dataclass(frozen=True)
class IndexFormula:
    """One formula, declared once: what the operations and the listings know about it.

    For a ``multilateral`` entry, ``compute`` is its ``link`` formula: over two periods the GEKS
    index is its link itself (with ``P(s, s) = 1`` both indirect comparisons are the direct one);
    the series computes it over the whole panel (:mod:`dualcost.core.multilateral`).
    """

    name: str
    title: str
    source: str
    #: Which Konüs index its substitution bias is measured against.
    target: Target
    compute: Callable[[IndexData], Any]
    _: KW_ONLY
    #: The operations that compute it.
    scopes: tuple[Scope, ...]
    #: What it needs beyond the two periods' prices (see :data:`Need`).
    requires: tuple[Need, ...] = ()
    #: It weights the two compared periods alike, by a symmetric mean of their quantities or
    #: shares (CPI Manual 2004, ch. 15), so exchanging the periods inverts it (time reversal).
    symmetric: bool = False
    superlative: bool = False
    #: False for the unweighted formulas, which read prices only (Carli, Jevons, Dutot).
    weighted: bool = True
    #: What a series does with items that come and go, in words.
    rule: str = ""
    #: Among the formulas a household batch computes when none are named.
    household_default: bool = False
    kind: Kind = "bilateral"
    #: The bilateral formula a multilateral series is built from.
    link: Link | None = None

    @property
    def needs(self) -> tuple[Need, ...]:
        """The options a caller must supply: an elasticity or a weight-reference period."""
        return tuple(need for need in self.requires if need in INPUTS)

    @property
    def logs_of_shares(self) -> bool:
        """It takes logarithms of expenditure shares (zero shares not allowed over all items)."""
        return "positive_shares" in self.requires

    @property
    def uses_current_quantities(self) -> bool:
        """It weights by the current period's quantities, as every formula compared with the
        Konüs index at current or midpoint utility does (the registry's test checks it)."""
        return self.target != "base" and "period_quantities" in self.requires

    def missing(self, unmet: Collection[Need], scope: Scope) -> str | None:
        """What it needs among ``unmet`` (the needs ``scope`` cannot meet), in that operation's
        words: the first in the order of :data:`Need`, or ``None`` when it has all it needs."""
        wanted = [need for need in self.requires if need in unmet]
        if not wanted:
            return None
        return MISSING[min(wanted, key=NEEDS.index)][scope]


#: Completes "The Lowe index needs ..." when a need is not met; the comparison and the series
#: name the inputs the way their requests do. Needs an operation always meets have no entry.
MISSING: dict[Need, dict[Scope, str]] = {
    "new_goods_sigma": {
        "series": "an elasticity of substitution above 1 (new_goods_sigma, or a model with one)",
    },
    "sigma": {
        "comparison": "an elasticity of substitution (lloyd_moulton_sigma; the model has no "
                      "single one)",
        "series": "an elasticity of substitution (lloyd_moulton_sigma; the model has no single "
                  "one)",
    },
    "weight_quantities": {
        "comparison": "a weight-reference basket (quantities, or shares with prices)",
        "series": "a weight-reference basket (a weight-reference period, or quantities)",
    },
    "weight_shares": {
        "comparison": "weight-reference shares (shares, or a basket with prices)",
        "series": "weight-reference shares (a weight-reference period, or shares)",
    },
    "period_quantities": {
        "series": "quantities in every period (some periods have prices only; give a model to "
                  "fill them in with its demands)",
    },
}

_MATCHED = ("Each comparison uses the items priced in both of its periods (matched sample); an "
            "item priced in only one is left out of that comparison")

GEKS_RULE = ("Each bilateral link between two periods uses the items priced in both (matched "
             "sample), so an item counts in every pair of periods where it is priced.")

_EVERYWHERE: tuple[Scope, ...] = ("comparison", "series", "households")
# The unweighted formulas are the same for every household, and Lowe and Young need a
# weight-reference period, which a household batch does not take.
_NOT_HOUSEHOLDS: tuple[Scope, ...] = ("comparison", "series")
_SERIES: tuple[Scope, ...] = ("series",)
_QUANTITIES: tuple[Need, ...] = ("period_quantities",)


#: Every formula the service computes, in the order answers and listings give them.
REGISTRY: dict[str, IndexFormula] = {f.name: f for f in (
    IndexFormula("laspeyres", "Laspeyres", "Laspeyres (1871)", "base", laspeyres,
                 scopes=_EVERYWHERE, requires=_QUANTITIES, household_default=True,
                 rule=f"{_MATCHED}: the same as imputing its price relative by the Laspeyres "
                      "index of the matched items."),
    IndexFormula("paasche", "Paasche", "Paasche (1874)", "current", paasche,
                 scopes=_EVERYWHERE, requires=_QUANTITIES, household_default=True,
                 rule=f"{_MATCHED}: the same as imputing its price relative by the Paasche index "
                      "of the matched items."),
    IndexFormula("fisher", "Fisher ideal", "Fisher (1922)", "midpoint", fisher,
                 scopes=_EVERYWHERE, requires=_QUANTITIES, symmetric=True, superlative=True,
                 household_default=True,
                 rule=f"{_MATCHED}: Laspeyres and Paasche are both taken over the matched items."),
    IndexFormula("tornqvist", "Törnqvist", "Törnqvist (1936)", "midpoint", tornqvist,
                 scopes=_EVERYWHERE, requires=_QUANTITIES, symmetric=True, superlative=True,
                 household_default=True,
                 rule=f"{_MATCHED}; expenditure shares are taken over the matched items."),
    IndexFormula("walsh", "Walsh", "Walsh (1901)", "midpoint", walsh,
                 scopes=_EVERYWHERE, requires=_QUANTITIES, symmetric=True, superlative=True,
                 rule=f"{_MATCHED}: both baskets are taken over the matched items."),
    IndexFormula("marshall_edgeworth", "Marshall-Edgeworth", "Marshall (1887); Edgeworth (1925)",
                 "midpoint", marshall_edgeworth,
                 scopes=_EVERYWHERE, requires=_QUANTITIES, symmetric=True,
                 rule=f"{_MATCHED}: both baskets are taken over the matched items."),
    IndexFormula("sato_vartia", "Sato-Vartia", "Sato (1976); Vartia (1976)", "midpoint",
                 sato_vartia,
                 scopes=_EVERYWHERE, requires=("period_quantities", "positive_shares"),
                 symmetric=True,
                 rule=f"{_MATCHED}; expenditure shares are taken over the matched items, and an "
                      "item with a zero share in one period has no weight (the logarithmic "
                      "mean's limit)."),
    IndexFormula("geometric_laspeyres", "Geometric Laspeyres", "CPI Manual (2004) 15.69", "base",
                 geometric_laspeyres,
                 scopes=_EVERYWHERE, requires=_QUANTITIES, household_default=True,
                 rule=f"{_MATCHED}: the same as imputing its price relative by the geometric "
                      "Laspeyres index of the matched items."),
    IndexFormula("lloyd_moulton", "Lloyd-Moulton", "Lloyd (1975); Moulton (1996)", "base",
                 lloyd_moulton,
                 scopes=_EVERYWHERE, requires=("sigma", "period_quantities"),
                 rule=f"{_MATCHED}: the same as imputing its price relative by the Lloyd-Moulton "
                      "index of the matched items."),
    IndexFormula("lowe", "Lowe", "Lowe (1823)", "base", lowe,
                 scopes=_NOT_HOUSEHOLDS, requires=("weight_quantities",),
                 rule=f"{_MATCHED}: the weight-reference basket is priced over the matched "
                      "items."),
    IndexFormula("young", "Young", "Young (1812)", "base", young,
                 scopes=_NOT_HOUSEHOLDS, requires=("weight_shares",),
                 rule=f"{_MATCHED}: the weight-reference shares are rescaled to sum to one over "
                      "the matched items."),
    IndexFormula("carli", "Carli (unweighted)", "Carli (1764)", "base", carli,
                 scopes=_NOT_HOUSEHOLDS, weighted=False,
                 rule=f"{_MATCHED}: the same as imputing its price relative by the mean relative "
                      "of the matched items."),
    IndexFormula("jevons", "Jevons (unweighted)", "Jevons (1863)", "base", jevons,
                 scopes=_NOT_HOUSEHOLDS, weighted=False,
                 rule=f"{_MATCHED}: the same as imputing its price relative by the geometric "
                      "mean of the matched items' relatives."),
    IndexFormula("dutot", "Dutot (unweighted)", "Dutot (1738)", "base", dutot,
                 scopes=_NOT_HOUSEHOLDS, weighted=False,
                 rule=f"{_MATCHED}: average prices are taken over the matched items."),
    IndexFormula("feenstra", "Feenstra CES new-goods adjustment", "Feenstra (1994)", "midpoint",
                 feenstra,
                 scopes=_SERIES, requires=("new_goods_sigma", "period_quantities", "availability"),
                 symmetric=True,
                 rule="Items bought in both periods are common and priced by the Sato-Vartia "
                      "index; an item bought in only one enters through the common items' share "
                      "of that period's spending (Feenstra 1994), so arrivals lower the index "
                      "and departures raise it."),
    IndexFormula("geks_fisher", "GEKS on Fisher links",
                 "Gini (1931); Eltetö and Köves (1964); Szulc (1964)", "midpoint", fisher,
                 scopes=_SERIES, requires=_QUANTITIES, symmetric=True, rule=GEKS_RULE,
                 kind="multilateral", link="fisher"),
    IndexFormula("geks_tornqvist", "GEKS on Törnqvist links",
                 "Caves, Christensen and Diewert (1982)", "midpoint", tornqvist,
                 scopes=_SERIES, requires=_QUANTITIES, symmetric=True, rule=GEKS_RULE,
                 kind="multilateral", link="tornqvist"),
)}


def formulas_for(scope: Scope) -> tuple[str, ...]:
    """The names of the formulas ``scope`` computes, in registry order."""
    return tuple(name for name, f in REGISTRY.items() if scope in f.scopes)


#: The formulas a comparison computes (its request's formula names, and the catalogue listing).
FORMULAS: dict[str, IndexFormula] = {name: REGISTRY[name] for name in formulas_for("comparison")}
#: What a household batch computes when no formulas are named.
HOUSEHOLD_DEFAULT: tuple[str, ...] = tuple(
    name for name in formulas_for("households") if REGISTRY[name].household_default)


def check_formula_names(names: list[str] | tuple[str, ...]) -> tuple[str, ...]:
    """Known, distinct formula names of a comparison, in the order given."""
    known = formulas_for("comparison")
    seen: set[str] = set()
    for i, name in enumerate(names):
        if name not in known:
            raise InvalidInput("formulas", f"unknown index formula {name!r}; known: "
                               f"{', '.join(known)}", i)
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
