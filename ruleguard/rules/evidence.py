"""What a finding says: variant ids, numbers in messages, notes, values read.

A rule never passes silently: what it cannot judge it reports as a
NOTE-severity violation (RULES.md). These helpers build those notes, name
variants, write numbers for messages, and read the plain values rules
compare (parameters, controller fields, dB magnitudes). Where findings point
is :mod:`ruleguard.rules.locations`.
"""

from __future__ import annotations

import math
from collections.abc import Iterable, Mapping
from typing import Any

from ruleguard.deferred import numpy as np
from ruleguard.location import Location
from ruleguard.rules.base import Evaluation, LoopContext, Severity, Violation
from ruleguard.rules.locations import controller_location, key_path, related_locations

# ------------------------------------------------------------------- variants


def variant_id(evaluation: Evaluation) -> str | None:
    """The id of an evaluation's variant (``"nominal"``, ``"corner-3"``, ...)."""
    variant = evaluation.variant
    if variant is None:
        return None
    return str(getattr(variant, "id", variant))


def variants_phrase(failing: int, total: int) -> str:
    """``" (worst variant; 3 of 9 variants fail)"``, or ``""`` for a single variant."""
    if total <= 1:
        return ""
    return f" (worst variant; {failing} of {total} variants fail)"


def split_stable(ctx: LoopContext) -> tuple[list[Evaluation], list[Evaluation]]:
    """The loop's evaluations split into closed-loop stable and not stable."""
    stable = [ev for ev in ctx.evaluations if ev.analysis.stability.stable]
    unstable = [ev for ev in ctx.evaluations if not ev.analysis.stability.stable]
    return stable, unstable


# -------------------------------------------------------------------- numbers


def format_number(value: float | None, digits: int = 4) -> str:
    """A number as messages show it: ``digits`` significant digits, no trailing noise.

    ``"n/a"`` for ``None``, ``"infinite"``/``"-infinite"`` for what is not
    finite, a short exponent (``"1.2e-5"``) for very small or large values.
    """
    if value is None:
        return "n/a"
    if not math.isfinite(value):
        return "infinite" if value > 0 else "-infinite"
    if value == 0:
        return "0"
    text = f"{value:.{digits}g}"
    if "e" in text:
        mantissa, exponent = text.split("e")
        return f"{mantissa}e{int(exponent)}"
    return text


def db(magnitude) -> np.ndarray | float:
    """20 log10 |x|, with -inf for zero (no warning)."""
    with np.errstate(divide="ignore"):
        return 20.0 * np.log10(np.abs(magnitude))


def param(params: Mapping[str, Any], name: str, default: Any) -> Any:
    """A rule parameter, ``default`` when absent or null."""
    value = params.get(name, default) if params is not None else default
    return default if value is None else value


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


def nyquist_hz(ctx: LoopContext) -> float | None:
    """Half the loop's sample rate (``None`` for a continuous loop)."""
    rate = ctx.spec.sample_rate_hz
    return None if rate is None else 0.5 * float(rate)


def domain_block(block: Any, discrete: bool):
    """The block's factored form in the loop's domain (``None`` when it has none)."""
    if block is None:
        return None
    return block.discrete if discrete else block.continuous


# ---------------------------------------------------------------------- notes


def note(
    message: str,
    location: Location,
    *,
    key_path: str,
    variant: str | None = None,
    related: Iterable[Location] = (),
) -> Violation:
    """A NOTE-severity violation: the rule could not judge this, and says why."""
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


def loop_note(
    ctx: LoopContext, message: str, aspect: str = "", variant: str | None = None
) -> Violation:
    """A :func:`note` on the loop's controller table, the plant entry related.

    Keyed by :func:`~ruleguard.rules.locations.key_path` (``aspect`` appended).
    """
    return note(
        message,
        controller_location(ctx),
        key_path=key_path(ctx, aspect),
        variant=variant,
        related=related_locations(ctx, {}),
    )


def loop_violation(
    ctx: LoopContext,
    params: Mapping[str, Any],
    evaluation: Evaluation,
    message: str,
    measured: float | None,
    limit: float | None,
    unit: str | None,
    frequency_hz: float | None,
    threshold: Iterable[str] = (),
    aspect: str = "",
) -> Violation:
    """A violation of ``evaluation``'s variant on the loop's controller table.

    Related: the plant entry and the ruleset lines of the parameters named in
    ``threshold``; keyed by :func:`~ruleguard.rules.locations.key_path`.
    """
    return Violation(
        variant=variant_id(evaluation),
        message=message,
        measured=measured,
        limit=limit,
        unit=unit,
        frequency_hz=frequency_hz,
        location=controller_location(ctx),
        related=related_locations(ctx, params, threshold),
        key_path=key_path(ctx, aspect),
    )


def not_analysed(ctx: LoopContext) -> bool:
    """True when the loop has no analysis; the engine reports the reason once.

    Rules that need the analysis yield nothing for such a loop (the engine's
    not-analysed finding covers it); rules that only read the configuration
    may still run.
    """
    return not ctx.evaluations and ctx.not_analysed_reason is not None


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
