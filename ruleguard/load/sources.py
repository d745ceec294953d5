"""Reading input files: contained paths, values, and where each value stands.

:func:`read_document` is the only way ruleguard opens an input file. It

* refuses paths that resolve (after symlinks) outside the project root,
  absolute paths, non-regular files, files over :data:`MAX_FILE_BYTES`,
  empty files and binary (non UTF-8 or NUL-holding) files, each with an
  :class:`~ruleguard.errors.InputError` at the place that referenced the file;
* takes the values from the standard parsers (``tomllib``/``tomli`` for TOML,
  ``json`` for JSON, which stay the authority for what a file means), with
  duplicate JSON keys and the non-standard ``NaN``/``Infinity`` rejected;
* builds, lazily on the first :meth:`Document.locate`, a source map from key
  paths (tuples of ``str`` keys and ``int`` array indices) to 1-based
  ``(line, column)``.

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
line number, never change a gain. Positions are built on the first
:meth:`Document.locate` of a file, so files never asked about cost nothing.
"""

from __future__ import annotations

import json
import os
import re
from collections.abc import Mapping
from dataclasses import dataclass, field
from pathlib import Path, PurePosixPath
from typing import Any

from ruleguard.errors import InputError
from ruleguard.location import Location

try:  # Python >= 3.11
    import tomllib
except ModuleNotFoundError:  # pragma: no cover - Python 3.10
    import tomli as tomllib  # type: ignore[no-redef]

#: Largest input file ruleguard reads (bytes).
MAX_FILE_BYTES = 2 * 1024 * 1024

KeyPath = tuple[str | int, ...]

_BARE_KEY = re.compile(r"^[A-Za-z0-9_-]+$")


def format_key(path: KeyPath | list) -> str:
    """Dotted text of a key path: ``('rules', 'margin.phase', 'min_deg')`` ->
    ``rules."margin.phase".min_deg``; array indices as ``.0``."""
    parts = []
    for item in path:
        if isinstance(item, int):
            parts.append(str(item))
        elif _BARE_KEY.match(item):
            parts.append(item)
        else:
            parts.append(json.dumps(item, ensure_ascii=False))
    return ".".join(parts)


@dataclass(frozen=True)
class Document:
    """One parsed input file.

    Attributes
    ----------
    file:
        Path relative to the project root, with ``/``.
    data:
        The parsed value (a dict for every ruleguard input).
    text:
        The file's text (for source excerpts in reports).
    fmt:
        ``"toml"`` or ``"json"``.
    """

    file: str
    data: Any
    text: str
    fmt: str
    _cache: dict = field(default_factory=dict, compare=False, repr=False)

    @property
    def source_map(self) -> Mapping[KeyPath, tuple[int, int]]:
        """Key path -> (line, column), 1-based; built on first use."""
        cached = self._cache.get("map")
        if cached is None:
            try:
                cached = _build_source_map(self.text, self.fmt)
            except Exception:  # a position is a convenience: never fail a run on it
                cached = {}
            self._cache["map"] = cached
        return cached

    def position(self, path: KeyPath) -> tuple[int | None, int | None]:
        """Line and column of ``path`` or of its nearest located ancestor."""
        source_map = self.source_map
        path = tuple(path)
        while path:
            hit = source_map.get(path)
            if hit is not None:
                return hit
            path = path[:-1]
        return source_map.get((), (1, 1)) if self.text else (None, None)

    def locate(self, path: KeyPath | list = ()) -> Location:
        """:class:`Location` of ``path`` (falling back to the nearest ancestor)."""
        path = tuple(path)
        line, column = self.position(path)
        return Location(self.file, line, column, format_key(path))

    def error(self, path: KeyPath | list, message: str) -> InputError:
        """An :class:`InputError` at ``path`` of this document."""
        return InputError.at(self.locate(path), message)

    def get(self, path: KeyPath | list, default: Any = None) -> Any:
        """The value at ``path`` or ``default``."""
        node = self.data
        for item in path:
            if isinstance(item, int) and isinstance(node, list) and 0 <= item < len(node):
                node = node[item]
            elif isinstance(item, str) and isinstance(node, dict) and item in node:
                node = node[item]
            else:
                return default
        return node


# --------------------------------------------------------------------------- paths


def _origin_error(origin: Location | None, file: str, message: str) -> InputError:
    if origin is not None:
        return InputError.at(origin, message)
    return InputError(file, None, None, "", message)


def resolve_inside(root: str | Path, rel_path: str, origin: Location | None = None) -> Path:
    """Absolute path of ``rel_path`` under ``root``, refusing anything outside.

    Raises :class:`InputError` (at ``origin``, the key that named the file)
    for absolute paths, paths through ``..`` or symlinks leaving ``root``,
    missing files and non-regular files.
    """
    root_path = Path(root).resolve()
    shown = str(rel_path)
    if not isinstance(rel_path, str) or not rel_path.strip():
        raise _origin_error(origin, shown, "expected a relative file path, found an empty name")
    if "\x00" in rel_path:
        raise _origin_error(origin, shown, "a file path may not contain a NUL character")
    if os.path.isabs(rel_path) or PurePosixPath(rel_path).is_absolute() or re.match(
        r"^[A-Za-z]:[\\/]", rel_path
    ):
        raise _origin_error(
            origin,
            shown,
            f"'{rel_path}' is an absolute path; files must be given relative to the "
            "project folder and stay inside it",
        )
    candidate = root_path / rel_path
    try:
        resolved = candidate.resolve(strict=False)
    except (OSError, RuntimeError):  # symlink loops
        raise _origin_error(
            origin, shown, f"cannot resolve '{rel_path}': it is a loop of symbolic links"
        ) from None
    if not resolved.is_relative_to(root_path):
        raise _origin_error(
            origin,
            shown,
            f"'{rel_path}' resolves outside the project folder; ruleguard reads only files "
            "inside the manifest's folder (symlinks included)",
        )
    if not resolved.exists():
        raise _origin_error(origin, shown, f"file '{rel_path}' does not exist")
    if not resolved.is_file():
        raise _origin_error(origin, shown, f"'{rel_path}' is not a regular file")
    return resolved


def relative_name(root: str | Path, path: Path) -> str:
    """``path`` relative to ``root`` with ``/`` separators."""
    return Path(path).relative_to(Path(root).resolve()).as_posix()


def read_text(
    root: str | Path,
    rel_path: str,
    origin: Location | None = None,
    max_bytes: int = MAX_FILE_BYTES,
) -> tuple[str, str]:
    """Read a contained text file: returns (relative name, text).

    Empty, oversized and binary files are input errors.
    """
    resolved = resolve_inside(root, rel_path, origin)
    name = relative_name(root, resolved)
    try:
        size = resolved.stat().st_size
        if size > max_bytes:
            raise _origin_error(
                origin,
                name,
                f"'{name}' is {size} bytes; input files are limited to {max_bytes} bytes",
            )
        with open(resolved, "rb") as handle:
            raw = handle.read(max_bytes + 1)
    except OSError as exc:
        raise _origin_error(origin, name, f"cannot read '{name}': {exc.strerror}") from None
    if len(raw) > max_bytes:
        raise _origin_error(
            origin, name, f"'{name}' is over the limit of {max_bytes} bytes for input files"
        )
    if raw.startswith(b"\xef\xbb\xbf"):
        raw = raw[3:]
    if not raw.strip():
        raise InputError(name, 1, 1, "", f"'{name}' is empty; expected a {_kind_of(name)} file")
    if b"\x00" in raw:
        raise InputError(
            name, 1, 1, "", f"'{name}' is a binary file (it holds NUL bytes); expected text"
        )
    try:
        text = raw.decode("utf-8")
    except UnicodeDecodeError as exc:
        line = raw[: exc.start].count(b"\n") + 1
        column = exc.start - (raw.rfind(b"\n", 0, exc.start) + 1) + 1
        raise InputError(
            name,
            line,
            column,
            "",
            f"'{name}' is not UTF-8 text (byte 0x{raw[exc.start]:02x}); is it a binary file?",
        ) from None
    return name, text


def _kind_of(name: str) -> str:
    suffix = PurePosixPath(name).suffix.lower()
    return {".toml": "TOML", ".json": "JSON", ".csv": "CSV"}.get(suffix, "text")


def format_of(name: str, origin: Location | None = None) -> str:
    """``"toml"`` or ``"json"`` by extension."""
    suffix = PurePosixPath(name).suffix.lower()
    if suffix == ".toml":
        return "toml"
    if suffix == ".json":
        return "json"
    raise _origin_error(
        origin, name, f"'{name}': unknown file type '{suffix}'; expected a .toml or .json file"
    )


# --------------------------------------------------------------------------- parsing


def read_document(
    root: str | Path,
    rel_path: str,
    origin: Location | None = None,
    max_bytes: int = MAX_FILE_BYTES,
) -> Document:
    """Read, contain and parse a TOML or JSON file (by extension).

    Parameters
    ----------
    root:
        The project folder (the manifest's folder); nothing outside it is read.
    rel_path:
        Path relative to ``root`` as written in the input.
    origin:
        Where the path was named (for errors about the path itself).
    max_bytes:
        Size cap.

    Raises
    ------
    InputError
        Containment, size, encoding or syntax problems, located.
    """
    resolve_inside(root, rel_path, origin)  # containment first, whatever the name says
    fmt = format_of(str(rel_path), origin)
    name, text = read_text(root, rel_path, origin, max_bytes)
    return parse_text(name, text, fmt)


def parse_text(name: str, text: str, fmt: str) -> Document:
    """Parse ``text`` (already read) as ``fmt``; syntax errors are located."""
    if fmt == "toml":
        data = _parse_toml(name, text)
    else:
        data = _parse_json(name, text)
    return Document(name, data, text, fmt)


_TOML_POSITION = re.compile(r"\(at line (\d+), column (\d+)\)")


def _parse_toml(name: str, text: str) -> Any:
    try:
        return tomllib.loads(text)
    except tomllib.TOMLDecodeError as exc:
        message = str(exc)
        line = getattr(exc, "lineno", None)
        column = getattr(exc, "colno", None)
        hit = _TOML_POSITION.search(message)
        if hit and line is None:
            line, column = int(hit.group(1)), int(hit.group(2))
        if hit:
            message = message[: hit.start()].rstrip()
        if line is None and "end of document" in message:
            line = text.count("\n") + 1
            column = len(text.rsplit("\n", 1)[-1]) + 1
        key = _key_at(text, "toml", line, column)
        by_text = _toml_key_by_text(text, line, column)
        if by_text is not None and (not key or not key.startswith(by_text[0])):
            key = by_text[0]
            if line is not None and by_text[1] < line and message.startswith("Unclosed"):
                message += f" (the value of '{key}' opened at line {by_text[1]})"
        raise InputError(name, line, column, key, f"TOML syntax error: {message}") from None
    except RecursionError:
        line, column = _deep_nesting(text)
        found = _toml_key_by_text(text, line, column)
        key = found[0] if found else ""
        raise InputError(name, line, column, key, "TOML nesting is too deep") from None


_TOML_HEADER = re.compile(r"^\s*\[\[?\s*([^\]]+?)\s*\]\]?\s*(#.*)?$")
_TOML_PAIR = re.compile(r"^\s*([A-Za-z0-9_\-]+(?:\s*\.\s*[A-Za-z0-9_\-]+)*)\s*=")


def _toml_key_by_text(
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


class _DuplicateKey(ValueError):
    pass


def _no_duplicates(pairs: list[tuple[str, Any]]) -> dict:
    seen: dict = {}
    for key, value in pairs:
        if key in seen:
            raise _DuplicateKey(key)
        seen[key] = value
    return seen


def _no_constant(token: str) -> float:
    raise ValueError(f"'{token}' is not a JSON number; finite numbers only")


def _parse_json(name: str, text: str) -> Any:
    try:
        return json.loads(text, object_pairs_hook=_no_duplicates, parse_constant=_no_constant)
    except json.JSONDecodeError as exc:
        key = _key_at(text, "json", exc.lineno, exc.colno)
        raise InputError(
            name, exc.lineno, exc.colno, key, f"JSON syntax error: {exc.msg}"
        ) from None
    except _DuplicateKey as exc:
        key_name = exc.args[0]
        line, column, path = _find_duplicate(text, key_name)
        raise InputError(
            name,
            line,
            column,
            format_key(path) if path else key_name,
            f"duplicate key '{key_name}' in a JSON object (JSON keys must be unique)",
        ) from None
    except ValueError as exc:
        token = re.search(r"'([^']+)'", str(exc))
        word = token.group(1) if token else "NaN"
        line, column = _find_token(text, word)
        # Put a number of the same length in its place so the tree has the key.
        patched = re.sub(r"(?<![\w\"])-?(NaN|Infinity)(?![\w\"])",
                         lambda m: "0" * len(m.group(0)), text)
        key = _key_at(patched, "json", line, column)
        raise InputError(name, line, column, key, str(exc)) from None
    except RecursionError:
        line, column = _deep_nesting(text)
        offset = _offset(text, line, column)
        before = re.search(r'"((?:[^"\\]|\\.)*)"\s*:\s*$', text[:offset])
        key = before.group(1) if before else ""
        raise InputError(name, line, column, key, "JSON nesting is too deep") from None


def _deep_nesting(text: str) -> tuple[int, int]:
    """Line and column where a run of 32 or more opening brackets starts (else 1, 1)."""
    hit = re.search(r"[\[{](?:\s*[\[{]){31,}", text)
    if not hit:
        return 1, 1
    before = text[: hit.start()]
    return before.count("\n") + 1, hit.start() - (before.rfind("\n") + 1) + 1


def _offset(text: str, line: int, column: int) -> int:
    lines = text.split("\n")
    return sum(len(item) + 1 for item in lines[: line - 1]) + column - 1


def _find_token(text: str, token: str) -> tuple[int | None, int | None]:
    hit = re.search(r"(?<![\w\"])" + re.escape(token) + r"(?![\w\"])", text)
    if not hit:
        return None, None
    before = text[: hit.start()]
    return before.count("\n") + 1, hit.start() - (before.rfind("\n") + 1) + 1


def _find_duplicate(text: str, key_name: str) -> tuple[int | None, int | None, KeyPath]:
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


def _key_at(text: str, fmt: str, line: int | None, column: int | None = None) -> str:
    """Best-effort dotted key of the last entry starting at or before a position.

    Every occurrence of a key counts (a key written twice is found at its
    second place too), so a syntax error names the entry it is in.
    """
    if line is None:
        return ""
    try:
        occurrences: list = []
        _build_source_map(text, fmt, occurrences)
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


def _point(text_or_lines: Any, point: Any) -> tuple[int, int]:
    """1-based line and character column of a tree-sitter point (byte column)."""
    row, byte_column = point
    lines = text_or_lines if isinstance(text_or_lines, list) else None
    if lines is None:
        lines = text_or_lines.split("\n")
    if row < len(lines):
        column = len(lines[row].encode("utf-8")[:byte_column].decode("utf-8", "replace"))
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


def _build_source_map(
    text: str, fmt: str, occurrences: list | None = None
) -> dict[KeyPath, tuple[int, int]]:
    tree = _tree(text, fmt)
    lines = text.split("\n")
    positions = _Positions(occurrences)
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
