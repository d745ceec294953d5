"""Rule ``cascade.separation``: the inner loop of a cascade much faster than the outer.

An outer loop is designed as if its inner loop were ideal (T_inner = 1).
That holds only well below the inner loop's bandwidth: the usual rule of
thumb asks for an inner bandwidth at least 4 to 10 times the outer
crossover frequency, so that the inner loop's phase lag at the outer
crossover stays small.

The inner bandwidth of each outer variant is taken from the inner loop the
variant was built with (``LoopModel.inner``, analysed here with
:func:`ruleguard.analysis.margins.analyse_open_loop`), so the inner and outer
parameters of one variant are judged together; without it, the smallest
bandwidth of the inner loop's own variants (``LoopContext.inner``) is used.

References
----------
K. J. Åström and T. Hägglund, *Advanced PID Control*, ISA, 2006, cascade
control (inner loop several times faster than the outer; from memory).
"""

from __future__ import annotations

import math
from collections.abc import Iterable, Mapping
from operator import itemgetter
from typing import Any

from ruleguard.rules.base import LoopContext, Severity, Violation
from ruleguard.rules.evidence import format_number, note, param, unanalysed_notes, variant_id
from ruleguard.rules.limits import beyond_limit
from ruleguard.rules.locations import controller_location, key, loop_location
from ruleguard.rules.spec import Parameter, RuleSpec


def _inner_bandwidth_from_model(inner_model, cache: dict) -> tuple[float | None, bool, str]:
    """``(bandwidth_hz, is_lower_bound, why_not)`` of a built inner loop."""
    ident = id(inner_model)
    if ident not in cache:
        from ruleguard.analysis.margins import analyse_open_loop

        cache[ident] = analyse_open_loop(inner_model.open_loop)
    analysis = cache[ident]
    if not analysis.stability.stable:
        return None, False, "the inner loop is unstable"
    bw = analysis.margins.bandwidth_hz
    if bw is not None:
        return float(bw), False, ""
    top = inner_model.open_loop.w_max
    if math.isfinite(top):
        return top / (2.0 * math.pi), True, ""
    return None, False, "the inner loop's bandwidth was not determined"


def _inner_bandwidth_from_context(inner: LoopContext | None) -> tuple[float | None, bool, str]:
    if inner is None or not inner.evaluations:
        return None, False, "the inner loop was not analysed"
    values = []
    lower = False
    for ev in inner.evaluations:
        if not ev.analysis.stability.stable:
            return None, False, f"the inner loop is unstable in variant {variant_id(ev)}"
        bw = ev.analysis.margins.bandwidth_hz
        if bw is None:
            top = ev.model.open_loop.w_max
            if not math.isfinite(top):
                return None, False, "the inner loop's bandwidth was not determined"
            bw, lower = top / (2.0 * math.pi), True
        values.append(float(bw))
    return min(values), lower, ""


def separation(ctx: LoopContext, params: Mapping[str, Any]) -> Iterable[Violation]:
    """Inner bandwidth >= ``min_ratio`` x the outer loop's highest crossover."""
    if getattr(ctx.spec, "inner", None) is None:
        return []
    min_ratio = float(param(params, "min_ratio", 4.0))
    base = key(ctx.spec.controller.location.key, "cascade")
    if not ctx.evaluations:
        return unanalysed_notes(ctx, "cascade separation", key_path=base)
    cache: dict = {}
    # the pipeline's inner context holds the inner models of the variants analysed
    # (id of the model -> its analysis, the first evaluation of it)
    inner_analyses: dict = {}
    for inner_ev in ctx.inner.evaluations if ctx.inner is not None else ():
        inner_analyses.setdefault(id(inner_ev.model), inner_ev.analysis)
    readings = []  # (ratio, ev, inner_bw, f_c, lower_bound)
    skipped: list[tuple[Any, str]] = []
    for ev in ctx.evaluations:
        crossings = [c.hz for c in ev.analysis.margins.crossovers if c.hz is not None]
        if not crossings:
            skipped.append((ev, "|L| of the outer loop never crosses 0 dB"))
            continue
        f_c = max(crossings)
        inner_model = getattr(ev.model, "inner", None)
        if inner_model is not None:
            if id(inner_model) in inner_analyses:
                cache.setdefault(id(inner_model), inner_analyses[id(inner_model)])
            bw, lower, why = _inner_bandwidth_from_model(inner_model, cache)
        else:
            bw, lower, why = _inner_bandwidth_from_context(ctx.inner)
        if bw is None:
            skipped.append((ev, why))
            continue
        ratio = bw / f_c
        if lower and ratio >= min_ratio:
            continue  # even the lower bound of the inner bandwidth is fast enough
        readings.append((ratio, ev, bw, f_c, lower))
    out: list[Violation] = []
    if skipped:
        ev, why = skipped[0]
        out.append(
            note(
                f"cascade separation not checked in variant {variant_id(ev)}: {why}",
                controller_location(ctx),
                key_path=key(base, "unknown"),
                variant=variant_id(ev),
            )
        )
    _, worst = beyond_limit(readings, itemgetter(0), min_ratio, side="below")
    if worst is not None:
        ratio, ev, bw, f_c, lower = worst
        inner_name = ctx.spec.inner
        related = [loop_location(ctx, "inner")]
        if ctx.inner is not None:
            related.append(ctx.inner.spec.controller.location)
        out.append(
            Violation(
                variant=variant_id(ev),
                message=(
                    f"inner loop {inner_name} bandwidth {'at least ' if lower else ''}"
                    f"{format_number(bw)} Hz is only {ratio:.3g} times the outer crossover "
                    f"{format_number(f_c)} Hz; at least {format_number(min_ratio)} times is "
                    "required"
                ),
                measured=ratio,
                limit=min_ratio,
                unit="ratio",
                frequency_hz=f_c,
                location=controller_location(ctx),
                related=tuple(related),
                key_path=base,
            )
        )
    return out


RULES: tuple[RuleSpec, ...] = (
    RuleSpec(
        id="cascade.separation",
        default_severity=Severity.WARNING,
        summary="Inner-loop bandwidth at least min_ratio times the outer crossover.",
        explanation=(
            "For a loop with an `inner` loop (a cascade), divides the inner loop's "
            "closed-loop -3 dB bandwidth by the outer loop's highest gain crossover "
            "frequency, in every variant, and requires at least `min_ratio` (4). The inner "
            "loop of each variant is the one built with that variant's parameters.\n\n"
            "Why it matters: the outer loop is tuned as if the inner loop followed its "
            "reference perfectly. When the two are too close the inner loop's lag adds to "
            "the outer loop near its crossover, the loops interact, and retuning one "
            "upsets the other.\n\n"
            "How to fix it: make the inner loop faster (more gain, higher sample rate), or "
            "the outer loop slower (less gain)."
        ),
        source="min_ratio 4: common practice (inner loop 4 to 10 times faster; Åström & "
        "Hägglund, Advanced PID Control, 2006, from memory)",
        parameters=(
            Parameter(
                "min_ratio",
                "number",
                None,
                4.0,
                "inner bandwidth / outer crossover, at least",
                minimum=0.0,
            ),
        ),
        function=separation,
    ),
)
