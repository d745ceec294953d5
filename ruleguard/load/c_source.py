"""Numeric parameters from C source (``.h``, ``.hpp``, ``.c``), read as written.

ruleguard reads a C file with the tree-sitter C grammar (a real parser; no
preprocessor or compiler is ever run) and takes a value from three kinds of
file-scope definition:

* object-like macros: ``#define PITCH_KP 0.35f`` -> ``PITCH_KP``;
* declarations with an initialiser, ``const`` or not:
  ``static const float pitch_kp = 0.35f;`` -> ``pitch_kp``;
* initialisers of structs and arrays: ``const pid_gains_t pitch = { .kp =
  0.35f };`` -> ``pitch.kp``; ``pitch_gains[2]`` -> ``pitch_gains.2``; arrays
  of structs ``axes.0.kp``. Positional struct items take the member names
  from the ``struct`` definition when it is in the same file (a ``typedef``
  or a tagged ``struct``); otherwise they are numbered like array items
  (``roll.0``, ``roll.1``).

A value is a numeric literal (decimal, octal and hex integers with ``u``/``l``
suffixes, decimal and hex floats with ``f``/``F``/``l``/``L`` suffixes), a
unary ``-``/``+`` of one, a cast to ``float`` or ``double``, or constant
arithmetic of them with ``+ - * /`` and parentheses (C rules: integer
division truncates). Anything else (another symbol, a function call, a
string) is kept as :class:`~ruleguard.load.sources.Unreadable` and becomes an
error at the file, line and column of the offending token, naming the
symbol, as soon as a binding uses it. The suffix ``f`` does not round the
value: single-precision rounding is what ``numeric_format = "float32"``
checks.

Conditional blocks: an include guard (``#ifndef X`` / ``#define X`` / ...
``#endif`` with no ``#else``) and the ``#ifdef __cplusplus`` / ``extern "C"``
wrapper are read through. Any other ``#if``/``#ifdef``/``#ifndef`` is not
decided unless the binding gives ``macros = { NAME = value, ... }``: then
the conditions are evaluated as the C preprocessor does (integers; names the
binding or the file defines, others 0; ``defined``, ``!``, ``&&``, ``||``,
comparisons, ``+ - * / %``) and only the chosen branch is read. Without
``macros`` the symbols defined inside such a block are unreadable.

A name defined twice among the definitions read is an input error, and so
is any C syntax error in the file. Every value's key path maps to the line
and column of its literal (a struct or array maps to its name).
"""

from __future__ import annotations

import bisect
import re
from collections.abc import Mapping
from typing import Any

from ruleguard.errors import InputError
from ruleguard.load.sources import Document, KeyPath, Unreadable, format_key, located_document
from ruleguard.location import Location

__all__ = ["parse_c", "read_number_literal"]

#: Deepest initialiser braces, expression and ``#if`` nesting read.
MAX_DEPTH = 64

_PARSER: list = []

_INT = re.compile(
    r"^(0[xX][0-9a-fA-F]+|0[bB][01]+|0[0-7]*|[1-9][0-9]*)([uU]?[lL]{0,2}|[lL]{1,2}[uU])$"
)
_FLOAT = re.compile(r"^((?:\d+\.\d*|\.\d+)(?:[eE][+-]?\d+)?|\d+[eE][+-]?\d+)[fFlL]?$")
_HEX_FLOAT = re.compile(
    r"^(0[xX](?:[0-9a-fA-F]+\.?[0-9a-fA-F]*|\.[0-9a-fA-F]+)[pP][+-]?\d+)[fFlL]?$"
)
_FLOAT_TYPES = ("float", "double", "long double")
_CPLUSPLUS = re.compile(
    r'^[ \t]*#[ \t]*ifdef[ \t]+__cplusplus[ \t]*\n'
    r'(?:[ \t]*(?:extern[ \t]+"C"[ \t]*\{|\})?[ \t]*(?://[^\n]*)?\n)*?'
    r'[ \t]*#[ \t]*endif[^\n]*$',
    re.MULTILINE,
)
_MACRO_PREFIX = b"static const double __ruleguard_value = "


class _NotRead(Exception):
    """A value ruleguard does not read: message and byte offset of the token."""

    def __init__(self, message: str, offset: int) -> None:
        super().__init__(message)
        self.message = message
        self.offset = offset


def read_number_literal(text: str) -> int | float | None:
    """The value of a C numeric literal, or ``None`` if ``text`` is not one.

    Integers keep their type (``0x1F`` -> 31, ``010`` -> 8 as C reads octal);
    floats are read as written (``0.35f`` -> 0.35).
    """
    if text[:1] in ("-", "+"):  # the grammar folds a sign into the literal
        value = read_number_literal(text[1:].lstrip())
        return None if value is None else (-value if text[0] == "-" else value)
    hit = _INT.match(text)
    if hit:
        digits = hit.group(1)
        if digits[:2] in ("0x", "0X"):
            return int(digits[2:], 16)
        if digits[:2] in ("0b", "0B"):
            return int(digits[2:], 2)
        if len(digits) > 1 and digits[0] == "0":
            return int(digits[1:], 8)
        return int(digits)
    hit = _FLOAT.match(text)
    if hit:
        return float(hit.group(1))
    hit = _HEX_FLOAT.match(text)
    if hit:
        return float.fromhex(hit.group(1))
    return None


def _parser() -> Any:
    if not _PARSER:
        import tree_sitter
        import tree_sitter_c

        _PARSER.append(tree_sitter.Parser(tree_sitter.Language(tree_sitter_c.language())))
    return _PARSER[0]


def _blank(match: re.Match) -> str:
    return re.sub(r"[^\n]", " ", match.group(0))


def parse_c(name: str, text: str, macros: Mapping[str, int] | None = None) -> Document:
    """Parse C ``text`` (file ``name``) into key path -> value, with positions.

    Parameters
    ----------
    name:
        File name relative to the project folder (for locations).
    text:
        The file's text.
    macros:
        The binding's choice of ``#if`` branches (``None``: no choice).

    Raises
    ------
    InputError
        A C syntax error or a name defined twice.
    """
    reader = _Reader(name, text, macros)
    try:
        return reader.read()
    except RecursionError:
        raise InputError(name, 1, 1, "", "C nesting is too deep") from None


class _Reader:
    def __init__(self, name: str, text: str, macros: Mapping[str, int] | None) -> None:
        self.name = name
        self.text = text
        self.raw = text.encode("utf-8")
        self.starts = [0] + [m.end() for m in re.finditer(b"\n", self.raw)]
        self.macros = dict(macros) if macros is not None else None
        self.data: dict[str, Any] = {}
        self.positions: dict[KeyPath, tuple[int, int]] = {}
        self.lines: dict[str, int] = {}  # name -> line of its definition
        self.defined: dict[str, Any] = {}  # macros defined so far (for #if)
        self.types: dict[str, Any] = {}  # typedef / struct tag -> shape

    # ------------------------------------------------------------ positions
    def point(self, offset: int) -> tuple[int, int]:
        row = bisect.bisect_right(self.starts, offset) - 1
        start = self.starts[row]
        column = len(self.raw[start:offset].decode("utf-8", "replace"))
        return row + 1, column + 1

    def location(self, offset: int, path: KeyPath) -> Location:
        line, column = self.point(offset)
        return Location(self.name, line, column, format_key(path))

    # ------------------------------------------------------------ reading
    def read(self) -> Document:
        source = _CPLUSPLUS.sub(_blank, self.text)
        tree = _parser().parse(source.encode("utf-8"))
        if tree.root_node.has_error:
            self._syntax_error(tree.root_node)
        self._walk(tree.root_node.children, None, 0)
        return located_document(self.name, self.text, "c", self.data, self.positions)

    def _syntax_error(self, root: Any) -> None:
        stack = [root]
        while stack:
            node = stack.pop()
            if node.is_missing:
                line, column = self.point(node.start_byte)
                raise InputError(
                    self.name, line, column, "", f"C syntax error: missing '{node.type}'"
                )
            if node.type == "ERROR":
                line, column = self.point(node.start_byte)
                token = node.text.decode("utf-8", "replace").split("\n")[0].strip()[:40]
                raise InputError(
                    self.name, line, column, "", f"C syntax error: unexpected '{token}'"
                )
            stack.extend(reversed(node.children))
        raise InputError(self.name, 1, 1, "", "C syntax error")  # pragma: no cover

    def _walk(self, nodes: Any, undecided: str | None, depth: int) -> None:
        if depth > MAX_DEPTH:
            raise InputError(self.name, 1, 1, "", "C conditional blocks are nested too deeply")
        for node in nodes:
            kind = node.type
            if kind == "preproc_def":
                self._define(node, undecided)
            elif kind == "declaration":
                self._declaration(node, undecided)
            elif kind == "type_definition":
                self._typedef(node)
            elif kind in ("preproc_if", "preproc_ifdef"):
                self._conditional(node, undecided, depth)
            elif kind == "linkage_specification":
                body = node.child_by_field_name("body")
                if body is not None:
                    self._walk(body.children, undecided, depth + 1)
            elif kind == "struct_specifier":
                self._struct_shape(node)

    def _store(self, name: str, value: Any, offset: int, line: int, undecided: str | None) -> None:
        if undecided is not None:
            value = Unreadable(
                self.location(offset, (name,)),
                f"'{name}' is defined inside {undecided}; ruleguard runs no preprocessor: "
                "choose the branch with macros = { NAME = value, ... } in the controller binding",
            )
        if name in self.data:
            existing = self.data[name]
            if undecided is not None or (
                isinstance(existing, Unreadable) and "is defined inside" in existing.message
            ):
                # a definition in an undecided block: whether the name is
                # redefined is not known, so it stays unreadable
                self.data[name] = existing if isinstance(existing, Unreadable) else value
                return
            first = self.lines[name]
            loc = self.location(offset, (name,))
            raise InputError.at(
                loc,
                f"'{name}' is defined twice (line {first} and line {loc.line}); "
                "ruleguard takes one value per name",
            )
        self.data[name] = value
        self.lines[name] = line
        self.positions.setdefault((name,), self.point(offset))

    # ------------------------------------------------------------ #define
    def _define(self, node: Any, undecided: str | None) -> None:
        name_node = node.child_by_field_name("name")
        value_node = node.child_by_field_name("value")
        name = name_node.text.decode("utf-8")
        line = name_node.start_point[0] + 1
        if value_node is None:
            if undecided is None:
                self.defined[name] = None
            value: Any = Unreadable(
                self.location(name_node.start_byte, (name,)),
                f"'{name}' is defined without a value",
            )
            self._store(name, value, name_node.start_byte, line, undecided)
            return
        body = value_node.text.replace(b"\\\r\n", b"   ").replace(b"\\\n", b"  ")
        synthetic = _MACRO_PREFIX + body + b"\n;\n"
        shift = value_node.start_byte - len(_MACRO_PREFIX)
        tree = _parser().parse(synthetic)
        declaration = tree.root_node.named_children[0] if tree.root_node.named_children else None
        declarator = (
            declaration.child_by_field_name("declarator") if declaration is not None else None
        )
        expression = declarator.child_by_field_name("value") if declarator is not None else None
        start = value_node.start_byte
        if tree.root_node.has_error or expression is None:
            shown = value_node.text.decode("utf-8", "replace").strip()
            value = Unreadable(
                self.location(start, (name,)),
                f"'{name}' = '{shown}' is not a C expression ruleguard reads",
            )
            offset = start
        else:
            offset = expression.start_byte + shift
            value = self._scalar_or_unreadable(expression, (name,), shift)
        if undecided is None and not isinstance(value, Unreadable):
            self.defined[name] = value
        self._store(name, value, offset, line, undecided)

    # ------------------------------------------------------------ declarations
    def _declaration(self, node: Any, undecided: str | None) -> None:
        base = self._type_shape(node.child_by_field_name("type"))
        for declarator in node.children_by_field_name("declarator"):
            if declarator.type != "init_declarator":
                continue
            target = declarator.child_by_field_name("declarator")
            value = declarator.child_by_field_name("value")
            shape = base
            while target is not None and target.type == "array_declarator":
                shape = ("array", shape)
                target = target.child_by_field_name("declarator")
            if target is None or target.type != "identifier" or value is None:
                continue  # pointers, functions: no parameters
            name = target.text.decode("utf-8")
            result = self._value(value, shape, (name,), 0, 0)
            if isinstance(result, (dict, list)):
                offset = target.start_byte
                self.positions[(name,)] = self.point(offset)
            else:
                offset = value.start_byte
            self._store(name, result, offset, target.start_point[0] + 1, undecided)

    def _typedef(self, node: Any) -> None:
        shape = self._type_shape(node.child_by_field_name("type"))
        for declarator in node.children_by_field_name("declarator"):
            if declarator.type == "type_identifier":
                self.types[declarator.text.decode("utf-8")] = shape

    def _struct_shape(self, node: Any) -> Any:
        body = node.child_by_field_name("body")
        tag = node.child_by_field_name("name")
        if body is None:
            return self.types.get(f"struct {tag.text.decode('utf-8')}") if tag else None
        members: list[tuple[str, Any]] = []
        for field in body.named_children:
            if field.type != "field_declaration":
                continue
            field_shape = self._type_shape(field.child_by_field_name("type"))
            for declarator in field.children_by_field_name("declarator"):
                shape = field_shape
                while declarator is not None and declarator.type == "array_declarator":
                    shape = ("array", shape)
                    declarator = declarator.child_by_field_name("declarator")
                if declarator is not None and declarator.type == "field_identifier":
                    members.append((declarator.text.decode("utf-8"), shape))
        shape = ("struct", tuple(members))
        if tag is not None:
            self.types[f"struct {tag.text.decode('utf-8')}"] = shape
        return shape

    def _type_shape(self, node: Any) -> Any:
        if node is None:
            return None
        if node.type in ("primitive_type", "sized_type_specifier"):
            return ("scalar",)
        if node.type == "type_identifier":
            name = node.text.decode("utf-8")
            if re.match(r"^u?int\d+_t$|^float\d*_t$|^size_t$", name):
                return ("scalar",)
            return self.types.get(name)
        if node.type == "struct_specifier":
            return self._struct_shape(node)
        return None

    # ------------------------------------------------------------ values
    def _value(self, node: Any, shape: Any, path: KeyPath, shift: int, depth: int) -> Any:
        if node.type != "initializer_list":
            value = self._scalar_or_unreadable(node, path, shift)
            self.positions[path] = self.point(node.start_byte + shift)
            return value
        self.positions[path] = self.point(node.start_byte + shift)
        if depth >= MAX_DEPTH:
            return Unreadable(
                self.location(node.start_byte, path),
                f"'{format_key(path)}': initialiser braces are nested too deeply",
            )
        members = shape[1] if shape and shape[0] == "struct" else None
        names = [m[0] for m in members] if members is not None else None
        entries: dict[Any, Any] = {}
        position = 0
        for item in node.named_children:
            if item.type == "comment":
                continue
            value_node = item
            if item.type == "initializer_pair":
                designators = item.children_by_field_name("designator")
                value_node = item.child_by_field_name("value")
                key = self._designator(designators, path)
                if isinstance(key, Unreadable):
                    entries[("?", item.start_byte)] = key
                    continue
            elif names is not None:
                if position >= len(names):
                    return Unreadable(
                        self.location(item.start_byte, path),
                        f"'{format_key(path)}' has more initialisers than its struct has "
                        f"members ({len(names)})",
                    )
                key = names[position]
            else:
                key = position
            if isinstance(key, str) and names is not None:
                if key not in names:
                    return Unreadable(
                        self.location(item.start_byte, path),
                        f"'{format_key(path)}': the struct has no member '{key}'",
                    )
                position = names.index(key) + 1
            elif isinstance(key, int):
                position = key + 1
            child_shape = None
            if members is not None and isinstance(key, str):
                child_shape = dict(members).get(key)
            elif shape and shape[0] == "array":
                child_shape = shape[1]
            child_path = path + (key,)
            if key in entries:
                return Unreadable(
                    self.location(item.start_byte, child_path),
                    f"'{format_key(child_path)}' is initialised twice",
                )
            entries[key] = self._value(value_node, child_shape, child_path, shift, depth + 1)
        keys = [k for k in entries if not isinstance(k, tuple)]
        if len(keys) != len(entries):
            return next(v for k, v in entries.items() if isinstance(k, tuple))
        if all(isinstance(k, str) for k in keys):
            return entries
        if all(isinstance(k, int) for k in keys) and sorted(keys) == list(range(len(keys))):
            return [entries[i] for i in range(len(keys))]
        return Unreadable(
            self.location(node.start_byte, path),
            f"'{format_key(path)}' mixes designated and positional items (or leaves gaps) and "
            "its struct definition is not in this file; write each item as .name = value",
        )

    def _designator(self, designators: list, path: KeyPath) -> Any:
        if len(designators) != 1:
            first = designators[0] if designators else None
            return Unreadable(
                self.location(first.start_byte if first else 0, path),
                f"'{format_key(path)}': chained designators are not read; nest the braces",
            )
        node = designators[0]
        if node.type == "field_designator":
            return node.named_children[0].text.decode("utf-8")
        if node.type == "subscript_designator":
            index_node = node.named_children[0] if node.named_children else None
            text = index_node.text.decode("utf-8") if index_node is not None else ""
            value = read_number_literal(text)
            if isinstance(value, int):
                return value
        return Unreadable(
            self.location(node.start_byte, path),
            f"'{format_key(path)}': the designator '{node.text.decode('utf-8', 'replace')}' is "
            "not read",
        )

    def _scalar_or_unreadable(self, node: Any, path: KeyPath, shift: int) -> Any:
        try:
            value = self._scalar(node, path, shift, 0)
        except _NotRead as exc:
            return Unreadable(self.location(exc.offset, path), exc.message)
        return value

    def _scalar(self, node: Any, path: KeyPath, shift: int, depth: int) -> int | float:
        symbol = format_key(path)
        offset = node.start_byte + shift
        if depth > MAX_DEPTH:
            raise _NotRead(f"'{symbol}': the expression is nested too deeply", offset)
        kind = node.type
        text = node.text.decode("utf-8", "replace")
        if kind == "number_literal":
            value = read_number_literal(text)
            if value is None:
                raise _NotRead(f"'{symbol}': '{text}' is not a C numeric literal ruleguard reads",
                               offset)
            return value
        if kind == "parenthesized_expression":
            inner = [c for c in node.named_children if c.type != "comment"]
            if len(inner) == 1:
                return self._scalar(inner[0], path, shift, depth + 1)
        elif kind == "unary_expression":
            operator = node.child_by_field_name("operator").type
            argument = self._scalar(node.child_by_field_name("argument"), path, shift, depth + 1)
            if operator == "-":
                return -argument
            if operator == "+":
                return argument
        elif kind == "binary_expression":
            operator = node.child_by_field_name("operator").type
            if operator in ("+", "-", "*", "/"):
                left = self._scalar(node.child_by_field_name("left"), path, shift, depth + 1)
                right = self._scalar(node.child_by_field_name("right"), path, shift, depth + 1)
                return _arithmetic(operator, left, right, symbol, text, offset)
        elif kind == "cast_expression":
            type_text = " ".join(node.child_by_field_name("type").text.decode("utf-8").split())
            if type_text in _FLOAT_TYPES:
                return float(self._scalar(node.child_by_field_name("value"), path, shift,
                                          depth + 1))
            raise _NotRead(
                f"'{symbol}': the cast to '{type_text}' is not read; only casts to float or "
                "double are", offset)
        elif kind == "identifier":
            raise _NotRead(
                f"'{symbol}' takes its value from '{text}', another symbol; ruleguard reads "
                "numeric literals only and expands no macros", offset)
        elif kind == "call_expression":
            function = node.child_by_field_name("function").text.decode("utf-8", "replace")
            raise _NotRead(
                f"'{symbol}' calls '{function}()'; ruleguard reads numeric literals only and "
                "runs no code", offset)
        shown = " ".join(text.split())
        if len(shown) > 40:
            shown = shown[:37] + "..."
        raise _NotRead(
            f"'{symbol}': '{shown}' is not a numeric literal or constant arithmetic of literals "
            "(+, -, *, /, parentheses)", offset)

    # ------------------------------------------------------------ #if
    def _conditional(self, node: Any, undecided: str | None, depth: int) -> None:
        branches = _branches(node)
        if _is_include_guard(node, branches):
            self.defined[branches[0][2].text.decode("utf-8")] = None
            self._walk(branches[0][1], undecided, depth + 1)
            return
        line = node.start_point[0] + 1
        head = self.raw[node.start_byte:].split(b"\n", 1)[0].decode("utf-8", "replace").strip()
        label = undecided or f"'{head}' (line {line})"
        if undecided is not None or self.macros is None:
            for _, body, _ in branches:
                self._walk(body, label, depth + 1)
            return
        for index, (directive, body, condition) in enumerate(branches):
            try:
                taken = self._decide(directive, condition)
            except _NotRead as exc:
                reason = f"'{head}' (line {line}), whose condition is not decided: {exc.message}"
                for _, rest, _ in branches[index:]:
                    self._walk(rest, reason, depth + 1)
                return
            if taken:
                self._walk(body, None, depth + 1)
                return

    def _decide(self, directive: str, condition: Any) -> bool:
        if directive == "#else":
            return True
        if directive in ("#ifdef", "#ifndef", "#elifdef", "#elifndef"):
            name = condition.text.decode("utf-8")
            known = name in self.macros or name in self.defined
            return known if directive in ("#ifdef", "#elifdef") else not known
        return bool(self._condition(condition, 0))

    def _condition(self, node: Any, depth: int) -> int:
        offset = node.start_byte
        if depth > MAX_DEPTH:
            raise _NotRead("the condition is nested too deeply", offset)
        kind = node.type
        text = node.text.decode("utf-8", "replace")
        if kind == "number_literal":
            value = read_number_literal(text)
            if isinstance(value, int):
                return value
        elif kind == "identifier":
            if text in self.macros:
                return int(self.macros[text])
            value = self.defined.get(text, 0)
            return int(value) if isinstance(value, int) else 0
        elif kind == "preproc_defined":
            names = [c for c in node.named_children if c.type == "identifier"]
            if names:
                name = names[0].text.decode("utf-8")
                return int(name in self.macros or name in self.defined)
        elif kind == "parenthesized_expression":
            inner = [c for c in node.named_children if c.type != "comment"]
            if len(inner) == 1:
                return self._condition(inner[0], depth + 1)
        elif kind == "unary_expression":
            operator = node.child_by_field_name("operator").type
            argument = self._condition(node.child_by_field_name("argument"), depth + 1)
            result = {"!": int(not argument), "-": -argument, "+": argument, "~": ~argument}
            if operator in result:
                return result[operator]
        elif kind == "binary_expression":
            operator = node.child_by_field_name("operator").type
            left = self._condition(node.child_by_field_name("left"), depth + 1)
            right = self._condition(node.child_by_field_name("right"), depth + 1)
            if operator in ("/", "%") and right == 0:
                raise _NotRead(f"division by zero in '{text}'", offset)
            table = {
                "&&": lambda: int(bool(left) and bool(right)),
                "||": lambda: int(bool(left) or bool(right)),
                "==": lambda: int(left == right), "!=": lambda: int(left != right),
                "<": lambda: int(left < right), ">": lambda: int(left > right),
                "<=": lambda: int(left <= right), ">=": lambda: int(left >= right),
                "+": lambda: left + right, "-": lambda: left - right,
                "*": lambda: left * right,
                "/": lambda: _c_divide(left, right), "%": lambda: left - right * _c_divide(
                    left, right),
            }
            if operator in table:
                return table[operator]()
        raise _NotRead(f"'{' '.join(text.split())[:40]}' is not a condition ruleguard decides",
                       offset)


def _c_divide(left: int, right: int) -> int:
    quotient = abs(left) // abs(right)
    return quotient if (left < 0) == (right < 0) else -quotient


def _arithmetic(operator: str, left: Any, right: Any, symbol: str, text: str,
                offset: int) -> int | float:
    if operator == "+":
        return left + right
    if operator == "-":
        return left - right
    if operator == "*":
        return left * right
    if right == 0:
        raise _NotRead(f"'{symbol}': division by zero in '{' '.join(text.split())}'", offset)
    if isinstance(left, int) and isinstance(right, int):
        return _c_divide(left, right)
    return left / right


def _branches(node: Any) -> list[tuple[str, list, Any]]:
    """(directive, body nodes, condition or name node) of an #if chain."""
    found: list[tuple[str, list, Any]] = []
    current = node
    while current is not None:
        directive = current.children[0].type if current.children else ""
        condition = current.child_by_field_name("condition") or current.child_by_field_name(
            "name")
        alternative = current.child_by_field_name("alternative")
        body = [
            child for child in current.children[1:]
            if child != condition and child != alternative and child.is_named
        ]
        found.append((directive, body, condition))
        current = alternative
    return found


def _is_include_guard(node: Any, branches: list) -> bool:
    if node.type != "preproc_ifdef" or len(branches) != 1 or branches[0][0] != "#ifndef":
        return False
    name = branches[0][2].text if branches[0][2] is not None else None
    body = [child for child in branches[0][1] if child.type != "comment"]
    if not body or body[0].type != "preproc_def":
        return False
    first = body[0]
    return (first.child_by_field_name("name").text == name
            and first.child_by_field_name("value") is None)
