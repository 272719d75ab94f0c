"""A list of records (one JSON object per row) written straight from its columns.

An answer's per-item table (a comparison's ``by_item``: 300 items, 11 members each) is most of
its bytes. Built as one dict per row and handed to orjson, the rows cost more to make than to
write; written here, each column is turned into JSON text in one call (its numbers by one
``orjson.dumps`` of the whole column, split at the commas; its text one value at a time, since
a string may hold a comma) and the pieces are laid out row by row by slice assignment, so that
no Python code runs per row. The bytes are the ones orjson writes for the list of dicts
(``tests/api/test_records.py`` checks them against it): the same members in the same order,
every float as its shortest round-trip digits, NaN and infinity as null as orjson writes them
(the answers check their numbers finite before: :func:`dualcost.api.render.all_finite`).
"""

from __future__ import annotations

from collections.abc import Mapping, Sequence
from typing import Any

import orjson

__all__ = ["json_records"]


def _texts(column: Sequence[Any]) -> list[bytes]:
    """Each value of ``column`` as orjson writes it, from one ``orjson.dumps`` of the column
    (a call per value would cost about 1 us each, for the buffer orjson allocates per call)."""
    text = orjson.dumps(column)
    if b'"' not in text:  # numbers, null and booleans, none of which holds a comma
        return text[1:-1].split(b",")
    kinds = set(map(type, column))
    if kinds == _TEXT:
        # Within a string every quote is escaped, so '","' is only ever between two strings;
        # a NUL byte is only ever written escaped, so it marks the cuts.
        return text[1:-1].replace(b'","', b'"\0"').split(b"\0")
    if kinds == _TEXT_OR_NONE:  # text where given (labels), null elsewhere
        given = [i for i, v in enumerate(column) if v is not None]
        texts = [b"null"] * len(column)
        for i, piece in zip(given, _texts([column[i] for i in given]), strict=True):
            texts[i] = piece
        return texts
    return list(map(orjson.dumps, column))


_TEXT, _TEXT_OR_NONE = {str}, {str, type(None)}


def json_records(columns: Mapping[str, Sequence[Any]]) -> orjson.Fragment:
    """``[{name: column[i] for name, column in columns.items()} for i in rows]`` as JSON text,
    ready to be written inside a document by orjson (a ``Fragment``). Every column has one
    value per row (plain Python values: text, numbers, None, booleans)."""
    lengths = {len(c) for c in columns.values()}
    if len(lengths) > 1:
        raise ValueError(f"the columns differ in length: {sorted(lengths)}")
    n = lengths.pop() if lengths else 0
    if n == 0 or not columns:
        return orjson.Fragment(b"[" + b",".join([b"{}"] * n) + b"]")
    width = 2 * len(columns)
    pieces: list[bytes] = [b""] * (width * n)
    for j, (name, column) in enumerate(columns.items()):
        # '},{"name":' opens each row but the first, ',"name":' each further member
        pieces[2 * j::width] = [(b"},{" if j == 0 else b",") + orjson.dumps(name) + b":"] * n
        pieces[2 * j + 1::width] = _texts(column)
    pieces[0] = pieces[0].replace(b"},{", b"[{", 1)
    pieces.append(b"}]")
    return orjson.Fragment(b"".join(pieces))
