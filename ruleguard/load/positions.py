"""Where each key of a TOML or JSON text stands: source maps and key lookups.

:func:`build_source_map` maps key paths (tuples of ``str`` keys and ``int``
array indices) to 1-based ``(line, column)``, columns in characters. The
other functions help locate syntax errors: the key an error position falls
in (:func:`key_at`, :func:`toml_key_by_text`), a duplicated JSON key
(:func:`find_duplicate`), a non-standard token (:func:`find_token`), the
start of over-deep nesting (:func:`deep_nesting`).

Choice of the position library (measured on this machine, 2 cores, Python
3.11, fresh process; a 125-line, 3.2 kB manifest in TOML and as 5.9 kB JSON):

======================  ==========  =====================================
library                 import      parse (+ walk to a source map)
======================  ==========  =====================================
tree-sitter 0.26 +      0.003 s     TOML 0.9 ms parse, 2.1 ms with the
tree-sitter-toml 0.7 /              walk; JSON 2.4 ms with the walk
tree-sitter-json 0.24               (C parser, every node's row/column)
tomlkit 0.15            0.020 s     12 ms to parse alone; it keeps
                                    formatting but no line numbers, so
                                    positions would need a second pass
json-source-map 1.0.5   0.016 s     5.0 ms (pure Python, JSON only, no
                                    release since 2022)
======================  ==========  =====================================

tree-sitter is chosen: one well-kept library covers both formats, it is
the fastest (2-6x), its grammars are versioned wheels, and it keeps
positions of every construct we need (tables, arrays of tables, dotted keys,
inline tables, multi-line arrays, nested JSON objects). It never decides
values: ``tomllib``/``json`` do, so a grammar quirk can at worst misplace a
line number, never change a gain. Positions are built when a location in a
file is first read (:meth:`Document.locate` defers them), so files no
message, finding or report points into cost nothing.
"""

from __future__ import annotations

import json
import re
from typing import Any

try:  # Python >= 3.11
    import tomllib
except ModuleNotFoundError:  # pragma: no cover - Python 3.10
    import tomli as tomllib  # type: ignore[no-redef]

KeyPath = tuple[str | int, ...]

_BARE_KEY = re.compile(r"^[A-Za-z0-9_-]+$")


def format_key(path: KeyPath | list) -> str:
    """Dotted text of a key path: ``('rules', 'margin.phase', 'min_deg')`` ->
    ``rules."margin.phase".min_deg``; array indices as ``.0``."""
    parts = []
    for item in path:
        if isinstance(item, int):
            parts.append(str(item))
            continue
        text = _KEY_TEXTS.get(item)
        if text is None:
            text = item if _BARE_KEY.match(item) else json.dumps(item, ensure_ascii=False)
            if len(item) <= 64 and len(_KEY_TEXTS) < 65536:
                _KEY_TEXTS[item] = text
        parts.append(text)
    return ".".join(parts)


#: Short key -> its text in a dotted path (keys repeat across files and loops).
_KEY_TEXTS: dict[str, str] = {}


_TOML_HEADER = re.compile(r"^\s*\[\[?\s*([^\]]+?)\s*\]\]?\s*(#.*)?$")
_TOML_PAIR = re.compile(r"^\s*([A-Za-z0-9_\-]+(?:\s*\.\s*[A-Za-z0-9_\-]+)*)\s*=")


def toml_key_by_text(
    text: str, line: int | None, column: int | None = None
) -> tuple[str, int] | None:
    """The key of the last ``key = ...`` line at or before ``line`` (bare keys only).

    A fallback for syntax errors that the grammar's error recovery hides
    (an unclosed array reported where the next table starts).
    """
    if line is None:
        return None
    header: list = []
    found: tuple[str, int] | None = None
    counts: dict[str, int] = {}
    for number, raw in enumerate(text.split("\n")[:line], start=1):
        head = _TOML_HEADER.match(raw)
        if head:
            names = [part.strip().strip("\"'") for part in head.group(1).split(".")]
            is_array = raw.lstrip().startswith("[[")
            parts: list = []
            for index, name in enumerate(names):
                parts.append(name)
                joined = ".".join(str(p) for p in parts)
                if index == len(names) - 1 and is_array:
                    counts[joined] = counts.get(joined, 0) + 1
                    parts.append(counts[joined] - 1)
                elif joined in counts:
                    parts.append(counts[joined] - 1)
            if number < line:
                header, found = parts, None
            elif (column or 1) > 1 or found is None:
                # an error at the start of a header line belongs to what came before
                found = (".".join(str(p) for p in parts), number)
            continue
        pair = _TOML_PAIR.match(raw)
        if pair:
            keys = [part.strip() for part in pair.group(1).split(".")]
            found = (".".join(str(p) for p in header + keys), number)
    return found


def deep_nesting(text: str) -> tuple[int, int]:
    """Line and column where a run of 32 or more opening brackets starts (else 1, 1)."""
    hit = re.search(r"[\[{](?:\s*[\[{]){31,}", text)
    if not hit:
        return 1, 1
    before = text[: hit.start()]
    return before.count("\n") + 1, hit.start() - (before.rfind("\n") + 1) + 1


def text_offset(text: str, line: int, column: int) -> int:
    lines = text.split("\n")
    return sum(len(item) + 1 for item in lines[: line - 1]) + column - 1


def find_token(text: str, token: str) -> tuple[int | None, int | None]:
    hit = re.search(r"(?<![\w\"])" + re.escape(token) + r"(?![\w\"])", text)
    if not hit:
        return None, None
    before = text[: hit.start()]
    return before.count("\n") + 1, hit.start() - (before.rfind("\n") + 1) + 1


def find_duplicate(text: str, key_name: str) -> tuple[int | None, int | None, KeyPath]:
    """Position of the second occurrence of a duplicated key within one object."""
    try:
        tree = _tree(text, "json")
    except Exception:
        return None, None, ()
    found: list = []

    def walk(node: Any, path: KeyPath) -> None:
        if found:
            return
        if node.type == "object":
            names: set = set()
            for child in node.named_children:
                if child.type != "pair":
                    continue
                key_node = child.child_by_field_name("key")
                try:
                    key = json.loads(key_node.text.decode("utf-8"))
                except Exception:
                    continue
                if key in names and key == key_name:
                    line, column = _point(text, key_node.start_point)
                    found.append((line, column, path + (key,)))
                    return
                names.add(key)
                value = child.child_by_field_name("value")
                if value is not None:
                    walk(value, path + (key,))
        elif node.type == "array":
            for index, child in enumerate(_array_items(node)):
                walk(child, path + (index,))
        else:
            for child in node.named_children:
                walk(child, path)

    walk(tree.root_node, ())
    return found[0] if found else (None, None, ())


def key_at(text: str, fmt: str, line: int | None, column: int | None = None) -> str:
    """Best-effort dotted key of the last entry starting at or before a position.

    Every occurrence of a key counts (a key written twice is found at its
    second place too), so a syntax error names the entry it is in.
    """
    if line is None:
        return ""
    try:
        occurrences: list = []
        build_source_map(text, fmt, occurrences)
    except Exception:
        return ""
    limit = (line, column if column is not None else 1 << 30)
    best: KeyPath = ()
    best_pos = (0, 0)
    for path, pos in occurrences:
        if path and best_pos <= pos <= limit:
            best, best_pos = path, pos
    return format_key(best)


# --------------------------------------------------------------------------- source map


_PARSERS: dict = {}


def _tree(text: str, fmt: str) -> Any:
    parser = _PARSERS.get(fmt)
    if parser is None:
        import tree_sitter

        if fmt == "toml":
            import tree_sitter_toml as grammar
        else:
            import tree_sitter_json as grammar
        parser = tree_sitter.Parser(tree_sitter.Language(grammar.language()))
        _PARSERS[fmt] = parser
    return parser.parse(text.encode("utf-8"))


class _AsciiLines(list):
    """The lines of an ASCII text (their byte columns are character columns)."""


def _lines(text: str) -> list[str]:
    lines = text.split("\n")
    return _AsciiLines(lines) if text.isascii() else lines


def _point(text_or_lines: Any, point: Any) -> tuple[int, int]:
    """1-based line and character column of a tree-sitter point (byte column)."""
    row, byte_column = point
    if type(text_or_lines) is _AsciiLines:  # one byte per character on every line
        if row < len(text_or_lines):
            return row + 1, min(byte_column, len(text_or_lines[row])) + 1
        return row + 1, byte_column + 1
    lines = text_or_lines if isinstance(text_or_lines, list) else None
    if lines is None:
        lines = text_or_lines.split("\n")
    if row < len(lines):
        line = lines[row]
        if line.isascii():  # one byte per character
            column = min(byte_column, len(line))
        else:
            column = len(line.encode("utf-8")[:byte_column].decode("utf-8", "replace"))
    else:
        column = byte_column
    return row + 1, column + 1


class _Positions(dict):
    """Key path -> first position; every occurrence also goes to ``occurrences``."""

    def __init__(self, occurrences: list | None) -> None:
        super().__init__()
        self.occurrences = occurrences

    def setdefault(self, key, value):  # type: ignore[override]
        if self.occurrences is not None:
            self.occurrences.append((key, value))
        return super().setdefault(key, value)

    def __setitem__(self, key, value) -> None:
        if self.occurrences is not None:
            self.occurrences.append((key, value))
        super().__setitem__(key, value)


def build_source_map(
    text: str, fmt: str, occurrences: list | None = None
) -> dict[KeyPath, tuple[int, int]]:
    tree = _tree(text, fmt)
    lines = _lines(text)
    # a plain dict unless every occurrence is wanted (the subclass costs a call per key)
    positions: dict = _Positions(occurrences) if occurrences is not None else {}
    positions[()] = (1, 1)
    if fmt == "toml":
        _map_toml(tree.root_node, lines, positions)
    else:
        _map_json(tree.root_node, lines, positions, ())
    return dict(positions)


def _array_items(node: Any) -> list:
    return [c for c in node.named_children if c.type not in ("comment", "ERROR")]


def _map_json(node: Any, lines: list, positions: dict, path: KeyPath) -> None:
    if node.type == "document":
        for child in node.named_children:
            if child.type not in ("comment", "ERROR"):
                _map_json(child, lines, positions, path)
                return
        return
    if node.type == "object":
        for child in node.named_children:
            if child.type != "pair":
                continue
            key_node = child.child_by_field_name("key")
            if key_node is None:
                continue
            try:
                key = json.loads(key_node.text.decode("utf-8"))
            except Exception:
                continue
            positions.setdefault(path + (key,), _point(lines, key_node.start_point))
            value = child.child_by_field_name("value")
            if value is not None:
                _map_json(value, lines, positions, path + (key,))
    elif node.type == "array":
        for index, child in enumerate(_array_items(node)):
            positions.setdefault(path + (index,), _point(lines, child.start_point))
            _map_json(child, lines, positions, path + (index,))


def _toml_key_parts(node: Any) -> list[tuple[str, Any]]:
    """(decoded key, node) for each part of a bare, quoted or dotted key."""
    if node.type == "dotted_key":
        parts: list = []
        for child in node.named_children:
            parts.extend(_toml_key_parts(child))
        return parts
    raw = node.text.decode("utf-8")
    if node.type == "bare_key":
        return [(raw, node)]
    try:
        return [(next(iter(tomllib.loads(raw + " = 0"))), node)]
    except Exception:
        return [(raw.strip("\"'"), node)]


_KEY_TYPES = ("bare_key", "quoted_key", "dotted_key")


def _map_toml(root: Any, lines: list, positions: dict) -> None:
    array_counts: dict[KeyPath, int] = {}
    for node in root.named_children:
        if node.type == "pair":
            _map_toml_pair(node, lines, positions, ())
        elif node.type in ("table", "table_array_element"):
            key_node = next((c for c in node.named_children if c.type in _KEY_TYPES), None)
            if key_node is None:
                continue
            parts = _toml_key_parts(key_node)
            resolved: list = []
            for index, (name, part_node) in enumerate(parts):
                resolved.append(name)
                last = index == len(parts) - 1
                if last and node.type == "table_array_element":
                    count = array_counts.get(tuple(resolved), 0)
                    array_counts[tuple(resolved)] = count + 1
                    positions.setdefault(tuple(resolved), _point(lines, node.start_point))
                    resolved.append(count)
                    positions[tuple(resolved)] = _point(lines, node.start_point)
                elif last:
                    positions[tuple(resolved)] = _point(lines, node.start_point)
                else:
                    positions.setdefault(tuple(resolved), _point(lines, part_node.start_point))
                    if tuple(resolved) in array_counts:
                        resolved.append(array_counts[tuple(resolved)] - 1)
            table_path = tuple(resolved)
            for child in node.named_children:
                if child.type == "pair":
                    _map_toml_pair(child, lines, positions, table_path)


def _map_toml_pair(node: Any, lines: list, positions: dict, base: KeyPath) -> None:
    children = node.named_children
    key_node = next((c for c in children if c.type in _KEY_TYPES), None)
    if key_node is None:
        return
    path = base
    for name, part_node in _toml_key_parts(key_node):
        path = path + (name,)
        positions.setdefault(path, _point(lines, part_node.start_point))
    value = next((c for c in children if c is not key_node and c.type != "comment"), None)
    if value is not None:
        _map_toml_value(value, lines, positions, path)


def _map_toml_value(node: Any, lines: list, positions: dict, path: KeyPath) -> None:
    if node.type == "inline_table":
        for child in node.named_children:
            if child.type == "pair":
                _map_toml_pair(child, lines, positions, path)
    elif node.type == "array":
        for index, child in enumerate(_array_items(node)):
            positions.setdefault(path + (index,), _point(lines, child.start_point))
            _map_toml_value(child, lines, positions, path + (index,))
