"""A whitelisted evaluator for velocity formulas written in case files, e.g. ``"A*sin(k*z) + C*cos(k*y)"``.

Case files are data, never code: the text is parsed with ``ast.parse(text, mode="eval")`` and every
node is checked against an explicit whitelist, then converted to a small immutable tree that our own
recursive interpreter evaluates. Nothing is ever passed to ``eval``/``exec``/``compile``. Grammar
(Python syntax and precedence, so ``-x**2 == -(x**2)`` and ``**`` is right-associative)::

    expr   := term (("+" | "-") term)*
    term   := factor (("*" | "/") factor)*
    factor := ("+" | "-") factor | power
    power  := atom ["**" factor]
    atom   := NUMBER | NAME | FUNCTION "(" expr ("," expr)* ")" | "(" expr ")"

* NUMBER: a finite real Python literal (``2``, ``0.5``, ``1e-3``); no complex, strings, bytes,
  ``None``, ``True``/``False``. Integers become floats: all arithmetic is float64 (no bigints).
* NAME: a coordinate of :data:`VARIABLES` (``x, y, z, t``), a constant of
  :data:`ALLOWED_CONSTANTS` (``pi, e``) or one of the ``parameter_names`` the caller declares.
* FUNCTION: a key of :data:`ALLOWED_FUNCTIONS` (numpy ufuncs), positional arguments only, right arity.
* Not allowed: ``%``, ``//``, ``@``, bit operators, comparisons, ``and/or/not``, conditionals,
  attributes, subscripts, lambdas, comprehensions, containers, keyword or starred arguments,
  assignment expressions. A constant exponent must satisfy ``|p| <= MAX_EXPONENT``.
* Limits: :data:`MAX_LENGTH` characters, :data:`MAX_NODES` nodes, :data:`MAX_DEPTH` nesting levels.

Evaluation follows numpy float64 rules: ``1/0`` gives ``inf`` and ``sqrt(-1)`` gives ``nan`` (with
numpy's RuntimeWarning, never an exception); the flow checks catch non-finite velocities.
Every problem with the text raises :class:`FormulaError` with a one-line message naming the
offending construct and its column.
"""

from __future__ import annotations

import ast
import math
import numbers
import operator
from collections.abc import Callable, Iterable, Mapping
from dataclasses import dataclass, field
from types import MappingProxyType

import numpy as np

from kindyn.errors import KindynError

MAX_LENGTH = 2000
MAX_NODES = 500
MAX_DEPTH = 100
MAX_EXPONENT = 64

ALLOWED_FUNCTIONS: Mapping[str, Callable] = MappingProxyType({
    name: getattr(np, name) for name in (
        "sin", "cos", "tan", "arcsin", "arccos", "arctan", "arctan2",
        "sinh", "cosh", "tanh", "exp", "log", "sqrt", "abs")})
ALLOWED_CONSTANTS: Mapping[str, float] = MappingProxyType({"pi": np.pi, "e": np.e})
VARIABLES = ("x", "y", "z", "t")

_BINARY = {ast.Add: "+", ast.Sub: "-", ast.Mult: "*", ast.Div: "/", ast.Pow: "**"}
_OPERATE = {"+": operator.add, "-": operator.sub, "*": operator.mul, "/": operator.truediv,
            "**": operator.pow}
_REFUSED_OPERATORS = {ast.Mod: "%", ast.FloorDiv: "//", ast.MatMult: "@", ast.LShift: "<<",
                      ast.RShift: ">>", ast.BitOr: "|", ast.BitXor: "^", ast.BitAnd: "&",
                      ast.Not: "not", ast.Invert: "~"}
_CONSTRUCTS = {ast.Attribute: "attribute access", ast.Subscript: "subscript", ast.Lambda: "lambda",
               ast.ListComp: "comprehension", ast.SetComp: "comprehension",
               ast.DictComp: "comprehension", ast.GeneratorExp: "comprehension",
               ast.Compare: "comparison", ast.BoolOp: "'and'/'or'", ast.IfExp: "conditional",
               ast.NamedExpr: "assignment expression", ast.Starred: "starred argument",
               ast.JoinedStr: "f-string"}


class FormulaError(KindynError, ValueError):
    """A formula is not in the grammar of this module (or lacks a parameter value)."""


# The validated tree: ("num", float64) | ("var", name) | ("param", name) | ("neg", node)
#                   | ("bin", symbol, left, right) | ("call", name, (arg, ...)).
_Node = tuple


@dataclass(frozen=True)
class Formula:
    """A validated formula; ``tree`` is private (tuples, immutable), equality is by ``text``."""

    text: str
    tree: _Node = field(repr=False, compare=False)

    def names(self) -> set[str]:
        """The parameter names the formula uses (not coordinates, constants or functions)."""
        return set(_params(self.tree))

    def coordinates(self) -> set[str]:
        """The coordinates of :data:`VARIABLES` the formula uses (``"t" in f.coordinates()``: time-dependent)."""
        return set(_params(self.tree, variables=True)) - self.names()

    def evaluate(self, x, y, z, t, parameters: Mapping[str, float]):
        """The formula at coordinates ``x, y, z`` (broadcastable arrays, e.g. ``(nx,1,1)``,
        ``(1,ny,1)``, ``(1,1,nz)``) and time ``t``; float64 result whose shape is the broadcast of
        the coordinates it uses (0-d for a constant formula: use ``np.broadcast_to`` for a grid)."""
        env = {name: np.asarray(value, dtype=float) for name, value in zip(VARIABLES, (x, y, z, t))}
        for name in sorted(self.names()):
            if name not in parameters:
                raise FormulaError(f"no value for parameter '{name}' in formula {_clip(self.text)!r}")
            value = parameters[name]
            if isinstance(value, bool) or not isinstance(value, numbers.Real):
                raise FormulaError(f"parameter '{name}' = {_clip(repr(value))}: expected a real number")
            env[name] = np.float64(value)
        return _run(self.tree, env)


def parse_formula(text: str, parameter_names: Iterable[str] = ()) -> Formula:
    """Parse and validate ``text``; names other than coordinates and constants must be listed in
    ``parameter_names``. Raises :class:`FormulaError` (see the module docstring for the grammar)."""
    if isinstance(parameter_names, str):
        raise TypeError("parameter_names must be an iterable of names, not a string")
    params = frozenset(parameter_names)
    for name in sorted(params, key=str):
        if not (isinstance(name, str) and name.isidentifier()):
            raise FormulaError(f"parameter name {_clip(repr(name))} is not an identifier")
        if name in VARIABLES or name in ALLOWED_CONSTANTS or name in ALLOWED_FUNCTIONS:
            raise FormulaError(f"parameter name '{name}' is reserved (a coordinate, constant or function)")
    if not isinstance(text, str):
        raise FormulaError(f"formula must be a string, not {type(text).__name__}")
    if not text.strip():
        raise FormulaError("formula is empty")
    if len(text) > MAX_LENGTH:
        raise FormulaError(f"formula is too long ({len(text)} characters, at most {MAX_LENGTH})")
    try:
        expression = ast.parse(text, mode="eval")
    except SyntaxError as error:
        reason = str(error.msg).splitlines()[0] if error.msg else "invalid syntax"
        where = f" at column {error.offset}" if error.offset else ""
        raise FormulaError(f"syntax error{where}: {reason}") from None
    except (ValueError, RecursionError, MemoryError, OverflowError) as error:
        raise FormulaError(f"formula cannot be parsed: {type(error).__name__}") from None
    return Formula(text, _Converter(text, params).convert(expression.body, 1))


class _Converter:
    """Checks an ``ast`` expression against the whitelist and builds the private tree."""

    def __init__(self, text: str, params: frozenset[str]):
        self.text, self.params, self.count = text, params, 0

    def fail(self, node: ast.AST, what: str) -> FormulaError:
        segment = ast.get_source_segment(self.text, node) or type(node).__name__
        lines = self.text.replace("\r\n", "\n").replace("\r", "\n").split("\n")
        line = lines[node.lineno - 1] if node.lineno <= len(lines) else ""
        column = len(line.encode()[: node.col_offset].decode("utf-8", "ignore")) + 1  # bytes -> chars
        where = f"line {node.lineno}, column {column}" if len(lines) > 1 else f"column {column}"
        return FormulaError(f"{what}: {_clip(segment)!r} ({where})")

    def convert(self, node: ast.AST, depth: int) -> _Node:
        self.count += 1
        if self.count > MAX_NODES:
            raise self.fail(node, f"formula too complex (more than {MAX_NODES} nodes)")
        if depth > MAX_DEPTH:
            raise self.fail(node, f"formula nested too deeply (more than {MAX_DEPTH} levels)")
        if isinstance(node, ast.Constant):
            return self.number(node)
        if isinstance(node, ast.Name):
            return self.name(node)
        if isinstance(node, ast.UnaryOp) and isinstance(node.op, (ast.UAdd, ast.USub)):
            operand = self.convert(node.operand, depth + 1)
            return ("neg", operand) if isinstance(node.op, ast.USub) else operand
        if isinstance(node, ast.BinOp) and type(node.op) in _BINARY:
            left, right = self.convert(node.left, depth + 1), self.convert(node.right, depth + 1)
            if isinstance(node.op, ast.Pow) and next(_params(right, variables=True), None) is None:
                with np.errstate(all="ignore"):
                    power = _run(right, {})
                if not abs(power) <= MAX_EXPONENT:
                    raise self.fail(node.right, f"exponent {float(power):.6g} is too large "
                                                f"(at most {MAX_EXPONENT} in absolute value)")
            return ("bin", _BINARY[type(node.op)], left, right)
        if isinstance(node, ast.Call):
            return self.call(node, depth)
        if isinstance(node, (ast.UnaryOp, ast.BinOp)):
            raise self.fail(node, f"operator '{_REFUSED_OPERATORS.get(type(node.op), '?')}' is not allowed")
        raise self.fail(node, f"{_CONSTRUCTS.get(type(node), type(node).__name__)} is not allowed")

    def number(self, node: ast.Constant) -> _Node:
        value = node.value
        if isinstance(value, bool) or not isinstance(value, (int, float)):
            raise self.fail(node, f"only real numbers are allowed as constants, not {type(value).__name__}")
        try:
            number = float(value)
        except OverflowError:
            number = math.inf
        if not math.isfinite(number):
            raise self.fail(node, "number too large")
        return ("num", np.float64(number))

    def name(self, node: ast.Name) -> _Node:
        if node.id in VARIABLES:
            return ("var", node.id)
        if node.id in ALLOWED_CONSTANTS:
            return ("num", np.float64(ALLOWED_CONSTANTS[node.id]))
        if node.id in self.params:
            return ("param", node.id)
        if node.id in ALLOWED_FUNCTIONS:
            raise self.fail(node, f"function '{node.id}' must be called with arguments")
        raise self.fail(node, "unknown name (not x, y, z, t, pi, e, a function or a declared parameter)")

    def call(self, node: ast.Call, depth: int) -> _Node:
        if not isinstance(node.func, ast.Name):
            self.convert(node.func, depth + 1)  # reports attributes, lambdas, ... by name
            raise self.fail(node, "only named functions can be called")
        name = node.func.id
        if name not in ALLOWED_FUNCTIONS:
            known = name in VARIABLES or name in ALLOWED_CONSTANTS or name in self.params
            raise self.fail(node.func, "not a function" if known else "unknown function")
        if node.keywords:
            raise self.fail(node.keywords[0], "keyword arguments are not allowed")
        for arg in node.args:
            if isinstance(arg, ast.Starred):
                raise self.fail(arg, "starred arguments are not allowed")
        arity = ALLOWED_FUNCTIONS[name].nin
        if len(node.args) != arity:
            raise self.fail(node, f"{name} takes {arity} argument{'s' * (arity > 1)}, got {len(node.args)}")
        return ("call", name, tuple(self.convert(arg, depth + 1) for arg in node.args))


def _params(node: _Node, variables: bool = False) -> Iterable[str]:
    """Parameter names in ``node`` (and coordinate names too when ``variables``)."""
    kind = node[0]
    if kind == "param" or (variables and kind == "var"):
        yield node[1]
    elif kind == "neg":
        yield from _params(node[1], variables)
    elif kind == "bin":
        yield from _params(node[2], variables)
        yield from _params(node[3], variables)
    elif kind == "call":
        for arg in node[2]:
            yield from _params(arg, variables)


def _run(node: _Node, env: Mapping[str, np.ndarray]):
    """Our interpreter: float64 numpy arithmetic over the validated tree."""
    kind = node[0]
    if kind == "num":
        return node[1]
    if kind in ("var", "param"):
        return env[node[1]]
    if kind == "neg":
        return -_run(node[1], env)
    if kind == "bin":
        return _OPERATE[node[1]](_run(node[2], env), _run(node[3], env))
    return ALLOWED_FUNCTIONS[node[1]](*[_run(arg, env) for arg in node[2]])


def _clip(text: str, limit: int = 40) -> str:
    return text if len(text) <= limit else text[: limit - 3] + "..."
