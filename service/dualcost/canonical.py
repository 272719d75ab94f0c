"""The JSON Canonicalization Scheme (RFC 8785) and the digests of the service's provenance.

One JSON value has one canonical text: object members sorted by their names (compared as
UTF-16 code units), no whitespace, strings escaped as ECMAScript's ``JSON.stringify`` escapes
them, and every number as ECMAScript writes a double (``12`` for 12.0, ``0.1``, ``0.000001``,
``1e-7``, ``1e+21``). Any RFC 8785 implementation gives the same bytes, so a digest of them can be
recomputed in any language. This module needs no web framework: the service
(:mod:`dualcost.api.provenance`) and the client (:func:`dualcost.client.input_digest`) both use
it.
"""

from __future__ import annotations

import hashlib
import json
import math
import re
from collections.abc import Callable, Iterable, Iterator, Mapping
from itertools import chain
from typing import Any

import numpy as np
import orjson

__all__ = ["canonical_json", "digest_of", "es_number"]


def es_number(value: float) -> str:
    """A finite double as ECMAScript's Number::toString writes it (RFC 8785, 3.2.2.3): the
    shortest digits that read back to the same number, in plain notation from 1e-6 up to 1e21
    and in exponent notation (``1e-7``, ``1.5e+300``) outside."""
    text = repr(value)  # Python's repr is the shortest round-trip form too
    if "e" not in text:  # plain notation, as ECMAScript's for 1e-4 <= |value| < 1e16
        if text.endswith(".0"):
            return "0" if value == 0 else text[:-2]  # -0 is written 0
        return text
    return _es_exponent(text)


def _es_exponent(text: str) -> str:
    """ECMAScript's form of a number that Python writes in exponent notation."""
    negative = text.startswith("-")
    mantissa, _, exp = text.lstrip("-").partition("e")
    whole, _, fraction = mantissa.partition(".")
    digits = (whole + fraction).rstrip("0")
    k = len(digits)
    n = len(whole) + int(exp)  # the value is 0.<digits> x 10^n (``whole`` is one digit, not 0)
    if k <= n <= 21:
        body = digits + "0" * (n - k)
    elif 0 < n <= 21:
        body = digits[:n] + "." + digits[n:]
    elif -6 < n <= 0:
        body = "0." + "0" * -n + digits
    else:
        e = n - 1
        head = digits[0] if k == 1 else digits[0] + "." + digits[1:]
        body = f"{head}e{'+' if e >= 0 else '-'}{abs(e)}"
    return "-" + body if negative else body


#: A string in quotes, escaped as JSON.stringify escapes it (RFC 8785, 3.2.2.2): \" \\ \b \f \n
#: \r \t, other control characters as \u00xx in lowercase, everything else as it is (the
#: standard library's encoder for ``ensure_ascii=False``).
_string: Callable[[str], str] = json.encoder.encode_basestring


def _big(value: int) -> str:
    """An integer beyond 2**53 as the double nearest to it is written."""
    try:
        return es_number(float(value))
    except OverflowError:
        raise ValueError(f"an integer of {len(str(abs(value)))} digits is beyond the range of "
                         "JSON numbers (doubles)") from None


def _utf16(key: str) -> bytes:
    return key.encode("utf-16-be", "surrogatepass")


def _write(value: Any, out: list[str]) -> None:
    """The canonical text of ``value``, piece by piece: the scheme written out, one value at a
    time (:func:`canonical_json` takes a quicker road where it leads to the same text)."""
    kind = type(value)
    if kind is str:
        out.append(_string(value))
    elif kind is float:
        if not math.isfinite(value):
            raise ValueError("NaN and infinity have no JSON form")
        out.append(es_number(value))
    elif value is True:
        out.append("true")
    elif value is False:
        out.append("false")
    elif value is None:
        out.append("null")
    elif kind is int:  # as the double it stands for (RFC 8785 numbers are doubles)
        out.append(str(value) if abs(value) < 2 ** 53 else _big(value))
    elif isinstance(value, Mapping):
        keys = list(value)
        if not all(type(k) is str for k in keys):
            raise ValueError("an object's member names must be text")
        keys.sort(key=_utf16)
        out.append("{")
        for i, k in enumerate(keys):
            out.append((_string(k) + ":") if i == 0 else ("," + _string(k) + ":"))
            _write(value[k], out)
        out.append("}")
    elif isinstance(value, (list, tuple)):
        out.append("[")
        for i, v in enumerate(value):
            if i:
                out.append(",")
            _write(v, out)
        out.append("]")
    elif isinstance(value, (int, float)):  # bool and its kin are handled above
        _write(float(value) if isinstance(value, float) else int(value), out)
    else:
        raise ValueError(f"a {kind.__name__} has no JSON form")


# -- the quicker road -------------------------------------------------------------------------
#
# orjson (as the answers are written) with sorted keys writes RFC 8785's text already for most
# values, about thirty times as fast as the standard library: it escapes strings as
# JSON.stringify does, and it writes a float as its shortest round-trip digits, in ECMAScript's
# form for every float that is not whole and lies in [1e-4, 1e16) by magnitude (others get an
# exponent or a '.0'). Its key order, by code points, is RFC 8785's order by UTF-16 code units
# unless a key holds a character beyond U+FFFF. So :func:`_prepared` turns whole floats below
# 2**53 into ints, hands orjson the text of a tiny or huge number ready-made (a Fragment) and
# leaves the rest as they are; a value it cannot prepare so (a key beyond U+FFFF, a type of its
# own) takes :func:`_write`. The tests check that both give the same text on random values
# (tests/api/test_provenance_and_formats.py).


class _Slow(Exception):
    """The value needs :func:`_write`."""


def _encode(value: Any) -> bytes:
    """Compact, keys sorted by code points, floats as Python's repr writes them, in UTF-8 (orjson
    refuses a lone surrogate, which takes :func:`_write`)."""
    return orjson.dumps(value, option=orjson.OPT_SORT_KEYS)
_LOW, _HIGH, _EXACT = 1e-4, 1e16, 2.0 ** 53


def _plain_floats(values: list[float]) -> bool:
    """Every float is finite, not whole and in [1e-4, 1e16) by magnitude (checked in C)."""
    if not math.isfinite(sum(values)):  # NaN or infinity (or a sum beyond floats: no matter)
        return False
    if not min(values) >= _LOW:  # not all positive (prices, quantities, shares usually are)
        values = list(map(abs, values))
    return (min(values) >= _LOW and max(values) < _HIGH
            and not any(map(float.is_integer, values)))


def _float(v: float) -> float | int | orjson.Fragment:
    if v.is_integer():
        # Whole: as an integer below 2**53, else ECMAScript's digits (orjson would add '.0').
        return int(v) if -_EXACT < v < _EXACT else orjson.Fragment(es_number(v))
    if _LOW <= abs(v) < _HIGH:
        return v
    if not math.isfinite(v):
        raise ValueError("NaN and infinity have no JSON form")
    return orjson.Fragment(es_number(v))  # tiny, or huge: written here


def _prepared(value: Any) -> Any:
    kind = type(value)
    if kind is str or kind is bool or value is None:
        return value
    if kind is float:
        return _float(value)
    if kind is int:
        return value if -_EXACT < value < _EXACT else orjson.Fragment(_big(value))
    if kind is dict:
        for k in value:
            if type(k) is not str or (not k.isascii() and max(k) > "\uffff"):
                raise _Slow
        if len(value) > _MANY:
            values = list(value.values())
            if set(map(type, values)) == _FLOAT:  # a vector keyed by item id
                return value if _plain_floats(values) else {k: _float(v) for k, v in
                                                            value.items()}
        return {k: _prepared(v) for k, v in value.items()}
    if kind is list or kind is tuple:
        if len(value) > _MANY:
            types = set(map(type, value))
            if types == _FLOAT:  # a vector
                return value if _plain_floats(value) else [_float(v) for v in value]
            if types == _FLOAT_NONE:  # a vector with gaps (a panel's row): null as it is
                present = [v for v in value if v is not None]
                return value if _plain_floats(present) else [
                    None if v is None else _float(v) for v in value]
            if types == _STR:  # a list of ids
                return value
            if types == _LIST and _plain_rows(value):  # a panel: rows of floats and nulls
                return value
        return [_prepared(v) for v in value]
    raise _Slow


#: Containers longer than this are first tried as a whole: all floats, all text.
_MANY = 8
_FLOAT, _STR, _FLOAT_NONE, _LIST = {float}, {str}, {float, type(None)}, {list}


def _plain_rows(rows: list[list[Any]]) -> bool:
    """Rows holding floats and nulls only, every float as :func:`_plain_floats` asks, checked
    over all rows at once (a panel of 1,000 items by 120 periods in a few C passes and numpy)."""
    flat = list(chain.from_iterable(rows))
    if not flat or not set(map(type, flat)) <= _FLOAT_NONE:
        return False
    # NaN and infinity are true, null is not: a sum over the rest is finite unless one is there
    # (or the sum overflows, which only sends the rows down the slower road).
    if not math.isfinite(sum(filter(None, flat))):
        return False
    values = np.array(flat, dtype=np.float64)  # null as NaN, left out below
    values = np.abs(values[~np.isnan(values)])
    return bool(values.size) and bool(
        values.min() >= _LOW and values.max() < _HIGH and not (values == np.floor(values)).any())


# -- the quickest road ------------------------------------------------------------------------
#
# For a value made of JSON's own types only (what a JSON parser or pydantic's
# ``model_dump(mode="json")`` gives), orjson's sorted text is RFC 8785's unless it holds a token
# that RFC 8785 writes otherwise, each found by a search in C: an integer beyond 2**53 (refused
# by OPT_STRICT_INTEGER), a character beyond U+FFFF (keys are then ordered by UTF-16 code units,
# not code points), null (orjson writes NaN and infinity as null) or a negative zero (orjson
# '-0.0', RFC 8785 '0'). Such a value takes the quicker road above (a string that merely looks
# like such a token counts too). Whole floats and numbers with an exponent (orjson writes 'e-7'
# and 'e+16', always with a sign) are mended in the text instead (below). Every search starts
# with a literal, which the regular expression engine finds quickly: one pattern whose
# alternatives started with a digit cost 5 ms for a 25 kB request here; these cost 0.02 ms.
#
# A whole float is the most common such token in requests (a sigma of 2.0, quantities
# of 12.0), and it is mended in the text (:func:`_whole_floats_mended`): orjson writes it as
# its digits and '.0' (below 1e16; beyond, with an exponent), RFC 8785 as the digits alone.
# Outside strings only a number holds a '.', so a '.0' before a comma, a closing bracket or the
# end is the end of a whole float, unless it lies inside a string ("group 1.0,2.0"): the quotes
# counted (in C) from one such place to the next tell which, as long as no string holds a
# backslash (an escaped quote would miscount; such a text takes the quicker road). For the
# 300-item comparison of the benchmarks (whole sigmas, names like "group 1.0") this takes about
# 0.05 ms against 0.3 ms for the quicker road.

_WHOLE = re.compile(rb"\.0(?![0-9])")
_WHOLE_END = re.compile(rb"\.0(?=[,\]}]|\Z)")
_NEGATIVE_ZERO = re.compile(rb"-0\.0(?=[,\]}]|\Z)")
_BEYOND_BMP = re.compile(rb"[\xf0-\xf4]")


def _may_differ(text: bytes) -> bool:
    """Whether orjson's ``text`` holds null or a character beyond U+FFFF. A byte beyond ASCII
    is looked for first: a single byte is found far faster than two."""
    return b"null" in text or (not text.isascii() and _BEYOND_BMP.search(text) is not None)


def _has_exponent(text: bytes) -> bool:
    """Whether orjson's ``text`` may hold a number with an exponent (it writes 'e-7', 'e+16')."""
    return (b"-" in text and b"e-" in text) or (b"+" in text and b"e+" in text)


# A number with an exponent, as orjson writes one (below 1e-5 or from 1e16 by magnitude), is
# mended in the text as whole floats are, by counting quotes: RFC 8785 writes it in ECMAScript's
# form, which is plain from 1e-6 to 1e21 (shares of a few millionths are common in household
# budgets: a 3,000-household request went value by value, 0.3 s, for them).
_EXPONENT = re.compile(rb"e[-+][0-9]+")  # found by its literal 'e' (a leading digit is slow)
_DIGITS = frozenset(b"0123456789")
_NUMBER = frozenset(b"0123456789.-")


def _exponents_mended(text: bytes) -> bytes | None:
    """orjson's ``text`` with each number in exponent notation outside strings written as
    RFC 8785 writes it (:func:`_es_exponent`); None where the quotes cannot be counted plainly
    (a backslash)."""
    if b"\\" in text:
        return None
    return _spliced(text, ((at, end, _es_exponent(text[at:end].decode()).encode())
                           for at, end in _outside_strings(text, _exponent_places(text))))


def _exponent_places(text: bytes) -> Iterator[tuple[int, int]]:
    """Where each number with an exponent starts and ends in ``text`` (and look-alikes in
    strings, which :func:`_outside_strings` leaves out)."""
    for found in _EXPONENT.finditer(text):
        at = found.start()
        if at == 0 or text[at - 1] not in _DIGITS:  # not a number's exponent ("type-2")
            continue
        while at > 0 and text[at - 1] in _NUMBER:  # back to the number's first character
            at -= 1
        yield at, found.end()


def _whole_floats_mended(text: bytes) -> bytes | None:
    """orjson's ``text`` with each whole float outside strings written without its '.0'; None
    where the quotes cannot be counted plainly (a backslash) or a negative zero may be there."""
    if b"\\" in text or (b"-0.0" in text and _NEGATIVE_ZERO.search(text)):
        return None
    places = ((found.start(), found.end()) for found in _WHOLE_END.finditer(text))
    return _spliced(text, ((at, end, b"") for at, end in _outside_strings(text, places)))


def _outside_strings(text: bytes, places: Iterable[tuple[int, int]]
                     ) -> Iterator[tuple[int, int]]:
    """The ``places`` (in order, none inside another) that lie outside strings, told by the
    parity of the quotes before each (``text`` holds no backslash, so no escaped quote)."""
    counted = 0
    inside = False  # within a string at ``counted``
    count = text.count
    for at, end in places:
        if count(b'"', counted, at) & 1:
            inside = not inside
        counted = at
        if not inside:
            yield at, end


def _spliced(text: bytes, edits: Iterable[tuple[int, int, bytes]]) -> bytes:
    """``text`` with each (start, end) span of ``edits`` (in order) replaced by its bytes."""
    pieces: list[bytes] = []
    kept = 0
    for at, end, replacement in edits:
        pieces.append(text[kept:at])
        pieces.append(replacement)
        kept = end
    pieces.append(text[kept:])
    return b"".join(pieces)


def _quickest(value: Any) -> bytes | None:
    """RFC 8785's bytes of a value of JSON types, or None where orjson's text may differ
    otherwise than by whole floats."""
    try:
        text = orjson.dumps(value, option=orjson.OPT_SORT_KEYS | orjson.OPT_STRICT_INTEGER)
    except orjson.JSONEncodeError:
        return None
    if _may_differ(text):
        return None
    if _has_exponent(text):
        mended = _exponents_mended(text)
        if mended is None:
            return None
        text = mended
    if _WHOLE.search(text):
        return _whole_floats_mended(text)
    return text


def canonical_json(value: Any, *, json_values: bool = False) -> bytes:
    """``value`` (JSON-ready: dicts with text keys, lists, text, numbers, booleans, None) in
    the JSON Canonicalization Scheme (RFC 8785), as UTF-8 bytes. ValueError for what JSON
    cannot hold (NaN, infinity, a number beyond doubles, other types).

    ``json_values=True`` promises that ``value`` holds JSON's own types only (dict, list, str,
    int, float, bool, None, as a JSON parser or ``model_dump(mode="json")`` gives them), which
    lets the quickest road be taken; the bytes are the same."""
    if json_values:
        quick = _quickest(value)
        if quick is not None:
            return quick
    try:
        return _encode(_prepared(value))
    except (_Slow, orjson.JSONEncodeError):  # JSONEncodeError: a lone surrogate
        out: list[str] = []
        _write(value, out)
        return "".join(out).encode("utf-8", "surrogatepass")


def digest_of(value: Any, *, json_values: bool = False) -> str:
    """``sha256:`` and the SHA-256 of ``value``'s canonical form, in lowercase hexadecimal
    (``json_values`` as for :func:`canonical_json`)."""
    return "sha256:" + hashlib.sha256(canonical_json(value, json_values=json_values)).hexdigest()
