"""Request bodies built from query strings: the spreadsheet forms and the options of a CSV
upload carry what a JSON body would, as query parameters.

Vectors travel as short lists in the order given by ``items``. By default numbers use '.' as
decimal mark and the values are separated by commas (or all by semicolons); a caller whose
sheet writes decimal commas declares ``decimal=comma``, and then writes numbers with ',' as
decimal mark, values separated by ';'. No grouping either way, and a number that could be read
two ways (a '.' under ``decimal=comma``, more than one ',') is refused, not guessed. A value that
is not a number is named by its position (``#/query/p0/2``), and so is one beyond the
floating-point range or below the smallest normal float (the rule of every JSON body, see
``json_text.py``). The body built from them is validated by the operation's own model, and its
errors are named by query parameter through the operation's locator.
"""

from __future__ import annotations

import json
from collections.abc import Mapping
from typing import Any

from pydantic import BaseModel, ValidationError

from ..problems import FieldError, RequestProblem, field_errors
from ..schemas.common import DecimalMark
from .csv import parse_number
from .json_text import number_rule
from .locator import Locator


def vector(name: str, text: str | None, decimal: DecimalMark = "point") -> list[float] | None:
    """Numbers in item order: with '.' as decimal mark separated by commas (or all by
    semicolons); with ``decimal="comma"``, ',' as decimal mark and separated by semicolons."""
    if text is None:
        return None
    # With decimal points, semicolons may separate the values instead of commas: a sheet in a
    # comma-decimal locale may join its cells with ';' after turning its commas into points.
    separator = ";" if decimal == "comma" or ";" in text else ","
    values = []
    for i, cell in enumerate(text.split(separator)):
        values.append(_number(f"#/query/{name}/{i}", cell, decimal))
    return values


def number(name: str, text: str | None, decimal: DecimalMark = "point") -> float | None:
    """One number given as a query parameter of its own (``sigma``, ``m0``), written with the
    declared decimal mark."""
    return None if text is None else _number(f"#/query/{name}", text, decimal)


def _number(pointer: str, cell: str, decimal: DecimalMark) -> float:
    cell = cell.strip()
    if decimal == "comma":
        if "." in cell or cell.count(",") > 1:
            raise RequestProblem([FieldError(pointer, f"{cell!r} could be read more than one way: "
                                             "with decimal=comma, write one ',' as decimal mark, "
                                             "no '.' and no grouping, and separate values by ';'")])
        value = parse_number(cell.replace(",", "."))
    else:
        value = parse_number(cell)
    rule = number_rule(cell.replace(",", ".") if decimal == "comma" else cell)
    if rule is not None:  # beyond the floating-point range, or below the smallest normal float
        raise RequestProblem([FieldError(pointer, f"{cell} {rule}")])
    if value is None:
        hint = ("use '.' as decimal point, no grouping" if decimal == "point"
                else "use ',' as decimal mark, no grouping")
        if decimal == "point" and "," in cell:
            hint += "; for decimal commas add decimal=comma and separate values by ';'"
        raise RequestProblem([FieldError(pointer, f"{cell!r} is not a finite number ({hint})")])
    return value


def names(text: str | None, decimal: DecimalMark = "point") -> list[str]:
    """Names separated by commas; with ``decimal="comma"`` by semicolons where there are any,
    as a comma-decimal sheet joins its cells."""
    separator = ";" if decimal == "comma" and ";" in (text or "") else ","
    return [s.strip() for s in (text or "").split(separator) if s.strip()]


def rows(name: str, values: list[str] | None, n_periods: int, decimal: DecimalMark = "point",
         ) -> list[list[float]] | None:
    """One repeated query parameter per period, each a vector in item order."""
    if not values:
        return None
    if len(values) != n_periods:
        raise RequestProblem([FieldError(f"#/query/{name}", f"is given {len(values)} times but "
                                         f"there are {n_periods} periods; give it once per "
                                         "period, in the order of periods")])
    out = []
    for t, text in enumerate(values):
        try:
            row = vector(name, text, decimal)
        except RequestProblem as exc:
            raise RequestProblem([FieldError(e.pointer.replace(f"#/query/{name}/",
                                                               f"#/query/{name}/{t}/"), e.detail)
                                  for e in exc.errors]) from None
        assert row is not None
        out.append(row)
    return out


def validated(model: type[BaseModel], body: Mapping[str, Any], loc: Locator) -> Any:
    """The body built from the query, validated; errors name the query parameters."""
    try:
        return model.model_validate(body)
    except ValidationError as exc:
        raise RequestProblem([FieldError(loc.at(e.pointer), e.detail) for e in
                              field_errors(exc.errors(), body, prefix=("body",))]) from None


def json_parameter(name: str, text: str, example: str) -> Any:
    """A query parameter that holds JSON (a model, a tree)."""
    try:
        return json.loads(text)
    except json.JSONDecodeError as exc:
        raise RequestProblem.at(f"#/query/{name}", f"must be a JSON object such as {example}: "
                                f"{exc.msg}") from None
