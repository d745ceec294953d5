"""A pull-request summary in Markdown (``--format markdown``).

For a review comment or a CI job's summary page: a result line, a table of
the loops (result, closed-loop verdict, worst gain, phase and delay margins
and sensitivity peak over the variants, with the variant that gives each),
the unwaived findings, the waived ones folded away, and the caution. Text
from the inputs is escaped so that it cannot change the page's structure.
"""

from __future__ import annotations

import re

from ruleguard.report.hint_text import hint_line
from ruleguard.report.model import LoopResult, Report
from ruleguard.report.summary import UNBOUNDED, VALUE, Figure, loop_summary, loop_verdict
from ruleguard.report.text import CAUTION
from ruleguard.report.units import finding_figures, hertz, quantity
from ruleguard.rules.base import Finding, Severity

_VERDICT = {
    "fail": "❌ fail",
    "warn": "⚠️ warn",
    "pass": "✅ pass",
    "not analysed": "❌ not analysed",
}
_SEVERITY_MARK = {"error": "❌", "warning": "⚠️", "note": "ℹ️"}
_SPECIAL = re.compile(r"([\\`*_{}\[\]<>()#+!|~])")


def escape(text: str) -> str:
    """``text`` with Markdown and HTML punctuation escaped, on one line."""
    return _SPECIAL.sub(r"\\\1", " ".join(str(text).split()))


def _code(text: str) -> str:
    text = " ".join(str(text).split()).replace("|", "¦")
    fence = "``" if "`" in text else "`"
    return f"{fence}{text}{fence}" if text else ""


def _figure(figure: Figure, unit: str | None, nominal_id: str = "nominal") -> str:
    if figure.state == UNBOUNDED:
        text = "unbounded"
    elif figure.state != VALUE:
        return figure.state
    else:
        text = quantity(figure.value, unit)
        if figure.hz is not None:
            text += f" at {hertz(figure.hz)}"
    if figure.variant and figure.variant != nominal_id:
        text += f" ({escape(figure.variant)})"
    return text


def _loop_row(report: Report, loop: LoopResult) -> str:
    verdict = _VERDICT[loop_verdict(report, loop)]
    summary = loop_summary(loop)
    if not summary.analysed:
        reason = escape(loop.not_analysed_reason or "not analysed")
        return f"| {_code(loop.name)} | {verdict} | {reason} | | | | |"
    if summary.unstable_variants:
        count = len(summary.unstable_variants)
        stability = f"unstable in {count} of {summary.variants}"
    else:
        stability = f"stable ({summary.variants} variant{'s' if summary.variants != 1 else ''})"
    rows = {(r.label, r.unit): r for r in summary.rows}
    cells = [
        _figure(rows[("gain margin", "dB")].worst, "dB"),
        _figure(rows[("phase margin", "deg")].worst, "deg"),
        _figure(rows[("delay margin", "s")].worst, "s"),
        _figure(rows[("sensitivity peak Ms", "dB")].worst, "dB"),
    ]
    return f"| {_code(loop.name)} | {verdict} | {stability} | " + " | ".join(cells) + " |"


def _place(finding: Finding) -> str:
    loc = finding.location
    place = loc.file
    if loc.line is not None:
        place += f":{loc.line}"
    return _code(place)


def _finding_item(finding: Finding) -> str:
    severity = Severity(finding.severity).value
    mark = _SEVERITY_MARK.get(severity, "")
    scope = f"{_code(finding.loop)}" if finding.loop else "project"
    if finding.variant:
        scope += f" ({escape(finding.variant)})"
    facts = finding_figures(finding)
    tail = f" — {', '.join(facts)}" if facts else ""
    item = (
        f"- {mark} **{severity}** {_code(finding.rule)} {scope}: {escape(finding.message)}"
        f"{tail} ({_place(finding)})"
    )
    if finding.waived:
        item += f"\n  - waiver: {escape(finding.waiver_reason or 'waived')}"
    hint = hint_line(finding.hint)
    if hint:
        item += f"\n  - fix hint: {escape(hint)}"
    return item


def render(report: Report, *, heading_level: int = 2, **_options) -> str:
    """The Markdown summary as text."""
    hashes = "#" * max(1, min(heading_level, 5))
    errors = report.count(Severity.ERROR)
    warnings = report.count(Severity.WARNING)
    notes = report.count(Severity.NOTE)
    result = "❌ FAIL" if report.failed else "✅ PASS"
    lines = [
        f"{hashes} ruleguard: {result}",
        "",
        f"{errors} error{'s' * (errors != 1)}, {warnings} warning{'s' * (warnings != 1)}, "
        f"{notes} note{'s' * (notes != 1)}, {report.waived} waived · "
        f"{len(report.loops)} loop{'s' * (len(report.loops) != 1)}, "
        f"{report.evaluations} evaluation{'s' * (report.evaluations != 1)} · "
        f"project {_code(report.project_name or '-')}"
        + (f", ruleset {_code(report.ruleset_name)}" if report.ruleset_name else "")
        + f" · fails at {Severity(report.fail_at).value}",
        "",
    ]
    if report.loops:
        lines += [
            "| loop | result | closed loop | gain margin | phase margin | delay margin | Ms |",
            "|---|---|---|---:|---:|---:|---:|",
        ]
        lines += [_loop_row(report, loop) for loop in report.loops]
        lines += ["", "Margins are the worst over the variants (the variant in brackets "
                  "when it is not the nominal).", ""]
    active = sorted((f for f in report.findings if not f.waived),
                    key=lambda f: -Severity(f.severity).rank)
    waived = [f for f in report.findings if f.waived]
    if active:
        lines += [f"{hashes}# Findings", ""]
        lines += [_finding_item(f) for f in active]
        lines.append("")
    if waived:
        lines += [
            "<details>",
            f"<summary>{len(waived)} waived finding{'s' * (len(waived) != 1)}</summary>",
            "",
        ]
        lines += [_finding_item(f) for f in waived]
        lines += ["", "</details>", ""]
    if not active and not waived:
        lines += ["No findings.", ""]
    lines += [f"> {CAUTION}", ""]
    return "\n".join(lines)

