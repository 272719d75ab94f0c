"""The Konüs kernel: one change of prices and income, evaluated through a model's public methods.

:func:`price_change` is the one place where the Konüs quantities are computed from a model; the
single comparison (:func:`dualcost.core.comparison.compare`), the households
(:mod:`dualcost.core.households`) and the Konüs series (:mod:`dualcost.core.series`) all call
it. With utility ``u``, expenditure function ``e``, indirect utility ``v`` and demands ``x``:

- living standards ``u0 = v(p0, m0)`` and ``u1 = v(p1, m1)``;
- the Konüs (1924) index at a living standard, ``K(u) = e(p1, u) / e(p0, u)``, at ``u0`` (the
  target of base-weighted formulas) and at ``u1`` (current-weighted ones);
- the midpoint standard ``u*`` with ``e(p0, u*) = (e(p0, u0) e(p0, u1))^(1/2)``, the target of
  the symmetric formulas (Diewert 1976; Caves, Christensen and Diewert 1982);
- compensating and equivalent variation as losses, ``CV = e(p1, u0) - m1`` and
  ``EV = m0 - e(p0, u1)`` (Hicks 1942);
- the current demands ``x(p1, m1)``, and on request the demands of the Hicks decomposition,
  ``x(p0, m0)`` and ``h(p1, u0)``, with ``h(p, u)`` against ``x(p, e(p, u))`` at three points for
  the duality check.

Every argument may carry leading axes that broadcast with the model's own household axis: one
price vector and a float per argument give floats (the single comparison); prices ``(N,)`` with
incomes ``(H,)`` against a model of H households give arrays ``(H,)``; prices ``(P, N)`` give a
series of P comparisons. The calls are made in a fixed order, each group under the caller's
names for its arguments, so that the first error is the one the single comparison has always
reported.
"""

from __future__ import annotations

import math
from collections.abc import Iterator
from contextlib import contextmanager
from dataclasses import dataclass
from typing import Any, TypeVar

import numpy as np

from .errors import InvalidInput
from .preferences.base import Preferences


@contextmanager
def naming(**names: str) -> Iterator[None]:
    """Re-label a family's errors about ``prices``/``income``/``utility`` with the caller's names."""
    try:
        yield
    except InvalidInput as exc:
        if exc.parameter in names:
            raise exc.renamed(names[exc.parameter]) from exc
        raise


_R = TypeVar("_R")


def _record(cls: type[_R], **values: Any) -> _R:
    """A frozen record built without its ``__init__``, which sets each field through
    ``object.__setattr__``: the single comparison builds three per call on its hot path. Every
    field must be given."""
    record = object.__new__(cls)
    record.__dict__.update(values)
    return record


def _geometric_mean(a: Any, b: Any) -> Any:
    """``(a b)^(1/2)`` for positive ``a``, ``b``; as ``a^(1/2) b^(1/2)`` where the product
    would leave the floating-point range (incomes near 1e300 or 1e-300)."""
    if isinstance(a, float) and isinstance(b, float):
        product = a * b
        if 0.0 < product < math.inf:
            return math.sqrt(product)
        return math.sqrt(a) * math.sqrt(b)
    with np.errstate(over="ignore", under="ignore"):
        product = np.multiply(a, b)
        safe = (product > 0.0) & np.isfinite(product)
    return np.where(safe, np.sqrt(np.where(safe, product, 1.0)), np.sqrt(a) * np.sqrt(b))


@dataclass(frozen=True)
class StandardAt:
    """The living standard an income buys at base prices, and the Konüs index there."""

    income: Any
    utility: Any
    konus: Any


def konus_at_income(model: Preferences, p0: Any, p1: Any, income: Any) -> StandardAt:
    """``u = v(p0, m)`` and ``K(u) = e(p1, u) / e(p0, u)`` (Konüs 1924)."""
    u = model.indirect_utility(p0, income)
    return _record(StandardAt, income=income, utility=u,
                   konus=model.expenditure(p1, u) / model.expenditure(p0, u))


@dataclass(frozen=True)
class Decomposition:
    """The demands the single comparison reports (Hicks decomposition) and checks (duality)."""

    base_demands: Any  # x(p0, m0)
    base_compensated: Any  # h(p0, u0)
    base_at_cost: Any  # x(p0, e(p0, u0))
    current_compensated: Any  # h(p1, u1)
    current_at_cost: Any  # x(p1, e(p1, u1))
    compensated_demands: Any  # h(p1, u0)
    compensated_at_cost: Any  # x(p1, e(p1, u0))


@dataclass(frozen=True)
class PriceChange:
    """Everything :func:`price_change` evaluates, element by element over the leading axes."""

    base_prices: Any
    current_prices: Any
    base_income: Any
    current_income: Any
    base_utility: Any  # u0 = v(p0, m0)
    current_utility: Any  # u1 = v(p1, m1)
    base_cost: Any  # e(p0, u0)
    current_cost: Any  # e(p1, u1)
    compensated_income: Any  # e(p1, u0)
    equivalent_income: Any  # e(p0, u1)
    midpoint: StandardAt  # m* = (e(p0, u0) e(p0, u1))^(1/2), u* = v(p0, m*), K(u*)
    konus_base: Any  # e(p1, u0) / e(p0, u0)
    konus_current: Any  # e(p1, u1) / e(p0, u1)
    compensating_variation: Any  # e(p1, u0) - m1
    equivalent_variation: Any  # m0 - e(p0, u1)
    current_demands: Any = None  # x(p1, m1)
    decomposition: Decomposition | None = None

    def row(self, h: int) -> PriceChange:
        """Household ``h`` (along the last leading axis) as one comparison: numbers as floats."""
        picked = {name: _pick(value, h, name in _ITEM_FIELDS) for name, value in vars(self).items()
                  if name not in ("midpoint", "decomposition")}
        mid = _record(StandardAt, **{name: _pick(value, h, False)
                                     for name, value in vars(self.midpoint).items()})
        parts = None if self.decomposition is None else _record(
            Decomposition, **{name: _pick(value, h, True)
                              for name, value in vars(self.decomposition).items()})
        return _record(PriceChange, **picked, midpoint=mid, decomposition=parts)


_ITEM_FIELDS = frozenset({"base_prices", "current_prices", "current_demands"})


def _pick(value: Any, h: int, items: bool) -> Any:
    if value is None:
        return None
    arr = np.asarray(value)
    if arr.ndim == int(items):  # no household axis: common to every household
        return value
    out = arr[..., h, :] if items else arr[..., h]
    return float(out) if out.ndim == 0 else out


def price_change(model: Preferences, p0: Any, p1: Any, m0: Any, m1: Any, *,
                 demands: bool = True, decomposition: bool = False) -> PriceChange:
    """The Konüs quantities of the change from ``(p0, m0)`` to ``(p1, m1)`` under ``model``
    (module docstring), broadcast over leading axes; ``demands`` adds ``x(p1, m1)`` and
    ``decomposition`` the demands of :class:`Decomposition`.

    Errors about prices, incomes and utilities are named as the single comparison names them
    (``p0``, ``p1``, ``m0``, ``m1``).
    """
    x, e, h = model.marshallian, model.expenditure, model.hicksian
    with naming(prices="p0", income="m0", utility="m0"):
        u0 = model.indirect_utility(p0, m0)
        x0 = x(p0, m0) if decomposition else None
        e00 = e(p0, u0)
        h00 = h(p0, u0) if decomposition else None
    with naming(prices="p1", income="m1", utility="m1"):
        u1 = model.indirect_utility(p1, m1)
        x1 = x(p1, m1) if demands or decomposition else None
        e11 = e(p1, u1)
        h11, x11 = (h(p1, u1), x(p1, e11)) if decomposition else (None, None)
    with naming(prices="p1", income="m0", utility="m0"):
        e10 = e(p1, u0)
        h10, x10 = (h(p1, u0), x(p1, e10)) if decomposition else (None, None)
    with naming(prices="p0", income="m1", utility="m1"):
        e01 = e(p0, u1)
        x00 = x(p0, e00) if decomposition else None
    with naming(prices="p1", income="m1", utility="m1"):
        mid = konus_at_income(model, p0, p1, _geometric_mean(e00, e01))
    parts = None
    if decomposition:
        parts = _record(Decomposition, base_demands=x0, base_compensated=h00,
                        base_at_cost=x00, current_compensated=h11, current_at_cost=x11,
                        compensated_demands=h10, compensated_at_cost=x10)
    return _record(
        PriceChange,
        base_prices=p0, current_prices=p1, base_income=m0, current_income=m1,
        base_utility=u0, current_utility=u1, base_cost=e00, current_cost=e11,
        compensated_income=e10, equivalent_income=e01, midpoint=mid,
        konus_base=e10 / e00, konus_current=e11 / e01,
        compensating_variation=e10 - m1, equivalent_variation=m0 - e01,
        current_demands=x1, decomposition=parts,
    )
