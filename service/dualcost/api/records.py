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

Records may nest, as a household batch's do (``households[].periods[].indices``): a column
given as a mapping of columns is an object in each row, and a :class:`Grouped` column a list of
the same number of records in each row. A column may also be a numpy array (written by one
``orjson.dumps``, NaN as null, as for the list of its values), or :class:`Written`: each value's
JSON text, made by the caller (a list of reasons, mostly empty).
"""

from __future__ import annotations

from collections.abc import Mapping, Sequence
from dataclasses import dataclass
from typing import Any, TypeAlias

import numpy as np
import orjson

__all__ = ["Grouped", "Written", "json_records"]


@dataclass(frozen=True)
class Written:
    """A column given as each value's JSON text."""

    texts: Sequence[bytes]


@dataclass(frozen=True)
class Grouped:
    """A column whose value in each row is a list of ``per_row`` records; ``columns`` hold
    ``rows * per_row`` values each, row by row (the first row's records, then the second's)."""

    columns: Mapping[str, Any]
    per_row: int


#: A column: plain values, a numpy array, JSON texts, lists of records, or an object's columns.
Column: TypeAlias = "Sequence[Any] | np.ndarray | Written | Grouped | Mapping[str, Any]"


def _texts(column: Sequence[Any] | np.ndarray) -> list[bytes]:
    """Each value of ``column`` as orjson writes it, from one ``orjson.dumps`` of the column
    (a call per value would cost about 1 us each, for the buffer orjson allocates per call)."""
    if isinstance(column, np.ndarray):  # numbers or booleans: no quotes, no commas inside
        array = column.astype(np.float64) if column.dtype.kind == "f" else column
        text = orjson.dumps(np.ascontiguousarray(array), option=orjson.OPT_SERIALIZE_NUMPY)
        return text[1:-1].split(b",") if column.size else []
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


def json_records(columns: Mapping[str, Column]) -> orjson.Fragment:
    """``[{name: column[i] for name, column in columns.items()} for i in rows]`` as JSON text,
    ready to be written inside a document by orjson (a ``Fragment``). Every column has one
    value per row (plain Python values: text, numbers, None, booleans; or see the module's
    notes for arrays, texts, nested objects and lists of records)."""
    lengths = {r for c in columns.values() if (r := _rows(c)) is not None}
    if len(lengths) > 1:
        raise ValueError(f"the columns differ in length: {sorted(lengths)}")
    n = lengths.pop() if lengths else 0
    if n == 0:
        return orjson.Fragment(b"[]")
    pieces = _object(columns, n)
    end = pieces[-1]  # the same in every row, as it ends with the object's "}"
    assert isinstance(end, bytes)
    pieces[-1] = end + b","
    width = len(pieces)
    out: list[bytes] = [b""] * (width * n)
    for k, piece in enumerate(pieces):
        out[k::width] = [piece] * n if isinstance(piece, bytes) else piece
    out[0] = b"[" + out[0]
    out[-1] = end + b"]"
    return orjson.Fragment(b"".join(out))


#: Pieces of each row's text, in order: bytes the same in every row, or one per row.
_Pieces: TypeAlias = "list[bytes | list[bytes]]"


def _rows(column: Column) -> int | None:
    """How many rows ``column`` has (None: any number)."""
    if isinstance(column, Written):
        return len(column.texts)
    if isinstance(column, Grouped | Mapping):
        members = column.columns if isinstance(column, Grouped) else column
        inner = {r for c in members.values() if (r := _rows(c)) is not None}
        if not inner or isinstance(column, Grouped) and column.per_row == 0:
            return None  # no members, or no records in any row: as many rows as the others
        rows = inner.pop() if len(inner) == 1 else -1
        return rows // max(column.per_row, 1) if isinstance(column, Grouped) else rows
    return len(column)


def _object(columns: Mapping[str, Column], n: int) -> _Pieces:
    """The pieces of an object's text in each of ``n`` rows."""
    pieces: _Pieces = []
    for j, (name, column) in enumerate(columns.items()):
        _add(pieces, (b"{" if j == 0 else b",") + orjson.dumps(name) + b":")
        for piece in _value(column, n):
            _add(pieces, piece)
    _add(pieces, b"}" if columns else b"{}")
    return pieces


def _value(column: Column, n: int) -> _Pieces:
    if isinstance(column, Grouped):
        return _grouped(column, n)
    if isinstance(column, Mapping):
        return _object(column, n)
    texts = list(column.texts) if isinstance(column, Written) else _texts(column)
    if len(texts) != n:
        raise ValueError(f"the columns differ in length: {sorted({len(texts), n})}")
    return [texts]


def _grouped(column: Grouped, n: int) -> _Pieces:
    """Each row's ``per_row`` records as a list: the records of row i are i*per_row..."""
    k = column.per_row
    if k == 0:
        return [b"[]"]
    inner = _object(column.columns, n * k)
    pieces: _Pieces = [b"["]
    for t in range(k):
        if t:
            _add(pieces, b",")
        for piece in inner:
            _add(pieces, piece if isinstance(piece, bytes) else piece[t::k])
    _add(pieces, b"]")
    return pieces


def _add(pieces: _Pieces, piece: bytes | list[bytes]) -> None:
    """``piece`` after the others, joined to the last if both are the same in every row."""
    if isinstance(piece, bytes) and pieces and isinstance(pieces[-1], bytes):
        pieces[-1] += piece
    else:
        pieces.append(piece)
