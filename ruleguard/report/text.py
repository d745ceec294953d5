"""The report for people (``--format text``, the default).

Layout (our own):

* a heading naming the project, the manifest and the ruleset;
* per loop, a table of its figures: closed-loop verdict, open-loop unstable
  poles P, counter-clockwise encirclements, the gain, phase and delay
  margins, Ms, Mt, the disk margin and the bandwidth, each at the nominal and
  at the worst variant (named);
* the findings, one per block: a first line in the GNU convention
  ``file:line:column: severity: rule: message`` (editors and terminals jump
  to it), a detail line with loop, variant, measured value, limit and
  frequency, the offending source line with a marker under the column (from
  ``Report.texts``), and the related places;
* waived findings with their reasons, a one-line result, and the caution.

Colour only when asked (``color=True``; :func:`wants_color` decides it for a
stream: a terminal, and ``NO_COLOR`` unset or empty). ``quiet=True`` prints the
unwaived findings only. Text from the inputs is never read as markup.

The layout is drawn by ``rich``. Without colour, a report whose every piece
is plain (tables that fit the width, text without tabs, control characters
or characters whose terminal width may differ from one cell) is written by
:class:`_PlainOut`, which lays out the same characters without importing
``rich`` (a third of a warm pre-commit hook's time); anything else goes to
:class:`_RichOut`. Both draw from the same calls, and the tests compare
their output.
"""

from __future__ import annotations

import io
import os
import re
from collections.abc import Mapping
from typing import TextIO

from ruleguard.location import Location
from ruleguard.report.hint_text import hint_line
from ruleguard.report.model import LoopResult, Report
from ruleguard.report.summary import (
    NOT_APPLICABLE,
    UNBOUNDED,
    VALUE,
    Figure,
    FigureRow,
    loop_summary,
)
from ruleguard.report.units import finding_figures, hertz, number, quantity
from ruleguard.rules.base import Finding, Severity

CAUTION = (
    "Caution: these are linear-model analyses, not a safety certification. Validate "
    "on hardware with protective limits, and follow the applicable standards and "
    "qualified engineering review."
)

SEVERITY_STYLE = {"error": "bold red", "warning": "bold yellow", "note": "bold cyan"}
_TOKEN = re.compile(r"""[\w.\-"'\[\]]+""")


def wants_color(stream: TextIO | None, environ: Mapping[str, str] | None = None) -> bool:
    """Colour for ``stream``: only a terminal, and never with ``NO_COLOR`` set
    to a non-empty value (https://no-color.org)."""
    env = os.environ if environ is None else environ
    if stream is None or env.get("NO_COLOR"):
        return False
    isatty = getattr(stream, "isatty", None)
    try:
        return bool(isatty and isatty())
    except ValueError:  # a closed stream
        return False


def render(
    report: Report,
    *,
    color: bool = False,
    quiet: bool = False,
    width: int | None = None,
    base_dir: str | None = None,
    **_options,
) -> str:
    """The text report as one string (ANSI styles only with ``color``).

    ``base_dir``: the folder the reader works in (the command's current
    folder). File names in the ``file:line:column`` lines are then given
    relative to it, so a terminal or editor opens them from there; without
    it they are relative to the manifest's folder, as in every machine format.
    """
    if not color:
        try:
            return _draw(_PlainOut(width or 100), report, quiet, base_dir)
        except _NeedsRich:
            pass
    return _draw(_RichOut(width or 100, color), report, quiet, base_dir)


def _draw(out, report: Report, quiet: bool, base_dir: str | None) -> str:
    prefix = _path_prefix(report.root, base_dir)
    if not quiet:
        _heading(out, report)
        for loop in report.loops:
            _loop_block(out, report, loop)
    active = [f for f in report.findings if not f.waived]
    waived = [f for f in report.findings if f.waived]
    active.sort(key=lambda f: -Severity(f.severity).rank)  # stable: report order within
    if active and not quiet:
        out.line([(f"findings ({len(active)})", "bold")], soft_wrap=False)
    for finding in active:
        _finding_block(out, report, finding, prefix)
    if quiet:
        return out.text()
    if waived:
        out.line([(f"waived ({len(waived)})", "bold")], soft_wrap=False)
        for finding in waived:
            _finding_block(out, report, finding, prefix)
    _result_line(out, report)
    out.line([(CAUTION, "dim")])
    return out.text()


# ---------------------------------------------------------------- drawing
#: A piece of a line: its text and a rich style ("" for none).
Part = tuple[str, str]


class _NeedsRich(Exception):
    """The plain writer cannot promise rich's layout for this report."""


class _RichOut:
    """Lines and tables drawn by rich (colour, wrapping of what does not fit)."""

    def __init__(self, width: int, color: bool) -> None:
        from rich.console import Console

        self._buffer = io.StringIO()
        self._console = Console(
            file=self._buffer,
            width=width,
            force_terminal=color,
            color_system="standard" if color else None,
            no_color=not color,
            highlight=False,
            emoji=False,
            markup=False,
            legacy_windows=False,
        )
        self.color = bool(self._console.color_system)

    @staticmethod
    def _text(parts: list[Part]):
        from rich.text import Text

        line = Text()
        for text, style in parts:
            line.append(text, style)
        return line

    def line(self, parts: list[Part], *, soft_wrap: bool = True) -> None:
        if soft_wrap:
            self._console.print(self._text(parts), soft_wrap=True)
        else:
            self._console.print(self._text(parts))

    def blank(self) -> None:
        self._console.print()

    def table(self, columns: list[tuple[str, str, str]], rows: list[list[Part]]) -> None:
        """``columns``: (header, justify, style); ``rows``: one Part per cell."""
        from rich import box
        from rich.table import Table

        table = Table(box=box.SIMPLE_HEAD, show_edge=False, pad_edge=False, padding=(0, 1))
        for header, justify, style in columns:
            table.add_column(header, justify=justify, style=style)  # type: ignore[arg-type]
        for row in rows:
            table.add_row(*(self._text([cell]) for cell in row))
        self._console.print(table)

    def text(self) -> str:
        return self._buffer.getvalue()


#: Characters beyond Latin-1 that the reports use, one terminal cell each.
_ONE_CELL = frozenset("…─┆∞−±≤≥→×ΩΔωπ")


def _plain_enough(text: str) -> bool:
    """Text whose every character takes one terminal cell and passes rich unchanged."""
    return all(
        " " <= ch <= "~" or ("\u00a0" <= ch < "\u0300" and ch != "\u00ad") or ch in _ONE_CELL
        for ch in text
    )


class _PlainOut:
    """The same characters as :class:`_RichOut` without colour, without rich.

    Raises :class:`_NeedsRich` for what it does not lay out the way rich
    does: a character outside :func:`_plain_enough`, a line without soft
    wrap or a table wider than ``width``.
    """

    color = False

    def __init__(self, width: int) -> None:
        self.width = width
        self._lines: list[str] = []

    def _join(self, parts: list[Part]) -> str:
        text = "".join(t for t, _ in parts)
        for piece in text.split("\n"):
            if not _plain_enough(piece):
                raise _NeedsRich
        return text

    def line(self, parts: list[Part], *, soft_wrap: bool = True) -> None:
        text = self._join(parts)
        if not soft_wrap and ("\n" in text or len(text) > self.width or text != text.strip()):
            raise _NeedsRich
        self._lines.append(text)

    def blank(self) -> None:
        self._lines.append("")

    def table(self, columns: list[tuple[str, str, str]], rows: list[list[Part]]) -> None:
        cells = [[header for header, _, _ in columns]]
        for row in rows:
            texts = [self._join([cell]) for cell in row]
            if any("\n" in t or t != t.strip() for t in texts):
                raise _NeedsRich
            cells.append(texts)
        for header, _, _ in columns:
            self._join([(header, "")])
        widths = [max(len(r[i]) for r in cells) for i in range(len(columns))]
        # SIMPLE_HEAD without edges: one space of padding each side of a cell
        # (none at the outer edges) and a blank divider: three spaces between
        total = sum(widths) + 3 * (len(columns) - 1)
        if total > self.width:
            raise _NeedsRich
        for n, texts in enumerate(cells):
            shown = [
                t.rjust(w) if justify == "right" else t.ljust(w)
                for t, w, (_, justify, _) in zip(texts, widths, columns, strict=True)
            ]
            self._lines.append("   ".join(shown))
            if n == 0:
                self._lines.append("─" * total)

    def text(self) -> str:
        return "".join(line + "\n" for line in self._lines)


# ---------------------------------------------------------------- pieces
def _heading(out, report: Report) -> None:
    line: list[Part] = [
        (f"ruleguard {report.tool_version}", "bold"),
        (f"  project {report.project_name or '-'}", ""),
        (f"  manifest {report.manifest_file}", ""),
    ]
    if report.ruleset_name:
        line.append((f"  ruleset {report.ruleset_name}", ""))
    out.line(line)
    out.blank()


def _describe_discretization(discretization) -> str:
    if not discretization:
        return ""
    if isinstance(discretization, Mapping):
        parts = []
        for key, value in discretization.items():
            if isinstance(value, (list, tuple)):
                value = ", ".join(str(v) for v in value) or "-"
            parts.append(f"{key} {value}")
        return "; ".join(parts)
    return str(discretization)


def _loop_header(loop: LoopResult) -> str:
    parts = [loop.domain]
    if loop.sample_rate_hz:
        parts.append(f"sampled at {hertz(loop.sample_rate_hz)}")
    if loop.total_delay_s is not None:
        parts.append(f"loop delay {quantity(loop.total_delay_s, 's')}")
    described = _describe_discretization(loop.discretization)
    if described:
        parts.append(f"discretized: {described}")
    if loop.tags:
        parts.append("tags " + ", ".join(loop.tags))
    return " · ".join(parts)


def _cell(figure: Figure, unit: str | None) -> str:
    if figure.state == UNBOUNDED:
        return "unbounded"
    if figure.state != VALUE:
        return figure.state
    text = number(figure.value) if unit == "samples" else quantity(figure.value, unit)
    if figure.hz is not None:
        text += f" at {hertz(figure.hz)}"
    return text


def _loop_block(out, report: Report, loop: LoopResult) -> None:
    out.line([(f"loop {loop.name}", "bold"), (f"  {_loop_header(loop)}", "")])
    summary = loop_summary(loop)
    if not summary.analysed:
        reason = loop.not_analysed_reason or "no reason given"
        out.line([(f"  not analysed: {reason}", "bold red")])
        out.blank()
        return

    several = summary.variants > 1
    columns = [("figure", "left", "bold" if out.color else ""), ("nominal", "right", "")]
    if several:
        columns.append((f"worst of {summary.variants} variants", "right", ""))
        columns.append(("variant", "left", ""))

    nominal = loop.variants[0].analysis.stability
    verdict_nominal = _stability_word(nominal)
    row: list[Part] = [("closed loop", ""), _verdict_text(verdict_nominal, nominal.stable)]
    if several:
        count = len(summary.unstable_variants)
        if count:
            row += [
                _verdict_text(f"{count} unstable", False),
                (", ".join(summary.unstable_variants[:3]) + (" …" if count > 3 else ""), ""),
            ]
        else:
            row += [_verdict_text("all stable", True), ("", "")]
    rows = [row]

    p_values = [v.analysis.stability.open_loop_unstable_poles for v in loop.variants]
    n_values = [v.analysis.stability.ccw_encirclements for v in loop.variants]
    ids = [v.id for v in loop.variants]
    rows.append(_plain_row("open-loop unstable poles P", p_values, ids, several))
    rows.append(_plain_row("ccw encirclements of -1", n_values, ids, several))
    for figure_row in summary.rows:
        rows.append(_figure_row(figure_row, several))
    out.table(columns, rows)
    for note in loop.notes:
        out.line([(f"  note: {note}", "dim")])
    out.blank()


def _stability_word(stability) -> str:
    if stability.stable:
        return "stable"
    if stability.closed_loop_unstable_poles is None:
        return "unstable (through -1)"
    return f"unstable (Z = {stability.closed_loop_unstable_poles})"


def _verdict_text(word: str, good: bool) -> Part:
    return (word, "green" if good else "bold red")


def _plain_row(label: str, values: list, ids: list[str], several: bool) -> list[Part]:
    shown = ["-" if v is None else str(v) for v in values]
    row = [(label, ""), (shown[0], "")]
    if several:
        differing = [(i, s) for i, s in zip(ids, shown, strict=True) if s != shown[0]]
        if not differing:
            row += [(shown[0], ""), ("", "")]
        else:
            distinct = sorted({s for _, s in differing}, key=[s for _, s in differing].index)
            row += [(", ".join(distinct), ""), (differing[0][0], "")]
    return row


def _figure_row(row: FigureRow, several: bool) -> list[Part]:
    label = row.label + (f" ({row.unit})" if row.unit in ("samples",) else "")
    cells = [(label, ""), (_cell(row.nominal, row.unit), "")]
    if several:
        cells.append((_cell(row.worst, row.unit), ""))
        shown = row.worst.variant if row.worst.state != NOT_APPLICABLE else None
        cells.append((shown or "", ""))
    return cells


def _path_prefix(root: str, base_dir: str | None) -> str:
    """``root`` relative to ``base_dir`` with a trailing ``/`` ("" when the same or unrelated)."""
    if not base_dir or not root:
        return ""
    import os

    try:
        rel = os.path.relpath(os.path.realpath(root), os.path.realpath(base_dir))
    except ValueError:  # another drive
        return ""
    if rel == "." or rel.startswith(".."):
        return ""
    return rel.replace(os.sep, "/") + "/"


def _place(location: Location, report: Report, prefix: str = "") -> str:
    file = location.file or report.manifest_file or "<project>"
    if prefix and not file.startswith("<"):
        file = prefix + file
    if location.line is None:
        return file
    if location.column is None:
        return f"{file}:{location.line}"
    return f"{file}:{location.line}:{location.column}"


def _detail(finding: Finding) -> str:
    parts = []
    if finding.loop:
        loop = f"loop {finding.loop}"
        if finding.variant:
            loop += f" (variant {finding.variant})"
        parts.append(loop)
    else:
        parts.append("project-wide")
    parts.extend(finding_figures(finding))
    if finding.location.key:
        parts.append(f"key {finding.location.key}")
    return " · ".join(parts)


def _excerpt(report: Report, location: Location) -> list[tuple[str, str]]:
    """The source line at ``location`` and a marker line under its column."""
    text = report.texts.get(location.file)
    if text is None or location.line is None:
        return []
    lines = text.splitlines()
    if not 1 <= location.line <= len(lines):
        return []
    source = lines[location.line - 1].rstrip()
    gutter = str(location.line)
    rows = [(gutter, source)]
    if location.column is not None and 1 <= location.column <= len(source) + 1:
        start = location.column - 1
        token = _TOKEN.match(source, start)
        length = max(1, token.end() - start) if token else 1
        lead = "".join("\t" if ch == "\t" else " " for ch in source[:start])
        rows.append(("", lead + "^" + "~" * (length - 1)))
    return rows


def _finding_block(out, report: Report, finding: Finding, prefix: str = "") -> None:
    severity = Severity(finding.severity).value
    first: list[Part] = [(_place(finding.location, report, prefix), "bold"), (": ", "")]
    if finding.waived:
        first.append((f"waived {severity}", "dim"))
    else:
        first.append((severity, SEVERITY_STYLE.get(severity, "")))
    first += [(": ", ""), (finding.rule, "magenta"), (": ", ""), (finding.message, "")]
    out.line(first)

    excerpt = _excerpt(report, finding.location)
    width = max([len(g) for g, _ in excerpt] + [4])
    pad = " " * (width + 1)
    out.line([(f"{pad}  {_detail(finding)}", "dim")])
    for gutter, line in excerpt:
        style = "" if gutter else ("bold red" if not finding.waived else "dim")
        out.line([(f"{gutter.rjust(width + 1)} ┆ ", "dim"), (line, style)])
    if finding.waived and finding.waiver_reason:
        out.line([(f"{pad}  waiver: {finding.waiver_reason}", "dim")])
    hint = hint_line(finding.hint)
    if hint:
        out.line([(f"{pad}  fix hint: {hint}", "cyan")])
    for related in finding.related:
        key = f" ({related.key})" if related.key else ""
        out.line([(f"{pad}  see {_place(related, report, prefix)}{key}", "dim")])
    out.blank()


def _result_line(out, report: Report) -> None:
    errors = report.count(Severity.ERROR)
    warnings = report.count(Severity.WARNING)
    notes = report.count(Severity.NOTE)
    verdict = ("FAIL", "bold red") if report.failed else ("PASS", "bold green")
    out.line([
        verdict,
        (
            f"  {_plural(errors, 'error')}, {_plural(warnings, 'warning')}, "
            f"{_plural(notes, 'note')}, {report.waived} waived"
            f" · {_plural(len(report.loops), 'loop')}, "
            f"{_plural(report.evaluations, 'evaluation')}"
            f" · fails at {Severity(report.fail_at).value}",
            "",
        ),
    ])


def _plural(count: int, word: str) -> str:
    return f"{count} {word}" + ("" if count == 1 else "s")
