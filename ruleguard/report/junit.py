"""JUnit XML (``--format junit``) for CI dashboards.

The de-facto JUnit XML shape read by CI servers and test dashboards:
``<testsuites>`` / one ``<testsuite>`` per loop / one ``<testcase>`` per rule
applied to that loop. A rule with an unwaived finding at or above the
report's ``fail_at`` gives ``<failure>`` elements carrying the message (one per
finding); findings below it are listed in the case's ``<system-out>``; a
rule whose findings are all waived is ``<skipped>`` with the waiver reason.
Findings that belong to no loop (ruleset-wide) form a suite named
``(project)``. The test cases are the rules evaluated (``Report.active_rules``, or
every rule of ``Report.rules`` when that is ``None``) plus any rule that
reported something; ``classname`` is ``ruleguard.<loop>``. In a loop that
was not analysed, the rules without a finding are ``<skipped>`` with the
reason.
"""

from __future__ import annotations

import re
import xml.etree.ElementTree as ET

from ruleguard.report.model import Report
from ruleguard.report.units import finding_figures
from ruleguard.rules.base import Finding, Severity

PROJECT_SUITE = "(project)"
# characters XML 1.0 does not allow, even escaped
_INVALID_XML = re.compile("[\x00-\x08\x0b\x0c\x0e-\x1f\ufffe\uffff]")


def _clean(text: str) -> str:
    return _INVALID_XML.sub("\ufffd", text)


def _describe(finding: Finding) -> str:
    lines = [finding.message]
    loc = finding.location
    place = loc.file
    if loc.line is not None:
        place += f":{loc.line}" + (f":{loc.column}" if loc.column is not None else "")
    lines.append(f"at {place}" + (f" ({loc.key})" if loc.key else ""))
    facts = []
    if finding.variant:
        facts.append(f"variant {finding.variant}")
    facts.extend(finding_figures(finding))
    if facts:
        lines.append(", ".join(facts))
    return "\n".join(lines)


def render(report: Report, **_options) -> str:
    """The JUnit XML document as text (UTF-8, with an XML declaration)."""
    rule_ids = (
        list(report.active_rules)
        if report.active_rules is not None
        else [info.id for info in report.rules]
    )
    suites: list[tuple[str, list[Finding]]] = [
        (loop.name, [f for f in report.findings if f.loop == loop.name])
        for loop in report.loops
    ]
    known = {loop.name for loop in report.loops}
    stray = [f for f in report.findings if f.loop is None or f.loop not in known]
    if stray:
        suites.append((PROJECT_SUITE, stray))

    root = ET.Element("testsuites", name="ruleguard")
    totals = {"tests": 0, "failures": 0, "skipped": 0}
    for name, findings in suites:
        suite = _suite(report, name, findings, rule_ids if name != PROJECT_SUITE else [])
        root.append(suite)
        for key in totals:
            totals[key] += int(suite.get(key, "0"))
    root.set("tests", str(totals["tests"]))
    root.set("failures", str(totals["failures"]))
    root.set("errors", "0")
    root.set("skipped", str(totals["skipped"]))
    ET.indent(root)
    body = ET.tostring(root, encoding="unicode")
    return '<?xml version="1.0" encoding="UTF-8"?>\n' + body + "\n"


def _suite(report: Report, name: str, findings: list[Finding], rule_ids: list[str]):
    suite = ET.Element("testsuite", name=_clean(name))
    loop = next((lp for lp in report.loops if lp.name == name), None)
    if loop is not None:
        properties = ET.SubElement(suite, "properties")
        for key, value in (
            ("domain", loop.domain),
            ("sample_rate_hz", "" if loop.sample_rate_hz is None else repr(loop.sample_rate_hz)),
            ("analysed", str(loop.analysed).lower()),
            ("variants", str(len(loop.variants))),
        ):
            ET.SubElement(properties, "property", name=key, value=value)
    cases = list(rule_ids)
    for f in findings:
        if f.rule not in cases:
            cases.append(f.rule)
    failures = skipped = 0
    for rule_id in cases:
        own = [f for f in findings if f.rule == rule_id]
        case = ET.SubElement(
            suite, "testcase", name=rule_id, classname=_clean(f"ruleguard.{name}"), time="0"
        )
        failing = [f for f in own
                   if not f.waived and Severity(f.severity).rank >= report.fail_at.rank]
        below = [f for f in own
                 if not f.waived and Severity(f.severity).rank < report.fail_at.rank]
        waived = [f for f in own if f.waived]
        for f in failing:
            failure = ET.SubElement(
                case, "failure", message=_clean(f.message), type=Severity(f.severity).value
            )
            failure.text = _clean(_describe(f))
        if failing:
            failures += 1
        elif waived and not below:
            reasons = "; ".join(sorted({f.waiver_reason or "waived" for f in waived}))
            ET.SubElement(case, "skipped", message=_clean(f"waived: {reasons}"))
            skipped += 1
        elif not own and loop is not None and not loop.analysed:
            reason = loop.not_analysed_reason or "the loop was not analysed"
            ET.SubElement(case, "skipped", message=_clean(f"not analysed: {reason}"))
            skipped += 1
        listed = below + (waived if failing or below else [])
        if listed:
            out = ET.SubElement(case, "system-out")
            out.text = _clean("\n\n".join(
                f"{Severity(f.severity).value}{' (waived)' if f.waived else ''}: {_describe(f)}"
                for f in listed
            ))
    suite.set("tests", str(len(cases)))
    suite.set("failures", str(failures))
    suite.set("errors", "0")
    suite.set("skipped", str(skipped))
    return suite
