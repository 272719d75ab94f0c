"""Request bodies built from query strings: the spreadsheet forms and the options of a CSV
upload carry what a JSON body would, as query parameters.

Vectors travel as short comma-separated lists in the order given by ``items`` (or separated by
semicolons, for sheets whose locale writes decimal commas); a value that is not a number is named
by its position (``#/query/p0/2``). The body built from them is validated by the operation's own
model, and its errors are named by query parameter through the operation's locator.
"""

from __future__ import annotations

import json
from collections.abc import Mapping
from typing import Any

from pydantic import BaseModel, ValidationError

from ..problems import FieldError, RequestProblem, field_errors
from .csv import parse_number
from .locator import Locator


def vector(name: str, text: str | None) -> list[float] | None:
    """Numbers separated by commas (or all by semicolons), '.' as decimal point."""
    if text is None:
        return None
    # Semicolons may separate the values instead of commas: a sheet in a comma-decimal locale
    # joins cells with ';' and turns its decimal commas into points before sending.
    separator = ";" if ";" in text else ","
    values = []
    for i, cell in enumerate(text.split(separator)):
        value = parse_number(cell)
        if value is None:
            raise RequestProblem([FieldError(f"#/query/{name}/{i}", f"{cell.strip()!r} is not a "
                                             "finite number (use '.' as decimal point, no "
                                             "grouping)")])
        values.append(value)
    return values


def names(text: str | None) -> list[str]:
    return [s.strip() for s in (text or "").split(",") if s.strip()]


def rows(name: str, values: list[str] | None, n_periods: int) -> list[list[float]] | None:
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
            row = vector(name, text)
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
