"""Multilateral (transitive) price indices over a panel: GEKS on Fisher or Törnqvist links.

For periods ``s, t`` of a window ``W`` of ``K`` periods, with a bilateral index ``P(s, t)`` that
satisfies time reversal (``P(t, s) = 1 / P(s, t)``), the GEKS index is the geometric mean over
every period ``k`` of the window of the indirect comparisons through ``k``:

    P_GEKS(s, t) = prod_{k in W} ( P(s, k) P(k, t) )^(1 / K)

(Gini 1931; Eltetö and Köves 1964; Szulc 1964). On Fisher links it is GEKS proper; on Törnqvist
links it is the index of Caves, Christensen and Diewert (1982), often called CCDI. It is
transitive: ``P_GEKS(a, c) = P_GEKS(a, b) P_GEKS(b, c)`` exactly, so it is free of chain drift
within its window. In logarithms, with ``G[s, t] = ln P(s, t)`` antisymmetric,
``ln P_GEKS(s, t) = l_t - l_s`` where ``l_t = mean_k G[k, t]``.

A publication cannot revise past values when a period is added, so a window of ``K`` periods
rolls forward one period at a time and each new window's index is spliced onto the published
series (Ivancic, Diewert and Fox 2011, *Journal of Econometrics* 161(1)). With ``P`` the published
series and ``W_t = {t-K+1, ..., t}`` the window ending in ``t``:

- ``movement`` (the default; Ivancic, Diewert and Fox 2011): ``P_t = P_{t-1} GEKS_W(t-1, t)``;
- ``window`` (Krsinich 2016): ``P_t = P_{t-K+1} GEKS_W(t-K+1, t)``, splicing on the first period
  of the new window;
- ``half`` (de Haan 2015): ``P_t = P_{t-h} GEKS_W(t-h, t)`` with ``h = (K - 1) // 2``, splicing on
  the window's middle period;
- ``mean`` (Diewert and Fox 2018): the geometric mean over ``k = t-K+1, ..., t-1`` of
  ``P_k GEKS_W(k, t)``.

The first ``K`` periods take the first window's GEKS index unchanged. (The attributions of the
window, half and mean splices are recalled from memory.)

Items that come and go: each bilateral link between periods ``s`` and ``t`` uses the items
priced in both (the matched sample), expenditure shares taken over those items. All pairs are
evaluated at once with matrix products over the items, so the cost is ``O(T^2 N)``.
"""

from __future__ import annotations

from collections.abc import Sequence
from typing import Literal

import numpy as np
from numpy.typing import NDArray

from .deadline import check as check_deadline
from .errors import InvalidInput

Array = NDArray[np.float64]
Mask = NDArray[np.bool_]
Link = Literal["fisher", "tornqvist"]
Splice = Literal["movement", "window", "half", "mean"]

SPLICES: tuple[str, ...] = ("movement", "window", "half", "mean")
LINKS: tuple[str, ...] = ("fisher", "tornqvist")


def bilateral_log_matrix(
    prices: Array, quantities: Array, priced: Mask, link: Link, periods: Sequence[str] | None = None
) -> Array:
    """``G[s, t] = ln P(s, t)`` for every pair of periods, on the matched items of each pair.

    ``prices`` and ``quantities`` are ``T`` by ``N``; entries where ``priced`` is false are
    ignored. Fisher: ``P_F = (P_L P_P)^(1/2)`` (Fisher 1922); Törnqvist:
    ``ln P_T = sum_i (w_si + w_ti)/2 ln(p_ti/p_si)`` (Törnqvist 1936), shares over the matched items.
    """
    if link not in LINKS:
        raise InvalidInput("link", f"must be one of {', '.join(LINKS)}, got {link!r}")
    m = priced.astype(np.float64)
    p = np.where(priced, np.nan_to_num(prices), 0.0)
    q = np.where(priced, quantities, 0.0)
    v = p * q
    # A[s, t] = sum_i v_si m_ti: value of period s's basket over the items also priced in t.
    a = v @ m.T
    labels = periods if periods is not None else [str(t) for t in range(p.shape[0])]
    _check_overlap(a, labels)
    if link == "fisher":
        laspeyres = (q @ p.T) / a  # sum p_t q_s / sum p_s q_s, matched items
        back = p @ q.T  # sum p_s q_t, matched items
        _check_overlap(back, labels)
        paasche = a.T / back  # sum p_t q_t / sum p_s q_t
        return 0.5 * (np.log(laspeyres) + np.log(paasche))
    lp = np.where(priced, np.log(np.where(priced, p, 1.0)), 0.0)
    vlp = v * lp
    # sum_i v_si m_ti (lp_ti - lp_si) and sum_i v_ti m_si (lp_ti - lp_si)
    x_s = v @ lp.T - vlp @ m.T
    x_t = m @ vlp.T - lp @ v.T
    return 0.5 * (x_s / a + x_t / a.T)


def _check_overlap(values: Array, periods: Sequence[str]) -> None:
    bad = np.argwhere(~(values > 0.0))
    if bad.size:
        s, t = (int(x) for x in bad[0])
        raise InvalidInput("prices", f"periods {periods[s]!r} and {periods[t]!r} have no item "
                           "priced in both with a quantity above zero, so no bilateral index "
                           "links them", (s,))


def geks_levels(log_matrix: Array) -> Array:
    """``l_t = mean_k G[k, t]``: the GEKS log index of each period, up to a constant.

    ``G`` is made exactly antisymmetric first (it is, up to rounding, for Fisher and Törnqvist
    links, which satisfy time reversal), so that ``l_t - l_s`` is the GEKS formula itself.
    """
    g = 0.5 * (log_matrix - log_matrix.T)
    return np.asarray(np.mean(g, axis=0))


def geks(log_matrix: Array, base: int = 0) -> Array:
    """The GEKS index over the whole span, ``P_GEKS(base, t)`` for every ``t``."""
    levels = geks_levels(log_matrix)
    return np.asarray(np.exp(levels - levels[base]))


def rolling_geks(log_matrix: Array, window: int, splice: Splice = "movement") -> Array:
    """The rolling-window GEKS series with period 0 = 1, spliced as the module docstring says.

    With ``window >= T`` it is the GEKS index over the whole span.
    """
    n_t = log_matrix.shape[0]
    if splice not in SPLICES:
        raise InvalidInput("splice", f"must be one of {', '.join(SPLICES)}, got {splice!r}")
    if window < 2:
        raise InvalidInput("window", f"a GEKS window needs at least 2 periods, got {window}")
    if window >= n_t:
        return geks(log_matrix)
    g = 0.5 * (log_matrix - log_matrix.T)
    out = np.empty(n_t)
    first = np.mean(g[:window, :window], axis=0)
    out[:window] = first - first[0]  # log values
    half = (window - 1) // 2
    for t in range(window, n_t):
        check_deadline("splicing the rolling GEKS windows")
        lo = t - window + 1
        level = np.mean(g[lo : t + 1, lo : t + 1], axis=0)  # l_j for j in the window
        if splice == "movement":
            out[t] = out[t - 1] + level[-1] - level[-2]
        elif splice == "window":
            out[t] = out[lo] + level[-1] - level[0]
        elif splice == "half":
            k = t - half
            out[t] = out[k] + level[-1] - level[k - lo]
        else:
            overlap = np.arange(lo, t)
            out[t] = float(np.mean(out[overlap] + level[-1] - level[overlap - lo]))
    return np.asarray(np.exp(out))
