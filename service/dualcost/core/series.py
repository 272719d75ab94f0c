"""Index series over many periods: fixed-base and chained formula series beside the Konüs series
of a model calibrated to the base period, with bias per period and per year, chain drift, GEKS
series, items that come and go, and Lowe and Young series from an earlier weight-reference period.

Definitions (``b`` the base, or price-reference, period; ``r`` the index reference period):

- Fixed-base series of a formula ``P``: ``P(b, t)`` for every period ``t``, the direct comparison.
- Chained series: the period-to-period links ``P(t-1, t)`` multiplied, ``C_t = prod_{k<=t} P(k-1, k)``,
  divided by ``C_b`` so that it starts from the same base (CPI Manual 2004, 15.83-15.88 and ch. 9).
- Both are published on the index reference period ``r``: ``100 X_t / X_r`` (or ``X_t / X_r``).
- Konüs series of a model calibrated to the base budget (Konüs 1924), ``e`` its expenditure and
  ``v`` its indirect utility function, ``u_t = v(p_t, m_t)`` with ``m_t`` period t's spending:
  fixed base at base-period utility ``e(p_t, u_b) / e(p_b, u_b)`` (``base``), at the compared
  period's utility ``e(p_t, u_t) / e(p_b, u_t)`` (``current``) and at the midpoint standard ``u*``
  with ``e(p_b, u*) = (e(p_b, u_b) e(p_b, u_t))^(1/2)`` (``midpoint``); chained, each link
  ``t-1 -> t`` at its own starting period's utility ``u_{t-1}`` (``base``), at ``u_t``
  (``current``) or at their midpoint. For homothetic models all six coincide.
- Bias of a series against the Konüs series its formula approximates (``compared_with``: base
  for Laspeyres-type and unweighted formulas, current for Paasche, midpoint for the symmetric
  ones; fixed base against fixed base, chained against chained): ``100 (P_t - K_t)`` index points
  on reference 100, and ``100 (P_t / K_t - 1)`` percent.
- Average annual bias over a span from period ``a`` to ``c`` of ``Y`` years
  (``Y = (time_c - time_a) / periods per year``): the gap between the two average annual rates
  of change, ``100 [ (P_c/P_a)^(1/Y) - (K_c/K_a)^(1/Y) ]``, in percentage points per year, the
  way the trade reports substitution bias (e.g. Boskin et al. 1996).
- Chain drift: ``100 (C_t / P(b, t) - 1)`` percent, chained against direct; circularity failure
  over a loop of periods ``l_0, l_1, ..., l_k``: ``prod_j P(l_j, l_{j+1}) P(l_k, l_0) - 1``,
  zero for a transitive index (Fisher 1922 called it the circular test; CPI Manual 2004, 15.76).

Items that come and go (the matched-sample rule): every bilateral comparison, whether a fixed-base
comparison, a chain link or a GEKS link, uses the items priced in both of its periods; an item
priced in only one of them is left out of that comparison, which for each formula is the same as
imputing the item's price change by the formula's own index over the matched items (``RULES``
says so per formula). The answer lists every period and item concerned (``item_treatment``).
The Feenstra (1994) series instead measures the gain from items that arrive and the loss from
items that leave for a CES consumer (see :mod:`dualcost.core.new_goods`).

Weight-reference period ``w`` before the price-reference period ``b`` (Lowe and Young series):
the Lowe index prices the basket ``q_w``, ``sum p_t q_w / sum p_b q_w``; the Young index averages
price relatives with period ``w``'s expenditure shares, ``sum s_w (p_t / p_b)``. Offices that keep
the basket update the shares from ``w`` to ``b`` by the price change in between,
``s_i^(w->b) = s_i^w (p_ib / p_iw) / sum_j s_j^w (p_jb / p_jw)``; the Young formula with these
price-updated shares is the Lowe index (CPI Manual 2004, 15.33-15.37 and 9.9-9.16). The answer
gives both sets of shares.
"""

from __future__ import annotations

from collections.abc import Callable, Mapping, Sequence
from dataclasses import dataclass, field
from typing import Any, TypeVar

import numpy as np
import numpy.typing as npt
from numpy.typing import NDArray

from .changes import Calendar, Changes, Rebase, changes_of
from .comparison import WeightReference
from .deadline import check as check_deadline
from .errors import DualcostError, InvalidInput, NumericalFailure
from .indices import (
    GEKS_RULE,
    REGISTRY,
    IndexData,
    IndexFormula,
    Need,
    Target,
    check_new_goods_sigma,
    formulas_for,
    matched_sample,
)
from .konus import price_change
from .multilateral import Splice, bilateral_log_matrix, geks, rolling_geks
from .preferences import BaseBudget, Notice, Preferences, calibrate
from .revealed_bounds import RevealedPreference, revealed_preference
from .series_panel import PERIODS_PER_YEAR, Array, Panel
from .validity import REGULAR, Validity, assess

#: The series' names, titles, targets and rules come from the formula registry.
SERIES_FORMULAS: tuple[str, ...] = formulas_for("series")
#: The multilateral series, named like formulas so that ``formulas`` can ask for them.
GEKS_SERIES: tuple[str, ...] = tuple(n for n in SERIES_FORMULAS if REGISTRY[n].kind == "multilateral")
TARGETS: tuple[Target, ...] = ("base", "current", "midpoint")
#: The rule for items that come and go, per series, in words (see the module docstring).
RULES: dict[str, str] = {name: REGISTRY[name].rule for name in SERIES_FORMULAS}
_V = TypeVar("_V")

MODEL_RULE = ("The model is calibrated to the items priced in the base period; items first "
              "priced later are outside it. A model item not priced in a period is valued at its "
              "nearest observed price (the last earlier one, else the first later one), as "
              "offices carry a temporarily missing price forward (CPI Manual 2004, ch. 7).")
# -- results -----------------------------------------------------------------------------------


@dataclass(frozen=True)
class FormulaSeries:
    """One formula's fixed-base and chained series (on the reference scale) and its links."""

    name: str
    title: str
    target: Target
    fixed_base: Array
    chained: Array
    links: Array  # P(t-1, t) for t = 1..T-1, as ratios
    rule: str


@dataclass(frozen=True)
class KonusSeries:
    """The model's Konüs series, fixed base and chained, at each living standard (see above)."""

    family: str
    homothetic: bool
    fixed_base: dict[str, Array]
    chained: dict[str, Array]
    incomes: Array  # m_t, spending on the model's items
    utilities: Array  # u_t = v(p_t, m_t), the model's own scale
    items: tuple[int, ...]  # panel positions of the model's items
    carried_from: Array  # (T, n_model): period whose price was used, -1 where priced
    rule: str = MODEL_RULE
    #: Per period, whether the model is regular at that period's prices and spending (items
    #: named by panel position). Where a period is not, the published series carry NaN: its
    #: fixed-base values, and the chained values from it on (:func:`withhold_irregular`).
    validity: tuple[Validity, ...] = ()


@dataclass(frozen=True)
class Multilateral:
    """A GEKS series over the whole span, and rolling-window spliced where a window is set."""

    name: str
    link: str
    full_span: Array
    rolling: Array | None
    window: int | None
    splice: str
    rule: str = GEKS_RULE


@dataclass(frozen=True)
class Bias:
    """A series' gap to its Konüs series, per period."""

    series: str
    kind: str  # fixed_base | chained | full_span | rolling
    compared_with: Target
    points: Array
    percent: Array


@dataclass(frozen=True)
class AnnualBias:
    """Average annual rates of change over the span and their gap, in percentage points."""

    series: str
    kind: str
    compared_with: Target
    rate_percent: float
    konus_rate_percent: float
    bias_pp: float


@dataclass(frozen=True)
class Span:
    start: int
    end: int
    years: float | None
    frequency: str | None
    periods_per_year: int | None


@dataclass(frozen=True)
class ChainDrift:
    """Chained against direct per formula, and the circularity failure over a loop."""

    drift_percent: dict[str, Array]
    loop: tuple[int, ...]
    loop_product: dict[str, float]
    periods_with_base_prices: tuple[int, ...]


@dataclass(frozen=True)
class ItemTreatment:
    """What was done with one item in one period (only the entries where it was not used fully).

    ``fixed_base``: ``used`` or ``left_out`` of the comparison with the base period; ``chained``:
    of the link from the previous period (``none`` in the first period); ``model``: ``used``,
    ``price_carried`` (from period ``carried_from``), ``outside_model`` or ``no_model``.
    """

    period: int
    item: int
    priced: bool
    fixed_base: str
    chained: str
    model: str
    carried_from: int | None


@dataclass(frozen=True)
class WeightShares:
    """Weight-reference shares and their price-updated form (``NaN`` where not defined)."""

    period: int | None
    shares: Array
    price_updated: Array | None


@dataclass(frozen=True)
class SeriesChanges:
    """The change measures of one published series (:mod:`dualcost.core.changes`):
    ``series`` a formula, GEKS method or ``konus``; ``kind`` fixed_base, chained, full_span or
    rolling; ``standard`` the Konüs living standard (None for the others)."""

    series: str
    kind: str
    standard: Target | None
    changes: Changes


@dataclass(frozen=True)
class IndexSeries:
    """Everything :func:`index_series` returns; see the module docstring for each definition."""

    periods: tuple[str, ...]
    items: tuple[str, ...]
    base: int
    reference: int
    reference_value: float
    formulas: dict[str, FormulaSeries]
    konus: KonusSeries | None
    multilateral: list[Multilateral]
    bias: list[Bias]
    annual_bias: list[AnnualBias]
    span: Span
    chain_drift: ChainDrift
    item_treatment: list[ItemTreatment]
    weights: WeightShares | None
    lloyd_moulton_sigma: float | None
    new_goods_sigma: float | None
    notices: list[Notice] = field(default_factory=list)
    #: Change measures of every published series, and the calendar and rebase they used.
    changes: list[SeriesChanges] = field(default_factory=list)
    calendar: Calendar | None = None
    rebase: Rebase | None = None


# -- the model and its base budget ----------------------------------------------------------------


def base_budget(panel: Panel, base: int) -> tuple[BaseBudget, tuple[int, ...]]:
    """The base period's budget over the items priced in it, and those items' panel positions."""
    if not panel.has_quantities[base]:
        raise InvalidInput("quantities", f"the base period {panel.periods[base]!r} has prices "
                           "only: the model is calibrated to the base budget, so give its "
                           "quantities or expenditures", (base,))
    items = tuple(int(i) for i in np.flatnonzero(panel.priced[base]))
    idx = list(items)
    return BaseBudget.from_quantities(panel.prices[base, idx], panel.quantities[base, idx]), items


def calibrate_to_base(panel: Panel, base: int, family: str,
                      parameters: Mapping[str, Any] | None = None) -> Preferences:
    """Calibrate a family to the base period's budget (:func:`preferences.calibrate`)."""
    budget, _ = base_budget(panel, base)
    return calibrate(family, budget, parameters)


# -- bilateral comparisons over matched items ------------------------------------------------------


@dataclass(frozen=True)
class _Weights:
    quantities: Array | None
    shares: Array | None


def _check_defined(values: Array, title: str, pairs: Sequence[tuple[int, int]],
                   periods: Sequence[str]) -> None:
    bad = np.flatnonzero(~(np.isfinite(values) & (values > 0.0)))
    if bad.size:
        s, t = pairs[int(bad[0])]
        raise InvalidInput("prices", f"the {title} index from period {periods[s]!r} to "
                           f"{periods[t]!r} is undefined: the two periods have no item priced in "
                           "both with the quantities or weights this formula needs", (t,))


class _Comparer:
    """Bilateral comparisons between any pairs of periods of one panel, per formula.

    Each comparison is over the items priced in both of its periods (:func:`matched_sample`),
    or, for a formula that needs ``availability`` (Feenstra's), over the items priced in each.
    The data of a list of pairs is built once and shared by every formula that compares them.
    """

    def __init__(self, panel: Panel, quantities: Array, weights: _Weights, sigma: float | None,
                 new_goods_sigma: float | None) -> None:
        self.panel = panel
        self.prices = panel.filled_prices()
        self.quantities = quantities
        self.weights = weights
        self.sigma = sigma
        self.new_goods_sigma = new_goods_sigma
        self._data: dict[tuple[tuple[tuple[int, int], ...], bool], IndexData] = {}

    def __call__(self, name: str, pairs: Sequence[tuple[int, int]]) -> Array:
        """``P(s, t)`` for each pair, prices filled (1 where not priced), quantities 0 there."""
        formula = REGISTRY[name]
        # Undefined comparisons (no matched item) come out as NaN and are refused just below.
        with np.errstate(divide="ignore", invalid="ignore", over="ignore"):
            data = self._pairs(tuple(pairs), "availability" in formula.requires)
            values = np.asarray(formula.compute(data), dtype=np.float64)
        _check_defined(values, formula.title, pairs, self.panel.periods)
        return values

    def _pairs(self, pairs: tuple[tuple[int, int], ...], available: bool) -> IndexData:
        """The data of these pairs, built at the first formula and kept for the others, which
        then share its arrays and its shares and relatives instead of gathering them again."""
        key = (pairs, available)
        if key not in self._data:
            s = np.fromiter((a for a, _ in pairs), dtype=np.intp, count=len(pairs))
            t = np.fromiter((b for _, b in pairs), dtype=np.intp, count=len(pairs))
            pr = self.panel.priced
            p0, p1, q0, q1 = self.prices[s], self.prices[t], self.quantities[s], self.quantities[t]
            if available:
                data = IndexData(p0, p1, q0, q1, available0=pr[s], available1=pr[t],
                                 new_goods_sigma=self.new_goods_sigma)
            else:
                data = matched_sample(p0, p1, q0, q1, pr[s] & pr[t],
                                      weight_quantities=self.weights.quantities,
                                      weight_shares=self.weights.shares, sigma=self.sigma)
            self._data[key] = data
        return self._data[key]


# -- Konüs series -------------------------------------------------------------------------------


def _carry_prices(panel: Panel, items: Sequence[int]) -> tuple[Array, Array]:
    """Prices of the model's items with each gap filled by the nearest observed price."""
    idx = list(items)
    prices = panel.prices[:, idx]
    priced = panel.priced[:, idx]
    n_t = prices.shape[0]
    rows = np.arange(n_t)[:, None]
    last = np.maximum.accumulate(np.where(priced, rows, -1), axis=0)
    nxt = np.minimum.accumulate(np.where(priced, rows, n_t)[::-1], axis=0)[::-1]
    source = np.where(last >= 0, last, nxt)
    cols = np.arange(prices.shape[1])[None, :]
    filled = prices[source, cols]
    return filled, np.where(priced, -1, source)


def _at_period(panel: Panel, t: int, fn: Callable[[], _V]) -> _V:
    """``fn()``, with an error of the model's named by period ``t``."""
    check_deadline(f"evaluating the model at period {panel.periods[t]!r}")
    try:
        return fn()
    except InvalidInput as exc:
        raise InvalidInput("prices", f"the model cannot be evaluated at period "
                           f"{panel.periods[t]!r}: {exc.rule}", (t,)) from exc


def _over_periods(panel: Panel, periods: npt.ArrayLike,
                  evaluate: Callable[[NDArray[np.intp]], Array]) -> Array:
    """``evaluate(periods)``: the model over all the periods in one broadcast call. On an
    error, the periods are evaluated one at a time to find the first that fails, so that the
    error names it as evaluating period by period always did."""
    at = np.asarray(periods, dtype=np.intp)
    check_deadline(f"evaluating the model over {at.size} period(s)")
    try:
        return evaluate(at)
    except DualcostError as exc:
        failure = exc
    for t in at:
        _at_period(panel, int(t), lambda t=t: evaluate(np.array([t])))  # type: ignore[misc]
    raise failure


def _chain(links: Array, base: int) -> Array:
    levels = np.concatenate(([1.0], np.cumprod(links)))
    return np.asarray(levels / levels[base])


def konus_series(model: Preferences, panel: Panel, base: int, quantities: Array,
                 items: Sequence[int]) -> KonusSeries:
    """The model's Konüs series, fixed base and chained (module docstring), on base = 1.

    The model is evaluated over the period axis (prices ``(T, N)``), one call per quantity: the
    fixed-base series are the Konüs kernel (:func:`dualcost.core.konus.price_change`) from the
    base period to every period, the chained ones the kernel over the links ``t-1 -> t``.
    """
    if model.n_items != len(items):
        raise InvalidInput("model", f"the model has {model.n_items} items but the base period "
                           f"prices {len(items)}")
    pm, carried = _carry_prices(panel, items)
    idx = list(items)
    spent = np.sum(np.where(panel.priced[:, idx], np.nan_to_num(panel.prices[:, idx]), 0.0)
                   * quantities[:, idx], axis=1)
    m = np.where(panel.has_quantities, spent, spent[base])
    floors = np.broadcast_to(model.income_floor(pm), m.shape)
    short = np.flatnonzero(m <= floors)
    if short.size:
        t = int(short[0])
        raise InvalidInput("quantities", f"spending on the model's items in period "
                           f"{panel.periods[t]!r} ({m[t]:.10g}) does not exceed the model's "
                           f"subsistence cost {floors[t]:.10g} at that period's prices", (t,))
    e, v = model.expenditure, model.indirect_utility
    n_t = panel.n_periods
    every = np.arange(n_t)
    u_b = float(_over_periods(panel, [base], lambda t: v(pm[t], m[t]))[0])
    if model.homothetic:
        costs = _over_periods(panel, every, lambda t: e(pm[t], u_b))
        fixed = costs / costs[base]
        chained = _chain(costs[1:] / costs[:-1], base)
        utilities = m / (costs / u_b)
        return KonusSeries(model.family, True, {k: fixed for k in TARGETS},
                           {k: chained for k in TARGETS}, m, utilities, tuple(items), carried,
                           validity=period_validity(model, pm, m, items))
    u = _over_periods(panel, every, lambda t: v(pm[t], m[t]))
    _over_periods(panel, [base], lambda t: e(pm[t], u[t]))

    def konus(s: NDArray[np.intp], t: NDArray[np.intp]) -> Array:
        change = price_change(model, pm[s], pm[t], m[s], m[t], demands=False)
        return np.stack([change.konus_base, change.konus_current, change.midpoint.konus])

    fixed3 = _over_periods(panel, every, lambda t: konus(np.full_like(t, base), t))
    links = _over_periods(panel, every[1:], lambda t: konus(t - 1, t))
    result = KonusSeries(model.family, False, dict(zip(TARGETS, fixed3, strict=True)),
                         {k: _chain(links[j], base) for j, k in enumerate(TARGETS)}, m, u,
                         tuple(items), carried,
                         validity=period_validity(model, pm, m, items))
    _check_finite_konus(result)
    return result


def period_validity(model: Preferences, prices: Array, incomes: Array,
                    items: Sequence[int]) -> tuple[Validity, ...]:
    """The model's validity at each period's prices and income (its ``regularity`` checks;
    families regular by construction answer at once), with items as panel positions."""
    out = []
    for t in range(prices.shape[0]):
        found = model.regularity(prices[t], float(incomes[t]))
        if not found:
            out.append(REGULAR)
            continue
        out.append(assess(Notice(n.code, n.message, tuple(items[i] for i in n.items))
                          for n in found))
    return tuple(out)


def withhold_irregular(konus: KonusSeries, base: int) -> KonusSeries:
    """The series with NaN where the model is outside its regular region: a fixed-base value
    needs the model regular at the base and at its own period, a chained value at every period
    from the base to its own (the links between them)."""
    ok = np.array([v.regular for v in konus.validity], dtype=bool)
    if ok.all():
        return konus
    n_t = ok.size
    every = np.arange(n_t)
    fixed_ok = ok & ok[base]
    lo, hi = np.minimum(every, base), np.maximum(every, base)
    bad_before = np.concatenate(([0], np.cumsum(~ok)))
    chained_ok = (bad_before[hi + 1] - bad_before[lo]) == 0

    def masked(values: Array, keep: NDArray[np.bool_]) -> Array:
        return np.where(keep, values, np.nan)

    return KonusSeries(konus.family, konus.homothetic,
                       {k: masked(v, fixed_ok) for k, v in konus.fixed_base.items()},
                       {k: masked(v, chained_ok) for k, v in konus.chained.items()},
                       konus.incomes, konus.utilities, konus.items, konus.carried_from,
                       konus.rule, konus.validity)


def _check_finite_konus(k: KonusSeries) -> None:
    for kind in (k.fixed_base, k.chained):
        for target, values in kind.items():
            if not np.all(np.isfinite(values) & (values > 0.0)):
                raise NumericalFailure("konus", f"the model's Konüs series ({target} standard) "
                                       "left the floating-point range; check the magnitudes")


# -- options ------------------------------------------------------------------------------------


def _weights(panel: Panel, quantities: Array, weight_reference: WeightReference | int | None,
             base: int) -> tuple[_Weights, WeightShares | None]:
    """Lowe's basket and Young's shares, and the shares price-updated to the base period."""
    if weight_reference is None:
        return _Weights(None, None), None
    prices = panel.filled_prices()
    period: int | None = None
    qb: Array | None
    pb: Array | None
    wb: Array | None
    if isinstance(weight_reference, (int, np.integer)):
        period = int(weight_reference)
        if period > base:
            raise InvalidInput("weight_reference", f"the weight-reference period "
                               f"{panel.periods[period]!r} is later than the base period "
                               f"{panel.periods[base]!r}; it must be the base or earlier")
        if not panel.has_quantities[period]:
            raise InvalidInput("weight_reference", f"the weight-reference period "
                               f"{panel.periods[period]!r} has prices only; its basket needs "
                               "quantities or expenditures")
        qb = np.where(panel.priced[period], quantities[period], 0.0)
        pb = prices[period]
        wb = pb * qb / float(pb @ qb)
    else:
        qb, pb = weight_reference.quantities, weight_reference.prices
        wb = weight_reference.shares
        if qb is not None and wb is None and pb is not None:
            wb = pb * qb / float(pb @ qb)
    shares = wb if wb is not None else np.full(panel.n_items, np.nan)
    updated = None
    if qb is not None:
        # Price-updated shares s^(w->b) are proportional to s^w p_b / p_w = p_b q_w.
        at_base = panel.priced[base]
        value = np.where(at_base, prices[base] * qb, 0.0)
        total = float(value.sum())
        if total > 0.0:
            updated = np.where(at_base, value / total, np.nan)
    return _Weights(qb, wb), WeightShares(period, shares, updated)


def _choose_formulas(requested: Sequence[str] | None, unmet: set[Need],
                     notices: list[Notice]) -> list[str]:
    explicit = requested is not None
    known = formulas_for("series")
    names = list(requested) if requested is not None else list(known)
    seen: set[str] = set()
    chosen = []
    for i, name in enumerate(names):
        if name not in known:
            raise InvalidInput("formulas", f"unknown series formula {name!r}; known: "
                               f"{', '.join(known)}", i)
        if name in seen:
            raise InvalidInput("formulas", f"formula {name!r} is named twice", i)
        seen.add(name)
        formula = REGISTRY[name]
        missing = formula.missing(unmet, "series")
        if missing is None:
            chosen.append(name)
            continue
        text = f"The {formula.title} series needs {missing}"
        if explicit:
            raise InvalidInput("formulas", text + ", which was not given.", i)
        notices.append(Notice("formula_not_computed", text + "; it was left out."))
    return chosen


def _fill_quantities(panel: Panel, model: Preferences | None, items: Sequence[int], base: int,
                     notices: list[Notice]) -> Array:
    """Observed quantities; in prices-only periods, the model's demands at base income."""
    q = panel.quantities.copy()
    missing = np.flatnonzero(~panel.has_quantities)
    if model is None or not missing.size:
        return q
    pm, _ = _carry_prices(panel, items)
    idx = np.asarray(items)
    m_b = float(np.nansum(panel.prices[base, idx] * panel.quantities[base, idx]))
    demands = _over_periods(panel, missing, lambda t: model.marshallian(pm[t], m_b))
    q[missing[:, None], idx] = np.where(panel.priced[missing[:, None], idx], demands, 0.0)
    shown = ", ".join(repr(panel.periods[t]) for t in missing[:10])
    notices.append(Notice("quantities_from_model", f"Periods {shown}{' ...' if missing.size > 10 else ''} "
                          "have prices only: their quantities are the model's demands at that "
                          "period's prices and the base period's spending; items outside the "
                          "model get quantity 0 there."))
    return q


# -- the series ---------------------------------------------------------------------------------


def index_series(
    panel: Panel,
    *,
    base: int = 0,
    reference: int | None = None,
    reference_value: float = 100.0,
    formulas: Sequence[str] | None = None,
    model: Preferences | None = None,
    lloyd_moulton_sigma: float | None = None,
    weight_reference: WeightReference | int | None = None,
    new_goods_sigma: float | None = None,
    geks_window: int | None = None,
    geks_splice: Splice = "movement",
    span: tuple[int, int] | None = None,
    loop: Sequence[int] | None = None,
    rebase: Rebase | None = None,
) -> IndexSeries:
    """Formula, Konüs and GEKS series over a panel, with bias, chain drift and item treatment.

    Parameters
    ----------
    panel:
        The checked panel (:meth:`Panel.checked`).
    base:
        Position of the base (price-reference) period; the model must be calibrated to it
        (:func:`calibrate_to_base`).
    reference, reference_value:
        The index reference period (default: the base) and its value, 1 or 100.
    formulas:
        Names from ``SERIES_FORMULAS`` (default: every one the data allow; the others are left
        out with a notice).
    model:
        A preference family calibrated to the base period, for the Konüs series and the bias.
    lloyd_moulton_sigma, new_goods_sigma:
        Elasticities for the Lloyd-Moulton and Feenstra series (default: the model's own, the
        latter only when above 1).
    weight_reference:
        The weight-reference period (a position, at or before the base) or an explicit basket,
        for the Lowe and Young series.
    geks_window, geks_splice:
        Rolling GEKS window in periods (default: a year and one period, 13 months, when the
        frequency is known) and the splice (``movement``, ``window``, ``half``, ``mean``).
    span:
        First and last period of the average annual bias (default: the whole panel).
    loop:
        Periods of the circularity check (default: the span in order, closing back to its start).
    rebase:
        A further reference (period or year) of the changes' rebased levels, worth ``reference_value``.
    """
    n_t = panel.n_periods
    ref, scale = _reference(n_t, base, reference, reference_value)
    notices: list[Notice] = []
    if isinstance(weight_reference, WeightReference):
        notices.extend(weight_reference.notices)

    items: tuple[int, ...] = ()
    if model is not None:
        budget, items = base_budget(panel, base)
        notices.extend(budget.notices)
        notices.extend(model.calibration_notices)
    quantities = _fill_quantities(panel, model, items, base, notices)
    wts, weight_shares = _weights(panel, quantities, weight_reference, base)

    lm_sigma, ng_sigma = _elasticities(model, lloyd_moulton_sigma, new_goods_sigma)
    unmet = _unmet(panel, model, wts, lm_sigma, ng_sigma)
    names = _choose_formulas(formulas, unmet, notices)
    notices += _filled_in(names, formulas, given=(lloyd_moulton_sigma, new_goods_sigma),
                          used=(lm_sigma, ng_sigma))

    compare = _Comparer(panel, quantities, wts, lm_sigma, ng_sigma)
    raw = _formula_series(compare, [n for n in names if REGISTRY[n].kind == "bilateral"], base,
                          n_t)
    konus = _konus(model, panel, base, quantities, items, notices)
    multilateral = _multilateral(panel, quantities, base,
                                 [REGISTRY[n] for n in names if REGISTRY[n].kind == "multilateral"],
                                 geks_window, geks_splice, explicit=formulas is not None,
                                 notices=notices)
    series, geks_out, konus_out = _published(raw, multilateral, konus, scale, ref)

    the_span = _span(panel, span, notices)
    bias, annual = _bias(series, geks_out, konus_out, the_span, scale)
    if konus_out is None:
        notices.append(Notice("no_model", "No model was given: the Konüs series and the bias "
                              "are not computed."))
    drift = _drift(compare, raw, multilateral, panel, base, the_span, loop)
    treatment = item_treatment(panel, base, konus)
    calendar = Calendar.of(panel.periods, panel.frequency, panel.times)
    rebase = None if rebase is None else Rebase(rebase.period, rebase.year, scale)
    return IndexSeries(
        periods=panel.periods, items=panel.items, base=base, reference=ref,
        reference_value=scale, formulas=series, konus=konus_out, multilateral=geks_out,
        bias=bias, annual_bias=annual, span=the_span, chain_drift=drift,
        item_treatment=treatment, weights=weight_shares, lloyd_moulton_sigma=lm_sigma,
        new_goods_sigma=ng_sigma, notices=notices, calendar=calendar, rebase=rebase,
        changes=series_changes(series, geks_out, konus_out, calendar, rebase))


def series_changes(series: Mapping[str, FormulaSeries], multilateral: Sequence[Multilateral],
                   konus: KonusSeries | None, calendar: Calendar,
                   rebase: Rebase | None) -> list[SeriesChanges]:
    """The change measures of every published series: each formula's fixed-base and chained
    series, each GEKS series, and the Konüs series at each standard."""
    named: dict[tuple[str, str, Target | None], Array] = {}
    for f in series.values():
        named[(f.name, "fixed_base", None)] = f.fixed_base
        named[(f.name, "chained", None)] = f.chained
    for g in multilateral:
        named[(g.name, "full_span", None)] = g.full_span
        if g.rolling is not None:
            named[(g.name, "rolling", None)] = g.rolling
    if konus is not None:
        for kind, block in (("fixed_base", konus.fixed_base), ("chained", konus.chained)):
            for target, values in block.items():
                named[("konus", kind, target)] = values  # type: ignore[index]
    found = changes_of(named, calendar, rebase)
    return [SeriesChanges(name, kind, target, c) for (name, kind, target), c in found.items()]


def _reference(n_t: int, base: int, reference: int | None,
               reference_value: float) -> tuple[int, float]:
    """The index reference period (default: the base) and its value, checked."""
    if n_t < 2:
        raise InvalidInput("periods", "a series needs at least two periods")
    _check_position("base_period", base, n_t)
    ref = base if reference is None else reference
    _check_position("reference_period", ref, n_t)
    scale = float(reference_value)
    if not np.isfinite(scale) or scale <= 0.0:
        raise InvalidInput("reference_value", f"must be greater than zero, got {scale:g}")
    return ref, scale


def _filled_in(names: Sequence[str], formulas: Sequence[str] | None,
               given: tuple[float | None, float | None],
               used: tuple[float | None, float | None]) -> list[Notice]:
    """Notices for what the service chose: the Lloyd-Moulton and new-goods elasticities taken
    from the model, and the default formulas left out because ``formulas`` named others."""
    out = []
    for formula, (code, what), asked, value in zip(
            ("lloyd_moulton", "feenstra"),
            (("lloyd_moulton_sigma_from_model", "Lloyd-Moulton"),
             ("new_goods_sigma_from_model", "new-goods")), given, used, strict=True):
        if asked is None and value is not None and formula in names:
            out.append(Notice(code, f"No {what} elasticity was given: the model's own "
                              f"elasticity of substitution, {value:.10g}, is used."))
    if formulas is not None:
        skipped = [n for n in formulas_for("series") if n not in names]
        if skipped:
            out.append(Notice("formulas_as_asked", "Only the formulas named in formulas were "
                              f"computed; left out of the default set: {', '.join(skipped)}."))
    return out


def _elasticities(model: Preferences | None, lloyd_moulton_sigma: float | None,
                  new_goods_sigma: float | None) -> tuple[float | None, float | None]:
    """The Lloyd-Moulton and new-goods elasticities, checked, by default the model's own."""
    lm_sigma = lloyd_moulton_sigma
    if lm_sigma is None and model is not None:
        lm_sigma = model.substitution_elasticity
    elif lm_sigma is not None and (not np.isfinite(lm_sigma) or lm_sigma < 0.0):
        raise InvalidInput("lloyd_moulton_sigma", "an elasticity of substitution must be a "
                           f"finite number, zero or more, got {lm_sigma:g}")
    ng_sigma = new_goods_sigma
    if ng_sigma is not None:
        ng_sigma = check_new_goods_sigma("new_goods_sigma", ng_sigma)
    elif model is not None and (model.substitution_elasticity or 0.0) > 1.0:
        ng_sigma = model.substitution_elasticity
    return lm_sigma, ng_sigma


def _unmet(panel: Panel, model: Preferences | None, weights: _Weights, lm_sigma: float | None,
           ng_sigma: float | None) -> set[Need]:
    """The formulas' needs this request cannot meet (see :data:`dualcost.core.indices.Need`)."""
    given: dict[Need, bool] = {
        "sigma": lm_sigma is not None,
        "weight_quantities": weights.quantities is not None,
        "weight_shares": weights.shares is not None,
        "new_goods_sigma": ng_sigma is not None,
        "period_quantities": bool(panel.has_quantities.all()) or model is not None,
    }
    return {need for need, ok in given.items() if not ok}


def _formula_series(compare: _Comparer, names: Sequence[str], base: int,
                    n_t: int) -> dict[str, tuple[Array, Array, Array]]:
    """Per bilateral formula: fixed-base and chained series on base = 1, and the chain links."""
    fixed_pairs = [(base, t) for t in range(n_t)]
    link_pairs = [(t - 1, t) for t in range(1, n_t)]
    raw: dict[str, tuple[Array, Array, Array]] = {}
    for name in names:
        fixed = compare(name, fixed_pairs)
        links = compare(name, link_pairs)
        raw[name] = (fixed / fixed[base], _chain(links, base), links)
    return raw


def _konus(model: Preferences | None, panel: Panel, base: int, quantities: Array,
           items: Sequence[int], notices: list[Notice]) -> KonusSeries | None:
    if model is None:
        return None
    konus = konus_series(model, panel, base, quantities, items)
    outside = [panel.periods[t] for t, v in enumerate(konus.validity) if not v.regular]
    if outside:
        shown = ", ".join(repr(p) for p in outside[:10]) + (" ..." if len(outside) > 10 else "")
        notices.append(Notice("konus_outside_regular_region", f"The {model.family} model is "
                              f"outside its regular region in {len(outside)} period(s) "
                              f"({shown}): its Konüs values there (and the chained ones across "
                              "them) and their bias are not results and are left empty; the "
                              "formula series are unaffected."))
        konus = withhold_irregular(konus, base)
    if model.homothetic:
        notices.append(Notice("homothetic", f"The {model.family} model is homothetic: its "
                              "Konüs series is the same at every living standard, and its "
                              "chained and fixed-base series agree."))
    return konus


def _published(raw: dict[str, tuple[Array, Array, Array]], multilateral: list[Multilateral],
               konus: KonusSeries | None, scale: float,
               ref: int) -> tuple[dict[str, FormulaSeries], list[Multilateral], KonusSeries | None]:
    """Every series on the index reference period ``ref``, worth ``scale`` there."""

    def published(values: Array) -> Array:
        return np.asarray(scale * values / values[ref])

    series = {
        name: FormulaSeries(name, REGISTRY[name].title, REGISTRY[name].target, published(fixed),
                            published(chained), links, REGISTRY[name].rule)
        for name, (fixed, chained, links) in raw.items()
    }
    geks_out = [Multilateral(g.name, g.link, published(g.full_span),
                             None if g.rolling is None else published(g.rolling), g.window,
                             g.splice, g.rule) for g in multilateral]
    konus_out = None
    if konus is not None:
        konus_out = KonusSeries(konus.family, konus.homothetic,
                                {k: published(v) for k, v in konus.fixed_base.items()},
                                {k: published(v) for k, v in konus.chained.items()},
                                konus.incomes, konus.utilities, konus.items, konus.carried_from,
                                konus.rule, konus.validity)
    return series, geks_out, konus_out


def _check_position(name: str, position: int, n_t: int) -> None:
    if not 0 <= position < n_t:
        raise InvalidInput(name, f"position {position} is outside the panel's {n_t} periods")


def _multilateral(panel: Panel, quantities: Array, base: int, formulas: Sequence[IndexFormula],
                  window: int | None, splice: Splice, *, explicit: bool,
                  notices: list[Notice]) -> list[Multilateral]:
    n_t = panel.n_periods
    if not formulas:
        return []
    if window is None and panel.frequency is not None:
        # A year and one period, as Ivancic, Diewert and Fox (2011) used 13 months; a shorter
        # panel is one window.
        window = min(PERIODS_PER_YEAR[panel.frequency] + 1, n_t)
    if window is not None:
        if window < 2:
            raise InvalidInput("geks_window", f"a GEKS window needs at least 2 periods, got "
                               f"{window}")
        if window > n_t:
            raise InvalidInput("geks_window", f"the window of {window} periods is longer than the "
                               f"panel's {n_t} periods")
    else:
        notices.append(Notice("rolling_geks_not_computed", "The frequency is not known (period "
                              "labels are not dates and none was given), so no rolling GEKS "
                              "window was chosen; give geks_window to get one."))
    if window is not None and window == n_t:
        notices.append(Notice("rolling_geks_whole_span", f"The GEKS window of {window} periods "
                              "covers the whole panel: the rolling series is the full-span one."))
    out = []
    for formula in formulas:
        link = formula.link
        assert link is not None  # every multilateral entry names its link
        try:
            g = bilateral_log_matrix(panel.prices, quantities, panel.priced, link,
                                     panel.periods)
        except InvalidInput as exc:
            if explicit:
                raise
            notices.append(Notice("formula_not_computed", f"The GEKS series on {link} links was "
                                  f"left out: {exc.rule}."))
            continue
        full = geks(g, base)
        rolling = None
        if window is not None:
            r = rolling_geks(g, window, splice)
            rolling = r / r[base]
        out.append(Multilateral(formula.name, link, full, rolling, window, splice, formula.rule))
    return out


def _span(panel: Panel, span: tuple[int, int] | None, notices: list[Notice]) -> Span:
    n_t = panel.n_periods
    a, c = span if span is not None else (0, n_t - 1)
    _check_position("span", a, n_t)
    _check_position("span", c, n_t)
    if c <= a:
        raise InvalidInput("span", f"the span must run forwards over at least two periods; it "
                           f"runs from {panel.periods[a]!r} to {panel.periods[c]!r}")
    freq = panel.frequency
    if freq is None:
        notices.append(Notice("annual_bias_not_computed", "The frequency is not known (period "
                              "labels are not dates and none was given), so the average annual "
                              "bias is not computed; give the frequency to get it."))
        return Span(a, c, None, None, None)
    ppy = PERIODS_PER_YEAR[freq]
    return Span(a, c, float(panel.times[c] - panel.times[a]) / ppy, freq, ppy)


def _annual_rate(values: Array, span: Span) -> float:
    assert span.years is not None
    return 100.0 * float(np.expm1(np.log(values[span.end] / values[span.start]) / span.years))


def _bias(series: dict[str, FormulaSeries], multilateral: list[Multilateral],
          konus: KonusSeries | None, span: Span,
          scale: float) -> tuple[list[Bias], list[AnnualBias]]:
    """Per-period and average annual bias; points are on reference 100 whatever the scale."""
    if konus is None:
        return [], []
    bias: list[Bias] = []
    annual: list[AnnualBias] = []
    entries: list[tuple[str, str, Target, Array, Array]] = []
    for f in series.values():
        entries.append((f.name, "fixed_base", f.target, f.fixed_base, konus.fixed_base[f.target]))
        entries.append((f.name, "chained", f.target, f.chained, konus.chained[f.target]))
    for g in multilateral:
        target = REGISTRY[g.name].target
        entries.append((g.name, "full_span", target, g.full_span, konus.fixed_base[target]))
        if g.rolling is not None:
            entries.append((g.name, "rolling", target, g.rolling, konus.fixed_base[target]))
    for name, kind, target, values, k in entries:
        bias.append(Bias(name, kind, target, 100.0 * (values - k) / scale,
                         100.0 * (values / k - 1.0)))
        if span.years is not None:
            rate, k_rate = _annual_rate(values, span), _annual_rate(k, span)
            annual.append(AnnualBias(name, kind, target, rate, k_rate, rate - k_rate))
    return bias, annual


def _drift(compare: _Comparer, raw: dict[str, tuple[Array, Array, Array]],
           multilateral: list[Multilateral], panel: Panel, base: int, span: Span,
           loop: Sequence[int] | None) -> ChainDrift:
    n_t = panel.n_periods
    if loop is None:
        path = list(range(span.start, span.end + 1))
    else:
        path = list(loop)
        for j, t in enumerate(path):
            if not 0 <= t < n_t:
                raise InvalidInput("loop", f"position {t} is outside the panel's {n_t} periods",
                                   j)
        if path and path[-1] == path[0]:
            path = path[:-1]
        if len(set(path)) < 2:
            raise InvalidInput("loop", "a loop needs at least two different periods")
    pairs = [(path[j], path[(j + 1) % len(path)]) for j in range(len(path))]
    drift = {name: 100.0 * (chained / fixed - 1.0) for name, (fixed, chained, _) in raw.items()}
    # Steps to the next period are chain links already computed; only the others are new.
    forward = [b for a, b in pairs if b == a + 1]
    others = [(a, b) for a, b in pairs if b != a + 1]
    product = {}
    for name, (_, _, links) in raw.items():
        log_sum = float(np.sum(np.log(links[np.asarray(forward, dtype=np.intp) - 1])))
        if others:
            log_sum += float(np.sum(np.log(compare(name, others))))
        product[name] = float(np.exp(log_sum))
    for g in multilateral:
        logs = np.log(g.full_span)
        product[g.name] = float(np.exp(sum(logs[b] - logs[a] for a, b in pairs)))
    prices = panel.filled_prices()
    same = [t for t in range(n_t) if t != base and np.array_equal(panel.priced[t], panel.priced[base])
            and np.allclose(prices[t], prices[base], rtol=1e-12, atol=0.0)]
    return ChainDrift(drift, tuple(path), product, tuple(same))


def item_treatment(panel: Panel, base: int, konus: KonusSeries | None) -> list[ItemTreatment]:
    """One entry per period and item that some comparison left out or the model valued otherwise."""
    priced = panel.priced
    in_base = priced[base][None, :]
    prev = np.vstack([np.ones((1, panel.n_items), dtype=bool), priced[:-1]])
    fixed_out = ~(priced & in_base)
    link_out = ~(priced & prev)
    link_out[0] = ~priced[0]
    flagged = fixed_out | link_out
    # Per cell: -3 no model, -2 outside the model, -1 model price used, else the period whose
    # price the model carried.
    source = np.full(priced.shape, -3 if konus is None else -2, dtype=np.intp)
    if konus is not None:
        source[:, np.asarray(konus.items, dtype=np.intp)] = konus.carried_from
    states = {-3: "no_model", -2: "outside_model", -1: "used"}
    out = []
    for t, i in np.argwhere(flagged).tolist():
        code = int(source[t, i])
        out.append(ItemTreatment(
            period=t, item=i, priced=bool(priced[t, i]),
            fixed_base="left_out" if fixed_out[t, i] else "used",
            chained="none" if t == 0 else ("left_out" if link_out[t, i] else "used"),
            model=states.get(code, "price_carried"),
            carried_from=code if code >= 0 else None))
    return out


def describe_treatment(entry: ItemTreatment, periods: Sequence[str], base: int) -> str:
    """One sentence saying what was done with an item in a period."""
    label = periods[entry.period]
    parts = []
    if not entry.priced:
        parts.append(f"not priced in {label}")
    if entry.fixed_base == "left_out":
        reason = "" if not entry.priced else f" (not priced in the base period {periods[base]})"
        parts.append(f"left out of the comparison with the base period{reason}")
    if entry.chained == "left_out":
        reason = "" if not entry.priced else f" (not priced in {periods[entry.period - 1]})"
        parts.append(f"left out of the link from {periods[entry.period - 1]}{reason}")
    if entry.model == "price_carried" and entry.carried_from is not None:
        parts.append(f"the model values it at its price of {periods[entry.carried_from]}")
    elif entry.model == "outside_model":
        parts.append("outside the model (not priced in the base period)")
    text = "; ".join(parts)
    return text[:1].upper() + text[1:] + "."


@dataclass(frozen=True)
class LabelledSeries:
    """What :func:`series_by_label` returns: the series, the checked panel and the model."""

    result: IndexSeries
    panel: Panel
    model: Preferences | None
    #: On request (``revealed_bounds=True``): what the panel says without a model, over the
    #: items priced in every period (``revealed_items``, panel positions).
    revealed: RevealedPreference | None = None
    revealed_items: tuple[int, ...] = ()


def series_by_label(
    prices: npt.ArrayLike,
    *,
    quantities: npt.ArrayLike | None = None,
    expenditures: npt.ArrayLike | None = None,
    periods: Sequence[str],
    items: Sequence[str],
    frequency: str | None = None,
    base_period: str | None = None,
    reference_period: str | None = None,
    span: tuple[str | None, str | None] | None = None,
    loop: Sequence[str] | None = None,
    weight_reference_period: str | None = None,
    weight_reference: Mapping[str, npt.ArrayLike] | None = None,
    model: Callable[[BaseBudget, tuple[int, ...]], Preferences] | None = None,
    rebase_period: str | None = None,
    rebase_year: int | None = None,
    revealed_bounds: bool = False,
    **options: Any,
) -> LabelledSeries:
    """The whole series from plain arrays and period labels, in one call.

    The panel is checked (:meth:`Panel.checked`); periods are named by their labels (the base,
    reference, span and loop periods, the weight-reference period) and found in it; ``model``,
    when given, is called with the base period's budget and the positions of the items priced
    in it, and returns the family calibrated to them; ``weight_reference`` holds any of
    ``prices``, ``quantities`` and ``shares`` of an earlier period, and the shares'
    ``share_unit`` (:class:`WeightReference`); ``rebase_period`` (a label) or ``rebase_year``
    the further reference of the change measures' rebased levels.
    The other ``options`` go to :func:`index_series`. Errors name the arguments as
    :func:`index_series` does, the period arguments by their names (``base_period``, ``span``,
    ``loop`` with the position in the loop, ``weight_reference``).
    ``revealed_bounds``: also test the panel's choices for GARP and bracket each period's Konüs
    index against the base at base utility without a model (:func:`revealed_over`).
    """
    panel = Panel.checked(prices, quantities=quantities, expenditures=expenditures,
                          periods=periods, items=items, frequency=frequency)
    base = panel.period_index("base_period", base_period, 0)
    reference = panel.period_index("reference_period", reference_period, base)
    positions = None
    if span is not None:
        positions = (panel.period_index("span", span[0], 0),
                     panel.period_index("span", span[1], panel.n_periods - 1))
    loop_at = None if loop is None else [_loop_position(panel, label, j)
                                         for j, label in enumerate(loop)]
    weights: WeightReference | int | None = None
    if weight_reference_period is not None:
        weights = panel.period_index("weight_reference", weight_reference_period, 0)
    elif weight_reference:
        given = dict(weight_reference)
        weights = WeightReference.checked(panel.n_items,
                                          share_unit=str(given.pop("share_unit", "fraction")),
                                          **given)
    rebase = _rebase(panel, rebase_period, rebase_year)
    calibrated = None
    if model is not None:
        budget, items_priced = base_budget(panel, base)
        calibrated = model(budget, items_priced)
    result = index_series(panel, base=base, reference=reference, model=calibrated,
                          weight_reference=weights, span=positions, loop=loop_at, rebase=rebase,
                          **options)
    result.notices[:0] = _period_defaults(panel, base_period, reference_period, frequency)
    if not revealed_bounds:
        return LabelledSeries(result, panel, calibrated)
    found, kept, notices = revealed_over(panel, base)
    result.notices.extend(notices)
    return LabelledSeries(result, panel, calibrated, found, kept)


def revealed_over(panel: Panel, base: int
                  ) -> tuple[RevealedPreference, tuple[int, ...], list[Notice]]:
    """GARP and Varian's bounds (:func:`dualcost.core.revealed_bounds.revealed_preference`)
    over the items priced in every period, each period against ``base`` at base utility; every
    period needs quantities. A notice names the items left out."""
    without = np.flatnonzero(~panel.has_quantities)
    if without.size:
        raise InvalidInput("revealed_bounds", "the model-free bounds need the quantities (or "
                           f"expenditures) of every period; period {panel.periods[without[0]]!r}"
                           " has prices only")
    kept = np.flatnonzero(panel.priced.all(axis=0))
    if not kept.size:
        raise InvalidInput("revealed_bounds", "the model-free bounds need items priced in "
                           "every period, and no item is")
    try:
        found = revealed_preference(panel.prices[:, kept], panel.quantities[:, kept], base=base)
    except InvalidInput as exc:  # a period with nothing bought among the kept items
        index = exc.index
        if isinstance(index, tuple) and len(index) == 2:
            index = (index[0], int(kept[int(index[1])]))
        raise InvalidInput(exc.parameter, exc.rule + " (over the items priced in every "
                           "period, which the model-free bounds use)", index) from exc
    left = np.flatnonzero(~panel.priced.all(axis=0))
    notices = [] if not left.size else [Notice(
        "revealed_bounds_items", f"The model-free bounds use the {kept.size} items priced in "
        f"every period; the {left.size} others are left out of them.", tuple(int(i)
                                                                         for i in left))]
    return found, tuple(int(i) for i in kept), notices


def _rebase(panel: Panel, period: str | None, year: int | None) -> Rebase | None:
    """The rebase the labels name (its value is set by :func:`index_series`)."""
    if period is None and year is None:
        return None
    return Rebase(None if period is None else panel.period_index("rebase_period", period, 0), year)


def _period_defaults(panel: Panel, base_period: str | None, reference_period: str | None,
                     frequency: str | None) -> list[Notice]:
    """Notices for each period setting the service filled in."""
    out = []
    if base_period is None:
        out.append(Notice("base_period_assumed", "No base period was given: the first period, "
                          f"{panel.periods[0]!r}, is the base (price-reference) period."))
    if reference_period is None:
        out.append(Notice("reference_period_assumed", "No index reference period was given: "
                          "the series are published on the base period."))
    if frequency is None and panel.frequency is not None:
        out.append(Notice("frequency_from_labels", "No frequency was given: the period labels "
                          f"read as {panel.frequency} periods."))
    return out


def _loop_position(panel: Panel, label: str, j: int) -> int:
    if str(label) not in panel.periods:
        raise InvalidInput("loop", f"period {str(label)!r} is not in the panel", j)
    return panel.periods.index(str(label))
