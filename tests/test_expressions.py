"""Safe expressions (ruleguard.load.expressions, FORMATS.md section 2).

Reference: Python's own arithmetic (the contract says "with Python's
precedence"), evaluated here by the ``ast`` module on trees that contain
only whitelisted nodes, and the ``math`` module for functions. Hypothesis
builds random expressions from the grammar and compares the two.
"""

from __future__ import annotations

import ast
import math
import operator

import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from ruleguard.errors import InputError
from ruleguard.load.expressions import (
    MAX_DEPTH,
    MAX_LENGTH,
    Expression,
    evaluate_parameters,
    is_valid_name,
    number_or_expression,
    parse_expression,
)
from ruleguard.location import Location

HERE = Location("plants.toml", 7, 16, "plants.motor.denominator.0")


def value(text: str, **values: float) -> float:
    return parse_expression(text, HERE).evaluate(values)


@pytest.mark.parametrize(
    "text, expected",
    [
        ("-2**2", -4.0),  # Python: unary minus binds looser than **
        ("2**-1", 0.5),
        ("2**3**2", 512.0),  # ** is right-associative
        ("(2**3)**2", 64.0),
        ("1 - 2 - 3", -4.0),  # left-associative
        ("8 / 4 / 2", 1.0),
        ("2 + 3 * 4", 14.0),
        ("--3", 3.0),
        ("+3", 3.0),
        ("1e3", 1000.0),
        (".5", 0.5),
        ("5.", 5.0),
        ("2.5E-3", 0.0025),
        ("2*pi*50", 2 * math.pi * 50),
        ("e", math.e),
        ("sqrt(16)", 4.0),
        ("exp(1)", math.e),
        ("log(e**2)", 2.0),
        ("log10(1000)", 3.0),
        ("(-8)**2", 64.0),
        ("(-2)**3", -8.0),
        ("0**0", 1.0),
    ],
)
def test_values_follow_python(text, expected):
    assert value(text) == pytest.approx(expected, rel=1e-15)


def test_names_and_parameters():
    expression = parse_expression("R / L + 2*pi*f_c", HERE)
    assert expression.names == frozenset({"R", "L", "f_c"})  # constants are not names
    assert expression.evaluate({"R": 1.3, "L": 4.2e-4, "f_c": 10.0}) == pytest.approx(
        1.3 / 4.2e-4 + 2 * math.pi * 10.0
    )
    assert expression.location == HERE and expression.text == "R / L + 2*pi*f_c"


@pytest.mark.parametrize(
    "text, word",
    [
        ("__import__('os').system('x')", "not allowed"),
        ("L.__class__", "not allowed"),
        ("[1, 2]", "not allowed"),
        ("lambda: 1", "':'"),  # 'lambda' would be a name, then ':' is refused
        ("a if b else c", "unexpected"),
        ("open(1)", "not a function"),
        ("sqrt", "needs an argument"),
        ("sqrt(1, 2)", "not allowed"),
        ("1 +", "expected a number"),
        ("(1", "expected ')'"),
        ("1)", "unexpected"),
        ("", "empty"),
        ("   ", "empty"),
        ("2 3", "unexpected"),
        ("1e999", "too large"),
        ("x @ y", "not allowed"),
        ("x // y", "expected a number"),
        ("x % y", "not allowed"),
    ],
)
def test_anything_outside_the_grammar_is_an_input_error(text, word):
    with pytest.raises(InputError) as info:
        parse_expression(text, HERE)
    assert word in info.value.message
    assert info.value.location == HERE


@pytest.mark.parametrize(
    "text, values, word",
    [
        ("x + y", {"x": 1.0}, "unknown name 'y'"),
        ("Rs", {"R": 1.0}, "did you mean 'R'"),
        ("1/0", {}, "divides by zero"),
        ("1/(a-a)", {"a": 3.0}, "divides by zero"),
        ("0**-1", {}, "divides by zero"),
        ("log(0)", {}, "non-positive"),
        ("log10(-1)", {}, "non-positive"),
        ("sqrt(-4)", {}, "negative"),
        ("(-8)**(1/3)", {}, "fractional power"),
        ("exp(1000)", {}, "overflows"),
        ("9**9**9", {}, "overflows"),
        ("10.0**400", {}, "overflows"),
        ("1e308*10", {}, "not a finite number"),
        ("x", {"x": float("nan")}, "not a finite"),
    ],
)
def test_evaluation_errors_are_located(text, values, word):
    with pytest.raises(InputError) as info:
        parse_expression(text, HERE).evaluate(values)
    assert word in info.value.message
    assert info.value.location == HERE


def test_guards_on_size():
    with pytest.raises(InputError, match="limit"):
        parse_expression("1+" * MAX_LENGTH + "1", HERE)
    deep = "(" * (MAX_DEPTH + 1) + "1" + ")" * (MAX_DEPTH + 1)
    with pytest.raises(InputError, match="nested"):
        parse_expression(deep, HERE)
    unary = "-" * (MAX_DEPTH + 1) + "1"
    with pytest.raises(InputError, match="nested"):
        parse_expression(unary, HERE)
    ok = "(" * (MAX_DEPTH - 1) + "1" + ")" * (MAX_DEPTH - 1)
    assert parse_expression(ok, HERE).evaluate({}) == 1.0
    long_sum = "+".join(["1"] * 240)  # long but flat: fine
    assert parse_expression(long_sum, HERE).evaluate({}) == 240.0


def test_number_or_expression():
    assert number_or_expression(3, HERE) == 3.0 and isinstance(number_or_expression(3, HERE), float)
    assert isinstance(number_or_expression("2*L", HERE), Expression)
    for bad in (True, None, [1.0], float("inf"), float("nan")):
        with pytest.raises(InputError):
            number_or_expression(bad, HERE)


def test_reserved_names():
    assert is_valid_name("R_winding")
    for name in ("pi", "e", "sqrt", "exp", "log", "log10", "1abc", "a-b", ""):
        assert not is_valid_name(name)


def test_parameters_in_dependency_order_with_overrides():
    parameters = {
        "tau": parse_expression("L/R", HERE),
        "L": 2.0e-3,
        "R": parse_expression("2*R0", HERE),
        "R0": 0.5,
    }
    assert evaluate_parameters(parameters) == pytest.approx(
        {"tau": 2.0e-3, "L": 2.0e-3, "R": 1.0, "R0": 0.5}
    )
    varied = evaluate_parameters(parameters, {"R0": 1.0})
    assert varied["R"] == 2.0 and varied["tau"] == pytest.approx(1.0e-3)
    overridden = evaluate_parameters(parameters, {"R": 4.0})  # the variant wins over the expression
    assert overridden["tau"] == pytest.approx(5.0e-4)


def test_parameter_cycle_is_an_error():
    parameters = {"a": parse_expression("b+1", HERE), "b": parse_expression("2*a", HERE)}
    with pytest.raises(InputError, match="cycle"):
        evaluate_parameters(parameters)


# ------------------------------------------------------------- random expressions

_BINARY = {ast.Add: operator.add, ast.Sub: operator.sub, ast.Mult: operator.mul,
           ast.Div: operator.truediv, ast.Pow: operator.pow}
_FUNCTIONS = {"sqrt": math.sqrt, "exp": math.exp, "log": math.log, "log10": math.log10}


def _reference(node: ast.AST, env: dict) -> float:
    """Python's meaning of a whitelisted expression tree (the independent reference)."""
    if isinstance(node, ast.Expression):
        return _reference(node.body, env)
    if isinstance(node, ast.Constant) and isinstance(node.value, (int, float)):
        return float(node.value)
    if isinstance(node, ast.Name):
        return {"pi": math.pi, "e": math.e, **env}[node.id]
    if isinstance(node, ast.UnaryOp) and isinstance(node.op, (ast.USub, ast.UAdd)):
        operand = _reference(node.operand, env)
        return -operand if isinstance(node.op, ast.USub) else operand
    if isinstance(node, ast.BinOp) and type(node.op) in _BINARY:
        return _BINARY[type(node.op)](_reference(node.left, env), _reference(node.right, env))
    if isinstance(node, ast.Call) and isinstance(node.func, ast.Name):
        return _FUNCTIONS[node.func.id](_reference(node.args[0], env))
    raise AssertionError(f"not whitelisted: {ast.dump(node)}")


_atoms = st.one_of(
    st.integers(0, 99).map(str),
    st.floats(0.01, 100.0, allow_nan=False).map(lambda x: f"{x:.3g}"),
    st.sampled_from(["a", "b", "pi", "e"]),
)


def _extend(children):
    return st.one_of(
        st.tuples(children, st.sampled_from(["+", "-", "*", "/", "**"]), children).map(
            lambda t: f"{t[0]} {t[1]} {t[2]}"
        ),
        children.map(lambda c: f"({c})"),
        children.map(lambda c: f"-{c}"),
        st.tuples(st.sampled_from(["sqrt", "exp", "log", "log10"]), children).map(
            lambda t: f"{t[0]}({t[1]})"
        ),
    )


@settings(max_examples=300, deadline=None)
@given(st.recursive(_atoms, _extend, max_leaves=12))
def test_random_expressions_match_python(text):
    env = {"a": 1.7, "b": 0.3}
    try:
        expected = _reference(ast.parse(text, mode="eval"), env)
        if isinstance(expected, complex) or not math.isfinite(expected):
            raise ValueError
    except (ValueError, ZeroDivisionError, OverflowError, TypeError):
        with pytest.raises(InputError):
            parse_expression(text, HERE).evaluate(env)
        return
    assert parse_expression(text, HERE).evaluate(env) == pytest.approx(expected, rel=1e-12)
