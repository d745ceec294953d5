"""The three kinds of problem, kept apart (ARCHITECTURE.md).

* :class:`InputError`: the inputs cannot be read or are invalid (exit 2). It is
  complete when created: file, line, column, key and message.
* :class:`NumericalWarning`: a numerical caveat (reported as a note).
* Rule findings are data (:mod:`ruleguard.rules.base`), not exceptions.

:class:`InternalError` marks a bug (exit 3).
"""

from __future__ import annotations

from ruleguard.location import Location


class InputError(Exception):
    """An input file is unreadable or invalid.

    Parameters
    ----------
    file:
        Path relative to the manifest's folder (``/`` separators).
    line, column:
        1-based position, ``None`` when it does not apply (empty file).
    key:
        Dotted key path of the offending element ("" for the whole file).
    message:
        What is wrong and, where possible, what was expected.
    """

    def __init__(
        self,
        file: str,
        line: int | None,
        column: int | None,
        key: str,
        message: str,
    ) -> None:
        super().__init__(message)
        self.location = Location(file, line, column, key)
        self.message = message
        #: The source line and a marker under the column (set where the text is known).
        self.excerpt: str | None = None

    def with_excerpt(self, text: str) -> InputError:
        """Attach the line of ``text`` at this error's position (if any), return self."""
        if self.excerpt is None and self.line is not None:
            lines = text.splitlines()
            if 1 <= self.line <= len(lines):
                source = lines[self.line - 1].rstrip()
                gutter = f"{self.line:>5} | "
                marker = ""
                if self.column is not None and 1 <= self.column <= len(source) + 1:
                    lead = "".join("\t" if ch == "\t" else " " for ch in source[: self.column - 1])
                    marker = "\n" + " " * (len(gutter) - 2) + "| " + lead + "^"
                self.excerpt = gutter + source + marker
        return self

    @classmethod
    def at(cls, location: Location, message: str) -> InputError:
        """Build an error at an existing :class:`Location`."""
        return cls(location.file, location.line, location.column, location.key, message)

    @property
    def file(self) -> str:
        return self.location.file

    @property
    def line(self) -> int | None:
        return self.location.line

    @property
    def column(self) -> int | None:
        return self.location.column

    @property
    def key(self) -> str:
        return self.location.key


class InternalError(Exception):
    """A bug in ruleguard (exit 3)."""


class NumericalWarning(UserWarning):
    """A numerical caveat worth a note in the report (never an exit status)."""


class LoopNotAnalysable(Exception):
    """A loop that cannot be analysed (improper controller, unusable model, ...).

    Not an input error: the loop is reported with ``"analysed": false`` and a
    finding of ``rule`` (for example ``controller.derivative-filter``) at
    ``location`` says why.
    """

    def __init__(self, reason: str, rule: str, location: Location) -> None:
        super().__init__(reason)
        self.reason = reason
        self.rule = rule
        self.location = location
