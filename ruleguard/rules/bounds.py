"""Rule ``config.bounds``: controller fields within the ranges the manifest declares.

A loop entry may say ``bounds = { kp = [0.5, 4.0] }``: each named field of
the loop's controller must lie in ``[min, max]`` (both ends included). A
name may also be a dotted path into a filter entry, ``"filters.0.center_hz"``.
This rule needs no analysis: it also runs on loops that could not be
analysed.
"""

from __future__ import annotations

from collections.abc import Iterable, Mapping
from typing import Any

from ruleguard.location import Location
from ruleguard.rules.base import LoopContext, Severity, Violation
from ruleguard.rules.evidence import as_number, format_number, note, unit_of_field
from ruleguard.rules.locations import controller_field_location, key, loop_location
from ruleguard.rules.spec import RuleSpec


def _lookup(ctx: LoopContext, name: str) -> tuple[bool, Any, Location]:
    """``(found, value, location)`` of a controller field or ``filters.<i>.<field>``."""
    controller = ctx.spec.controller
    if name in controller.fields:
        return True, controller.fields[name], controller_field_location(ctx, name)
    parts = name.split(".")
    if len(parts) == 3 and parts[0] == "filters" and parts[1].isdigit():
        index = int(parts[1])
        if index < len(controller.filters):
            entry = controller.filters[index]
            if parts[2] in entry.fields:
                return (
                    True,
                    entry.fields[parts[2]],
                    entry.field_locations.get(parts[2], entry.location),
                )
            return False, None, entry.location
    return False, None, controller.location


def _bounds_location(ctx: LoopContext, name: str) -> Location:
    loc = ctx.spec.field_locations.get(f"bounds.{name}")
    return loc if loc is not None else loop_location(ctx, "bounds")


def config_bounds(ctx: LoopContext, params: Mapping[str, Any]) -> Iterable[Violation]:
    """Every field named in the loop's ``bounds`` lies within its range."""
    bounds = getattr(ctx.spec, "bounds", None) or {}
    out: list[Violation] = []
    for name in sorted(bounds):
        low, high = bounds[name]
        declared = _bounds_location(ctx, name)
        found, raw, where = _lookup(ctx, name)
        path = key(where.key or ctx.spec.controller.location.key, "bounds", name)
        if not found:
            out.append(
                note(
                    f"bounds name `{name}`, which the controller table does not set: "
                    "not checked",
                    declared,
                    key_path=path,
                    related=(ctx.spec.controller.location,),
                )
            )
            continue
        schedule = getattr(ctx.spec.controller, "schedule", None)
        if schedule is not None and name in schedule.fields:
            out.extend(_scheduled_bounds(ctx, schedule, name, low, high, declared, path))
            continue
        value = as_number(raw)
        if value is None:
            out.append(
                note(
                    f"`{name}` is not a number ({raw!r}): bounds not checked",
                    where,
                    key_path=path,
                    related=(declared,),
                )
            )
            continue
        unit = unit_of_field(name.rsplit(".", 1)[-1])
        suffix = f" {unit}" if unit else ""
        if low is not None and value < float(low):
            limit, side = float(low), "below the minimum"
        elif high is not None and value > float(high):
            limit, side = float(high), "above the maximum"
        else:
            continue
        out.append(
            Violation(
                variant=None,
                message=(
                    f"`{name}` = {format_number(value, 6)}{suffix} is {side} "
                    f"{format_number(limit, 6)}{suffix} (bounds [{format_number(low, 6)}, "
                    f"{format_number(high, 6)}] declared for loop {ctx.spec.name})"
                ),
                measured=value,
                limit=limit,
                unit=unit,
                frequency_hz=None,
                location=where,
                related=(declared,),
                key_path=path,
            )
        )
    return out


def _scheduled_bounds(ctx, schedule, name, low, high, declared, path) -> list[Violation]:
    """A scheduled field's bounds at every breakpoint: the farthest one outside, at its row."""
    worst = None
    for point in schedule.points:
        value = point.fields[name]
        if low is not None and value < float(low):
            excess, limit, side = float(low) - value, float(low), "below the minimum"
        elif high is not None and value > float(high):
            excess, limit, side = value - float(high), float(high), "above the maximum"
        else:
            continue
        if worst is None or excess > worst[0]:
            worst = (excess, limit, side, point)
    if worst is None:
        return []
    _, limit, side, point = worst
    unit = unit_of_field(name)
    suffix = f" {unit}" if unit else ""
    return [Violation(
        variant=None,
        message=(
            f"`{name}` = {format_number(point.fields[name], 6)}{suffix} at schedule breakpoint "
            f"{point.number} ({schedule.variable} = {format_number(point.value, 6)}) is {side} "
            f"{format_number(limit, 6)}{suffix} (bounds [{format_number(low, 6)}, "
            f"{format_number(high, 6)}] declared for loop {ctx.spec.name})"
        ),
        measured=point.fields[name],
        limit=limit,
        unit=unit,
        frequency_hz=None,
        location=point.field_locations.get(name, point.location),
        related=(declared,),
        key_path=path,
    )]


RULES: tuple[RuleSpec, ...] = (
    RuleSpec(
        id="config.bounds",
        default_severity=Severity.ERROR,
        summary="Controller fields lie within the bounds declared in the manifest.",
        explanation=(
            "For every entry of the loop's `bounds` in the manifest (for example "
            "`bounds = { kp = [0.5, 4.0] }`), checks that the controller field of that name "
            "lies in [min, max], ends included. Names are ruleguard's field names after "
            "`map` (so `kp` even when the firmware calls it `P`); `filters.<i>.<field>` "
            "reaches a filter entry. A name the controller does not set, or a value that is "
            "not a number, gets a note. A field a gain schedule tabulates is checked at "
            "every breakpoint (the farthest outside is reported, at its row).\n\n"
            "Why it matters: bounds record what a review accepted, what an actuator or a "
            "fixed-point format can hold, or what a safety analysis assumed. A retune that "
            "leaves them is caught at commit time, not on the machine.\n\n"
            "How to fix it: bring the field back into range, or, after review, widen the "
            "bounds in the manifest."
        ),
        source="the manifest's own bounds (no default threshold)",
        parameters=(),
        function=config_bounds,
    ),
)
