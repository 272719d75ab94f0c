"""The one interface every preference family implements, and the base-period budget it is
calibrated to.

A family is a consumer's preferences written through the dual side (Diewert 1974, "Applications
of duality theory"; Deaton and Muellbauer 1980, *Economics and Consumer Behavior*, ch. 2):

- ``expenditure(p, u)``       e(p, u), the least cost of living standard u at prices p;
- ``indirect_utility(p, m)``  v(p, m), the living standard income m buys at prices p;
- ``marshallian(p, m)``       x(p, m), the demands at prices p and income m;
- ``hicksian(p, u)``          h(p, u) = grad_p e(p, u) (Shephard's lemma);
- ``income_floor(p)``         the least income at which the family is defined at prices p;
- ``calibrate(base, ...)``    a classmethod that sets the free parameters so that the base bundle
                              is the optimal choice at base prices; ``calibrate_many`` does it for
                              many budgets (households) at once.

Broadcasting. A family implements private methods (``_expenditure``, ``_indirect_utility``,
``_marshallian``, and where it has them ``_hicksian`` and ``_income_floor``; a homothetic family
only ``_unit_cost`` and ``_budget_shares``) and inherits the public ones, which broadcast the way
the public methods of a scipy.stats distribution do over its private ``_pdf``: prices of shape
``(..., N)``, utilities or incomes of shape ``(...)`` and the model's own ``batch_shape`` (the
households it was calibrated to) give results of the broadcast shape, and ``(..., N)`` for
demands. A family that sets ``broadcasts = True`` receives the arrays as they are, leading axes
and all; for the others the base class evaluates element by element, one price vector and one
number at a time (scipy's ``np.vectorize`` fallback). One price vector with one Python float is
the hot path of a single comparison and goes straight to the private method.

Every calibrated family in dualcost measures utility so that a statistician can read it: for the
homothetic families ``u`` is money at the base prices (``e(p0, u) = u``); for the others the
family's docstring says what ``u`` is. Only ratios ``e(p1, u) / e(p0, u)`` and money amounts
leave the engine, and those do not depend on the choice.
"""

from __future__ import annotations

import abc
from collections.abc import Callable, Mapping, Sequence
from dataclasses import dataclass, field
from typing import Any, ClassVar, Literal, TypeVar

import numpy as np
import numpy.typing as npt
from numpy.typing import NDArray

from .. import _checks
from ..deadline import check as check_deadline
from ..errors import DualcostError, InvalidInput

Vector = NDArray[np.float64]
Matrix = NDArray[np.float64]
#: A number or an array over leading axes: what the public methods return (a Python float for
#: one price vector and one number).
Values = Any
_T = TypeVar("_T")
#: How many evaluations a model remembers (see :meth:`Preferences._remember`).
_REMEMBERED = 8


@dataclass(frozen=True)
class Notice:
    """A remark that goes with an answer: a warning, or a statement of what was done.

    ``code`` is a stable machine-readable word; ``message`` is one plain sentence.
    """

    code: str
    message: str
    #: The items the remark is about (0-based positions in the item list), for the caller to
    #: name by id and label; empty when it concerns no item in particular.
    items: tuple[int, ...] = ()


#: The form a parameter takes, which tells a caller (the web layer) how to read it: a number;
#: a vector or a matrix over the items; a nested CES tree; text; an item; one formula per item;
#: a list of price vectors; set by the service (the items' names, the compute deadline); or
#: given from Python only (a callable).
ParameterShape = Literal["number", "vector", "matrix", "tree", "text", "item", "formulas",
                         "path", "service", "python"]


@dataclass(frozen=True)
class ParameterSpec:
    """One behavioural parameter a family takes: its name, meaning, default and shape.

    ``default`` is ``None`` for a parameter without a default; ``required`` says whether the
    caller must give it; ``shape`` is its form (:data:`ParameterShape`).
    """

    name: str
    meaning: str
    required: bool = False
    default: Any = None
    shape: ParameterShape = "number"


@dataclass(frozen=True)
class BaseBudget:
    """Base-period prices with the base bundle, as quantities or as shares with total expenditure.

    Build it with :meth:`from_quantities` or :meth:`from_shares`; both check their inputs. A
    budget of many households (:meth:`from_rows`) has a leading household axis: quantities
    ``(H, N)`` and expenditure ``(H,)`` at one price vector.
    """

    prices: Vector
    quantities: Vector
    expenditure: Any  # a float, or (H,) for a budget of many households
    notices: tuple[Notice, ...] = field(default=())
    #: The shares as given, for a budget of many households built from them: the shares
    #: recomputed from the quantities differ from them in the last bit.
    given_shares: Matrix | None = None

    @property
    def shares(self) -> Vector:
        """Base expenditure shares ``p0_i q0_i / p0 . q0``."""
        if self.given_shares is not None:
            return self.given_shares
        return self.prices * self.quantities / _per_item(self.expenditure)

    @property
    def n_items(self) -> int:
        return int(self.prices.size)

    @property
    def batch_shape(self) -> tuple[int, ...]:
        """``(H,)`` for a budget of H households, ``()`` for one budget."""
        return tuple(self.quantities.shape[:-1])

    def row(self, h: int) -> BaseBudget:
        """Household ``h``'s own budget, built and checked as :meth:`from_shares` builds one."""
        if self.given_shares is not None:
            return BaseBudget.from_shares(self.prices, self.given_shares[h],
                                          float(self.expenditure[h]))
        return BaseBudget.from_quantities(self.prices, self.quantities[h])

    @classmethod
    def from_rows(cls, prices: npt.ArrayLike, shares: npt.ArrayLike,
                  expenditure: npt.ArrayLike) -> BaseBudget:
        """Many households' budgets at the same base prices: ``shares`` (H, N), ``expenditure``
        (H,), ``q0_h = w0_h (m_h / p0)``.

        The rows are not checked here: the caller checks each household's shares and income
        and leaves out, by row, the ones that break a rule (see :mod:`dualcost.core.households`);
        the prices are checked.
        """
        p = _checks.positive("p0", prices)
        w = np.asarray(shares, dtype=np.float64)
        m = np.asarray(expenditure, dtype=np.float64)
        if w.ndim != 2 or w.shape[1] != p.size or m.shape != w.shape[:1]:
            raise InvalidInput("shares", f"must be a households by {p.size} items array with one "
                               f"income per household, got shapes {w.shape} and {m.shape}")
        return cls(prices=p, quantities=w * (m[:, None] / p), expenditure=m, given_shares=w)

    @classmethod
    def from_quantities(
        cls,
        prices: npt.ArrayLike,
        quantities: npt.ArrayLike,
        *,
        expenditure: float | None = None,
    ) -> BaseBudget:
        """Base prices and base quantities; total expenditure is ``p0 . q0``.

        If ``expenditure`` is given too it must agree with ``p0 . q0`` to 1e-6 relative.
        """
        p = _checks.positive("p0", prices)
        q = _checks.nonnegative("q0", quantities, size=p.size)
        total = float(p @ q)
        if total <= 0.0:
            raise InvalidInput("q0", "at least one base quantity must be greater than zero")
        if expenditure is not None:
            m = _checks.scalar("m0", expenditure, minimum=0.0)
            if abs(m - total) > _checks.ADDING_UP_TOLERANCE * total:
                raise InvalidInput(
                    "m0",
                    f"base expenditure {m:.10g} differs from the value of the base basket "
                    f"p0 . q0 = {total:.10g}; give one of them, or make them agree",
                )
        return cls(prices=p, quantities=q, expenditure=total)

    @classmethod
    def from_shares(
        cls,
        prices: npt.ArrayLike,
        shares: npt.ArrayLike,
        expenditure: float,
        *,
        normalise: bool = False,
        unit: str = "fraction",
    ) -> BaseBudget:
        """Base prices, base expenditure shares and total expenditure.

        Shares must sum to one within 1e-6. Given in another ``unit`` (``percent``,
        ``per_mille``: see :data:`dualcost.core._checks.SHARE_UNITS`) they are divided by 100 or
        1000 first, and the budget carries a notice saying so. With ``normalise=True`` shares
        that do not sum to one are divided by their sum instead, and the budget carries a notice
        saying so.
        """
        p = _checks.positive("p0", prices)
        m = _checks.scalar("m0", expenditure, minimum=0.0)
        notices: tuple[Notice, ...] = converted_notices("The base expenditure shares", unit)
        if normalise:
            w = _checks.nonnegative("w0", shares, size=p.size) / _checks.share_scale(unit)
            total = float(w.sum())
            if total <= 0.0:
                raise InvalidInput("w0", "at least one base share must be greater than zero")
            if abs(total - 1.0) > 0.0:
                w = w / total
                notices += (
                    Notice(
                        "shares_normalised",
                        f"The base expenditure shares summed to {total:.10g}; as asked, each was "
                        "divided by that sum.",
                    ),
                )
        else:
            w = _checks.shares("w0", shares, size=p.size, unit=unit)
        return cls(prices=p, quantities=w * m / p, expenditure=m, notices=notices)



def converted_notices(what: str, unit: str) -> tuple[Notice, ...]:
    """The notice that shares given in ``unit`` were turned into fractions ("The base
    expenditure shares were given in percent (share_unit=percent) and divided by 100."); none for
    fractions."""
    scale = _checks.share_scale(unit)
    if scale == 1.0:
        return ()
    return (Notice("shares_converted", f"{what} were given in {_checks.unit_words(unit)} "
                   f"(share_unit={unit}) and divided by {scale:g}."),)


def _per_item(values: Any) -> Any:
    """A number, or an array over leading axes given a trailing axis so that it multiplies an
    array of items."""
    return values if isinstance(values, float) else np.asarray(values)[..., None]


@dataclass(frozen=True)
class RowRefusal:
    """A household of a budget of many that a family cannot be calibrated to.

    ``row`` is its position along the budget's household axis; ``error`` says why (an
    :class:`InvalidInput` names the budget's argument, ``"q0"``, ``"w0"`` or ``"m0"``, and the
    item); ``code`` is ``"model_failed"`` when the family's own calibration raised, or a word of
    the family's (``"below_subsistence"``).
    """

    row: int
    error: DualcostError
    code: str = "model_failed"


@dataclass(frozen=True)
class BatchCalibration:
    """A family calibrated to a budget of many households (:meth:`Preferences.calibrate_many`).

    ``model`` has batch shape ``(H,)`` over all the budget's rows; the refused rows hold
    stand-in parameters (or no model), so evaluate only the others, ``model.take(kept)``.
    ``remarks`` counts what calibration did to some rows: notice code -> (rows, one sentence
    that completes "For n household(s) ...").
    """

    model: Preferences
    refused: tuple[RowRefusal, ...] = ()
    remarks: Mapping[str, tuple[int, str]] = field(default_factory=dict)

    @property
    def kept(self) -> NDArray[np.intp]:
        """Positions of the rows calibrated."""
        refused = np.zeros(self.model.batch_shape[0], dtype=bool)
        refused[[r.row for r in self.refused]] = True
        return np.flatnonzero(~refused)


class Preferences(abc.ABC):
    """A calibrated preference family: the interface every family implements.

    Subclasses set ``family`` (the registry name), ``homothetic`` and ``broadcasts``, implement
    the private methods below and :meth:`calibrate`. Prices and incomes reaching these methods
    have been checked by the caller (see :mod:`dualcost.core.comparison`); the methods check
    only what is specific to the family (for example income below a subsistence cost).
    """

    family: ClassVar[str]
    #: One line for listings, and the published source of the functional form.
    title: ClassVar[str]
    source: ClassVar[str]
    #: The behavioural parameters ``calibrate`` accepts (keyword names).
    parameter_specs: ClassVar[tuple[ParameterSpec, ...]] = ()
    #: True when e(p, u) = u c(p): the Konüs index then does not depend on the living standard.
    homothetic: ClassVar[bool]
    #: True when the private methods take prices ``(..., N)`` and numbers ``(...)`` with leading
    #: axes (and broadcast them against the parameters' household axis); then
    #: :meth:`_calibrate_many` gives parameters with a household axis. False: the base class
    #: evaluates one price vector and one number at a time, and calibrates household by household.
    broadcasts: ClassVar[bool] = False

    n_items: int
    #: The households the parameters carry (``(H,)`` after :meth:`calibrate_many`), else ``()``.
    batch_shape: tuple[int, ...] = ()
    #: What calibration did to the parameters given (for example a within-tolerance rescaling),
    #: so that the answer can say so; families set it on the instance.
    calibration_notices: tuple[Notice, ...] = ()

    # -- the dual quartet, public: they broadcast ---------------------------------------------
    def expenditure(self, prices: npt.ArrayLike, utility: npt.ArrayLike) -> Values:
        """e(p, u): the least expenditure reaching living standard ``utility`` at ``prices``."""
        p: Any = prices  # exact types checked: the hot path takes nothing else
        number: Any = utility
        if type(number) is float and type(p) is np.ndarray and p.ndim == 1 \
                and not self.batch_shape:  # one price vector, one float: the hot path
            return float(self._expenditure(p, utility))
        return self._broadcast("_expenditure", False, prices, utility)

    def indirect_utility(self, prices: npt.ArrayLike, income: npt.ArrayLike) -> Values:
        """v(p, m): the living standard that ``income`` buys at ``prices``."""
        p: Any = prices  # exact types checked: the hot path takes nothing else
        number: Any = income
        if type(number) is float and type(p) is np.ndarray and p.ndim == 1 \
                and not self.batch_shape:  # one price vector, one float: the hot path
            return float(self._indirect_utility(p, income))
        return self._broadcast("_indirect_utility", False, prices, income)

    def marshallian(self, prices: npt.ArrayLike, income: npt.ArrayLike) -> Values:
        """x(p, m): the demanded quantities at ``prices`` and ``income``, shape ``(..., N)``."""
        p: Any = prices  # exact types checked: the hot path takes nothing else
        number: Any = income
        if type(number) is float and type(p) is np.ndarray and p.ndim == 1 \
                and not self.batch_shape:
            return self._marshallian(p, income)
        return self._broadcast("_marshallian", True, prices, income)

    def hicksian(self, prices: npt.ArrayLike, utility: npt.ArrayLike) -> Values:
        """h(p, u) = grad_p e(p, u), the least-cost bundle, shape ``(..., N)``."""
        p: Any = prices  # exact types checked: the hot path takes nothing else
        number: Any = utility
        if type(number) is float and type(p) is np.ndarray and p.ndim == 1 \
                and not self.batch_shape:
            return self._hicksian(p, utility)
        return self._broadcast("_hicksian", True, prices, utility)

    def income_floor(self, prices: npt.ArrayLike) -> Values:
        """The least income at which the family is defined at ``prices`` (0 for most)."""
        if type(prices) is np.ndarray and prices.ndim == 1 and not self.batch_shape:
            return float(self._income_floor(prices))
        return self._broadcast("_income_floor", False, prices)

    # -- the private methods a family implements ------------------------------------------------
    @abc.abstractmethod
    def _expenditure(self, prices: Vector, utility: Any) -> Any:
        """e(p, u) at one price vector and one number (with ``broadcasts``: leading axes)."""

    @abc.abstractmethod
    def _indirect_utility(self, prices: Vector, income: Any) -> Any:
        """v(p, m)."""

    @abc.abstractmethod
    def _marshallian(self, prices: Vector, income: Any) -> Any:
        """x(p, m), with the items along the last axis."""

    def _hicksian(self, prices: Vector, utility: Any) -> Any:
        """h(p, u) = x(p, e(p, u)); families with a direct closed form override this."""
        return self._marshallian(prices, self._expenditure(prices, utility))

    def _income_floor(self, prices: Vector) -> Any:
        """The least income at which the family is defined; 0 unless the family says otherwise."""
        return 0.0

    # -- broadcasting ---------------------------------------------------------------------------
    def _broadcast(self, name: str, items: bool, prices: npt.ArrayLike,
                   *numbers: npt.ArrayLike) -> Values:
        """Check the shapes, then evaluate the private method ``name`` natively (``broadcasts``)
        or element by element; ``items`` says the result has an item axis."""
        p = np.asarray(prices, dtype=np.float64)
        if p.ndim == 0 or p.shape[-1] != self.n_items:
            raise InvalidInput("prices", f"must end with an axis of {self.n_items} prices, one per "
                               f"item; got shape {p.shape}")
        values = [np.asarray(v, dtype=np.float64) for v in numbers]
        shape = _leading_shape(p.shape[:-1], *(v.shape for v in values), self.batch_shape)
        want = (*shape, self.n_items) if items else shape
        if self.broadcasts:
            args = [float(v) if v.ndim == 0 else v for v in values]
            out = np.asarray(getattr(self, name)(p, *args), dtype=np.float64)
            if out.shape != want:
                out = np.array(np.broadcast_to(out, want))
        else:
            out = self._elementwise(name, p, values, shape, want)
        return float(out) if out.ndim == 0 else out

    def _elementwise(self, name: str, prices: Vector, values: Sequence[Vector],
                     shape: tuple[int, ...], want: tuple[int, ...]) -> Vector:
        """The fallback for a family whose private methods take one price vector and one
        number: a loop over the leading axes."""
        out = np.empty(want)
        p = np.broadcast_to(prices, (*shape, self.n_items))
        vs = [np.broadcast_to(v, shape) for v in values]
        method = getattr(self, name)
        for idx in np.ndindex(*shape):
            check_deadline("evaluating the model at one price vector after another")
            out[idx] = method(p[idx], *(float(v[idx]) for v in vs))
        return out

    def take(self, rows: npt.ArrayLike) -> Preferences:
        """The same model for some of its households only (``rows`` along the household axis)."""
        if not self.batch_shape:
            raise TypeError(f"this {self.family} model has no household axis")
        return self._take(np.asarray(rows, dtype=np.intp))

    def _take(self, rows: NDArray[np.intp]) -> Preferences:
        """A family with ``broadcasts`` gives the model of the households ``rows``."""
        raise NotImplementedError(f"the {self.family} family does not select households")

    def _remember(self, prices: Vector, compute: Callable[[Vector], _T]) -> _T:
        """``compute(prices)``, remembered for the last few price arrays: a comparison asks for
        the same two or three price vectors many times, and for a large tree one evaluation
        costs more than the rest of the comparison."""
        key: Any = prices.tobytes() if prices.ndim == 1 else (prices.shape, prices.tobytes())
        cache: dict[Any, Any] = self.__dict__.setdefault("_remembered", {})
        found = cache.get(key)
        if found is None:
            found = compute(prices)
            if len(cache) >= _REMEMBERED:
                cache.clear()
            cache[key] = found
        return found

    # -- calibration ---------------------------------------------------------------------------
    @classmethod
    @abc.abstractmethod
    def calibrate(cls, base: BaseBudget, **parameters: Any) -> Preferences:
        """Set the free parameters so that ``base.quantities`` is optimal at ``base.prices``."""

    @classmethod
    def calibrate_many(cls, base: BaseBudget, **parameters: Any) -> BatchCalibration:
        """Calibrate to each household of a budget of many (:meth:`BaseBudget.from_rows`).

        The result's model has the budget's household axis. A household the family cannot be
        calibrated to is refused by row (:class:`RowRefusal`), never by failing the whole
        batch; an error in the parameters themselves is raised. Families with ``broadcasts``
        calibrate all rows at once (:meth:`_calibrate_many`); the others one row at a time,
        each row's model kept in a :class:`RowModels`.
        """
        if cls.broadcasts:
            return cls._calibrate_many(base, **parameters)
        return calibrate_rows(cls, base, parameters)

    @classmethod
    def _calibrate_many(cls, base: BaseBudget, **parameters: Any) -> BatchCalibration:
        """A family with ``broadcasts`` calibrates all the budget's rows at once."""
        raise NotImplementedError(f"the {cls.family} family does not calibrate many at once")

    # -- optional capabilities ------------------------------------------------------------------
    def direct_utility(self, quantities: Vector) -> float:
        """u(x), where the family has it in closed form (used by the external checks)."""
        raise NotImplementedError(f"the {self.family} family has no closed-form direct utility")

    @property
    def substitution_elasticity(self) -> float | None:
        """The family's own elasticity of substitution, where it has a single one (CES)."""
        return None

    def describe_income_floor(self, prices_name: str) -> str:
        """How a message names the income floor at the prices called ``prices_name``."""
        return "the model's subsistence cost"

    def parameters(self) -> Mapping[str, Any]:
        """The calibrated parameters, as plain Python values, for reporting."""
        return {}

    def regularity(self, prices: Vector, income: float) -> list[Notice]:
        """Notices for every regularity condition that fails at ``(prices, income)``.

        The default checks nothing: families that are regular by construction (Cobb-Douglas,
        CES and nested CES with sigma >= 0, Stone-Geary above subsistence) keep it.
        """
        return []

    def slutsky_matrix(self, prices: Vector, income: float) -> Matrix:
        """S_ij = d h_i / d p_j at u = v(p, m), by central differences of h in log prices.

        Families with a closed form override this. The step is 1e-5 in ln p_j (relative
        accuracy about 1e-10 for smooth families).
        """
        u = self.indirect_utility(prices, income)
        n = prices.size
        out = np.empty((n, n))
        step = 1e-5
        for j in range(n):
            up = prices.copy()
            down = prices.copy()
            up[j] *= np.exp(step)
            down[j] *= np.exp(-step)
            out[:, j] = (self.hicksian(up, u) - self.hicksian(down, u)) / (up[j] - down[j])
        return out


def _leading_shape(*shapes: tuple[int, ...]) -> tuple[int, ...]:
    """The broadcast of the leading axes; the common case, one shape or none, without numpy's
    general rule (a speed trick: the households call this a dozen times per block)."""
    given = {shape for shape in shapes if shape}
    if len(given) <= 1:
        return given.pop() if given else ()
    try:
        return tuple(np.broadcast_shapes(*shapes))
    except ValueError:
        raise InvalidInput("prices", f"the leading axes of the prices, the numbers and the model "
                           f"{list(shapes)} do not broadcast") from None


def _one_vector(model: Preferences, prices: Any) -> bool:
    """One price vector for a model without a household axis: the hot path."""
    return type(prices) is np.ndarray and prices.ndim == 1 and not model.batch_shape


class HomotheticPreferences(Preferences):
    """A homothetic family, given through its unit cost ``c(p)`` and budget shares ``w(p)``.

    ``e(p, u) = u c(p)``, ``v(p, m) = m / c(p)``, ``x(p, m) = m w(p) / p`` and
    ``h(p, u) = e(p, u) w(p) / p``, with ``w = d ln c / d ln p`` by Shephard's lemma (Shephard
    1953; Diewert 1974, "Applications of duality theory"). A family implements ``_unit_cost``
    and ``_budget_shares`` (or both at once in ``_cost_and_shares``); families with a cheaper
    or safer form of one of the four override it.
    """

    homothetic = True
    #: True when ``_cost_and_shares`` gets both in one pass, cheaper than the two apart.
    one_pass: ClassVar[bool] = False

    @abc.abstractmethod
    def _unit_cost(self, prices: Vector) -> Any:
        """c(p) = e(p, 1), with c(p0) = 1 for the calibrated families."""

    @abc.abstractmethod
    def _budget_shares(self, prices: Vector) -> Any:
        """w_i(p) = d ln c / d ln p_i, which do not depend on income (a new array)."""

    def _cost_and_shares(self, prices: Vector) -> tuple[Any, Any]:
        """(c(p), w(p)); a family that gets both from one pass overrides this and sets
        ``one_pass``."""
        return self._unit_cost(prices), self._budget_shares(prices)

    def unit_cost(self, prices: npt.ArrayLike) -> Values:
        """c(p), over any leading axes of the prices."""
        if _one_vector(self, prices):
            return float(self._unit_cost(prices))  # type: ignore[arg-type]
        return self._broadcast("_unit_cost", False, prices)

    def budget_shares(self, prices: npt.ArrayLike) -> Values:
        """w(p), shape ``(..., N)``."""
        if _one_vector(self, prices):
            return self._budget_shares(prices)  # type: ignore[arg-type]
        return self._broadcast("_budget_shares", True, prices)

    def cost_and_shares(self, prices: npt.ArrayLike) -> tuple[Values, Values]:
        """(c(p), w(p))."""
        if _one_vector(self, prices):
            cost, shares = self._cost_and_shares(prices)  # type: ignore[arg-type]
            return float(cost), shares
        return self.unit_cost(prices), self.budget_shares(prices)

    def _evaluated(self, prices: Vector, shares: bool) -> list[Any]:
        """``[c(p), w(p)]``, remembered for the last few price arrays (see
        :meth:`Preferences._remember`), the shares (read-only) only once asked for: the
        households need only the cost at base prices. A family with ``one_pass`` gets both
        whenever one is asked for."""
        key = prices.tobytes() if prices.ndim == 1 else (prices.shape, prices.tobytes())
        cache: dict[Any, list[Any]] | None = self.__dict__.get("_evaluations")
        if cache is None:
            cache = self.__dict__["_evaluations"] = {}
        entry = cache.get(key)
        if entry is not None and entry[0] is not None and (entry[1] is not None or not shares):
            return entry
        if entry is None:
            if len(cache) >= _REMEMBERED:
                cache.clear()
            entry = cache[key] = [None, None]
        if entry[0] is None or (shares and entry[1] is None):
            if self.one_pass:
                entry[0], entry[1] = self._cost_and_shares(prices)
            elif entry[0] is None:
                entry[0] = self._unit_cost(prices)
            if shares and entry[1] is None:
                entry[1] = self._budget_shares(prices)
            if not isinstance(entry[0], np.ndarray) or entry[0].ndim == 0:
                entry[0] = float(entry[0])
            if entry[1] is not None:
                entry[1] = np.asarray(entry[1], dtype=np.float64)
                entry[1].setflags(write=False)
        return entry

    def _expenditure(self, prices: Vector, utility: Any) -> Any:
        return utility * self._evaluated(prices, False)[0]

    def _indirect_utility(self, prices: Vector, income: Any) -> Any:
        return income / self._evaluated(prices, False)[0]

    def _marshallian(self, prices: Vector, income: Any) -> Any:
        m = income if isinstance(income, float) else np.asarray(income)[..., None]
        return m * self._evaluated(prices, True)[1] / prices

    def _hicksian(self, prices: Vector, utility: Any) -> Any:
        cost, shares = self._evaluated(prices, True)
        e = utility * cost
        return (e if isinstance(e, float) else np.asarray(e)[..., None]) * shares / prices


# -- the fallback for families that do not broadcast: one calibrated model per household ------
#
# calibrate_many of a family without ``broadcasts`` calibrates each row of a budget of many
# households on its own and keeps the models in a RowModels, a model with a household axis whose
# public methods evaluate row by row, each row through its own model's public methods (which in
# turn evaluate that row's leading axes, periods for instance, natively or one at a time): the
# batch counterpart of the element-by-element fallback above, as scipy.stats falls back on a
# loop when a distribution's ``_pdf`` takes scalars only.


def calibrate_rows(cls: type[Preferences], base: BaseBudget,
                   parameters: Mapping[str, Any]) -> BatchCalibration:
    """Calibrate ``cls`` to each row of ``base`` in turn; a row whose budget or calibration
    raises is refused with the error (code ``model_failed``)."""
    models: list[Preferences | None] = []
    budgets: list[BaseBudget | None] = []
    refused = []
    for h in range(base.batch_shape[0]):
        check_deadline("calibrating the model to one household after another")
        try:
            budget = base.row(h)
            models.append(cls.calibrate(budget, **parameters))
            budgets.append(budget)
        except DualcostError as exc:
            models.append(None)
            budgets.append(None)
            refused.append(RowRefusal(h, exc))
    return BatchCalibration(RowModels(cls, models, budgets, base.n_items), tuple(refused))


class RowModels(Preferences):
    """A family calibrated household by household: ``models[h]`` is row ``h``'s own model,
    calibrated to ``budgets[h]`` (``None`` for a refused row, which must not be evaluated).

    The household axis is the last of the leading axes, as for every model with one: prices
    ``(..., H, N)`` (or fewer axes, broadcast) and numbers ``(..., H)``.
    """

    broadcasts = True  # the private methods below take the arrays whole, and loop over rows

    def __init__(self, family: type[Preferences], models: Sequence[Preferences | None],
                 budgets: Sequence[BaseBudget | None], n_items: int) -> None:
        self.family_class = family
        self.family = family.family  # type: ignore[misc]
        self.title = family.title  # type: ignore[misc]
        self.source = family.source  # type: ignore[misc]
        self.homothetic = family.homothetic  # type: ignore[misc]
        self.models = tuple(models)
        self.budgets = tuple(budgets)
        self.batch_shape = (len(self.models),)
        self.n_items = n_items

    @classmethod
    def calibrate(cls, base: BaseBudget, **parameters: Any) -> Preferences:
        raise TypeError("a RowModels is built by calibrate_many of a family")

    def _take(self, rows: NDArray[np.intp]) -> RowModels:
        return RowModels(self.family_class, [self.models[h] for h in rows],
                         [self.budgets[h] for h in rows], self.n_items)

    def model(self, h: int) -> Preferences:
        """Row ``h``'s own model."""
        found = self.models[h]
        if found is None:
            raise ValueError(f"household row {h} was refused at calibration")
        return found

    def budget(self, h: int) -> BaseBudget:
        """The budget row ``h``'s model was calibrated to."""
        found = self.budgets[h]
        if found is None:
            raise ValueError(f"household row {h} was refused at calibration")
        return found

    @property
    def substitution_elasticity(self) -> float | None:
        """The rows' common elasticity of substitution, when they share one."""
        values = {m.substitution_elasticity for m in self.models if m is not None}
        return values.pop() if len(values) == 1 else None

    # -- evaluation, row by row -------------------------------------------------------------
    def _by_row(self, method: str, items: bool, prices: Vector, *numbers: Any) -> Any:
        """Call each row's public ``method`` on its slice of the (broadcast) arguments."""
        values = [np.asarray(v, dtype=np.float64) for v in numbers]
        shape = _leading_shape(prices.shape[:-1], *(v.shape for v in values), self.batch_shape)
        p = np.broadcast_to(prices, (*shape, prices.shape[-1]))
        out = np.empty((*shape, self.n_items) if items else shape)
        if len(shape) == 1:
            # One number per household, the households' case: Python floats, so that each
            # row's model takes its own hot path.
            per_row = [np.broadcast_to(v, shape).tolist() for v in values]
            for h in range(shape[0]):
                check_deadline("evaluating the model one household after another")
                out[h] = getattr(self.model(h), method)(p[h], *(v[h] for v in per_row))
            return out
        vs = [np.broadcast_to(v, shape) for v in values]
        for h in range(self.batch_shape[0]):
            check_deadline("evaluating the model one household after another")
            args = [v[..., h] for v in vs]
            if items:
                out[..., h, :] = getattr(self.model(h), method)(p[..., h, :], *args)
            else:
                out[..., h] = getattr(self.model(h), method)(p[..., h, :], *args)
        return out

    def _expenditure(self, prices: Vector, utility: Any) -> Any:
        return self._by_row("expenditure", False, prices, utility)

    def _indirect_utility(self, prices: Vector, income: Any) -> Any:
        return self._by_row("indirect_utility", False, prices, income)

    def _marshallian(self, prices: Vector, income: Any) -> Any:
        return self._by_row("marshallian", True, prices, income)

    def _hicksian(self, prices: Vector, utility: Any) -> Any:
        return self._by_row("hicksian", True, prices, utility)

    def _income_floor(self, prices: Vector) -> Any:
        return self._by_row("income_floor", False, prices)

    def describe_income_floor(self, prices_name: str) -> str:
        known = next((m for m in self.models if m is not None), None)
        return Preferences.describe_income_floor(self, prices_name) if known is None else \
            known.describe_income_floor(prices_name)


def share_notices(shares: Vector, model: str) -> list[Notice]:
    """One notice when budget shares lie outside [0, 1], naming every such item in ``items``.

    A share below zero is a negative demand, and with shares adding up to one a share above one
    goes with one below zero: the model is not monotone there. Flexible forms are regular only
    near their base point (Christensen, Jorgenson and Lau 1975; Deaton and Muellbauer 1980), so
    the check is made at every evaluation (common practice). ``model`` starts the sentence,
    e.g. ``"translog"`` or ``"quadratic model's"``.
    """
    bad = np.flatnonzero((shares < 0.0) | (shares > 1.0))
    if not bad.size:
        return []
    count = "1 item" if bad.size == 1 else f"{bad.size} items"
    message = (
        f"The {model} budget share of {count} lies outside [0, 1] (lowest "
        f"{float(shares[bad].min()):.6g}, highest {float(shares[bad].max()):.6g}): the model "
        "is not regular at these prices."
    )
    return [Notice("shares_outside_unit_interval", message, tuple(int(i) for i in bad))]


def drop_rounding(difference: Matrix, magnitude: Matrix) -> Matrix:
    """Zero the entries of a difference that are within rounding error of its terms' size.

    Where the terms of a closed-form Slutsky matrix cancel (the Leontief limit), the leftover
    rounding noise would otherwise read as a relative positive eigenvalue in
    :func:`slutsky_notices`. The bound, 64 machine epsilons of the terms' absolute sum, is
    common practice.
    """
    noise = 64.0 * np.finfo(np.float64).eps * magnitude
    return np.where(np.abs(difference) <= noise, 0.0, difference)


def slutsky_notices(matrix: Matrix, prices: Vector, *, tolerance: float = 1e-8) -> list[Notice]:
    """Notices when a Slutsky matrix is not symmetric or not negative semidefinite.

    Both rules are in Mas-Colell, Whinston and Green (1995), *Microeconomic Theory*, 2.F and 3.G.
    The test is made on ``diag(p) S diag(p)``, which is scale-free, with ``tolerance`` relative to
    its largest element.
    """
    scaled = prices[:, None] * matrix * prices[None, :]
    scale = max(float(np.max(np.abs(scaled))), 1e-300)
    notices = []
    asym = float(np.max(np.abs(scaled - scaled.T))) / scale
    if asym > 1e-6:
        notices.append(
            Notice("slutsky_not_symmetric", f"The Slutsky matrix is not symmetric (relative gap "
                   f"{asym:.3g}); the demands cannot come from one utility function.")
        )
    top = float(np.max(np.linalg.eigvalsh(0.5 * (scaled + scaled.T)))) / scale
    if top > tolerance:
        notices.append(
            Notice("slutsky_not_negative_semidefinite",
                   f"The Slutsky matrix has a positive eigenvalue ({top:.3g} relative to its "
                   "largest element): the model is not concave in prices here, so its Konüs "
                   "index is not a valid cost-of-living index at these prices.")
        )
    return notices
