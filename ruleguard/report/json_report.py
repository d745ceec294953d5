"""The JSON report (``--format json``): FORMATS.md section 5, a stable contract.

Every key of the contract is present, ``null`` where the contract says so.
Additions (documented in ``docs/formats-additions.md``): ``project``,
``summary.fail_at``, ``loops[].not_analysed_reason``, ``loops[].tags``,
``variants[].notes``, ``stability.through_critical_point``,
``findings[].waiver_reason``, ``findings[].key_path``,
``findings[].related``. Non-finite floats never appear (they become
``null``), so any strict JSON reader accepts the output.

The document validates against ``ruleguard/load/schemas/report.schema.json``.
"""

from __future__ import annotations

import json

from ruleguard.report.model import Report
from ruleguard.report.records import finding_to_dict, loop_to_dict
from ruleguard.rules.base import Severity

TOOL_NAME = "ruleguard"


def report_data(report: Report) -> dict:
    """The report as JSON data (what :func:`render` prints)."""
    return {
        "tool": {"name": TOOL_NAME, "version": report.tool_version},
        "project": {
            "name": report.project_name,
            "manifest": report.manifest_file,
            "ruleset": report.ruleset_name,
        },
        "summary": {
            "loops": len(report.loops),
            "evaluations": report.evaluations,
            "errors": report.count(Severity.ERROR),
            "warnings": report.count(Severity.WARNING),
            "notes": report.count(Severity.NOTE),
            "waived": report.waived,
            "result": "fail" if report.failed else "pass",
            "fail_at": Severity(report.fail_at).value,
        },
        "loops": [loop_to_dict(loop) for loop in report.loops],
        "findings": [finding_to_dict(f) for f in report.findings],
    }


def render(report: Report, *, indent: int | None = 2, **_options) -> str:
    """The JSON report as text (UTF-8, strict JSON, a trailing newline)."""
    data = report_data(report)
    return json.dumps(data, indent=indent, ensure_ascii=False, allow_nan=False) + "\n"
