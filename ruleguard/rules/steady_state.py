"""Rule ``steady-state.type``: integrators in the open loop (the system type).

The type of a loop is the number of poles of L at s = 0 (z = 1 in a sampled
loop), net of zeros there. Type 0 leaves a steady-state error 1/(1 + L(0))
to a step, type 1 none to a step and a finite one to a ramp, type 2 none to
a ramp (the final-value theorem).

References
----------
G. F. Franklin, J. D. Powell and A. Emami-Naeini, *Feedback Control of
Dynamic Systems*, Addison-Wesley (system type and error constants; any
edition; from memory).
"""

from __future__ import annotations

from collections.abc import Iterable, Mapping
from typing import Any

from ruleguard.deferred import numpy as np
from ruleguard.rules.base import LoopContext, Severity, Violation
from ruleguard.rules.evidence import param, unanalysed_notes, variant_id
from ruleguard.rules.locations import controller_field_location, controller_location, key
from ruleguard.rules.spec import Parameter, RuleSpec

#: Relative distance from s = 0 (z = 1) within which a root counts as there;
#: the same order as the boundary tolerance of :mod:`ruleguard.models.lti`.
ORIGIN_TOLERANCE = 1e-9


def _at_origin(roots: np.ndarray, discrete: bool, scale: float) -> int:
    roots = np.asarray(roots, dtype=complex)
    if discrete:
        return int(np.count_nonzero(np.abs(roots - 1.0) <= ORIGIN_TOLERANCE))
    return int(np.count_nonzero(np.abs(roots) <= ORIGIN_TOLERANCE * scale))


def loop_type(open_loop) -> int:
    """Poles of L at s = 0 (z = 1) minus zeros there, plus the factors' declared integrators.

    For continuous loops "at 0" is relative to the largest root magnitude of
    L (at least 1 rad/s), so a root at 1e-12 rad/s in a loop with corners at
    1e3 rad/s counts as an integrator.
    """
    rational = open_loop.rational
    discrete = rational.sample_time_s is not None
    roots = np.concatenate([rational.zeros, rational.poles])
    scale = max(float(np.max(np.abs(roots), initial=0.0)), 1.0)
    count = _at_origin(rational.poles, discrete, scale) - _at_origin(
        rational.zeros, discrete, scale
    )
    count += sum(int(getattr(f, "integrators", 0)) for f in open_loop.factors)
    return count


def _integral_field(ctx: LoopContext) -> str | None:
    fields = ctx.spec.controller.fields
    for name in ("ki", "ti_s"):
        if name in fields:
            return name
    return None


def steady_state_type(ctx: LoopContext, params: Mapping[str, Any]) -> Iterable[Violation]:
    """Integrators in L >= ``min_integrators`` in every variant."""
    required = int(param(params, "min_integrators", 0))
    if required <= 0:
        return []
    base = key(ctx.spec.controller.location.key, "integrators")
    if not ctx.evaluations:
        return unanalysed_notes(ctx, "loop type", key_path=base)
    counted = [(loop_type(ev.model.open_loop), ev) for ev in ctx.evaluations]
    fewest, ev = min(counted, key=lambda item: item[0])
    if fewest >= required:
        return []
    field = _integral_field(ctx)
    location = (
        controller_field_location(ctx, field) if field is not None else controller_location(ctx)
    )
    return [
        Violation(
            variant=variant_id(ev),
            message=(
                f"the open loop has {fewest} integrator(s) at "
                f"{'z = 1' if ctx.spec.sample_rate_hz is not None else 's = 0'}; "
                f"at least {required} required (add integral action in the controller)"
            ),
            measured=float(fewest),
            limit=float(required),
            unit="integrators",
            frequency_hz=None,
            location=location,
            key_path=base,
        )
    ]


RULES: tuple[RuleSpec, ...] = (
    RuleSpec(
        id="steady-state.type",
        default_severity=Severity.WARNING,
        summary="Number of integrators in the open loop at least min_integrators.",
        explanation=(
            "Counts the poles of the open loop L at s = 0 (z = 1 for a sampled loop), net "
            "of zeros there, including the integrators declared for measured plants, and "
            "requires at least `min_integrators` in every variant (0 by default: the rule "
            "checks nothing until a ruleset asks for integral action).\n\n"
            "Why it matters: by the final-value theorem a loop without an integrator "
            "leaves a steady-state error 1/(1 + L(0)) to a step of reference or load; one "
            "integrator removes it, two remove the error to a ramp (a position loop "
            "following a constant-speed profile).\n\n"
            "How to fix it: add integral action (`ki` of a parallel PID, `ti_s` of a "
            "standard or series PID), or check that a high-pass or washout filter does not "
            "cancel the plant's integrator."
        ),
        source="min_integrators 0: no requirement by default; system type and the "
        "final-value theorem (Franklin, Powell & Emami-Naeini, Feedback Control of "
        "Dynamic Systems; from memory)",
        parameters=(
            Parameter(
                "min_integrators",
                "integer",
                None,
                0,
                "integrators in L (poles at s = 0 or z = 1), at least",
            ),
        ),
        function=steady_state_type,
    ),
)
