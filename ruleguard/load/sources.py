"""Reading input files: contained paths, values, and where each value stands.

:func:`read_document` is the only way ruleguard opens an input file. It

* refuses paths that resolve (after symlinks) outside the project root,
  absolute paths, non-regular files, files over :data:`MAX_FILE_BYTES`,
  empty files and binary (non UTF-8 or NUL-holding) files, each with an
  :class:`~ruleguard.errors.InputError` at the place that referenced the file;
* takes the values from the standard parsers (``tomllib``/``tomli`` for TOML,
  ``json`` for JSON, which stay the authority for what a file means), with
  duplicate JSON keys and the non-standard ``NaN``/``Infinity`` rejected
  (plain TOML is read quicker to the same value, :mod:`ruleguard.load.toml_subset`);
* builds, lazily when the line or column of one of its locations is first
  read (:meth:`Document.locate` gives deferred locations), a source map from
  key paths (tuples of ``str`` keys and ``int`` array indices) to 1-based
  ``(line, column)``.

Positions come from :mod:`ruleguard.load.positions` (tree-sitter; the
choice of library is explained there).
"""

from __future__ import annotations

import contextlib
import errno
import json
import os
import re
import stat
from collections.abc import Iterator, Mapping
from contextvars import ContextVar
from dataclasses import field
from pathlib import Path
from typing import Any, Protocol

from ruleguard.errors import InputError
from ruleguard.frozen import record
from ruleguard.load.positions import (
    KeyPath,
    build_source_map,
    deep_nesting,
    find_duplicate,
    find_token,
    format_key,
    key_at,
    text_offset,
    toml_key_by_text,
)
from ruleguard.load.toml_subset import header_positions, read_plain_toml
from ruleguard.location import Location, deferred_location

try:  # Python >= 3.11
    import tomllib
except ModuleNotFoundError:  # pragma: no cover - Python 3.10
    import tomli as tomllib  # type: ignore[no-redef]

#: Largest input file ruleguard reads (bytes).
MAX_FILE_BYTES = 2 * 1024 * 1024

__all__ = [
    "MAX_FILE_BYTES",
    "Document",
    "FIRMWARE_FORMATS",
    "KeyPath",
    "Unreadable",
    "format_key",
    "located_document",
    "parse_text",
    "firmware_format_of",
    "read_document",
    "read_firmware",
    "read_text",
    "resolve_inside",
    "tomllib",
]


@record
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
        ``"toml"``, ``"json"``, or for firmware files also ``"c"``,
        ``"yaml"``, ``"keyvalue"`` (those readers fill the source map when
        they parse, see :func:`located_document`).
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
                cached = build_source_map(self.text, self.fmt)
            except Exception:  # a position is a convenience: never fail a run on it
                cached = {}
            self._cache["map"] = cached
        return cached

    def position(self, path: KeyPath) -> tuple[int | None, int | None]:
        """Line and column of ``path`` or of its nearest located ancestor.

        In a plain TOML document (:mod:`ruleguard.load.toml_subset`) the path
        of a table or of an element of an array of tables (what most
        findings point to) is placed from the header lines alone, without
        the source map, at the same line and column.
        """
        path = tuple(path)
        if "map" not in self._cache and self._cache.get("plain"):
            headers = self._cache.get("headers")
            if headers is None:
                headers = self._cache["headers"] = header_positions(self.text)
            hit = headers.get(path)
            if hit is not None:
                return hit
        source_map = self.source_map
        while path:
            hit = source_map.get(path)
            if hit is not None:
                return hit
            path = path[:-1]
        return source_map.get((), (1, 1)) if self.text else (None, None)

    def locate(self, path: KeyPath | list = ()) -> Location:
        """:class:`Location` of ``path`` (falling back to the nearest ancestor).

        Deferred (:func:`~ruleguard.location.deferred_location`): the source
        map is built, and the line, column and key worked out, only when
        something reads them (a message, a finding, a report).
        """
        return deferred_location(self.file, self, tuple(path))

    def key_text(self, path: KeyPath) -> str:
        """The dotted key of ``path`` (:func:`format_key`)."""
        return format_key(path)

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


@record
class Unreadable:
    """A symbol a firmware reader found but takes no value from.

    A C header holds much that is no parameter (function-like macros, calls,
    macros built from other macros); such a symbol is kept with the reason
    and becomes an input error only when a binding uses it.
    """

    location: Location
    message: str

    def error(self) -> InputError:
        return InputError.at(self.location, self.message)


def located_document(
    name: str, text: str, fmt: str, data: Any, positions: Mapping[KeyPath, tuple[int, int]]
) -> Document:
    """A :class:`Document` whose source map a reader built while parsing."""
    source_map = {(): (1, 1), **positions}
    return Document(name, data, text, fmt, {"map": source_map})


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
    return Path(_contained(root, rel_path, origin)[0])


def _contained(
    root: str | Path, rel_path: str, origin: Location | None
) -> tuple[str, str, os.stat_result]:
    """:func:`resolve_inside` on strings: (real path, name relative to ``root``
    with ``/``, the file's ``os.stat``).

    The steps and errors of ``Path.resolve(strict=False)``, ``is_relative_to``,
    ``exists`` and ``is_file`` in that order, with one ``stat`` for them all
    (pathlib objects cost more than the file system calls here: a project
    reads one file per loop).
    """
    root_real = _real_folder(root)
    shown = str(rel_path)
    if not isinstance(rel_path, str) or not rel_path.strip():
        raise _origin_error(origin, shown, "expected a relative file path, found an empty name")
    if "\x00" in rel_path:
        raise _origin_error(origin, shown, "a file path may not contain a NUL character")
    if os.path.isabs(rel_path) or rel_path.startswith("/") or re.match(
        r"^[A-Za-z]:[\\/]", rel_path
    ):  # (a POSIX path is absolute when it starts with "/")
        raise _origin_error(
            origin,
            shown,
            f"'{rel_path}' is an absolute path; files must be given relative to the "
            "project folder and stay inside it",
        )
    real = os.path.realpath(os.path.join(root_real, rel_path))
    status: os.stat_result | None = None
    failure: OSError | None = None
    try:
        status = os.stat(real)
    except OSError as exc:
        failure = exc
        if exc.errno == errno.ELOOP or getattr(exc, "winerror", 0) == 1921:  # symlink loops
            raise _origin_error(
                origin, shown, f"cannot resolve '{rel_path}': it is a loop of symbolic links"
            ) from None
    name = _relative(real, root_real)
    if name is None:
        raise _origin_error(
            origin,
            shown,
            f"'{rel_path}' resolves outside the project folder; ruleguard reads only files "
            "inside the manifest's folder (symlinks included)",
        )
    if status is None:
        if failure is not None and failure.errno not in _MISSING:
            raise failure  # as Path.exists would
        raise _origin_error(origin, shown, f"file '{rel_path}' does not exist")
    if not stat.S_ISREG(status.st_mode):
        raise _origin_error(origin, shown, f"'{rel_path}' is not a regular file")
    return real, name, status


def _real_folder(root: str | Path) -> str:
    """``str(Path(root).resolve())`` (non-strict: a symlink loop is a RuntimeError)."""
    real = os.path.realpath(root)
    try:
        os.stat(real)
    except OSError as exc:
        if exc.errno == errno.ELOOP or getattr(exc, "winerror", 0) == 1921:
            raise RuntimeError(f"Symlink loop from {exc.filename!r}") from None
    return real


#: errno values for which ``Path.exists`` answers False (pathlib's ``_IGNORED_ERRNOS``).
_MISSING = (errno.ENOENT, errno.ENOTDIR, errno.EBADF, errno.ELOOP)


def _relative(real: str, root_real: str) -> str | None:
    """``real`` relative to the folder ``root_real`` with ``/`` (``Path.relative_to``),
    ``None`` outside it."""
    if os.path.normcase(real) == os.path.normcase(root_real):
        return "."
    prefix = root_real if root_real.endswith(os.sep) else root_real + os.sep
    if not os.path.normcase(real).startswith(os.path.normcase(prefix)):
        return None
    name = real[len(prefix):]
    return name if os.sep == "/" else name.replace(os.sep, "/")


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
    return _read_contained(_contained(root, rel_path, origin), origin, max_bytes)


def _read_contained(
    found: tuple[str, str, os.stat_result], origin: Location | None, max_bytes: int
) -> tuple[str, str]:
    """:func:`read_text` of a file :func:`_contained` already found."""
    real, name, status = found
    try:
        size = status.st_size
        if size > max_bytes:
            raise _origin_error(
                origin,
                name,
                f"'{name}' is {size} bytes; input files are limited to {max_bytes} bytes",
            )
        with open(real, "rb") as handle:
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


def _suffix(name: str) -> str:
    """``PurePosixPath(name).suffix`` (the last component's, "" for none)."""
    parts = [part for part in name.split("/") if part and part != "."]
    last = parts[-1] if parts else ""
    dot = last.rfind(".")
    return last[dot:] if 0 < dot < len(last) - 1 else ""


def _kind_of(name: str) -> str:
    suffix = _suffix(name).lower()
    return {
        ".toml": "TOML", ".json": "JSON", ".csv": "CSV", ".h": "C", ".hpp": "C", ".c": "C",
        ".yaml": "YAML", ".yml": "YAML", ".params": "parameter", ".cfg": "parameter",
    }.get(suffix, "text")


def format_of(name: str, origin: Location | None = None) -> str:
    """``"toml"`` or ``"json"`` by extension."""
    suffix = _suffix(name).lower()
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
    found = _contained(root, rel_path, origin)  # containment first, whatever the name says
    fmt = format_of(str(rel_path), origin)
    name, text = _read_contained(found, origin, max_bytes)
    return parse_text(name, text, fmt)


def parse_text(name: str, text: str, fmt: str) -> Document:
    """Parse ``text`` (already read) as ``fmt``; syntax errors are located."""
    if fmt == "toml":
        plain = read_plain_toml(text)  # the same value, quicker, or None
        if plain is not None:
            return Document(name, plain, text, fmt, {"plain": True})
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
        key = key_at(text, "toml", line, column)
        by_text = toml_key_by_text(text, line, column)
        if by_text is not None and (not key or not key.startswith(by_text[0])):
            key = by_text[0]
            if line is not None and by_text[1] < line and message.startswith("Unclosed"):
                message += f" (the value of '{key}' opened at line {by_text[1]})"
        raise InputError(name, line, column, key, f"TOML syntax error: {message}") from None
    except RecursionError:
        line, column = deep_nesting(text)
        found = toml_key_by_text(text, line, column)
        key = found[0] if found else ""
        raise InputError(name, line, column, key, "TOML nesting is too deep") from None


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
        key = key_at(text, "json", exc.lineno, exc.colno)
        raise InputError(
            name, exc.lineno, exc.colno, key, f"JSON syntax error: {exc.msg}"
        ) from None
    except _DuplicateKey as exc:
        key_name = exc.args[0]
        line, column, path = find_duplicate(text, key_name)
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
        line, column = find_token(text, word)
        # Put a number of the same length in its place so the tree has the key.
        patched = re.sub(r"(?<![\w\"])-?(NaN|Infinity)(?![\w\"])",
                         lambda m: "0" * len(m.group(0)), text)
        key = key_at(patched, "json", line, column)
        raise InputError(name, line, column, key, str(exc)) from None
    except RecursionError:
        line, column = deep_nesting(text)
        offset = text_offset(text, line, column)
        before = re.search(r'"((?:[^"\\]|\\.)*)"\s*:\s*$', text[:offset])
        key = before.group(1) if before else ""
        raise InputError(name, line, column, key, "JSON nesting is too deep") from None




# --------------------------------------------------------------------------- firmware

#: Formats a controller binding may read, and the extensions that imply each.
FIRMWARE_FORMATS: Mapping[str, tuple[str, ...]] = {
    "toml": (".toml",),
    "json": (".json",),
    "c": (".h", ".hpp", ".c"),
    "yaml": (".yaml", ".yml"),
    "keyvalue": (".params", ".cfg"),
}


def firmware_format_of(name: str, declared: str | None, origin: Location | None = None) -> str:
    """The format of a firmware file: ``declared`` (the binding's ``format``) or by extension."""
    if declared is not None:
        return declared
    suffix = _suffix(name).lower()
    for fmt, suffixes in FIRMWARE_FORMATS.items():
        if suffix in suffixes:
            return fmt
    known = ", ".join(s for suffixes in FIRMWARE_FORMATS.values() for s in suffixes)
    raise _origin_error(
        origin,
        name,
        f"'{name}': unknown file type '{suffix}'; expected one of {known}, or give the "
        'format in the binding (format = "c", "yaml", "keyvalue", "toml" or "json")',
    )


def read_firmware(
    root: str | Path,
    rel_path: str,
    origin: Location | None = None,
    fmt: str | None = None,
    macros: Mapping[str, int] | None = None,
) -> Document:
    """Read, contain and parse a firmware file in any of :data:`FIRMWARE_FORMATS`.

    ``fmt`` overrides the extension; ``macros`` chooses ``#if`` branches of a
    C file (:mod:`ruleguard.load.c_source`). The readers of C, YAML and
    key-value files are imported on first use only.
    """
    found = _contained(root, rel_path, origin)
    fmt = firmware_format_of(str(rel_path), fmt, origin)
    name, text = _read_contained(found, origin, MAX_FILE_BYTES)
    if fmt in ("toml", "json"):
        return parse_text(name, text, fmt)
    memo = _PARSED.get()
    digest = None
    if memo is not None:
        digest = parse_digest(fmt, text, macros)
        hit = memo.get(digest)
        if hit is not None:
            data, source_map = hit
            return Document(name, data, text, fmt, {"map": source_map})
    document = _parse_firmware(name, text, fmt, macros)
    if memo is not None:
        memo.put(digest, document.data, document.source_map)
    return document


def _parse_firmware(name: str, text: str, fmt: str, macros) -> Document:
    try:
        if fmt == "c":
            from ruleguard.load.c_source import parse_c

            return parse_c(name, text, macros)
        if fmt == "yaml":
            from ruleguard.load.yaml_source import parse_yaml

            return parse_yaml(name, text)
        from ruleguard.load.keyvalue_source import parse_keyvalue

        return parse_keyvalue(name, text)
    except InputError as exc:
        raise exc.with_excerpt(text) from None


class ParseMemo(Protocol):
    """Parses of firmware files by content digest (:class:`ruleguard.cache.ParsedDocuments`)."""

    def get(self, digest: str) -> tuple[Any, Mapping[KeyPath, tuple[int, int]]] | None: ...

    def put(self, digest: str, data: Any, source_map: Mapping[KeyPath, tuple[int, int]]) -> None:
        ...


_PARSED: ContextVar[ParseMemo | None] = ContextVar("ruleguard_parse_memo", default=None)


@contextlib.contextmanager
def remembering_parses(memo: ParseMemo | None) -> Iterator[ParseMemo | None]:
    """Inside the block, :func:`read_firmware` takes the parse of a C, YAML or
    key-value file whose content ``memo`` knows from it, and tells it the
    parses it makes."""
    token = _PARSED.set(memo)
    try:
        yield memo
    finally:
        _PARSED.reset(token)


def parse_digest(fmt: str, text: str, macros: Mapping[str, int] | None) -> str:
    """The hex SHA-256 of (ruleguard version, format, ``#if`` macros, text)."""
    import hashlib

    from ruleguard import __version__

    chosen = sorted((macros or {}).items())
    material = f"{__version__}\0{fmt}\0{chosen!r}\0{text}"
    return hashlib.sha256(material.encode("utf-8", "surrogatepass")).hexdigest()
