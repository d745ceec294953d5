"""Safe arithmetic over named parameters (FORMATS.md section 2).

The grammar, with Python's precedence (so ``-2**2`` is -4 and ``2**-1`` is
0.5; ``**`` binds right to left)::

    sum     := product (("+" | "-") product)*
    product := unary (("*" | "/") unary)*
    unary   := ("+" | "-") unary | power
    power   := atom ("**" unary)?
    atom    := NUMBER | NAME | FUNCTION "(" sum ")" | "(" sum ")"

Constants ``pi`` and ``e``; functions ``sqrt``, ``exp``, ``log`` (natural),
``log10``. A hand-written tokenizer and recursive-descent parser read the
text; nothing is ever passed to ``eval``, ``exec``, ``compile`` or ``ast``.
Input is bounded (length, nesting depth, node count) and every number is a
float, so ``9**9**9`` overflows at once instead of building a huge integer.
"""

from __future__ import annotations

import math
import re
from collections.abc import Mapping
from dataclasses import field
from typing import Any

from ruleguard.errors import InputError
from ruleguard.frozen import record
from ruleguard.location import Location

#: Longest expression text accepted (characters).
MAX_LENGTH = 500
#: Deepest nesting of parentheses / unary operators / powers accepted.
MAX_DEPTH = 40

CONSTANTS: Mapping[str, float] = {"pi": math.pi, "e": math.e}
FUNCTIONS: Mapping[str, Any] = {
    "sqrt": math.sqrt,
    "exp": math.exp,
    "log": math.log,
    "log10": math.log10,
}
#: Names a parameter may not take.
RESERVED = frozenset(CONSTANTS) | frozenset(FUNCTIONS)

_TOKEN = re.compile(
    r"""
    (?P<space>\s+)
  | (?P<number>(?:\d+\.?\d*|\.\d+)(?:[eE][+-]?\d+)?)
  | (?P<name>[A-Za-z_][A-Za-z0-9_]*)
  | (?P<op>\*\*|[-+*/()])
    """,
    re.VERBOSE,
)
_NAME = re.compile(r"^[A-Za-z_][A-Za-z0-9_]*$")


def is_valid_name(name: str) -> bool:
    """True for a name a parameter may take (an identifier, not reserved)."""
    return bool(_NAME.match(name)) and name not in RESERVED


# Parsed tree nodes: ("num", value) | ("name", text) | ("neg", node) |
# ("call", fname, node) | (op, left, right) with op in + - * / **.


@record
class Expression:
    """A parsed expression from an input file.

    Attributes
    ----------
    text:
        The expression as written.
    names:
        Parameter names it uses (constants and functions excluded).
    location:
        Where it stands (file, line, column, key).
    """

    text: str
    names: frozenset[str]
    location: Location
    _tree: tuple = field(default=(), compare=False, repr=False)

    def evaluate(self, values: Mapping[str, float]) -> float:
        """The value with parameters from ``values``.

        Raises
        ------
        InputError
            At :attr:`location`: an unknown name, a domain error (``log`` of
            a non-positive number, ``sqrt`` of a negative one, division by
            zero, a fractional power of a negative number), overflow, or a
            result that is not a finite number.
        """
        missing = sorted(n for n in self.names if n not in values)
        if missing:
            from ruleguard.load.validation import suggestion

            name = missing[0]
            known = sorted(values)
            hint = suggestion(name, known)
            listed = f" (known: {', '.join(known)})" if known and not hint else ""
            raise InputError.at(
                self.location,
                f"unknown name '{name}' in expression '{self.text}'{hint}{listed}",
            )
        try:
            result = _evaluate(self._tree, values)
        except OverflowError:
            raise InputError.at(
                self.location, f"expression '{self.text}' overflows (the result is too large)"
            ) from None
        except ZeroDivisionError:
            raise InputError.at(
                self.location, f"expression '{self.text}' divides by zero"
            ) from None
        except _DomainError as exc:
            raise InputError.at(self.location, f"expression '{self.text}': {exc}") from None
        if not math.isfinite(result):
            raise InputError.at(
                self.location, f"expression '{self.text}' is not a finite number ({result})"
            )
        return result


class _DomainError(ValueError):
    pass


def _evaluate(node: tuple, values: Mapping[str, float]) -> float:
    tag = node[0]
    if tag == "num":
        return node[1]
    if tag == "name":
        name = node[1]
        if name in CONSTANTS:
            return CONSTANTS[name]
        value = float(values[name])
        if not math.isfinite(value):
            raise _DomainError(f"parameter '{name}' is not a finite number")
        return value
    if tag == "neg":
        return -_evaluate(node[1], values)
    if tag == "call":
        argument = _evaluate(node[2], values)
        fname = node[1]
        if fname == "sqrt" and argument < 0:
            raise _DomainError(f"sqrt of a negative number ({argument:g})")
        if fname in ("log", "log10") and argument <= 0:
            raise _DomainError(f"{fname} of a non-positive number ({argument:g})")
        return float(FUNCTIONS[fname](argument))
    left = _evaluate(node[1], values)
    right = _evaluate(node[2], values)
    if tag == "+":
        return left + right
    if tag == "-":
        return left - right
    if tag == "*":
        return left * right
    if tag == "/":
        return left / right
    # "**"
    if left == 0.0 and right < 0:
        raise ZeroDivisionError
    if left < 0 and not float(right).is_integer():
        raise _DomainError(f"a fractional power of a negative number (({left:g})**{right:g})")
    result = left**right
    if isinstance(result, complex):  # pragma: no cover - excluded above
        raise _DomainError("the result is complex")
    return float(result)


class _Parser:
    def __init__(self, text: str, location: Location) -> None:
        self.text = text
        self.location = location
        self.tokens = self._tokenize(text)
        self.index = 0
        self.depth = 0
        self.names: set[str] = set()

    def fail(self, message: str) -> InputError:
        return InputError.at(self.location, f"invalid expression '{self.text}': {message}")

    def _tokenize(self, text: str) -> list[tuple[str, str, int]]:
        tokens: list[tuple[str, str, int]] = []
        position = 0
        while position < len(text):
            hit = _TOKEN.match(text, position)
            if hit is None:
                char = text[position]
                raise self.fail(
                    f"character {char!r} at position {position + 1} is not allowed; "
                    "expressions hold numbers, parameter names, + - * / ** and parentheses"
                )
            kind = hit.lastgroup or ""
            if kind != "space":
                tokens.append((kind, hit.group(), position + 1))
            position = hit.end()
        tokens.append(("end", "", len(text) + 1))
        return tokens

    def peek(self) -> tuple[str, str, int]:
        return self.tokens[self.index]

    def take(self) -> tuple[str, str, int]:
        token = self.tokens[self.index]
        self.index += 1
        return token

    def expect(self, text: str) -> None:
        kind, value, position = self.take()
        if value != text:
            found = "the end" if kind == "end" else f"'{value}'"
            raise self.fail(f"expected '{text}' at position {position}, found {found}")

    def enter(self) -> None:
        self.depth += 1
        if self.depth > MAX_DEPTH:
            raise self.fail(f"nested more than {MAX_DEPTH} levels deep")

    def parse(self) -> tuple:
        tree = self.sum()
        kind, value, position = self.peek()
        if kind != "end":
            raise self.fail(f"unexpected '{value}' at position {position}")
        return tree

    def sum(self) -> tuple:
        node = self.product()
        while self.peek()[1] in ("+", "-") and self.peek()[0] == "op":
            op = self.take()[1]
            node = (op, node, self.product())
        return node

    def product(self) -> tuple:
        node = self.unary()
        while self.peek()[1] in ("*", "/") and self.peek()[0] == "op":
            op = self.take()[1]
            node = (op, node, self.unary())
        return node

    def unary(self) -> tuple:
        kind, value, _ = self.peek()
        if kind == "op" and value in ("+", "-"):
            self.take()
            self.enter()
            operand = self.unary()
            self.depth -= 1
            return ("neg", operand) if value == "-" else operand
        return self.power()

    def power(self) -> tuple:
        base = self.atom()
        if self.peek()[1] == "**":
            self.take()
            self.enter()
            exponent = self.unary()
            self.depth -= 1
            return ("**", base, exponent)
        return base

    def atom(self) -> tuple:
        kind, value, position = self.take()
        if kind == "number":
            number = float(value)
            if not math.isfinite(number):
                raise self.fail(f"number {value} is too large")
            return ("num", number)
        if kind == "name":
            if self.peek()[1] == "(":
                if value not in FUNCTIONS:
                    raise self.fail(
                        f"'{value}' is not a function; allowed: {', '.join(sorted(FUNCTIONS))}"
                    )
                self.take()
                self.enter()
                argument = self.sum()
                self.depth -= 1
                self.expect(")")
                return ("call", value, argument)
            if value in FUNCTIONS:
                raise self.fail(f"function '{value}' needs an argument in parentheses")
            if value not in CONSTANTS:
                self.names.add(value)
            return ("name", value)
        if value == "(":
            self.enter()
            node = self.sum()
            self.depth -= 1
            self.expect(")")
            return node
        found = "the end" if kind == "end" else f"'{value}'"
        raise self.fail(f"expected a number, a name or '(' at position {position}, found {found}")


def parse_expression(text: str, location: Location) -> Expression:
    """Parse ``text`` into an :class:`Expression` located at ``location``.

    Raises
    ------
    InputError
        Anything outside the grammar, empty or over-long text, too deep nesting.
    """
    if not isinstance(text, str):
        raise InputError.at(location, f"expected an expression string, found {text!r}")
    if len(text) > MAX_LENGTH:
        raise InputError.at(
            location, f"expression is {len(text)} characters long; the limit is {MAX_LENGTH}"
        )
    if not text.strip():
        raise InputError.at(location, "empty expression; expected a number or an expression")
    parser = _Parser(text, location)
    tree = parser.parse()
    return Expression(text, frozenset(parser.names), location, tree)


def number_or_expression(value: Any, location: Location) -> float | Expression:
    """A number as float, a string as a parsed :class:`Expression`.

    Raises
    ------
    InputError
        For booleans, non-finite numbers and anything else.
    """
    if isinstance(value, bool):
        raise InputError.at(location, f"expected a number or an expression, found {value}")
    if isinstance(value, (int, float)):
        number = float(value)
        if not math.isfinite(number):
            raise InputError.at(location, f"{value} is not a finite number")
        return number
    if isinstance(value, str):
        return parse_expression(value, location)
    raise InputError.at(location, f"expected a number or an expression, found {value!r}")


def value_of(item: float | Expression, values: Mapping[str, float]) -> float:
    """Evaluate a float-or-expression with parameter ``values``."""
    if isinstance(item, Expression):
        return item.evaluate(values)
    return float(item)


def evaluate_parameters(
    parameters: Mapping[str, float | Expression],
    overrides: Mapping[str, float] | None = None,
) -> dict[str, float]:
    """Values of all parameters of an entry, in dependency order.

    A parameter may be an expression over the entry's other parameters
    (``tau = "L/R"``); ``overrides`` (a variant's values) replace the
    nominal value of the parameters they name, and expressions are then
    evaluated with the overridden values.

    Raises
    ------
    InputError
        A cycle among parameters, an unknown name, or an evaluation error,
        at the location of the offending expression.
    """
    overrides = dict(overrides or {})
    values: dict[str, float] = {}
    state: dict[str, int] = {}  # 1 visiting, 2 done

    def visit(name: str, trail: tuple[str, ...]) -> None:
        if state.get(name) == 2:
            return
        item = parameters[name]
        if state.get(name) == 1:
            cycle = " -> ".join(trail[trail.index(name):] + (name,))
            location = item.location if isinstance(item, Expression) else Location("")
            raise InputError.at(location, f"parameters depend on each other in a cycle: {cycle}")
        state[name] = 1
        if name in overrides:
            values[name] = float(overrides[name])
        elif isinstance(item, Expression):
            for used in sorted(item.names):
                if used in parameters:
                    visit(used, trail + (name,))
            values[name] = item.evaluate(values)
        else:
            values[name] = float(item)
        state[name] = 2

    for name in parameters:
        visit(name, ())
    for name, value in overrides.items():
        values.setdefault(name, float(value))
    return values
