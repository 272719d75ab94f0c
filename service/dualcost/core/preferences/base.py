"""The one interface every preference family implements, and the base-period budget it is
calibrated to.

A family is a consumer's preferences written through the dual side (Diewert 1974, "Applications
of duality theory"; Deaton and Muellbauer 1980, *Economics and Consumer Behavior*, ch. 2):

- ``expenditure(p, u)``       e(p, u), the least cost of living standard u at prices p;
- ``indirect_utility(p, m)``  v(p, m), the living standard income m buys at prices p;
- ``marshallian(p, m)``       x(p, m), the demands at prices p and income m;
- ``hicksian(p, u)``          h(p, u) = grad_p e(p, u) (Shephard's lemma);
- ``calibrate(base, ...)``    a classmethod that sets the free parameters so that the base bundle
                              is the optimal choice at base prices.

Every calibrated family in dualcost measures utility so that a statistician can read it: for the
homothetic families ``u`` is money at the base prices (``e(p0, u) = u``); for the others the
family's docstring says what ``u`` is. Only ratios ``e(p1, u) / e(p0, u)`` and money amounts
leave the engine, and those do not depend on the choice.
"""

from __future__ import annotations

import abc
from collections.abc import Mapping
from dataclasses import dataclass, field
from typing import Any, ClassVar

import numpy as np
import numpy.typing as npt
from numpy.typing import NDArray

from .. import _checks
from ..errors import InvalidInput

Vector = NDArray[np.float64]
Matrix = NDArray[np.float64]


@dataclass(frozen=True)
class Notice:
    """A remark that goes with an answer: a warning, or a statement of what was done.

    ``code`` is a stable machine-readable word; ``message`` is one plain sentence.
    """

    code: str
    message: str


@dataclass(frozen=True)
class ParameterSpec:
    """One behavioural parameter a family takes: its name, meaning and default.

    ``default`` is ``None`` for a parameter without a default; ``required`` says whether the
    caller must give it.
    """

    name: str
    meaning: str
    required: bool = False
    default: Any = None


@dataclass(frozen=True)
class BaseBudget:
    """Base-period prices with the base bundle, as quantities or as shares with total expenditure.

    Build it with :meth:`from_quantities` or :meth:`from_shares`; both check their inputs.
    """

    prices: Vector
    quantities: Vector
    expenditure: float
    notices: tuple[Notice, ...] = field(default=())

    @property
    def shares(self) -> Vector:
        """Base expenditure shares ``p0_i q0_i / p0 . q0``."""
        return self.prices * self.quantities / self.expenditure

    @property
    def n_items(self) -> int:
        return int(self.prices.size)

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
    ) -> BaseBudget:
        """Base prices, base expenditure shares and total expenditure.

        Shares must sum to one within 1e-6. With ``normalise=True`` shares that do not are divided
        by their sum instead, and the budget carries a notice saying so.
        """
        p = _checks.positive("p0", prices)
        m = _checks.scalar("m0", expenditure, minimum=0.0)
        notices: tuple[Notice, ...] = ()
        if normalise:
            w = _checks.nonnegative("w0", shares, size=p.size)
            total = float(w.sum())
            if total <= 0.0:
                raise InvalidInput("w0", "at least one base share must be greater than zero")
            if abs(total - 1.0) > 0.0:
                w = w / total
                notices = (
                    Notice(
                        "shares_normalised",
                        f"The base expenditure shares summed to {total:.10g}; as asked, each was "
                        "divided by that sum.",
                    ),
                )
        else:
            w = _checks.shares("w0", shares, size=p.size)
        return cls(prices=p, quantities=w * m / p, expenditure=m, notices=notices)


class Preferences(abc.ABC):
    """A calibrated preference family: the interface every family implements.

    Subclasses set ``family`` (the registry name), ``homothetic`` and implement the four
    functions and :meth:`calibrate`. Prices and incomes reaching these methods have been checked
    by the caller (see :mod:`dualcost.core.comparison`); the methods check only what is
    specific to the family (for example income below a subsistence cost).
    """

    family: ClassVar[str]
    #: One line for listings, and the published source of the functional form.
    title: ClassVar[str]
    source: ClassVar[str]
    #: The behavioural parameters ``calibrate`` accepts (keyword names).
    parameter_specs: ClassVar[tuple[ParameterSpec, ...]] = ()
    #: True when e(p, u) = u c(p): the Konüs index then does not depend on the living standard.
    homothetic: ClassVar[bool]

    n_items: int
    #: What calibration did to the parameters given (for example a within-tolerance rescaling),
    #: so that the answer can say so; families set it on the instance.
    calibration_notices: tuple[Notice, ...] = ()

    # -- the dual quartet --------------------------------------------------------------------
    @abc.abstractmethod
    def expenditure(self, prices: Vector, utility: float) -> float:
        """e(p, u): the least expenditure reaching living standard ``utility`` at ``prices``."""

    @abc.abstractmethod
    def indirect_utility(self, prices: Vector, income: float) -> float:
        """v(p, m): the living standard that ``income`` buys at ``prices``."""

    @abc.abstractmethod
    def marshallian(self, prices: Vector, income: float) -> Vector:
        """x(p, m): the demanded quantities at ``prices`` and ``income``."""

    def hicksian(self, prices: Vector, utility: float) -> Vector:
        """h(p, u) = x(p, e(p, u)); families with a direct closed form override this."""
        return self.marshallian(prices, self.expenditure(prices, utility))

    # -- calibration ---------------------------------------------------------------------------
    @classmethod
    @abc.abstractmethod
    def calibrate(cls, base: BaseBudget, **parameters: Any) -> Preferences:
        """Set the free parameters so that ``base.quantities`` is optimal at ``base.prices``."""

    # -- optional capabilities ------------------------------------------------------------------
    def direct_utility(self, quantities: Vector) -> float:
        """u(x), where the family has it in closed form (used by the external checks)."""
        raise NotImplementedError(f"the {self.family} family has no closed-form direct utility")

    @property
    def substitution_elasticity(self) -> float | None:
        """The family's own elasticity of substitution, where it has a single one (CES)."""
        return None

    def income_floor(self, prices: Vector) -> float:
        """The least income at which the family is defined at ``prices`` (0 for most)."""
        return 0.0

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


class HomotheticPreferences(Preferences):
    """A homothetic family, given through its unit cost ``c(p)`` and budget shares ``w(p)``.

    ``e(p, u) = u c(p)``, ``v(p, m) = m / c(p)``, ``x(p, m) = m w(p) / p`` and
    ``h(p, u) = e(p, u) w(p) / p``, with ``w = d ln c / d ln p`` by Shephard's lemma (Shephard
    1953; Diewert 1974, "Applications of duality theory"). Families with a cheaper or safer form
    of one of the four override it.
    """

    homothetic = True

    @abc.abstractmethod
    def unit_cost(self, prices: Vector) -> float:
        """c(p) = e(p, 1), with c(p0) = 1 for the calibrated families."""

    @abc.abstractmethod
    def budget_shares(self, prices: Vector) -> Vector:
        """w_i(p) = d ln c / d ln p_i, which do not depend on income."""

    def cost_and_shares(self, prices: Vector) -> tuple[float, Vector]:
        """(c(p), w(p)); a family that gets both from one pass overrides this."""
        return self.unit_cost(prices), self.budget_shares(prices)

    def _at(self, prices: Vector) -> tuple[float, Vector]:
        """(c(p), w(p)), remembered for the last few price vectors: a comparison asks for them
        at the same two or three price vectors many times, and for a large tree one evaluation
        costs more than the rest of the comparison."""
        key = prices.tobytes()
        cache: dict[bytes, tuple[float, Vector]] = self.__dict__.setdefault("_evaluations", {})
        found = cache.get(key)
        if found is None:
            cost, shares = self.cost_and_shares(prices)
            shares = np.array(shares, dtype=np.float64)
            shares.setflags(write=False)
            found = (float(cost), shares)
            if len(cache) >= 8:
                cache.clear()
            cache[key] = found
        return found

    def expenditure(self, prices: Vector, utility: float) -> float:
        return utility * self._at(prices)[0]

    def indirect_utility(self, prices: Vector, income: float) -> float:
        return income / self._at(prices)[0]

    def marshallian(self, prices: Vector, income: float) -> Vector:
        return income * self._at(prices)[1] / prices

    def hicksian(self, prices: Vector, utility: float) -> Vector:
        cost, shares = self._at(prices)
        return utility * cost * shares / prices


def share_notices(shares: Vector, model: str) -> list[Notice]:
    """One notice when budget shares lie outside [0, 1], naming the first such item.

    A share below zero is a negative demand, and with shares adding up to one a share above one
    goes with one below zero: the model is not monotone there. Flexible forms are regular only
    near their base point (Christensen, Jorgenson and Lau 1975; Deaton and Muellbauer 1980), so
    the check is made at every evaluation (common practice). ``model`` starts the sentence,
    e.g. ``"translog"`` or ``"quadratic model's"``.
    """
    bad = np.flatnonzero((shares < 0.0) | (shares > 1.0))
    if not bad.size:
        return []
    i = int(bad[0])
    message = (
        f"The {model} budget share of item {i} is {shares[i]:.6g}, outside [0, 1]: the model is "
        "not regular at these prices."
    )
    if bad.size == 2:
        message += f" The share of item {int(bad[1])} is outside [0, 1] too."
    elif bad.size > 2:
        rest = ", ".join(str(int(j)) for j in bad[1:])
        message += f" The shares of items {rest} are outside [0, 1] too."
    return [Notice("shares_outside_unit_interval", message)]


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
