"""Where rule findings point, and the small phrases they share.

Rebuilt by H4b after H4b's editor overwrote the first version of this file
by accident (same path, before it was committed); the functions are the ones
:mod:`ruleguard.rules.stability` imports, with the behaviour its calls imply.
H4a: check and replace freely.
"""

from __future__ import annotations

from collections.abc import Iterable, Mapping
from typing import Any

import numpy as np

from ruleguard.location import Location
from ruleguard.rules.base import Evaluation, LoopContext, Severity, Violation
from ruleguard.rules.spec import threshold_location


def controller_location(ctx: LoopContext) -> Location:
    """The controller table of the loop (what to change for most findings)."""
    return ctx.spec.controller.location


def plant_location(ctx: LoopContext) -> Location | None:
    plants = getattr(ctx.project, "plants", None) or {}
    entry = plants.get(getattr(ctx.spec, "plant", None))
    return None if entry is None else entry.location


def related_locations(
    ctx: LoopContext, params: Mapping[str, Any], names: Iterable[str] | None = None
) -> tuple[Location, ...]:
    """The plant entry, the sensor entry and the ruleset lines of the thresholds.

    ``names`` limits the thresholds to those parameters (default: all of ``params``).
    """
    out: list[Location] = []
    plants = getattr(ctx.project, "plants", None) or {}
    for name in (getattr(ctx.spec, "plant", None), getattr(ctx.spec, "sensor", None)):
        entry = plants.get(name) if name else None
        if entry is not None:
            out.append(entry.location)
    for name in (params or ()) if names is None else names:
        loc = threshold_location(params, name)
        if loc is not None:
            out.append(loc)
    return tuple(out)


def key_path(ctx: LoopContext, *parts: str) -> str:
    """A stable key for fingerprints: the controller's key path, then ``parts``."""
    base = ctx.spec.controller.location.key or ctx.spec.controller.path or ctx.spec.name
    return ".".join([base, *[p for p in parts if p]])


def not_analysed(ctx: LoopContext) -> bool:
    """True when the loop was reported as not analysed (its reason is a finding already)."""
    return ctx.not_analysed_reason is not None


def note(ctx: LoopContext, message: str, *, variant: str | None = None) -> Violation:
    """A "could not be judged" observation at the controller table (severity note)."""
    return Violation(
        variant=variant,
        message=message,
        measured=None,
        limit=None,
        unit=None,
        frequency_hz=None,
        location=controller_location(ctx),
        key_path=key_path(ctx),
        severity=Severity.NOTE,
    )


def variant_id(evaluation: Evaluation) -> str:
    variant = evaluation.variant
    return str(getattr(variant, "id", variant))


def variants_phrase(failing: int, total: int) -> str:
    """`` (3 of 8 variants)`` when a family has several variants, else ``""``."""
    if total <= 1:
        return ""
    return f" ({failing} of {total} variants)"


def format_number(value: float | None, digits: int = 4) -> str:
    if value is None:
        return "n/a"
    if not np.isfinite(value):
        return "infinite" if value > 0 else "-infinite"
    return f"{value:.{digits}g}"
