"""The JSON Canonicalization Scheme (RFC 8785) and the digests of the service's provenance.

One JSON value has one canonical text: object members sorted by their names (compared as
UTF-16 code units), no whitespace, strings escaped as ECMAScript's ``JSON.stringify`` escapes
them, and every number as ECMAScript writes a double (``12`` for 12.0, ``0.1``, ``0.000001``,
``1e-7``, ``1e+21``). Any RFC 8785 implementation gives the same bytes, so a digest of them can be
recomputed in any language. This module needs nothing but the standard library: the service
(:mod:`dualcost.api.provenance`) and the client (:func:`dualcost.client.input_digest`) both use
it.
"""

from __future__ import annotations

import hashlib
import json
import math
from collections.abc import Callable, Mapping
from typing import Any

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


def _utf16(key: str) -> bytes:
    return key.encode("utf-16-be", "surrogatepass")


def _write(value: Any, out: list[str]) -> None:
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
        out.append(str(value) if abs(value) < 2 ** 53 else es_number(float(value)))
    elif isinstance(value, Mapping):
        keys = list(value)
        if not all(type(k) is str for k in keys):
            raise ValueError("an object's member names must be text")
        if all(k.isascii() for k in keys):
            keys.sort()
        else:
            keys.sort(key=_utf16)
        out.append("{")
        for i, k in enumerate(keys):
            v = value[k]
            head = (_string(k) + ":") if i == 0 else ("," + _string(k) + ":")
            kv = type(v)
            if kv is str:  # text and numbers written here, without a call: most members
                out.append(head + _string(v))
            elif kv is float and math.isfinite(v):
                out.append(head + es_number(v))
            else:
                out.append(head)
                _write(v, out)
        out.append("}")
    elif isinstance(value, (list, tuple)):
        if value and all(type(v) is float for v in value):  # a vector: the common case
            if not all(map(math.isfinite, value)):
                _write(math.nan, out)
            out.append("[" + ",".join(map(es_number, value)) + "]")
            return
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


def canonical_json(value: Any) -> bytes:
    """``value`` (JSON-ready: dicts with text keys, lists, text, numbers, booleans, None) in
    the JSON Canonicalization Scheme (RFC 8785), as UTF-8 bytes. ValueError for what JSON
    cannot hold (NaN, infinity, a number beyond doubles, other types)."""
    out: list[str] = []
    _write(value, out)
    return "".join(out).encode("utf-8", "surrogatepass")


def digest_of(value: Any) -> str:
    """``sha256:`` and the SHA-256 of ``value``'s canonical form, in lowercase hexadecimal."""
    return "sha256:" + hashlib.sha256(canonical_json(value)).hexdigest()
