"""The compute deadline's other duty: a long computation shares the interpreter with the
process's other threads (service/dualcost/core/deadline.py; our own rule, for CPython's
interpreter lock, which a busy thread may keep for tens of milliseconds)."""

from __future__ import annotations

import threading
import time

from dualcost.core import deadline
from dualcost.core.expressions import evaluate_all, parse


def test_a_thread_pauses_once_per_turn(monkeypatch) -> None:
    pauses: list[float] = []
    monkeypatch.setattr(deadline.time, "sleep", pauses.append)
    done = threading.Event()

    def work() -> None:
        deadline.share_the_interpreter()  # the turn starts
        deadline.share_the_interpreter()
        assert pauses == []  # within the turn: no pause
        start = time.monotonic()
        while time.monotonic() - start < deadline.TURN_SECONDS * 1.5:
            pass
        deadline.share_the_interpreter()
        assert pauses == [deadline.PAUSE_SECONDS]
        deadline.share_the_interpreter()  # a new turn has started
        assert pauses == [deadline.PAUSE_SECONDS]
        done.set()

    thread = threading.Thread(target=work)  # a thread of its own: the turn is per thread
    thread.start()
    thread.join(timeout=10)
    assert done.is_set()


def test_checking_the_deadline_and_evaluating_a_formula_share_the_interpreter(monkeypatch) -> None:
    calls: list[int] = []
    monkeypatch.setattr(deadline, "share_the_interpreter", lambda: calls.append(1))
    with deadline.deadline(10):
        deadline.check("testing")
    assert calls == [1]
    from dualcost.core import expressions

    monkeypatch.setattr(expressions, "share_the_interpreter", lambda: calls.append(2))
    formula = parse("log(a) + min(a, b)", ["a", "b"], parameter="f")
    evaluate_all([formula], {"a": 2.0, "b": 3.0})
    assert calls == [1, 2]


def test_a_new_computation_starts_a_new_turn(monkeypatch) -> None:
    """A thread that computed long ago does not pause at the first check of its next
    computation (a request on the event loop must not pay for the one before it)."""
    pauses: list[float] = []
    monkeypatch.setattr(deadline.time, "sleep", pauses.append)

    def work() -> None:
        deadline.share_the_interpreter()
        deadline._TURN.started -= 10.0  # the last turn began long ago
        with deadline.deadline(5):
            deadline.check("starting")
        assert pauses == []

    thread = threading.Thread(target=work)
    thread.start()
    thread.join(timeout=10)
    assert pauses == []
