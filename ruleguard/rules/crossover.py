"""Rule ``crossover.range``: where the loop gain crosses 0 dB.

The gain crossover frequency sets the loop's speed. It must lie within the
bounds a ruleset sets for the loop family, and in a sampled loop it must stay
well below the sample rate: Åström & Wittenmark give h * w_c <= 0.5 (about
0.08 of the sample rate) as a rule of thumb for choosing the sampling period,
since the hold and the computation delay cost w h / 2 and w h of phase at w.

References
----------
K. J. Åström and B. Wittenmark, *Computer-Controlled Systems: Theory and
Design*, 3rd ed., Prentice Hall, 1997: the rule of thumb h * w_c of about
0.15 to 0.5 for the choice of the sampling period (the range from memory; the
upper end 0.5 is the default here, as RULES.md cites).
"""

from __future__ import annotations

import math
from collections.abc import Iterable, Mapping
from typing import Any

from ruleguard.rules.base import LoopContext, Severity, Violation
from ruleguard.rules.evidence import format_number, note, param, unanalysed_notes, variant_id
from ruleguard.rules.limits import beyond_limit, frequency_range
from ruleguard.rules.locations import controller_location, key, loop_location
from ruleguard.rules.spec import Parameter, RuleSpec


def _crossovers_hz(analysis) -> list[float]:
    margins = analysis.margins
    values = [c.hz for c in margins.crossovers if c.hz is not None]
    if not values and margins.crossover_hz is not None:
        values = [margins.crossover_hz]
    return values


def crossover_range(ctx: LoopContext, params: Mapping[str, Any]) -> Iterable[Violation]:
    """Lowest crossover >= ``min_hz``; highest <= ``max_hz`` and the sample-rate fraction."""
    min_hz = params.get("min_hz")
    max_hz = params.get("max_hz")
    fraction = param(params, "max_fraction_of_sample_rate", 0.08)
    rate = ctx.spec.sample_rate_hz
    checks_rate = rate is not None and fraction is not None and fraction > 0
    if min_hz is None and max_hz is None and not checks_rate:
        return []
    base = key(ctx.spec.controller.location.key, "crossover")
    if not ctx.evaluations:
        return unanalysed_notes(ctx, "gain crossover", key_path=base)
    out: list[Violation] = []
    without = [ev for ev in ctx.evaluations if not _crossovers_hz(ev.analysis)]
    with_cross = [(ev, _crossovers_hz(ev.analysis)) for ev in ctx.evaluations]
    with_cross = [(ev, hz) for ev, hz in with_cross if hz]
    if without:
        out.append(
            note(
                "gain crossover range not checked: |L| never crosses 0 dB in variant "
                f"{variant_id(without[0])}"
                + (f" and {len(without) - 1} other(s)" if len(without) > 1 else ""),
                controller_location(ctx),
                key_path=key(base, "none"),
                variant=variant_id(without[0]),
            )
        )
    if not with_cross:
        return out
    spans = [(ev, min(hz), max(hz)) for ev, hz in with_cross]
    out.extend(
        frequency_range(
            ctx, spans, what="gain crossover", min_hz=min_hz, max_hz=max_hz, key_path=base
        )
    )
    if checks_rate:
        limit = float(fraction) * float(rate)
        _, worst = beyond_limit(spans, lambda span: span[2], limit, side="above")
        if worst is not None:
            ev, _, high = worst
            h_wc = 2.0 * math.pi * high / float(rate)
            out.append(
                Violation(
                    variant=variant_id(ev),
                    message=(
                        f"gain crossover {format_number(high)} Hz is above "
                        f"{format_number(fraction)} of the sample rate {format_number(rate)} Hz "
                        f"({format_number(limit)} Hz): h*w_c = {h_wc:.3g}, "
                        f"limit {2.0 * math.pi * float(fraction):.3g}"
                    ),
                    measured=high,
                    limit=limit,
                    unit="Hz",
                    frequency_hz=high,
                    location=controller_location(ctx),
                    related=(loop_location(ctx, "sample_rate_hz"),),
                    key_path=key(base, "sample-rate-fraction"),
                )
            )
    return out


RULES: tuple[RuleSpec, ...] = (
    RuleSpec(
        id="crossover.range",
        default_severity=Severity.WARNING,
        summary="Gain crossover within bounds and at most a fraction of the sample rate.",
        explanation=(
            "Checks every gain crossover (|L| = 1) of every variant: the lowest must be at "
            "least `min_hz`, the highest at most `max_hz`, and in a sampled loop the highest "
            "at most `max_fraction_of_sample_rate` times the sample rate (0.08 by default, "
            "i.e. h*w_c <= 0.5). Limits left unset are not checked; a variant whose |L| never "
            "crosses 0 dB gets a note.\n\n"
            "Why it matters: the crossover frequency is the loop's speed. Too low and the "
            "loop rejects disturbances slowly; too high and it excites unmodelled dynamics. "
            "In a sampled loop the zero-order hold costs w*h/2 and each sample of "
            "computation delay w*h of phase at w, so a crossover close to the sample rate "
            "leaves the continuous design's margins on paper only.\n\n"
            "How to fix it: lower the controller gain (or raise it for a too-slow loop), or "
            "raise the loop's `sample_rate_hz` in the manifest."
        ),
        source=(
            "max_fraction_of_sample_rate 0.08 (h*w_c <= 0.5): Åström & Wittenmark, "
            "Computer-Controlled Systems, 3rd ed., 1997 (rule of thumb for the sampling "
            "period); min_hz/max_hz are "
            "per loop family (no default)"
        ),
        parameters=(
            Parameter("min_hz", "number", "Hz", None, "lowest allowed gain crossover"),
            Parameter("max_hz", "number", "Hz", None, "highest allowed gain crossover"),
            Parameter(
                "max_fraction_of_sample_rate",
                "number",
                None,
                0.08,
                "highest crossover as a fraction of the sample rate (sampled loops)",
            ),
        ),
        function=crossover_range,
    ),
)
