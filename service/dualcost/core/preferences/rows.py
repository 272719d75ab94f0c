"""The fallback for families that do not broadcast: one calibrated model per household.

:meth:`Preferences.calibrate_many <dualcost.core.preferences.base.Preferences.calibrate_many>`
of a family without ``broadcasts`` calibrates each row of a budget of many households on its
own and keeps the models in a :class:`RowModels`, a model with a household axis whose public
methods evaluate row by row, each row through its own model's public methods (which in turn
evaluate that row's leading axes, periods for instance, natively or one at a time). It is the
batch counterpart of the element-by-element fallback of the base class, as scipy.stats falls
back on a loop when a distribution's ``_pdf`` takes scalars only.
"""

from __future__ import annotations

from collections.abc import Mapping, Sequence
from typing import Any

import numpy as np
from numpy.typing import NDArray

from ..deadline import check as check_deadline
from ..errors import DualcostError
from .base import BaseBudget, BatchCalibration, Preferences, RowRefusal, Vector


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
        shape = np.broadcast_shapes(prices.shape[:-1], *(v.shape for v in values),
                                    self.batch_shape)
        p = np.broadcast_to(prices, (*shape, prices.shape[-1]))
        vs = [np.broadcast_to(v, shape) for v in values]
        out = np.empty((*shape, self.n_items) if items else shape)
        for h in range(self.batch_shape[0]):
            check_deadline("evaluating the model one household after another")
            row = [v[..., h] for v in vs]
            args = [float(v) if v.ndim == 0 else v for v in row]
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
