"""Where a finding points: config locations and fingerprint key paths.

Every finding must point at the config element most responsible for it
(RULES.md): the loop's controller table (what a tuner changes) for margin and
stability findings, one of its fields or filter entries for controller and
filter rules, the manifest's loop entry for sample-rate rules. The plant
entry and the ruleset line of the threshold follow as related locations
(issue "full rule catalog", item 5). These helpers find those locations in
the loaded records (:mod:`ruleguard.load.spec`) and fall back to the
enclosing table when a field has no recorded position.

Key paths identify a finding across runs (fingerprints, INTEGRATION.md):
they are built from names, never from line numbers or measured values.
"""

from __future__ import annotations

from collections.abc import Iterable, Mapping
from dataclasses import replace
from typing import Any

from ruleguard.location import Location
from ruleguard.rules.base import LoopContext, Violation
from ruleguard.rules.spec import threshold_location


def controller_location(ctx: LoopContext) -> Location:
    """The controller table of the loop (its firmware file, ``path`` key)."""
    return ctx.spec.controller.location


def controller_field_location(ctx: LoopContext, name: str) -> Location:
    """A field of the controller table (its own key in the firmware file)."""
    controller = ctx.spec.controller
    return controller.field_locations.get(name, controller.location)


def filter_location(ctx: LoopContext, index: int) -> Location:
    """The ``index``-th filter entry of the controller, or the controller table."""
    filters = ctx.spec.controller.filters
    if 0 <= index < len(filters):
        return filters[index].location
    return ctx.spec.controller.location


def filter_field_location(ctx: LoopContext, index: int, name: str) -> Location:
    """A field of the ``index``-th filter entry, else that entry, else the controller table."""
    filters = ctx.spec.controller.filters
    if 0 <= index < len(filters):
        entry = filters[index]
        return entry.field_locations.get(name, entry.location)
    return ctx.spec.controller.location


def loop_location(ctx: LoopContext, field: str | None = None) -> Location:
    """The manifest's loop entry, or one of its fields (``sample_rate_hz``, ``bounds``)."""
    if field is not None:
        loc = ctx.spec.field_locations.get(field)
        if loc is not None:
            return loc
    return ctx.spec.location


def plant_location(ctx: LoopContext) -> Location | None:
    """The plant registry entry of the loop, when the project knows it."""
    plants = getattr(ctx.project, "plants", None) or {}
    entry = plants.get(ctx.spec.plant)
    return None if entry is None else entry.location


def block_location(ctx: LoopContext, block: Any) -> Location:
    """Location of a :class:`~ruleguard.analysis.loop.BlockModel` (its table)."""
    loc = getattr(block, "location", None)
    if isinstance(loc, Location) and loc.file:
        return loc
    if getattr(block, "role", None) == "plant":
        return plant_location(ctx) or ctx.spec.location
    return ctx.spec.controller.location


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
    """The loop's key: controller file and path (+ ``#aspect``), ``"f.toml:velocity#upper"``.

    Used by the ``stability``, ``margin`` and ``sensitivity`` families.
    """
    controller = ctx.spec.controller
    base = f"{controller.file}:{controller.path}"
    return f"{base}#{aspect}" if aspect else base


def key(*parts: str) -> str:
    """A key path joined from its non-empty parts with dots, ``"velocity.bandwidth.min"``.

    Used by the other rule families, usually starting from a location's key.
    """
    return ".".join(p for p in parts if p)


def at_operating_point(ctx: LoopContext, violation: Violation) -> Violation:
    """A scheduled loop's violation moved to the schedule row of its variant.

    A violation of variant ``schedule-3`` (or ``schedule-3/corner-2``) that
    points at the controller table, or at one of its scheduled fields, points
    at breakpoint 3's row (or array element, or that field's element)
    instead; the controller table and, for an interpolated point, the other
    breakpoint it depends on become related locations. Anything else is
    returned unchanged.
    """
    controller = ctx.spec.controller
    if getattr(controller, "schedule", None) is None or violation.variant is None:
        return violation
    point = None
    for evaluation in ctx.evaluations:
        if getattr(evaluation.variant, "id", None) == violation.variant:
            point = getattr(evaluation.variant, "operating_point", None)
            break
    if point is None:
        return violation
    location = violation.location
    moved = None
    if location == controller.location:
        moved = point.location
    else:
        for name, where in controller.field_locations.items():
            if where == location and name in point.field_locations:
                moved = point.field_locations[name]
                break
    if moved is None or moved == location:
        return violation
    related = [*point.related, controller.location]
    related += [loc for loc in violation.related if loc not in related]
    return replace(violation, location=moved, related=tuple(related))
