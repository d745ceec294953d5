"""Rule ``quantization.robust``: the loop as the firmware's number format runs it.

With ``numeric_format`` = ``float32`` or ``q<m>.<n>`` the controller's
coefficients are rounded (and saturated) before the firmware ever runs them:
each discretized block is realised as second-order sections
(b0, b1, b2, 1, a1, a2) and those coefficients are rounded to the format
(:func:`ruleguard.models.quantize.quantized_model`). This rule re-checks the
rounded loop: every controller and filter block must stay stable, the
closed loop must stay stable, and every margin rule (``margin.*``) that
passes on the exact coefficients must still pass on the rounded ones.
``float64`` (the reference arithmetic) and continuous loops have nothing to
check.

The margin rules run with the parameters this loop is judged with, which
the engine provides (``LoopContext.extras["rule_parameters"]``, a mapping
rule id -> parameters; catalog defaults without it); a margin rule turned
``disabled`` for the loop (``extras["rule_severities"]``) is not re-checked.

References
----------
A. V. Oppenheim and R. W. Schafer, *Discrete-Time Signal Processing*, 3rd
ed., Pearson, 2010, section 6.9 (coefficient quantization moves the poles;
second-order sections keep the movement small; section number from memory).
"""

from __future__ import annotations

from collections.abc import Iterable, Mapping
from typing import Any

from ruleguard.deferred import numpy as np
from ruleguard.rules.base import Evaluation, LoopContext, Severity, Violation
from ruleguard.rules.evidence import note, unanalysed_notes, variant_id
from ruleguard.rules.locations import block_location, controller_field_location, key
from ruleguard.rules.spec import RuleSpec

EXACT_FORMATS = ("float64", "", None)


def numeric_format(ctx: LoopContext) -> str | None:
    value = ctx.spec.controller.fields.get("numeric_format")
    return None if value is None else str(value)


def _margin_rules():
    from ruleguard.rules import margins  # lazy: the family module, not the catalog

    return margins.RULES


def _rule_params(ctx: LoopContext, spec: RuleSpec) -> Mapping[str, Any]:
    given = (ctx.extras or {}).get("rule_parameters", {}) or {}
    params = given.get(spec.id)
    if params is not None:
        return params
    return spec.defaults()


def _pole_radius(block) -> float:
    """Largest |z| of a discretized block's poles, integrators (z = 1) left out."""
    factored = block.discrete
    if factored is None or factored.poles.size == 0:
        return 0.0
    poles = np.asarray(factored.poles, dtype=complex)
    free = poles[np.abs(poles - 1.0) > 1e-9]
    return float(np.max(np.abs(free), initial=0.0))


def _describe_move(move) -> str:
    """The phrase naming the block and the coefficient that moved the most."""
    if move is None:
        return ""
    return (
        f"largest coefficient change: {move.block} {move.coefficient} "
        f"{move.original:.8g} -> {move.quantized:.8g}"
        + (" (saturated: outside the format's range)" if move.saturated else "")
    )


def _location_of_block(ctx: LoopContext, model, label: str | None):
    if label is not None:
        for b in (model.controller, *model.filters):
            if b.label == label:
                return block_location(ctx, b)
    return ctx.spec.controller.location


def quantization_robust(ctx: LoopContext, params: Mapping[str, Any]) -> Iterable[Violation]:
    """Rounded coefficients keep the blocks and the closed loop stable and the margins passing."""
    fmt_name = numeric_format(ctx)
    if ctx.spec.sample_rate_hz is None or fmt_name in EXACT_FORMATS:
        return []
    base = key(ctx.spec.controller.location.key, "quantization", fmt_name)
    if not ctx.evaluations:
        return unanalysed_notes(ctx, "quantization", key_path=base)
    from ruleguard.analysis.margins import analyse_open_loop
    from ruleguard.models.quantize import quantized_model

    format_loc = controller_field_location(ctx, "numeric_format")
    out: list[Violation] = []
    rounded: list[Evaluation] = []
    reports: dict[str, Any] = {}
    unstable_blocks: dict[str, tuple] = {}
    lost_stability: list[tuple] = []
    for ev in ctx.evaluations:
        # rounded and analysed ahead by the workers (ruleguard.workunits), else here
        ahead = (getattr(ev, "prepared", None) or {}).get("quantization.rounded")
        q_analysis = None
        try:
            if ahead is None:
                q_model, report = quantized_model(ev.model, fmt_name)
            elif isinstance(ahead, str):
                raise ValueError(ahead)
            else:
                q_model, report, q_analysis = ahead
        except ValueError as exc:  # documented: a loop whose controller path cannot be split
            return [
                note(
                    f"quantization to {fmt_name} not checked: {exc}",
                    format_loc,
                    key_path=key(base, "unsupported"),
                    variant=variant_id(ev),
                )
            ]
        vid = variant_id(ev)
        reports[vid] = (q_model, report)
        rounded_blocks = {b.label: b for b in (q_model.controller, *q_model.filters)}
        for bq in report.destabilised_blocks:
            b = rounded_blocks.get(bq.label)
            radius = _pole_radius(b) if b is not None else float("nan")
            best = unstable_blocks.get(bq.label)
            if best is None or radius > best[0]:
                unstable_blocks[bq.label] = (radius, ev, b, bq)
        if q_analysis is None:
            q_analysis = analyse_open_loop(q_model.open_loop)
        rounded.append(Evaluation(ev.variant, q_model, q_analysis))
        if ev.analysis.stability.stable and not q_analysis.stability.stable:
            lost_stability.append((ev, q_analysis))
    for label in sorted(unstable_blocks):
        radius, ev, b, bq = unstable_blocks[label]
        phrase = _describe_move(bq.largest_move)
        state = "unstable" if bq.unstable_poles_after > bq.unstable_poles_before else (
            "marginal (a pole on the unit circle)"
        )
        out.append(
            Violation(
                variant=variant_id(ev),
                message=(
                    f"with coefficients rounded to {fmt_name}, {label} is {state} "
                    f"(pole radius {radius:.8g})" + (f"; {phrase}" if phrase else "")
                ),
                measured=radius,
                limit=1.0,
                unit="|z|",
                frequency_hz=None,
                location=block_location(ctx, b) if b is not None else ctx.spec.controller.location,
                related=(format_loc,),
                key_path=key(base, label, "block-stability"),
            )
        )
    if lost_stability:
        ev, q_analysis = lost_stability[0]
        q_model, report = reports[variant_id(ev)]
        move = report.largest_move
        label, phrase = (None if move is None else move.block), _describe_move(move)
        z = q_analysis.stability.closed_loop_unstable_poles
        out.append(
            Violation(
                variant=variant_id(ev),
                message=(
                    f"with coefficients rounded to {fmt_name} the closed loop is unstable"
                    + (f" ({z} unstable closed-loop poles)" if z is not None else "")
                    + (f"; {phrase}" if phrase else "")
                ),
                measured=None if z is None else float(z),
                limit=0.0,
                unit="poles",
                frequency_hz=q_analysis.margins.crossover_hz,
                location=_location_of_block(ctx, q_model, label),
                related=(format_loc,),
                key_path=key(base, "closed-loop"),
            )
        )
    exact_ctx = ctx
    rounded_ctx = LoopContext(
        spec=ctx.spec,
        project=ctx.project,
        evaluations=tuple(rounded),
        not_analysed_reason=ctx.not_analysed_reason,
        inner=ctx.inner,
        extras=ctx.extras,
    )
    severities = (ctx.extras or {}).get("rule_severities", {}) or {}
    for rule in _margin_rules():
        if severities.get(rule.id) is Severity.DISABLED:
            continue  # a margin rule turned off for this loop is not re-checked either
        rule_params = _rule_params(ctx, rule)
        before = {
            v.key_path for v in rule.function(exact_ctx, rule_params) if v.severity is None
        }
        for v in rule.function(rounded_ctx, rule_params):
            if v.severity is not None or v.key_path in before:
                continue
            q_model, report = reports.get(v.variant, reports[variant_id(rounded[0])])
            move = report.largest_move
            label, phrase = (None if move is None else move.block), _describe_move(move)
            out.append(
                Violation(
                    variant=v.variant,
                    message=(
                        f"with coefficients rounded to {fmt_name}, {rule.id} fails: {v.message}"
                        + (f"; {phrase}" if phrase else "")
                    ),
                    measured=v.measured,
                    limit=v.limit,
                    unit=v.unit,
                    frequency_hz=v.frequency_hz,
                    location=_location_of_block(ctx, q_model, label),
                    related=(format_loc, *v.related),
                    key_path=key(base, rule.id, v.key_path),
                )
            )
    return out


RULES: tuple[RuleSpec, ...] = (
    RuleSpec(
        id="quantization.robust",
        default_severity=Severity.ERROR,
        summary="With coefficients rounded to numeric_format, blocks stay stable, margins pass.",
        explanation=(
            "For a sampled loop whose controller declares `numeric_format = \"float32\"` or "
            "`\"q<m>.<n>\"`, rounds the coefficients of every discretized block (realised as "
            "second-order sections b0, b1, b2, a1, a2; fixed point rounds to nearest, ties to "
            "even, and saturates) and re-analyses every variant. It reports a controller or "
            "filter block that becomes unstable, a closed loop that becomes unstable, and "
            "every margin rule (margin.gain, margin.phase, margin.delay, margin.disk) that "
            "passes with exact coefficients but fails with rounded ones. Each finding names "
            "the block and the coefficient that moved the most. `float64` has nothing to "
            "check.\n\n"
            "Why it matters: a lightly damped or low-frequency filter has poles close to "
            "the unit circle, where a 16-bit coefficient grid is coarse: rounding can move "
            "a pole onto the circle (a filter that never stops ringing), and a coefficient "
            "that saturates (a1 of a low-frequency section is close to -2 and does not fit "
            "q1.15) changes the filter completely, and with it the loop gain and the "
            "margins.\n\n"
            "How to fix it: use a format with more fraction bits or more integer bits (q2.14 "
            "holds |a1| < 2), raise the filter's frequency relative to the sample rate, or "
            "lower the sample rate of slow filters."
        ),
        source="no threshold of its own: the margin rules' thresholds; coefficient "
        "sensitivity of pole positions (Oppenheim & Schafer, Discrete-Time Signal "
        "Processing, 3rd ed., 2010)",
        parameters=(),
        function=quantization_robust,
    ),
)
