"""Many households at once: one price change, or a series of them, applied to H budgets.

Every household (or group: an income decile, a region) has its own base expenditure shares
``w0_h`` and, where the family needs it, its own income ``m_h``; all share the base prices ``p0``,
the current prices ``p1_t`` of each period ``t`` and the model's behavioural parameters. For each
household and period we give the formula indices, the Konüs (1924) index, the compensating and
equivalent variation and each formula's substitution bias, with the definitions of
:mod:`dualcost.core.comparison`:

- base quantities ``q0_h = m_h w0_h / p0``; current quantities are the model's demands at
  current prices and the household's own income, ``q1_h = x_h(p1_t, m_h)``: the operation
  isolates the price change, so income is held at its base value (``m1 = m0``);
- ``K(u0) = e(p1, u0) / e(p0, u0)`` (column ``konus``), ``K(u1)`` (``konus_current``) and the
  midpoint standard's index (``konus_midpoint``); ``CV = e(p1, u0) - m`` and
  ``EV = m - e(p0, u1)``, losses positive (Hicks 1942);
- the bias of a formula in index points, ``100 (P - K)``, against the Konüs index it targets.

The household path calls the family and never a copy of its maths. The family is calibrated to
all the households of a chunk at once (:meth:`~dualcost.core.preferences.Preferences.calibrate_many`:
one model with a household axis; a household it cannot be calibrated to is refused by row with
the family's reason), households whose income does not exceed the model's income floor at some
period's prices are refused, and each period's Konüs indices, CV, EV and current quantities come
from the Konüs kernel (:func:`dualcost.core.konus.price_change`), which the single comparison
calls too, over the household axis. A family that broadcasts (Cobb-Douglas, CES, Stone-Geary)
is evaluated without a Python loop per household, and the formula indices of
:mod:`dualcost.core.indices` run along the item axis of the same arrays. For any other family
(nested CES, translog, homogeneous quadratic, AIDS, QUAIDS, and any family added later that does
not broadcast) the kernel evaluates each household's own model in turn, and each household's
comparison is assembled and checked as its own single comparison would be
(:func:`dualcost.core.comparison.comparison_of`: its formula indices, failures and notices,
counted); the answer says so in a notice.

Rows are processed in chunks of ``HouseholdJob.chunk_rows``: the chunking is part of the job, so
that every engine (in process, or on a cluster: :mod:`dualcost.engines.dask`) evaluates exactly
the same arrays with the same code and gets the same bits.

Distribution summaries (Prais 1959, "Whose cost of living?", Review of Economic Studies 26(2)):
the *democratic* index weights households equally (by their survey weight ``a_h``),
``sum_h a_h P_h / sum_h a_h``; the *plutocratic* index weights them by expenditure,
``sum_h a_h m_h P_h / sum_h a_h m_h``, which for Laspeyres is the Laspeyres index of the
aggregate basket, the index a consumer price index approximates.
"""

from __future__ import annotations

import dataclasses
from collections.abc import Callable, Iterable, Iterator, Mapping, Sequence
from dataclasses import dataclass, field
from functools import lru_cache
from typing import Any, Literal

import numpy as np
import numpy.typing as npt
from numpy.typing import NDArray

from . import _checks
from .comparison import comparison_of
from .deadline import check as check_deadline
from .errors import DualcostError, InvalidInput, InvalidRows, RowProblem
from .indices import FORMULAS, HOUSEHOLD_DEFAULT, REGISTRY, IndexData, formulas_for
from .konus import PriceChange, price_change
from .preferences import FAMILIES, BaseBudget, Notice, Preferences
from .preferences.base import RowModels, converted_notices
from .validity import IRREGULAR, negative_demands

Vector = NDArray[np.float64]
Matrix = NDArray[np.float64]
OnBadRows = Literal["reject", "skip"]

#: Formulas a household batch can compute (the registry's "households" scope): the weighted
#: bilateral ones. The unweighted formulas are the same for every household, and Lowe and Young
#: need a weight-reference period.
HOUSEHOLD_FORMULAS: tuple[str, ...] = formulas_for("households")
DEFAULT_FORMULAS: tuple[str, ...] = HOUSEHOLD_DEFAULT
DEFAULT_QUANTILES: tuple[float, ...] = (0.1, 0.25, 0.5, 0.75, 0.9)
#: Numbers per work array of a chunk unless the job says otherwise: enough rows to amortise
#: numpy's cost per call, few enough that a chunk's work arrays stay in cache (common practice).
CHUNK_CELLS = 131_072
#: How many skipped rows a report lists one by one (all are counted).
LISTED_PROBLEMS = 100

KONUS_COLUMNS = ("konus", "konus_current", "konus_midpoint")
MONEY_COLUMNS = ("compensating_variation", "equivalent_variation")
#: The reasons a household-period can be outside the model's regular region (the codes of
#: :data:`dualcost.core.validity.IRREGULAR`), one bit each in ``ChunkResult.irregular``.
REASONS: tuple[str, ...] = tuple(sorted(IRREGULAR))
_BIT: dict[str, int] = {code: 1 << k for k, code in enumerate(REASONS)}
#: A demand below zero by more than this, relative to the household's largest demand, is
#: negative (as :func:`dualcost.core.validity.negative_demands` has it: not the rounding at an
#: exact zero).
NEGATIVE_TOLERANCE = 1e-12
#: Items by household-period: (period, household) -> the items a reason names.
ItemsAt = dict[tuple[int, int], tuple[int, ...]]


@lru_cache(maxsize=256)
def reasons_of(mask: int) -> tuple[str, ...]:
    """The reason codes whose bits are set in ``mask`` (an entry of ``ChunkResult.irregular``)."""
    return tuple(code for k, code in enumerate(REASONS) if int(mask) >> k & 1)


def reason_mask(codes: Iterable[str]) -> int:
    """The bits of ``codes`` (those of :data:`REASONS`; others are ignored)."""
    mask = 0
    for code in codes:
        mask |= _BIT.get(code, 0)
    return mask


@dataclass(frozen=True)
class HouseholdJob:
    """What is common to all households: prices, model, formulas, and the chunking.

    Build it with :meth:`checked`. ``parameters`` are the family's behavioural parameters in
    the form :func:`dualcost.core.preferences.calibrate` takes (vectors in item order).
    """

    family: str
    parameters: Mapping[str, Any]
    base_prices: Vector
    current_prices: Matrix  # (periods, items)
    formulas: tuple[str, ...]
    lloyd_moulton_sigma: float | None
    normalise_shares: bool = False
    chunk_rows: int = 1024
    notices: tuple[Notice, ...] = ()
    #: The unit the households' shares are given in (``fraction``, ``percent``, ``per_mille``).
    share_unit: str = "fraction"
    #: Whether the formulas were named by the caller: a named formula that cannot be computed
    #: for a household refuses that household (field ``formulas``); one of the default set is
    #: left out for it (NaN) with a notice, and never fails the request.
    formulas_given: bool = False

    @classmethod
    def checked(
        cls,
        family: str,
        parameters: Mapping[str, Any] | None,
        base_prices: npt.ArrayLike,
        current_prices: npt.ArrayLike,
        *,
        formulas: Sequence[str] | None = None,
        lloyd_moulton_sigma: float | None = None,
        normalise_shares: bool = False,
        chunk_rows: int | None = None,
        share_unit: str = "fraction",
    ) -> HouseholdJob:
        """Check everything that does not depend on a household.

        ``current_prices`` is one price vector or a (periods, items) matrix, each row compared
        with ``base_prices``; ``chunk_rows`` defaults to :func:`default_chunk_rows`. The
        households' shares are given in ``share_unit`` (``fraction``, ``percent`` or
        ``per_mille``: each row is divided by 1, 100 or 1000 before its checks, with a notice).
        """
        converted = converted_notices("The households' shares", share_unit)
        p0 = _checks.positive("p0", base_prices)
        p1 = _current_prices(current_prices, p0.size)
        if family not in FAMILIES:
            known = ", ".join(sorted(FAMILIES))
            raise InvalidInput("family", f"unknown preference family {family!r}; known: {known}")
        params = dict(parameters or {})
        allowed = {spec.name for spec in FAMILIES[family].parameter_specs}
        for name in params:
            if name not in allowed:
                accepted = ", ".join(sorted(allowed)) or "none"
                raise InvalidInput(name, f"is not a parameter of the {family} family (it takes: "
                                   f"{accepted})")
        probe = _probe(family, params, p0)
        names = _checked_formulas(formulas)
        defaults: list[Notice] = []
        if formulas is None:
            others = [f for f in HOUSEHOLD_FORMULAS if f not in names]
            defaults.append(Notice("default_formulas", "No formulas were named: the default set "
                                   f"({', '.join(names)}) is computed; "
                                   f"{', '.join(others)} are computed only when named in "
                                   "formulas. A default formula that cannot be computed for a "
                                   "household is left out for it (null) with a notice."))
        lm_sigma = lloyd_moulton_sigma
        if lm_sigma is not None:
            lm_sigma = _checks.scalar("lloyd_moulton_sigma", lm_sigma)
            if lm_sigma < 0.0:
                raise InvalidInput("lloyd_moulton_sigma", "an elasticity of substitution must be "
                                   f"zero or more, got {lm_sigma:g}")
        elif probe is not None:
            lm_sigma = probe.substitution_elasticity
            if lm_sigma is not None and "lloyd_moulton" in names:
                defaults.append(Notice("lloyd_moulton_sigma_from_model", "No Lloyd-Moulton "
                                       "elasticity was given: the model's own elasticity of "
                                       f"substitution, {lm_sigma:.10g}, is used."))
        if "lloyd_moulton" in names and lm_sigma is None:
            raise InvalidInput("formulas", "the Lloyd-Moulton index needs an elasticity of "
                               "substitution (lloyd_moulton_sigma; the model has no single one)",
                               names.index("lloyd_moulton"))
        if chunk_rows is None:
            chunk_rows = default_chunk_rows(p0.size)
        if int(chunk_rows) < 1:
            raise InvalidInput("chunk_rows", f"must be 1 or more, got {chunk_rows}")
        defaults.append(Notice("current_income_assumed", "Each household's current income is "
                               "taken equal to its base income (expenditure), so that the "
                               "answer isolates the price change; for a model that is not "
                               "homothetic this choice moves K(u1), the midpoint index and the "
                               "equivalent variation."))
        if not FAMILIES[family].broadcasts:
            defaults.append(Notice("evaluated_one_by_one", f"The {family} family has no closed "
                                   "form over households here: each household was calibrated "
                                   "and compared in turn (slower than the vectorised "
                                   "families)."))
        return cls(family=family, parameters=params, base_prices=p0, current_prices=p1,
                   formulas=names, lloyd_moulton_sigma=lm_sigma,
                   normalise_shares=bool(normalise_shares), chunk_rows=int(chunk_rows),
                   notices=(*converted, *defaults), share_unit=share_unit,
                   formulas_given=formulas is not None)

    @property
    def n_items(self) -> int:
        return int(self.base_prices.size)

    @property
    def n_periods(self) -> int:
        return int(self.current_prices.shape[0])

    @property
    def homothetic(self) -> bool:
        return bool(FAMILIES[self.family].homothetic)

    @property
    def needs_income(self) -> bool:
        """Non-homothetic families need each household's income; homothetic ones do not."""
        return not self.homothetic

    @property
    def summarised(self) -> tuple[str, ...]:
        """The indices that get distribution summaries: every formula, and the Konüs index."""
        return (*self.formulas, "konus")

    def output_columns(self, with_income: bool) -> tuple[str, ...]:
        """Per household and period: formulas, Konüs indices, CV/EV (money, with incomes only),
        CV in percent of income, and each formula's bias in index points."""
        money = MONEY_COLUMNS if with_income else ()
        return (*self.formulas, *KONUS_COLUMNS, *money, "cv_percent",
                *(f"bias_{name}" for name in self.formulas))


@dataclass(frozen=True)
class HouseholdChunk:
    """A block of consecutive household rows.

    ``rows`` labels each row for error messages (see :class:`RowProblem`); ``expenditure`` is
    ``None`` when no incomes were given (homothetic families only); ``weights`` default to 1.
    """

    rows: NDArray[np.int64]
    shares: Matrix
    expenditure: Vector | None = None
    weights: Vector | None = None
    ids: tuple[str | None, ...] | None = None
    #: Problems found before the chunk was built (a cell that is not a number, in a CSV).
    problems: tuple[RowProblem, ...] = ()
    #: Where each row came from in a CSV upload: the line its record starts on.
    records: NDArray[np.int64] | None = None


@dataclass(frozen=True)
class ChunkResult:
    """The households of one chunk that passed, with their results; and the rows refused."""

    rows: NDArray[np.int64]
    ids: tuple[str | None, ...] | None
    weights: Vector
    expenditure: Vector | None
    values: dict[str, Matrix]  # column -> (periods, households)
    problems: tuple[RowProblem, ...]
    normalised: int = 0
    #: What calibration did to some households, from the family: code -> (households, the
    #: sentence that completes "For n household(s) ...").
    remarks: dict[str, tuple[int, str]] = field(default_factory=dict)
    #: How many household-periods drew each notice (code -> count and the first such notice):
    #: a regularity warning, a formula left out for a household.
    notice_counts: dict[str, tuple[int, Notice]] = field(default_factory=dict)
    #: Per period and household, as ``values``: the bits of :data:`REASONS` for which the model
    #: is outside its regular region there (0: regular). Where it is not 0 the model's figures
    #: (Konüs indices, CV, EV, cv_percent, biases) are NaN: withheld, not results. None: all
    #: regular.
    irregular: NDArray[np.uint32] | None = None
    #: The items the reasons name, where the model is irregular: (period, household) -> items.
    irregular_items: ItemsAt = field(default_factory=dict)
    #: The CSV line each household's record starts on, for households from a CSV upload.
    records: NDArray[np.int64] | None = None

    @property
    def size(self) -> int:
        return int(self.rows.size)

    def irregular_or_zeros(self, periods: int) -> NDArray[np.uint32]:
        """``irregular``, as zeros when every household-period is regular."""
        if self.irregular is None:
            return np.zeros((periods, self.size), dtype=np.uint32)
        return self.irregular

    def block(self, part: slice) -> ChunkResult:
        """The households ``part`` (consecutive) of this result, with their flags and items."""
        start, stop, _ = part.indices(self.size)
        items = {(t, j - start): at for (t, j), at in self.irregular_items.items()
                 if start <= j < stop}
        return ChunkResult(
            rows=self.rows[part], ids=None if self.ids is None else self.ids[part],
            weights=self.weights[part],
            expenditure=None if self.expenditure is None else self.expenditure[part],
            values={name: v[:, part] for name, v in self.values.items()}, problems=(),
            irregular=None if self.irregular is None else self.irregular[:, part],
            irregular_items=items,
            records=None if self.records is None else self.records[part])


# -- job checks -------------------------------------------------------------------------------


def default_chunk_rows(n_items: int) -> int:
    """Rows per chunk: about ``CHUNK_CELLS`` numbers per work array, between 16 and 8192 rows."""
    return max(16, min(8192, CHUNK_CELLS // max(1, n_items)))


def _current_prices(values: npt.ArrayLike, n: int) -> Matrix:
    try:
        arr = np.asarray(values, dtype=np.float64)
    except (TypeError, ValueError) as exc:
        raise InvalidInput("p1", "must be numbers") from exc
    if arr.ndim == 1:
        arr = arr[None, :]
    if arr.ndim != 2 or arr.shape[1] != n or arr.shape[0] == 0:
        raise InvalidInput("p1", f"must be one price vector of {n} items, or one per period")
    bad = np.argwhere(~np.isfinite(arr) | (arr <= 0.0))
    if bad.size:
        t, i = (int(v) for v in bad[0])
        raise InvalidInput("p1", "must be a finite number greater than zero", (t, i))
    return arr


def _checked_formulas(formulas: Sequence[str] | None) -> tuple[str, ...]:
    if formulas is None:
        return DEFAULT_FORMULAS
    seen: list[str] = []
    for i, name in enumerate(formulas):
        if name not in HOUSEHOLD_FORMULAS:
            known = ", ".join(HOUSEHOLD_FORMULAS)
            raise InvalidInput("formulas", f"{name!r} is not a formula a household batch "
                               f"computes; it computes: {known}", i)
        if name in seen:
            raise InvalidInput("formulas", f"formula {name!r} is named twice", i)
        seen.append(name)
    if not seen:
        raise InvalidInput("formulas", "name at least one formula")
    return tuple(seen)


def _probe(family: str, params: Mapping[str, Any], p0: Vector) -> Preferences | None:
    """Errors in the parameters themselves (a sigma below zero, a matrix that is not symmetric,
    a tree that misses an item), found by calibrating the family to a probe household with
    equal shares; errors about the probe's own budget are left for the households. The probe's
    model, if it could be calibrated, for what the family has in common over households."""
    n = p0.size
    probe = BaseBudget.from_rows(p0, np.full((1, n), 1.0 / n), np.ones(1))
    own = set(params) | {spec.name for spec in FAMILIES[family].parameter_specs} | {"family"}
    try:
        done = FAMILIES[family].calibrate_many(probe, **params)
    except InvalidInput as exc:
        if exc.parameter in own:
            raise
        return None
    except DualcostError:
        return None
    for refusal in done.refused:
        if isinstance(refusal.error, InvalidInput) and refusal.error.parameter in own:
            raise refusal.error
    return None if done.refused else done.model


# -- row checks -------------------------------------------------------------------------------


def _share_problems(rows: NDArray[np.int64], w: Matrix, normalise: bool,
                    problems: list[RowProblem], bad: NDArray[np.bool_],
                    unit: str = "fraction") -> tuple[Matrix, int]:
    """Refuse negative or non-finite shares and sums away from 1; normalise if asked. Shares
    given in ``unit`` are divided by its whole budget (100 for percent) first."""
    scale = _checks.share_scale(unit)
    if scale != 1.0:
        w = w / scale
    finite = np.isfinite(w)
    negative = ~finite | (w < 0.0)
    for h in np.flatnonzero(negative.any(axis=-1) & ~bad):
        i = int(np.argmax(negative[h]))
        rule = ("must be a finite number" if not finite[h, i] else
                f"a budget share must not be negative, got {w[h, i] * scale:.6g}")
        problems.append(RowProblem(int(rows[h]), "shares", rule, "negative_share", i))
        bad[h] = True
    total = np.sum(np.where(negative, 0.0, w), axis=-1)
    off = np.abs(total - 1.0) > _checks.ADDING_UP_TOLERANCE
    normalised = 0
    if normalise:
        empty = off & (total <= 0.0) & ~bad
        for h in np.flatnonzero(empty):
            problems.append(RowProblem(int(rows[h]), "shares", "at least one budget share must "
                                       "be greater than zero", "shares_sum"))
            bad[h] = True
        fix = off & ~bad
        normalised = int(np.count_nonzero(fix))
        if normalised:
            w = w.copy()
            w[fix] /= total[fix, None]
        return w, normalised
    for h in np.flatnonzero(off & ~bad):
        given = float(total[h] * scale)
        problems.append(RowProblem(int(rows[h]), "shares", f"{_checks.sum_rule(unit)}; they sum "
                                   f"to {given:.10g}{_checks.unit_hint(given, unit)}",
                                   "shares_sum"))
        bad[h] = True
    return w, 0


#: The largest household weight (a number of households: no population comes near it) and the
#: largest income: bounds that keep every total over a batch's households (sum of weights,
#: of weighted incomes and compensations) inside floating point, so that no summary overflows
#: after the rows have been answered.
MAX_WEIGHT = 1e12
MAX_INCOME = 1e100


def _scalar_problems(rows: NDArray[np.int64], values: Vector, name: str, code: str,
                     problems: list[RowProblem], bad: NDArray[np.bool_]) -> None:
    top = MAX_INCOME if name == "expenditure" else MAX_WEIGHT
    wrong = ~np.isfinite(values) | (values <= 0.0) | (values > top)
    for h in np.flatnonzero(wrong & ~bad):
        what = "income (total expenditure)" if name == "expenditure" else "weight"
        problems.append(RowProblem(int(rows[h]), name, f"the household's {what} must be "
                                   f"greater than zero and at most {top:g}, got "
                                   f"{values[h]:.10g}", code))
        bad[h] = True


# -- calibration: the family over the households ------------------------------------------------


def _calibrated(job: HouseholdJob, rows: NDArray[np.int64], w0: Matrix, m: Vector,
                problems: list[RowProblem], bad: NDArray[np.bool_]
                ) -> tuple[Preferences | None, Matrix, dict[str, tuple[int, str]]]:
    """The family calibrated to every household not yet refused, as one model with a household
    axis (:meth:`Preferences.calibrate_many`), with those households' base quantities. The
    households the family refuses, and those whose income does not exceed the model's income
    floor at some period's prices, are refused by row (and marked in ``bad``)."""
    good = np.flatnonzero(~bad)
    if not good.size:
        return None, np.empty((0, job.n_items)), {}
    everyone = good.size == rows.size
    budget = BaseBudget.from_rows(job.base_prices, w0 if everyone else w0[good],
                                  m if everyone else m[good])
    done = FAMILIES[job.family].calibrate_many(budget, **job.parameters)
    for refusal in done.refused:
        problems.append(_refusal(job, int(rows[good[refusal.row]]), refusal.error, refusal.code))
    kept = done.kept
    model = done.model.take(kept) if done.refused else done.model
    below = _below_floor(job, model, rows[good[kept]], m[good[kept]], problems)
    if below.any():
        model = model.take(np.flatnonzero(~below))
        kept = kept[~below]
    bad[good] = True
    bad[good[kept]] = False
    q0 = budget.quantities if kept.size == good.size else budget.quantities[kept]
    return model, q0, dict(done.remarks)


def _refusal(job: HouseholdJob, row: int, error: DualcostError, code: str) -> RowProblem:
    """A household the model refuses: by the family's own rule (its code and words), or because
    its model could not be calibrated or evaluated (``model_failed``)."""
    field_name = "expenditure" if getattr(error, "parameter", "") in ("m0", "m1") else "shares"
    if code == "model_failed" or not isinstance(error, InvalidInput):
        return RowProblem(row, field_name, f"the {job.family} model cannot be evaluated for this "
                          f"household: {error}", "model_failed")
    item = error.index if isinstance(error.index, int) else None
    return RowProblem(row, field_name, error.rule, code, item)


def _below_floor(job: HouseholdJob, model: Preferences, rows: NDArray[np.int64], m: Vector,
                 problems: list[RowProblem]) -> NDArray[np.bool_]:
    """Households whose income does not exceed the model's income floor (a subsistence cost)
    at the current prices of some period; they are refused by row."""
    below = np.zeros(m.size, dtype=bool)
    for t in range(job.n_periods):
        floor = np.broadcast_to(model.income_floor(job.current_prices[t]), m.shape)
        for h in np.flatnonzero((m <= floor) & ~below):
            problems.append(RowProblem(int(rows[h]), "expenditure", f"the household falls below "
                                       f"subsistence at the current prices of period {t}: its "
                                       f"income {m[h]:.10g} does not exceed "
                                       f"{model.describe_income_floor('p1')} = "
                                       f"{float(floor[h]):.10g}", "below_subsistence"))
            below[h] = True
    return below


# -- evaluation: the kernel over the households ---------------------------------------------------


def _formula_values(job: HouseholdJob, p1: Vector, q0: Matrix, q1: Matrix) -> dict[str, Vector]:
    """The formula indices of :mod:`dualcost.core.indices`, along the item axis."""
    data = IndexData(p0=job.base_prices, p1=p1, q0=q0, q1=q1, sigma=job.lloyd_moulton_sigma)
    out: dict[str, Vector] = {}
    for name in job.formulas:
        if name == "fisher" and "laspeyres" in out and "paasche" in out:
            # P_F = (P_L P_P)^(1/2), from the two already computed rather than again.
            out[name] = np.sqrt(out["laspeyres"] * out["paasche"])
        else:
            out[name] = np.asarray(FORMULAS[name].compute(data), dtype=np.float64)
    return out


def _columns(job: HouseholdJob, households: int) -> dict[str, Matrix]:
    """Every column a household gets before the derived ones, over periods by households."""
    names = (*job.formulas, *KONUS_COLUMNS, *MONEY_COLUMNS)
    return {name: np.full((job.n_periods, households), np.nan) for name in names}


def _kernel(job: HouseholdJob, model: Preferences, p1: Vector, m: Vector,
            rows: NDArray[np.int64], problems: list[RowProblem], *, decomposition: bool
            ) -> tuple[PriceChange | None, NDArray[np.bool_]]:
    """The Konüs kernel over the model's households at prices ``p1`` (each at its own unchanged
    income), and which households it evaluated. When it raises, each household is evaluated
    alone to find the ones that fail; they are refused with the reason and the others are
    evaluated together again."""
    p0 = job.base_prices
    try:
        return (price_change(model, p0, p1, m, m, decomposition=decomposition),
                np.ones(m.size, dtype=bool))
    except DualcostError:
        check_deadline("evaluating households")  # a deadline that passed is no household's fault
    ok = np.ones(m.size, dtype=bool)
    for h in range(m.size):
        one = slice(h, h + 1)
        try:
            price_change(model.take([h]), p0, p1, m[one], m[one], decomposition=decomposition)
        except DualcostError as exc:
            check_deadline("evaluating households one by one")
            problems.append(_refusal(job, int(rows[h]), exc, "model_failed"))
            ok[h] = False
    live = np.flatnonzero(ok)
    if not live.size:
        return None, ok
    return (price_change(model.take(live), p0, p1, m[live], m[live],
                         decomposition=decomposition), ok)


def _count(counts: dict[str, tuple[int, Notice]], notice: Notice, n: int = 1) -> None:
    """Count ``n`` more household-periods that drew ``notice``'s code (the first one is kept)."""
    seen, first = counts.get(notice.code, (0, notice))
    counts[notice.code] = (seen + n, first)


def _negative_rows(x: Matrix) -> tuple[NDArray[np.intp], NDArray[np.bool_]]:
    """The households (rows of ``x``, households by items) with a demand below zero beyond
    rounding (:data:`NEGATIVE_TOLERANCE`), and which of their items. One pass over ``x`` when no
    demand is negative, the common case (and the only one for Cobb-Douglas and CES): the
    smallest of all, then (only if it is not >= 0, NaN included) row by row."""
    if x.size and x.min() >= 0.0:
        return np.zeros(0, dtype=np.intp), np.zeros((0, x.shape[-1]), dtype=bool)
    suspects = np.flatnonzero(np.min(x, axis=-1) < 0.0)
    if not suspects.size:
        return suspects, np.zeros((0, x.shape[-1]), dtype=bool)
    xs = x[suspects]
    floor = -NEGATIVE_TOLERANCE * np.maximum(np.max(np.abs(xs), axis=-1, keepdims=True), 1e-300)
    below = xs < floor
    found = below.any(axis=-1)
    return suspects[found], below[found]


def _broadcast_regularity(job: HouseholdJob, model: Preferences, change: PriceChange,
                          irregular: NDArray[np.uint32], items: ItemsAt, t: int,
                          live: NDArray[np.intp], counts: dict[str, tuple[int, Notice]]
                          ) -> NDArray[np.intp]:
    """Where a family that broadcasts leaves its regular region at period ``t``, found on the
    kernel's own arrays without a loop over households; the positions (in ``live``) of the
    households whose current demand is negative.

    Cobb-Douglas, CES (sigma >= 0) and Stone-Geary above subsistence come from a utility
    function that is increasing and quasi-concave, so their expenditure function is concave and
    increasing in prices and their Slutsky matrix symmetric and negative semidefinite
    (Mas-Colell, Whinston and Green 1995, *Microeconomic Theory*, 3.E-3.G): they report no
    regularity notices. What can still fail is a demand below zero (a Stone-Geary subsistence
    quantity below zero lets one fall under it). Checked: the Marshallian demand ``x(p1, m)``,
    which the kernel has computed already, and, for a family that is not homothetic, the
    Hicksian demand ``h(p1, u0)``. For a homothetic family ``h(p1, u0) = x(p1, e(p1, u0))
    = x(p1, m) e(p1, u0) / m`` (demand proportional to income: Mas-Colell, Whinston and Green
    1995, 3.B and 3.E), which has the signs of ``x(p1, m)``, so it is not evaluated again.
    """
    x1 = change.current_demands
    negative, below = _negative_rows(x1)
    at: dict[int, NDArray[np.bool_]] = {int(k): b for k, b in zip(negative, below, strict=True)}
    first: list[Notice] = []
    if negative.size:
        first += negative_demands("At current prices", {"demand": x1[negative[0]]})
    if not job.homothetic:
        h10 = model.hicksian(job.current_prices[t], change.base_utility)
        compensated, h_below = _negative_rows(h10)
        for k, b in zip(compensated, h_below, strict=True):
            at[int(k)] = at[int(k)] | b if int(k) in at else b
        if compensated.size:
            first += negative_demands("At current prices", {"compensated demand":
                                                            h10[compensated[0]]})
    if at:
        bit = np.uint32(_BIT["negative_demand"])
        for k, b in at.items():
            h = int(live[k])
            irregular[t, h] |= bit
            items[(t, h)] = tuple(int(i) for i in np.flatnonzero(b))
        _count(counts, first[0], len(at))
    return negative


def _formulas_left_out(job: HouseholdJob, values: dict[str, Vector], negative: NDArray[np.intp],
                       rows: NDArray[np.int64], problems: list[RowProblem],
                       counts: dict[str, tuple[int, Notice]]) -> NDArray[np.bool_]:
    """The formula values the households' data do not allow: a formula weighting by current
    quantities where the model's current demand is negative (the quantity is not one), and any
    value beyond floating point. Of the default set they are left out for the household (NaN,
    counted in a notice); a formula named in the request refuses the household instead (field
    ``formulas``). Which households (positions in ``rows``) were refused."""
    refused = np.zeros(rows.size, dtype=bool)
    left = np.zeros(rows.size, dtype=bool)
    first: Notice | None = None
    for i, name in enumerate(job.formulas):
        formula = REGISTRY[name]
        v = values[name]
        bad = ~np.isfinite(v)
        texts = {}
        if bad.any():
            texts.update({int(k): f"The {formula.title} index is beyond floating point for this "
                          "household at these prices (its sums overflow or underflow)"
                          for k in np.flatnonzero(bad)})
        if negative.size and formula.uses_current_quantities:
            bad[negative] = True
            texts.update({int(k): f"The {formula.title} index weights by current quantities, "
                          "and the model's current demand of this household is negative (the "
                          "model is outside its regular region)" for k in negative})
        if not texts:
            continue
        if job.formulas_given:
            for k, text in texts.items():
                if not refused[k]:
                    problems.append(RowProblem(int(rows[k]), "formulas", f"formulas[{i}] "
                                               f"({name}): {text}; leave the formula out to "
                                               "keep this household", "formula_not_computed",
                                               i))
                    refused[k] = True
            continue
        values[name] = np.where(bad, np.nan, v)
        left |= bad
        if first is None:
            k = min(texts)
            first = Notice("formula_not_computed", texts[k] + "; it was left out for that "
                           "household (null).")
    if first is not None:
        _count(counts, first, int(np.count_nonzero(left & ~refused)))
    return refused


def _all_at_once(job: HouseholdJob, model: Preferences, rows: NDArray[np.int64], q0: Matrix,
                 m: Vector, problems: list[RowProblem], counts: dict[str, tuple[int, Notice]]
                 ) -> tuple[dict[str, Matrix], NDArray[np.bool_], NDArray[np.uint32], ItemsAt]:
    """A family that broadcasts: the kernel over all the households at once, period by period,
    the formula indices along the item axis of the same arrays, and the regularity checks on
    them (:func:`_broadcast_regularity`)."""
    out = _columns(job, m.size)
    irregular = np.zeros((job.n_periods, m.size), dtype=np.uint32)
    items: ItemsAt = {}
    alive = np.ones(m.size, dtype=bool)
    for t in range(job.n_periods):
        p1 = job.current_prices[t]
        live = np.flatnonzero(alive)
        here = model if live.size == m.size else model.take(live)
        change, ok = _kernel(job, here, p1, m[live], rows[live], problems, decomposition=False)
        alive[live[~ok]] = False
        if change is None:
            continue
        if not ok.all():
            here = here.take(np.flatnonzero(ok))
        live = live[ok]
        values = _formula_values(job, p1, q0 if live.size == m.size else q0[live],
                                 change.current_demands)
        values.update(konus=change.konus_base, konus_current=change.konus_current,
                      konus_midpoint=change.midpoint.konus,
                      compensating_variation=change.compensating_variation,
                      equivalent_variation=change.equivalent_variation)
        negative = _broadcast_regularity(job, here, change, irregular, items, t, live, counts)
        refused = _formulas_left_out(job, values, negative, rows[live], problems, counts)
        where = slice(None) if live.size == m.size else live
        for name, v in values.items():
            out[name][t, where] = v
        if refused.any():
            alive[live[refused]] = False
    return out, alive, irregular, items


#: Notices of a single comparison that the batch states once for all households.
_JOB_LEVEL_NOTICES = frozenset({"homothetic", "current_quantities_from_model"})


def _one_by_one(job: HouseholdJob, model: RowModels, rows: NDArray[np.int64], m: Vector,
                problems: list[RowProblem], counts: dict[str, tuple[int, Notice]]
                ) -> tuple[dict[str, Matrix], NDArray[np.bool_], NDArray[np.uint32], ItemsAt]:
    """A family that does not broadcast: the kernel over the households through the
    row-by-row fallback, then each household's comparison assembled and checked as its own
    single comparison would be (:func:`dualcost.core.comparison.comparison_of`): the formula
    indices, the checks, the validity (:mod:`dualcost.core.validity`: the family's
    ``regularity``, negative demands, the Konüs bound) and the notices, counted over
    households and periods. A default formula the household's data do not allow is left out
    for it; a named one refuses the household."""
    out = _columns(job, m.size)
    irregular = np.zeros((job.n_periods, m.size), dtype=np.uint32)
    items: ItemsAt = {}
    alive = np.ones(m.size, dtype=bool)
    drawn: list[list[list[Notice]]] = [[] for _ in range(m.size)]
    for t in range(job.n_periods):
        live = np.flatnonzero(alive)
        change, ok = _kernel(job, model.take(live), job.current_prices[t], m[live], rows[live],
                             problems, decomposition=True)
        alive[live[~ok]] = False
        if change is None:
            continue
        for j, h in enumerate(live[ok]):
            check_deadline("calibrating and comparing households one by one")
            try:
                r = comparison_of(model.model(h), model.budget(h), change.row(j),
                                  lloyd_moulton_sigma=job.lloyd_moulton_sigma,
                                  formulas=job.formulas, formulas_required=False)
            except DualcostError as exc:
                problems.append(_refusal(job, int(rows[h]), exc, "model_failed"))
                alive[h] = False
                continue
            refusal = _named_formula_left_out(job, r.formulas, r.notices, int(rows[h]))
            if refusal is not None:
                problems.append(refusal)
                alive[h] = False
                continue
            for name in job.formulas:
                found = r.formulas.get(name)  # left out (a notice says why): stays NaN
                if found is not None:
                    out[name][t, h] = found.value
            out["konus"][t, h], out["konus_current"][t, h] = r.konus.base, r.konus.current
            out["konus_midpoint"][t, h] = r.konus.midpoint
            out["compensating_variation"][t, h] = r.compensating_variation
            out["equivalent_variation"][t, h] = r.equivalent_variation
            if not r.validity.regular:
                irregular[t, h] = reason_mask(n.code for n in r.validity.reasons)
                items[(t, int(h))] = r.validity.items
            drawn[h].append(r.notices)
    for h, household in enumerate(drawn):  # counted household by household, then by period
        if not alive[h]:
            continue
        for notices in household:
            for code in dict.fromkeys(n.code for n in notices if n.code not in _JOB_LEVEL_NOTICES):
                _count(counts, next(n for n in notices if n.code == code))
    return out, alive, irregular, items


def _named_formula_left_out(job: HouseholdJob, computed: Mapping[str, Any],
                            notices: Sequence[Notice], row: int) -> RowProblem | None:
    """The refusal of household ``row`` when a formula named in the request was left out of its
    comparison (the comparison's notice says why); None when every named formula was computed,
    or when the formulas are the default set (left out for the household, with the notice)."""
    if not job.formulas_given:
        return None
    for i, name in enumerate(job.formulas):
        if name in computed:
            continue
        title = REGISTRY[name].title
        why = next((n.message.split("; it was left out")[0] for n in notices
                    if n.code == "formula_not_computed" and f"The {title} index" in n.message),
                   f"The {title} index cannot be computed for this household")
        return RowProblem(row, "formulas", f"formulas[{i}] ({name}): {why}; leave the formula "
                          "out to keep this household", "formula_not_computed", i)
    return None


def _kept_items(items: ItemsAt, kept: NDArray[np.intp]) -> ItemsAt:
    """``items`` of the households at positions ``kept``, renumbered as positions in ``kept``."""
    if not items:
        return {}
    position = {int(old): new for new, old in enumerate(kept)}
    return {(t, position[h]): at for (t, h), at in items.items() if h in position}


# -- a chunk ----------------------------------------------------------------------------------


def _row_checks(job: HouseholdJob, chunk: HouseholdChunk, rows: NDArray[np.int64], w0: Matrix,
                problems: list[RowProblem], bad: NDArray[np.bool_]
                ) -> tuple[Matrix, Vector, Vector, int]:
    """Shares, incomes, weights and the Sato-Vartia index's positive shares, row by row: the
    (possibly normalised) shares, the incomes (1 where none are given), the weights and how
    many rows were normalised."""
    h = rows.size
    w0, normalised = _share_problems(rows, w0, job.normalise_shares, problems, bad,
                                     job.share_unit)
    if chunk.expenditure is not None:
        m = np.asarray(chunk.expenditure, dtype=np.float64)
        _scalar_problems(rows, m, "expenditure", "bad_income", problems, bad)
    elif job.needs_income:
        raise InvalidInput("expenditure", f"the {job.family} family is not homothetic: give "
                           "each household's income (total expenditure)")
    else:
        # Homothetic: the indices do not depend on income; money amounts are per unit.
        m = np.ones(h)
    weights = np.ones(h) if chunk.weights is None else np.asarray(chunk.weights, np.float64)
    _scalar_problems(rows, weights, "weight", "bad_weight", problems, bad)
    if "sato_vartia" in job.formulas:
        zero = w0 <= 0.0
        for r in np.flatnonzero(zero.any(axis=-1) & ~bad):
            i = int(np.argmax(zero[r]))
            problems.append(RowProblem(int(rows[r]), "shares", "the Sato-Vartia index takes "
                                       "logarithms of expenditure shares, so every share must "
                                       "be greater than zero; leave the formula out to keep "
                                       "this household", "zero_share", i))
            bad[r] = True
    return w0, m, weights, normalised


def _evaluated(job: HouseholdJob, rows: NDArray[np.int64], w0: Matrix, m: Vector,
               problems: list[RowProblem], bad: NDArray[np.bool_],
               counts: dict[str, tuple[int, Notice]]
               ) -> tuple[dict[str, Matrix], NDArray[np.uint32], ItemsAt,
                          dict[str, tuple[int, str]]]:
    """The model's columns for the households not refused (marked in ``bad`` otherwise), where
    the model is outside its regular region among them (bits and items), and the family's
    remarks on their calibration."""
    model, q0, remarks = _calibrated(job, rows, w0, m, problems, bad)
    keep = np.flatnonzero(~bad)
    if model is None or not keep.size:
        return _columns(job, 0), np.zeros((job.n_periods, 0), dtype=np.uint32), {}, remarks
    if FAMILIES[job.family].broadcasts:
        values, alive, irregular, items = _all_at_once(job, model, rows[keep], q0, m[keep],
                                                       problems, counts)
    else:
        assert isinstance(model, RowModels)  # what calibrate_many gives such a family
        values, alive, irregular, items = _one_by_one(job, model, rows[keep], m[keep], problems,
                                                      counts)
    if not alive.all():
        bad[keep[~alive]] = True
        values = {name: v[:, alive] for name, v in values.items()}
        irregular = irregular[:, alive]
        items = _kept_items(items, np.flatnonzero(alive))
    return values, irregular, items, remarks


def evaluate_chunk(job: HouseholdJob, chunk: HouseholdChunk) -> ChunkResult:
    """Check and evaluate one chunk of households; rows that break a rule are left out and
    reported, never silently repaired (normalised shares are counted). Where the model is
    outside its regular region for a household-period its figures are withheld (NaN) and
    ``irregular`` says why; a formula of the default set that a household's data do not allow
    is NaN for it, counted in ``notice_counts``. Every other number is finite."""
    rows = np.asarray(chunk.rows, dtype=np.int64)
    w0 = np.asarray(chunk.shares, dtype=np.float64)
    h, n = rows.size, job.n_items
    if w0.shape != (h, n):
        raise InvalidInput("shares", f"must be a {h} by {n} array (households by items), got "
                           f"shape {w0.shape}")
    problems: list[RowProblem] = list(chunk.problems)
    bad = np.zeros(h, dtype=bool)
    known = {p.row for p in problems}
    if known:
        bad |= np.isin(rows, np.fromiter(known, dtype=np.int64))
    counts: dict[str, tuple[int, Notice]] = {}
    with np.errstate(all="ignore"):
        w0, m, weights, normalised = _row_checks(job, chunk, rows, w0, problems, bad)
        values, irregular, items, remarks = _evaluated(job, rows, w0, m, problems, bad, counts)
        keep = ~bad
        kept_m = m[keep]
        withheld = irregular != 0
        any_withheld = bool(withheld.any())
        if any_withheld:  # not results: the model is outside its regular region there
            for name in (*KONUS_COLUMNS, *MONEY_COLUMNS):
                values[name] = np.where(withheld, np.nan, values[name])
        values["cv_percent"] = 100.0 * values["compensating_variation"] / kept_m
        for name in job.formulas:
            target = FORMULAS[name].target
            k = values[{"base": "konus", "current": "konus_current",
                        "midpoint": "konus_midpoint"}[target]]
            values[f"bias_{name}"] = 100.0 * (values[name] - k)
        # Rows the arithmetic could not carry (an overflow at extreme inputs) are refused too:
        # the model's figures must be finite wherever they are results.
        finite = np.ones(int(np.count_nonzero(keep)), dtype=bool)
        for name in (*KONUS_COLUMNS, *MONEY_COLUMNS):
            ok = np.isfinite(values[name])
            finite &= np.all(ok | withheld if any_withheld else ok, axis=0)
    kept_rows = rows[keep]
    if not finite.all():
        for r in kept_rows[~finite]:
            problems.append(RowProblem(int(r), "shares", "the model could not be evaluated in "
                                       "floating point for this household (a result overflowed or "
                                       "is undefined)", "not_evaluable"))
        values = {name: v[:, finite] for name, v in values.items()}
        irregular = irregular[:, finite]
        items = _kept_items(items, np.flatnonzero(finite))
        keep_idx = np.flatnonzero(keep)[finite]
        keep = np.zeros(h, dtype=bool)
        keep[keep_idx] = True
        kept_rows = rows[keep]
        kept_m = m[keep]
    with_income = chunk.expenditure is not None
    if not with_income:
        for name in MONEY_COLUMNS:
            values.pop(name)
    ids = None if chunk.ids is None else tuple(chunk.ids[i] for i in np.flatnonzero(keep))
    records = None if chunk.records is None else np.asarray(chunk.records, dtype=np.int64)
    if records is not None and problems:
        line = dict(zip(rows.tolist(), records.tolist(), strict=True))
        problems = [p if p.record is not None or p.row not in line
                    else dataclasses.replace(p, record=line[p.row]) for p in problems]
    return ChunkResult(
        rows=kept_rows, ids=ids, weights=weights[keep],
        expenditure=kept_m if with_income else None,
        values={name: values[name] for name in job.output_columns(with_income)},
        problems=tuple(sorted(problems, key=lambda p: p.row)), normalised=normalised,
        remarks=remarks, notice_counts=counts, irregular=irregular, irregular_items=items,
        records=None if records is None else records[keep],
    )


def chunks_of(
    job: HouseholdJob,
    shares: npt.ArrayLike,
    *,
    expenditure: npt.ArrayLike | None = None,
    weights: npt.ArrayLike | None = None,
    ids: Sequence[str | None] | None = None,
    rows: npt.ArrayLike | None = None,
) -> Iterator[HouseholdChunk]:
    """Split in-memory arrays into the job's chunks (views, not copies)."""
    w = np.asarray(shares, dtype=np.float64)
    if w.ndim != 2 or w.shape[1] != job.n_items:
        raise InvalidInput("shares", f"must be a households by items array with {job.n_items} "
                           f"columns, got shape {w.shape}")
    h = w.shape[0]
    if h == 0:
        raise InvalidInput("shares", "give at least one household")
    m = None if expenditure is None else _sized("expenditure", expenditure, h)
    a = None if weights is None else _sized("weights", weights, h)
    labels = np.arange(h, dtype=np.int64) if rows is None else _sized("rows", rows, h).astype(np.int64)
    if ids is not None and len(ids) != h:
        raise InvalidInput("ids", f"must hold {h} ids, one per household, got {len(ids)}")
    step = job.chunk_rows
    for start in range(0, h, step):
        part = slice(start, start + step)
        yield HouseholdChunk(rows=labels[part], shares=w[part],
                             expenditure=None if m is None else m[part],
                             weights=None if a is None else a[part],
                             ids=None if ids is None else tuple(ids[part]))


def _sized(name: str, values: npt.ArrayLike, h: int) -> Vector:
    arr = np.asarray(values, dtype=np.float64)
    if arr.shape != (h,):
        raise InvalidInput(name, f"must hold {h} values, one per household, got shape {arr.shape}")
    return arr


# -- summaries --------------------------------------------------------------------------------


def weighted_quantiles(values: Vector, weights: Vector, probabilities: Sequence[float]) -> Vector:
    """Quantiles of the weighted empirical distribution, by inverting it:
    ``Q(p) = min {x : F(x) >= p}`` with ``F`` the share of weight at or below ``x`` (Hyndman and
    Fan 1996, definition 1, with weights)."""
    order = np.argsort(values, kind="stable")
    v = values[order]
    cumulative = np.cumsum(weights[order])
    target = np.asarray(probabilities, dtype=np.float64) * cumulative[-1]
    idx = np.minimum(np.searchsorted(cumulative, target, side="left"), v.size - 1)
    return np.asarray(v[idx], dtype=np.float64)


@dataclass(frozen=True)
class IndexSummary:
    """How one index is spread over the households in one period."""

    index: str
    democratic: float
    plutocratic: float | None
    quantiles: tuple[tuple[float, float], ...]
    share_above_democratic: float
    share_above_plutocratic: float | None
    minimum: float
    maximum: float
    #: How many households it is over (fewer than the period's when a default formula was left
    #: out for some).
    households: int = 0


@dataclass(frozen=True)
class PeriodSummary:
    """The aggregates of one period, over the households whose model is regular there."""

    period: int
    households: int
    weight_total: float
    expenditure_total: float | None
    indices: tuple[IndexSummary, ...]
    compensating_variation_total: float | None
    #: 100 sum_h a_h CV_h / sum_h a_h m_h: the compensation as a percent of all income.
    cv_percent_of_income: float | None
    #: Households left out of every aggregate of the period: the model is outside its regular
    #: region for them there.
    households_outside_regular_region: int = 0


def summarise_index(name: str, values: Vector, weights: Vector, expenditure: Vector | None,
                    quantiles: Sequence[float]) -> IndexSummary:
    """Democratic and plutocratic means (Prais 1959), weighted quantiles, and the weighted share
    of households whose index exceeds each mean."""
    total = float(np.sum(weights))
    democratic = float(np.sum(weights * values) / total)
    plutocratic = share_pluto = None
    if expenditure is not None:
        spend = weights * expenditure
        plutocratic = float(np.sum(spend * values) / np.sum(spend))
        share_pluto = float(np.sum(weights[values > plutocratic]) / total)
    qs = weighted_quantiles(values, weights, quantiles)
    return IndexSummary(
        index=name, democratic=democratic, plutocratic=plutocratic,
        quantiles=tuple((float(p), float(q)) for p, q in zip(quantiles, qs, strict=True)),
        share_above_democratic=float(np.sum(weights[values > democratic]) / total),
        share_above_plutocratic=share_pluto,
        minimum=float(values.min()), maximum=float(values.max()), households=int(values.size),
    )


@dataclass
class SkipReport:
    """Rows left out: all counted, by reason; the first ``LISTED_PROBLEMS`` listed."""

    count: int = 0
    by_reason: dict[str, int] = field(default_factory=dict)
    listed: list[RowProblem] = field(default_factory=list)

    def add(self, problems: Iterable[RowProblem]) -> None:
        for p in problems:
            self.count += 1
            self.by_reason[p.code] = self.by_reason.get(p.code, 0) + 1
            if len(self.listed) < LISTED_PROBLEMS:
                self.listed.append(p)


class Accumulator:
    """Collects chunk results in order: what the summaries need, and the rows left out.

    It keeps the summarised indices, weights, incomes and regularity flags of every household
    (a few numbers each), not the shares; with ``keep_all`` it keeps every output column and
    the items of each irregular household-period too (for an answer that lists every
    household).
    """

    def __init__(self, job: HouseholdJob, *, keep_all: bool = False) -> None:
        self.job = job
        self.keep_all = keep_all
        self.parts: list[ChunkResult] = []
        self.skipped = SkipReport()
        self.households = 0
        self.chunks = 0
        self.normalised = 0
        self.remarks: dict[str, tuple[int, str]] = {}
        self.with_income: bool | None = None
        self.notice_counts: dict[str, tuple[int, Notice]] = {}
        #: Household-periods outside the model's regular region: per period, and per reason.
        self.outside = np.zeros(job.n_periods, dtype=np.int64)
        self.outside_by_reason: dict[str, int] = {}

    def add(self, result: ChunkResult) -> None:
        self.chunks += 1
        self.households += result.size
        self.normalised += result.normalised
        for code, (count, text) in result.remarks.items():
            self.remarks[code] = (self.remarks.get(code, (0, text))[0] + count, text)
        for code, (count, notice) in result.notice_counts.items():
            seen, first = self.notice_counts.get(code, (0, notice))
            self.notice_counts[code] = (seen + count, first)
        self.skipped.add(result.problems)
        if result.size:
            self.with_income = result.expenditure is not None
        flags = result.irregular
        if flags is not None and flags.size and flags.any():
            self.outside += np.count_nonzero(flags, axis=1)
            for code, bit in _BIT.items():
                n = int(np.count_nonzero(flags & np.uint32(bit)))
                if n:
                    self.outside_by_reason[code] = self.outside_by_reason.get(code, 0) + n
        if not self.keep_all:
            names = self.job.summarised
            result = ChunkResult(rows=result.rows, ids=None, weights=result.weights,
                                 expenditure=result.expenditure,
                                 values={n: result.values[n] for n in names}
                                 | ({"compensating_variation": result.values["compensating_variation"]}
                                    if "compensating_variation" in result.values else {}),
                                 problems=(), normalised=0, irregular=result.irregular)
        self.parts.append(result)

    def column(self, name: str) -> Matrix:
        parts = [p.values[name] for p in self.parts if p.size]
        return np.concatenate(parts, axis=1) if parts else np.empty((self.job.n_periods, 0))

    def weights(self) -> Vector:
        return np.concatenate([p.weights for p in self.parts]) if self.parts else np.empty(0)

    def expenditure(self) -> Vector | None:
        if not self.with_income:
            return None
        return np.concatenate([p.expenditure for p in self.parts if p.expenditure is not None])

    def irregular(self) -> NDArray[np.uint32]:
        """The regularity flags of every household kept, periods by households."""
        parts = [p.irregular_or_zeros(self.job.n_periods) for p in self.parts if p.size]
        return (np.concatenate(parts, axis=1) if parts
                else np.zeros((self.job.n_periods, 0), dtype=np.uint32))

    def irregular_items(self) -> ItemsAt:
        """The items of every irregular household-period, by position among all households."""
        out: ItemsAt = {}
        offset = 0
        for p in self.parts:
            out.update({(t, h + offset): at for (t, h), at in p.irregular_items.items()})
            offset += p.size
        return out

    def summary(self, quantiles: Sequence[float] = DEFAULT_QUANTILES) -> tuple[PeriodSummary, ...]:
        """Each period's aggregates over the households whose model is regular there; an index
        left out for some households (a default formula their data do not allow) is summarised
        over the others."""
        if self.households == 0:
            return ()
        a = self.weights()
        m = self.expenditure()
        columns = {name: self.column(name) for name in self.job.summarised}
        cv = self.column("compensating_variation") if m is not None else None
        flags = self.irregular()
        out = []
        for t in range(self.job.n_periods):
            regular = flags[t] == 0
            outside = int(a.size - np.count_nonzero(regular))

            def pick(v: Vector, regular: NDArray[np.bool_] = regular,
                     outside: int = outside) -> Vector:
                return v[regular] if outside else v

            at, mt = pick(a), None if m is None else pick(m)
            if not at.size:
                out.append(PeriodSummary(
                    period=t, households=0, weight_total=0.0,
                    expenditure_total=None if m is None else 0.0, indices=(),
                    compensating_variation_total=None, cv_percent_of_income=None,
                    households_outside_regular_region=outside))
                continue
            indices = []
            for name in self.job.summarised:
                v = pick(columns[name][t])
                ok = np.isfinite(v)
                if ok.all():
                    indices.append(summarise_index(name, v, at, mt, quantiles))
                elif ok.any():
                    indices.append(summarise_index(name, v[ok], at[ok],
                                                   None if mt is None else mt[ok], quantiles))
            cv_total = None if cv is None else float(np.sum(at * pick(cv[t])))
            spend = None if mt is None else float(np.sum(at * mt))
            out.append(PeriodSummary(
                period=t, households=int(at.size), weight_total=float(np.sum(at)),
                expenditure_total=spend, indices=tuple(indices),
                compensating_variation_total=cv_total,
                cv_percent_of_income=None if cv_total is None or spend is None
                else 100.0 * cv_total / spend,
                households_outside_regular_region=outside,
            ))
        return tuple(out)

    def notices(self) -> tuple[Notice, ...]:
        out = list(self.job.notices)
        if self.job.homothetic:
            out.append(Notice("homothetic", f"The {self.job.family} model is homothetic: each "
                              "household's Konüs index is the same at every living standard."))
        out.append(Notice("current_quantities_from_model", "The Paasche, Fisher, Törnqvist and "
                          "other current-weighted formulas use each household's model demands at "
                          "current prices and its own (unchanged) income."))
        if self.normalised:
            out.append(Notice("shares_normalised", f"The shares of {self.normalised} "
                              "household(s) did not sum to 1; as asked, each was divided by its "
                              "sum."))
        for code, (count, text) in self.remarks.items():
            out.append(Notice(code, f"For {count} household(s) {text}"))
        outside = int(self.outside.sum())
        if outside:
            by_period = ", ".join(str(int(n)) for n in self.outside)
            by_reason = ", ".join(f"{code} {n}" for code, n in self.outside_by_reason.items())
            out.append(Notice("households_outside_regular_region", f"{outside} "
                              "household-period(s) are outside the model's regular region "
                              f"(by period, in order: {by_period}; by reason: {by_reason}). "
                              "There the Konüs indices, compensating and equivalent "
                              "variation, cv_percent and the biases are null (model_regular "
                              "false): they are not results. Each period's summary leaves "
                              "those households out of every aggregate; their formula indices "
                              "stay in their rows."))
        for code, (count, first) in self.notice_counts.items():
            out.append(Notice(code, f"{count} household-period(s) drew this notice; the first: "
                              f"{first.message}", first.items))
        if self.with_income is False:
            out.append(Notice("no_incomes", "No incomes were given: compensating variation is "
                              "stated only in percent of income, and the plutocratic "
                              "(expenditure-weighted) aggregates are not available."))
        return tuple(out)


# -- the whole job ----------------------------------------------------------------------------


@dataclass(frozen=True)
class HouseholdResults:
    """Every household's results (columns over periods by households), with the summaries.

    As in :class:`ChunkResult`: ``irregular`` flags the household-periods where the model is
    outside its regular region (their model figures are NaN), ``irregular_items`` the items
    named there; a formula left out for a household is NaN for it.
    """

    job: HouseholdJob
    rows: NDArray[np.int64]
    ids: tuple[str | None, ...] | None
    weights: Vector
    expenditure: Vector | None
    values: dict[str, Matrix]
    summary: tuple[PeriodSummary, ...]
    skipped: SkipReport
    notices: tuple[Notice, ...]
    engine: str
    chunks: int
    irregular: NDArray[np.uint32]
    irregular_items: ItemsAt


#: Evaluates a job's chunks somewhere and yields their results in input order (see
#: :func:`evaluate_locally`; :mod:`dualcost.engines` holds the others).
Evaluator = Callable[[HouseholdJob, Iterable[HouseholdChunk]], Iterable[ChunkResult]]


def evaluate_locally(job: HouseholdJob, chunks: Iterable[HouseholdChunk]) -> Iterator[ChunkResult]:
    """Evaluate the chunks one after another in this process."""
    for chunk in chunks:
        yield evaluate_chunk(job, chunk)


def collect(
    job: HouseholdJob,
    results: Iterable[ChunkResult],
    *,
    on_bad_rows: OnBadRows = "reject",
    quantiles: Sequence[float] = DEFAULT_QUANTILES,
    engine: str = "local",
) -> HouseholdResults:
    """Gather chunk results in order into one answer. With ``on_bad_rows="reject"`` any refused
    row raises :class:`InvalidRows` (listing up to 20); with ``"skip"`` they are reported."""
    acc = Accumulator(job, keep_all=True)
    for result in results:
        acc.add(result)
    if acc.skipped.count and on_bad_rows == "reject":
        raise InvalidRows(acc.skipped.listed[:20], acc.skipped.count)
    if acc.households == 0:
        raise InvalidInput("households", f"no household could be evaluated: all "
                           f"{acc.skipped.count} rows were refused")
    names = job.output_columns(bool(acc.with_income))
    has_ids = any(p.ids is not None for p in acc.parts)
    ids = tuple(i for p in acc.parts for i in (p.ids or (None,) * p.size)) if has_ids else None
    return HouseholdResults(
        job=job, rows=np.concatenate([p.rows for p in acc.parts]), ids=ids,
        weights=acc.weights(), expenditure=acc.expenditure(),
        values={name: acc.column(name) for name in names},
        summary=acc.summary(quantiles), skipped=acc.skipped, notices=acc.notices(),
        engine=engine, chunks=acc.chunks, irregular=acc.irregular(),
        irregular_items=acc.irregular_items(),
    )


def check_quantiles(quantiles: Sequence[float]) -> tuple[float, ...]:
    out = []
    for i, q in enumerate(quantiles):
        value = _checks.scalar("quantiles", q)
        if not 0.0 <= value <= 1.0:
            raise InvalidInput("quantiles", f"a quantile is a probability between 0 and 1, got "
                               f"{value:g}", i)
        out.append(value)
    return tuple(out)


def run_households(
    job: HouseholdJob,
    shares: npt.ArrayLike,
    *,
    expenditure: npt.ArrayLike | None = None,
    weights: npt.ArrayLike | None = None,
    ids: Sequence[str | None] | None = None,
    on_bad_rows: OnBadRows = "reject",
    quantiles: Sequence[float] = DEFAULT_QUANTILES,
    evaluate: Evaluator = evaluate_locally,
    engine: str = "local",
) -> HouseholdResults:
    """Evaluate a whole batch held in memory: ``shares`` is households by items.

    ``evaluate`` runs the chunks, in this process by default; another engine (a Dask cluster:
    :func:`dualcost.engines.dask.cluster_evaluator`) gives the same result, bit for bit, and
    ``engine`` names it in the result.
    """
    qs = check_quantiles(quantiles)
    chunks = chunks_of(job, shares, expenditure=expenditure, weights=weights, ids=ids)
    return collect(job, evaluate(job, chunks), on_bad_rows=on_bad_rows, quantiles=qs,
                   engine=engine)
