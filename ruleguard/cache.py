"""The loop-result cache: an unchanged loop costs nothing on the next run.

A loop's analysed result (:class:`~ruleguard.report.model.LoopResult`) and
its findings are stored under a key that hashes everything they depend on:

* the text of every input file of the loop (:func:`ruleguard.selection.loop_input_files`:
  manifest, registry files, controller file, measured data, ruleset file,
  the inner loops' inputs);
* the ruleset's effective content (the caller's fingerprint of the resolved
  ruleset, which covers built-in rulesets and ``extends`` chains);
* the ruleguard version and the cache format;
* the selection options (``--only``, ``--skip``) and the date that decides
  waiver expiry (``today``; today's UTC date when the options lack it).

The cache folder is ``.ruleguard-cache/`` in the manifest's folder. It holds a
``.gitignore`` of ``*`` (git ignores the whole folder) and a ``CACHEDIR.TAG``
(the Cache Directory Tagging Specification, so backup tools skip it); it may
be deleted at any time. Entries are JSON (never pickle) and name the version
that wrote them; an entry from another version, or one that cannot be read
or parsed, is a miss. The cache never writes outside its folder, so never to
an input; a cache folder that is a symlink or not a folder disables it.

The same folder keeps ``validated.json``: the digests of input values that
passed their JSON Schema (:class:`ValidatedDocuments`,
:func:`ruleguard.load.validation.validation_digest`: ruleguard version,
schema text and value). A file whose content passed once is not validated
again; a changed file is. It also keeps ``parsed.json``
(:class:`ParsedDocuments`): the parse of each firmware file read by the C,
YAML or key-value reader, by the digest of its content, so an unchanged
header or YAML file is not parsed again. Like the entries, both memos are
trusted only from the version that wrote them.
"""

from __future__ import annotations

import datetime as _dt
import hashlib
import json
import os
import tempfile
from collections.abc import Mapping
from pathlib import Path
from typing import Any

from ruleguard import __version__
from ruleguard.load.sources import Unreadable
from ruleguard.location import Location
from ruleguard.report.model import LoopResult
from ruleguard.report.records import (
    finding_from_dict,
    finding_to_dict,
    loop_from_dict,
    loop_to_dict,
)
from ruleguard.rules.base import Finding

CACHE_FOLDER = ".ruleguard-cache"
CACHE_FORMAT = 2  # 2: findings carry fix hints
CACHEDIR_TAG = (
    "Signature: 8a477f597d28d172789f06886806bc55\n"
    "# This file is a cache directory tag created by ruleguard.\n"
    "# For information about cache directory tags see https://bford.info/cachedir/\n"
)
MAX_ENTRIES = 2000
VALIDATED_FILE = "validated.json"
PARSED_FILE = "parsed.json"
#: Most digests ``validated.json`` keeps (the ones used most recently).
MAX_VALIDATED = 5000
#: Firmware files whose parse ``parsed.json`` keeps.
MAX_PARSED = 500


class LoopCache:
    """Loop results on disk, keyed by a hash of every input.

    Parameters
    ----------
    root:
        The manifest's folder.
    enabled:
        ``False`` turns every ``get`` into a miss and every ``put`` into a no-op.

    Attributes
    ----------
    hits, misses, stores:
        Counters of ``get`` hits and misses and of entries written, so tests
        (and ``--verbose`` statistics) can prove that a hit skipped analysis.
    """

    def __init__(self, root: str | os.PathLike, enabled: bool = True) -> None:
        self.root = Path(root)
        self.folder = self.root / CACHE_FOLDER
        self.enabled = enabled
        self.hits = 0
        self.misses = 0
        self.stores = 0
        self._inputs: set[str] = set()

    # ------------------------------------------------------------ keys
    def key_for(
        self,
        project,
        loop_name: str,
        ruleset_fingerprint: str,
        options: Mapping[str, Any] | None = None,
    ) -> str:
        """The hex SHA-256 key of one loop's result under these inputs."""
        from ruleguard.selection import loop_input_files

        chosen = dict(options or {})
        if "today" not in chosen:
            chosen["today"] = _dt.datetime.now(_dt.timezone.utc).date().isoformat()
        inputs = loop_input_files(project, loop_name)
        self._inputs |= set(inputs) | set(getattr(project, "texts", {}) or {})
        files = {rel: self._content_digest(project, rel) for rel in sorted(inputs)}
        material = {
            "cache_format": CACHE_FORMAT,
            "tool_version": __version__,
            "loop": loop_name,
            "ruleset": str(ruleset_fingerprint),
            "options": chosen,
            "files": files,
        }
        text = json.dumps(material, sort_keys=True, default=str, ensure_ascii=True)
        return hashlib.sha256(text.encode("utf-8")).hexdigest()

    def _content_digest(self, project, rel: str) -> str:
        text = project.texts.get(rel) if hasattr(project, "texts") else None
        if text is not None:
            data = text.encode("utf-8")
        else:
            data = self._read_input(rel)
            if data is None:
                return "missing"
        return hashlib.sha256(data).hexdigest()

    def _read_input(self, rel: str) -> bytes | None:
        """An input file's bytes, only from inside the manifest folder."""
        try:
            root = self.root.resolve()
            path = (self.root / rel).resolve()
            path.relative_to(root)
            return path.read_bytes()
        except (OSError, ValueError):
            return None

    # ------------------------------------------------------------ entries
    def _usable_folder(self) -> bool:
        if self.folder.is_symlink():
            return False
        return not self.folder.exists() or self.folder.is_dir()

    def _entry_path(self, key: str) -> Path | None:
        if not key or any(ch not in "0123456789abcdef" for ch in key):
            return None
        if f"{CACHE_FOLDER}/{key}.json" in self._inputs:  # never write over an input
            return None
        return self.folder / f"{key}.json"

    def get(self, key: str) -> tuple[LoopResult, tuple[Finding, ...]] | None:
        """The stored result and findings, or ``None`` (a miss)."""
        found = self._load(key) if self.enabled else None
        if found is None:
            self.misses += 1
        else:
            self.hits += 1
        return found

    def _load(self, key: str) -> tuple[LoopResult, tuple[Finding, ...]] | None:
        path = self._entry_path(key)
        if path is None or not self._usable_folder():
            return None
        try:
            data = json.loads(path.read_text(encoding="utf-8"))
            if (
                data.get("cache_format") != CACHE_FORMAT
                or data.get("tool_version") != __version__
                or data.get("key") != key
            ):
                return None
            loop = loop_from_dict(data["loop"])
            findings = tuple(finding_from_dict(f) for f in data["findings"])
        except (OSError, ValueError, KeyError, TypeError, AttributeError):
            return None
        return loop, findings

    def put(self, key: str, loop_result: LoopResult, findings: tuple[Finding, ...]) -> None:
        """Store one loop's result and findings (silently skipped when the
        folder cannot be used or written)."""
        path = self._entry_path(key)
        if not self.enabled or path is None or not self._usable_folder():
            return
        entry = {
            "cache_format": CACHE_FORMAT,
            "tool_version": __version__,
            "key": key,
            "loop": loop_to_dict(loop_result, finite_only=False),
            "findings": [finding_to_dict(f, finite_only=False) for f in findings],
        }
        try:
            self._prepare_folder()
            text = json.dumps(entry, ensure_ascii=False, allow_nan=True)
            fd, tmp = tempfile.mkstemp(dir=self.folder, prefix=".tmp-", suffix=".json")
            try:
                with os.fdopen(fd, "w", encoding="utf-8") as handle:
                    handle.write(text)
                os.replace(tmp, path)
            except BaseException:
                Path(tmp).unlink(missing_ok=True)
                raise
            self.stores += 1
            self._prune()
        except OSError:
            return

    def _prepare_folder(self) -> None:
        if any(rel.startswith(f"{CACHE_FOLDER}/") for rel in self._inputs):
            raise OSError("an input file lies in the cache folder; the cache is not used")
        self.folder.mkdir(exist_ok=True)
        ignore = self.folder / ".gitignore"
        if not ignore.exists():
            ignore.write_text("*\n", encoding="utf-8")
        tag = self.folder / "CACHEDIR.TAG"
        if not tag.exists():
            tag.write_text(CACHEDIR_TAG, encoding="utf-8")

    def _prune(self, keep: int | None = None) -> None:
        keep = MAX_ENTRIES if keep is None else keep
        entries = [
            p for p in self.folder.glob("*.json")
            if not p.name.startswith(".") and p.name not in (VALIDATED_FILE, PARSED_FILE)
        ]
        if len(entries) <= keep:
            return
        entries.sort(key=lambda p: p.stat().st_mtime)
        for old in entries[: len(entries) - keep]:
            old.unlink(missing_ok=True)

    def clear(self) -> int:
        """Delete the cache folder's own files and the folder; the number of
        entries removed."""
        if not self.folder.is_dir() or self.folder.is_symlink():
            return 0
        removed = 0
        for path in self.folder.iterdir():
            if path.is_file() and (
                path.suffix == ".json" or path.name in (".gitignore", "CACHEDIR.TAG")
            ):
                removed += path.suffix == ".json" and path.name not in (VALIDATED_FILE, PARSED_FILE)
                path.unlink(missing_ok=True)
        try:
            self.folder.rmdir()
        except OSError:
            pass
        return removed


class _RememberedFile:
    """A memo file of the cache folder: ``digest -> value`` entries.

    Read once (a missing, unreadable or other-version file is an empty
    memo), extended while a project loads, written back by :meth:`save`
    when it learnt something. The entries of this run come last, so pruning
    to ``limit`` drops the least recent. Subclasses say how entries are kept
    in the file (:meth:`_decode`, :meth:`_encode`).
    """

    file_name = ""
    limit = 0

    def __init__(self, cache: LoopCache) -> None:
        self.cache = cache
        self._known: dict[str, Any] = {}
        self._used: dict[str, None] = {}
        self._learnt = False
        if cache.enabled and cache._usable_folder():
            self._known = self._read()

    def _read(self) -> dict[str, Any]:
        try:
            data = json.loads((self.cache.folder / self.file_name).read_text(encoding="utf-8"))
            if data.get("cache_format") != CACHE_FORMAT or data.get("tool_version") != __version__:
                return {}
            return self._decode(data)
        except (OSError, ValueError, KeyError, TypeError, AttributeError):
            return {}

    def _decode(self, data: dict) -> dict[str, Any]:  # pragma: no cover - abstract
        raise NotImplementedError

    def _encode(self, entries: dict[str, Any]) -> dict:  # pragma: no cover - abstract
        raise NotImplementedError

    def _remember(self, digest: str, value: Any = None) -> None:
        if digest not in self._known:
            self._known[digest] = value
            self._learnt = True
        self._used[digest] = None

    def save(self, inputs=()) -> None:
        """Write the memo back when it learnt an entry (silently skipped when
        the folder cannot be used, or when ``inputs``, the project's input
        files, include a file in the cache folder)."""
        if not (self._learnt and self.cache.enabled and self.cache._usable_folder()):
            return
        self.cache._inputs |= set(inputs)
        if f"{CACHE_FOLDER}/{self.file_name}" in self.cache._inputs:
            return
        order = [d for d in self._known if d not in self._used] + list(self._used)
        entry = {
            "cache_format": CACHE_FORMAT,
            "tool_version": __version__,
            **self._encode({d: self._known[d] for d in order[-self.limit:]}),
        }
        try:
            self.cache._prepare_folder()
            fd, tmp = tempfile.mkstemp(dir=self.cache.folder, prefix=".tmp-", suffix=".json")
            try:
                with os.fdopen(fd, "w", encoding="utf-8") as handle:
                    handle.write(json.dumps(entry))
                os.replace(tmp, self.cache.folder / self.file_name)
            except BaseException:
                Path(tmp).unlink(missing_ok=True)
                raise
        except OSError:
            return
        self._learnt = False


class ValidatedDocuments(_RememberedFile):
    """The digests of input values that passed their schema, kept in the cache folder.

    A :class:`~ruleguard.load.validation.ValidationMemo` in ``validated.json``
    (at most :data:`MAX_VALIDATED` digests, the least recent dropped first).
    """

    file_name = VALIDATED_FILE
    limit = MAX_VALIDATED

    def _decode(self, data: dict) -> dict[str, Any]:
        return dict.fromkeys(d for d in data["digests"] if isinstance(d, str))

    def _encode(self, entries: dict[str, Any]) -> dict:
        return {"digests": list(entries)}

    def __contains__(self, digest: object) -> bool:
        if digest in self._known:
            self._used[digest] = None  # type: ignore[index]
            return True
        return False

    def add(self, digest: str) -> None:
        """Remember that the value with ``digest`` passed its schema."""
        self._remember(digest)


class ParsedDocuments(_RememberedFile):
    """Firmware files read by the C, YAML and key-value readers, by content.

    A :class:`~ruleguard.load.sources.ParseMemo` in ``parsed.json`` (at most
    :data:`MAX_PARSED` files, the least recent dropped first): for the digest
    of (ruleguard version, format, ``#if`` macros, text) the parsed data as
    JSON text and the source map, so an unchanged file is not parsed again
    (nor its reader, yaml or tree-sitter, imported). Only data made of
    dicts with string keys, lists, strings, finite numbers, booleans and
    ``None`` is kept (it comes back equal, type for type); anything else
    (an unreadable C value, say) is parsed every run.
    """

    file_name = PARSED_FILE
    limit = MAX_PARSED

    def _decode(self, data: dict) -> dict[str, Any]:
        entries = data["files"]
        return {d: e for d, e in entries.items()
                if isinstance(d, str) and isinstance(e, dict)
                and isinstance(e.get("data"), str) and isinstance(e.get("map"), list)}

    def _encode(self, entries: dict[str, Any]) -> dict:
        return {"files": entries}

    def get(self, digest: str):
        """(data, source map) of the file with ``digest``, or None."""
        entry = self._known.get(digest)
        if entry is None:
            return None
        try:
            data = json.loads(entry["data"])
            source_map = {tuple(path): (int(line), int(column))
                          for path, line, column in entry["map"]}
            for path, (file, line, column, key, message) in entry.get("unreadable", []):
                _place(data, path, Unreadable(Location(file, line, column, key), message))
        except (ValueError, TypeError, KeyError, IndexError):
            del self._known[digest]  # parsed again and remembered anew
            return None
        self._used[digest] = None
        return data, source_map

    def put(self, digest: str, data: Any, source_map: Mapping) -> None:
        """Remember the parse of the file with ``digest`` (plain data only)."""
        unreadable: list = []
        data = _without_unreadable(data, [], unreadable)
        if not _plain(data) or not all(
            type(p) is tuple and all(type(k) in (str, int) for k in p) for p in source_map
        ):
            return
        try:
            text = json.dumps(data, allow_nan=False)
        except ValueError:
            return
        self._remember(digest, {
            "data": text,
            "map": [[list(path), line, column] for path, (line, column) in source_map.items()],
            "unreadable": unreadable,
        })


def _without_unreadable(value: Any, path: list, found: list) -> Any:
    """``value`` with each :class:`Unreadable` (a C symbol without a value) as
    ``None``, its path and fields listed in ``found``."""
    if type(value) is Unreadable:
        where = value.location
        found.append([list(path), [where.file, where.line, where.column, where.key,
                                   value.message]])
        return None
    if type(value) is dict:
        return {k: _without_unreadable(v, [*path, k], found) for k, v in value.items()}
    if type(value) is list:
        return [_without_unreadable(v, [*path, i], found) for i, v in enumerate(value)]
    return value


def _place(data: Any, path: list, value: Any) -> None:
    for key in path[:-1]:
        data = data[key]
    data[path[-1]] = value


def _plain(value: Any) -> bool:
    """Whether ``value`` survives a JSON round trip equal and of the same types."""
    kind = type(value)
    if kind in (str, int, bool) or value is None:
        return True
    if kind is float:
        return value == value and value not in (float("inf"), float("-inf"))
    if kind is list:
        return all(_plain(v) for v in value)
    if kind is dict:
        return all(type(k) is str and _plain(v) for k, v in value.items())
    return False
