"""The safe expression language of model formulas: parse, JSON tree, canonical text, numpy code.

A formula is parsed with Python's ``ast`` under a whitelist and never evaluated while parsing.
The tree is made of small immutable node objects that serialise to the JSON contract of
DEVELOPERS.md ("The expression tree"), which ``js/expr.ts`` evaluates for live preview.
The function whitelist, the constants and the depth limits are read from ``expr_spec.json``
beside this module, the one file both sides take them from (esbuild bundles it into js/expr.ts).

Numeric semantics are numpy's on float64: ``**`` is ``numpy.power`` (including numpy's fast paths
for a scalar exponent of 2, 0.5 and -1), division is true division, and every operation runs under
``numpy.errstate(all="ignore")`` so that callers decide what to do with NaN and infinities.
"""

from __future__ import annotations

import ast
import builtins
import difflib
import functools
import importlib.resources
import json
import keyword
import math
import re
import warnings
from collections.abc import Callable, Iterator, Mapping, Sequence
from dataclasses import dataclass
from types import MappingProxyType
from typing import Any, Final, NamedTuple, TypeAlias

import numpy as np
from numpy.typing import NDArray

from curvewright.errors import FormulaError

__all__ = [
    "CONSTANTS",
    "FUNCTIONS",
    "MAX_DEPTH",
    "MAX_JSON_DEPTH",
    "MAX_LENGTH",
    "Bin",
    "Call",
    "Const",
    "Expr",
    "Name",
    "Neg",
    "Node",
    "Num",
    "compile_many",
    "parse",
]

FloatArray: TypeAlias = NDArray[np.float64]

#: numpy's implementation of each function; which functions a formula may call is decided by
#: expr_spec.json, and loading fails when the two name different functions.
_UFUNCS: Final[Mapping[str, np.ufunc]] = MappingProxyType(
    {
        "exp": np.exp,
        "log": np.log,
        "log10": np.log10,
        "sqrt": np.sqrt,
        "abs": np.absolute,
        "sin": np.sin,
        "cos": np.cos,
        "tan": np.tan,
        "arctan": np.arctan,
        "tanh": np.tanh,
    }
)

_SPEC_FILE: Final = "expr_spec.json"


class _Spec(NamedTuple):
    functions: Mapping[str, np.ufunc]
    constants: Mapping[str, float]
    max_depth: int
    max_json_depth: int


def _read_spec(data: object, ufuncs: Mapping[str, np.ufunc]) -> _Spec:
    """The tables of a parsed expr_spec.json, checked against the numpy implementations.

    A mismatch is a fault of the package, not of a user's input, so it is a RuntimeError
    raised at import time rather than a wrong whitelist discovered later.
    """
    where = f"curvewright/{_SPEC_FILE}"
    if not isinstance(data, dict):
        raise RuntimeError(f"{where} must hold a JSON object, got {type(data).__name__}.")
    functions = data.get("functions")
    if not isinstance(functions, dict) or not functions:
        raise RuntimeError(f"{where}: 'functions' must be a non-empty object of name: meaning.")
    missing = [name for name in functions if name not in ufuncs]
    if missing:
        raise RuntimeError(
            f"{where} lists functions with no numpy implementation in expr.py: "
            f"{', '.join(missing)}; add them to expr._UFUNCS (and js/expr.ts) or drop them."
        )
    unlisted = [name for name in ufuncs if name not in functions]
    if unlisted:
        raise RuntimeError(
            f"expr.py implements functions that {where} does not list: {', '.join(unlisted)}; "
            "add them to the spec or remove them from expr._UFUNCS."
        )
    constants = data.get("constants")
    if not isinstance(constants, dict) or not all(
        isinstance(v, float) and math.isfinite(v) for v in constants.values()
    ):
        raise RuntimeError(f"{where}: 'constants' must be an object of name: finite number.")
    max_depth = data.get("max_depth")
    max_json_depth = data.get("max_json_depth")
    # type(...) is int: JSON true would pass isinstance(..., int).
    if (
        type(max_depth) is not int
        or type(max_json_depth) is not int
        or min(max_depth, max_json_depth) < 1
    ):
        raise RuntimeError(f"{where}: 'max_depth' and 'max_json_depth' must be positive integers.")
    # A parsed formula of max_depth levels is a JSON tree of depth max_depth - 1 (the root is
    # 0 there), and its derivatives nest deeper still; both sides must accept it.
    if max_json_depth < max_depth:
        raise RuntimeError(
            f"{where}: max_json_depth ({max_json_depth}) must be at least max_depth "
            f"({max_depth}), or trees of valid formulas would be refused."
        )
    return _Spec(
        functions=MappingProxyType({name: ufuncs[name] for name in functions}),
        constants=MappingProxyType(dict(constants)),
        max_depth=max_depth,
        max_json_depth=max_json_depth,
    )


_SPEC: Final = _read_spec(
    json.loads(
        importlib.resources.files("curvewright").joinpath(_SPEC_FILE).read_text(encoding="utf-8")
    ),
    _UFUNCS,
)

#: The functions a formula may call, each with exactly one argument (``log`` is natural), in
#: the order of expr_spec.json.
FUNCTIONS: Final[Mapping[str, np.ufunc]] = _SPEC.functions

#: The named constants a formula may use (from expr_spec.json: the doubles math.pi and math.e).
CONSTANTS: Final[Mapping[str, float]] = _SPEC.constants

#: Longest formula text accepted by :meth:`Expr.parse` (after stripping).
MAX_LENGTH: Final = 2000
#: Deepest nesting of a parsed formula, counted in tree levels (``x`` is 1, ``-x`` is 2).
MAX_DEPTH: Final = _SPEC.max_depth
#: Deepest JSON tree accepted by :meth:`Expr.from_json`, counted from 0 at the root exactly as
#: ``js/expr.ts`` counts; both read it from expr_spec.json, so the two sides accept the same
#: trees. It is larger than MAX_DEPTH because derivatives and substitutions of a formula may
#: nest deeper than the formula itself.
MAX_JSON_DEPTH: Final = _SPEC.max_json_depth

_BINARY_UFUNCS: Final[Mapping[str, np.ufunc]] = MappingProxyType(
    {"+": np.add, "-": np.subtract, "*": np.multiply, "/": np.true_divide, "**": np.power}
)

_ALLOWED: Final = (
    "A formula may use numbers, names, the operators + - * / ** with parentheses and unary "
    "minus, the constants "
    + ", ".join(CONSTANTS)
    + " and the functions "
    + ", ".join(FUNCTIONS)
    + " (one argument each)."
)

_SNIPPET_WIDTH: Final = 72

_NAME_RE: Final = re.compile(r"[A-Za-z][A-Za-z0-9_]*\Z")


# ---------------------------------------------------------------------------------------------
# Nodes
# ---------------------------------------------------------------------------------------------


@dataclass(frozen=True, slots=True)
class Num:
    """A number literal: always a finite, non-negative float (negatives are ``Neg`` nodes)."""

    value: float


@dataclass(frozen=True, slots=True)
class Name:
    """A free name: ``x`` or a parameter."""

    id: str


@dataclass(frozen=True, slots=True)
class Const:
    """A named constant (a key of :data:`CONSTANTS`)."""

    id: str


@dataclass(frozen=True, slots=True)
class Neg:
    """Unary minus."""

    arg: Node


@dataclass(frozen=True, slots=True)
class Bin:
    """A binary operation; ``op`` is one of ``+ - * / **``."""

    op: str
    left: Node
    right: Node


@dataclass(frozen=True, slots=True)
class Call:
    """A call of one of :data:`FUNCTIONS` with its single argument."""

    fn: str
    arg: Node


Node: TypeAlias = "Num | Name | Const | Neg | Bin | Call"

_ZERO: Final = Num(0.0)
_ONE: Final = Num(1.0)
_TWO: Final = Num(2.0)


def _name_problem(name: object) -> str | None:
    """Why *name* cannot be a free name of a formula, or None when it can."""
    if not isinstance(name, str):
        return f"a name must be a string, got {type(name).__name__}"
    if name in FUNCTIONS:
        return f"{name!r} is a function; call it with one argument, e.g. {name}(x)"
    if name in CONSTANTS:
        return f"{name!r} is a built-in constant and cannot be used as a name"
    if name.startswith("_"):
        # Underscore names are the way into Python internals (__class__, __import__, ...).
        return f"names may not start with '_' (got {name!r})"
    if not _NAME_RE.match(name):
        return (
            f"{name!r} is not a valid name: use ASCII letters, digits and '_', "
            "starting with a letter"
        )
    if keyword.iskeyword(name):
        return f"{name!r} is a Python keyword and cannot be used as a name"
    return None


# ---------------------------------------------------------------------------------------------
# Parsing
# ---------------------------------------------------------------------------------------------

_FORBIDDEN: Final[Mapping[type[ast.AST], str]] = MappingProxyType(
    {
        ast.Attribute: "attribute access is",
        ast.Subscript: "subscripts (indexing with [...]) are",
        ast.Slice: "slices are",
        ast.Lambda: "lambda expressions are",
        ast.ListComp: "list comprehensions are",
        ast.SetComp: "set comprehensions are",
        ast.DictComp: "dict comprehensions are",
        ast.GeneratorExp: "generator expressions are",
        ast.Compare: "comparisons (< <= > >= == != is in) are",
        ast.BoolOp: "boolean operators (and, or) are",
        ast.IfExp: "conditional expressions (... if ... else ...) are",
        ast.NamedExpr: "assignment expressions (:=) are",
        ast.JoinedStr: "f-strings are",
        ast.FormattedValue: "f-string fields are",
        ast.List: "lists are",
        ast.Tuple: "tuples (a comma outside a function call) are",
        ast.Set: "sets are",
        ast.Dict: "dicts are",
        ast.Starred: "starred expressions (*...) are",
        ast.Await: "await is",
        ast.Yield: "yield is",
        ast.YieldFrom: "yield from is",
    }
)

_BAD_OPERATORS: Final[Mapping[type[ast.operator], str]] = MappingProxyType(
    {
        ast.Mod: "%",
        ast.FloorDiv: "//",
        ast.MatMult: "@",
        ast.LShift: "<<",
        ast.RShift: ">>",
        ast.BitOr: "|",
        ast.BitXor: "^",
        ast.BitAnd: "&",
    }
)

_OPERATORS: Final[Mapping[type[ast.operator], str]] = MappingProxyType(
    {ast.Add: "+", ast.Sub: "-", ast.Mult: "*", ast.Div: "/", ast.Pow: "**"}
)

# Names people reach for from other tools, with what to write instead.
_FUNCTION_ALIASES: Final[Mapping[str, str]] = MappingProxyType(
    {
        "ln": "log (the natural logarithm)",
        "atan": "arctan",
        "fabs": "abs",
        "pow": "the ** operator, e.g. x**2",
        "power": "the ** operator, e.g. x**2",
        "sqr": "x**2",
        "square": "x**2",
        "log2": "log(x)/log(2)",
        "exp10": "10**x",
    }
)

# Characters pasted from documents that Python's tokenizer rejects, with what to type instead.
_CHARACTER_HINTS: Final[Mapping[str, str]] = MappingProxyType(
    {
        "\u2212": "-",
        "\u2013": "-",
        "\u00d7": "*",
        "\u00b7": "*",
        "\u22c5": "*",
        "\u00f7": "/",
        "\u00b2": "**2",
        "\u00b3": "**3",
    }
)


class _Parser:
    """Convert one ``ast`` tree to nodes, rejecting everything outside the whitelist."""

    def __init__(self, text: str) -> None:
        self.text = text
        self.lines = text.split("\n")

    # -- positions and messages ---------------------------------------------------------------

    def _char_col(self, lineno: int, byte_col: int) -> int:
        # ast gives UTF-8 byte offsets; people count characters.
        line = self.lines[lineno - 1] if 0 < lineno <= len(self.lines) else ""
        return len(line.encode("utf-8")[:byte_col].decode("utf-8", errors="ignore"))

    def located(self, problem: str, lineno: int, col: int, width: int, hint: str) -> FormulaError:
        """An error pointing at characters ``col .. col+width`` (0-based) of line *lineno*."""
        lineno = min(max(lineno, 1), len(self.lines))
        line = self.lines[lineno - 1]
        col = min(max(col, 0), len(line))
        where = f"column {col + 1}" if len(self.lines) == 1 else f"line {lineno}, column {col + 1}"
        width = max(1, min(width, len(line) - col))
        # Show a window of a long line around the error, so the caret stays on screen.
        start = max(0, min(col - 30, len(line) - _SNIPPET_WIDTH))
        stop = start + _SNIPPET_WIDTH
        shown = ("..." if start else "") + line[start:stop] + ("..." if stop < len(line) else "")
        shown = shown.replace("\t", " ")
        pad = col - start + (3 if start else 0)
        caret = " " * pad + "^" * min(width, _SNIPPET_WIDTH - (col - start))
        return FormulaError(f"{problem} (at {where}). {hint}\n    {shown}\n    {caret}")

    def error(self, node: ast.AST, problem: str, hint: str = _ALLOWED) -> FormulaError:
        """An error pointing at the source span of *node*."""
        lineno = getattr(node, "lineno", 1)
        col = self._char_col(lineno, getattr(node, "col_offset", 0))
        end_lineno = getattr(node, "end_lineno", None) or lineno
        if end_lineno == lineno:
            end = self._char_col(lineno, getattr(node, "end_col_offset", None) or 0)
        else:
            end = len(self.lines[lineno - 1])
        return self.located(problem, lineno, col, end - col, hint)

    def segment(self, node: ast.AST) -> str:
        """The source text of *node*, shortened for messages."""
        seg = ast.get_source_segment(self.text, node) or ""
        seg = " ".join(seg.split())
        return seg if len(seg) <= 40 else seg[:37] + "..."

    def _operator_error(self, node: ast.BinOp, symbol: str, problem: str) -> FormulaError:
        # Point at the operator itself, found between the two operands when both are on one line.
        left, right = node.left, node.right
        if left.end_lineno == right.lineno and left.end_col_offset is not None:
            start = self._char_col(right.lineno, left.end_col_offset)
            stop = self._char_col(right.lineno, right.col_offset)
            found = self.lines[right.lineno - 1][start:stop].find(symbol)
            if found >= 0:
                hint = _ALLOWED
                if symbol == "^":
                    hint = "Use ** for powers (x**2, not x^2). " + _ALLOWED
                return self.located(problem, right.lineno, start + found, len(symbol), hint)
        return self.error(node, problem)

    # -- conversion ---------------------------------------------------------------------------

    def convert(self, node: ast.expr, depth: int) -> Node:
        """The node for *node*, which sits at nesting level *depth* (the root is level 1)."""
        if depth > MAX_DEPTH:
            raise self.error(
                node,
                f"the formula is nested too deeply (more than {MAX_DEPTH} levels)",
                "Split it into simpler parts, e.g. with derived quantities.",
            )
        if isinstance(node, ast.Constant):
            return self._constant(node)
        if isinstance(node, ast.Name):
            return self._name(node)
        if isinstance(node, ast.UnaryOp):
            if isinstance(node.op, ast.USub):
                return Neg(self.convert(node.operand, depth + 1))
            if isinstance(node.op, ast.UAdd):
                return self.convert(node.operand, depth + 1)
            what = "'not'" if isinstance(node.op, ast.Not) else "'~' (bitwise not)"
            raise self.error(node, f"the operator {what} is not allowed")
        if isinstance(node, ast.BinOp):
            op = _OPERATORS.get(type(node.op))
            if op is None:
                symbol = _BAD_OPERATORS.get(type(node.op), type(node.op).__name__)
                raise self._operator_error(
                    node,
                    symbol,
                    f"the operator {symbol!r} is not allowed in {self.segment(node)!r}",
                )
            return Bin(op, self.convert(node.left, depth + 1), self.convert(node.right, depth + 1))
        if isinstance(node, ast.Call):
            return self._call(node, depth)
        what = _FORBIDDEN.get(type(node), f"{type(node).__name__} expressions are")
        raise self.error(node, f"{what} not allowed: {self.segment(node)!r}")

    def _constant(self, node: ast.Constant) -> Num:
        value = node.value
        seg = self.segment(node)
        if isinstance(value, bool):
            raise self.error(node, f"{value} is not allowed", "Use the numbers 1 and 0 instead.")
        if isinstance(value, int):
            try:
                number = float(value)
            except OverflowError:
                number = math.inf
        elif isinstance(value, float):
            number = value
        elif isinstance(value, complex):
            raise self.error(node, f"complex numbers are not allowed: {seg!r}")
        elif isinstance(value, (str, bytes)):
            raise self.error(node, f"strings are not allowed: {seg!r}")
        else:
            raise self.error(node, f"{seg or repr(value)!r} is not allowed")
        if not math.isfinite(number):
            raise self.error(
                node,
                f"the number {seg!r} is too large for a double (it overflows to infinity)",
                "Numbers must be below about 1.8e308.",
            )
        return Num(number)

    def _check_spelling(self, node: ast.Name) -> None:
        # Python folds non-ASCII identifiers by NFKC (PEP 3131): a full-width x (U+FF58) arrives
        # as "x" and a script e (U+212F) as the constant "e". Names must be written as stored.
        written = ast.get_source_segment(self.text, node)
        if written is not None and written != node.id:
            raise self.error(
                node,
                f"name {written!r} is not allowed",
                f"Names must be plain ASCII letters, digits and '_'; type {node.id!r} instead.",
            )

    def _name(self, node: ast.Name) -> Name | Const:
        self._check_spelling(node)
        if node.id in CONSTANTS:
            return Const(node.id)
        problem = _name_problem(node.id)
        if problem is not None:
            raise self.error(
                node, f"name {node.id!r} is not allowed", problem[0].upper() + problem[1:] + "."
            )
        return Name(node.id)

    def _call(self, node: ast.Call, depth: int) -> Call:
        func = node.func
        if not isinstance(func, ast.Name):
            hint = "Only " + ", ".join(FUNCTIONS) + " can be called."
            if isinstance(func, ast.Attribute) and func.attr in FUNCTIONS:
                hint = f"Write {func.attr}(...) without the {self.segment(func.value)!r} prefix."
            elif isinstance(func, ast.Constant) and not isinstance(func.value, str):
                hint = f"To multiply, write the * explicitly: {self.segment(func)}*(...)."
            raise self.error(node, f"calling {self.segment(func)!r} is not allowed", hint)
        self._check_spelling(func)
        name = func.id
        if name not in FUNCTIONS:
            if name in CONSTANTS:
                raise self.error(
                    func,
                    f"{name!r} is a constant, not a function",
                    f"To multiply, write {name}*(...).",
                )
            if name.startswith("_"):
                raise self.error(
                    func,
                    f"calling {name!r} is not allowed",
                    "Names may not start with '_'. " + _ALLOWED,
                )
            suggestions = [f"{m!r}" for m in difflib.get_close_matches(name, FUNCTIONS, n=3)]
            alias = _FUNCTION_ALIASES.get(name.lower())
            hint = f"Did you mean {' or '.join(suggestions)}? " if suggestions else ""
            if alias is not None:
                hint = f"Use {alias}. "
            hint += (
                "Available functions: " + ", ".join(FUNCTIONS) + ". "
                f"If you meant multiplication, write {name}*(...)."
            )
            raise self.error(func, f"unknown function {name!r}", hint)
        for kw in node.keywords:
            what = f"{kw.arg}=..." if kw.arg is not None else "**..."
            raise self.error(
                kw,
                f"keyword arguments are not allowed: {what!r} in {name}()",
                f"Call {name} with one positional argument, e.g. {name}(x).",
            )
        for arg in node.args:
            if isinstance(arg, ast.Starred):
                raise self.error(
                    arg,
                    f"starred arguments are not allowed: {self.segment(arg)!r}",
                    f"Call {name} with one positional argument, e.g. {name}(x).",
                )
        if len(node.args) != 1:
            raise self.error(
                node,
                f"{name}() takes exactly one argument, got {len(node.args)}",
                f"Call it as {name}(x).",
            )
        return Call(name, self.convert(node.args[0], depth + 1))


def _syntax_error(text: str, exc: SyntaxError) -> FormulaError:
    """Our error for a syntax error Python's parser reported, with a caret snippet."""
    parser = _Parser(text)
    lineno = exc.lineno or 1
    line = parser.lines[min(max(lineno, 1), len(parser.lines)) - 1]
    # Python's offsets are 1-based characters; at the end of input they may be 0 or past the end.
    offset = exc.offset if exc.offset and exc.offset > 0 else len(line) + 1
    col = min(offset - 1, len(line))
    end = exc.end_offset if getattr(exc, "end_offset", None) else offset
    width = max(1, (end or offset) - offset) if getattr(exc, "end_lineno", lineno) == lineno else 1
    msg = (exc.msg or "invalid syntax").split(". Maybe you meant")[0].split("\n")[0]
    hint = _ALLOWED
    if "decimal literal" in msg:
        hint = "Write multiplication explicitly, e.g. 2*x rather than 2x. " + hint
    elif "=" in line[col : col + 2] and "==" not in line[col : col + 2]:
        hint = (
            "A formula is an expression: write only the right-hand side, e.g. 'a*x + b' "
            "rather than 'y = a*x + b'. " + hint
        )
    for char, instead in _CHARACTER_HINTS.items():
        if char in msg:
            hint = f"Type {instead!r} instead of {char!r}. " + hint
            break
    return parser.located(f"syntax error: {msg}", lineno, col, width, hint)


def _parse_tree(text: str) -> Node:
    if "\x00" in text:
        raise FormulaError(
            "the formula contains a NUL character (\\x00); remove it and retype the formula."
        )
    try:
        # A SyntaxWarning (e.g. "'int' object is not callable" for 2(x)) is no concern of the
        # user's: the construct is rejected below with our own message anyway.
        with warnings.catch_warnings():
            warnings.simplefilter("ignore")
            module = ast.parse(text, filename="<formula>", mode="eval")
    except SyntaxError as exc:
        raise _syntax_error(text, exc) from None
    except (RecursionError, MemoryError, ValueError):
        raise FormulaError(
            f"the formula is nested too deeply to parse (more than {MAX_DEPTH} levels); "
            "split it into simpler parts."
        ) from None
    return _Parser(text).convert(module.body, 1)


# ---------------------------------------------------------------------------------------------
# Tree utilities: names, text, JSON
# ---------------------------------------------------------------------------------------------


def _children(node: Node) -> tuple[Node, ...]:
    if isinstance(node, Bin):
        return (node.left, node.right)
    if isinstance(node, (Neg, Call)):
        return (node.arg,)
    return ()


def _walk(node: Node) -> Iterator[Node]:
    """Every node, in source order (pre-order, left operand before right)."""
    stack = [node]
    while stack:
        current = stack.pop()
        yield current
        stack.extend(reversed(_children(current)))


def _free_names(tree: Node) -> tuple[str, ...]:
    seen: dict[str, None] = {}
    for node in _walk(tree):
        if isinstance(node, Name):
            seen.setdefault(node.id)
    return tuple(seen)


_PRECEDENCE: Final[Mapping[str, int]] = MappingProxyType({"+": 1, "-": 1, "*": 2, "/": 2, "**": 4})
_NEG_PRECEDENCE: Final = 3
_ATOM_PRECEDENCE: Final = 5


def _precedence(node: Node) -> int:
    if isinstance(node, Bin):
        return _PRECEDENCE[node.op]
    if isinstance(node, Neg):
        return _NEG_PRECEDENCE
    return _ATOM_PRECEDENCE


def _format_number(value: float) -> str:
    # Integers print without ".0" while they are exact; repr() is the shortest text that reads
    # back as the same double, so text -> tree -> text is lossless.
    if value.is_integer() and value < 1e16:
        return str(int(value))
    return repr(value)


def _to_text(node: Node) -> str:
    if isinstance(node, Num):
        return _format_number(node.value)
    if isinstance(node, (Name, Const)):
        return node.id
    if isinstance(node, Call):
        return f"{node.fn}({_to_text(node.arg)})"
    if isinstance(node, Neg):
        inner = _to_text(node.arg)
        # "-(-x)" rather than "--x", which reads like a decrement.
        if _precedence(node.arg) < _NEG_PRECEDENCE or isinstance(node.arg, Neg):
            return f"-({inner})"
        return f"-{inner}"
    left, right = _to_text(node.left), _to_text(node.right)
    lp, rp = _precedence(node.left), _precedence(node.right)
    if node.op == "**":
        # Right-associative and binding tighter than unary minus on its left only:
        # (-a)**b and (a**b)**c need parentheses, a**-b and a**b**c do not.
        left_paren = lp <= _PRECEDENCE["**"]
        right_paren = rp < _NEG_PRECEDENCE
    else:
        # Left-associative: a - (b - c) and a / (b * c) keep their parentheses.
        p = _PRECEDENCE[node.op]
        left_paren = lp < p
        right_paren = rp <= p
    if left_paren:
        left = f"({left})"
    if right_paren:
        right = f"({right})"
    return f"{left} {node.op} {right}"


def _to_json(node: Node) -> dict[str, Any]:
    if isinstance(node, Num):
        return {"type": "num", "value": node.value}
    if isinstance(node, Name):
        return {"type": "name", "id": node.id}
    if isinstance(node, Const):
        return {"type": "const", "id": node.id}
    if isinstance(node, Neg):
        return {"type": "neg", "arg": _to_json(node.arg)}
    if isinstance(node, Bin):
        return {
            "type": "bin",
            "op": node.op,
            "left": _to_json(node.left),
            "right": _to_json(node.right),
        }
    return {"type": "call", "fn": node.fn, "args": [_to_json(node.arg)]}


_JSON_FIELDS: Final[Mapping[str, frozenset[str]]] = MappingProxyType(
    {
        "num": frozenset({"type", "value"}),
        "name": frozenset({"type", "id"}),
        "const": frozenset({"type", "id"}),
        "neg": frozenset({"type", "arg"}),
        "bin": frozenset({"type", "op", "left", "right"}),
        "call": frozenset({"type", "fn", "args"}),
    }
)


def _from_json(obj: object, path: str, depth: int) -> Node:
    if depth > MAX_JSON_DEPTH:
        raise FormulaError(
            f"{path}: the expression tree is nested more than {MAX_JSON_DEPTH} levels deep."
        )
    if not isinstance(obj, Mapping):
        raise FormulaError(f"{path}: expected a node object (dict), got {type(obj).__name__}.")
    kind = obj.get("type")
    fields = _JSON_FIELDS.get(kind) if isinstance(kind, str) else None
    if fields is None:
        raise FormulaError(
            f"{path}: unknown node type {kind!r}; expected one of {', '.join(_JSON_FIELDS)}."
        )
    keys = set(obj)
    if keys != fields:
        parts = []
        if fields - keys:
            parts.append("missing " + ", ".join(sorted(map(str, fields - keys))))
        if keys - fields:
            parts.append("unexpected " + ", ".join(sorted(map(repr, keys - fields))))
        raise FormulaError(
            f"{path}: a {kind!r} node has exactly the fields {', '.join(sorted(fields))} "
            f"({'; '.join(parts)})."
        )
    if kind == "num":
        value = obj["value"]
        if isinstance(value, bool) or not isinstance(value, (int, float)):
            raise FormulaError(f"{path}: num value must be a number, got {type(value).__name__}.")
        try:
            number = float(value)
        except OverflowError:
            number = math.inf
        if not math.isfinite(number) or math.copysign(1.0, number) < 0:
            raise FormulaError(
                f"{path}: num value must be finite and not negative, got {value!r}; "
                "write a negative number as a neg node around its absolute value."
            )
        return Num(number)
    if kind == "name":
        ident = obj["id"]
        problem = _name_problem(ident)
        if problem is not None:
            raise FormulaError(f"{path}: bad name id: {problem}.")
        assert isinstance(ident, str)  # _name_problem checked it
        return Name(ident)
    if kind == "const":
        ident = obj["id"]
        if not isinstance(ident, str) or ident not in CONSTANTS:
            raise FormulaError(
                f"{path}: const id must be one of {', '.join(CONSTANTS)}, got {ident!r}."
            )
        return Const(ident)
    if kind == "neg":
        return Neg(_from_json(obj["arg"], f"{path}.arg", depth + 1))
    if kind == "bin":
        op = obj["op"]
        if not isinstance(op, str) or op not in _BINARY_UFUNCS:
            raise FormulaError(f"{path}: op must be one of + - * / **, got {op!r}.")
        return Bin(
            op,
            _from_json(obj["left"], f"{path}.left", depth + 1),
            _from_json(obj["right"], f"{path}.right", depth + 1),
        )
    fn = obj["fn"]
    if not isinstance(fn, str) or fn not in FUNCTIONS:
        raise FormulaError(f"{path}: fn must be one of {', '.join(FUNCTIONS)}, got {fn!r}.")
    args = obj["args"]
    if not isinstance(args, (list, tuple)) or len(args) != 1:
        raise FormulaError(f"{path}: args of {fn} must be a list of exactly one node.")
    return Call(fn, _from_json(args[0], f"{path}.args[0]", depth + 1))


# ---------------------------------------------------------------------------------------------
# Evaluation and code generation
# ---------------------------------------------------------------------------------------------


def _as_float(value: object, name: str) -> FloatArray:
    """*value* as a float64 array (0-d for a scalar), or our error naming the argument."""
    try:
        array = np.asarray(value)
    except Exception as exc:  # numpy raises many types for unconvertible objects
        raise FormulaError(
            f"the value of {name!r} must be a number or an array of numbers, "
            f"got {type(value).__name__}."
        ) from exc
    if array.dtype.kind not in "biuf":
        raise FormulaError(
            f"the value of {name!r} must be real numbers, got an array of dtype {array.dtype}; "
            "convert it with numpy.asarray(..., dtype=float)."
        )
    return array.astype(np.float64, copy=False)


def _finish(value: Any) -> FloatArray | float:
    # A 0-d result is returned as a numpy scalar (a float subclass); arrays stay arrays.
    if isinstance(value, np.ndarray):
        if value.ndim == 0:
            scalar: float = np.float64(value[()])
            return scalar
        array: FloatArray = value
        return array
    result: float = np.float64(value)
    return result


def _copy(value: Any) -> Any:
    # A formula that is a bare name must not hand back the caller's own array.
    return np.array(value, copy=True)


def _eval(node: Node, env: Mapping[str, FloatArray]) -> Any:
    # Independent of the generated code on purpose: tests check that the two agree.
    if isinstance(node, Num):
        return np.float64(node.value)
    if isinstance(node, Const):
        return np.float64(CONSTANTS[node.id])
    if isinstance(node, Name):
        return env[node.id]
    if isinstance(node, Neg):
        return np.negative(_eval(node.arg, env))
    if isinstance(node, Call):
        return FUNCTIONS[node.fn](_eval(node.arg, env))
    return _BINARY_UFUNCS[node.op](_eval(node.left, env), _eval(node.right, env))


_OP_HELPERS: Final[Mapping[str, str]] = MappingProxyType(
    {"+": "_add", "-": "_sub", "*": "_mul", "/": "_div", "**": "_pow"}
)

# The only globals generated code can see. User names cannot start with "_", so they never
# collide with these, and no builtins are reachable.
_CODE_GLOBALS: Final[Mapping[str, Any]] = MappingProxyType(
    {
        "__builtins__": {},
        "_add": np.add,
        "_sub": np.subtract,
        "_mul": np.multiply,
        "_div": np.true_divide,
        "_pow": np.power,
        "_neg": np.negative,
        "_as_float": _as_float,
        "_finish": _finish,
        "_copy": _copy,
        "_errstate": np.errstate,
        **{f"_fn_{name}": ufunc for name, ufunc in FUNCTIONS.items()},
    }
)


def _codegen(tree: Node) -> tuple[list[str], str]:
    """Straight-line statements (one temporary per distinct subtree) and the result's source.

    One assignment per node rather than one nested expression keeps deep trees clear of the
    parser's nesting limit, and reusing equal subtrees removes the repetition derivatives have.
    """
    lines, results = _codegen_many((tree,))
    return lines, results[0]


def _codegen_many(trees: Sequence[Node]) -> tuple[list[str], list[str]]:
    """As :func:`_codegen` for several trees at once, sharing every common subtree."""
    lines: list[str] = []
    memo: dict[Node, str] = {}

    def emit(node: Node) -> str:
        if isinstance(node, Num):
            return repr(float(node.value))
        if isinstance(node, Const):
            return repr(CONSTANTS[node.id])
        if isinstance(node, Name):
            return node.id
        known = memo.get(node)
        if known is not None:
            return known
        if isinstance(node, Neg):
            code = f"_neg({emit(node.arg)})"
        elif isinstance(node, Call):
            code = f"_fn_{node.fn}({emit(node.arg)})"
        else:
            code = f"{_OP_HELPERS[node.op]}({emit(node.left)}, {emit(node.right)})"
        temp = f"_t{len(lines)}"
        lines.append(f"{temp} = {code}")
        memo[node] = temp
        return temp

    return lines, [emit(t) for t in trees]


def _generate(trees: tuple[Node, ...], argnames: tuple[str, ...], many: bool) -> Any:
    """Compile straight-line numpy code for ``trees``: one result, or a tuple of them."""
    body, results = _codegen_many(trees)
    # A formula that is a bare name must not hand back the caller's own array.
    results = [
        f"_copy({r})" if isinstance(t, Name) else r for t, r in zip(trees, results, strict=True)
    ]
    signature = ", ".join(argnames) + (", /" if argnames else "")
    source = [f"def _formula({signature}):"]
    source += [f"    {a} = _as_float({a}, {a!r})" for a in argnames]
    source.append("    with _errstate(all='ignore'):")
    source += [f"        {line}" for line in body]
    returned = "".join(f"_finish({r}), " for r in results) if many else f"_finish({results[0]})"
    source.append(f"        return ({returned})")
    # The source holds only validated identifiers, float reprs and the helper names above.
    code = builtins.compile("\n".join(source), "<curvewright formula>", "exec")
    namespace = dict(_CODE_GLOBALS)
    exec(code, namespace)
    return namespace["_formula"]


@functools.lru_cache(maxsize=512)
def _compiled(tree: Node, argnames: tuple[str, ...]) -> Callable[..., FloatArray | float]:
    function: Callable[..., FloatArray | float] = _generate((tree,), argnames, many=False)
    return function


@functools.lru_cache(maxsize=256)
def _compiled_many(
    trees: tuple[Node, ...], argnames: tuple[str, ...]
) -> Callable[..., tuple[FloatArray | float, ...]]:
    function: Callable[..., tuple[FloatArray | float, ...]] = _generate(trees, argnames, many=True)
    return function


def compile_many(
    exprs: Sequence[Expr], argnames: Sequence[str]
) -> Callable[..., tuple[FloatArray | float, ...]]:
    """One vectorised function that evaluates several formulas, sharing common subexpressions.

    A model's value and its partial derivatives repeat most of their work (the 4PL's
    ``10**(n*(log10(x) - c))`` appears in every derivative); evaluating them in one generated
    function computes each distinct subexpression once.

    Parameters
    ----------
    exprs : sequence of Expr
    argnames : sequence of str
        As for :meth:`Expr.compile`; must cover every formula's free names.

    Returns
    -------
    callable
        ``f(*args) -> tuple`` with one result per formula, each as :meth:`Expr.compile` gives.

    Raises
    ------
    FormulaError
        As :meth:`Expr.compile`.
    """
    names = tuple(argnames)
    for e in exprs:
        e.compile(names)  # the same argument checks (and messages) as a single formula
    return _compiled_many(tuple(e.tree for e in exprs), names)


# ---------------------------------------------------------------------------------------------
# Derivatives with light simplification
# ---------------------------------------------------------------------------------------------


def _value(node: Node) -> float | None:
    """The value of a number node or a negated number node, else None."""
    if isinstance(node, Num):
        return node.value
    if isinstance(node, Neg) and isinstance(node.arg, Num):
        return -node.arg.value
    return None


def _is(node: Node, number: float) -> bool:
    return _value(node) == number


def _number(value: float) -> Node:
    if value < 0 or math.copysign(1.0, value) < 0:
        return Neg(Num(-value))
    return Num(value)


def _fold(op: str, a: Node, b: Node) -> Node | None:
    # Folding computes exactly what the compiled code would (the same ufunc on the same doubles),
    # so it changes no value; a non-finite result is left unfolded to keep the tree valid.
    va, vb = _value(a), _value(b)
    if va is None or vb is None:
        return None
    with np.errstate(all="ignore"):
        result = float(_BINARY_UFUNCS[op](np.float64(va), np.float64(vb)))
    return _number(result) if math.isfinite(result) else None


def _neg(a: Node) -> Node:
    if _is(a, 0.0):
        return _ZERO
    if isinstance(a, Neg):
        return a.arg
    return Neg(a)


def _add(a: Node, b: Node) -> Node:
    if _is(a, 0.0):
        return b
    if _is(b, 0.0):
        return a
    folded = _fold("+", a, b)
    if folded is not None:
        return folded
    if isinstance(b, Neg):
        return _sub(a, b.arg)
    return Bin("+", a, b)


def _sub(a: Node, b: Node) -> Node:
    if _is(b, 0.0):
        return a
    if _is(a, 0.0):
        return _neg(b)
    folded = _fold("-", a, b)
    if folded is not None:
        return folded
    if isinstance(b, Neg):
        return _add(a, b.arg)
    return Bin("-", a, b)


def _mul(a: Node, b: Node) -> Node:
    if _is(a, 0.0) or _is(b, 0.0):
        return _ZERO
    if _is(a, 1.0):
        return b
    if _is(b, 1.0):
        return a
    folded = _fold("*", a, b)
    if folded is not None:
        return folded
    # (-a)*b = -(a*b) exactly in IEEE arithmetic; pulling signs out keeps the text readable.
    if isinstance(a, Neg):
        return _neg(_mul(a.arg, b))
    if isinstance(b, Neg):
        return _neg(_mul(a, b.arg))
    return Bin("*", a, b)


def _div(a: Node, b: Node) -> Node:
    if _is(a, 0.0):
        return _ZERO
    if _is(b, 1.0):
        return a
    folded = _fold("/", a, b)
    if folded is not None:
        return folded
    if isinstance(a, Neg):
        return _neg(_div(a.arg, b))
    if isinstance(b, Neg):
        return _neg(_div(a, b.arg))
    return Bin("/", a, b)


def _pow(a: Node, b: Node) -> Node:
    # numpy.power gives a**0 = 1 and 1**b = 1 for every a and b, NaN included.
    if _is(b, 0.0) or _is(a, 1.0):
        return _ONE
    if _is(b, 1.0):
        return a
    folded = _fold("**", a, b)
    if folded is not None:
        return folded
    return Bin("**", a, b)


def _derivative(node: Node, var: str) -> Node:
    if isinstance(node, (Num, Const)):
        return _ZERO
    if isinstance(node, Name):
        return _ONE if node.id == var else _ZERO
    if isinstance(node, Neg):
        return _neg(_derivative(node.arg, var))
    if isinstance(node, Call):
        u = node.arg
        du = _derivative(u, var)
        if _is(du, 0.0):
            return _ZERO
        fn = node.fn
        if fn == "exp":
            return _mul(node, du)
        if fn == "log":
            return _div(du, u)
        if fn == "log10":
            return _div(du, _mul(u, Call("log", Num(10.0))))
        if fn == "sqrt":
            return _div(du, _mul(_TWO, node))
        if fn == "abs":
            # sign(u); NaN at u = 0, where abs has no derivative.
            return _mul(_div(u, node), du)
        if fn == "sin":
            return _mul(Call("cos", u), du)
        if fn == "cos":
            return _neg(_mul(Call("sin", u), du))
        if fn == "tan":
            return _div(du, _pow(Call("cos", u), _TWO))
        if fn == "arctan":
            return _div(du, _add(_ONE, _pow(u, _TWO)))
        # tanh
        return _mul(_sub(_ONE, _pow(node, _TWO)), du)
    u, v = node.left, node.right
    du, dv = _derivative(u, var), _derivative(v, var)
    if node.op == "+":
        return _add(du, dv)
    if node.op == "-":
        return _sub(du, dv)
    if node.op == "*":
        return _add(_mul(du, v), _mul(u, dv))
    if node.op == "/":
        return _sub(_div(du, v), _div(_mul(u, dv), _pow(v, _TWO)))
    # Power: a structurally zero derivative means the operand does not involve var.
    if _is(dv, 0.0):
        if _is(du, 0.0):
            return _ZERO
        return _mul(_mul(v, _pow(u, _sub(v, _ONE))), du)
    if _is(du, 0.0):
        return _mul(_mul(node, Call("log", u)), dv)
    return _mul(node, _add(_mul(dv, Call("log", u)), _div(_mul(v, du), u)))


def _substitute(node: Node, mapping: Mapping[str, Node]) -> Node:
    if isinstance(node, Name):
        return mapping.get(node.id, node)
    if isinstance(node, Neg):
        return Neg(_substitute(node.arg, mapping))
    if isinstance(node, Call):
        return Call(node.fn, _substitute(node.arg, mapping))
    if isinstance(node, Bin):
        return Bin(node.op, _substitute(node.left, mapping), _substitute(node.right, mapping))
    return node


# ---------------------------------------------------------------------------------------------
# Public API
# ---------------------------------------------------------------------------------------------


@dataclass(frozen=True)
class Expr:
    """A validated formula: its text, its tree and its free names.

    Build one with :meth:`parse` or :meth:`from_json`; the other methods return new objects.

    Attributes
    ----------
    text : str
        The formula as given, stripped of surrounding whitespace (from :meth:`parse`), or the
        canonical text of the tree (from every other constructor).
    tree : Node
        The immutable node tree (``Num``, ``Name``, ``Const``, ``Neg``, ``Bin``, ``Call``).
    names : tuple of str
        The free names (neither functions nor constants) in order of first appearance, left to
        right in the text.
    """

    text: str
    tree: Node
    names: tuple[str, ...]

    @classmethod
    def _of(cls, tree: Node) -> Expr:
        return cls(_to_text(tree), tree, _free_names(tree))

    @classmethod
    def parse(cls, text: str) -> Expr:
        """Parse formula text under the whitelist, without evaluating anything.

        Parameters
        ----------
        text : str
            The formula, e.g. ``"baseline + amplitude*exp(-k*x)"``. At most MAX_LENGTH characters
            after stripping and at most MAX_DEPTH levels of nesting.

        Returns
        -------
        Expr

        Raises
        ------
        FormulaError
            For a syntax error, a forbidden construct, an unknown function, a misused function
            or constant name, an empty, overlong or too deeply nested formula. The message
            names the construct, its column, and what is allowed.
        """
        if not isinstance(text, str):
            raise FormulaError(f"a formula must be a string, got {type(text).__name__}.")
        stripped = text.strip()
        if not stripped:
            raise FormulaError("the formula is empty; write an expression such as 'a*x + b'.")
        if len(stripped) > MAX_LENGTH:
            raise FormulaError(
                f"the formula is {len(stripped)} characters long, more than the limit of "
                f"{MAX_LENGTH}; split it into simpler parts."
            )
        tree = _parse_tree(stripped)
        return cls(stripped, tree, _free_names(tree))

    def to_json(self) -> dict[str, Any]:
        """The tree as JSON-ready nested dicts (the node format of DEVELOPERS.md)."""
        return _to_json(self.tree)

    @classmethod
    def from_json(cls, obj: Mapping[str, Any]) -> Expr:
        """Rebuild an expression from the node JSON of :meth:`to_json`, validating strictly.

        Parameters
        ----------
        obj : mapping
            A node object. Unknown node types, fields, operators or functions, invalid names,
            negative or non-finite numbers and trees deeper than MAX_JSON_DEPTH are rejected.

        Returns
        -------
        Expr
            With ``text`` regenerated by :meth:`to_text`.

        Raises
        ------
        FormulaError
            Naming the path of the offending node, e.g. ``tree.left.args[0]``.
        """
        return cls._of(_from_json(obj, "tree", 0))

    def to_text(self) -> str:
        """Canonical text with minimal parentheses that parses back to the same tree."""
        return _to_text(self.tree)

    def compile(self, argnames: Sequence[str]) -> Callable[..., FloatArray | float]:
        """A vectorised numpy function of the given arguments.

        Parameters
        ----------
        argnames : sequence of str
            Positional argument names of the returned function, in order. They must include
            every free name of the formula and may include others (ignored).

        Returns
        -------
        callable
            ``f(*args)``: each argument a number or array (converted to float64); the result
            broadcasts as numpy does, a numpy float64 scalar when every input used is a scalar.
            Runs under ``numpy.errstate(all="ignore")``: NaN and infinities come back as values.

        Raises
        ------
        FormulaError
            If a free name is missing from *argnames*, or a name is invalid or repeated.
            The returned function raises FormulaError for a non-numeric argument.
        """
        if isinstance(argnames, str):
            raise FormulaError(
                f"argnames must be a sequence of names, not the string {argnames!r}; "
                f"write [{argnames!r}] for one argument."
            )
        names = tuple(argnames)
        for name in names:
            problem = _name_problem(name)
            if problem is not None:
                raise FormulaError(f"cannot use {name!r} as an argument name: {problem}.")
        repeated = sorted({n for n in names if names.count(n) > 1})
        if repeated:
            raise FormulaError(f"argument names must be distinct; repeated: {', '.join(repeated)}.")
        missing = [n for n in self.names if n not in names]
        if missing:
            raise FormulaError(
                f"the formula {self.text!r} uses {', '.join(missing)}, which "
                f"{'is' if len(missing) == 1 else 'are'} not among the arguments "
                f"({', '.join(names) or 'none'}); add {'it' if len(missing) == 1 else 'them'} "
                "to argnames."
            )
        return _compiled(self.tree, names)

    def evaluate(self, env: Mapping[str, float | FloatArray]) -> FloatArray | float:
        """Evaluate by walking the tree (slower than :meth:`compile`, same numbers).

        Parameters
        ----------
        env : mapping
            A value (number or array) for every free name; extra entries are ignored.

        Returns
        -------
        numpy.ndarray or float

        Raises
        ------
        FormulaError
            If a free name has no value or a value is not numeric.
        """
        if not isinstance(env, Mapping):
            raise FormulaError(
                f"env must be a mapping of names to values, got {type(env).__name__}."
            )
        missing = [n for n in self.names if n not in env]
        if missing:
            raise FormulaError(
                f"no value for {', '.join(missing)}; the formula {self.text!r} needs "
                f"{', '.join(self.names)}."
            )
        values = {n: _as_float(env[n], n) for n in self.names}
        with np.errstate(all="ignore"):
            result = _eval(self.tree, values)
        if isinstance(self.tree, Name):
            result = _copy(result)
        return _finish(result)

    def substitute(self, mapping: Mapping[str, Expr]) -> Expr:
        """Replace free names by sub-expressions, all at once (so ``{a: b, b: a}`` swaps).

        Parameters
        ----------
        mapping : mapping of str to Expr
            Names absent from the formula are ignored.

        Returns
        -------
        Expr
            With canonical text; parentheses follow from the tree.

        Raises
        ------
        FormulaError
            If a key is not a valid name or a value is not an Expr.
        """
        if not isinstance(mapping, Mapping):
            raise FormulaError(
                f"substitute() needs a mapping of names to Expr, got {type(mapping).__name__}."
            )
        trees: dict[str, Node] = {}
        for name, value in mapping.items():
            problem = _name_problem(name)
            if problem is not None:
                raise FormulaError(f"cannot substitute for {name!r}: {problem}.")
            if not isinstance(value, Expr):
                raise FormulaError(
                    f"the replacement for {name!r} must be an Expr, got {type(value).__name__}; "
                    "parse text first with Expr.parse()."
                )
            trees[name] = value.tree
        return Expr._of(_substitute(self.tree, trees))

    def derivative(self, name: str) -> Expr:
        """The symbolic partial derivative with respect to *name*, lightly simplified.

        Simplification removes ``0*a``, ``1*a``, ``a+0``, ``a**1`` and folds arithmetic on
        number literals. ``d abs(u)`` is ``u/abs(u)``, which is NaN at ``u = 0``.

        Parameters
        ----------
        name : str
            A free name; one the formula does not use gives the expression ``0``.

        Returns
        -------
        Expr

        Raises
        ------
        FormulaError
            If *name* is not a valid name.
        """
        problem = _name_problem(name)
        if problem is not None:
            raise FormulaError(f"cannot differentiate with respect to {name!r}: {problem}.")
        return Expr._of(_derivative(self.tree, name))

    def __str__(self) -> str:
        return self.text


def parse(text: str) -> Expr:
    """Parse formula text; the same as :meth:`Expr.parse`."""
    return Expr.parse(text)
