"""Where something stands in an input file.

A :class:`Location` is attached to every input error and every finding. Paths
are relative to the manifest's folder and use ``/`` (FORMATS.md section 5).

Loading names far more places than a run ever reports (every number of
every plant entry, every controller field), so a location may be made
*deferred* (:func:`deferred_location`): it holds the file and a key path
with the document that can place it, and its ``line``, ``column`` and
``key`` are worked out on first reading (equality, hashing, ``repr``,
pickling and :meth:`Location.as_dict` read them too). A deferred location
is the same class and gives the same values as one made with them: only
the time they are computed differs.
"""

from __future__ import annotations

from typing import Any, Protocol

from ruleguard.frozen import record


@record
class Location:
    """A place in an input file.

    Attributes
    ----------
    file:
        Path relative to the manifest's folder, with ``/`` separators.
    line, column:
        1-based; ``None`` when the file as a whole is meant (empty file,
        unreadable file) or the position is unknown.
    key:
        Dotted key path of the element (``"loops.0.controller"``,
        ``"velocity.filters.1.center_hz"``); empty for the whole file.
    """

    file: str
    line: int | None = None
    column: int | None = None
    key: str = ""

    def as_dict(self) -> dict:
        return {"file": self.file, "line": self.line, "column": self.column, "key": self.key}

    def __reduce__(self) -> tuple:
        # pickled (to worker processes, for content keys) with its values, never
        # with the document a deferred location keeps
        return (Location, (self.file, self.line, self.column, self.key))


class Placer(Protocol):
    """What can place a key path of one file (a loaded document)."""

    def position(self, path: Any) -> tuple[int | None, int | None]: ...

    def key_text(self, path: Any) -> str: ...


class _Deferred:
    """``line``, ``column`` and ``key`` of a deferred :class:`Location`.

    A non-data descriptor: a location made with its values keeps them in its
    ``__dict__``, which Python reads first, so only a deferred one (whose
    ``__dict__`` has ``_at`` instead) reaches :meth:`__get__`, once.
    """

    def __init__(self, name: str, default: Any) -> None:
        self.name = name
        self.default = default

    def __get__(self, instance: Location | None, owner: type | None = None) -> Any:
        if instance is None:
            return self.default
        values = instance.__dict__
        at = values.get("_at")
        if at is None:  # pragma: no cover - placed meanwhile (another thread), or broken
            if self.name in values:
                return values[self.name]
            raise AttributeError(self.name)
        placer, path = at
        line, column = placer.position(path)
        values["line"] = line
        values["column"] = column
        values["key"] = placer.key_text(path)
        values.pop("_at", None)
        return values[self.name]


Location.line = _Deferred("line", None)  # type: ignore[assignment]
Location.column = _Deferred("column", None)  # type: ignore[assignment]
Location.key = _Deferred("key", "")  # type: ignore[assignment]

_new = object.__new__


def deferred_location(file: str, placer: Placer, path: Any) -> Location:
    """A :class:`Location` of ``path`` in ``file`` placed by ``placer`` on first reading.

    ``placer.position(path)`` gives the line and column, ``placer.key_text(path)``
    the key; both must be pure (the same answer whenever asked).
    """
    location = _new(Location)
    values = location.__dict__
    values["file"] = file
    values["_at"] = (placer, path)
    return location
