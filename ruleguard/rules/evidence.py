"""Evidence for findings of the H4b rule families: locations, notes, numbers.

Every finding must point at the config element most responsible for it
(RULES.md): a filter entry for filter rules, the controller table or one of
its fields for controller rules, the manifest's loop entry for sample-rate
rules. These helpers find those locations in the loaded records
(:mod:`ruleguard.load.spec`) and fall back to the enclosing table when a
field has no recorded position.
"""

from __future__ import annotations

from collections.abc import Iterable, Mapping
from typing import Any

import numpy as np

from ruleguard.location import Location
from ruleguard.rules.base import Evaluation, LoopContext, Severity, Violation


def controller_location(ctx: LoopContext) -> Location:
    """The controller table of the loop."""
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


def variant_id(evaluation: Evaluation) -> str:
    variant = evaluation.variant
    return str(getattr(variant, "id", variant))


def nyquist_hz(ctx: LoopContext) -> float | None:
    rate = ctx.spec.sample_rate_hz
    return None if rate is None else 0.5 * float(rate)


def domain_block(block: Any, discrete: bool):
    """The block's factored form in the loop's domain (``None`` when it has none)."""
    if block is None:
        return None
    return block.discrete if discrete else block.continuous


def as_number(value: Any) -> float | None:
    """A field value as a float, or ``None`` when it is not a plain number."""
    if isinstance(value, bool):
        return None
    if isinstance(value, (int, float, np.floating, np.integer)):
        out = float(value)
        return out if np.isfinite(out) else None
    evaluate = getattr(value, "evaluate", None)
    if callable(evaluate):
        try:
            out = float(evaluate({}))
        except Exception:  # noqa: BLE001 - an expression with free names is no number
            return None
        return out if np.isfinite(out) else None
    return None


def unit_of_field(name: str) -> str | None:
    """The unit carried by a key's suffix (FORMATS.md: ``_hz``, ``_s``, ``_db``, ...)."""
    suffixes = {
        "_hz": "Hz",
        "_s": "s",
        "_db": "dB",
        "_deg": "deg",
        "_samples": "samples",
        "_ohm": "ohm",
        "_h": "H",
    }
    for suffix, unit in suffixes.items():
        if name.endswith(suffix):
            return unit
    return None


def note(
    message: str,
    location: Location,
    *,
    key_path: str,
    variant: str | None = None,
    related: Iterable[Location] = (),
) -> Violation:
    """A "could not be computed here" observation (never a silent pass)."""
    return Violation(
        variant=variant,
        message=message,
        measured=None,
        limit=None,
        unit=None,
        frequency_hz=None,
        location=location,
        related=tuple(related),
        key_path=key_path,
        severity=Severity.NOTE,
    )


def param(params: Mapping[str, Any], name: str, default: Any) -> Any:
    """A rule parameter, ``default`` when absent or null."""
    value = params.get(name, default) if params is not None else default
    return default if value is None else value


def db(magnitude) -> np.ndarray | float:
    """20 log10 |x|, with -inf for zero (no warning)."""
    with np.errstate(divide="ignore"):
        return 20.0 * np.log10(np.abs(magnitude))


def fmt(value: float | None, digits: int = 4) -> str:
    """A number for a message (significant digits, no trailing noise)."""
    if value is None:
        return "n/a"
    if not np.isfinite(value):
        return "infinite" if value > 0 else "-infinite"
    return f"{value:.{digits}g}"


def unanalysed_notes(ctx: LoopContext, what: str, *, key_path: str) -> list[Violation]:
    """Notes for a loop without analysed variants.

    Nothing when the loop was reported as not analysed (that finding says
    why); otherwise one note, so the rule never passes silently.
    """
    if ctx.evaluations or ctx.not_analysed_reason is not None:
        return []
    return [
        note(
            f"{what} not checked: no variant of the loop was analysed",
            ctx.spec.controller.location,
            key_path=key_path,
        )
    ]


def split_stable(ctx: LoopContext) -> tuple[list[Evaluation], list[Evaluation]]:
    """The loop's evaluations split into closed-loop stable and not stable."""
    stable = [ev for ev in ctx.evaluations if ev.analysis.stability.stable]
    unstable = [ev for ev in ctx.evaluations if not ev.analysis.stability.stable]
    return stable, unstable


def unstable_note(
    unstable: list[Evaluation], what: str, location: Location, *, key_path: str
) -> list[Violation]:
    """One note naming the variants a closed-loop rule could not judge (unstable)."""
    if not unstable:
        return []
    names = ", ".join(variant_id(ev) for ev in unstable[:5])
    more = f" and {len(unstable) - 5} more" if len(unstable) > 5 else ""
    return [
        note(
            f"{what} not checked for closed-loop unstable variant(s) {names}{more} "
            "(see stability.closed-loop)",
            location,
            key_path=key_path,
            variant=variant_id(unstable[0]),
        )
    ]


def key(*parts: str) -> str:
    """A key path for fingerprints from non-empty parts."""
    return ".".join(p for p in parts if p)
