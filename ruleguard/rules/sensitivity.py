"""Rules of the ``sensitivity`` family: peaks of S = 1/(1 + L) and T = L/(1 + L).

Ms = max |S| is the inverse of the smallest distance from L to -1 (the
modulus margin); it bounds the classical margins: GM >= Ms/(Ms - 1) and
PM >= 2 asin(1/(2 Ms)). Mt = max |T| bounds them as GM >= 1 + 1/Mt and
PM >= 2 asin(1/(2 Mt)).

References
----------
K. J. Åström and R. M. Murray, *Feedback Systems*, 2nd ed., Princeton
University Press, 2021, section 10.3 (stability margin 1/Ms, typical 0.5-0.8).
S. Skogestad, "Simple analytic rules for model reduction and PID controller
tuning", Journal of Process Control 13, 2003, p. 297 (GM and PM bounds from Ms).
S. Skogestad and I. Postlethwaite, *Multivariable Feedback Control*, 2nd ed.,
Wiley, 2005, section 2.4.3 (bounds from Mt; from memory).
"""

from __future__ import annotations

import math
from collections.abc import Iterable, Mapping
from typing import Any

from ruleguard.rules.base import LoopContext, Severity, Violation
from ruleguard.rules.evidence import (
    format_number,
    loop_violation,
    variants_phrase,
)
from ruleguard.rules.limits import beyond_limit
from ruleguard.rules.margins import judged_variants, not_computed_note
from ruleguard.rules.spec import Parameter, RuleSpec


def gain_margin_bound_from_ms(ms: float) -> float:
    """Lower bound on the gain margin (linear) implied by Ms > 1: Ms/(Ms - 1)."""
    return ms / (ms - 1.0)


def phase_margin_bound_from_ms(ms: float) -> float:
    """Lower bound on the phase margin (deg) implied by Ms >= 1/2: 2 asin(1/(2 Ms))."""
    return math.degrees(2.0 * math.asin(min(1.0, 1.0 / (2.0 * ms))))


def gain_margin_bound_from_mt(mt: float) -> float:
    """Lower bound on the gain margin (linear) implied by Mt: 1 + 1/Mt."""
    return 1.0 + 1.0 / mt


def phase_margin_bound_from_mt(mt: float) -> float:
    """Lower bound on the phase margin (deg) implied by Mt >= 1/2: 2 asin(1/(2 Mt))."""
    return math.degrees(2.0 * math.asin(min(1.0, 1.0 / (2.0 * mt))))


def _peak_rule(
    ctx: LoopContext,
    params: Mapping[str, Any],
    *,
    what: str,
    symbol: str,
    value_of,
    hz_of,
    explain_value,
) -> Iterable[Violation]:
    stable, why = judged_variants(ctx, what)
    if why is not None:
        yield why
    max_db = params.get("max_db")
    if not stable or max_db is None:
        return
    missing = [ev for ev in stable if value_of(ev) is None]
    failing, worst = beyond_limit(stable, value_of, max_db, side="above")
    if worst is not None:
        peak_db = value_of(worst)
        yield loop_violation(
            ctx,
            params,
            worst,
            f"{what} {format_number(peak_db)} dB ({symbol} = "
            f"{format_number(10 ** (peak_db / 20))}{explain_value(peak_db)}) exceeds "
            f"{format_number(max_db)} dB{variants_phrase(len(failing), len(ctx.evaluations))}",
            peak_db,
            float(max_db),
            "dB",
            hz_of(worst),
            ("max_db",),
        )
    elif missing:
        yield not_computed_note(ctx, what, missing, stable)


def _ms_meaning(peak_db: float) -> str:
    ms = 10 ** (peak_db / 20)
    text = f", closest approach of L to -1 is {format_number(1 / ms)}"
    if ms > 1:
        gm_db = 20 * math.log10(gain_margin_bound_from_ms(ms))
        text += (
            f"; guarantees only GM >= {format_number(gm_db)} dB, "
            f"PM >= {format_number(phase_margin_bound_from_ms(ms))} deg"
        )
    return text


def _mt_meaning(peak_db: float) -> str:
    mt = 10 ** (peak_db / 20)
    gm_db = 20 * math.log10(gain_margin_bound_from_mt(mt))
    return (
        f"; guarantees only GM >= {format_number(gm_db)} dB, "
        f"PM >= {format_number(phase_margin_bound_from_mt(mt))} deg"
    )


def sensitivity_peak(ctx: LoopContext, params: Mapping[str, Any]) -> Iterable[Violation]:
    """Ms = max |1/(1 + L)| at most ``max_db`` in every stable variant."""
    yield from _peak_rule(
        ctx,
        params,
        what="sensitivity peak",
        symbol="Ms",
        value_of=lambda ev: ev.analysis.margins.sensitivity_peak_db,
        hz_of=lambda ev: ev.analysis.margins.sensitivity_peak_hz,
        explain_value=_ms_meaning,
    )


def complementary_peak(ctx: LoopContext, params: Mapping[str, Any]) -> Iterable[Violation]:
    """Mt = max |L/(1 + L)| at most ``max_db`` in every stable variant."""
    yield from _peak_rule(
        ctx,
        params,
        what="complementary sensitivity peak",
        symbol="Mt",
        value_of=lambda ev: ev.analysis.margins.complementary_peak_db,
        hz_of=lambda ev: ev.analysis.margins.complementary_peak_hz,
        explain_value=_mt_meaning,
    )


RULES: tuple[RuleSpec, ...] = (
    RuleSpec(
        id="sensitivity.peak",
        default_severity=Severity.ERROR,
        summary="Sensitivity peak Ms = max |1/(1+L)| at most max_db.",
        explanation=(
            "Ms is the largest amplification of disturbances by feedback and the inverse "
            "of the closest approach of the Nyquist curve to -1 (the modulus margin "
            "1/Ms). It must be at most `max_db` (6 dB is Ms = 2, a distance of 0.5 from "
            "-1). The peak is refined to its true maximum, not the grid maximum; the "
            "worst stable variant is reported with the frequency of the peak.\n\n"
            "Why it matters: a single number that bounds both classical margins "
            "(GM >= Ms/(Ms-1), PM >= 2 asin(1/(2 Ms)); Ms = 2 gives GM >= 6 dB and "
            "PM >= 29 deg) and also catches a curve that passes close to -1 between the "
            "phase and gain crossings, which the separate margins miss.\n\n"
            "How to fix it: reduce the gain, add phase lead where the curve comes "
            "closest to -1 (the reported frequency), or reduce delay; a resonance near "
            "crossover may need a notch."
        ),
        source=(
            "max_db 6 (Ms <= 2): Åström & Murray, Feedback Systems, 2nd ed., 2021, "
            "section 10.3 (from memory: stability margin 1/Ms typically 0.5-0.8, i.e. Ms 1.25-2); "
            "bounds GM >= Ms/(Ms-1), PM >= 2 asin(1/(2 Ms)): Skogestad, "
            "J. Process Control 13, 2003, p. 297"
        ),
        parameters=(
            Parameter("max_db", "number", "dB", 6.0, "largest allowed sensitivity peak",
                      minimum=0.0),
        ),
        function=sensitivity_peak,
    ),
    RuleSpec(
        id="sensitivity.complementary-peak",
        default_severity=Severity.ERROR,
        summary="Complementary sensitivity peak Mt = max |L/(1+L)| at most max_db.",
        explanation=(
            "Mt is the resonance peak of the closed loop from reference to output "
            "(T = L/(1+L)). It must be at most `max_db` (3.5 dB is Mt = 1.5). The worst "
            "stable variant is reported with the frequency of the peak.\n\n"
            "Why it matters: a high Mt means overshoot and ringing in the response to "
            "set-point changes and amplified sensor noise near the peak; it bounds the "
            "margins too: GM >= 1 + 1/Mt, PM >= 2 asin(1/(2 Mt)) (Mt = 1.5 gives "
            "GM >= 4.4 dB and PM >= 38.9 deg).\n\n"
            "How to fix it: add damping near the closed-loop bandwidth (more phase margin, "
            "less gain), or shape the reference (set-point weighting, pre-filter) when "
            "the overshoot and not the robustness is the concern."
        ),
        source=(
            "max_db 3.5 (Mt <= 1.5): from memory; Skogestad & Postlethwaite, "
            "Multivariable Feedback Control, 2nd ed., 2005, section 2.4.3 quote "
            "Mt < 1.25 (2 dB) as typical and give GM >= 1 + 1/Mt, PM >= 2 asin(1/(2 Mt)); "
            "1.5 is common practice for servo loops"
        ),
        parameters=(
            Parameter("max_db", "number", "dB", 3.5,
                      "largest allowed complementary sensitivity peak", minimum=0.0),
        ),
        function=complementary_peak,
    ),
)
