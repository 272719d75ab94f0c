"""The core's exceptions: one small tree.

::

    DualcostError                 every error the core raises on purpose
     ├── InvalidInput             an argument breaks a stated rule (sign, shape, adding-up, domain)
     └── NumericalFailure         valid inputs, but the evaluation left the finite floating-point range
          │                       or an iterative step did not converge
          └── DeadlineExceeded    an iterative solve ran past the compute deadline it was given

The core never knows an HTTP status; ``dualcost.api.problems`` is the one place that maps these
classes to problem responses.
"""

from __future__ import annotations

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
        The position of the offending element in a vector argument, if there is one.
    """

    parameter: str
    rule: str
    index: int | tuple[int, ...] | None = None

    def __post_init__(self) -> None:
        super().__init__(str(self))

    def __str__(self) -> str:
        where = self.parameter if self.index is None else f"{self.parameter}[{self.index}]"
        return f"{where}: {self.rule}"

    def renamed(self, parameter: str) -> InvalidInput:
        """The same error, told about the argument under the caller's name for it."""
        return type(self)(parameter=parameter, rule=self.rule, index=self.index)


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
