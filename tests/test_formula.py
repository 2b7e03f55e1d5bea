"""Tests of the whitelisted formula evaluator :mod:`kindyn.flows.formula`."""

from __future__ import annotations

import ast
import inspect
import math
import operator
from datetime import timedelta

import numpy as np
import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from kindyn.flows import formula as formula_module
from kindyn.flows.formula import (ALLOWED_CONSTANTS, ALLOWED_FUNCTIONS, MAX_DEPTH, MAX_LENGTH,
                                  MAX_NODES, VARIABLES, Formula, FormulaError, parse_formula)


def grid(n, lengths=(2 * np.pi,) * 3):
    """Broadcastable coordinates x (nx,1,1), y (1,ny,1), z (1,1,nz), no endpoint (design.md 1)."""
    return tuple((np.arange(m) * L / m).reshape([m if a == i else 1 for a in range(3)])
                 for i, (m, L) in enumerate(zip(n, lengths)))


# ABC flow, Dombre et al. 1986, J. Fluid Mech. 167, 353 (kindyn's convention, flows/beltrami.py).
ABC = ("A*sin(k*z) + C*cos(k*y)", "B*sin(k*x) + A*cos(k*z)", "C*sin(k*y) + B*cos(k*x)")


@pytest.mark.parametrize("n", [(5, 4, 6), (8, 8, 8), (7, 7, 7)])
def test_abc_flow_matches_numpy(n):
    A, B, C, k = 1.0, 0.7, 0.4, 2.0
    x, y, z = grid(n)
    expected = (A * np.sin(k * z) + C * np.cos(k * y),
                B * np.sin(k * x) + A * np.cos(k * z),
                C * np.sin(k * y) + B * np.cos(k * x))
    for text, reference in zip(ABC, expected):
        f = parse_formula(text, ["A", "B", "C", "k"])
        value = f.evaluate(x, y, z, 0.0, {"A": A, "B": B, "C": C, "k": k})
        assert value.shape == reference.shape  # broadcast shape of the coordinates used
        np.testing.assert_allclose(np.broadcast_to(value, n), np.broadcast_to(reference, n),
                                   rtol=1e-14, atol=1e-15)


def test_time_dependent_flow_matches_numpy():
    # Galloway & Proctor 1992, Nature 356, 691 (circularly polarised flow): t enters as a scalar.
    text = "sqrt(3/2)*(cos(x + eps*sin(omega*t)) + sin(y + eps*cos(omega*t)))"
    f = parse_formula(text, ["eps", "omega"])
    assert f.names() == {"eps", "omega"}
    x, y, z = grid((6, 5, 4))
    for t in (0.0, 0.3, 2.5):
        expected = np.sqrt(1.5) * (np.cos(x + 1.1 * np.sin(1.3 * t)) + np.sin(y + 1.1 * np.cos(1.3 * t)))
        np.testing.assert_allclose(f.evaluate(x, y, z, t, {"eps": 1.1, "omega": 1.3}), expected,
                                   rtol=1e-14, atol=1e-15)


def test_names_exclude_coordinates_constants_and_functions():
    f = parse_formula("A*sin(k*x) + pi*e*t + y*z + arctan2(B, x)", ["A", "B", "k", "unused"])
    assert f.names() == {"A", "B", "k"}
    assert parse_formula("x").names() == set()


def test_evaluation_is_float64_and_never_raises_on_arithmetic():
    x = np.arange(3).reshape(3, 1, 1)  # integer coordinates are converted to float
    np.testing.assert_array_equal(parse_formula("x**-1").evaluate(x + 1, 0, 0, 0, {}), 1.0 / (x + 1))
    with np.errstate(all="ignore"):
        assert parse_formula("1/t").evaluate(0, 0, 0, 0, {}) == math.inf
        assert np.isnan(parse_formula("sqrt(t - 1)").evaluate(0, 0, 0, 0, {}))
        assert parse_formula("x**A", ["A"]).evaluate(2.0, 0, 0, 0, {"A": 1e9}) == math.inf  # no bigint
    assert parse_formula("2**64 + x**-64").evaluate(1.0, 0, 0, 0, {}) == 2.0**64 + 1.0
    assert parse_formula("-x**2").evaluate(3.0, 0, 0, 0, {}) == -9.0  # Python precedence
    assert parse_formula("2**3**2").evaluate(0, 0, 0, 0, {}) == 512.0  # right-associative
    assert float(parse_formula("1").evaluate(0, 0, 0, 0, {})) == 1.0


def test_evaluate_checks_parameter_values():
    f = parse_formula("A*x", ["A"])
    with pytest.raises(FormulaError, match="no value for parameter 'A'"):
        f.evaluate(1.0, 0, 0, 0, {})
    for bad in ("1", True, None, 1j):
        with pytest.raises(FormulaError, match="parameter 'A'.*expected a real number"):
            f.evaluate(1.0, 0, 0, 0, {"A": bad})
    assert f.evaluate(2.0, 0, 0, 0, {"A": np.int64(3)}) == 6.0


def test_formula_is_frozen_and_compares_by_text():
    f = parse_formula("sin(x)")
    assert f == parse_formula("sin(x)") and hash(f) == hash(parse_formula("sin(x)"))
    assert "tree" not in repr(f)
    with pytest.raises(AttributeError):
        f.text = "cos(x)"


@pytest.mark.parametrize("names, pattern", [
    (["x"], "reserved"), (["pi"], "reserved"), (["sin"], "reserved"),
    (["not a name"], "not an identifier"), ([3], "not an identifier")])
def test_parameter_names_are_checked(names, pattern):
    with pytest.raises(FormulaError, match=pattern):
        parse_formula("1", names)


def test_parameter_names_must_not_be_a_string():
    with pytest.raises(TypeError):
        parse_formula("A", "A")


HOSTILE = [
    ("__import__('os').system('ls')", "attribute access is not allowed"),
    ("__import__('os')", r"unknown function: '__import__' \(column 1\)"),
    ("x.__class__", "attribute access is not allowed: 'x.__class__' \\(column 1\\)"),
    ("(lambda: 1)()", "lambda is not allowed"),
    ("[i for i in range(9)]", "comprehension is not allowed"),
    ("9**9**9", "exponent .* too large"),
    ("2**1000", "exponent 1000 is too large"),
    ("x**-65", "exponent -65 is too large"),
    ("x**(1e308*10)", "exponent inf is too large"),
    ("'a'*10", "only real numbers .* not str"),
    ("b'a'", "only real numbers .* not bytes"),
    ("None", "only real numbers .* not NoneType"),
    ("True*x", "only real numbers .* not bool"),
    ("1j*x", "only real numbers .* not complex"),
    ("1e400", "number too large"),
    ("9" * 400, "number too large"),
    ("x[0]", "subscript is not allowed"),
    ("open('f')", "unknown function: 'open'"),
    ("sin(x, y)", "sin takes 1 argument, got 2"),
    ("arctan2(x)", "arctan2 takes 2 arguments, got 1"),
    ("sin", "function 'sin' must be called"),
    ("x + cos", "function 'cos' must be called.*column 5"),
    ("x(1)", "not a function: 'x'"),
    ("pi(1)", "not a function: 'pi'"),
    ("(x + 1)(2)", "only named functions can be called"),
    ("y if x else z", "conditional is not allowed"),
    ("x == y", "comparison is not allowed"),
    ("x and y", "'and'/'or' is not allowed"),
    ("not x", "operator 'not' is not allowed"),
    ("x % 2", "operator '%' is not allowed"),
    ("x // 2", "operator '//' is not allowed"),
    ("x ^ 2", r"operator '\^' is not allowed"),
    ("a := 1", "syntax error"),
    ("(a := 1)", "assignment expression is not allowed"),
    ("(x, y)", "Tuple is not allowed"),
    ("{x: 1}", "Dict is not allowed"),
    ("f'{x}'", "f-string is not allowed"),
    ("sin(x=1)", "keyword arguments are not allowed: 'x=1'"),
    ("sin(*x)", "starred arguments are not allowed"),
    ("sin(**x)", "keyword arguments are not allowed"),
    ("q + 1", "unknown name .*: 'q' \\(column 1\\)"),
    ("(x +\n q)", "unknown name .*line 2, column 2"),
    ("x;y", "syntax error"),
    ("import os", "syntax error"),
    ("x\0", "syntax error|cannot be parsed"),
    ("\ud800", "cannot be parsed"),
    ("x" * 10**6, f"too long \\(1000000 characters, at most {MAX_LENGTH}\\)"),
    ("(" * 5000 + "x" + ")" * 5000, "too long"),
    ("(" * 900 + "x" + ")" * 900, "syntax error.*nested parentheses"),
    ("-" * 1999 + "x", "nested too deeply|cannot be parsed|syntax error"),
    ("+".join(["x"] * (MAX_DEPTH + 1)), f"nested too deeply \\(more than {MAX_DEPTH} levels\\)"),
    ("", "empty"),
    (" \n ", "empty"),
]


@pytest.mark.parametrize("text, pattern", HOSTILE, ids=[repr(t[:20]) for t, _ in HOSTILE])
def test_hostile_inputs_raise_formula_error(text, pattern):
    with pytest.raises(FormulaError, match=pattern) as info:
        parse_formula(text, ["A", "k"])
    message = str(info.value)
    assert "\n" not in message and len(message) < 200
    assert isinstance(info.value, ValueError)


@pytest.mark.parametrize("value", [None, 5, b"x", ["x"]])
def test_non_string_formula(value):
    with pytest.raises(FormulaError, match="must be a string"):
        parse_formula(value)


def test_too_many_nodes():
    chain = "*".join(["x"] * (MAX_DEPTH // 2))  # shallow but large: a short sum of long products
    text = "+".join([f"({chain})"] * (MAX_NODES // MAX_DEPTH + 2))
    assert len(text) <= MAX_LENGTH
    with pytest.raises(FormulaError, match=f"more than {MAX_NODES} nodes"):
        parse_formula(text)


def test_module_never_calls_eval_exec_compile_or_import():
    tree = ast.parse(inspect.getsource(formula_module))
    called = {node.func.id for node in ast.walk(tree)
              if isinstance(node, ast.Call) and isinstance(node.func, ast.Name)}
    assert not called & {"eval", "exec", "compile", "__import__"}
    assert set(ALLOWED_FUNCTIONS) >= {"sin", "cos", "exp", "sqrt", "arctan2"}
    assert all(isinstance(f, np.ufunc) for f in ALLOWED_FUNCTIONS.values())  # arity is ``nin``
    assert set(ALLOWED_CONSTANTS) == {"pi", "e"} and VARIABLES == ("x", "y", "z", "t")


# --- property tests ---------------------------------------------------------------------------

FORMULA_CHARS = "xyztAkpie0123456789.+-*/()[]{},;:=<>!%^&|~'\"_ \n\\@sincoqrtabhlgmdfj"
FAST = settings(deadline=timedelta(milliseconds=300), max_examples=300, derandomize=True,
                suppress_health_check=[HealthCheck.too_slow])
X, Y, Z = grid((3, 4, 5))
PARAMS = {"A": 1.3, "k": 2.0}


@FAST
@given(st.one_of(st.text(max_size=200), st.text(alphabet=FORMULA_CHARS, max_size=80)))
def test_any_text_gives_formula_or_formula_error(text):
    try:
        f = parse_formula(text, PARAMS)
    except FormulaError as error:
        assert "\n" not in str(error)
        return
    assert isinstance(f, Formula) and f.names() <= set(PARAMS)
    with np.errstate(all="ignore"):
        np.asarray(f.evaluate(X, Y, Z, 0.5, PARAMS), dtype=float)


_BINARY = {"+": operator.add, "-": operator.sub, "*": operator.mul, "/": operator.truediv}
_UNARY_FUNCTIONS = sorted(name for name, f in ALLOWED_FUNCTIONS.items() if f.nin == 1)


def _leaf(name):
    return st.just((name, lambda env: env[name]))


LEAVES = st.one_of(
    *[_leaf(name) for name in ("x", "y", "z", "t", "A", "k")],
    st.sampled_from(sorted(ALLOWED_CONSTANTS)).map(
        lambda c: (c, lambda env: np.float64(ALLOWED_CONSTANTS[c]))),
    st.integers(0, 99).map(lambda n: (str(n), lambda env: np.float64(n))),
    st.floats(1e-3, 1e3).map(lambda v: (repr(v), lambda env: np.float64(v))))


def _extend(children):
    """One grammar rule applied to sub-expressions: (text, reference) pairs, fully parenthesised."""
    pair = st.tuples(children, children)
    return st.one_of(
        st.tuples(pair, st.sampled_from(sorted(_BINARY))).map(
            lambda p: (f"({p[0][0][0]}) {p[1]} ({p[0][1][0]})",
                       lambda env: _BINARY[p[1]](p[0][0][1](env), p[0][1][1](env)))),
        st.tuples(children, st.integers(-4, 4)).map(
            lambda p: (f"({p[0][0]})**{p[1]}", lambda env: p[0][1](env) ** np.float64(p[1]))),
        st.tuples(children, st.sampled_from(["x", "A"])).map(
            lambda p: (f"({p[0][0]})**{p[1]}", lambda env: p[0][1](env) ** env[p[1]])),
        children.map(lambda c: (f"-({c[0]})", lambda env: -c[1](env))),
        children.map(lambda c: (f"+({c[0]})", c[1])),
        st.tuples(children, st.sampled_from(_UNARY_FUNCTIONS)).map(
            lambda p: (f"{p[1]}({p[0][0]})", lambda env: getattr(np, p[1])(p[0][1](env)))),
        pair.map(lambda p: (f"arctan2({p[0][0]}, {p[1][0]})",
                            lambda env: np.arctan2(p[0][1](env), p[1][1](env)))))


EXPRESSIONS = st.recursive(LEAVES, _extend, max_leaves=12)


@FAST
@given(EXPRESSIONS, st.floats(-3, 3))
def test_random_valid_expressions_match_numpy(expression, t):
    text, reference = expression
    f = parse_formula(text, PARAMS)
    env = {"x": X, "y": Y, "z": Z, "t": np.asarray(t), **{k: np.float64(v) for k, v in PARAMS.items()}}
    with np.errstate(all="ignore"):
        expected = reference(env)
        value = f.evaluate(X, Y, Z, t, PARAMS)
    # Same float64 operations in the same order, so agreement is to the last bit.
    np.testing.assert_allclose(np.broadcast_to(value, (3, 4, 5)), np.broadcast_to(expected, (3, 4, 5)),
                               rtol=1e-15, atol=0, equal_nan=True)
