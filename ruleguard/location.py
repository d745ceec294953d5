"""Where something stands in an input file.

A :class:`Location` is attached to every input error and every finding. Paths
are relative to the manifest's folder and use ``/`` (FORMATS.md section 5).
"""

from __future__ import annotations

from dataclasses import dataclass


@dataclass(frozen=True)
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
