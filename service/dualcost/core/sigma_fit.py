"""Each group's elasticity of substitution fitted from the index tree's own data: the weights at
each link's weight reference period and the children's price indices between those periods.

The share equation. Within a group ``g`` of a nested CES model (Sato 1967) the share of child
``c`` in the group's spending is ``s_c = delta_c (P_c / P_g)^(1 - sigma_g)`` (Arrow, Chenery,
Minhas and Solow 1961, in share form), ``P_c`` the child's price index; ``sigma_g`` is the
group's Allen elasticity of substitution between any two children (Allen 1938; for CES it is
the one parameter). Taking logs and the change between two weight reference periods
``b_{k-1}`` and ``b_k`` removes the constant weights ``delta_c``:

    D ln s_c = a_{g,k} + (1 - sigma_g) D ln P_c,      a_{g,k} = -(1 - sigma_g) D ln P_g,

for every child ``c`` of ``g``: the changes of ``ln(s_i / s_j)`` are ``(1 - sigma_g)`` times the
changes of ``ln(P_i / P_j)``, written with one effect ``a_{g,k}`` per group and pair of
consecutive links instead of a reference child, so no child is singled out. The slope
``beta = 1 - sigma`` is fitted by least squares with those effects (within each block
``(g, k)`` the changes are centred on their mean; Frisch and Waugh 1933), per group
(``by_group``) or pooled over every group of a level (``by_level``, one sigma per level); the
standard error is the usual OLS one, ``sqrt(RSS / dof / sum x~^2)`` with ``dof = observations -
blocks - 1`` (common practice). With one link pair and one group this is the simple regression
of ``D ln s`` on ``D ln P`` with an intercept (``scipy.stats.linregress``).

The data. ``s_c`` is the child's share of its group's weight at link ``k`` (as given, before any
price updating); ``P_c`` is the child's index in the link's weight reference period (the mean
over its periods) on the common reference of the first link: the chained index at the link
times the index of the weight reference period on the link (the tree's elementary or upper
index, the same figure Lowe price-updates with).

Not identified: a group with one child, a tree with one link, or children whose prices moved in
proportion (no relative price change). Such a group, and one whose estimate is below 0 (outside
the CES model's regular region), takes its fallback sigma; a notice names it and the value.

Why not :mod:`dualcost.core.estimation`: it fits a nested CES jointly on item budget shares of
a panel of budgets by nonlinear least squares. A tree has a few periods of weights per link and
price indices of groups, not items' prices; on those the differenced share equation is linear
in ``1 - sigma`` and has the closed-form estimate and standard error above.
"""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass

import numpy as np
from numpy.typing import NDArray

from .errors import InvalidInput
from .hierarchy import Hierarchy
from .preferences.base import Notice

Array = NDArray[np.float64]
FIT_METHODS = ("by_group", "by_level")


@dataclass(frozen=True)
class GroupData:
    """What a group's fit read: its children (node positions), their shares of the group's
    weight and their price levels (first link = 1) at each link (rows: links)."""

    node: int
    children: tuple[int, ...]
    shares: Array
    prices: Array


@dataclass(frozen=True)
class SigmaEstimate:
    """One fitted sigma: for a group (``by_group``) or a level's groups (``by_level``).
    ``sigma`` and ``standard_error`` are ``None`` where not identified or not estimable;
    ``used`` the sigma the model takes at each of ``nodes``; ``reason`` says why it is not the fit
    (or why there is no standard error)."""

    nodes: tuple[int, ...]
    level: int | None
    sigma: float | None
    standard_error: float | None
    observations: int
    degrees_of_freedom: int
    used: tuple[float, ...]
    fitted: bool
    reason: str | None


@dataclass(frozen=True)
class SigmaFits:
    method: str
    estimates: tuple[SigmaEstimate, ...]
    data: tuple[GroupData, ...]
    sigmas: Array
    notices: tuple[Notice, ...]


def group_data(h: Hierarchy, shares: Sequence[Array], prices: Sequence[Array]) -> list[GroupData]:
    """Each group's children's within-group shares and price levels at every link.
    ``shares[k]`` and ``prices[k]`` hold every node's share of the basket and price level."""
    out = []
    for g in h.groups:
        kids = list(h.children[g])
        s = np.array([sk[kids] / np.sum(sk[kids]) for sk in shares])
        p = np.array([pk[kids] for pk in prices])
        out.append(GroupData(g, tuple(kids), s, p))
    return out


def _blocks(data: GroupData) -> tuple[Array, Array]:
    """The changes between consecutive links, centred within each link pair (rows)."""
    y = np.diff(np.log(data.shares), axis=0)
    x = np.diff(np.log(data.prices), axis=0)
    return (y - y.mean(axis=1, keepdims=True)), (x - x.mean(axis=1, keepdims=True))


def least_squares(groups: Sequence[GroupData]) -> tuple[float | None, float | None, int, int,
                                                        str | None]:
    """``(sigma, standard_error, observations, dof, reason)`` of the pooled share equation
    over ``groups`` (module docstring); ``sigma`` None when not identified."""
    xs, ys, blocks = [], [], 0
    for d in groups:
        if len(d.children) < 2 or d.shares.shape[0] < 2:
            continue
        y, x = _blocks(d)
        xs.append(x.ravel())
        ys.append(y.ravel())
        blocks += y.shape[0]
    n = int(sum(x.size for x in xs))
    if not n:
        return None, None, 0, 0, _why_not(groups)
    x, y = np.concatenate(xs), np.concatenate(ys)
    sxx = float(np.dot(x, x))
    if sxx <= 1e-24 * max(1, n):
        return None, None, n, 0, ("the children's price indices moved in proportion between "
                                  "the links: no change of relative prices to fit on")
    beta = float(np.dot(x, y)) / sxx
    dof = n - blocks - 1
    if dof <= 0:
        return 1.0 - beta, None, n, 0, ("an exact fit (as many parameters as observations): "
                                        "no standard error")
    rss = float(np.sum((y - beta * x) ** 2))
    return 1.0 - beta, float(np.sqrt(rss / dof / sxx)), n, dof, None


def _why_not(groups: Sequence[GroupData]) -> str:
    if groups and all(d.shares.shape[0] < 2 for d in groups):
        return "one link only: the weights of one period say nothing about substitution"
    return "one child only: no share changes within the group to fit on"


def fit_sigmas(h: Hierarchy, shares: Sequence[Array], prices: Sequence[Array],
               fallback: Array, fallback_source: Sequence[str], *,
               method: str = "by_group") -> SigmaFits:
    """Fit every group's sigma (``by_group``) or every level's (``by_level``) from the links'
    shares and price levels; a group whose sigma is not identified, or is fitted below 0,
    takes ``fallback[g]`` (described by ``fallback_source[g]``) with a notice naming it.
    Returns every node's sigma as used (elementary aggregates keep ``fallback``)."""
    if method not in FIT_METHODS:
        raise InvalidInput("sigma_fit", f"is {method!r}; choose one of {', '.join(FIT_METHODS)}")
    data = group_data(h, shares, prices)
    sets: list[tuple[tuple[int, ...], int | None, list[GroupData]]]
    if method == "by_group":
        sets = [((d.node,), None, [d]) for d in data]
    else:
        levels = sorted({h.depths[d.node] for d in data})
        sets = [(tuple(d.node for d in data if h.depths[d.node] == lv), lv,
                 [d for d in data if h.depths[d.node] == lv]) for lv in levels]
    sigmas = np.array(fallback, dtype=np.float64, copy=True)
    estimates: list[SigmaEstimate] = []
    notices: list[Notice] = []
    for nodes, level, members in sets:
        est = _estimate(h, nodes, level, members, fallback, fallback_source, notices)
        sigmas[list(nodes)] = est.used
        estimates.append(est)
    replaced = [f"{h.names[g]!r} {fallback[g]:g} ({fallback_source[g]}) -> {sigmas[g]:.4g}"
                for e in estimates if e.fitted for g in e.nodes
                if fallback_source[g] != "sigma_fallback"]
    if replaced:
        notices.append(Notice("sigma_fitted_over_given", f"sigma_fit replaces the sigmas given "
                              f"for {len(replaced)} group(s) by their fits (the given values "
                              f"serve only where a fit cannot be had): {'; '.join(replaced)}."))
    return SigmaFits(method, tuple(estimates), tuple(data), sigmas, tuple(notices))


def _estimate(h: Hierarchy, nodes: tuple[int, ...], level: int | None,
              members: list[GroupData], fallback: Array, source: Sequence[str],
              notices: list[Notice]) -> SigmaEstimate:
    sigma, se, n, dof, reason = least_squares(members)
    named = (f"level {level} ({', '.join(repr(h.path(g)) for g in nodes)})"
             if level is not None else repr(h.path(nodes[0])))
    fitted = sigma is not None and sigma >= 0.0
    if sigma is not None and sigma < 0.0:
        reason = (f"the fitted sigma {sigma:.4g} is below 0, outside the CES model's regular "
                  "region (a concave cost function needs sigma >= 0)")
    if not fitted:
        shown = ", ".join(f"{h.names[g]!r}: {fallback[g]:g} ({source[g]})" for g in nodes)
        notices.append(Notice("sigma_not_fitted", f"The sigma of {named} is not fitted: "
                              f"{reason}. The model uses the fallback instead: {shown}."))
    elif se is None:
        notices.append(Notice("sigma_exact_fit", f"The sigma of {named} ({sigma:.4g}) fits "
                              f"its {n} observation(s) exactly: {reason}."))
    used = tuple(float(sigma) if fitted and sigma is not None else float(fallback[g])
                 for g in nodes)
    return SigmaEstimate(nodes, level, sigma, se, n, dof, used, fitted, reason)


__all__ = ["FIT_METHODS", "GroupData", "SigmaEstimate", "SigmaFits", "fit_sigmas",
           "group_data", "least_squares"]
