"""What a finding points at: the config elements most responsible for it.

Margin and stability findings locate the loop's controller table (what a
tuner changes), with the plant entry and the ruleset line of the threshold as
related locations (issue "full rule catalog", item 5). Used by the
``stability``, ``margin`` and ``sensitivity`` families.
"""

from __future__ import annotations

from collections.abc import Iterable, Mapping
from typing import Any

from ruleguard.location import Location
from ruleguard.rules.base import Evaluation, LoopContext, Severity, Violation
from ruleguard.rules.spec import threshold_location


def controller_location(ctx: LoopContext) -> Location:
    """The controller table of the loop (its firmware file, ``path`` key)."""
    return ctx.spec.controller.location


def plant_location(ctx: LoopContext) -> Location | None:
    """The plant registry entry of the loop, when the project knows it."""
    plants = getattr(ctx.project, "plants", None) or {}
    entry = plants.get(ctx.spec.plant)
    return entry.location if entry is not None else None


def related_locations(
    ctx: LoopContext, params: Mapping[str, Any], names: Iterable[str] = ()
) -> tuple[Location, ...]:
    """Plant entry, then the ruleset lines of the parameters ``names``."""
    related: list[Location] = []
    plant = plant_location(ctx)
    if plant is not None:
        related.append(plant)
    for name in names:
        loc = threshold_location(params, name)
        if loc is not None and loc not in related:
            related.append(loc)
    return tuple(related)


def key_path(ctx: LoopContext, aspect: str = "") -> str:
    """A stable key for fingerprints: controller file and path (+ aspect).

    Built from names, never from line numbers or measured values, so the
    same finding keeps its key across unrelated edits (INTEGRATION.md).
    """
    controller = ctx.spec.controller
    base = f"{controller.file}:{controller.path}"
    return f"{base}#{aspect}" if aspect else base


def variant_id(evaluation: Evaluation) -> str | None:
    """The id of an evaluation's variant (``"nominal"``, ``"corner-3"``, ...)."""
    variant = evaluation.variant
    if variant is None:
        return None
    if isinstance(variant, str):
        return variant
    return getattr(variant, "id", None)


def format_number(value: float) -> str:
    """A number as messages show it: 4 significant digits, no trailing noise."""
    if value == 0:
        return "0"
    text = f"{value:.4g}"
    if "e" in text:
        mantissa, exponent = text.split("e")
        return f"{mantissa}e{int(exponent)}"
    return text


def variants_phrase(failing: int, total: int) -> str:
    """``" (worst variant; 3 of 9 variants fail)"``, or ``""`` for a single variant."""
    if total <= 1:
        return ""
    return f" (worst variant; {failing} of {total} variants fail)"


def note(
    ctx: LoopContext, message: str, aspect: str = "", variant: str | None = None
) -> Violation:
    """A NOTE-severity violation: the rule could not judge this loop, and says why."""
    return Violation(
        variant=variant,
        message=message,
        measured=None,
        limit=None,
        unit=None,
        frequency_hz=None,
        location=controller_location(ctx),
        related=related_locations(ctx, {}),
        key_path=key_path(ctx, aspect),
        severity=Severity.NOTE,
    )


def not_analysed(ctx: LoopContext) -> bool:
    """True when the loop has no analysis; the engine reports the reason once.

    Rules that need the analysis yield nothing for such a loop (the engine's
    not-analysed finding covers it); rules that only read the configuration
    may still run.
    """
    return not ctx.evaluations and ctx.not_analysed_reason is not None
