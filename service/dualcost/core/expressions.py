"""A small formula language for demand and utility functions: parsed into a tree, never run as Python.

A formula is text such as ``12 - 1.5*rye_loaf + 0.02*income`` or
``0.4*log(rye_loaf - 3) + 0.6*log(ferry_pass)``. The language has

- numbers (``2``, ``0.35``, ``1.5e-3``);
- names: letters, digits and ``_``, not starting with a digit, or any text in single quotes
  (``'rye loaf'``); which names a formula may use is the caller's choice (item ids and
  ``income`` for a demand formula, item ids for a utility formula);
- ``+ - * /`` and powers ``^`` (``**`` is the same operator);
- the functions ``exp``, ``log`` (natural), ``sqrt`` of one argument and ``min``, ``max`` of two
  or more.

Grammar, from the loosest binding to the tightest (powers are right-associative and bind tighter
than a leading minus, so ``-x^2`` is ``-(x^2)`` and ``2^3^2`` is ``2^9``, the usual mathematical
reading)::

    sum      := product (("+" | "-") product)*
    product  := signed (("*" | "/") signed)*
    signed   := ("+" | "-") signed | power
    power    := atom (("^" | "**") signed)?
    atom     := number | name | function "(" sum ("," sum)* ")" | "(" sum ")"

The text is split into tokens by a hand-written scanner and parsed by recursive descent. Each
nested construct (a bracket, a function argument, a sign, an exponent) counts one level, and a
formula deeper than ``max_depth`` levels or longer than ``max_length`` characters is refused before
the Python stack could be exhausted. Sums and products are stored flat (one node for
``a + b + c + ...``), so a long formula does not make a deep tree.

Evaluation runs the tree's nodes in order, operands first and each shared subtree once, with
numpy (scalars or arrays) under ``np.errstate(all="raise")``: a
division by zero, an overflow, the logarithm of a non-positive number, the square root of a
negative one or a fractional power of a negative one stops with
:class:`~dualcost.core.errors.InvalidInput` naming the operator's position in the text. Derivatives
are taken from the tree by the usual rules of symbolic differentiation, with constants folded and
zero terms dropped; ``min`` and ``max`` are differentiated piecewise (the derivative of the
argument that is smallest, or largest, there).
"""

from __future__ import annotations

import difflib
from collections.abc import Callable, Collection, Iterator, Mapping, Sequence
from contextlib import contextmanager
from contextvars import ContextVar
from dataclasses import dataclass, field
from typing import Any

import numpy as np
import numpy.typing as npt

from .deadline import share_the_interpreter
from .errors import InvalidInput

#: Longest formula accepted, in characters (common practice for user-supplied text: a bound
#: well above any realistic demand equation).
MAX_LENGTH = 4000
#: Deepest nesting accepted (brackets, function arguments, signs and exponents, each one level).
MAX_DEPTH = 64

FUNCTIONS_OF_ONE = ("exp", "log", "sqrt")
FUNCTIONS_OF_MANY = ("min", "max")
FUNCTIONS = FUNCTIONS_OF_ONE + FUNCTIONS_OF_MANY

Value = np.float64 | np.ndarray


# -- the tree ---------------------------------------------------------------------------------


@dataclass(frozen=True, slots=True)
class Num:
    value: float
    pos: int


@dataclass(frozen=True, slots=True)
class Var:
    name: str
    pos: int


@dataclass(frozen=True, slots=True)
class Sum:
    terms: tuple[Node, ...]
    pos: int


@dataclass(frozen=True, slots=True)
class Product:
    """``prod(num) / prod(den)``; ``num`` may be empty (then 1)."""

    num: tuple[Node, ...]
    den: tuple[Node, ...]
    pos: int
    div_pos: int = -1  # where the first "/" was written, for messages (-1: at pos)


@dataclass(frozen=True, slots=True)
class Power:
    base: Node
    exponent: Node
    pos: int


@dataclass(frozen=True, slots=True)
class Call:
    func: str
    args: tuple[Node, ...]
    pos: int


@dataclass(frozen=True, slots=True)
class Pick:
    """The ``values`` entry at the position where ``keys`` is smallest (``min``) or largest
    (``max``): the derivative of ``min``/``max`` of ``keys``."""

    kind: str
    keys: tuple[Node, ...]
    values: tuple[Node, ...]
    pos: int


Node = Num | Var | Sum | Product | Power | Call | Pick


class _Fault(Exception):
    """An operation that left the real numbers; turned into InvalidInput by the caller."""

    def __init__(self, what: str, pos: int) -> None:
        super().__init__(what)
        self.what = what
        self.pos = pos


def _numeric(op: Callable[..., Any], pos: int, what: dict[str, str], *args: float) -> float:
    """Fold constants with numpy's floating-point rules, faults reported at ``pos``."""
    with np.errstate(all="raise", under="ignore"):
        try:
            return float(op(*(np.float64(a) for a in args)))
        except FloatingPointError as exc:
            raise _Fault(_fault_text(exc, what), pos) from None


def _fault_text(exc: FloatingPointError, what: dict[str, str]) -> str:
    message = str(exc)
    for key in ("divide", "overflow", "invalid"):
        if key in message:
            return what.get(key, _GENERIC[key])
    return what.get("invalid", _GENERIC["invalid"])


_GENERIC = {
    "divide": "division by zero",
    "overflow": "a number too large for floating point (overflow)",
    "invalid": "a result that is not a real number",
}
_SUM_FAULTS = {"overflow": "a sum too large for floating point (overflow)"}
_PRODUCT_FAULTS = {"divide": "division by zero",
                   "overflow": "a product or quotient too large for floating point (overflow)"}
_POWER_FAULTS = {"divide": "zero raised to a negative power",
                 "overflow": "a power too large for floating point (overflow)",
                 "invalid": "a negative number raised to a fractional power"}
_CALL_FAULTS = {
    "exp": {"overflow": "exp of a number too large for floating point (overflow)"},
    "log": {"divide": "the logarithm of zero", "invalid": "the logarithm of a negative number"},
    "sqrt": {"invalid": "the square root of a negative number"},
    "min": {},
    "max": {},
}
_CALLS: dict[str, Callable[..., Any]] = {"exp": np.exp, "log": np.log, "sqrt": np.sqrt}


# -- smart constructors: flatten, fold constants, drop zeros and ones ------------------------


def make_sum(terms: list[Node], pos: int) -> Node:
    flat: list[Node] = []
    const = 0.0
    for t in terms:
        parts = t.terms if isinstance(t, Sum) else (t,)
        for part in parts:
            if isinstance(part, Num):
                const = _numeric(np.add, pos, _SUM_FAULTS, const, part.value)
            else:
                flat.append(part)
    if const != 0.0 or not flat:
        flat.append(Num(const, pos))
    return flat[0] if len(flat) == 1 else Sum(tuple(flat), pos)


def make_product(num: list[Node], den: list[Node], pos: int, div_pos: int = -1) -> Node:
    top: list[Node] = []
    bottom: list[Node] = []
    const = 1.0
    for n in num:
        if isinstance(n, Product):
            top.extend(x for x in n.num if not isinstance(x, Num))
            bottom.extend(n.den)
            for x in n.num:
                if isinstance(x, Num):
                    const = _numeric(np.multiply, pos, _PRODUCT_FAULTS, const, x.value)
        elif isinstance(n, Num):
            const = _numeric(np.multiply, pos, _PRODUCT_FAULTS, const, n.value)
        else:
            top.append(n)
    for d in den:
        if isinstance(d, Product):
            bottom.extend(x for x in d.num if not isinstance(x, Num))
            top.extend(d.den)
            for x in d.num:
                if isinstance(x, Num):
                    const = _numeric(np.divide, pos, _PRODUCT_FAULTS, const, x.value)
        elif isinstance(d, Num):
            const = _numeric(np.divide, pos, _PRODUCT_FAULTS, const, d.value)
        else:
            bottom.append(d)
    if const == 0.0:
        return Num(0.0, pos)
    if not top and not bottom:
        return Num(const, pos)
    if const != 1.0:
        top.insert(0, Num(const, pos))
    if not bottom and len(top) == 1:
        return top[0]
    return Product(tuple(top), tuple(bottom), pos, div_pos)


def make_neg(x: Node, pos: int) -> Node:
    return make_product([Num(-1.0, pos), x], [], pos)


def make_power(base: Node, exponent: Node, pos: int) -> Node:
    if isinstance(exponent, Num):
        if exponent.value == 1.0:
            return base
        if exponent.value == 0.0:
            return Num(1.0, pos)
        if isinstance(base, Num):
            return Num(_numeric(np.power, pos, _POWER_FAULTS, base.value, exponent.value), pos)
    if isinstance(base, Num) and base.value == 1.0:
        return Num(1.0, pos)
    return Power(base, exponent, pos)


def make_call(func: str, args: list[Node], pos: int) -> Node:
    if all(isinstance(a, Num) for a in args):
        values = [a.value for a in args if isinstance(a, Num)]
        if func in _CALLS:
            return Num(_numeric(_CALLS[func], pos, _CALL_FAULTS[func], values[0]), pos)
        return Num(float(min(values) if func == "min" else max(values)), pos)
    return Call(func, tuple(args), pos)


# -- scanner ----------------------------------------------------------------------------------


@dataclass(frozen=True, slots=True)
class Token:
    kind: str  # "num", "name", "op", "end"
    text: str
    pos: int


_OPERATORS = ("**", "+", "-", "*", "/", "^", "(", ")", ",")


def _is_name_start(ch: str) -> bool:
    return ch.isascii() and (ch.isalpha() or ch == "_")


def _is_name_char(ch: str) -> bool:
    return ch.isascii() and (ch.isalnum() or ch == "_")


def tokens(text: str, parameter: str, index: int | None) -> list[Token]:
    """Split ``text`` into numbers, names and operators; spaces separate and are dropped."""
    out: list[Token] = []
    i, n = 0, len(text)
    while i < n:
        ch = text[i]
        if ch in " \t\r\n":
            i += 1
        elif ch.isascii() and (ch.isdigit() or (ch == "." and i + 1 < n and text[i + 1].isdigit())):
            start = i
            while i < n and text[i].isascii() and text[i].isdigit():
                i += 1
            if i < n and text[i] == ".":
                i += 1
                while i < n and text[i].isascii() and text[i].isdigit():
                    i += 1
            if i < n and text[i] in "eE":
                j = i + 1
                if j < n and text[j] in "+-":
                    j += 1
                if j < n and text[j].isascii() and text[j].isdigit():
                    i = j
                    while i < n and text[i].isascii() and text[i].isdigit():
                        i += 1
            if i < n and (_is_name_start(text[i]) or text[i] == "'"):
                raise InvalidInput(parameter, f"a number is followed directly by a name at character "
                                   f"{i + 1} ({text[start:i + 1]!r}); write a * between them",
                                   index)
            out.append(Token("num", text[start:i], start))
        elif _is_name_start(ch):
            start = i
            while i < n and _is_name_char(text[i]):
                i += 1
            out.append(Token("name", text[start:i], start))
        elif ch == "'":
            end = text.find("'", i + 1)
            if end < 0:
                raise InvalidInput(parameter, f"the quoted name opened at character {i + 1} is not "
                                   "closed with '", index)
            if end == i + 1:
                raise InvalidInput(parameter, f"empty quoted name at character {i + 1}", index)
            out.append(Token("name", text[i + 1:end], i))
            i = end + 1
        else:
            op = next((o for o in _OPERATORS if text.startswith(o, i)), None)
            if op is None:
                raise InvalidInput(parameter, f"unexpected character {ch!r} at character {i + 1}; a "
                                   "formula has numbers, names, + - * / ^, brackets and the "
                                   "functions exp, log, sqrt, min and max", index)
            out.append(Token("op", "^" if op == "**" else op, i))
            i += len(op)
    out.append(Token("end", "", n))
    return out


# -- parser -----------------------------------------------------------------------------------


class _Parser:
    """Recursive descent over the token list, one method per grammar rule, with a depth count."""

    def __init__(self, text: str, toks: list[Token], names: Collection[str], describe: str,
                 parameter: str, index: int | None, max_depth: int) -> None:
        self.text = text
        self.toks = toks
        self.i = 0
        self.names = names
        self.describe = describe
        self.parameter = parameter
        self.index = index
        self.max_depth = max_depth
        self.depth = 0
        self.used: set[str] = set()

    def fail(self, rule: str) -> InvalidInput:
        return InvalidInput(self.parameter, rule, self.index)

    @property
    def tok(self) -> Token:
        return self.toks[self.i]

    def _where(self, tok: Token) -> str:
        return "at the end of the formula" if tok.kind == "end" else f"at character {tok.pos + 1}"

    def _shown(self, tok: Token) -> str:
        return "the end" if tok.kind == "end" else repr(tok.text)

    def expect(self, op: str, what: str) -> Token:
        tok = self.tok
        if tok.kind != "op" or tok.text != op:
            raise self.fail(f"expected {what} {self._where(tok)}, found {self._shown(tok)}")
        self.i += 1
        return tok

    def parse(self) -> Node:
        if self.tok.kind == "end":
            raise self.fail("is empty: write a formula")
        node = self.sum()
        if self.tok.kind != "end":
            tok = self.tok
            hint = "; a ')' has no matching '('" if tok.text == ")" else ""
            raise self.fail(f"unexpected {tok.text!r} at character {tok.pos + 1}{hint}")
        return node

    def sum(self) -> Node:
        first = self.tok
        terms = [self.product()]
        while self.tok.kind == "op" and self.tok.text in "+-":
            op = self.tok
            self.i += 1
            term = self.product()
            terms.append(term if op.text == "+" else make_neg(term, op.pos))
        return terms[0] if len(terms) == 1 else make_sum(terms, first.pos)

    def product(self) -> Node:
        first = self.tok
        num = [self.signed()]
        den: list[Node] = []
        div_pos = -1
        while self.tok.kind == "op" and self.tok.text in "*/":
            op = self.tok
            self.i += 1
            factor = self.signed()
            if op.text == "*":
                num.append(factor)
            else:
                if isinstance(factor, Num) and factor.value == 0.0:
                    raise self.fail(f"division by zero at character {op.pos + 1}")
                den.append(factor)
                if div_pos < 0:
                    div_pos = op.pos
        if len(num) == 1 and not den:
            return num[0]
        return make_product(num, den, first.pos, div_pos)

    def signed(self) -> Node:
        self.depth += 1
        if self.depth > self.max_depth:
            raise self.fail(f"is nested more than {self.max_depth} levels deep (brackets, "
                            f"function arguments, signs and powers) at character {self.tok.pos + 1}")
        try:
            tok = self.tok
            if tok.kind == "op" and tok.text in "+-":
                self.i += 1
                inner = self.signed()
                return make_neg(inner, tok.pos) if tok.text == "-" else inner
            return self.power()
        finally:
            self.depth -= 1

    def power(self) -> Node:
        base = self.atom()
        if self.tok.kind == "op" and self.tok.text == "^":
            op = self.tok
            self.i += 1
            return make_power(base, self.signed(), op.pos)
        return base

    def atom(self) -> Node:
        tok = self.tok
        if tok.kind == "num":
            self.i += 1
            value = float(tok.text)
            if not np.isfinite(value):
                raise self.fail(f"the number {tok.text} at character {tok.pos + 1} is too large")
            return Num(value, tok.pos)
        if tok.kind == "name":
            self.i += 1
            nxt = self.tok
            quoted = self.text[tok.pos] == "'"
            if not quoted and nxt.kind == "op" and nxt.text == "(":
                return self.call(tok)
            if tok.text not in self.names:
                raise self.fail(self._unknown(tok))
            self.used.add(tok.text)
            return Var(tok.text, tok.pos)
        if tok.kind == "op" and tok.text == "(":
            self.i += 1
            if self.tok.kind == "op" and self.tok.text == ")":
                raise self.fail(f"empty brackets at character {tok.pos + 1}")
            inner = self.sum()
            if self.tok.kind != "op" or self.tok.text != ")":
                raise self.fail(f"the '(' at character {tok.pos + 1} is not closed: expected ')' "
                                f"{self._where(self.tok)}, found {self._shown(self.tok)}")
            self.i += 1
            return inner
        raise self.fail(f"expected a number, a name or '(' {self._where(tok)}, found "
                        f"{self._shown(tok)}")

    def call(self, name: Token) -> Node:
        func = name.text
        if func not in FUNCTIONS:
            close = difflib.get_close_matches(func, FUNCTIONS, n=1)
            hint = f" (did you mean {close[0]!r}?)" if close else ""
            raise self.fail(f"unknown function {func!r} at character {name.pos + 1}{hint}; the "
                            "functions are exp, log, sqrt, min and max")
        self.expect("(", f"'(' after {func}")
        args = [self.argument()]
        while self.tok.kind == "op" and self.tok.text == ",":
            self.i += 1
            args.append(self.argument())
        if self.tok.kind != "op" or self.tok.text != ")":
            raise self.fail(f"the call of {func} at character {name.pos + 1} is not closed: "
                            f"expected ',' or ')' {self._where(self.tok)}, found "
                            f"{self._shown(self.tok)}")
        self.i += 1
        if func in FUNCTIONS_OF_ONE and len(args) != 1:
            raise self.fail(f"{func} at character {name.pos + 1} takes one argument, got {len(args)}")
        if func in FUNCTIONS_OF_MANY and len(args) < 2:
            raise self.fail(f"{func} at character {name.pos + 1} takes two or more arguments, got "
                            f"{len(args)}")
        return make_call(func, args, name.pos)

    def argument(self) -> Node:
        # The argument's own sign-or-power level (``signed``) counts its nesting.
        if self.tok.kind == "op" and self.tok.text in ",)":
            raise self.fail(f"missing function argument at character {self.tok.pos + 1}")
        return self.sum()

    def _unknown(self, tok: Token) -> str:
        starting = sorted(n for n in self.names if n.lower().startswith(tok.text.lower()))
        close = starting[:1] or difflib.get_close_matches(tok.text, list(self.names), n=1)
        hint = f" (did you mean {close[0]!r}?)" if close else ""
        return (f"unknown name {tok.text!r} at character {tok.pos + 1}{hint}; this formula may use "
                f"{self.describe}")


# -- evaluation: the tree becomes a list of steps, each shared subtree computed once ------------

Step = Callable[[list[Any], Mapping[str, Any]], Any]
Evaluator = Callable[[Mapping[str, Any]], Value]


def _children(node: Node) -> tuple[Node, ...]:
    if isinstance(node, Sum):
        return node.terms
    if isinstance(node, Product):
        return node.num + node.den
    if isinstance(node, Power):
        return (node.base, node.exponent)
    if isinstance(node, Call):
        return node.args
    if isinstance(node, Pick):
        return node.keys + node.values
    return ()


def _program(root: Node) -> list[Step]:
    """The nodes in an order where each comes after its operands, each distinct node once.

    A derivative reuses subtrees of the formula (``d exp(f) = exp(f) f'``), so its tree is a
    graph with shared parts; walking it as a tree would repeat work, in the worst case as often
    as the nesting is deep. The walk here is iterative, so depth costs no Python stack.
    """
    slot: dict[int, int] = {}
    steps: list[Step] = []
    stack: list[tuple[Node, bool]] = [(root, False)]
    while stack:
        node, operands_done = stack.pop()
        if id(node) in slot:
            continue
        if not operands_done:
            stack.append((node, True))
            stack.extend((c, False) for c in _children(node) if id(c) not in slot)
            continue
        steps.append(_step(node, [slot[id(c)] for c in _children(node)]))
        slot[id(node)] = len(steps) - 1
    return steps


def _step(node: Node, at: list[int]) -> Step:
    """One node's operation, reading its operands' values from the slots ``at``; a fault inside
    the operation names the node's place in the text."""
    if isinstance(node, Num):
        value = np.float64(node.value)
        return lambda vals, env: value
    if isinstance(node, Var):
        key = node.name
        return lambda vals, env: env[key]
    pos = node.pos
    if isinstance(node, Sum):
        first, rest = at[0], at[1:]

        def add(vals: list[Any], env: Mapping[str, Any]) -> Value:
            total = vals[first]
            try:
                for k in rest:
                    total = total + vals[k]
            except FloatingPointError as exc:
                raise _Fault(_fault_text(exc, _SUM_FAULTS), pos) from None
            return total

        return add
    if isinstance(node, Product):
        top, bottom = at[: len(node.num)], at[len(node.num):]
        div_pos = node.div_pos if node.div_pos >= 0 else pos

        def multiply(vals: list[Any], env: Mapping[str, Any]) -> Value:
            try:
                result: Value = np.float64(1.0)
                for k in top:
                    result = result * vals[k]
                if bottom:
                    below: Value = np.float64(1.0)
                    for k in bottom:
                        below = below * vals[k]
                    if np.any(below == 0.0):
                        raise _Fault("division by zero", div_pos)
                    result = result / below
                return result
            except FloatingPointError as exc:
                raise _Fault(_fault_text(exc, _PRODUCT_FAULTS), pos) from None

        return multiply
    if isinstance(node, Power):
        b, e = at

        def power(vals: list[Any], env: Mapping[str, Any]) -> Value:
            try:
                return np.power(vals[b], vals[e])
            except FloatingPointError as exc:
                raise _Fault(_fault_text(exc, _POWER_FAULTS), pos) from None

        return power
    if isinstance(node, Call):
        faults = _CALL_FAULTS[node.func]
        if node.func in _CALLS:
            fn = _CALLS[node.func]
            (arg,) = at

            def call(vals: list[Any], env: Mapping[str, Any]) -> Value:
                try:
                    return fn(vals[arg])
                except FloatingPointError as exc:
                    raise _Fault(_fault_text(exc, faults), pos) from None

            return call
        pick = np.minimum if node.func == "min" else np.maximum

        def extreme(vals: list[Any], env: Mapping[str, Any]) -> Value:
            result = vals[at[0]]
            for k in at[1:]:
                result = pick(result, vals[k])
            return result

        return extreme
    if isinstance(node, Pick):
        keys, values = at[: len(node.keys)], at[len(node.keys):]
        choose = np.argmin if node.kind == "min" else np.argmax

        def picked(vals: list[Any], env: Mapping[str, Any]) -> Value:
            ks = [vals[k] for k in keys]
            vs = [vals[v] for v in values]
            if all(np.ndim(k) == 0 for k in ks):
                return vs[int(choose(ks))]
            both = np.broadcast_arrays(*ks, *vs)
            where = choose(np.stack(both[: len(ks)]), axis=0)
            stacked = np.stack(both[len(ks):])
            return np.take_along_axis(stacked, where[None, ...], axis=0)[0]

        return picked
    raise TypeError(f"not a formula node: {node!r}")  # pragma: no cover


def _runner(root: Node) -> Evaluator:
    steps = _program(root)

    def run(env: Mapping[str, Any]) -> Value:
        # A solve evaluates formulas many times: let the process's other threads have the
        # interpreter now and then (see dualcost.core.deadline).
        share_the_interpreter()
        vals: list[Any] = []
        append = vals.append
        for step in steps:
            append(step(vals, env))
        return vals[-1]

    return run


# -- symbolic derivative ----------------------------------------------------------------------


def derivative_node(node: Node, name: str, memo: dict[int, Node] | None = None) -> Node:
    """d node / d name by the sum, product, quotient, power and chain rules.

    ``memo`` keeps each shared subtree's derivative, so that a graph with shared parts is
    differentiated once per distinct node.
    """
    memo = {} if memo is None else memo
    key = id(node)
    if key not in memo:
        memo[key] = _derivative(node, name, memo)
    return memo[key]


def _derivative(node: Node, name: str, memo: dict[int, Node]) -> Node:
    if isinstance(node, Num):
        return Num(0.0, node.pos)
    if isinstance(node, Var):
        return Num(1.0 if node.name == name else 0.0, node.pos)
    pos = node.pos
    if isinstance(node, Sum):
        return make_sum([derivative_node(t, name, memo) for t in node.terms], pos)
    if isinstance(node, Product):
        # d(N / D) = dN / D - N dD / D^2, with dN = sum_k dn_k prod_{l != k} n_l.
        d_top = _product_rule(node.num, name, memo, pos)
        below = list(node.den)
        if not below:
            return d_top
        d_below = _product_rule(node.den, name, memo, pos)
        first = make_product([d_top], below, pos)
        if isinstance(d_below, Num) and d_below.value == 0.0:
            return first
        second = make_product([*node.num, d_below], below + below, pos)
        return make_sum([first, make_neg(second, pos)], pos)
    if isinstance(node, Power):
        f, g = node.base, node.exponent
        df = derivative_node(f, name, memo)
        dg = derivative_node(g, name, memo)
        g_constant = isinstance(dg, Num) and dg.value == 0.0
        f_constant = isinstance(df, Num) and df.value == 0.0
        if g_constant and f_constant:
            return Num(0.0, pos)
        if g_constant:  # g f^(g-1) f'
            lower = make_power(f, make_sum([g, Num(-1.0, pos)], pos), pos)
            return make_product([g, lower, df], [], pos)
        log_f = make_call("log", [f], pos)
        if f_constant:  # f^g ln f g'
            return make_product([node, log_f, dg], [], pos)
        # f^g (g' ln f + g f' / f)
        inner = make_sum([make_product([dg, log_f], [], pos), make_product([g, df], [f], pos)], pos)
        return make_product([node, inner], [], pos)
    if isinstance(node, Call):
        if node.func in FUNCTIONS_OF_MANY:
            return _pick(node.func, node.args, [derivative_node(a, name, memo) for a in node.args], pos)
        (f,) = node.args
        df = derivative_node(f, name, memo)
        if isinstance(df, Num) and df.value == 0.0:
            return Num(0.0, pos)
        if node.func == "exp":
            return make_product([node, df], [], pos)
        if node.func == "log":
            return make_product([df], [f], pos)
        return make_product([df], [Num(2.0, pos), node], pos)  # sqrt
    if isinstance(node, Pick):
        return _pick(node.kind, node.keys, [derivative_node(v, name, memo) for v in node.values], pos)
    raise TypeError(f"not a formula node: {node!r}")  # pragma: no cover


def _product_rule(factors: tuple[Node, ...], name: str, memo: dict[int, Node], pos: int) -> Node:
    terms = []
    for k, factor in enumerate(factors):
        df = derivative_node(factor, name, memo)
        if isinstance(df, Num) and df.value == 0.0:
            continue
        terms.append(make_product([*factors[:k], df, *factors[k + 1:]], [], pos))
    return make_sum(terms, pos) if terms else Num(0.0, pos)


def _pick(kind: str, keys: tuple[Node, ...], values: list[Node], pos: int) -> Node:
    if all(isinstance(v, Num) for v in values) and len({v.value for v in values if
                                                        isinstance(v, Num)}) == 1:
        return values[0]
    return Pick(kind, tuple(keys), tuple(values), pos)


# -- text of a tree ---------------------------------------------------------------------------


def node_text(node: Node) -> str:
    """The tree written back in the formula language, fully bracketed (the derivative of ``min`` or
    ``max`` is shown in a form for reading, which does not parse)."""
    if isinstance(node, Num):
        return repr(node.value) if node.value >= 0 else f"({node.value!r})"
    if isinstance(node, Var):
        return node.name if node.name.isidentifier() and node.name.isascii() else f"'{node.name}'"
    if isinstance(node, Sum):
        return "(" + " + ".join(node_text(t) for t in node.terms) + ")"
    if isinstance(node, Product):
        top = " * ".join(node_text(t) for t in node.num) or "1"
        if not node.den:
            return f"({top})"
        return f"(({top}) / ({' * '.join(node_text(t) for t in node.den)}))"
    if isinstance(node, Power):
        return f"({node_text(node.base)} ^ {node_text(node.exponent)})"
    if isinstance(node, Call):
        return f"{node.func}({', '.join(node_text(a) for a in node.args)})"
    if isinstance(node, Pick):
        # Not part of the language: shown for reading only.
        keys = ", ".join(node_text(k) for k in node.keys)
        values = ", ".join(node_text(v) for v in node.values)
        return f"[at arg{node.kind}({keys}): {values}]"
    raise TypeError(f"not a formula node: {node!r}")  # pragma: no cover


# -- the public object ------------------------------------------------------------------------


@dataclass(frozen=True)
class Expression:
    """A parsed formula: evaluate it, differentiate it, see which names it uses.

    ``parameter`` and ``index`` say which argument the text came from, so that an error found
    while evaluating it points there.
    """

    text: str
    root: Node
    names: frozenset[str]
    parameter: str = "formula"
    index: int | None = None
    _run: Evaluator = field(default=lambda env: np.float64(0.0), repr=False, compare=False)

    @classmethod
    def from_node(cls, text: str, root: Node, names: frozenset[str], parameter: str,
                  index: int | None) -> Expression:
        return cls(text, root, names, parameter, index, _runner(root))

    def uses(self, name: str) -> bool:
        return name in self.names

    @property
    def constant(self) -> float | None:
        """The formula's value when it is a plain number, else None."""
        return self.root.value if isinstance(self.root, Num) else None

    def evaluate(self, values: Mapping[str, npt.ArrayLike], *, where: str = "") -> Value:
        """The formula's value with each name bound to a number (or an array; numpy broadcasting).

        Raises :class:`InvalidInput` naming the operation's position when the result leaves the
        real numbers; ``where`` is appended to the message (for example ``" at prices p1"``).
        """
        env = {name: np.asarray(values[name], dtype=np.float64)[()] for name in self.names}
        with np.errstate(all="raise", under="ignore"):
            try:
                return self._run(env)
            except _Fault as fault:
                raise InvalidInput(self.parameter, f"{fault.what} at character {fault.pos + 1} of "
                                   f"the formula{where}", self.index) from None

    def derivative(self, name: str) -> Expression:
        """The formula's derivative with respect to ``name``, as a formula over the same names.

        Faults found while simplifying (a constant overflow) name the original text's position.
        """
        try:
            root = derivative_node(self.root, name)
        except _Fault as fault:
            raise InvalidInput(self.parameter, f"{fault.what} at character {fault.pos + 1} of the "
                               "formula (in its derivative)", self.index) from None
        return Expression.from_node(f"d/d{name} of {self.text}", root, self.names, self.parameter,
                                    self.index)

    def __str__(self) -> str:
        return node_text(self.root)


def evaluate_all(formulas: Sequence[Expression], values: Mapping[str, float], *,
                 where: str = "") -> np.ndarray:
    """The values of several scalar formulas over the same names, as one vector (one set-up of
    the floating-point rules for all of them)."""
    env = {name: np.float64(v) for name, v in values.items()}
    out = np.empty(len(formulas))
    with np.errstate(all="raise", under="ignore"):
        for k, f in enumerate(formulas):
            try:
                out[k] = f._run(env)
            except _Fault as fault:
                raise InvalidInput(f.parameter, f"{fault.what} at character {fault.pos + 1} of "
                                   f"the formula{where}", f.index) from None
    return out


_LIMITS: ContextVar[tuple[int, int] | None] = ContextVar("dualcost_formula_limits", default=None)


@contextmanager
def formula_limits(max_length: int, max_depth: int) -> Iterator[None]:
    """Parse formulas in the enclosed work with these limits (the service sets them per request)."""
    token = _LIMITS.set((int(max_length), int(max_depth)))
    try:
        yield
    finally:
        _LIMITS.reset(token)


def parse(
    text: Any,
    names: Collection[str],
    *,
    parameter: str = "formula",
    index: int | None = None,
    describe_names: str | None = None,
    max_length: int | None = None,
    max_depth: int | None = None,
) -> Expression:
    """Parse ``text`` into an :class:`Expression` that may use only ``names``.

    Parameters
    ----------
    text:
        The formula.
    names:
        The names the formula may use (item ids, ``income``).
    parameter, index:
        The argument the text came from, for error messages.
    describe_names:
        How the allowed names are described in an error (default: lists a few of them).
    max_length, max_depth:
        Longest text and deepest nesting accepted (default: the limits set with
        :func:`formula_limits` for the work in progress, else ``MAX_LENGTH`` and ``MAX_DEPTH``).
    """
    limits = _LIMITS.get()
    if max_length is None:
        max_length = limits[0] if limits else MAX_LENGTH
    if max_depth is None:
        max_depth = limits[1] if limits else MAX_DEPTH
    if not isinstance(text, str):
        raise InvalidInput(parameter, "must be a formula written as text", index)
    if len(text) > max_length:
        raise InvalidInput(parameter, f"is {len(text)} characters long; the limit is {max_length}",
                           index)
    allowed = frozenset(names)
    if describe_names is None:
        shown = sorted(allowed)[:6]
        describe_names = ", ".join(repr(s) for s in shown) + (" ..." if len(allowed) > 6 else "")
    toks = tokens(text, parameter, index)
    parser = _Parser(text, toks, allowed, describe_names, parameter, index, max_depth)
    try:
        root = parser.parse()
    except _Fault as fault:
        raise InvalidInput(parameter, f"{fault.what} at character {fault.pos + 1} of the formula",
                           index) from None
    return Expression.from_node(text, root, frozenset(parser.used), parameter, index)


__all__ = ["Expression", "MAX_DEPTH", "MAX_LENGTH", "evaluate_all", "formula_limits", "parse"]
