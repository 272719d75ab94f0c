"""A JSON body read as text, for the two rules a parsed body can no longer show.

**Every number literal is checked at the edge.** A JSON number becomes a Python int or float
before any schema sees it, and two kinds are then wrong without a trace: an integer or a float
beyond the range of floating-point numbers (``10**400`` stays an integer no float can hold, and
``1e400`` becomes infinity), and a nonzero number below the smallest normal float, 2.2e-308 (a
subnormal such as ``5e-324`` keeps a digit or two of precision and turns divisions into
infinities; ``1e-400`` silently becomes 0). Both are refused wherever they are, in every
operation, with a pointer to the literal: no quantity of this service needs them.

**How deep a body nests.** The JSON parser stops at :data:`MAX_DEPTH` levels of objects and
lists; a body nesting deeper is refused with a pointer to the place where it passes the limit.

Checking every literal in Python would cost more than parsing the body, so :func:`may_hold` first
looks for the only spellings such a number can have (an exponent of three digits or more, or a
run of 300 digits) with a few byte-string searches; only a body that has one is scanned, token by
token, to find the literal and its place (:func:`number_errors`).
"""

from __future__ import annotations

import json
import math
import re
import sys
from collections.abc import Iterator

#: A problem's place and rule: ``(pointer, rule)`` (a field error of ``problems.py``, which
#: imports this module).
Located = tuple[str, str]

#: Levels of objects and lists that the JSON parser (pydantic-core's) reads; one more is an error.
MAX_DEPTH = 201
SMALLEST_NORMAL = sys.float_info.min  # 2.2250738585072014e-308

BEYOND_RANGE = ("is beyond the range of floating-point numbers (about 1.8e308 in magnitude), "
                "which no quantity here needs")
TOO_SMALL = ("is nonzero but smaller in magnitude than 2.2e-308, the smallest normal "
             "floating-point number: such a number loses its precision (or becomes 0) and breaks "
             "divisions; write 0 for zero")
TOO_DEEP = (f"nests deeper than {MAX_DEPTH} levels of objects and lists, more than a request "
            "of this service can need")

#: Every digit as 0 and E as e, so that a suspect literal has a few fixed spellings, found
#: by a search with a literal start (much faster than a regular expression over the raw body).
_SHAPE = bytes.maketrans(b"123456789E", b"000000000e")
_LONG_EXPONENT = re.compile(rb"e[-+]?000")
_LONG_RUN = b"0" * 300
_SPACE = re.compile(r"[ \t\n\r]*")
_STRING = re.compile(r'"[^"\\]*(?:\\.[^"\\]*)*"', re.S)
_NUMBER = re.compile(r"-?(?:0|[1-9]\d*)(?:\.\d+)?(?:[eE][+-]?\d+)?")
_WORD = re.compile(r"true|false|null|NaN|-?Infinity")


def may_hold(body: bytes) -> bool:
    """Whether ``body`` may hold a number beyond the floating-point range or below the
    smallest normal float: an exponent of three digits or more, or a run of 300 digits (a fast
    test, about 50 us for a 27 kB body: ``False`` is certain, ``True`` needs a scan)."""
    shape = body.translate(_SHAPE)
    return _LONG_EXPONENT.search(shape) is not None or _LONG_RUN in shape


def number_rule(literal: str) -> str | None:
    """The rule a JSON (or CSV, or query) number literal breaks, or ``None``."""
    mantissa = re.split("[eE]", literal, maxsplit=1)[0]
    if re.fullmatch(r"[+-]?\d+", literal):
        digits = literal.lstrip("+-").lstrip("0")
        if len(digits) <= 308:
            return None
        try:
            float(int(literal))
        except (OverflowError, ValueError):
            return BEYOND_RANGE
        return None
    try:
        value = float(literal)
    except ValueError:
        return None  # not a number: another rule says so
    if value in (float("inf"), float("-inf")) and "inf" not in literal.lower():
        return BEYOND_RANGE
    if value == 0.0:
        return TOO_SMALL if any(c in "123456789" for c in mantissa) else None
    if abs(value) < SMALLEST_NORMAL:
        return TOO_SMALL
    return None


class _Frame:
    """An object or a list being read: its key or position now, and whether a key comes next."""

    __slots__ = ("is_object", "key", "index", "wants_key")

    def __init__(self, is_object: bool) -> None:
        self.is_object = is_object
        self.key = ""
        self.index = -1
        self.wants_key = is_object

    def token(self) -> str:
        """The frame's reference token in a JSON Pointer (RFC 6901: '~' and '/' escaped)."""
        if not self.is_object:
            return str(self.index)
        return self.key.replace("~", "~0").replace("/", "~1")


def _pointer(stack: list[_Frame]) -> str:
    return "".join("/" + frame.token() for frame in stack)


def _walk(text: str) -> Iterator[tuple[str, str, list[_Frame]]]:
    """``(kind, token, stack)`` for each value token of ``text`` ("number", "open", "other"),
    with the stack of containers it is in; stops quietly where the text is not JSON (the parser
    reports that)."""
    stack: list[_Frame] = []
    pos, end = 0, len(text)
    while True:
        pos = _SPACE.match(text, pos).end()  # type: ignore[union-attr]
        if pos >= end:
            return
        ch = text[pos]
        top = stack[-1] if stack else None
        if ch in "]}":
            if top is None:
                return
            stack.pop()
            pos += 1
            continue
        if ch == ",":
            if top is not None:
                top.wants_key = top.is_object
            pos += 1
            continue
        if ch == ":":
            pos += 1
            continue
        if ch == '"':
            found = _STRING.match(text, pos)
            if found is None:
                return
            pos = found.end()
            if top is not None and top.is_object and top.wants_key:
                try:
                    top.key = json.loads(found.group())
                except ValueError:
                    return
                top.wants_key = False
                continue
            if top is not None and not top.is_object:
                top.index += 1
            yield "other", found.group(), stack
            continue
        if top is not None and not top.is_object:
            top.index += 1
        if ch in "[{":
            yield "open", ch, stack
            stack.append(_Frame(ch == "{"))
            pos += 1
            continue
        found = _NUMBER.match(text, pos) or _WORD.match(text, pos)
        if found is None:
            return
        pos = found.end()
        yield ("number" if found.re is _NUMBER else "other"), found.group(), stack


def number_errors(body: bytes, limit: int = 20) -> list[Located]:
    """Each number literal of ``body`` that breaks a rule of :func:`number_rule`, with its
    pointer (at most ``limit`` of them)."""
    text = body.decode("utf-8", errors="replace")
    errors: list[Located] = []
    for kind, token, stack in _walk(text):
        if kind != "number":
            continue
        rule = number_rule(token)
        if rule is not None:
            shown = token if len(token) <= 24 else f"{token[:12]}...{token[-6:]} ({len(token)} characters)"
            errors.append((_pointer(stack), f"{shown} {rule}"))
            if len(errors) >= limit:
                break
    return errors


#: How far from 1 (in powers of ten) a number must be to be named as the likely cause of a
#: computation that left the floating-point range.
EXTREME_DECADES = 100.0


def extreme_number(body: bytes) -> tuple[str, str] | None:
    """The pointer and literal of the number of ``body`` farthest from 1 in magnitude, when it
    is at least :data:`EXTREME_DECADES` powers of ten away (``1e308``, ``1e-150``), else
    ``None``: the likely cause when evaluating the request overflowed."""
    best: tuple[float, str, str] | None = None
    for kind, token, stack in _walk(body.decode("utf-8", errors="replace")):
        if kind != "number":
            continue
        try:
            value = abs(float(token))
        except (ValueError, OverflowError):
            continue
        if value == 0.0 or value == float("inf"):
            continue
        decades = abs(math.log10(value))
        if decades >= EXTREME_DECADES and (best is None or decades > best[0]):
            best = (decades, _pointer(stack), token)
    return None if best is None else (best[1], best[2])


def depth_error(text: str) -> Located:
    """Where ``text`` first nests deeper than :data:`MAX_DEPTH`."""
    for kind, _, stack in _walk(text):
        if kind == "open" and len(stack) >= MAX_DEPTH:
            return _pointer(stack), TOO_DEEP
    return "", TOO_DEEP


def in_float_range(value: object) -> object:
    """A query parameter's text checked by :func:`number_rule` before it is read as a float
    (a pydantic ``BeforeValidator``): 1e-400 would otherwise read as 0 without a word."""
    if isinstance(value, str):
        rule = number_rule(value.strip())
        if rule is not None:
            raise ValueError(f"{value.strip()!r} {rule}")
    return value
