"""The formula language: parsing, evaluation and derivatives, checked against sympy.

Reference library: SymPy (Meurer et al. 2017, "SymPy: symbolic computing in Python", PeerJ
Computer Science 3:e103), whose parser reads the same arithmetic with ``**`` for powers and whose
``diff`` gives exact symbolic derivatives, evaluated here in 30-digit arithmetic. Every random
expression is drawn from a seeded generator (``np.random.default_rng(seed)``).
"""

from __future__ import annotations

import re
import sys
from pathlib import Path

import numpy as np
import pytest
import sympy
from numpy.testing import assert_allclose

from dualcost.core import expressions
from dualcost.core.errors import InvalidInput
from dualcost.core.expressions import MAX_DEPTH, evaluate_all, parse

NAMES = ("a", "b", "c")
SYMBOLS = {name: sympy.Symbol(name, positive=True) for name in NAMES}
SYMPY_LOCALS = {**SYMBOLS, "exp": sympy.exp, "log": sympy.log, "sqrt": sympy.sqrt,
                "min": sympy.Min, "max": sympy.Max}


def number(rng: np.random.Generator) -> str:
    return repr(float(np.round(rng.uniform(0.3, 2.5), 2)))


def positive(rng: np.random.Generator, depth: int, *, minmax: bool) -> str:
    """A random formula that stays positive for positive a, b, c."""
    if depth <= 0:
        return str(rng.choice(NAMES)) if rng.random() < 0.7 else number(rng)
    kinds = ["add", "mul", "div", "exp", "sqrt", "pow", "name"] + (["min", "max"] if minmax else [])
    kind = str(rng.choice(kinds))
    sub = lambda: positive(rng, depth - 1, minmax=minmax)  # noqa: E731
    if kind == "add":
        return f"({sub()} + {sub()})"
    if kind == "mul":
        return f"{sub()} * {sub()}"
    if kind == "div":
        return f"{sub()} / ({sub()})"
    if kind == "exp":
        return f"exp(0.3 * {anything(rng, depth - 1, minmax=minmax)})"
    if kind == "sqrt":
        return f"sqrt({sub()})"
    if kind == "pow":
        return f"({sub()})**{str(rng.choice(['2', '-1', '0.5', '1.5', '-0.7']))}"
    if kind in ("min", "max"):
        return f"{kind}({sub()}, {sub()})"
    return str(rng.choice(NAMES))


def anything(rng: np.random.Generator, depth: int, *, minmax: bool = False) -> str:
    """A random formula of either sign."""
    if depth <= 0:
        return str(rng.choice(NAMES)) if rng.random() < 0.7 else number(rng)
    kind = str(rng.choice(["sub", "neg", "log", "pos", "mul"]))
    if kind == "sub":
        return f"({positive(rng, depth - 1, minmax=minmax)} - {positive(rng, depth - 1, minmax=minmax)})"
    if kind == "neg":
        return f"-{positive(rng, depth - 1, minmax=minmax)}"
    if kind == "log":
        return f"log({positive(rng, depth - 1, minmax=minmax)})"
    if kind == "mul":
        return f"{anything(rng, depth - 1, minmax=minmax)} * {positive(rng, depth - 1, minmax=minmax)}"
    return positive(rng, depth, minmax=minmax)


def sympy_of(text: str) -> sympy.Expr:
    return sympy.parse_expr(text, local_dict=SYMPY_LOCALS)


def sympy_value(expr: sympy.Expr, point: dict[str, float]) -> float:
    return float(expr.evalf(30, subs={SYMBOLS[k]: sympy.Float(v, 30) for k, v in point.items()}))


def draws(seed: int, count: int, *, minmax: bool = False):
    """Seeded random formulas with a random point where sympy finds them finite and moderate."""
    rng = np.random.default_rng(seed)
    made = 0
    while made < count:
        text = anything(rng, int(rng.integers(1, 5)), minmax=minmax)
        point = {name: float(rng.uniform(0.5, 2.0)) for name in NAMES}
        ref = sympy_of(text)
        value = sympy_value(ref, point)
        if not np.isfinite(value) or abs(value) > 1e8:
            continue
        made += 1
        yield text, ref, point


@pytest.mark.parametrize("seed", [0, 1, 2])
def test_values_agree_with_sympy(seed: int) -> None:
    """Random formulas: our parse and evaluation equal SymPy's parse and 30-digit evaluation
    (SymPy as reference library) to 1e-12 relative."""
    for text, ref, point in draws(seed, 60):
        ours = float(parse(text, NAMES).evaluate(point))
        assert_allclose(ours, sympy_value(ref, point), rtol=1e-12, atol=1e-300, err_msg=text)


@pytest.mark.parametrize("seed", [3, 4, 5])
def test_derivatives_agree_with_sympy_diff(seed: int) -> None:
    """d/da, d/db, d/dc of random formulas from the tree equal sympy.diff evaluated in 30 digits,
    to 1e-12 relative (absolute 1e-12 times the size of the formula's value, for derivatives that
    cancel to near zero)."""
    for text, ref, point in draws(seed, 40):
        expr = parse(text, NAMES)
        scale = abs(sympy_value(ref, point)) + 1.0
        for name in NAMES:
            ours = float(expr.derivative(name).evaluate(point))
            want = sympy_value(sympy.diff(ref, SYMBOLS[name]), point)
            assert_allclose(ours, want, rtol=1e-12, atol=1e-12 * scale, err_msg=f"d/d{name} {text}")


def test_second_derivatives_agree_with_sympy() -> None:
    """Derivatives of derivatives (the tree of a derivative is a formula like any other) equal
    sympy.diff twice (SymPy as reference library)."""
    for text, ref, point in draws(6, 15):
        expr = parse(text, NAMES)
        scale = abs(sympy_value(ref, point)) + 1.0
        ours = float(expr.derivative("a").derivative("b").evaluate(point))
        want = sympy_value(sympy.diff(ref, SYMBOLS["a"], SYMBOLS["b"]), point)
        assert_allclose(ours, want, rtol=1e-10, atol=1e-10 * scale, err_msg=text)


def test_min_and_max_and_their_derivatives_away_from_ties() -> None:
    """min/max and their piecewise derivatives equal SymPy's Min/Max and diff (which gives
    Heaviside steps) wherever the arguments are not tied (SymPy as reference library)."""
    checked = 0
    for text, ref, point in draws(7, 20, minmax=True):
        expr = parse(text, NAMES)
        assert_allclose(float(expr.evaluate(point)), sympy_value(ref, point), rtol=1e-12)
        for name in NAMES:
            want = sympy.diff(ref, SYMBOLS[name]).evalf(
                30, subs={SYMBOLS[k]: sympy.Float(v, 30) for k, v in point.items()})
            if want.has(sympy.Heaviside, sympy.DiracDelta) or not want.is_number:
                continue
            ours = float(expr.derivative(name).evaluate(point))
            assert_allclose(ours, float(want), rtol=1e-12, atol=1e-12 * (1 + abs(float(want))))
            checked += 1
    assert checked > 25


@pytest.mark.parametrize("text,expected", [
    ("-2^2", "-2**2"), ("2^3^2", "2**3**2"), ("2**-1", "2**-1"), ("a/b/c", "a/b/c"),
    ("a - b - c", "a - b - c"), ("-a^2 * b", "-a**2 * b"), ("a*-b", "a*-b"), ("+a--b", "+a--b"),
    ("2^-a^2", "2**-a**2"), ("1.5e-1 * .5", "1.5e-1 * .5"), ("(a+b)*(a-c)/2", "(a+b)*(a-c)/2"),
])
def test_precedence_and_associativity_as_in_sympy(text: str, expected: str) -> None:
    """Powers bind tighter than a leading minus and group to the right; * and / group to the
    left: the reading of SymPy's parser (and of Python) for the same text with ** (reference)."""
    point = {"a": 1.3, "b": 0.7, "c": 2.1}
    assert_allclose(float(parse(text, NAMES).evaluate(point)),
                    sympy_value(sympy_of(expected), point), rtol=1e-14)


def test_arrays_evaluate_elementwise() -> None:
    """Numpy broadcasting: one evaluation over arrays equals the scalar evaluations (common
    practice for vectorised evaluation)."""
    expr = parse("max(a, b) * exp(-c) + sqrt(a*b) / c", NAMES)
    rng = np.random.default_rng(8)
    values = {name: rng.uniform(0.5, 2.0, 50) for name in NAMES}
    together = expr.evaluate(values)
    one_by_one = [float(expr.evaluate({k: v[i] for k, v in values.items()})) for i in range(50)]
    assert_allclose(together, one_by_one, rtol=1e-15)
    d = expr.derivative("a").evaluate(values)
    assert_allclose(d, [float(expr.derivative("a").evaluate({k: v[i] for k, v in values.items()}))
                        for i in range(50)], rtol=1e-15)


def test_text_round_trip_and_evaluate_all() -> None:
    """A tree written back as text parses to the same function; evaluate_all equals one-by-one
    evaluation (internal consistency, common practice)."""
    rng = np.random.default_rng(9)
    exprs = []
    for text, _, point in draws(10, 20):
        expr = parse(text, NAMES)
        again = parse(str(expr), NAMES)
        assert_allclose(float(again.evaluate(point)), float(expr.evaluate(point)), rtol=1e-13)
        exprs.append(expr)
    point = {name: float(rng.uniform(0.5, 2.0)) for name in NAMES}
    assert_allclose(evaluate_all(exprs, point), [float(e.evaluate(point)) for e in exprs], rtol=0)


def test_quoted_names_and_used_names() -> None:
    """Item ids that are not identifiers are written in single quotes (our rule)."""
    expr = parse("'rye loaf' * 2 + income", ["rye loaf", "income", "unused"])
    assert expr.names == frozenset({"rye loaf", "income"})
    assert float(expr.evaluate({"rye loaf": 3.0, "income": 1.0})) == 7.0


# -- errors -----------------------------------------------------------------------------------


def rule_of(text: str, names=NAMES, **kw) -> str:
    with pytest.raises(InvalidInput) as info:
        parse(text, names, parameter="demand_formulas", index=2, **kw)
    assert info.value.parameter == "demand_formulas" and info.value.index == 2
    return info.value.rule


@pytest.mark.parametrize("text,words", [
    ("a + bred", ["unknown name 'bred'", "character 5", "did you mean 'bread'"]),
    ("a +", ["expected a number", "end of the formula"]),
    ("(a + b", ["not closed"]),
    ("a + b)", ["unexpected ')'", "no matching '('"]),
    ("2a", ["number is followed directly by a name"]),
    ("a $ b", ["unexpected character '$'", "character 3"]),
    ("foo(a)", ["unknown function 'foo'"]),
    ("exp(a, b)", ["takes one argument"]),
    ("min(a)", ["two or more arguments"]),
    ("", ["empty"]),
    ("()", ["empty brackets"]),
    ("a / 0", ["division by zero", "character 3"]),
    ("exp(1000)", ["overflow"]),
    ("log(0)", ["logarithm of zero"]),
    ("(-8)^(1/3)", ["negative number raised to a fractional power"]),
    ("'abc", ["not closed"]),
])
def test_bad_formulas_are_refused_with_the_place(text: str, words: list[str]) -> None:
    """Each syntax or constant-arithmetic fault is one sentence naming what and where (our
    rules)."""
    rule = rule_of(text, names=("a", "b", "bread"))
    for w in words:
        assert w in rule, (w, rule)


@pytest.mark.parametrize("text,point,words", [
    ("1 / (a - b)", {"a": 1.0, "b": 1.0}, ["division by zero", "character 3"]),
    ("exp(a * b)", {"a": 900.0, "b": 1.0}, ["overflow", "character 1"]),
    ("log(a - b)", {"a": 1.0, "b": 2.0}, ["logarithm of a negative number"]),
    ("sqrt(a - b)", {"a": 1.0, "b": 2.0}, ["square root of a negative number"]),
    ("(a - b)^0.5", {"a": 1.0, "b": 2.0}, ["negative number raised to a fractional power"]),
    ("(a - b)^-2", {"a": 1.0, "b": 1.0}, ["zero raised to a negative power"]),
    ("a * b * 1e300", {"a": 1e10, "b": 1.0}, ["overflow"]),
])
def test_faults_at_the_values_evaluated(text: str, point: dict, words: list[str]) -> None:
    """Division by zero, overflow and values outside a function's domain stop with the operator's
    place, never with a numpy warning (pytest turns warnings into errors here)."""
    expr = parse(text, NAMES, parameter="demand_formulas", index=1)
    with pytest.raises(InvalidInput) as info:
        expr.evaluate(point, where=", at the prices evaluated")
    assert info.value.index == 1
    for w in words + ["at the prices evaluated"]:
        assert w in info.value.rule, (w, info.value.rule)


@pytest.mark.parametrize("make", [
    lambda k: "(" * k + "a" + ")" * k,
    lambda k: "-" * k + "a",
    lambda k: "a^" * k + "a",
    lambda k: "exp(" * k + "a" + ")" * k,
    lambda k: "min(a, " * k + "a" + ")" * k,
    lambda k: "-(" * k + "a" + ")" * k,
])
def test_nesting_1000_deep_is_refused_by_the_depth_count(make) -> None:
    """A formula nested 1,000 deep is refused by the depth count (our rule; the bound is
    MAX_DEPTH), not by running into Python's recursion limit: with that limit cut to 800 frames
    above the test's own (the parser takes a few frames a level: 64 levels fit, 1,000 would
    not), the refusal still comes with the depth rule (no timing: the machine's speed varies)."""
    depth, frame = 0, sys._getframe()
    while frame is not None:
        depth, frame = depth + 1, frame.f_back
    limit = sys.getrecursionlimit()
    sys.setrecursionlimit(depth + 800)
    try:
        rule = rule_of(make(1000), max_length=100_000)
    finally:
        sys.setrecursionlimit(limit)
    assert "nested more than 64 levels" in rule


@pytest.mark.parametrize("make", [
    lambda k: "(" * k + "a" + ")" * k,
    lambda k: "exp(0.01 * " * k + "a" + ")" * k,
    lambda k: "a^" * k + "b",
    lambda k: "sqrt(1 + " * k + "a" + ")" * k,
    lambda k: "(1 + a * " * k + "b" + ")" * k,
])
def test_deepest_allowed_nesting_evaluates_and_differentiates(make) -> None:
    """At the depth limit a formula still parses, evaluates and differentiates (twice) without
    exhausting the Python stack."""
    expr = parse(make(MAX_DEPTH - 1), NAMES)
    point = {"a": 1.0, "b": 1.0, "c": 1.0}
    expr.evaluate(point)
    second = expr.derivative("a").derivative("a")
    second.evaluate(point)


def test_long_formulas() -> None:
    """A 10 kB formula is refused by length before it is read; a long flat sum near the limit is
    fine (it makes one flat node, not a deep tree)."""
    rule = rule_of("a + " * 2500 + "a")
    assert "10001 characters" in rule and "limit is 4000" in rule
    flat = "+".join(["a*b"] * 900)
    assert len(flat) < 4000
    assert_allclose(float(parse(flat, NAMES).evaluate({"a": 2.0, "b": 3.0})), 900 * 6.0)
    assert_allclose(float(parse(flat, NAMES).derivative("a").evaluate({"a": 2.0, "b": 3.0})),
                    900 * 3.0)


def test_not_text() -> None:
    assert "written as text" in rule_of(3.5)  # type: ignore[arg-type]


def test_no_python_evaluation_of_user_text() -> None:
    """The formula path never hands user text to Python's own evaluator (our rule): no eval,
    exec, compile, ast.literal_eval or __import__ in the modules that read formulas."""
    core = Path(expressions.__file__).parent
    files = [core / "expressions.py", core / "path_integration.py",
             core / "preferences" / "demand_system.py", core / "preferences" / "formula_utility.py"]
    banned = re.compile(r"\b(eval|exec|compile)\s*\(|literal_eval|__import__|\bimport\s+ast\b")
    for f in files:
        text = f.read_text(encoding="utf-8")
        assert not banned.search(text), f"{f.name}: {banned.search(text)}"
