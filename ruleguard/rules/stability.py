"""Rules of the ``stability`` family: the Nyquist verdict and the encirclement count.

The analysis (:mod:`ruleguard.analysis.margins`) gives, per variant, the
open-loop unstable pole count P, the counter-clockwise encirclements of -1 and
Z = P - ccw (FORMATS.md section 5). These rules judge those numbers.

References
----------
H. Nyquist, "Regeneration theory", Bell System Technical Journal 11, 1932.
K. J. Åström and R. M. Murray, *Feedback Systems*, 2nd ed., Princeton
University Press, 2021, section 10.2 (the Nyquist criterion, Z = N + P).
"""

from __future__ import annotations

from collections.abc import Iterable, Mapping
from typing import Any

from ruleguard.rules.base import LoopContext, Severity, Violation
from ruleguard.rules.evidence import (
    loop_note,
    loop_violation,
    not_analysed,
    variant_id,
    variants_phrase,
)
from ruleguard.rules.locations import controller_location, key_path, related_locations
from ruleguard.rules.spec import RuleSpec


def _badness(stability) -> float:
    """Order variants from worst to best: through -1 counts as the worst."""
    if stability.closed_loop_unstable_poles is None:
        return float("inf")
    return float(stability.closed_loop_unstable_poles)


def closed_loop(ctx: LoopContext, params: Mapping[str, Any]) -> Iterable[Violation]:
    """Z = N + P must be 0 in every variant (no closed-loop pole unstable)."""
    if not_analysed(ctx):
        return
    if not ctx.evaluations:
        yield loop_note(ctx, "stability not judged: no variant of the loop was analysed")
        return
    failing = [ev for ev in ctx.evaluations if not ev.analysis.stability.stable]
    if not failing:
        return
    worst = max(failing, key=lambda ev: _badness(ev.analysis.stability))
    st = worst.analysis.stability
    margins = worst.analysis.margins
    phrase = variants_phrase(len(failing), len(ctx.evaluations))
    if st.closed_loop_unstable_poles is None and st.through_critical_point:
        message = (
            "closed loop not stable: the Nyquist curve passes through -1 "
            f"(within tolerance), so the loop is at the stability boundary{phrase}"
        )
        measured = None
    elif st.closed_loop_unstable_poles is None:
        detail = "; ".join(worst.analysis.notes) or "the encirclement count is undetermined"
        message = f"closed loop not shown stable: {detail}{phrase}"
        measured = None
    else:
        z = st.closed_loop_unstable_poles
        message = (
            f"closed loop unstable: {z} unstable closed-loop pole{'s' if z != 1 else ''} "
            f"(Z = N + P = {-st.ccw_encirclements} + {st.open_loop_unstable_poles}: "
            f"{-st.ccw_encirclements} clockwise encirclements of -1, "
            f"{st.open_loop_unstable_poles} unstable open-loop poles){phrase}"
        )
        measured = float(z)
    yield loop_violation(
        ctx,
        params,
        worst,
        message,
        measured,
        0.0,
        "poles",
        margins.crossover_hz if margins is not None else None,
    )


def _required_ccw(ctx: LoopContext, stability) -> tuple[int, str]:
    required = getattr(ctx.spec, "required_ccw", None)
    if required is not None:
        return int(required), "required_ccw of the loop"
    return int(stability.open_loop_unstable_poles), "open-loop unstable poles P"


def encirclements(ctx: LoopContext, params: Mapping[str, Any]) -> Iterable[Violation]:
    """Counted ccw encirclements of -1 equal the required number in every variant."""
    if not_analysed(ctx):
        return
    if not ctx.evaluations:
        yield loop_note(ctx, "encirclements not counted: no variant of the loop was analysed")
        return
    if getattr(ctx.spec, "required_ccw", None) is None:
        # The required count is then P, and ccw != P is exactly Z != 0: the
        # finding of stability.closed-loop. No second finding for one fact.
        return
    uncounted = []
    failing = []
    for ev in ctx.evaluations:
        st = ev.analysis.stability
        if st.ccw_encirclements is None:
            uncounted.append(ev)
            continue
        required, _ = _required_ccw(ctx, st)
        if st.ccw_encirclements != required:
            failing.append((abs(st.ccw_encirclements - required), ev))
    if failing:
        _, worst = max(failing, key=lambda item: item[0])
        st = worst.analysis.stability
        required, why = _required_ccw(ctx, st)
        phrase = variants_phrase(len(failing), len(ctx.evaluations))
        related = related_locations(ctx, params)
        required_loc = getattr(ctx.spec, "field_locations", {}).get("required_ccw")
        if required_loc is not None and getattr(ctx.spec, "required_ccw", None) is not None:
            related = (required_loc, *related)
        yield Violation(
            variant=variant_id(worst),
            message=(
                f"{st.ccw_encirclements} counter-clockwise encirclements of -1, "
                f"{required} required ({why}){phrase}"
            ),
            measured=float(st.ccw_encirclements),
            limit=float(required),
            unit="encirclements",
            frequency_hz=None,
            location=controller_location(ctx),
            related=related,
            key_path=key_path(ctx),
        )
    elif uncounted:
        yield loop_note(
            ctx,
            "encirclements not counted: the Nyquist curve passes through -1 "
            f"in {len(uncounted)} of {len(ctx.evaluations)} variants",
            variant=variant_id(uncounted[0]),
        )


RULES: tuple[RuleSpec, ...] = (
    RuleSpec(
        id="stability.closed-loop",
        default_severity=Severity.ERROR,
        summary="The closed loop is stable in every variant (Nyquist: Z = N + P = 0).",
        explanation=(
            "Counts the closed-loop poles in the right half-plane (outside the unit "
            "circle for a sampled loop) with the Nyquist criterion: Z = N + P, where P is "
            "the number of unstable open-loop poles and N the clockwise encirclements of "
            "-1 by the open loop L along the whole contour (indented around integrators). "
            "Every variant of the loop must give Z = 0; a curve through -1 is at the "
            "stability boundary and fails too.\n\n"
            "Why it matters: an unstable loop oscillates or runs away the moment it is "
            "closed; no margin means anything without stability.\n\n"
            "How to fix it: lower the loop gain (controller proportional gain), add phase "
            "lead near crossover, remove delay, or check the plant model and its unstable "
            "poles. The finding names the worst variant: corners of the plant's `vary` "
            "ranges often destabilise loops that are stable at the nominal.\n\n"
            "This rule is always an error. It cannot be set to `disabled`; a ruleset may only "
            "waive it for named loops, with a reason and an expiry date."
        ),
        source=(
            "Nyquist criterion (H. Nyquist, Bell System Technical Journal 11, 1932; "
            "Åström & Murray, Feedback Systems, 2nd ed., 2021, section 10.2); "
            "no threshold"
        ),
        parameters=(),
        function=closed_loop,
        always_on=True,
    ),
    RuleSpec(
        id="stability.encirclements",
        default_severity=Severity.ERROR,
        summary="Counted counter-clockwise encirclements of -1 equal the required number.",
        explanation=(
            "Compares the net counter-clockwise encirclements of -1 by L with the number "
            "the loop requires: the loop's `required_ccw` from the manifest when given, "
            "otherwise the number of unstable open-loop poles P (so that Z = P - ccw = 0).\n\n"
            "Why it matters: for a measured-data plant ruleguard cannot see unstable "
            "poles; the `unstable_poles` the user declared decides P and hence the verdict "
            "of stability.closed-loop. Stating the expected count as `required_ccw` makes "
            "an independent cross-check: a wrong declaration, or a plant that changed, "
            "shows up here. Without `required_ccw` the required number is P, and a "
            "mismatch is exactly an unstable closed loop: stability.closed-loop reports "
            "it and this rule adds no second finding.\n\n"
            "How to fix it: check the declared unstable poles of measured plants and the "
            "loop's `required_ccw`; if both are right the loop is unstable (see "
            "stability.closed-loop)."
        ),
        source="Nyquist criterion (Åström & Murray, Feedback Systems, 2nd ed., 2021, "
        "section 10.2); no threshold",
        parameters=(),
        function=encirclements,
    ),
)
