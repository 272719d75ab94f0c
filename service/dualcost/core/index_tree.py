"""The index of a classification tree over many periods, chain-linked, beside the Konüs index of
a nested CES model on the same tree: one call, :func:`index_tree`.

The formulas are in :mod:`dualcost.core.aggregation` (elementary aggregates, Lowe and Young,
chain-linking, the model) and the tree's rules in :mod:`dualcost.core.hierarchy`. The bias at a
node is ``100 (X_t - K_t)``, index points on reference 100 (``X`` the chained index, ``K`` the
chained Konüs index), as in every answer of the service.
"""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass

import numpy as np
from numpy.typing import NDArray

from .aggregation import (
    Link,
    Quotes,
    Segment,
    chain,
    compute_segment,
    group_sigmas,
    segment_konus,
    unit_notices,
)
from .errors import InvalidInput
from .hierarchy import UPPER_FORMULAS, Hierarchy, check_weights
from .preferences.base import Notice
from .sigma_fit import FIT_METHODS, SigmaFits, fit_sigmas

Array = NDArray[np.float64]


@dataclass(frozen=True)
class IndexTree:
    """The index at every node (rows, in the order the nodes were given) for every period from
    the first link on (``periods``, positions among the periods given): ``index`` the chained
    index and ``konus`` the chained Konüs index (ratios on the first link period; ``None``
    without a model), ``bias_points`` ``100 (index - konus)``; ``segment_of`` the segment of
    each period; ``segments`` as computed; ``notices`` what was done or assumed; ``fits``
    the fitted sigmas, their standard errors and data (with ``sigma_fit``)."""

    hierarchy: Hierarchy
    periods: tuple[int, ...]
    upper: str
    index: Array
    konus: Array | None
    bias_points: Array | None
    segment_of: tuple[int, ...]
    segments: tuple[Segment, ...]
    sigmas: Array | None
    notices: tuple[Notice, ...]
    fits: SigmaFits | None = None


def index_tree(h: Hierarchy, quotes: Quotes, links: Sequence[Link], periods: Sequence[str], *,
               upper: str = "lowe", sigma_by_level: Sequence[float] | None = None,
               tolerance: float = 1e-6, normalise_weights: bool = False,
               sigma_fit: str | None = None, sigma_fallback: float = 1.0) -> IndexTree:
    """Compute the tree's index and its model's Konüs index, segment by segment, and chain them.

    ``periods`` names the periods (their positions index ``quotes.prices``' columns); each link
    starts a segment at its period, the links in time order. With ``sigma_fit`` (``by_group``
    or ``by_level``) every group's sigma is fitted from the links' weights and the tree's own
    indices (:mod:`dualcost.core.sigma_fit`); a group it cannot identify keeps its own or its
    level's sigma, else ``sigma_fallback``. Errors name the argument (``links``, ``weights``,
    ``quotes``, ``sigma``, ``upper``, ``sigma_fit``, ``sigma_fallback``) and the node or link.
    """
    if upper not in UPPER_FORMULAS:
        raise InvalidInput("upper", f"is {upper!r}; choose one of {', '.join(UPPER_FORMULAS)}")
    if sigma_fit is not None and sigma_fit not in FIT_METHODS:
        raise InvalidInput("sigma_fit", f"is {sigma_fit!r}; choose one of "
                           f"{', '.join(FIT_METHODS)}")
    _check_links(links, periods)
    sources: list[str] = []
    if sigma_fit is None:
        sigmas = group_sigmas(h, sigma_by_level)
    else:
        sigmas, sources = fallback_sigmas(h, sigma_by_level, sigma_fallback)
    notices = _assumptions(h, quotes, links, sigmas, periods, sigma_by_level)
    segments = []
    for k, link in enumerate(links):
        end = links[k + 1].period if k + 1 < len(links) else len(periods) - 1
        label = f" (link {k + 1}, {periods[link.period]!r})" if len(links) > 1 else ""
        try:
            weights = check_weights(h, link.weights, tolerance=tolerance,
                                    normalise=normalise_weights, label=label)
        except InvalidInput as exc:
            raise InvalidInput(exc.parameter, exc.rule, index=(k, *_tuple(exc.index))) from exc
        notices += weights.notices
        segments.append(compute_segment(h, quotes, link, range(link.period, end + 1),
                                        upper=upper, sigmas=sigmas, weights=weights,
                                        names=periods, konus=sigma_fit is None))
    index = chain(segments, "index")
    fits = None
    if sigma_fit is not None and sigmas is not None:
        fits = fit_sigmas(h, [s.shares for s in segments], _reference_levels(segments, index),
                          sigmas, sources, method=sigma_fit)
        sigmas = fits.sigmas
        notices += fits.notices
        segments = [segment_konus(h, s, sigmas) for s in segments]
    konus = None if sigmas is None else chain(segments, "konus")
    bias = None if konus is None else 100.0 * (index - konus)
    segment_of = [0] + [k for k, s in enumerate(segments) for _ in s.periods[1:]]
    return IndexTree(h, tuple(range(links[0].period, len(periods))), upper, index, konus, bias,
                     tuple(segment_of), tuple(segments), sigmas, tuple(notices), fits)


def fallback_sigmas(h: Hierarchy, sigma_by_level: Sequence[float] | None,
                    fallback: float) -> tuple[Array, list[str]]:
    """Each node's sigma where a fit cannot be had: its own, else its level's, else
    ``fallback``; and where each came from, in words."""
    if not (np.isfinite(fallback) and fallback >= 0.0):
        raise InvalidInput("sigma_fallback", f"is {fallback:g}; an elasticity of substitution "
                           "is 0 or more")
    levels = list(sigma_by_level or [])
    for depth, sigma in enumerate(levels):
        if not (np.isfinite(sigma) and sigma >= 0.0):
            raise InvalidInput("sigma_by_level", f"level {depth} has sigma {sigma:g}; an "
                               "elasticity of substitution is 0 or more", index=depth)
    out, sources = np.full(h.size, fallback), ["sigma_fallback"] * h.size
    for k in range(h.size):
        if h.sigmas[k] is not None:
            out[k], sources[k] = float(h.sigmas[k] or 0.0), "its own sigma"
        elif h.depths[k] < len(levels):
            out[k], sources[k] = levels[h.depths[k]], f"sigma_by_level[{h.depths[k]}]"
        elif not h.children[k]:
            out[k], sources[k] = 1.0, "1, the Jevons model of an elementary aggregate"
    return out, sources


def _reference_levels(segments: Sequence[Segment], index: Array) -> list[Array]:
    """Every node's price level in each link's weight reference period on the first link:
    the chained index at the link times the index of the weight reference period on it."""
    first = segments[0].link
    out = []
    for s in segments:
        assert s.at_reference is not None
        out.append(index[:, s.link - first] * s.at_reference)
    return out


def _tuple(index: object) -> tuple[int, ...]:
    return tuple(index) if isinstance(index, tuple) else ()


def _check_links(links: Sequence[Link], periods: Sequence[str]) -> None:
    if not links:
        raise InvalidInput("links", "give at least one link: the price reference period and "
                           "the weights of the first segment")
    for k, link in enumerate(links):
        if k and link.period <= links[k - 1].period:
            raise InvalidInput("links", f"link {k + 1} is at {periods[link.period]!r}, not "
                               f"after link {k}'s {periods[links[k - 1].period]!r}; links go "
                               "in time order, one per segment", index=(k, "period"))
        if link.weight_reference and max(link.weight_reference) > link.period:
            raise InvalidInput("links", f"link {k + 1}'s weights refer to a period after its "
                               f"price reference period {periods[link.period]!r}; weights "
                               "come from earlier (or the same) periods",
                               index=(k, "weight_reference"))
    if links[-1].period >= len(periods) - 1 and len(links) > 1:
        raise InvalidInput("links", f"the last link is at the last period "
                           f"{periods[links[-1].period]!r}; a segment needs a period after its "
                           "link", index=(len(links) - 1, "period"))


def _assumptions(h: Hierarchy, quotes: Quotes, links: Sequence[Link], sigmas: Array | None,
                 periods: Sequence[str], sigma_by_level: Sequence[float] | None,
                 ) -> list[Notice]:
    """What the computation assumes, said once each."""
    out = unit_notices(h, quotes)
    if sigmas is None:
        out.append(Notice("model_not_given", "No node has a sigma and no sigma_by_level was "
                          "given: the Konüs index of the nested CES model is not computed."))
    else:
        levels = len(sigma_by_level or ())
        assumed = [h.names[e] for e in h.elementary
                   if h.sigmas[e] is None and h.depths[e] >= levels]
        if assumed:
            out.append(Notice("elementary_sigma_assumed", f"{len(assumed)} elementary "
                              "aggregate(s) have no sigma, of their own or of their level: the "
                              "model takes 1 there, so their model index is the Jevons index: "
                              f"{', '.join(repr(a) for a in assumed[:10])}"
                              + (" and more." if len(assumed) > 10 else ".")))
    gaps = tuple(int(j) for j in np.flatnonzero(~np.all(np.isfinite(quotes.prices), axis=1)))
    if gaps:
        out.append(Notice("quotes_not_priced", f"{len(gaps)} quote(s) have no price in some "
                          "periods: each elementary index uses the quotes priced in both its "
                          "periods (the matched sample), which is the same as imputing a "
                          "missing price by its aggregate's own index over the other quotes.",
                          gaps))
    for k, link in enumerate(links):
        if not link.weight_reference:
            out.append(Notice("weights_at_price_reference", f"Link {k + 1} "
                              f"({periods[link.period]!r}) gives no weight reference period: "
                              "its weights are taken to refer to its price reference period, "
                              "so they are not price-updated (Lowe equals Young there)."))
    return out
