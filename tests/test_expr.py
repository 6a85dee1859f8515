"""Tests of curvewright.expr: the whitelist, the JSON tree, canonical text, numpy code, derivatives.

References: Python's own grammar (the ``ast`` module decides precedence; to_text must agree with
it), numpy evaluated by hand in each test, calculus worked by hand in the comments, and central
finite differences for derivatives.
"""

from __future__ import annotations

import ast
import builtins
import contextlib
import copy
import importlib.resources
import importlib.util
import json
import math
import warnings
from collections.abc import Callable, Iterator
from pathlib import Path
from types import ModuleType
from typing import Any

import numpy as np
import pytest
from hypothesis import HealthCheck, assume, given, settings
from hypothesis import strategies as st

from curvewright.errors import FormulaError
from curvewright.expr import (
    _UFUNCS,
    CONSTANTS,
    FUNCTIONS,
    MAX_DEPTH,
    MAX_JSON_DEPTH,
    MAX_LENGTH,
    Bin,
    Call,
    Const,
    Expr,
    Name,
    Neg,
    Num,
    _read_spec,
    parse,
)

ROOT = Path(__file__).resolve().parent.parent
VECTORS = ROOT / "tests" / "data" / "expr_vectors.json"
GENERATOR = ROOT / "tools" / "gen_expr_vectors.py"
# The whitelist and limits both sides read; js/tests/expr-parity.test.ts checks the JS side.
SPEC = ROOT / "src" / "curvewright" / "expr_spec.json"


def num(v: float) -> dict[str, Any]:
    return {"type": "num", "value": float(v)}


def name(i: str) -> dict[str, Any]:
    return {"type": "name", "id": i}


def const(i: str) -> dict[str, Any]:
    return {"type": "const", "id": i}


def neg(a: dict[str, Any]) -> dict[str, Any]:
    return {"type": "neg", "arg": a}


def binop(op: str, left: dict[str, Any], right: dict[str, Any]) -> dict[str, Any]:
    return {"type": "bin", "op": op, "left": left, "right": right}


def call(fn: str, arg: dict[str, Any]) -> dict[str, Any]:
    return {"type": "call", "fn": fn, "args": [arg]}


# ---------------------------------------------------------------------------------------------
# The public tables
# ---------------------------------------------------------------------------------------------


def test_function_and_constant_tables() -> None:
    # The list is fixed by DEVELOPERS.md ("The expression tree"); log is the natural logarithm.
    assert list(FUNCTIONS) == [
        "exp",
        "log",
        "log10",
        "sqrt",
        "abs",
        "sin",
        "cos",
        "tan",
        "arctan",
        "tanh",
    ]
    assert all(isinstance(f, np.ufunc) for f in FUNCTIONS.values())
    assert FUNCTIONS["log"] is np.log
    assert FUNCTIONS["arctan"] is np.arctan
    assert dict(CONSTANTS) == {"pi": math.pi, "e": math.e}
    with pytest.raises(TypeError):
        FUNCTIONS["eval"] = np.exp  # type: ignore[index]


def _spec() -> dict[str, Any]:
    data = json.loads(SPEC.read_text(encoding="utf-8"))
    assert isinstance(data, dict)
    return data


def test_tables_are_those_of_the_shared_spec() -> None:
    # js/expr.ts bundles this same file, so the two sides cannot list different functions,
    # constants or depth limits; here the Python side is held to it.
    spec = _spec()
    assert list(FUNCTIONS) == list(spec["functions"])
    assert dict(CONSTANTS) == spec["constants"]
    assert spec["max_depth"] == MAX_DEPTH
    assert spec["max_json_depth"] == MAX_JSON_DEPTH
    # The package reads the file it ships (importlib.resources), not a copy kept elsewhere.
    shipped = importlib.resources.files("curvewright").joinpath("expr_spec.json")
    assert json.loads(shipped.read_text(encoding="utf-8")) == spec


def _with(change: Callable[[dict[str, Any]], object]) -> dict[str, Any]:
    spec = copy.deepcopy(_spec())
    change(spec)
    return spec


SPEC_DRIFT: list[tuple[str, dict[str, Any], dict[str, Any], str]] = [
    (
        "spec gains a function",
        _with(lambda s: s["functions"].update(sinh="hyperbolic sine")),
        dict(_UFUNCS),
        r"lists functions with no numpy implementation in expr\.py: sinh",
    ),
    (
        "spec loses a function",
        _with(lambda s: s["functions"].pop("tan")),
        dict(_UFUNCS),
        r"expr\.py implements functions that curvewright/expr_spec\.json does not list: tan",
    ),
    (
        "implementation gains a function",
        _spec(),
        {**_UFUNCS, "sinh": np.sinh},
        r"implements functions that .* does not list: sinh",
    ),
    (
        "tree depth below formula depth",
        _with(lambda s: s.update(max_json_depth=50)),
        dict(_UFUNCS),
        r"max_json_depth \(50\) must be at least max_depth \(100\)",
    ),
    (
        "depth not an integer",
        _with(lambda s: s.update(max_depth=True)),
        dict(_UFUNCS),
        r"'max_depth' and 'max_json_depth' must be positive integers",
    ),
    (
        "constant not a number",
        _with(lambda s: s["constants"].update(pi="3.14")),
        dict(_UFUNCS),
        r"'constants' must be an object of name: finite number",
    ),
]


@pytest.mark.parametrize(
    ("data", "ufuncs", "pattern"),
    [case[1:] for case in SPEC_DRIFT],
    ids=[case[0] for case in SPEC_DRIFT],
)
def test_spec_and_implementations_that_disagree_are_refused(
    data: dict[str, Any], ufuncs: dict[str, np.ufunc], pattern: str
) -> None:
    with pytest.raises(RuntimeError, match=pattern):
        _read_spec(data, ufuncs)


# ---------------------------------------------------------------------------------------------
# Accepted constructs: the tree each one gives
# ---------------------------------------------------------------------------------------------

ACCEPTED: list[tuple[str, dict[str, Any]]] = [
    ("2.5", num(2.5)),
    ("7", num(7)),
    ("1_000", num(1000)),
    ("1e-3", num(0.001)),
    (".5", num(0.5)),
    ("x", name("x")),
    ("EC50", name("EC50")),
    ("pi", const("pi")),
    ("e", const("e")),
    ("-x", neg(name("x"))),
    ("+x", name("x")),
    ("--x", neg(neg(name("x")))),
    ("(x)", name("x")),
    ("((a))", name("a")),
    ("a + b", binop("+", name("a"), name("b"))),
    ("a - b", binop("-", name("a"), name("b"))),
    ("a * b", binop("*", name("a"), name("b"))),
    ("a / b", binop("/", name("a"), name("b"))),
    ("a ** b", binop("**", name("a"), name("b"))),
    *[(f"{fn}(x)", call(fn, name("x"))) for fn in FUNCTIONS],
    ("exp(-k*x)", call("exp", binop("*", neg(name("k")), name("x")))),
    # Precedence and associativity as Python's grammar defines them (Python language
    # reference, "Operator precedence"): ** is right-associative and binds tighter than a
    # unary minus on its left, but a unary minus on its right is part of the exponent.
    ("2**3**2", binop("**", num(2), binop("**", num(3), num(2)))),
    ("-x**2", neg(binop("**", name("x"), num(2)))),
    ("(-x)**2", binop("**", neg(name("x")), num(2))),
    ("2**-1", binop("**", num(2), neg(num(1)))),
    ("a-b-c", binop("-", binop("-", name("a"), name("b")), name("c"))),
    ("a/b/c", binop("/", binop("/", name("a"), name("b")), name("c"))),
    ("a+b*c", binop("+", name("a"), binop("*", name("b"), name("c")))),
    ("(a+b)*c", binop("*", binop("+", name("a"), name("b")), name("c"))),
    ("-a*b", binop("*", neg(name("a")), name("b"))),
    ("a*-b", binop("*", name("a"), neg(name("b")))),
]


@pytest.mark.parametrize(("text", "tree"), ACCEPTED, ids=[t for t, _ in ACCEPTED])
def test_accepted_constructs(text: str, tree: dict[str, Any]) -> None:
    expr = Expr.parse(text)
    assert expr.to_json() == tree
    assert isinstance(expr, Expr)
    assert expr.text == text


def test_numbers_are_floats_and_ints_convert() -> None:
    tree = Expr.parse("3").tree
    assert isinstance(tree, Num)
    assert type(tree.value) is float
    # Python ints would make 2**-1 an error in numpy ("Integers to negative integer powers").
    assert Expr.parse("2**-1").compile([])() == 0.5


def test_text_is_stripped_and_newlines_inside_parentheses_work() -> None:
    expr = Expr.parse("  (a\n  + b*x)\t\n")
    assert expr.text == "(a\n  + b*x)"
    assert expr.to_text() == "a + b * x"
    assert parse("a*x") == Expr.parse("a*x")
    assert str(parse(" a*x ")) == "a*x"


def test_node_objects_are_immutable() -> None:
    tree = Expr.parse("a + 1").tree
    assert tree == Bin("+", Name("a"), Num(1.0))
    with pytest.raises(AttributeError):
        tree.op = "-"  # type: ignore[misc]
    assert hash(Expr.parse("a+1").tree) == hash(Expr.parse("a + 1").tree)
    assert Expr.parse("exp(-pi)").tree == Call("exp", Neg(Const("pi")))


# ---------------------------------------------------------------------------------------------
# Rejected constructs, each with our own error and a message naming it
# ---------------------------------------------------------------------------------------------

REJECTED: list[tuple[str, str]] = [
    ("x.__class__", r"attribute access is not allowed: 'x\.__class__' \(at column 1\)"),
    ("a.b", r"attribute access is not allowed"),
    ("x[0]", r"subscripts .* not allowed: 'x\[0\]' \(at column 1\)"),
    ("lambda: 1", r"lambda expressions are not allowed"),
    ("[x for x in y]", r"list comprehensions are not allowed"),
    ("{x for x in y}", r"set comprehensions are not allowed"),
    ("{x: 1 for x in y}", r"dict comprehensions are not allowed"),
    ("exp(x for x in y)", r"generator expressions are not allowed: .* \(at column 4\)"),
    ("f(x=1)", r"unknown function 'f'"),
    ("exp(x=1)", r"keyword arguments are not allowed: 'x=\.\.\.' in exp\(\) \(at column 5\)"),
    ("exp(**k)", r"keyword arguments are not allowed"),
    ("exp(*x)", r"starred arguments are not allowed: '\*x' \(at column 5\)"),
    ("x < 1", r"comparisons .* not allowed"),
    ("x is 1", r"comparisons .* not allowed"),
    ("x and y", r"boolean operators \(and, or\) are not allowed"),
    ("x or y", r"boolean operators \(and, or\) are not allowed"),
    ("not x", r"the operator 'not' is not allowed"),
    ("~x", r"the operator '~' \(bitwise not\) is not allowed"),
    ("x if y else z", r"conditional expressions .* not allowed"),
    ("(y:=1)", r"assignment expressions \(:=\) are not allowed: 'y:=1' \(at column 2\)"),
    ("f'{x}'", r"f-strings are not allowed"),
    ('"a"', r"strings are not allowed: '\"a\"'"),
    ("b'a'", r"strings are not allowed"),
    ("a + 'b'", r"strings are not allowed: \"'b'\" \(at column 5\)"),
    ("1j", r"complex numbers are not allowed"),
    ("True", r"True is not allowed.*Use the numbers 1 and 0"),
    ("None", r"'None' is not allowed"),
    ("...", r"'\.\.\.' is not allowed"),
    ("[1, 2]", r"lists are not allowed"),
    ("(a, b)", r"tuples .* not allowed"),
    ("{1}", r"sets are not allowed"),
    ("{1: 2}", r"dicts are not allowed"),
    ("await x", r"await is not allowed"),
    ("__import__('os')", r"calling '__import__' is not allowed.*start with '_'"),
    ("__builtins__", r"name '__builtins__' is not allowed.*may not start with '_'"),
    ("_x + 1", r"name '_x' is not allowed \(at column 1\)"),
    ("x + __class__", r"name '__class__' is not allowed \(at column 5\)"),
    ("open('f')", r"unknown function 'open' \(at column 1\)"),
    ("expp(x)", r"unknown function 'expp'.*Did you mean 'exp'\?"),
    ("sine(x)", r"unknown function 'sine'.*Did you mean 'sin'"),
    ("ln(x)", r"unknown function 'ln'.*Use log \(the natural logarithm\)"),
    ("atan(x)", r"unknown function 'atan'.*Use arctan"),
    ("k(x + 1)", r"unknown function 'k'.*If you meant multiplication, write k\*\(\.\.\.\)"),
    ("pi(2)", r"'pi' is a constant, not a function"),
    ("2(x)", r"calling '2' is not allowed.*write the \* explicitly"),
    ("np.exp(x)", r"calling 'np\.exp' is not allowed.*without the 'np' prefix"),
    ("exp(x)(y)", r"calling 'exp\(x\)' is not allowed"),
    ("exp", r"name 'exp' is not allowed.*'exp' is a function; call it with one argument"),
    ("2 * log", r"'log' is a function"),
    ("exp(x, y)", r"exp\(\) takes exactly one argument, got 2"),
    ("sqrt()", r"sqrt\(\) takes exactly one argument, got 0"),
    ("x ^ 2", r"the operator '\^' is not allowed.*\(at column 3\)\. Use \*\* for powers"),
    ("x % 2", r"the operator '%' is not allowed"),
    ("x // 2", r"the operator '//' is not allowed"),
    ("x @ y", r"the operator '@' is not allowed"),
    ("x | y", r"the operator '\|' is not allowed"),
    ("x & y", r"the operator '&' is not allowed"),
    ("x << 1", r"the operator '<<' is not allowed"),
    ("x >> 1", r"the operator '>>' is not allowed"),
    ("1e999", r"the number '1e999' is too large for a double"),
    ("1" * 400, r"too large for a double"),
    ("\u03b1*x", r"name '\u03b1' is not allowed.*ASCII letters"),
    # Syntax errors: line/column and a caret under the spot.
    ("x +", r"syntax error: invalid syntax \(at column 4\)"),
    ("a*x +* 2", r"syntax error: invalid syntax \(at column 6\)"),
    ("(x", r"syntax error: '\(' was never closed \(at column 1\)"),
    ("2x", r"syntax error: invalid decimal literal.*2\*x rather than 2x"),
    ("y = a*x + b", r"syntax error.*\(at column 3\).*write only the right-hand side"),
    ("x \u2212 1", r"syntax error: invalid character .*Type '-' instead"),
    ("x\u00b2", r"Type '\*\*2' instead"),
    ("a\n + b", r"syntax error: unexpected indent \(at line 2, column 1\)"),
    ("a\n+ b", r"syntax error: invalid syntax \(at line 2, column 1\)"),
    ("\uff58 + 1", r"name '\uff58' is not allowed.*type 'x' instead"),
    ("\u212f ** x", r"name '\u212f' is not allowed.*type 'e' instead"),
    ("\uff45xp(x)", r"name '\uff45xp' is not allowed.*type 'exp' instead"),
    ("yield x", r"syntax error"),
    ("import os", r"syntax error"),
    ("x; y", r"syntax error"),
    ("(" * 250 + "x" + ")" * 250, r"syntax error: too many nested parentheses"),
    ("x\x00", r"NUL character"),
    ("", r"the formula is empty"),
    (" \n\t ", r"the formula is empty"),
]


@pytest.mark.parametrize(("text", "pattern"), REJECTED, ids=[repr(t[:30]) for t, _ in REJECTED])
def test_rejected_constructs(text: str, pattern: str) -> None:
    with pytest.raises(FormulaError, match=pattern):
        Expr.parse(text)


def test_error_messages_say_what_is_allowed_and_show_a_caret() -> None:
    with pytest.raises(FormulaError) as info:
        Expr.parse("a*x + b.c")
    message = str(info.value)
    assert "A formula may use numbers, names, the operators + - * / **" in message
    assert "exp, log, log10, sqrt, abs, sin, cos, tan, arctan, tanh" in message
    lines = message.split("\n")
    assert lines[1] == "    a*x + b.c"
    assert lines[2] == "          ^^^"  # under "b.c", which starts at column 7

    with pytest.raises(FormulaError) as info:
        Expr.parse("a*x +* 2")
    assert str(info.value).split("\n")[1:] == ["    a*x +* 2", "         ^"]


def test_long_line_snippet_keeps_the_caret_on_screen() -> None:
    text = "a + " * 60 + "x ^ 2"
    with pytest.raises(FormulaError, match=r"'\^' is not allowed") as info:
        Expr.parse(text)
    shown, caret = str(info.value).split("\n")[1:]
    assert len(shown) < 90
    assert shown[caret.index("^")] == "^"


def test_non_string_formula() -> None:
    with pytest.raises(FormulaError, match="a formula must be a string, got int"):
        Expr.parse(3)  # type: ignore[arg-type]


def test_length_limit() -> None:
    Expr.parse("a" * MAX_LENGTH)  # a long but legal name
    with pytest.raises(FormulaError, match=r"2001 characters long, more than the limit of 2000"):
        Expr.parse("a" * (MAX_LENGTH + 1))


def test_depth_limit() -> None:
    assert MAX_DEPTH == 100
    ok = Expr.parse("-" * (MAX_DEPTH - 1) + "x")  # 99 minus signs and x: 100 levels
    assert ok.names == ("x",)
    with pytest.raises(FormulaError, match=r"nested too deeply \(more than 100 levels\)"):
        Expr.parse("-" * MAX_DEPTH + "x")
    with pytest.raises(FormulaError, match="nested too deeply"):
        Expr.parse("x" + " + x" * 150)
    with pytest.raises(FormulaError, match="nested too deeply"):
        Expr.parse("exp(" * 120 + "x" + ")" * 120)
    with pytest.raises(FormulaError, match="nested too deeply"):
        Expr.parse("-" * 1990 + "x")
    # Parentheses alone add no level of the tree.
    assert Expr.parse("(" * 150 + "x" + ")" * 150).to_text() == "x"


# ---------------------------------------------------------------------------------------------
# Names
# ---------------------------------------------------------------------------------------------


@pytest.mark.parametrize(
    ("text", "names"),
    [
        ("baseline + amplitude*exp(-k*x)", ("baseline", "amplitude", "k", "x")),
        ("b*x + a*exp(-k*x) + b", ("b", "x", "a", "k")),
        ("a**b**c", ("a", "b", "c")),
        ("exp(k)*x", ("k", "x")),
        ("-(z - y) / x", ("z", "y", "x")),
        ("2*pi*e + log(2)", ()),
        ("full_effect + (zero_dose - full_effect)/(1 + 10**(n_h*(log10(x) - log_ec50)))", None),
    ],
)
def test_names_in_order_of_first_appearance(text: str, names: tuple[str, ...] | None) -> None:
    expr = Expr.parse(text)
    if names is None:
        names = ("full_effect", "zero_dose", "n_h", "x", "log_ec50")
    assert expr.names == names


def test_python_builtin_names_are_plain_variables() -> None:
    # A parameter may be called "print" or "open": it is a value, never looked up in builtins.
    expr = Expr.parse("print*x + open")
    assert expr.names == ("print", "x", "open")
    assert expr.compile(["x", "print", "open"])(2.0, 3.0, 1.0) == 7.0


# ---------------------------------------------------------------------------------------------
# JSON
# ---------------------------------------------------------------------------------------------


def test_json_round_trip_through_text() -> None:
    expr = Expr.parse(
        "full_effect + (zero_dose - full_effect)/(1 + 10**(n_h*(log10(x) - log_ec50)))"
    )
    wire = json.dumps(expr.to_json())
    back = Expr.from_json(json.loads(wire))
    assert back.tree == expr.tree
    assert back.names == expr.names
    assert back.text == (
        "full_effect + (zero_dose - full_effect) / (1 + 10 ** (n_h * (log10(x) - log_ec50)))"
    )
    assert back.to_json() == expr.to_json()


def test_json_format_matches_the_contract() -> None:
    # The node table of DEVELOPERS.md, written out by hand.
    assert Expr.parse("-2.5 * exp(k) ** pi").to_json() == {
        "type": "bin",
        "op": "*",
        "left": {"type": "neg", "arg": {"type": "num", "value": 2.5}},
        "right": {
            "type": "bin",
            "op": "**",
            "left": {"type": "call", "fn": "exp", "args": [{"type": "name", "id": "k"}]},
            "right": {"type": "const", "id": "pi"},
        },
    }


def test_from_json_accepts_integer_values() -> None:
    expr = Expr.from_json({"type": "num", "value": 3})
    assert expr.tree == Num(3.0)
    assert type(expr.to_json()["value"]) is float


def _deep_neg(levels: int) -> dict[str, Any]:
    node: dict[str, Any] = name("x")
    for _ in range(levels):
        node = neg(node)
    return node


BAD_JSON: list[tuple[object, str]] = [
    ("x", r"tree: expected a node object \(dict\), got str"),
    ({"type": "sym", "id": "x"}, r"tree: unknown node type 'sym'; expected one of num, name"),
    ({"id": "x"}, r"unknown node type None"),
    ({"type": "name"}, r"a 'name' node has exactly the fields id, type \(missing id\)"),
    ({"type": "name", "id": "x", "extra": 1}, r"\(unexpected 'extra'\)"),
    ({"type": "num", "value": "1"}, r"num value must be a number, got str"),
    ({"type": "num", "value": True}, r"num value must be a number, got bool"),
    ({"type": "num", "value": -1.0}, r"must be finite and not negative.*neg node"),
    ({"type": "num", "value": -0.0}, r"must be finite and not negative"),
    ({"type": "num", "value": math.nan}, r"must be finite"),
    ({"type": "num", "value": math.inf}, r"must be finite"),
    ({"type": "num", "value": 10**400}, r"must be finite"),
    ({"type": "name", "id": "__class__"}, r"tree: bad name id: names may not start with '_'"),
    ({"type": "name", "id": "a.b"}, r"bad name id: 'a\.b' is not a valid name"),
    ({"type": "name", "id": "lambda"}, r"Python keyword"),
    ({"type": "name", "id": "exp"}, r"'exp' is a function"),
    ({"type": "name", "id": "pi"}, r"'pi' is a built-in constant"),
    ({"type": "name", "id": 3}, r"a name must be a string"),
    ({"type": "const", "id": "tau"}, r"const id must be one of pi, e, got 'tau'"),
    (binop("%", name("a"), name("b")), r"tree: op must be one of \+ - \* / \*\*, got '%'"),
    (binop("+", name("a"), "b"), r"tree\.right: expected a node object"),
    (call("eval", name("x")), r"tree: fn must be one of exp, log.*got 'eval'"),
    ({"type": "call", "fn": "exp", "args": []}, r"args of exp must be a list of exactly one"),
    (
        {"type": "call", "fn": "exp", "args": [name("x"), name("y")]},
        r"exactly one node",
    ),
    ({"type": "call", "fn": "exp", "args": name("x")}, r"exactly one node"),
    (neg(call("exp", {"type": "bad"})), r"tree\.arg\.args\[0\]: unknown node type 'bad'"),
    (_deep_neg(MAX_JSON_DEPTH + 1), r"nested more than 400 levels deep"),
]


@pytest.mark.parametrize(("obj", "pattern"), BAD_JSON, ids=[p[:30] for _, p in BAD_JSON])
def test_from_json_rejects(obj: object, pattern: str) -> None:
    with pytest.raises(FormulaError, match=pattern):
        Expr.from_json(obj)  # type: ignore[arg-type]


def test_from_json_depth_limit_matches_the_front_end() -> None:
    # js/expr.ts counts the root as depth 0 and refuses depth > 400; so do we.
    assert Expr.from_json(_deep_neg(MAX_JSON_DEPTH)).names == ("x",)


# ---------------------------------------------------------------------------------------------
# Canonical text
# ---------------------------------------------------------------------------------------------


@pytest.mark.parametrize(
    ("text", "canonical"),
    [
        ("2**3**2", "2 ** 3 ** 2"),
        ("(2**3)**2", "(2 ** 3) ** 2"),
        ("-x**2", "-x ** 2"),
        ("(-x)**2", "(-x) ** 2"),
        ("a-b-c", "a - b - c"),
        ("a-(b-c)", "a - (b - c)"),
        ("a-(b+c)", "a - (b + c)"),
        ("(a+b)+c", "a + b + c"),
        ("a+(b+c)", "a + (b + c)"),
        ("a/b/c", "a / b / c"),
        ("a/(b*c)", "a / (b * c)"),
        ("(a*b)/c", "a * b / c"),
        ("a**-b", "a ** -b"),
        ("a**(-b)**c", "a ** (-b) ** c"),
        ("a**-b**c", "a ** -b ** c"),
        ("-a*b", "-a * b"),
        ("-(a*b)", "-(a * b)"),
        ("--x", "-(-x)"),
        ("x*-1", "x * -1"),
        ("-(x+1)", "-(x + 1)"),
        ("(-(x))", "-x"),
        ("exp((x))", "exp(x)"),
        ("1e-5*x+2.5e2", "1e-05 * x + 250"),
        ("1e16 + 123456789012345.0", "1e+16 + 123456789012345"),
        ("0.1", "0.1"),
        ("+x", "x"),
    ],
)
def test_to_text_is_canonical_with_minimal_parentheses(text: str, canonical: str) -> None:
    expr = Expr.parse(text)
    assert expr.to_text() == canonical
    assert Expr.parse(canonical).tree == expr.tree


# ---------------------------------------------------------------------------------------------
# compile and evaluate against numpy written by hand
# ---------------------------------------------------------------------------------------------

X = np.linspace(-2.0, 5.0, 29)
XPOS = np.geomspace(1e-8, 1e-2, 25)


def _reference_cases() -> list[tuple[str, dict[str, float], np.ndarray, np.ndarray]]:
    # Each expected array is numpy itself, with the operations spelled out in the same order.
    with np.errstate(all="ignore"):
        return [
            (
                "baseline + amplitude*exp(-k*x)",
                {"baseline": 2.0, "amplitude": 10.0, "k": 0.35},
                X,
                2.0 + 10.0 * np.exp(-0.35 * X),
            ),
            (
                "Vmax*x/(Km + x)",
                {"Vmax": 12.0, "Km": 0.8},
                X,
                12.0 * X / (0.8 + X),
            ),
            (
                "full_effect + (zero_dose - full_effect)/(1 + 10**(n_h*(log10(x) - log_ec50)))",
                {"zero_dose": 5.0, "full_effect": 95.0, "log_ec50": -6.0, "n_h": 1.2},
                XPOS,
                95.0 + (5.0 - 95.0) / (1.0 + np.power(10.0, 1.2 * (np.log10(XPOS) - -6.0))),
            ),
            (
                "base + amp*exp(-0.5*((x - mu)/sigma)**2)",
                {"base": 0.1, "amp": 3.0, "mu": 1.0, "sigma": 0.4},
                X,
                0.1 + 3.0 * np.exp(-0.5 * np.power((X - 1.0) / 0.4, 2.0)),
            ),
            (
                "sqrt(abs(x))*sin(x) - cos(x)/tan(x) + arctan(x)*tanh(x) + log(abs(x))",
                {},
                X,
                np.sqrt(np.abs(X)) * np.sin(X)
                - np.cos(X) / np.tan(X)
                + np.arctan(X) * np.tanh(X)
                + np.log(np.abs(X)),
            ),
            ("x**2.5 + 2*pi*e", {}, X, np.power(X, 2.5) + 2.0 * np.pi * np.e),
            ("-x**2", {}, X, -(X**2)),
            ("2**3**x", {}, X, np.power(2.0, np.power(3.0, X))),
            ("a - x - a/x/a", {"a": 3.0}, X, 3.0 - X - 3.0 / X / 3.0),
        ]


@pytest.mark.parametrize("case", range(len(_reference_cases())))
def test_compile_and_evaluate_match_numpy(case: int) -> None:
    text, env, x, expected = _reference_cases()[case]
    expr = Expr.parse(text)
    f = expr.compile(["x", *env])
    got = f(x, *env.values())
    np.testing.assert_array_equal(got, expected)
    np.testing.assert_array_equal(expr.evaluate({"x": x, **env}), expected)


def test_compile_is_vectorised_and_broadcasts() -> None:
    f = Expr.parse("a*x + b").compile(["x", "a", "b"])
    y = f(np.arange(6.0).reshape(2, 3), np.array([[1.0], [2.0]]), 0.5)
    assert isinstance(y, np.ndarray)
    np.testing.assert_array_equal(y, np.arange(6.0).reshape(2, 3) * np.array([[1.0], [2.0]]) + 0.5)
    scalar = f(2.0, 3.0, 1.0)
    assert isinstance(scalar, float)
    assert scalar == 7.0
    # Integer and list inputs are converted to float64 first.
    np.testing.assert_array_equal(f([1, 2, 3], 2, 1), [3.0, 5.0, 7.0])
    np.testing.assert_array_equal(
        Expr.parse("x**-1").compile(["x"])(np.array([1, 2, 4])), [1.0, 0.5, 0.25]
    )


def test_compile_argument_order_and_extra_arguments() -> None:
    f = Expr.parse("a - b").compile(["b", "unused", "a"])
    assert f(1.0, 100.0, 5.0) == 4.0
    assert Expr.parse("7").compile(["x"])(np.zeros(3)) == 7.0  # a constant stays a scalar


def test_compiled_bare_name_returns_a_copy() -> None:
    x = np.array([1.0, 2.0])
    for y in (Expr.parse("x").compile(["x"])(x), Expr.parse("x").evaluate({"x": x})):
        assert isinstance(y, np.ndarray)
        y[0] = 99.0
        assert x[0] == 1.0


def test_non_finite_results_come_back_silently() -> None:
    f = Expr.parse("log(x) + 1/x + sqrt(x)").compile(["x"])
    before = np.geterr()
    with warnings.catch_warnings():
        warnings.simplefilter("error")  # a RuntimeWarning would fail here
        y = f(np.array([-1.0, 0.0, 1.0]))
        y0 = Expr.parse("1/x").evaluate({"x": 0.0})
    assert np.geterr() == before
    assert np.isnan(y[0])  # log(-1) and sqrt(-1) are NaN
    assert np.isnan(y[1])  # log(0) + 1/0 = -inf + inf
    assert y[2] == 2.0
    assert y0 == np.inf


def test_compile_errors() -> None:
    expr = Expr.parse("baseline + amplitude*exp(-k*x)")
    with pytest.raises(FormulaError, match=r"uses amplitude, k, which are not among the arguments"):
        expr.compile(["x", "baseline"])
    with pytest.raises(FormulaError, match=r"uses k, which is not among the arguments \(x, "):
        expr.compile(["x", "baseline", "amplitude"])
    with pytest.raises(FormulaError, match=r"not the string 'x'; write \['x'\]"):
        Expr.parse("x").compile("x")
    with pytest.raises(FormulaError, match=r"argument names must be distinct; repeated: x"):
        Expr.parse("x").compile(["x", "x"])
    with pytest.raises(FormulaError, match=r"cannot use '__x' as an argument name"):
        Expr.parse("x").compile(["x", "__x"])
    with pytest.raises(FormulaError, match=r"cannot use 'x y' as an argument name"):
        Expr.parse("x").compile(["x", "x y"])
    with pytest.raises(FormulaError, match=r"cannot use 'def' as an argument name.*keyword"):
        Expr.parse("x").compile(["x", "def"])
    f = Expr.parse("2*x").compile(["x"])
    with pytest.raises(FormulaError, match=r"the value of 'x' must be real numbers.*dtype <U1"):
        f(["a"])
    with pytest.raises(FormulaError, match=r"the value of 'x' must be real numbers.*complex"):
        f(np.array([1j]))
    with pytest.raises(FormulaError, match=r"the value of 'x' must be real numbers.*object"):
        f(np.array([object()]))


def test_evaluate_errors() -> None:
    expr = Expr.parse("a*x")
    with pytest.raises(FormulaError, match=r"no value for a; the formula 'a\*x' needs a, x"):
        expr.evaluate({"x": 1.0})
    with pytest.raises(FormulaError, match=r"env must be a mapping"):
        expr.evaluate([1.0, 2.0])  # type: ignore[arg-type]
    with pytest.raises(FormulaError, match=r"the value of 'a' must be"):
        expr.evaluate({"a": "one", "x": 1.0})  # type: ignore[dict-item]


def test_generated_code_sees_no_builtins() -> None:
    f = Expr.parse("exp(-k*x)").compile(["x", "k"])
    namespace: dict[str, Any] = f.__globals__  # type: ignore[attr-defined]
    assert namespace["__builtins__"] == {}
    assert {k for k in namespace if not k.startswith("_")} == set()


# ---------------------------------------------------------------------------------------------
# substitute
# ---------------------------------------------------------------------------------------------


def test_substitute_a_rate_constant_by_a_half_life() -> None:
    # k = ln 2 / t_half (common practice: first-order half-life).
    expr = Expr.parse("baseline + amplitude*exp(-k*x)").substitute({"k": parse("log(2)/t_half")})
    assert expr.names == ("baseline", "amplitude", "t_half", "x")
    assert expr.text == "baseline + amplitude * exp(-(log(2) / t_half) * x)"
    got = expr.evaluate({"baseline": 1.0, "amplitude": 4.0, "t_half": 3.0, "x": X})
    np.testing.assert_allclose(got, 1.0 + 4.0 * np.exp(-np.log(2.0) / 3.0 * X), rtol=1e-15)


def test_substitute_keeps_precedence_and_swaps_simultaneously() -> None:
    assert Expr.parse("a*b").substitute({"a": parse("c+d")}).text == "(c + d) * b"
    assert Expr.parse("a**2").substitute({"a": parse("-c")}).text == "(-c) ** 2"
    assert Expr.parse("a - b").substitute({"a": parse("b"), "b": parse("a")}).text == "b - a"
    assert Expr.parse("a").substitute({"zzz": parse("1")}).text == "a"


def test_substitute_errors() -> None:
    with pytest.raises(FormulaError, match=r"replacement for 'a' must be an Expr, got str"):
        Expr.parse("a").substitute({"a": "b"})  # type: ignore[dict-item]
    with pytest.raises(FormulaError, match=r"cannot substitute for 'pi'"):
        Expr.parse("a").substitute({"pi": parse("3")})
    with pytest.raises(FormulaError, match=r"needs a mapping"):
        Expr.parse("a").substitute([("a", parse("b"))])  # type: ignore[arg-type]


# ---------------------------------------------------------------------------------------------
# Derivatives
# ---------------------------------------------------------------------------------------------


def _central_difference(expr: Expr, env: dict[str, float], var: str, step: float = 1e-6) -> float:
    # Five-point central difference, error O(h**4) (Abramowitz & Stegun 25.3.6). The step is
    # relative to the value so that small values (x = 2e-6 M) are not stepped across.
    h = step * (abs(env[var]) or 1.0)

    def at(offset: float) -> float:
        return float(expr.evaluate({**env, var: env[var] + offset}))

    return (-at(2 * h) + 8 * at(h) - 8 * at(-h) + at(-2 * h)) / (12 * h)


FD_CASES: list[tuple[str, dict[str, float]]] = [
    ("baseline + amplitude*exp(-k*x)", {"baseline": 2.0, "amplitude": 10.0, "k": 0.35, "x": 1.7}),
    ("Vmax*x/(Km + x)", {"Vmax": 12.0, "Km": 0.8, "x": 2.5}),
    ("Vmax*x**n/(K**n + x**n)", {"Vmax": 1.0, "K": 2.0, "n": 2.3, "x": 1.5}),
    (
        "full_effect + (zero_dose - full_effect)/(1 + 10**(n_h*(log10(x) - log_ec50)))",
        {"zero_dose": 5.0, "full_effect": 95.0, "log_ec50": -6.0, "n_h": 1.2, "x": 2e-6},
    ),
    (
        "base + amp*exp(-0.5*((x - mu)/sigma)**2)",
        {"base": 0.1, "amp": 3.0, "mu": 1.0, "sigma": 0.4, "x": 1.3},
    ),
    ("K/(1 + ((K - N0)/N0)*exp(-r*x))", {"K": 1000.0, "N0": 10.0, "r": 0.7, "x": 4.0}),
    ("a*exp(-b*exp(-c*x))", {"a": 5.0, "b": 3.0, "c": 0.4, "x": 2.0}),
    ("sqrt(x)*sin(a*x) + cos(x)/tan(x) - arctan(a/x)", {"a": 0.7, "x": 1.1}),
    ("tanh(a*x) + abs(x - a) + log(x*a)", {"a": 0.7, "x": 1.9}),
    ("x**x + 2**(a*x) + x**-a", {"a": 1.3, "x": 1.2}),
    ("-(a - x)**3 / (e + pi*x)", {"a": 0.5, "x": 0.9}),
]


@pytest.mark.parametrize(("text", "env"), FD_CASES, ids=[t[:30] for t, _ in FD_CASES])
def test_derivative_matches_finite_differences(text: str, env: dict[str, float]) -> None:
    expr = Expr.parse(text)
    for var in expr.names:
        exact = float(expr.derivative(var).evaluate(env))
        numeric = _central_difference(expr, env, var)
        assert exact == pytest.approx(numeric, rel=1e-7, abs=1e-9), var


def test_derivatives_worked_by_hand() -> None:
    # Each expected value is the derivative worked out by hand and written in numpy.
    x = np.linspace(0.1, 4.0, 11)

    # d/dk [baseline + amplitude*exp(-k*x)] = -amplitude*x*exp(-k*x)
    decay = Expr.parse("baseline + amplitude*exp(-k*x)")
    got = decay.derivative("k").evaluate({"baseline": 2.0, "amplitude": 10.0, "k": 0.35, "x": x})
    np.testing.assert_allclose(got, -10.0 * x * np.exp(-0.35 * x), rtol=1e-14)

    # d/dKm [Vmax*x/(Km + x)] = -Vmax*x/(Km + x)**2 ; d/dVmax = x/(Km + x)
    mm = Expr.parse("Vmax*x/(Km + x)")
    env = {"Vmax": 12.0, "Km": 0.8, "x": x}
    np.testing.assert_allclose(mm.derivative("Km").evaluate(env), -12.0 * x / (0.8 + x) ** 2)
    np.testing.assert_allclose(mm.derivative("Vmax").evaluate(env), x / (0.8 + x), rtol=1e-15)

    # 4PL: with u = 10**(h*(log10 x - L)), dy/dL = (zd - fe)*u*ln(10)*h/(1 + u)**2
    fpl = Expr.parse("fe + (zd - fe)/(1 + 10**(h*(log10(x) - L)))")
    dose = np.geomspace(1e-8, 1e-4, 9)
    u = 10.0 ** (1.2 * (np.log10(dose) + 6.0))
    got = fpl.derivative("L").evaluate({"zd": 5.0, "fe": 95.0, "L": -6.0, "h": 1.2, "x": dose})
    np.testing.assert_allclose(got, -90.0 * u * np.log(10.0) * 1.2 / (1.0 + u) ** 2, rtol=1e-13)

    # The elementary derivatives.
    table: list[tuple[str, Callable[[np.ndarray], np.ndarray]]] = [
        ("exp(x)", np.exp),
        ("log(x)", lambda t: 1.0 / t),
        ("log10(x)", lambda t: 1.0 / (t * np.log(10.0))),
        ("sqrt(x)", lambda t: 0.5 / np.sqrt(t)),
        ("abs(x - 2)", lambda t: np.sign(t - 2.0)),
        ("sin(x)", np.cos),
        ("cos(x)", lambda t: -np.sin(t)),
        ("tan(x)", lambda t: 1.0 / np.cos(t) ** 2),
        ("arctan(x)", lambda t: 1.0 / (1.0 + t**2)),
        ("tanh(x)", lambda t: 1.0 - np.tanh(t) ** 2),
        ("x**x", lambda t: t**t * (np.log(t) + 1.0)),
        ("2**x", lambda t: 2.0**t * np.log(2.0)),
        ("x**3", lambda t: 3.0 * t**2),
        ("1/x", lambda t: -1.0 / t**2),
    ]
    for text, derivative in table:
        got = Expr.parse(text).derivative("x").evaluate({"x": x})
        np.testing.assert_allclose(got, derivative(x), rtol=1e-14, err_msg=text)


@pytest.mark.parametrize(
    ("text", "var", "expected"),
    [
        ("a*x + b", "b", "1"),
        ("a*x + b", "a", "x"),
        ("a*x + b", "x", "a"),
        ("a*x + b", "k", "0"),
        ("x**3", "x", "3 * x ** 2"),
        ("x**2", "x", "2 * x"),
        ("x**-1", "x", "-x ** -2"),
        ("exp(-k*x)", "k", "-(exp(-k * x) * x)"),
        ("log(2)/k", "k", "-(log(2) / k ** 2)"),
        ("-x", "x", "-1"),
        ("5 - x", "x", "-1"),
        ("sin(a)", "x", "0"),
        ("2**x", "x", "2 ** x * log(2)"),
    ],
)
def test_derivative_simplification(text: str, var: str, expected: str) -> None:
    got = Expr.parse(text).derivative(var)
    assert got.text == expected
    assert Expr.parse(got.text).tree == got.tree


def test_derivative_errors() -> None:
    with pytest.raises(FormulaError, match=r"cannot differentiate with respect to 'pi'"):
        Expr.parse("pi*x").derivative("pi")
    with pytest.raises(FormulaError, match=r"cannot differentiate with respect to '_x'"):
        Expr.parse("x").derivative("_x")


# ---------------------------------------------------------------------------------------------
# Parity vectors for js/expr.ts
# ---------------------------------------------------------------------------------------------


def _generator() -> ModuleType:
    spec = importlib.util.spec_from_file_location("gen_expr_vectors", GENERATOR)
    assert spec is not None and spec.loader is not None
    module = importlib.util.module_from_spec(spec)
    spec.loader.exec_module(module)
    return module


def _decode(value: float | str) -> float:
    return (
        {"NaN": math.nan, "Infinity": math.inf, "-Infinity": -math.inf}[value]
        if isinstance(value, str)
        else float(value)
    )


def test_committed_vectors_are_what_the_generator_makes() -> None:
    committed = json.loads(VECTORS.read_text(encoding="utf-8"))
    fresh = json.loads(_generator().render())
    assert committed["about"] == fresh["about"]
    assert len(committed["cases"]) == len(fresh["cases"])
    for old, new in zip(committed["cases"], fresh["cases"], strict=True):
        for key in ("id", "formula", "tree", "names", "env", "x"):
            assert old[key] == new[key], (old["id"], key)
        a = np.array([_decode(v) for v in old["y"]])
        b = np.array([_decode(v) for v in new["y"]])
        # Exact on NaN/infinity/sign of zero; finite values to a few ulp, because numpy's
        # exp/log/pow kernels differ in the last bit between CPUs (SIMD paths).
        np.testing.assert_array_equal(np.isnan(a), np.isnan(b), err_msg=old["id"])
        np.testing.assert_array_equal(np.signbit(a), np.signbit(b), err_msg=old["id"])
        np.testing.assert_allclose(a, b, rtol=1e-14, atol=0, err_msg=old["id"])


def test_vectors_cover_every_node_type_and_function() -> None:
    data = json.loads(VECTORS.read_text(encoding="utf-8"), parse_constant=_no_constant)
    assert len(data["cases"]) >= 40
    types: set[str] = set()
    fns: set[str] = set()
    consts: set[str] = set()
    ops: set[str] = set()
    for case in data["cases"]:
        expr = Expr.from_json(case["tree"])
        assert expr.tree == Expr.parse(case["formula"]).tree
        assert list(expr.names) == case["names"]
        assert len(case["x"]) == len(case["y"])
        assert set(expr.names) <= {"x", *case["env"]}
        for node in _nodes(case["tree"]):
            types.add(node["type"])
            fns.update([node["fn"]] if node["type"] == "call" else [])
            consts.update([node["id"]] if node["type"] == "const" else [])
            ops.update([node["op"]] if node["type"] == "bin" else [])
    assert types == {"num", "name", "const", "neg", "bin", "call"}
    assert fns == set(FUNCTIONS)
    assert consts == set(CONSTANTS)
    assert ops == {"+", "-", "*", "/", "**"}


def test_vectors_hold_values_numpy_gives_by_hand() -> None:
    # Spot checks against numpy written out, independent of curvewright.expr.
    data = json.loads(VECTORS.read_text(encoding="utf-8"))
    cases = {c["id"]: c for c in data["cases"]}
    assert cases["pow_right_assoc"]["y"] == [512.0]
    assert cases["pow_half_scalar_exponent"]["y"][:3] == ["NaN", "NaN", -0.0]
    assert cases["pow_half_array_exponent"]["y"][:3] == ["Infinity", "NaN", 0.0]
    assert cases["pow_base_one"]["y"] == [1.0] * 5
    assert cases["div_by_zero"]["y"][:2] == ["-Infinity", "Infinity"]
    x = np.array([_decode(v) for v in cases["dose_response_4pl"]["x"]])
    with np.errstate(all="ignore"):
        expected = 95.0 + (5.0 - 95.0) / (1.0 + np.power(x / np.power(10.0, -6.0), 1.2))
    np.testing.assert_allclose(cases["dose_response_4pl"]["y"], expected, rtol=1e-14)


def _no_constant(token: str) -> float:
    raise AssertionError(f"non-standard JSON constant {token} in the vector file")


def _nodes(tree: dict[str, Any]) -> Iterator[dict[str, Any]]:
    yield tree
    for key in ("arg", "left", "right"):
        if key in tree:
            yield from _nodes(tree[key])
    for child in tree.get("args", []):
        yield from _nodes(child)


# ---------------------------------------------------------------------------------------------
# Property tests
# ---------------------------------------------------------------------------------------------

NAMES = ["x", "a", "b", "k", "EC50"]

numbers = st.one_of(
    st.sampled_from([0.0, 0.5, 1.0, 2.0, 10.0, 1e-300, 5e-324, 1e16, 1.5e16, 2.0**53 + 2]),
    st.integers(min_value=0, max_value=10**6).map(float),
    st.floats(min_value=0.0, max_value=1e300, allow_nan=False, allow_infinity=False),
).filter(lambda v: math.copysign(1.0, v) > 0)

leaves = st.one_of(
    numbers.map(num),
    st.sampled_from(NAMES).map(name),
    st.sampled_from(sorted(CONSTANTS)).map(const),
)


def _extend(children: st.SearchStrategy[dict[str, Any]]) -> st.SearchStrategy[dict[str, Any]]:
    return st.one_of(
        children.map(neg),
        st.builds(binop, st.sampled_from(["+", "-", "*", "/", "**"]), children, children),
        st.builds(call, st.sampled_from(sorted(FUNCTIONS)), children),
    )


trees = st.recursive(leaves, _extend, max_leaves=24)


def _depth(tree: dict[str, Any]) -> int:
    kids = [tree[k] for k in ("arg", "left", "right") if k in tree] + list(tree.get("args", []))
    return 1 + max((_depth(k) for k in kids), default=0)


@given(trees)
def test_random_trees_round_trip_through_text_and_json(obj: dict[str, Any]) -> None:
    assume(_depth(obj) <= MAX_DEPTH)
    expr = Expr.from_json(obj)
    assert expr.to_json() == obj
    again = Expr.parse(expr.to_text())  # Python's own parser is the judge of precedence
    assert again.tree == expr.tree
    assert again.names == expr.names
    assert Expr.from_json(json.loads(json.dumps(again.to_json()))).tree == expr.tree


finite_or_not = st.one_of(
    st.floats(allow_nan=True, allow_infinity=True),
    st.sampled_from([0.0, -0.0, 1.0, -1.0, 0.5, 2.0, -2.0]),
)


def _same_values(a: Any, b: Any) -> bool:
    a, b = np.asarray(a, dtype=np.float64), np.asarray(b, dtype=np.float64)
    if a.shape != b.shape:
        return False
    nan = np.isnan(a)
    return bool(
        np.array_equal(nan, np.isnan(b))
        and np.array_equal(a[~nan].view(np.int64), b[~nan].view(np.int64))
    )


@given(
    trees,
    st.lists(finite_or_not, min_size=1, max_size=6),
    st.lists(finite_or_not, min_size=len(NAMES) - 1, max_size=len(NAMES) - 1),
)
def test_compile_agrees_with_evaluate(
    obj: dict[str, Any], xs: list[float], params: list[float]
) -> None:
    expr = Expr.from_json(obj)
    env: dict[str, Any] = {"x": np.array(xs), **dict(zip(NAMES[1:], params, strict=True))}
    compiled = expr.compile(NAMES)(*env.values())
    assert _same_values(compiled, expr.evaluate(env))
    for var in ("x", "k"):
        d = expr.derivative(var)
        assert _same_values(d.compile(NAMES)(*env.values()), d.evaluate(env))
        if var not in expr.names:
            assert d.text == "0"


@contextlib.contextmanager
def _tripwire(calls: list[str]) -> Iterator[None]:
    """Record every import, open, eval, exec and non-AST compile while the block runs."""
    saved = {n: getattr(builtins, n) for n in ("__import__", "open", "eval", "exec", "compile")}

    def recorder(label: str) -> Callable[..., Any]:
        real = saved[label]

        def wrapper(*args: Any, **kwargs: Any) -> Any:
            # CPython's parser itself imports unicodedata to NFKC-normalise non-ASCII
            # identifiers (PEP 3131); that is the parser at work, not the formula running.
            if not (label == "__import__" and args[:1] == ("unicodedata",)):
                calls.append(label)
            return real(*args, **kwargs)

        return wrapper

    def guarded_compile(
        source: Any, filename: Any, mode: Any, flags: int = 0, *a: Any, **k: Any
    ) -> Any:
        # ast.parse is compile(..., flags=PyCF_ONLY_AST): that builds a tree and runs nothing.
        if not flags & ast.PyCF_ONLY_AST:
            calls.append("compile")
        return saved["compile"](source, filename, mode, flags, *a, **k)

    def sentinel(*args: Any, **kwargs: Any) -> None:
        calls.append("cw_sentinel")

    for label in ("__import__", "open", "eval", "exec"):
        setattr(builtins, label, recorder(label))
    builtins.compile = guarded_compile
    builtins.cw_sentinel = sentinel  # type: ignore[attr-defined]
    try:
        yield
    finally:
        for label, value in saved.items():
            setattr(builtins, label, value)
        del builtins.cw_sentinel  # type: ignore[attr-defined]


def _parse_safely(text: str) -> Expr | None:
    """Parse under the tripwire; return None for a FormulaError. Any other exception escapes."""
    calls: list[str] = []
    try:
        with _tripwire(calls):
            try:
                return Expr.parse(text)
            except FormulaError as exc:
                assert str(exc)
                return None
    finally:
        assert calls == [], f"parsing {text!r} ran {calls}"


FORBIDDEN_SNIPPETS = [
    "__import__('os')",
    "__import__('os').system('echo pwned')",
    "().__class__.__bases__[0].__subclasses__()",
    "x.__class__",
    "[x for x in y]",
    "lambda: 1",
    "open('f')",
    "open('/etc/passwd').read()",
    "eval('1')",
    "exec('x = 1')",
    "compile('1', 'f', 'eval')",
    "globals()",
    "getattr(x, 'y')",
    "breakpoint()",
    "cw_sentinel()",
    "exp(cw_sentinel())",
    "f(x=1)",
    "x[0]",
    '"a"',
    "x if y else z",
    "(y:=1)",
    "exp(x, y)",
    "exp(x)(y)",
    "exp(*x)",
    "exp(**k)",
    "np.exp(x)",
    "x ^ 2",
    "x // 2",
    "x < y",
    "not x",
    "x and y",
    "f'{cw_sentinel()}'",
    "__builtins__",
    "_x",
    "exp",
    "pi(1)",
    "2(x)",
    "await x",
    "yield x",
    "1j",
    "True",
    "None",
    "...",
    "{}",
    "(1, 2)",
    "x = 1",
    "x; cw_sentinel()",
    "import os",
]

TEMPLATES = ["{}", "x + {}", "exp({})", "2 * ({}) ** 2", "a*x + b - {}", "-{}"]


@pytest.mark.parametrize("snippet", FORBIDDEN_SNIPPETS)
@pytest.mark.parametrize("template", TEMPLATES)
def test_forbidden_snippets_raise_and_run_nothing(template: str, snippet: str) -> None:
    assert _parse_safely(template.format(snippet)) is None


def test_tripwire_notices_evaluation() -> None:
    # The sentinel does fire when something really is evaluated, so silence above means a lot.
    calls: list[str] = []
    with _tripwire(calls):
        builtins.eval("cw_sentinel()")
    assert calls == ["eval", "cw_sentinel"]


def test_a_sentinel_name_is_only_a_variable() -> None:
    expr = _parse_safely("cw_sentinel * x")
    assert expr is not None
    assert expr.names == ("cw_sentinel", "x")


TOKENS = [
    *"xyzk0123456789.+-*/()[]{}'\",:;=<>!@#$%^&|~_ \n\t\\",
    "**",
    "exp",
    "log10",
    "pi",
    "e",
    "lambda",
    "for",
    "in",
    "if",
    "else",
    "not",
    "and",
    "__import__",
    "__class__",
    "open",
    "cw_sentinel",
    "1e999",
    "1j",
    "x.",
    ":=",
    "f'",
    "\u03b1",
    "\u2212",
    "\x00",
]


@settings(suppress_health_check=[HealthCheck.too_slow])
@given(st.one_of(st.text(max_size=60), st.lists(st.sampled_from(TOKENS), max_size=30).map("".join)))
def test_random_text_gives_an_expr_or_our_error(text: str) -> None:
    expr = _parse_safely(text)
    if expr is not None:
        assert Expr.parse(expr.to_text()).tree == expr.tree


@given(
    st.lists(st.sampled_from([*FORBIDDEN_SNIPPETS, "x", "a*x", "exp(k)"]), min_size=1, max_size=4)
)
def test_combinations_of_snippets_are_safe(parts: list[str]) -> None:
    text = " + ".join(parts)
    expr = _parse_safely(text)
    if any(p in FORBIDDEN_SNIPPETS for p in parts):
        assert expr is None


# ------------------------------------------------------------------------------ compile_many
def test_compile_many_gives_each_formulas_own_numbers() -> None:
    # One generated function for a formula and all its derivatives must give, bit for bit, what
    # compiling each alone gives: the same ufuncs run on the same inputs, only shared.
    from curvewright.expr import compile_many

    data = json.loads(VECTORS.read_text(encoding="utf-8"))
    for case in data["cases"]:
        e = Expr.parse(case["formula"])
        names = ["x", *sorted(case["env"])]
        family = [e, *(e.derivative(n) for n in names)]
        x = np.array([_decode(v) for v in case["x"]])
        args = [x, *(case["env"][n] for n in names[1:])]
        joint = compile_many(family, names)(*args)
        assert len(joint) == len(family)
        for got, f in zip(joint, family, strict=True):
            want = f.compile(names)(*args)
            np.testing.assert_array_equal(got, want, err_msg=f"{case['id']}: {f.text}")
            assert isinstance(got, np.ndarray) == isinstance(want, np.ndarray), case["id"]


def test_compile_many_checks_arguments_like_compile() -> None:
    from curvewright.expr import compile_many

    with pytest.raises(FormulaError, match=r"uses k, which is not among the arguments"):
        compile_many([Expr.parse("a*x"), Expr.parse("exp(-k*x)")], ["x", "a"])
    bare = compile_many([Expr.parse("x"), Expr.parse("2*x")], ["x"])
    x = np.array([1.0, 2.0])
    first, _ = bare(x)
    first[0] = 99.0  # a bare name is a copy, never the caller's array
    assert x[0] == 1.0
