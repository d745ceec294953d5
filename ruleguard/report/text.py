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
    from rich.console import Console

    prefix = _path_prefix(report.root, base_dir)

    buffer = io.StringIO()
    console = Console(
        file=buffer,
        width=width or 100,
        force_terminal=color,
        color_system="standard" if color else None,
        no_color=not color,
        highlight=False,
        emoji=False,
        markup=False,
        legacy_windows=False,
    )
    if not quiet:
        _heading(console, report)
        for loop in report.loops:
            _loop_block(console, report, loop)
    active = [f for f in report.findings if not f.waived]
    waived = [f for f in report.findings if f.waived]
    active.sort(key=lambda f: -Severity(f.severity).rank)  # stable: report order within
    if active and not quiet:
        console.print(_styled(f"findings ({len(active)})", "bold"))
    for finding in active:
        _finding_block(console, report, finding, prefix)
    if quiet:
        return buffer.getvalue()
    if waived:
        console.print(_styled(f"waived ({len(waived)})", "bold"))
        for finding in waived:
            _finding_block(console, report, finding, prefix)
    _result_line(console, report)
    console.print(_styled(CAUTION, "dim"), soft_wrap=True)
    return buffer.getvalue()


# ---------------------------------------------------------------- pieces
def _styled(text: str, style: str = ""):
    from rich.text import Text

    return Text(text, style=style)


def _heading(console, report: Report) -> None:
    from rich.text import Text

    line = Text()
    line.append(f"ruleguard {report.tool_version}", "bold")
    line.append(f"  project {report.project_name or '-'}")
    line.append(f"  manifest {report.manifest_file}")
    if report.ruleset_name:
        line.append(f"  ruleset {report.ruleset_name}")
    console.print(line, soft_wrap=True)
    console.print()


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


def _loop_block(console, report: Report, loop: LoopResult) -> None:
    from rich import box
    from rich.table import Table
    from rich.text import Text

    title = Text()
    title.append(f"loop {loop.name}", "bold")
    title.append(f"  {_loop_header(loop)}")
    console.print(title, soft_wrap=True)
    summary = loop_summary(loop)
    if not summary.analysed:
        reason = loop.not_analysed_reason or "no reason given"
        console.print(_styled(f"  not analysed: {reason}", "bold red"), soft_wrap=True)
        console.print()
        return

    several = summary.variants > 1
    table = Table(box=box.SIMPLE_HEAD, show_edge=False, pad_edge=False, padding=(0, 1))
    table.add_column("figure", style="bold" if console.color_system else "")
    table.add_column("nominal", justify="right")
    if several:
        table.add_column(f"worst of {summary.variants} variants", justify="right")
        table.add_column("variant")

    nominal = loop.variants[0].analysis.stability
    verdict_nominal = _stability_word(nominal)
    row = [Text("closed loop"), _verdict_text(verdict_nominal, nominal.stable)]
    if several:
        count = len(summary.unstable_variants)
        if count:
            row += [
                _verdict_text(f"{count} unstable", False),
                Text(", ".join(summary.unstable_variants[:3])
                     + (" …" if count > 3 else "")),
            ]
        else:
            row += [_verdict_text("all stable", True), Text("")]
    table.add_row(*row)

    p_values = [v.analysis.stability.open_loop_unstable_poles for v in loop.variants]
    n_values = [v.analysis.stability.ccw_encirclements for v in loop.variants]
    ids = [v.id for v in loop.variants]
    table.add_row(*_plain_row("open-loop unstable poles P", p_values, ids, several))
    table.add_row(*_plain_row("ccw encirclements of -1", n_values, ids, several))
    for figure_row in summary.rows:
        table.add_row(*_figure_row(figure_row, several))
    console.print(table)
    for note in loop.notes:
        console.print(_styled(f"  note: {note}", "dim"), soft_wrap=True)
    console.print()


def _stability_word(stability) -> str:
    if stability.stable:
        return "stable"
    if stability.closed_loop_unstable_poles is None:
        return "unstable (through -1)"
    return f"unstable (Z = {stability.closed_loop_unstable_poles})"


def _verdict_text(word: str, good: bool):
    return _styled(word, "green" if good else "bold red")


def _plain_row(label: str, values: list, ids: list[str], several: bool):
    from rich.text import Text

    shown = ["-" if v is None else str(v) for v in values]
    row = [Text(label), Text(shown[0])]
    if several:
        differing = [(i, s) for i, s in zip(ids, shown, strict=True) if s != shown[0]]
        if not differing:
            row += [Text(shown[0]), Text("")]
        else:
            distinct = sorted({s for _, s in differing}, key=[s for _, s in differing].index)
            row += [Text(", ".join(distinct)), Text(differing[0][0])]
    return row


def _figure_row(row: FigureRow, several: bool):
    from rich.text import Text

    label = row.label + (f" ({row.unit})" if row.unit in ("samples",) else "")
    cells = [Text(label), Text(_cell(row.nominal, row.unit))]
    if several:
        cells.append(Text(_cell(row.worst, row.unit)))
        shown = row.worst.variant if row.worst.state != NOT_APPLICABLE else None
        cells.append(Text(shown or ""))
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


def _finding_block(console, report: Report, finding: Finding, prefix: str = "") -> None:
    from rich.text import Text

    severity = Severity(finding.severity).value
    first = Text()
    first.append(_place(finding.location, report, prefix), "bold")
    first.append(": ")
    if finding.waived:
        first.append(f"waived {severity}", "dim")
    else:
        first.append(severity, SEVERITY_STYLE.get(severity, ""))
    first.append(": ")
    first.append(finding.rule, "magenta")
    first.append(": ")
    first.append(finding.message)
    console.print(first, soft_wrap=True)

    excerpt = _excerpt(report, finding.location)
    width = max([len(g) for g, _ in excerpt] + [4])
    pad = " " * (width + 1)
    console.print(_styled(f"{pad}  {_detail(finding)}", "dim"), soft_wrap=True)
    for gutter, line in excerpt:
        row = Text()
        row.append(f"{gutter.rjust(width + 1)} ┆ ", "dim")
        row.append(line, "" if gutter else ("bold red" if not finding.waived else "dim"))
        console.print(row, soft_wrap=True)
    if finding.waived and finding.waiver_reason:
        console.print(_styled(f"{pad}  waiver: {finding.waiver_reason}", "dim"), soft_wrap=True)
    hint = hint_line(finding.hint)
    if hint:
        console.print(_styled(f"{pad}  fix hint: {hint}", "cyan"), soft_wrap=True)
    for related in finding.related:
        key = f" ({related.key})" if related.key else ""
        console.print(
            _styled(f"{pad}  see {_place(related, report, prefix)}{key}", "dim"), soft_wrap=True
        )
    console.print()


def _result_line(console, report: Report) -> None:
    from rich.text import Text

    errors = report.count(Severity.ERROR)
    warnings = report.count(Severity.WARNING)
    notes = report.count(Severity.NOTE)
    line = Text()
    if report.failed:
        line.append("FAIL", "bold red")
    else:
        line.append("PASS", "bold green")
    line.append(
        f"  {_plural(errors, 'error')}, {_plural(warnings, 'warning')}, "
        f"{_plural(notes, 'note')}, {report.waived} waived"
        f" · {_plural(len(report.loops), 'loop')}, "
        f"{_plural(report.evaluations, 'evaluation')}"
        f" · fails at {Severity(report.fail_at).value}"
    )
    console.print(line, soft_wrap=True)


def _plural(count: int, word: str) -> str:
    return f"{count} {word}" + ("" if count == 1 else "s")
