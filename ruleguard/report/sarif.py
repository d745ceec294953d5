"""SARIF 2.1.0 (``--format sarif``) for code-review scanners.

OASIS, *Static Analysis Results Interchange Format (SARIF) Version 2.1.0*,
OASIS Standard incorporating Approved Errata 01, 2023. One run; the tool's
rules with their summaries and ``explain`` texts; every finding a result with
a level, a message, its physical location and related locations; waived
findings as results with an external suppression carrying the reason.

What scanners rely on (INTEGRATION.md):

* ``ruleId`` is our dotted rule id, stable across runs and versions;
* artifact URIs are relative to the repository root (the manifest's folder
  prefixed with its path in the git work tree, ``uri_prefix``) with
  ``uriBaseId`` ``PROJECTROOT``; no absolute machine path appears unless
  the caller passes ``root_uri`` for ``originalUriBaseIds``;
* ``partialFingerprints`` come from the rule id, the loop name and the key
  path only, never from a line number or a measured value, so a finding is
  recognised after unrelated edits move it.
"""

from __future__ import annotations

import hashlib
import json
import os
from pathlib import Path

from ruleguard.location import Location
from ruleguard.report.model import Report, RuleInfo
from ruleguard.report.records import plain
from ruleguard.rules.base import Finding, Severity

SARIF_VERSION = "2.1.0"
SARIF_SCHEMA_URI = (
    "https://docs.oasis-open.org/sarif/sarif/v2.1.0/errata01/os/schemas/sarif-schema-2.1.0.json"
)
URI_BASE_ID = "PROJECTROOT"
FINGERPRINT_NAME = "ruleguardFinding/v1"

_LEVEL = {"error": "error", "warning": "warning", "note": "note", "disabled": "none"}


def finding_fingerprint(finding: Finding) -> str:
    """A hash of what identifies a finding: rule id, loop name, key path.

    The key path is the finding's ``key_path`` or, without one, the key of its
    location. Findings that belong to no loop (ruleset-wide) add the file.
    Line numbers, columns and values are deliberately left out.
    """
    key_path = finding.key_path or finding.location.key
    parts = [finding.rule, finding.loop or "", key_path]
    if finding.loop is None:
        parts.append(finding.location.file)
    digest = hashlib.sha256("\x1f".join(parts).encode("utf-8")).hexdigest()
    return digest[:32]


def repository_prefix(root: str | os.PathLike) -> str:
    """The manifest folder's path inside its git work tree (``/`` separated),
    or ``""`` when it is the work tree's top or lies in none.

    Scanners resolve SARIF paths against the repository root; a manifest in a
    subfolder needs this prefix. Found by looking for ``.git`` in the folder
    and its parents (no git command is run).
    """
    try:
        start = Path(root).resolve()
    except OSError:
        return ""
    for folder in (start, *start.parents):
        if (folder / ".git").exists():
            rel = start.relative_to(folder).as_posix()
            return "" if rel == "." else rel
    return ""


def _uri(file: str, uri_prefix: str) -> str:
    from urllib.parse import quote

    path = f"{uri_prefix.strip('/')}/{file}" if uri_prefix.strip("/") else file
    return quote(path.replace("\\", "/"), safe="/-._~")


def _in_project(location: Location) -> bool:
    """False for places that are no file of the project (``<builtin>/...``,
    ``<command line>``): SARIF artifact locations must name real files."""
    return bool(location.file) and not location.file.startswith("<")


def _describe_place(location: Location) -> str:
    place = location.file
    if location.line is not None:
        place += f":{location.line}"
    return f"{place} ({location.key})" if location.key else place


def _physical(location: Location, uri_prefix: str) -> dict:
    physical: dict = {
        "artifactLocation": {"uri": _uri(location.file, uri_prefix), "uriBaseId": URI_BASE_ID}
    }
    if location.line is not None and location.line >= 1:
        region: dict = {"startLine": location.line}
        if location.column is not None and location.column >= 1:
            region["startColumn"] = location.column
        physical["region"] = region
    return physical


def _rule_descriptor(info: RuleInfo) -> dict:
    explanation = info.explanation.strip() or info.summary
    first_paragraph = explanation.split("\n\n", 1)[0].strip()
    return {
        "id": info.id,
        "shortDescription": {"text": info.summary or info.id},
        "fullDescription": {"text": first_paragraph},
        "help": {"text": explanation},
        "defaultConfiguration": {"level": _LEVEL.get(info.default_severity, "warning")},
        "properties": {"family": info.id.split(".", 1)[0]},
    }


def _message(finding: Finding) -> str:
    text = finding.message.strip() or finding.rule
    where = []
    if finding.loop:
        where.append(f"loop {finding.loop}")
    if finding.variant:
        where.append(f"variant {finding.variant}")
    return f"{text} ({', '.join(where)})" if where else text


def render(
    report: Report,
    *,
    uri_prefix: str | None = None,
    root_uri: str | None = None,
    indent: int | None = 2,
    **_options,
) -> str:
    """The SARIF log as JSON text.

    Parameters
    ----------
    report:
        The report.
    uri_prefix:
        Path of the manifest's folder relative to the repository root (``/``
        separators), prepended to every artifact URI so that scanners find
        the files; ``""`` when the manifest sits at the repository root.
        ``None`` (the default): found with :func:`repository_prefix`.
    root_uri:
        An absolute ``file://`` URI for ``PROJECTROOT`` in
        ``originalUriBaseIds``; omitted by default (no machine paths).
    """
    if uri_prefix is None:
        uri_prefix = repository_prefix(report.root)
    return json.dumps(sarif_log(report, uri_prefix=uri_prefix, root_uri=root_uri),
                      indent=indent, ensure_ascii=False, allow_nan=False) + "\n"


def sarif_log(report: Report, *, uri_prefix: str = "", root_uri: str | None = None) -> dict:
    """The SARIF log as JSON data."""
    infos: dict[str, RuleInfo] = {info.id: info for info in report.rules}
    for finding in report.findings:  # every reported rule gets a descriptor
        if finding.rule not in infos:
            infos[finding.rule] = RuleInfo(finding.rule, finding.rule, "", finding.severity.value)
    rule_ids = list(infos)
    index = {rule_id: i for i, rule_id in enumerate(rule_ids)}

    seen: dict[str, int] = {}
    results = []
    for finding in report.findings:
        fingerprint = finding_fingerprint(finding)
        seen[fingerprint] = seen.get(fingerprint, 0) + 1
        if seen[fingerprint] > 1:  # the same rule, loop and key twice: number them
            fingerprint = f"{fingerprint}:{seen[fingerprint]}"
        results.append(
            _result(finding, index[finding.rule], fingerprint, uri_prefix, report.manifest_file)
        )

    run: dict = {
        "tool": {
            "driver": {
                "name": "ruleguard",
                "version": report.tool_version,
                "semanticVersion": report.tool_version,
                "rules": [_rule_descriptor(infos[r]) for r in rule_ids],
            }
        },
        "columnKind": "unicodeCodePoints",
        "results": results,
        "properties": {
            "project": report.project_name,
            "manifest": report.manifest_file,
            "ruleset": report.ruleset_name,
            "result": "fail" if report.failed else "pass",
        },
    }
    if root_uri:
        run["originalUriBaseIds"] = {URI_BASE_ID: {"uri": root_uri.rstrip("/") + "/"}}
    return {"$schema": SARIF_SCHEMA_URI, "version": SARIF_VERSION, "runs": [run]}


def _related(index: int, related: Location, uri_prefix: str) -> dict:
    if _in_project(related):
        return {
            "id": index,
            "physicalLocation": _physical(related, uri_prefix),
            "message": {"text": related.key or related.file},
        }
    return {"id": index, "message": {"text": _describe_place(related)}}


def _result(
    finding: Finding, rule_index: int, fingerprint: str, uri_prefix: str, manifest_file: str
) -> dict:
    primary = finding.location
    if not _in_project(primary):  # a built-in ruleset's line: point at the manifest
        primary = Location(manifest_file)
    result: dict = {
        "ruleId": finding.rule,
        "ruleIndex": rule_index,
        "level": _LEVEL[Severity(finding.severity).value],
        "message": {"text": _message(finding)},
        "locations": [{"physicalLocation": _physical(primary, uri_prefix)}],
        "partialFingerprints": {FINGERPRINT_NAME: fingerprint},
        "properties": plain(
            {
                "loop": finding.loop,
                "variant": finding.variant,
                "measured": finding.measured,
                "limit": finding.limit,
                "unit": finding.unit,
                "frequency_hz": finding.frequency_hz,
                "key": finding.key_path or finding.location.key,
            }
        ),
    }
    if finding.loop:
        result["locations"][0]["logicalLocations"] = [
            {"name": finding.loop, "fullyQualifiedName": finding.loop, "kind": "module"}
        ]
    if finding.related:
        result["relatedLocations"] = [
            _related(i, related, uri_prefix)
            for i, related in enumerate(finding.related, start=1)
        ]
    if finding.waived:
        result["suppressions"] = [
            {
                "kind": "external",
                "status": "accepted",
                "justification": finding.waiver_reason or "waived in the ruleset",
            }
        ]
    return result
