"""Every number of every example, replaced one at a time by an extreme value, on every operation
the example targets: never a 5xx, and every 422 names a field (common practice for hardening an
HTTP API: one-value mutations of valid requests find what schema-driven fuzzing misses).

The values: 0, -1, 1e-320 (a subnormal), 1e308 (near the top of the floating-point range) and an
integer of 400 digits (beyond it). The last two kinds of literal are refused at the edge with a
pointer to exactly the number replaced; the others may be valid, or break a rule of the field,
or make the computation leave the floating-point range (a numerical-failure problem, which names
the input too).

An example holds up to several hundred numbers, most of them cells of the same field (the prices
of 36 periods), so each *field path* is mutated once: the path with list positions written ``*``
and item ids ``{item}`` (``/prices/*/*``, ``/base/prices/{item}``, ``/model/tree/children/*/sigma``),
at one of its positions chosen by a generator seeded with the example's name. Every distinct path
is covered, the same way on every run.
"""

from __future__ import annotations

import json
import random
from collections.abc import Iterator
from typing import Any

import pytest

from tests.conftest import EXAMPLES, load_example

EXAMPLE_FILES = sorted(p.name for p in EXAMPLES.glob("*.json"))
VALUES = {"zero": "0", "minus-one": "-1", "subnormal": "1e-320", "huge": "1e308",
          "400-digits": "1" + "0" * 399}
#: Literals the edge refuses wherever they are, naming exactly their place.
REFUSED_AT_THE_EDGE = {"subnormal", "400-digits"}

Path = tuple[str | int, ...]


def numbers(node: Any, path: Path = ()) -> Iterator[Path]:
    """The path of every number (not bool) in a JSON value."""
    if isinstance(node, bool):
        return
    if isinstance(node, (int, float)):
        yield path
    elif isinstance(node, dict):
        for key, value in node.items():
            yield from numbers(value, (*path, key))
    elif isinstance(node, list):
        for i, value in enumerate(node):
            yield from numbers(value, (*path, i))


def item_ids(body: dict[str, Any]) -> set[str]:
    return {it if isinstance(it, str) else it["id"] for it in body.get("items", [])}


def field_path(path: Path, items: set[str]) -> str:
    return "".join("/*" if isinstance(p, int) else "/{item}" if p in items else f"/{p}"
                   for p in path)


def pointer(path: Path) -> str:
    return "".join("/" + str(p).replace("~", "~0").replace("/", "~1") for p in path)


def chosen_positions(name: str) -> list[Path]:
    """One position per distinct field path of the example, chosen deterministically."""
    body = load_example(name)
    items = item_ids(body)
    by_field: dict[str, list[Path]] = {}
    for path in numbers(body):
        by_field.setdefault(field_path(path, items), []).append(path)
    rng = random.Random(name)
    return [rng.choice(paths) for _, paths in sorted(by_field.items())]


def replaced(body: dict[str, Any], path: Path, literal: str) -> bytes:
    """The body as JSON text with the number at ``path`` written as ``literal``."""
    copy = json.loads(json.dumps(body))
    node = copy
    for p in path[:-1]:
        node = node[p]
    marker = "@@number@@"
    node[path[-1]] = marker
    return json.dumps(copy).replace(f'"{marker}"', literal).encode()


_OPERATIONS: dict[str, tuple[str, str]] = {}


def operation(client: Any, operation_id: str) -> tuple[str, str]:
    """The method and path of an operation, from the OpenAPI document (as
    tests/api/test_openapi_and_examples.py maps examples to operations)."""
    if not _OPERATIONS:
        doc = client.get("/openapi.json").json()
        for path, item in doc["paths"].items():
            for method, op in item.items():
                _OPERATIONS[op["operationId"]] = (method.upper(), path)
    return _OPERATIONS[operation_id]


CASES = [(name, path) for name in EXAMPLE_FILES for path in chosen_positions(name)]


def test_every_example_and_every_field_path_is_covered() -> None:
    assert {name for name, _ in CASES} == set(EXAMPLE_FILES)
    assert len(CASES) >= 100


@pytest.mark.parametrize("name,path", CASES, ids=[f"{n.split('.json')[0]}:{pointer(p)}"
                                                  for n, p in CASES])
def test_one_extreme_number_never_gets_a_5xx(client, name, path) -> None:
    method, url = operation(client, name.split(".")[0])
    body = load_example(name)
    where = pointer(path)
    for label, literal in VALUES.items():
        r = client.request(method, url, content=replaced(body, path, literal),
                           headers={"content-type": "application/json"})
        said = f"{label} at {where}: {r.status_code} {r.text[:400]}"
        assert r.status_code < 500, said
        if r.status_code == 422:
            problem = r.json()
            assert r.headers["content-type"].startswith("application/problem+json"), said
            assert problem.get("errors"), said
            assert all(e["pointer"] for e in problem["errors"]), said
        if label in REFUSED_AT_THE_EDGE:
            assert r.status_code == 422, said
            assert [e["pointer"] for e in r.json()["errors"]] == [where], said


@pytest.mark.parametrize("name,path", CASES, ids=[f"{n.split('.json')[0]}:{pointer(p)}"
                                                  for n, p in CASES])
def test_a_number_given_as_text_is_refused_at_its_field(client, name, path) -> None:
    """One rule for every numeric field: a number written as text ("2.4") is refused, naming
    the field, whatever the field (a price, sigma, a seed, a tolerance)."""
    method, url = operation(client, name.split(".")[0])
    body = load_example(name)
    node: Any = body
    for p in path:
        node = node[p]
    r = client.request(method, url, content=replaced(body, path, json.dumps(str(node))),
                       headers={"content-type": "application/json"})
    assert r.status_code == 422, r.text[:400]
    errors = r.json()["errors"]
    assert len(errors) == 1, errors
    assert errors[0]["pointer"] == pointer(path), errors
    assert "not as text" in errors[0]["detail"] or "text" in errors[0]["detail"], errors
