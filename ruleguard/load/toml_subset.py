"""A quick reader for the plain subset of TOML that generated inputs are written in.

:func:`read_plain_toml` reads a document line by line when every line is
blank, a comment, a table header (``[a.b]``, ``[[a]]``, ``[a."b.c"]``: bare
keys, or quoted ones without escapes) or a ``bare_key = value`` pair whose
value sits on that line and is

* a decimal number in JSON's grammar (``-12``, ``0.5``, ``1e-3``), a
  boolean, or a basic string without escapes, taken as ``tomllib`` takes it
  (``int(text)``, ``float(text)``, the characters between the quotes);
* an array or an inline table of those: bare keys are quoted and ``=``
  becomes ``:``, and the text is then read by ``json.loads`` (C), whose
  numbers are ``int(text)`` / ``float(text)`` as in ``tomllib``.

Anything else (escapes, literal or multi-line strings, dotted or quoted keys
of pairs, dates, ``inf``/``nan``, underscores in numbers, multi-line arrays,
trailing commas, ``\\r``, a key or a table defined twice, a table reopened or
extended after it was written) makes it answer ``None``, and the caller
reads the text with ``tomllib``, which stays the authority (and gives the
message of a syntax error). So the answer is ``None`` or exactly
``tomllib.loads(text)`` (same values, types and key order);
tests/test_toml_subset.py checks that on every TOML file of the fixtures and
on generated documents, valid and invalid.

Why: ``tomllib`` is written in Python, and a 300-loop plant registry of
inline tables took it 36 ms; this reader takes a few.
"""

from __future__ import annotations

import json
import re
from typing import Any

#: Characters TOML allows nowhere unescaped (tab and newline excepted), and ``\r``.
_FORBIDDEN = re.compile(r"[\x00-\x08\x0b-\x1f\x7f]")
#: Code (outside comments: no quote, backslash or ``#`` except inside basic
#: strings without escapes), then an optional comment.
_CODE = re.compile(r"((?:[^\"#'\\]|\"[^\"\\]*\")*)(#.*)?")
_PART = r"(?:[A-Za-z0-9_-]+|\"[^\"\\\\]*\")"  # a bare or quoted key (no escapes)
_KEYS = _PART + r"(?:[ \t]*\.[ \t]*" + _PART + r")*"
_PARTS = re.compile(_PART)
_TABLE = re.compile(r"[ \t]*\[[ \t]*(" + _KEYS + r")[ \t]*\][ \t]*")
_ARRAY_TABLE = re.compile(r"[ \t]*\[\[[ \t]*(" + _KEYS + r")[ \t]*\]\][ \t]*")
_PAIR = re.compile(r"[ \t]*([A-Za-z0-9_-]+)[ \t]*=(.*)")
_NUMBER = re.compile(r"-?(?:0|[1-9][0-9]*)(\.[0-9]+)?([eE][+-]?[0-9]+)?")
_STRING = re.compile(r"\"[^\"\\]*\"")
_INNER_KEY = re.compile(r"(?<=[{,])[ \t]*([A-Za-z0-9_-]+)[ \t]*=")


class _NotPlain(Exception):
    pass


def _unique(pairs: list[tuple[str, Any]]) -> dict:
    table = dict(pairs)
    if len(table) != len(pairs):  # a key twice
        raise _NotPlain
    return table


def _refuse(token: str) -> Any:
    raise _NotPlain


_JSON = json.JSONDecoder(object_pairs_hook=_unique, parse_constant=_refuse)


def _value(text: str) -> Any:
    number = _NUMBER.fullmatch(text)
    if number is not None:
        return float(text) if number.group(1) or number.group(2) else int(text)
    if text == "true":
        return True
    if text == "false":
        return False
    if _STRING.fullmatch(text):
        return text[1:-1]
    if text[:1] not in ("[", "{"):
        raise _NotPlain
    if '"' in text and any("=" in s for s in _STRING.findall(text)):
        raise _NotPlain  # the keys below are found by their "="
    if ":" in text and ":" in _STRING.sub("", text):
        raise _NotPlain  # not TOML, though JSON
    parts = _INNER_KEY.split(text)  # [text, key, text, key, ..., text]
    parts[1::2] = [f'"{key}":' for key in parts[1::2]]
    converted = "".join(parts)
    if "null" in converted:
        raise _NotPlain  # JSON's null, which TOML lacks (or a string holding the word)
    try:
        return _JSON.decode(converted)
    except (ValueError, RecursionError):
        raise _NotPlain from None


def read_plain_toml(text: str) -> dict | None:
    """``tomllib.loads(text)`` for a plain document (see the module), else ``None``."""
    if _FORBIDDEN.search(text):
        return None
    try:
        return _read(text)
    except _NotPlain:
        return None


def _read(text: str) -> dict:
    root: dict = {}
    opened = {id(root)}  # tables a header made (only those may hold a header's table)
    arrays: set[int] = set()  # arrays a [[header]] made
    table = root
    code_of = _CODE.fullmatch
    pair_of = _PAIR.match
    for line in text.split("\n"):
        code = line
        if "#" in line or "'" in line or "\\" in line:
            found = code_of(line)
            if found is None:
                raise _NotPlain
            code = found.group(1)
        if not code or code.isspace():
            continue
        pair = pair_of(code)
        if pair is not None:
            key, value = pair.groups()
            value = value.strip(" \t")
            if key in table or not value:
                raise _NotPlain
            table[key] = _value(value)
            continue
        header = _ARRAY_TABLE.fullmatch(code)
        is_array = header is not None
        if header is None:
            header = _TABLE.fullmatch(code)
            if header is None:
                raise _NotPlain
        keys = [part[1:-1] if part[0] == '"' else part
                for part in _PARTS.findall(header.group(1))]
        node = root
        for key in keys[:-1]:
            child = node.get(key)
            if child is None:
                child = node[key] = {}
                opened.add(id(child))
            elif isinstance(child, list) and id(child) in arrays:
                child = child[-1]
            elif not isinstance(child, dict) or id(child) not in opened:
                raise _NotPlain
            node = child
        last = keys[-1]
        table = {}
        opened.add(id(table))
        if is_array:
            items = node.get(last)
            if items is None:
                items = node[last] = []
                arrays.add(id(items))
            elif not isinstance(items, list) or id(items) not in arrays:
                raise _NotPlain
            items.append(table)
        else:
            if last in node:
                raise _NotPlain
            node[last] = table
    return root


def header_positions(text: str) -> dict[tuple, tuple[int, int]]:
    """Line and column of each table and array-of-tables element a header of
    ``text`` opens, for a document :func:`read_plain_toml` read.

    The same values as :func:`ruleguard.load.positions.build_source_map` for
    those paths (the header's ``[``, whose column counts characters; an
    element of ``[[a]]`` as ``("a", index)``), found from the header lines
    alone: in a plain document every line that starts with ``[`` is a header
    and no other line places a table.
    """
    positions: dict[tuple, tuple[int, int]] = {}
    counts: dict[tuple, int] = {}
    for row, line in enumerate(text.split("\n"), start=1):
        stripped = line.lstrip(" \t")
        if not stripped.startswith("["):
            continue
        code = line
        if "#" in line or "'" in line or "\\" in line:
            found = _CODE.fullmatch(line)
            if found is None:  # pragma: no cover - not a plain document
                continue
            code = found.group(1)
        header = _ARRAY_TABLE.fullmatch(code)
        is_array = header is not None
        if header is None:
            header = _TABLE.fullmatch(code)
            if header is None:  # pragma: no cover - not a plain document
                continue
        keys = [part[1:-1] if part[0] == '"' else part
                for part in _PARTS.findall(header.group(1))]
        place = (row, len(line) - len(stripped) + 1)
        resolved: list = []
        for index, name in enumerate(keys):
            resolved.append(name)
            if index < len(keys) - 1:
                if tuple(resolved) in counts:
                    resolved.append(counts[tuple(resolved)] - 1)
            elif is_array:
                count = counts.get(tuple(resolved), 0)
                counts[tuple(resolved)] = count + 1
                resolved.append(count)
        positions[tuple(resolved)] = place
    return positions
