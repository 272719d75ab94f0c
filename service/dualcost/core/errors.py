"""The core's exceptions: one small tree.

::

    DualcostError                 every error the core raises on purpose
     ├── InvalidInput             an argument breaks a stated rule (sign, shape, adding-up, domain)
     │    └── InvalidRows         household rows break a rule; each is named (a RowProblem)
     ├── NumericalFailure         valid inputs, but the evaluation left the finite floating-point range
     │    │                       or an iterative step did not converge
     │    └── DeadlineExceeded    an iterative solve ran past the compute deadline it was given
     ├── EngineUnavailable        an engine of dualcost.engines cannot run: its library is not
     │                            installed or its cluster cannot be reached
     └── StorageUnavailable       the database of jobs and saved runs (dualcost.storage) cannot
                                  be reached or used; nothing was written

The core never knows an HTTP status; ``dualcost.api.problems`` is the one place that maps these
classes to problem responses.
"""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass


class DualcostError(Exception):
    """Base of every error the core raises on purpose."""


@dataclass(eq=False)
class InvalidInput(DualcostError, ValueError):
    """An argument breaks a rule.

    Parameters
    ----------
    parameter:
        The argument's name as the caller knows it (``"p1"``, ``"sigma"``, ``"shares"``).
    rule:
        One plain sentence saying what the rule is and how the input breaks it.
    index:
        Where in the argument the offending element is, if it is one element: its position in a
        vector (``3``), its row and column in a matrix (``(2, 0)``), or, in a nested argument
        such as a tree of item groups, the path of keys and list positions that leads to it from
        the argument as the caller wrote it (``("children", 1, "sigma")``; ``()`` is the
        argument as a whole).
    """

    parameter: str
    rule: str
    index: int | tuple[int | str, ...] | None = None

    def __post_init__(self) -> None:
        super().__init__(str(self))

    def __str__(self) -> str:
        return f"{self._where()}: {self.rule}"

    def _where(self) -> str:
        """``p``, ``p[3]``, ``p[(2, 0)]``, or ``tree['children'][1]['sigma']`` for a path."""
        index = self.index
        if index is None or index == ():
            return self.parameter
        if isinstance(index, tuple) and any(isinstance(step, str) for step in index):
            return self.parameter + "".join(f"[{step!r}]" for step in index)
        return f"{self.parameter}[{index}]"

    def renamed(self, parameter: str) -> InvalidInput:
        """The same error, told about the argument under the caller's name for it."""
        return type(self)(parameter=parameter, rule=self.rule, index=self.index)


@dataclass(frozen=True)
class RowProblem:
    """Why one household row was refused.

    ``row`` is the caller's label for the row (the web layer numbers households from 1: the
    position in a JSON list, or the record after a CSV header); ``field`` is ``"shares"``,
    ``"expenditure"``, ``"weight"`` or ``"formulas"``; ``item`` is the position of the offending
    item for a share (of the formula in the job's list for ``"formulas"``); ``code`` is a stable
    word for counting; ``record`` is the line of a CSV upload where the row's record starts,
    when the row came from one.
    """

    row: int
    field: str
    rule: str
    code: str
    item: int | None = None
    record: int | None = None


class InvalidRows(InvalidInput):
    """Households that break a rule: each problem names the row, the field and the rule."""

    def __init__(self, problems: Sequence[RowProblem], count: int) -> None:
        first = problems[0]
        super().__init__("households", f"{count} household row(s) break a rule; first: row "
                         f"{first.row}: {first.rule}", first.row)
        self.problems = tuple(problems)
        self.count = count


@dataclass(eq=False)
class NumericalFailure(DualcostError, ArithmeticError):
    """Valid inputs whose evaluation overflowed, underflowed to nothing, or did not converge."""

    what: str
    reason: str

    def __post_init__(self) -> None:
        super().__init__(str(self))

    def __str__(self) -> str:
        return f"{self.what}: {self.reason}"


class DeadlineExceeded(NumericalFailure):
    """An iterative solve ran past the compute deadline it was given."""


class EngineUnavailable(DualcostError):
    """An engine of :mod:`dualcost.engines` cannot run here: its library is not installed, or
    the cluster it sends work to cannot be reached."""


class StorageUnavailable(DualcostError):
    """The database of household jobs and saved runs (:mod:`dualcost.storage`) cannot be
    reached or used: the transaction in progress was rolled back, nothing was written."""
