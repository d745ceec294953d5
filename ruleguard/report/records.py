"""The report records as plain JSON data, in both directions.

:func:`loop_to_dict` and :func:`finding_to_dict` give the FORMATS.md section 5
shapes (``loops[]`` and ``findings[]``) that the JSON report prints; the
cache (:mod:`ruleguard.cache`) stores the same shapes and reads them back with
:func:`loop_from_dict` and :func:`finding_from_dict` (never pickle).

Two float policies:

* ``finite_only=True`` (the report): a non-finite float becomes ``None`` so
  the output is strict JSON (RFC 8259 has no NaN or Infinity).
* ``finite_only=False`` (the cache): floats are kept as they are; Python's
  :mod:`json` writes and reads ``Infinity``/``NaN`` and ``repr`` of a float
  round-trips exactly, so a cached record equals the computed one.
"""

from __future__ import annotations

import math
from collections.abc import Mapping
from typing import Any

from ruleguard.analysis.results import (
    Crossover,
    DiskMargin,
    LoopAnalysis,
    Margins,
    Stability,
)
from ruleguard.location import Location
from ruleguard.report.model import LoopResult, VariantResult
from ruleguard.rules.base import Finding, Severity
from ruleguard.rules.hints import FixHint


def plain(value: Any, *, finite_only: bool = True) -> Any:
    """``value`` as JSON data: tuples to lists, mappings to dicts, enums to values.

    With ``finite_only``, NaN and infinities become ``None``.
    """
    if isinstance(value, bool) or value is None or isinstance(value, str):
        return value
    if isinstance(value, Severity):
        return value.value
    if isinstance(value, int):
        return value
    if isinstance(value, float):
        if finite_only and not math.isfinite(value):
            return None
        return value
    if isinstance(value, Mapping):
        return {str(k): plain(v, finite_only=finite_only) for k, v in value.items()}
    if isinstance(value, (list, tuple, set, frozenset)):
        items = sorted(value) if isinstance(value, (set, frozenset)) else value
        return [plain(v, finite_only=finite_only) for v in items]
    # numpy scalars and other number-likes: go through float/int without importing numpy
    if hasattr(value, "item"):
        return plain(value.item(), finite_only=finite_only)
    return str(value)


# ---------------------------------------------------------------- to dicts
def location_to_dict(location: Location) -> dict:
    return {
        "file": location.file,
        "line": location.line,
        "column": location.column,
        "key": location.key,
    }


def stability_to_dict(stability: Stability, *, finite_only: bool = True) -> dict:
    return {
        "stable": bool(stability.stable),
        "open_loop_unstable_poles": stability.open_loop_unstable_poles,
        "ccw_encirclements": stability.ccw_encirclements,
        "closed_loop_unstable_poles": stability.closed_loop_unstable_poles,
        "through_critical_point": bool(stability.through_critical_point),
    }


def disk_margin_to_dict(disk: DiskMargin | None, *, finite_only: bool = True) -> dict | None:
    if disk is None:
        return None
    return plain(
        {
            "alpha": disk.alpha,
            "gain_range_db": list(disk.gain_range_db),
            "phase_deg": disk.phase_deg,
            "hz": disk.hz,
        },
        finite_only=finite_only,
    )


def margins_to_dict(margins: Margins, *, finite_only: bool = True) -> dict:
    data = {
        "gain_margin_db": margins.gain_margin_db,
        "gain_margin_hz": margins.gain_margin_hz,
        "lower_gain_margin_db": margins.lower_gain_margin_db,
        "lower_gain_margin_hz": margins.lower_gain_margin_hz,
        "stable_gain_ranges_db": [list(r) for r in margins.stable_gain_ranges_db],
        "phase_margin_deg": margins.phase_margin_deg,
        "crossover_hz": margins.crossover_hz,
        "crossovers": [
            {"hz": c.hz, "phase_margin_deg": c.phase_margin_deg} for c in margins.crossovers
        ],
        "delay_margin_s": margins.delay_margin_s,
        "delay_margin_samples": margins.delay_margin_samples,
        "sensitivity_peak_db": margins.sensitivity_peak_db,
        "sensitivity_peak_hz": margins.sensitivity_peak_hz,
        "complementary_peak_db": margins.complementary_peak_db,
        "complementary_peak_hz": margins.complementary_peak_hz,
        "disk_margin": None,
        "bandwidth_hz": margins.bandwidth_hz,
    }
    data = plain(data, finite_only=finite_only)
    data["disk_margin"] = disk_margin_to_dict(margins.disk_margin, finite_only=finite_only)
    return data


def variant_to_dict(variant: VariantResult, *, finite_only: bool = True) -> dict:
    analysis = variant.analysis
    return {
        "id": variant.id,
        "parameters": plain(dict(variant.parameters), finite_only=finite_only),
        "stability": stability_to_dict(analysis.stability, finite_only=finite_only),
        "margins": margins_to_dict(analysis.margins, finite_only=finite_only),
        "notes": [str(n) for n in analysis.notes],
    }


def loop_to_dict(loop: LoopResult, *, finite_only: bool = True) -> dict:
    """``loops[]`` of FORMATS.md section 5 (plus the documented additions)."""
    return {
        "name": loop.name,
        "domain": loop.domain,
        "sample_rate_hz": plain(loop.sample_rate_hz, finite_only=finite_only),
        "analysed": bool(loop.analysed),
        "not_analysed_reason": loop.not_analysed_reason,
        "tags": list(loop.tags),
        "analysis": {
            "discretization": plain(loop.discretization, finite_only=finite_only),
            "total_delay_s": plain(loop.total_delay_s, finite_only=finite_only),
            "notes": [str(n) for n in loop.notes],
        },
        "variants": [variant_to_dict(v, finite_only=finite_only) for v in loop.variants],
    }


def finding_to_dict(finding: Finding, *, finite_only: bool = True) -> dict:
    """``findings[]`` of FORMATS.md section 5 (plus the documented additions)."""
    return {
        "rule": finding.rule,
        "severity": Severity(finding.severity).value,
        "loop": finding.loop,
        "variant": finding.variant,
        "message": finding.message,
        "measured": plain(finding.measured, finite_only=finite_only),
        "limit": plain(finding.limit, finite_only=finite_only),
        "unit": finding.unit,
        "frequency_hz": plain(finding.frequency_hz, finite_only=finite_only),
        "location": location_to_dict(finding.location),
        "waived": bool(finding.waived),
        "waiver_reason": finding.waiver_reason,
        "key_path": finding.key_path,
        "related": [location_to_dict(r) for r in finding.related],
        "hint": hint_to_dict(finding.hint, finite_only=finite_only),
    }


def hint_to_dict(hint: FixHint | None, *, finite_only: bool = True) -> dict | None:
    """A finding's ``hint`` object (docs/formats-additions.md), ``None`` without one."""
    if hint is None:
        return None
    factor = None if hint.gain_factor_range is None else list(hint.gain_factor_range)
    change = None if hint.gain_change_db_range is None else list(hint.gain_change_db_range)
    return plain(
        {
            "gain_factor_range": factor,
            "gain_change_db_range": change,
            "suggested_gain_factor": hint.suggested_gain_factor,
            "confirmed": bool(hint.confirmed),
            "rules": list(hint.rules),
            "max_extra_delay_s": hint.max_extra_delay_s,
            "crossover_hz_at_most": hint.crossover_hz_at_most,
        },
        finite_only=finite_only,
    )


def hint_from_dict(data: Mapping[str, Any] | None) -> FixHint | None:
    """The inverse of :func:`hint_to_dict` (the cache reads findings back)."""
    if data is None:
        return None
    factor = data.get("gain_factor_range")
    return FixHint(
        gain_factor_range=None if factor is None else (float(factor[0]), _opt_float(factor[1])),
        suggested_gain_factor=_opt_float(data.get("suggested_gain_factor")),
        confirmed=bool(data.get("confirmed", False)),
        rules=tuple(str(r) for r in data.get("rules", ())),
        max_extra_delay_s=_opt_float(data.get("max_extra_delay_s")),
        crossover_hz_at_most=_opt_float(data.get("crossover_hz_at_most")),
    )


# ---------------------------------------------------------------- from dicts
def _opt_float(value: Any) -> float | None:
    return None if value is None else float(value)


def _opt_int(value: Any) -> int | None:
    return None if value is None else int(value)


def _pair(value: Any) -> tuple[float | None, float | None]:
    low, high = value
    return (_opt_float(low), _opt_float(high))


def location_from_dict(data: Mapping[str, Any]) -> Location:
    return Location(
        str(data["file"]), _opt_int(data["line"]), _opt_int(data["column"]), str(data["key"])
    )


def analysis_from_dict(data: Mapping[str, Any]) -> LoopAnalysis:
    s = data["stability"]
    stability = Stability(
        stable=bool(s["stable"]),
        open_loop_unstable_poles=int(s["open_loop_unstable_poles"]),
        ccw_encirclements=_opt_int(s["ccw_encirclements"]),
        closed_loop_unstable_poles=_opt_int(s["closed_loop_unstable_poles"]),
        through_critical_point=bool(s.get("through_critical_point", False)),
    )
    m = data["margins"]
    disk = m["disk_margin"]
    margins = Margins(
        gain_margin_db=_opt_float(m["gain_margin_db"]),
        gain_margin_hz=_opt_float(m["gain_margin_hz"]),
        lower_gain_margin_db=_opt_float(m["lower_gain_margin_db"]),
        lower_gain_margin_hz=_opt_float(m["lower_gain_margin_hz"]),
        stable_gain_ranges_db=tuple(_pair(r) for r in m["stable_gain_ranges_db"]),
        phase_margin_deg=_opt_float(m["phase_margin_deg"]),
        crossover_hz=_opt_float(m["crossover_hz"]),
        crossovers=tuple(
            Crossover(float(c["hz"]), float(c["phase_margin_deg"])) for c in m["crossovers"]
        ),
        delay_margin_s=_opt_float(m["delay_margin_s"]),
        delay_margin_samples=_opt_float(m["delay_margin_samples"]),
        sensitivity_peak_db=_opt_float(m["sensitivity_peak_db"]),
        sensitivity_peak_hz=_opt_float(m["sensitivity_peak_hz"]),
        complementary_peak_db=_opt_float(m["complementary_peak_db"]),
        complementary_peak_hz=_opt_float(m["complementary_peak_hz"]),
        disk_margin=None
        if disk is None
        else DiskMargin(
            alpha=float(disk["alpha"]),
            gain_range_db=_pair(disk["gain_range_db"]),
            phase_deg=float(disk["phase_deg"]),
            hz=_opt_float(disk["hz"]),
        ),
        bandwidth_hz=_opt_float(m["bandwidth_hz"]),
    )
    return LoopAnalysis(stability, margins, tuple(str(n) for n in data.get("notes", ())))


def variant_from_dict(data: Mapping[str, Any]) -> VariantResult:
    return VariantResult(
        id=str(data["id"]),
        parameters=dict(data["parameters"]),
        analysis=analysis_from_dict(data),
    )


def loop_from_dict(data: Mapping[str, Any]) -> LoopResult:
    analysis = data["analysis"]
    discretization = analysis["discretization"]
    return LoopResult(
        name=str(data["name"]),
        domain=str(data["domain"]),
        sample_rate_hz=_opt_float(data["sample_rate_hz"]),
        analysed=bool(data["analysed"]),
        discretization=None if discretization is None else dict(discretization),
        total_delay_s=_opt_float(analysis["total_delay_s"]),
        notes=tuple(str(n) for n in analysis["notes"]),
        variants=tuple(variant_from_dict(v) for v in data["variants"]),
        not_analysed_reason=data.get("not_analysed_reason"),
        tags=tuple(str(t) for t in data.get("tags", ())),
    )


def finding_from_dict(data: Mapping[str, Any]) -> Finding:
    return Finding(
        rule=str(data["rule"]),
        severity=Severity(data["severity"]),
        loop=data["loop"],
        variant=data["variant"],
        message=str(data["message"]),
        measured=_opt_float(data["measured"]),
        limit=_opt_float(data["limit"]),
        unit=data["unit"],
        frequency_hz=_opt_float(data["frequency_hz"]),
        location=location_from_dict(data["location"]),
        related=tuple(location_from_dict(r) for r in data.get("related", ())),
        waived=bool(data["waived"]),
        waiver_reason=data.get("waiver_reason"),
        key_path=str(data.get("key_path", "")),
        hint=hint_from_dict(data.get("hint")),
    )
