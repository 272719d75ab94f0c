"""The compute deadline of the work in progress: long computations check it between steps.

The service sets one per request (``with deadline(seconds): ...``, see the API routes); core loops
that can run long (a series period by period, households one by one, iterated least squares,
bootstrap draws, rolling windows) call :func:`check` between steps and stop with
:class:`~dualcost.core.errors.DeadlineExceeded`. Work that is not under a deadline (direct use of
the core from Python) never stops. Context variables keep each request's deadline to itself,
thread by thread.

Checking is also where a long computation shares the interpreter (:func:`share_the_interpreter`):
Python hands its lock from a busy thread to a waiting one only at the busy thread's pace, and a
solver that calls back into Python in a tight loop (scipy's SLSQP, here) kept it for up to a
tenth of a second at a time, measured, while the thread that answers a service's requests waited.
"""

from __future__ import annotations

import threading
import time
from collections.abc import Iterator
from contextlib import contextmanager
from contextvars import ContextVar

from .errors import DeadlineExceeded, InvalidInput

_EXPIRES: ContextVar[tuple[float, float] | None] = ContextVar("dualcost_deadline", default=None)

#: After this long computing, a thread that checks its deadline pauses for ``PAUSE_SECONDS``, so
#: that the other threads of the process get the interpreter lock (a 4 % cost to long work).
TURN_SECONDS = 0.005
PAUSE_SECONDS = 0.0002
_TURN = threading.local()


@contextmanager
def deadline(seconds: float | None) -> Iterator[None]:
    """Run the enclosed work under a deadline of ``seconds`` (None: no deadline)."""
    if seconds is not None and not seconds > 0:
        raise InvalidInput("deadline_seconds", f"must be greater than zero, got {seconds!r}")
    token = _EXPIRES.set(None if seconds is None else (time.monotonic() + seconds, seconds))
    _TURN.started = time.monotonic()  # a computation's turn starts with it
    try:
        yield
    finally:
        _EXPIRES.reset(token)


def share_the_interpreter() -> None:
    """Pause briefly when this thread has computed for :data:`TURN_SECONDS` since its turn
    started (when it last paused, or when its computation started, see :func:`deadline`): the
    sleep releases the interpreter lock long enough for a waiting thread to take it."""
    now = time.monotonic()
    started = getattr(_TURN, "started", None)
    if started is None:
        _TURN.started = now
    elif now - started >= TURN_SECONDS:
        time.sleep(PAUSE_SECONDS)
        _TURN.started = time.monotonic()


def check(doing: str) -> None:
    """Raise :class:`DeadlineExceeded` when the current deadline has passed (and share the
    interpreter, see :func:`share_the_interpreter`)."""
    share_the_interpreter()
    current = _EXPIRES.get()
    if current is not None and time.monotonic() > current[0]:
        raise DeadlineExceeded("deadline", f"the compute deadline of {current[1]:g} s passed while "
                               f"{doing}; reduce the size of the problem or ask for a longer "
                               "deadline (DUALCOST_COMPUTE_DEADLINE_SECONDS)")
