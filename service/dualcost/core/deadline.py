"""The compute deadline of the work in progress: long computations check it between steps.

The service sets one per request (``with deadline(seconds): ...``, see the API routes); core loops
that can run long (a series period by period, households one by one, iterated least squares,
bootstrap draws, rolling windows) call :func:`check` between steps and stop with
:class:`~dualcost.core.errors.DeadlineExceeded`. Work that is not under a deadline (direct use of
the core from Python) never stops. Context variables keep each request's deadline to itself,
thread by thread.
"""

from __future__ import annotations

import time
from collections.abc import Iterator
from contextlib import contextmanager
from contextvars import ContextVar

from .errors import DeadlineExceeded, InvalidInput

_EXPIRES: ContextVar[tuple[float, float] | None] = ContextVar("dualcost_deadline", default=None)


@contextmanager
def deadline(seconds: float | None) -> Iterator[None]:
    """Run the enclosed work under a deadline of ``seconds`` (None: no deadline)."""
    if seconds is not None and not seconds > 0:
        raise InvalidInput("deadline_seconds", f"must be greater than zero, got {seconds!r}")
    token = _EXPIRES.set(None if seconds is None else (time.monotonic() + seconds, seconds))
    try:
        yield
    finally:
        _EXPIRES.reset(token)


def check(doing: str) -> None:
    """Raise :class:`DeadlineExceeded` when the current deadline has passed."""
    current = _EXPIRES.get()
    if current is not None and time.monotonic() > current[0]:
        raise DeadlineExceeded("deadline", f"the compute deadline of {current[1]:g} s passed while "
                               f"{doing}; reduce the size of the problem or ask for a longer "
                               "deadline (DUALCOST_COMPUTE_DEADLINE_SECONDS)")
