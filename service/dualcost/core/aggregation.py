"""The index as a statistical office builds it: elementary aggregates over price quotes, weighted
upper levels through a classification tree, chain-linked at stated periods; and beside it, at
every node, the Konüs index of a nested CES model on the same tree.

Definitions (CPI Manual 2004, ILO/IMF/OECD/UNECE/Eurostat/World Bank, ch. 9 "Calculation of
consumer price indices" and ch. 20 "Elementary indices"; the 2020 edition keeps them; section
numbers from memory). Period ``0`` is a segment's price reference period (the link period),
``t`` a later (or earlier) period, ``b`` the weight reference period (one period or several,
such as the twelve months of a year), and ``j`` runs over the ``n`` quotes of an elementary
aggregate priced in both ``0`` and ``t`` (the matched sample):

- Jevons: ``I_J = prod_j (p_j^t / p_j^0)^(1/n)``, the geometric mean of the price relatives
  (Jevons 1865);
- Carli: ``I_C = (1/n) sum_j p_j^t / p_j^0``, their arithmetic mean (Carli 1764);
- Dutot: ``I_D = (sum_j p_j^t / n) / (sum_j p_j^0 / n)``, the ratio of average prices
  (Dutot 1738), which depends on the units the quotes are priced in.

``I_J <= I_C`` always (the inequality of arithmetic and geometric means). An elementary index
is direct, from the segment's price reference period, so within a segment it is the same
whichever month it is read in (CPI Manual 2004, 9.38-9.41; 20.48-20.56).

Upper levels, from the elementary indices ``I_e^{0:t}`` and the weight shares ``s_e^b`` of the
weight reference period (the shares of a group's node ``g`` summed over its aggregates):

- Young: ``I_g^{0:t} = sum_{c in g} s_c^b I_c^{0:t} / sum_{c in g} s_c^b`` (Young 1812);
- Lowe, the basket of ``b`` priced at ``0`` and ``t``: the same with the price-updated shares
  ``s_e^{0b} = s_e^b / I_e^{0:b}`` (normalised), where ``I_e^{0:b}`` is the aggregate's index in
  ``b`` on ``0`` (the mean over ``b``'s periods); ``sum s^b I^{0:t} / I^{0:b} / sum s^b /
  I^{0:b} = sum p^t q^b / sum p^0 q^b`` (Lowe 1823; CPI Manual 2004, 9.9-9.16 and 15.33-15.37).

Both are consistent in aggregation: a group's index computed from its children equals the same
formula over its elementary aggregates directly.

Chain-linking (CPI Manual 2004, 9.75-9.80, from memory): links ``L_0 < L_1 < ...``, each with
its own weights; segment ``k`` covers ``L_k .. L_{k+1}`` and its direct index ``S_k(t)`` is on
``L_k``; the chained level is ``X_t = prod_{i<k} S_i(L_{i+1}) S_k(t)``, so it is continuous at
each link (a one-period overlap: a December link for annual re-weighting, or January) and
within a segment ``X_t / X_{L_k} = S_k(t)``. Levels are published on ``L_0`` = the reference
value (100).

The model. Each elementary aggregate is one good to the model: within it the quotes are equally
important (the premise of an unweighted formula), and its price moves by the power mean of
order ``1 - sigma_e`` of its quotes' relatives (the unit cost of a CES aggregate with equal
shares at the price reference period: geometric at ``sigma_e = 1``, the Jevons index). Above,
a nested CES model (Sato 1967; :class:`~dualcost.core.preferences.nested_ces.NestedCES`) on the
same tree with each group's sigma, calibrated to the weight shares at the prices of the weight
reference period; the Konüs index of a node is its cost relative ``P_g(p^t) / P_g(p^0)``, which
for a homothetic model does not depend on the living standard (Konüs 1924). The model's series
is chained at the same links, recalibrated to each link's weights. With every sigma zero or
more and positive weights the model is regular everywhere (an increasing, concave unit cost),
so no Konüs figure is withheld (:mod:`dualcost.core.validity`).
"""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass, replace

import numpy as np
import numpy.typing as npt
from numpy.typing import NDArray

from .deadline import check as check_deadline
from .errors import InvalidInput
from .hierarchy import Hierarchy, Weights
from .preferences.base import Notice
from .preferences.nested_ces import NestedCES, parse_tree

Array = NDArray[np.float64]
Mask = NDArray[np.bool_]


# -- elementary aggregates ----------------------------------------------------------------------


def jevons(p0: Array, pt: Array, matched: Mask) -> Array:
    """``prod_j (p_j^t / p_j^0)^(1/n)`` over the matched quotes (last axis) (Jevons 1865)."""
    n = np.sum(matched, axis=-1)
    logs = np.where(matched, np.log(np.where(matched, pt, 1.0) / np.where(matched, p0, 1.0)), 0.0)
    return np.asarray(np.exp(np.sum(logs, axis=-1) / n), dtype=np.float64)


def carli(p0: Array, pt: Array, matched: Mask) -> Array:
    """``(1/n) sum_j p_j^t / p_j^0`` over the matched quotes (Carli 1764)."""
    n = np.sum(matched, axis=-1)
    rel = np.where(matched, np.where(matched, pt, 1.0) / np.where(matched, p0, 1.0), 0.0)
    return np.asarray(np.sum(rel, axis=-1) / n, dtype=np.float64)


def dutot(p0: Array, pt: Array, matched: Mask) -> Array:
    """``sum_j p_j^t / sum_j p_j^0`` over the matched quotes, the ratio of their average prices
    (Dutot 1738)."""
    top = np.sum(np.where(matched, pt, 0.0), axis=-1)
    return np.asarray(top / np.sum(np.where(matched, p0, 0.0), axis=-1), dtype=np.float64)


ELEMENTARY = {"jevons": jevons, "carli": carli, "dutot": dutot}


@dataclass(frozen=True)
class Quotes:
    """Price quotes: ``prices[j, t]`` (``NaN`` where quote ``j`` has no price in period ``t``),
    ``aggregate[j]`` the node of its elementary aggregate, ``units[j]`` its unit (or None)."""

    prices: Array
    aggregate: tuple[int, ...]
    units: tuple[str | None, ...]


@dataclass(frozen=True)
class _Grouped:
    """Quotes sorted by aggregate (``order``): the aggregates in ascending node order
    (``nodes``), where each one's quotes start (``starts``), and each sorted quote's aggregate
    as a position in ``nodes`` (``segment``); every sum over an aggregate is one reduction."""

    order: NDArray[np.intp]
    nodes: NDArray[np.intp]
    starts: NDArray[np.intp]
    segment: NDArray[np.intp]


def _grouped(h: Hierarchy, quotes: Quotes) -> _Grouped:
    owner = np.asarray(quotes.aggregate, dtype=np.intp)
    order = np.argsort(owner, kind="stable")
    nodes, starts = np.unique(owner[order], return_index=True)
    for e in sorted(set(h.elementary) - set(nodes.tolist())):
        raise InvalidInput("quotes", f"elementary aggregate {h.path(e)!r} has no quotes; give "
                           "it quotes, or children", index=(e,))
    for g in nodes.tolist():
        if h.children[g]:
            raise InvalidInput("quotes", f"quotes name {h.path(g)!r}, a group with children; a "
                               "quote belongs to an elementary aggregate", index=(g,))
    segment = np.repeat(np.arange(nodes.size), np.diff(np.r_[starts, owner.size]))
    return _Grouped(order, nodes, starts, segment)


def elementary_indices(h: Hierarchy, quotes: Quotes, base: int, periods: Sequence[int],
                       periods_named: Sequence[str], sigmas: Array | None = None,
                       ) -> tuple[Array, Array, Array | None]:
    """Each elementary aggregate's index in ``periods`` on period ``base``, by its formula, the
    number of quotes matched, and (with ``sigmas``, one per node) the model's elementary
    index. Rows are nodes (groups' rows unused). An aggregate without a quote priced in both
    periods is refused, naming it and the periods. The formulas are those of :func:`jevons`,
    :func:`carli` and :func:`dutot`, and the model's power means (:func:`_model_means`), each
    summed over every aggregate in one reduction."""
    g = _grouped(h, quotes)
    p = quotes.prices[g.order]
    p0, pt = p[:, [base]], p[:, list(periods)]
    matched = np.isfinite(p0) & np.isfinite(pt)
    n = np.add.reduceat(matched, g.starts, axis=0).astype(np.float64)
    if np.any(n == 0):
        e, t = (int(x) for x in np.argwhere(n == 0)[0])
        raise InvalidInput("quotes", f"elementary aggregate {h.path(int(g.nodes[e]))!r} has no "
                           f"quote priced in both {periods_named[base]!r} and "
                           f"{periods_named[periods[t]]!r}; an index needs at least one",
                           index=(int(g.nodes[e]),))
    rel = np.where(matched, pt, 1.0) / np.where(matched, p0, 1.0)
    logs = np.where(matched, np.log(rel), 0.0)

    def total(values: Array) -> Array:
        return np.add.reduceat(np.where(matched, values, 0.0), g.starts, axis=0)

    def by(formula: str) -> Array:
        if formula == "jevons":
            return np.exp(total(logs) / n)
        if formula == "carli":
            return total(rel) / n
        return total(np.where(matched, pt, 0.0)) / total(np.where(matched, p0, 0.0))

    index = np.full((h.size, len(periods)), np.nan)
    formulas = np.array([h.formulas[int(e)] for e in g.nodes])
    for name in ELEMENTARY:
        rows = np.flatnonzero(formulas == name)
        if rows.size:
            index[g.nodes[rows]] = by(name)[rows]
    counts = np.zeros((h.size, len(periods)))
    counts[g.nodes] = n
    check_deadline("the elementary aggregates")
    if sigmas is None:
        return index, counts, None
    model = np.full((h.size, len(periods)), np.nan)
    model[g.nodes] = _model_means(logs, matched, n, g, 1.0 - sigmas[g.nodes])
    return index, counts, model


#: Beyond this |t (ln r - centre)| the expm1 form of a power mean could overflow.
_EXPM1_LIMIT = 30.0


def _model_means(logs: Array, matched: Mask, n: Array, g: _Grouped, t: Array) -> Array:
    """The power mean of order ``t_e`` of each aggregate's matched relatives with equal weights,
    all aggregates at once, evaluated as :func:`dualcost.core._means.log_power_mean` does:
    centred on the log mean, by ``expm1``/``log1p`` (full accuracy as ``t`` nears 0), or by a
    max shift where a term could overflow."""
    centre = np.add.reduceat(logs, g.starts, axis=0) / n
    t_q = t[g.segment][:, None]
    z = np.where(matched, t_q * (logs - centre[g.segment]), 0.0)
    t_safe = np.where(t == 0.0, 1.0, t)[:, None]
    small = np.add.reduceat(np.expm1(np.clip(z, -_EXPM1_LIMIT, _EXPM1_LIMIT)), g.starts,
                            axis=0) / n
    out = centre + np.log1p(small) / t_safe
    big = np.maximum.reduceat(np.abs(z), g.starts, axis=0) >= _EXPM1_LIMIT
    if np.any(big):
        top = np.maximum.reduceat(np.where(matched, z, -np.inf), g.starts, axis=0)
        shifted = np.where(matched, np.exp(np.minimum(z - top[g.segment], 0.0)), 0.0)
        out = np.where(big, centre + (top + np.log(np.add.reduceat(shifted, g.starts, axis=0)
                                                    / n)) / t_safe, out)
    return np.exp(np.where(t[:, None] == 0.0, centre, out))


def unit_notices(h: Hierarchy, quotes: Quotes) -> list[Notice]:
    """A notice for each Dutot aggregate whose quotes are not all in one stated unit: the ratio
    of average prices then depends on the units chosen (CPI Manual 2004, 20.37-20.40)."""
    out = []
    for e in h.elementary:
        if h.formulas[e] != "dutot":
            continue
        units = {u for u, a in zip(quotes.units, quotes.aggregate, strict=True) if a == e}
        if len(units) > 1:
            shown = ", ".join(sorted(repr(u) if u else "none stated" for u in units))
            out.append(Notice("dutot_mixed_units", f"Elementary aggregate {h.path(e)!r} uses "
                              f"Dutot over quotes in different units ({shown}): its index "
                              "depends on the units the prices are stated in; Jevons does "
                              "not."))
    return out


# -- upper levels -------------------------------------------------------------------------------


def upper_indices(h: Hierarchy, elementary: Array, shares: Array) -> Array:
    """Every group's index as the ``shares``-weighted mean of its children's (Young with the
    shares of ``b``; Lowe with the price-updated shares), bottom-up; rows are nodes."""
    out = np.array(elementary, copy=True)
    for g in h.order:
        kids = list(h.children[g])
        if kids:
            w = shares[kids]
            out[g] = np.sum(w[:, None] * out[kids], axis=0) / np.sum(w)
    return out


def group_shares(h: Hierarchy, shares: Array) -> Array:
    """Shares of the elementary aggregates summed up the tree: every node's share."""
    out = np.where([not kids for kids in h.children], shares, 0.0)
    for g in h.order:
        if h.children[g]:
            out[g] = np.sum(out[list(h.children[g])])
    return out


def price_updated(h: Hierarchy, shares: Array, at_b: Array) -> Array:
    """``s_e^{0b} = (s_e^b / I_e^{0:b}) / sum (s^b / I^{0:b})`` for the elementary aggregates,
    summed up the tree (CPI Manual 2004, 9.9-9.16)."""
    leaves = np.zeros(h.size)
    ea = list(h.elementary)
    leaves[ea] = shares[ea] / at_b[ea]
    leaves /= np.sum(leaves)
    return group_shares(h, leaves)


# -- the model ----------------------------------------------------------------------------------


def group_sigmas(h: Hierarchy, by_level: Sequence[float] | None) -> Array | None:
    """Each node's sigma: its own, else its level's; ``None`` when no node has one and no level
    is given (the comparison is then left out). An elementary aggregate without either takes 1
    (Jevons is then its model index). A group without either is refused."""
    levels = list(by_level or [])
    for depth, sigma in enumerate(levels):
        if not (np.isfinite(sigma) and sigma >= 0.0):
            raise InvalidInput("sigma_by_level", f"level {depth} has sigma {sigma:g}; an "
                               "elasticity of substitution is 0 or more", index=depth)
    if not levels and all(s is None for s in h.sigmas):
        return None
    out = np.ones(h.size)
    for k in range(h.size):
        own = h.sigmas[k]
        level = levels[h.depths[k]] if h.depths[k] < len(levels) else None
        chosen = own if own is not None else level
        if chosen is None and h.children[k]:
            raise InvalidInput("sigma", f"group {h.path(k)!r} has no sigma and its level "
                               f"({h.depths[k]}, the root 0) has none in sigma_by_level; "
                               "give every group its elasticity of substitution", index=k)
        if chosen is not None:
            out[k] = chosen
    return out


def model_tree(h: Hierarchy, sigmas: Array) -> tuple[dict[str, object], list[int]]:
    """The tree as :func:`~dualcost.core.preferences.nested_ces.parse_tree` reads it: groups
    with their sigma, elementary aggregates as item positions; and the node of each item."""
    items = list(h.elementary)
    position = {e: i for i, e in enumerate(items)}
    spec: dict[int, dict[str, object]] = {
        g: {"name": h.names[g], "sigma": float(sigmas[g]), "children": []} for g in h.groups}
    for g in h.groups:
        kids: list[object] = []
        for c in h.children[g]:
            kids.append(spec[c] if h.children[c] else position[c])
        spec[g]["children"] = kids
    return spec[h.root], items


def konus_indices(h: Hierarchy, sigmas: Array, shares: Array, at_b: Array,
                  at_t: Array) -> Array:
    """The Konüs index of every node from ``0`` to each period: ``P_g(p^t) / P_g(p^0)`` of the
    nested CES model calibrated to ``shares`` at the model's elementary prices ``at_b`` (all on
    period 0: ``p^0 = 1``); ``at_t`` holds the model's elementary indices (nodes x periods)."""
    spec, items = model_tree(h, sigmas)
    model = NestedCES(shares[items] / np.sum(shares[items]), at_b[items],
                      parse_tree(spec, len(items)))
    position = {name: k for k, name in enumerate(h.names)}
    rows = [position[str(g["name"])] for g in model.groups()]
    out = np.array(at_t, copy=True)
    start = model.group_cost_relatives(np.ones(len(items)))
    for t in range(at_t.shape[1]):
        out[rows, t] = model.group_cost_relatives(at_t[items, t]) / start
        check_deadline("the Konüs index of each node")
    return out


# -- segments and chain-linking -----------------------------------------------------------------


@dataclass(frozen=True)
class Link:
    """One segment's definition: its price reference period (a position among the periods),
    the weights given at each node (``NaN``: not given) and the periods the weights refer to
    (empty: the price reference period itself, so no price updating)."""

    period: int
    weights: npt.ArrayLike
    weight_reference: tuple[int, ...] = ()


@dataclass(frozen=True)
class Segment:
    """One segment as computed: its link period, the periods it covers, the shares as given
    (``shares``, every node's share of the basket) and as used (``used``: price-updated for
    Lowe), the direct index and Konüs index on the link period (nodes x covered periods), and
    the quotes matched per elementary aggregate."""

    link: int
    periods: tuple[int, ...]
    weight_reference: tuple[int, ...]
    shares: Array
    used: Array
    index: Array
    konus: Array | None
    quotes_matched: Array
    #: Every node's index in the weight reference period on the link (the mean over its
    #: periods): elementary aggregates by their formula, groups by the upper formula.
    at_reference: Array | None = None
    #: The model's elementary indices in the weight reference period and the covered periods,
    #: kept when the Konüs index waits for fitted sigmas (:func:`segment_konus`).
    model_reference: Array | None = None
    model_covered: Array | None = None
    leaf_shares: Array | None = None


def compute_segment(h: Hierarchy, quotes: Quotes, link: Link, covered: Sequence[int], *,
                    upper: str, sigmas: Array | None, weights: Weights,
                    names: Sequence[str], konus: bool = True) -> Segment:
    """One segment: elementary indices on the link period, the weights price-updated (Lowe) or
    not (Young), the upper levels, and the model's Konüs index at every node (``konus``
    False: left for :func:`segment_konus`, with the model's elementary indices kept)."""
    reference = list(link.weight_reference) or [link.period]
    span = list(covered) + reference
    index, counts, model = elementary_indices(h, quotes, link.period, span, names, sigmas)
    at_b = np.mean(index[:, len(covered):], axis=1)
    given = group_shares(h, weights.shares)
    used = price_updated(h, weights.shares, at_b) if upper == "lowe" else given
    levels = upper_indices(h, index[:, : len(covered)], used)
    at_reference = np.mean(upper_indices(h, index[:, len(covered):], used), axis=1)
    model_b = model_t = None
    if model is not None:
        model_b, model_t = np.mean(model[:, len(covered):], axis=1), model[:, : len(covered)]
    segment = Segment(link.period, tuple(covered), tuple(link.weight_reference), given, used,
                      levels, None, counts[:, : len(covered)], at_reference, model_b, model_t,
                      weights.shares)
    if konus and sigmas is not None:
        return segment_konus(h, segment, sigmas)
    return segment


def segment_konus(h: Hierarchy, segment: Segment, sigmas: Array) -> Segment:
    """The segment with the model's Konüs index at every node under ``sigmas``."""
    assert segment.model_reference is not None and segment.model_covered is not None
    assert segment.leaf_shares is not None
    konus = konus_indices(h, sigmas, segment.leaf_shares, segment.model_reference,
                          segment.model_covered)
    return replace(segment, konus=konus)


def chain(segments: Sequence[Segment], attr: str) -> Array:
    """``X_t = prod_{i<k} S_i(L_{i+1}) S_k(t)``: each segment's direct index (``index`` or
    ``konus``) chained onto the level its link period reached (the link period's column is
    the previous segment's last)."""
    parts, level = [], None
    for k, s in enumerate(segments):
        values: Array = getattr(s, attr)
        if level is None:
            level = np.ones(values.shape[0])
        chained = values * level[:, None]
        parts.append(chained if k == 0 else chained[:, 1:])
        level = chained[:, -1]
    return np.concatenate(parts, axis=1)
