"""Flat parameter files (``.params``, ``.cfg``): one ``NAME value`` a line.

Syntax (documented in docs/formats-additions.md)::

    # comment            ; comment
    PAN_VEL_KP = 0.35    # NAME = value
    PAN_VEL_KI: 14.0     # NAME: value
    PAN_VEL_KD 0         # NAME value (spaces or tabs)
    [pan_position]       # a section: the names below are pan_position.NAME
    kp = 95.0

* a name is a letter or ``_`` followed by letters, digits, ``_`` or ``-``;
* a value is a number (``-1.5``, ``2e-3``, ``0x1F``), ``true``/``false``,
  a double-quoted string, or one bare word (taken as a string);
* a comment starts with ``#`` or ``;`` at the start of a line or after
  whitespace;
* a name set twice (in one section), a line of another shape, a name with
  no value and anything after the value are input errors at their line and
  column. Each value's key path maps to the column of its literal.
"""

from __future__ import annotations

import re
from typing import Any

from ruleguard.errors import InputError
from ruleguard.load.sources import Document, KeyPath, located_document

__all__ = ["parse_keyvalue"]

_NAME = r"[A-Za-z_][A-Za-z0-9_\-]*"
_SECTION = re.compile(r"^\s*\[\s*(" + _NAME + r")\s*\]\s*(?:[#;].*)?$")
_ENTRY = re.compile(r"^(\s*)(" + _NAME + r")(?:\s*[=:]\s*|\s+)(.*)$")
_BARE_NAME = re.compile(r"^(\s*)(" + _NAME + r")\s*(?:[=:])?\s*(?:[#;].*)?$")
_INT = re.compile(r"^[-+]?(?:0|[1-9][0-9]*)$")
_HEX = re.compile(r"^[-+]?0[xX][0-9a-fA-F]+$")
_FLOAT = re.compile(r"^[-+]?(?:[0-9]+\.[0-9]*|\.[0-9]+|[0-9]+)(?:[eE][-+]?[0-9]+)?$")
_VALUE = re.compile(r'^("[^"\n]*"|[^\s"#;=:][^\s"#;]*)')


def parse_keyvalue(name: str, text: str) -> Document:
    """Parse a flat parameter file into ``{NAME: value}`` (sections nest one level).

    Raises
    ------
    InputError
        A malformed line, a missing value, a trailing token or a duplicate
        name, located.
    """
    data: dict[str, Any] = {}
    positions: dict[KeyPath, tuple[int, int]] = {}
    lines_of: dict[KeyPath, int] = {}
    section: tuple[str, ...] = ()
    table = data
    for number, line in enumerate(text.split("\n"), start=1):
        line = line.rstrip("\r")
        stripped = line.strip()
        if not stripped or stripped[0] in "#;":
            continue
        head = _SECTION.match(line)
        if head:
            section = (head.group(1),)
            if section in lines_of:
                raise InputError(
                    name, number, line.index("[") + 1, head.group(1),
                    f"section [{head.group(1)}] appears twice (line {lines_of[section]} and "
                    f"line {number})",
                )
            lines_of[section] = number
            table = data.setdefault(head.group(1), {})
            positions[section] = (number, line.index("[") + 1)
            continue
        bare = _BARE_NAME.match(line)
        if bare:
            key = ".".join(section + (bare.group(2),))
            raise InputError(name, number, len(bare.group(1)) + 1, key,
                             f"'{bare.group(2)}' has no value")
        entry = _ENTRY.match(line)
        if not entry:
            column = len(line) - len(line.lstrip()) + 1
            raise InputError(
                name, number, column, "",
                f"line {number} is not 'NAME = value', 'NAME: value' or 'NAME value'",
            )
        key_name, rest = entry.group(2), entry.group(3)
        path = section + (key_name,)
        value_column = len(line) - len(rest) + 1
        value_hit = _VALUE.match(rest)
        if not value_hit:
            raise InputError(name, number, value_column, ".".join(path),
                             f"'{key_name}' has no value")
        token = value_hit.group(1)
        after = rest[value_hit.end():]
        trailing = after.strip()
        if trailing and not (after[:1].isspace() and trailing[0] in "#;"):
            column = value_column + value_hit.end() + (len(after) - len(after.lstrip()))
            raise InputError(
                name, number, column, ".".join(path),
                f"after the value of '{key_name}', '{trailing[:20]}' is not read; one value "
                "per line",
            )
        if path in lines_of:
            raise InputError(
                name, number, len(entry.group(1)) + 1, ".".join(path),
                f"'{key_name}' is set twice (line {lines_of[path]} and line {number})",
            )
        lines_of[path] = number
        table[key_name] = _value(token)
        positions[path] = (number, value_column)
    if not data:
        raise InputError(name, 1, 1, "", f"'{name}' sets no parameter")
    return located_document(name, text, "keyvalue", data, positions)


def _value(token: str) -> Any:
    if token.startswith('"'):
        return token[1:-1]
    if token in ("true", "false"):
        return token == "true"
    if _INT.match(token):
        return int(token)
    if _HEX.match(token):
        sign = -1 if token.startswith("-") else 1
        return sign * int(token.lstrip("+-")[2:], 16)
    if _FLOAT.match(token):
        return float(token)
    return token
