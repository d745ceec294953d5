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
import sys
from json.encoder import encode_basestring as _string

from ruleguard.report.model import Report
from ruleguard.report.records import finding_to_dict, loop_to_dict
from ruleguard.rules.base import Severity

TOOL_NAME = "ruleguard"

_FINITE_HIGH = sys.float_info.max
_FINITE_LOW = -_FINITE_HIGH


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
    return dumps(report_data(report), indent) + "\n"


def dumps(data, indent: int | None = 2) -> str:
    """``json.dumps(data, indent=indent, ensure_ascii=False, allow_nan=False)``,
    the same text, made faster for plain data.

    The standard library encodes indented output in Python, generator by
    generator; here the indented text of dicts, lists, strings, ints, floats,
    booleans and ``None`` is built in one recursive pass (strings by the
    library's own C escaping, numbers by their ``repr`` as the library writes
    them). Anything else (another type, a key that is not a string, a
    non-finite float) goes to ``json.dumps`` itself, which writes it or raises
    exactly as it always did.
    """
    if indent is None:
        return json.dumps(data, ensure_ascii=False, allow_nan=False)
    try:
        parts: list[str] = []
        _encode(data, "\n", " " * indent, parts.append)
        return "".join(parts)
    except _NotPlain:
        return json.dumps(data, indent=indent, ensure_ascii=False, allow_nan=False)


class _NotPlain(Exception):
    """A value the fast path leaves to the standard library."""


def _encode(value, newline: str, step: str, put) -> None:
    kind = type(value)
    if kind is str:
        put(_string(value))
    elif kind is dict:
        if not value:
            put("{}")
            return
        inner = newline + step
        put("{")
        separator = inner
        for key, item in value.items():
            if type(key) is not str:
                raise _NotPlain
            put(separator)
            put(_string(key))
            put(": ")
            _encode(item, inner, step, put)
            separator = "," + inner
        put(newline + "}")
    elif kind is list or kind is tuple:
        if not value:
            put("[]")
            return
        inner = newline + step
        put("[")
        separator = inner
        for item in value:
            put(separator)
            _encode(item, inner, step, put)
            separator = "," + inner
        put(newline + "]")
    elif value is None:
        put("null")
    elif value is True:
        put("true")
    elif value is False:
        put("false")
    elif kind is int:
        put(int.__repr__(value))
    elif kind is float and _FINITE_LOW <= value <= _FINITE_HIGH:
        put(float.__repr__(value))
    else:
        raise _NotPlain
