"""Rules of the ``margin`` family: gain, phase, delay and disk margins.

Margins are judged on the stable variants only: for an unstable variant they
are not applicable (FORMATS.md section 5) and ``stability.closed-loop`` reports
it. When no variant is stable, or a margin the rule needs was not computed,
the rule says so in a note instead of passing silently.

References
----------
K. J. Åström and R. M. Murray, *Feedback Systems*, 2nd ed., Princeton
University Press, 2021, section 10.3 (gain, phase and stability margins).
P. Seiler, A. Packard and P. Gahinet, "An introduction to disk margins",
IEEE Control Systems Magazine 40(5), 2020 (balanced disk margin).
"""

from __future__ import annotations

import math
from collections.abc import Iterable, Mapping
from typing import Any

from ruleguard.rules.base import Evaluation, LoopContext, Severity, Violation
from ruleguard.rules.evidence import (
    format_number,
    loop_note,
    loop_violation,
    not_analysed,
    variant_id,
    variants_phrase,
)
from ruleguard.rules.limits import beyond_limit
from ruleguard.rules.spec import Parameter, RuleSpec


def judged_variants(
    ctx: LoopContext, what: str
) -> tuple[list[Evaluation], Violation | None]:
    """The stable variants a margin rule judges, or a note saying none can be.

    Returns ``([], None)`` for a loop that was not analysed (the engine
    reports why, once).
    """
    if not_analysed(ctx):
        return [], None
    if not ctx.evaluations:
        return [], loop_note(ctx, f"{what} not judged: no variant of the loop was analysed")
    stable = [ev for ev in ctx.evaluations if ev.analysis.stability.stable]
    if not stable:
        return [], loop_note(
            ctx,
            f"{what} not judged: the closed loop is unstable in every variant "
            "(see stability.closed-loop)",
            variant=variant_id(ctx.evaluations[0]),
        )
    return stable, None


def not_computed_note(
    ctx: LoopContext, what: str, missing: list[Evaluation], stable: list[Evaluation]
) -> Violation:
    """A note that ``what`` was not computed for the ``missing`` stable variants."""
    return loop_note(
        ctx,
        f"{what} not computed for {len(missing)} of {len(stable)} stable variants",
        variant=variant_id(missing[0]),
    )


# --------------------------------------------------------------------------- gain


def gain_margin(ctx: LoopContext, params: Mapping[str, Any]) -> Iterable[Violation]:
    """Upper gain margin >= ``min_db``; lower gain margin <= -``min_lower_db`` or unbounded."""
    stable, why = judged_variants(ctx, "gain margin")
    if why is not None:
        yield why
    if not stable:
        return
    total = len(ctx.evaluations)
    min_db = params.get("min_db")
    if min_db is not None:
        failing, worst = beyond_limit(
            stable, lambda ev: ev.analysis.margins.gain_margin_db, min_db, side="below"
        )
        if worst is not None:
            m = worst.analysis.margins
            yield loop_violation(
                ctx,
                params,
                worst,
                f"gain margin {format_number(m.gain_margin_db)} dB is below "
                f"{format_number(min_db)} dB{variants_phrase(len(failing), total)}",
                m.gain_margin_db,
                float(min_db),
                "dB",
                m.gain_margin_hz,
                ("min_db",),
                aspect="upper",
            )
    min_lower_db = params.get("min_lower_db")
    if min_lower_db is not None:
        limit = -float(min_lower_db)
        failing, worst = beyond_limit(
            stable, lambda ev: ev.analysis.margins.lower_gain_margin_db, limit, side="above"
        )
        if worst is not None:
            m = worst.analysis.margins
            yield loop_violation(
                ctx,
                params,
                worst,
                f"lower gain margin {format_number(m.lower_gain_margin_db)} dB: the loop "
                f"loses stability if its gain falls by "
                f"{format_number(-m.lower_gain_margin_db)} dB, at least "
                f"{format_number(float(min_lower_db))} dB required"
                f"{variants_phrase(len(failing), total)}",
                m.lower_gain_margin_db,
                limit,
                "dB",
                m.lower_gain_margin_hz,
                ("min_lower_db",),
                aspect="lower",
            )


# -------------------------------------------------------------------------- phase


def _phase_margin_size(ev: Evaluation) -> float | None:
    """``|PM|`` of the crossover closest to -1 (the loop's ``phase_margin_deg``)."""
    pm = ev.analysis.margins.phase_margin_deg
    return None if pm is None else abs(pm)


def phase_margin(ctx: LoopContext, params: Mapping[str, Any]) -> Iterable[Violation]:
    """``|PM|`` of the crossover closest to -1 (smallest ``|PM|``) >= ``min_deg``.

    Judged on stable variants only (FORMATS.md section 5): an unstable loop is
    the finding of ``stability.closed-loop``. The measured value is ``|PM|``,
    the quantity compared with the limit; the message keeps the sign.
    """
    stable, why = judged_variants(ctx, "phase margin")
    if why is not None:
        yield why
    min_deg = params.get("min_deg")
    if not stable or min_deg is None:
        return
    failing, worst = beyond_limit(stable, _phase_margin_size, min_deg, side="below")
    if worst is None:
        return
    m = worst.analysis.margins
    crossings = len(m.crossovers)
    where = f" (closest to -1 of {crossings} crossovers)" if crossings > 1 else ""
    size = abs(m.phase_margin_deg)
    signed = "" if m.phase_margin_deg >= 0 else f" (|PM| {format_number(size)} deg)"
    yield loop_violation(
        ctx,
        params,
        worst,
        f"phase margin {format_number(m.phase_margin_deg)} deg{signed} is below "
        f"{format_number(min_deg)} deg{where}"
        f"{variants_phrase(len(failing), len(ctx.evaluations))}",
        size,
        float(min_deg),
        "deg",
        m.crossover_hz,
        ("min_deg",),
    )


# -------------------------------------------------------------------------- delay


def _delay_margin_hz(margins) -> float | None:
    """The crossover where the delay margin ((PM mod 360) in rad / w_c) is smallest."""
    best: tuple[float, float] | None = None
    for c in margins.crossovers:
        if c.hz <= 0:
            continue
        delay = math.radians(c.phase_margin_deg % 360.0) / (2.0 * math.pi * c.hz)
        if best is None or delay < best[0]:
            best = (delay, c.hz)
    if best is None:
        return margins.crossover_hz
    return best[1]


def delay_margin(ctx: LoopContext, params: Mapping[str, Any]) -> Iterable[Violation]:
    """Extra loop delay tolerated >= ``min_s`` (or ``min_samples`` in a sampled loop).

    With neither limit configured the rule checks nothing and says nothing:
    a delay limit depends on the application (how much jitter or extra
    computation time the firmware may add), so no default is imposed.
    """
    min_s = params.get("min_s")
    min_samples = params.get("min_samples")
    if min_s is None and min_samples is None:
        return
    sample_rate_hz = getattr(ctx.spec, "sample_rate_hz", None)
    if min_samples is not None and sample_rate_hz is None and min_s is None:
        if not not_analysed(ctx):
            yield loop_note(
                ctx,
                "delay margin not judged: min_samples applies to sampled loops and this "
                "loop is continuous; set min_s for it",
            )
        return
    stable, why = judged_variants(ctx, "delay margin")
    if why is not None:
        yield why
    if not stable:
        return

    def samples(ev: Evaluation) -> float | None:
        m = ev.analysis.margins
        if m.delay_margin_samples is not None:
            return m.delay_margin_samples
        if m.delay_margin_s is not None and sample_rate_hz is not None:
            return m.delay_margin_s * sample_rate_hz
        return None

    def seconds(ev: Evaluation) -> float | None:
        return ev.analysis.margins.delay_margin_s

    if min_samples is not None and sample_rate_hz is not None:
        measure, limit, unit, name = samples, float(min_samples), "samples", "min_samples"
    else:
        measure, limit, unit, name = seconds, float(min_s), "s", "min_s"
    failing, worst = beyond_limit(stable, measure, limit, side="below")
    if worst is None:
        return
    value = measure(worst)
    yield loop_violation(
        ctx,
        params,
        worst,
        f"delay margin {format_number(value)} {unit} is below {format_number(limit)} "
        f"{unit}: that much extra loop delay destabilises the loop"
        f"{variants_phrase(len(failing), len(ctx.evaluations))}",
        value,
        limit,
        unit,
        _delay_margin_hz(worst.analysis.margins),
        (name,),
    )


# --------------------------------------------------------------------------- disk


def alpha_for_gain_db(gain_db: float) -> float:
    """Balanced disk size giving a gain range of +-``gain_db``.

    From the upper end (2 + a)/(2 - a) = K of the balanced disk's gain range
    (Seiler, Packard & Gahinet 2020): a = 2 (K - 1)/(K + 1), K = 10^(dB/20).
    """
    k = 10.0 ** (gain_db / 20.0)
    return 2.0 * (k - 1.0) / (k + 1.0)


def alpha_for_phase_deg(phase_deg: float) -> float:
    """Balanced disk size giving +-``phase_deg``: phase = 2 atan(a/2), so a = 2 tan(phase/2)."""
    return 2.0 * math.tan(math.radians(phase_deg) / 2.0)


def disk_gain_db(alpha: float) -> float | None:
    """Upper end of the balanced disk's gain range, dB (``None`` = unbounded, a >= 2)."""
    if alpha >= 2.0:
        return None
    return 20.0 * math.log10((2.0 + alpha) / (2.0 - alpha))


def disk_phase_deg(alpha: float) -> float:
    """Phase variation the balanced disk tolerates: 2 atan(a/2), degrees."""
    return math.degrees(2.0 * math.atan(alpha / 2.0))


def disk_margin(ctx: LoopContext, params: Mapping[str, Any]) -> Iterable[Violation]:
    """Balanced disk margin alpha >= the largest of the configured requirements."""
    requirements: list[tuple[float, str]] = []
    if params.get("min_alpha") is not None:
        requirements.append((float(params["min_alpha"]), "min_alpha"))
    if params.get("min_gain_db") is not None:
        requirements.append((alpha_for_gain_db(float(params["min_gain_db"])), "min_gain_db"))
    if params.get("min_phase_deg") is not None:
        requirements.append(
            (alpha_for_phase_deg(float(params["min_phase_deg"])), "min_phase_deg")
        )
    if not requirements:
        return
    required_alpha, binding = max(requirements)
    stable, why = judged_variants(ctx, "disk margin")
    if why is not None:
        yield why
    if not stable:
        return
    missing = [ev for ev in stable if ev.analysis.margins.disk_margin is None]
    judged = [ev for ev in stable if ev.analysis.margins.disk_margin is not None]
    failing, worst = beyond_limit(
        judged, lambda ev: ev.analysis.margins.disk_margin.alpha, required_alpha, side="below"
    )
    if worst is not None:
        disk = worst.analysis.margins.disk_margin
        alpha = disk.alpha
        gain_db = disk_gain_db(alpha)
        tolerates = (
            f"+-{format_number(gain_db)} dB and +-{format_number(disk_phase_deg(alpha))} deg"
            if gain_db is not None
            else "any gain"
        )
        if binding == "min_gain_db":
            measured, limit, unit = gain_db, float(params["min_gain_db"]), "dB"
            wanted = f"+-{format_number(limit)} dB"
        elif binding == "min_phase_deg":
            measured, limit, unit = disk_phase_deg(alpha), float(params["min_phase_deg"]), "deg"
            wanted = f"+-{format_number(limit)} deg"
        else:
            measured, limit, unit = alpha, required_alpha, None
            wanted = f"alpha {format_number(required_alpha)}"
        yield loop_violation(
            ctx,
            params,
            worst,
            f"disk margin alpha {format_number(alpha)} (simultaneous {tolerates}) is "
            f"below the required {wanted} (alpha {format_number(required_alpha)})"
            f"{variants_phrase(len(failing), len(ctx.evaluations))}",
            measured,
            limit,
            unit,
            disk.hz,
            (binding,),
        )
    elif missing:
        yield not_computed_note(ctx, "disk margin", missing, stable)


_GAIN_SOURCE = (
    "6 dB: common practice for single loops (Åström & Murray, Feedback Systems, "
    "2nd ed., 2021, section 10.3 (from memory) quotes gain margins of 2-5, i.e. 6-14 dB); also "
    "implied by Ms <= 2 (GM >= Ms/(Ms - 1) = 2; Skogestad, J. Process Control 13, 2003)"
)

RULES: tuple[RuleSpec, ...] = (
    RuleSpec(
        id="margin.gain",
        default_severity=Severity.ERROR,
        summary="Upper gain margin at least min_db, and the gain may fall by min_lower_db.",
        explanation=(
            "Takes the interval of loop-gain change for which the closed loop stays "
            "stable (the entry of stable_gain_ranges_db that holds 0 dB). Its upper end "
            "is the gain margin: how far the loop gain may rise before instability; it "
            "must be at least `min_db`. Its lower end, for loops that lose stability "
            "when the gain falls (conditionally stable loops, open-loop unstable plants), "
            "must be at most -`min_lower_db` dB, or unbounded. The smallest margin over "
            "the stable variants is reported, at the frequency where the Nyquist curve "
            "crosses the negative real axis.\n\n"
            "Why it matters: plant gain drifts with temperature, load, supply voltage "
            "and parts; the gain margin is the room for that drift.\n\n"
            "How to fix it: lower the proportional gain, or attenuate the loop where its "
            "phase reaches -180 deg (low-pass or notch filter at a resonance). For a "
            "small lower margin raise the gain or add phase near the low-frequency "
            "crossing.\n\n"
            "Set `min_lower_db = 0` to check only the upper margin."
        ),
        source=_GAIN_SOURCE,
        parameters=(
            Parameter("min_db", "number", "dB", 6.0, "smallest allowed upper gain margin",
                      minimum=0.0),
            Parameter("min_lower_db", "number", "dB", 6.0,
                      "the gain may fall by at least this much (lower margin <= -min_lower_db)",
                      minimum=0.0),
        ),
        function=gain_margin,
    ),
    RuleSpec(
        id="margin.phase",
        default_severity=Severity.ERROR,
        summary="Phase margin of the crossover closest to -1 at least min_deg.",
        explanation=(
            "At every frequency where |L| = 1 (gain crossover) the phase margin is "
            "180 deg + angle(L), wrapped to (-180, 180]. The loop's phase margin is "
            "that of the crossover closest to -1 in angle (the smallest |PM|, sign "
            "kept), and in a stable loop its |PM| must be at least `min_deg`. A "
            "crossing where L is near +1 (|PM| near 180 deg) is far from -1 and "
            "does not decide it; an unstable loop is the finding of "
            "stability.closed-loop. A loop whose |L| never crosses 1 "
            "has no finite phase margin and passes. The worst stable variant is "
            "reported with its crossover frequency.\n\n"
            "Why it matters: a small phase margin means a lightly damped closed loop "
            "(overshoot, ringing) and little room for extra delay or phase lag from "
            "unmodelled dynamics.\n\n"
            "How to fix it: reduce the gain to move crossover to where the phase is "
            "better, add lead (derivative action, lead-lag) near crossover, reduce "
            "delay (faster sampling, less computation latency), or move filters "
            "farther above crossover."
        ),
        source=(
            "30 deg: common practice lower bound (Åström & Murray, Feedback Systems, "
            "2nd ed., 2021, section 10.3 (from memory) quotes phase margins of 30-60 deg); "
            "Ms <= 2 implies PM >= 2 asin(1/4) = 28.96 deg (Skogestad 2003)"
        ),
        parameters=(
            Parameter("min_deg", "number", "deg", 30.0, "smallest allowed phase margin",
                      minimum=0.0, maximum=180.0),
        ),
        function=phase_margin,
    ),
    RuleSpec(
        id="margin.delay",
        default_severity=Severity.ERROR,
        summary="Extra loop delay tolerated at least min_s (or min_samples in sampled loops).",
        explanation=(
            "The delay margin is the smallest extra delay in the loop that makes it "
            "unstable: min over crossovers of (phase margin mod 360 deg, in rad) / "
            "crossover frequency (rad/s). It must be at least `min_s` seconds, or, in a "
            "sampled loop, `min_samples` sample periods (when both are set a sampled "
            "loop is judged in samples and a continuous loop in seconds). With neither "
            "set the rule checks nothing: the tolerable delay depends on the firmware "
            "(jitter, interrupt latency), so the baseline imposes no default; "
            "`min_samples` alone on a continuous loop gives a note.\n\n"
            "Why it matters: firmware changes (more computation, a slower bus, an extra "
            "filter stage) add delay; a loop with a high crossover and a modest phase "
            "margin can have a delay margin below one sample.\n\n"
            "How to fix it: lower the crossover frequency, increase the phase margin, or "
            "reduce the existing delay (run the controller earlier in the cycle)."
        ),
        source="no default (application specific); definition: Åström & Murray, "
        "Feedback Systems, 2nd ed., 2021, section 10.3",
        parameters=(
            Parameter("min_s", "number", "s", None, "smallest allowed delay margin",
                      minimum=0.0),
            Parameter("min_samples", "number", "samples", None,
                      "smallest allowed delay margin in sample periods (sampled loops)",
                      minimum=0.0),
        ),
        function=delay_margin,
    ),
    RuleSpec(
        id="margin.disk",
        default_severity=Severity.ERROR,
        summary="Balanced disk margin (simultaneous gain and phase variation) large enough.",
        explanation=(
            "The balanced disk margin alpha = 1/max_w |S(jw) - 1/2| (skew 0; "
            "S - 1/2 = (S - T)/2) is the size of the largest disk of simultaneous "
            "gain and phase perturbations the loop tolerates: every gain in "
            "[(2-a)/(2+a), (2+a)/(2-a)] combined with "
            "every phase within +-2 atan(a/2). The requirement is `min_alpha`, or the "
            "alpha implied by `min_gain_db` (a = 2(K-1)/(K+1), K = 10^(dB/20)) or "
            "`min_phase_deg` (a = 2 tan(deg/2)); the largest configured requirement "
            "applies. With none set the rule checks nothing.\n\n"
            "Why it matters: classical gain and phase margins each assume the other "
            "perturbation is zero; a loop can have good separate margins and still be "
            "close to -1 in between. The disk margin is a single robust measure.\n\n"
            "How to fix it: reduce the sensitivity peak (alpha <= 1/(Ms - 1/2), since "
            "|S - 1/2| >= |S| - 1/2): less gain, more phase lead near crossover, less "
            "delay."
        ),
        source=(
            "no default (opt-in); definition and conversions: Seiler, Packard & Gahinet, "
            "An Introduction to Disk Margins, IEEE Control Systems Magazine 40(5), 2020"
        ),
        parameters=(
            Parameter("min_alpha", "number", None, None, "smallest allowed disk size alpha",
                      minimum=0.0),
            Parameter("min_gain_db", "number", "dB", None,
                      "smallest allowed balanced disk gain margin (+- dB)", minimum=0.0),
            Parameter("min_phase_deg", "number", "deg", None,
                      "smallest allowed balanced disk phase margin (+- deg)",
                      minimum=0.0, maximum=179.0),
        ),
        function=disk_margin,
    ),
)
