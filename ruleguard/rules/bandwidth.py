"""Rule ``bandwidth.range``: the closed-loop -3 dB bandwidth within bounds.

The bandwidth is the analysis' ``bandwidth_hz``: the lowest frequency where
|T| = |L/(1 + L)| falls 3 dB below |T(0)| (METHODS.md "Margins"). It is a
closed-loop quantity, so it is judged only on closed-loop stable variants.

References
----------
K. J. Åström and R. M. Murray, *Feedback Systems*, 2nd ed., Princeton
University Press, 2021 (bandwidth of the complementary sensitivity; the
-3 dB definition is common practice).
"""

from __future__ import annotations

from collections.abc import Iterable, Mapping
from typing import Any

from ruleguard.rules.base import LoopContext, Severity, Violation
from ruleguard.rules.evidence import (
    note,
    split_stable,
    unanalysed_notes,
    unstable_note,
    variant_id,
)
from ruleguard.rules.limits import frequency_range
from ruleguard.rules.locations import controller_location, key
from ruleguard.rules.spec import Parameter, RuleSpec


def bandwidth_range(ctx: LoopContext, params: Mapping[str, Any]) -> Iterable[Violation]:
    """``min_hz <= bandwidth_hz <= max_hz`` in every stable variant."""
    min_hz = params.get("min_hz")
    max_hz = params.get("max_hz")
    if min_hz is None and max_hz is None:
        return []
    base = key(ctx.spec.controller.location.key, "bandwidth")
    if not ctx.evaluations:
        return unanalysed_notes(ctx, "closed-loop bandwidth", key_path=base)
    stable, unstable = split_stable(ctx)
    out = unstable_note(unstable, "closed-loop bandwidth", controller_location(ctx), key_path=base)
    known = [ev for ev in stable if ev.analysis.margins.bandwidth_hz is not None]
    unknown = [ev for ev in stable if ev.analysis.margins.bandwidth_hz is None]
    if unknown:
        out.append(
            note(
                "closed-loop bandwidth not determined in variant "
                f"{variant_id(unknown[0])}: |T| does not fall 3 dB below |T(0)| within the "
                "analysed frequency range",
                controller_location(ctx),
                key_path=key(base, "unknown"),
                variant=variant_id(unknown[0]),
            )
        )
    if not known:
        return out
    spans = [(ev, ev.analysis.margins.bandwidth_hz, ev.analysis.margins.bandwidth_hz)
             for ev in known]
    out.extend(
        frequency_range(
            ctx, spans, what="closed-loop bandwidth", min_hz=min_hz, max_hz=max_hz, key_path=base
        )
    )
    return out


RULES: tuple[RuleSpec, ...] = (
    RuleSpec(
        id="bandwidth.range",
        default_severity=Severity.WARNING,
        summary="Closed-loop -3 dB bandwidth within the bounds set for the loop.",
        explanation=(
            "Checks the closed-loop bandwidth (the lowest frequency where |T| = "
            "|L/(1+L)| falls 3 dB below its value at zero frequency) of every closed-loop "
            "stable variant against `min_hz` and `max_hz`. Unset limits are not checked; "
            "unstable variants and variants whose bandwidth could not be determined get a "
            "note.\n\n"
            "Why it matters: the bandwidth is how fast the loop follows its reference. A "
            "loop slower than its specification misses its response-time requirement; a "
            "faster one passes more sensor noise and may excite structural modes, and an "
            "outer loop of a cascade counts on it (see cascade.separation).\n\n"
            "How to fix it: change the controller gain (bandwidth roughly follows the gain "
            "crossover), or the integral/derivative corners that shape |T| near crossover."
        ),
        source="per loop family (no default); -3 dB bandwidth of T: common practice "
        "(Åström & Murray, Feedback Systems, 2nd ed., 2021)",
        parameters=(
            Parameter("min_hz", "number", "Hz", None, "lowest allowed closed-loop bandwidth"),
            Parameter("max_hz", "number", "Hz", None, "highest allowed closed-loop bandwidth"),
        ),
        function=bandwidth_range,
    ),
)
