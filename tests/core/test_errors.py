"""The core's exceptions: one tree, in one module, drawn in its docstring (common practice for a
library's errors, so a caller can catch a whole branch)."""

from __future__ import annotations

import importlib
import inspect
import pkgutil

import pytest

import dualcost.core
import dualcost.engines
from dualcost.core import errors
from dualcost.core.errors import DualcostError, InvalidInput, InvalidRows, RowProblem


def _modules() -> list[str]:
    names = []
    for package in (dualcost.core, dualcost.engines):
        names.append(package.__name__)
        names += [info.name for info in pkgutil.walk_packages(package.__path__,
                                                              package.__name__ + ".")]
    return names


def _exception_classes() -> set[type[BaseException]]:
    found = set()
    for name in _modules():
        module = importlib.import_module(name)
        for value in vars(module).values():
            if (inspect.isclass(value) and issubclass(value, BaseException)
                    and value.__module__.startswith(("dualcost.core", "dualcost.engines"))):
                found.add(value)
    return found


def test_every_exception_lives_in_errors_under_one_base_and_is_drawn() -> None:
    """Each exception class of the core and the engines is defined in dualcost.core.errors,
    derives from DualcostError and appears in the tree of that module's docstring. A private
    class (a signal raised and caught inside one module) is exempt."""
    classes = {c for c in _exception_classes() if not c.__name__.startswith("_")}
    assert {c.__name__ for c in classes} >= {"InvalidInput", "InvalidRows", "NumericalFailure",
                                             "DeadlineExceeded", "EngineUnavailable"}
    for cls in classes:
        assert cls.__module__ == "dualcost.core.errors", cls
        assert issubclass(cls, DualcostError), cls
        assert cls.__name__ in _drawn(), cls


def _drawn() -> set[str]:
    """The class names in the tree drawn in dualcost.core.errors' docstring."""
    block = (errors.__doc__ or "").split("::")[1].split("\n\n")[1]
    root = block.split()[0]
    return {root} | {line.split("──")[1].split()[0] for line in block.splitlines() if "──" in line}


def test_the_dask_engine_keeps_the_name_of_its_error() -> None:
    from dualcost.engines.dask import ClusterUnavailable

    assert ClusterUnavailable is errors.EngineUnavailable


def test_invalid_rows_names_the_first_bad_row() -> None:
    """InvalidRows is an InvalidInput about the households, pointing at the first bad row."""
    problems = [RowProblem(4, "shares", "a budget share is below zero", "negative_share", 2),
                RowProblem(9, "expenditure", "must be above zero", "expenditure")]
    exc = InvalidRows(problems, count=2)
    assert isinstance(exc, InvalidInput)
    assert (exc.parameter, exc.index, exc.count) == ("households", 4, 2)
    assert exc.problems == tuple(problems)
    assert str(exc) == ("households[4]: 2 household row(s) break a rule; first: row 4: a budget "
                        "share is below zero")
    with pytest.raises(DualcostError):
        raise exc
