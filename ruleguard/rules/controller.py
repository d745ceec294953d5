"""Rules of the ``controller`` family: the controller and its filters on their own.

* ``controller.stable``: the controller and filter blocks as the loop runs them
  have no pole in the right half-plane (outside the unit circle) and none on
  the boundary except integrators (s = 0, z = 1).
* ``controller.derivative-filter``: a PID derivative term has a filter, and the
  filter lies below the Nyquist frequency. Without one the derivative is
  improper in continuous time; the Tustin map s = (2/h)(z - 1)/(z + 1) of a
  pure derivative k s gives k (2/h)(z - 1)/(z + 1), a pole at z = -1: the
  output rings at the Nyquist frequency.
* ``controller.noise-gain``: the gain of C F1..Fn at high frequency (at the
  Nyquist frequency, z = -1, in a sampled loop; as w -> inf in a continuous
  one), which multiplies sensor noise straight into the actuator.

References
----------
K. J. Åström and T. Hägglund, *Advanced PID Control*, ISA, 2006 (filtering of
the derivative and the high-frequency gain of the controller; from memory).
K. J. Åström and B. Wittenmark, *Computer-Controlled Systems*, 3rd ed.,
Prentice Hall, 1997 (Tustin's approximation and its frequency warping).
"""

from __future__ import annotations

import math
from collections.abc import Iterable, Mapping
from typing import Any

from ruleguard.deferred import numpy as np
from ruleguard.rules.base import LoopContext, Severity, Violation
from ruleguard.rules.evidence import (
    as_number,
    db,
    domain_block,
    format_number,
    note,
    nyquist_hz,
    param,
    unanalysed_notes,
    variant_id,
)
from ruleguard.rules.locations import (
    block_location,
    controller_field_location,
    controller_location,
    key,
)
from ruleguard.rules.spec import Parameter, RuleSpec

#: A root within this distance of z = -1 counts as the Tustin pole of a pure derivative.
_MINUS_ONE_TOLERANCE = 1e-9


# ------------------------------------------------------------------ stable
def _is_integrator(root: complex, discrete: bool) -> bool:
    if discrete:
        return abs(root - 1.0) <= 1e-9
    return abs(root) <= 1e-9


def _tustin_derivative_pole(block, root: complex) -> bool:
    """The z = -1 pole of a Tustin-discretized unfiltered derivative (the other rule's finding)."""
    return (
        getattr(block, "role", "") == "controller"
        and str(getattr(block, "method", "") or "").startswith("tustin")
        and abs(root + 1.0) <= _MINUS_ONE_TOLERANCE
    )


def _pole_frequency_hz(root: complex, sample_time_s: float | None) -> float:
    if sample_time_s is None:
        return abs(root) / (2.0 * math.pi)
    return abs(np.angle(root)) / (2.0 * math.pi * sample_time_s)


def controller_stable(ctx: LoopContext, params: Mapping[str, Any]) -> Iterable[Violation]:
    """No unstable or marginal (non-integrator) pole in the controller or a filter."""
    if param(params, "allow_unstable", False):
        return []
    base = key(ctx.spec.controller.location.key, "poles")
    if not ctx.evaluations:
        return unanalysed_notes(ctx, "controller stability", key_path=base)
    discrete = ctx.spec.sample_rate_hz is not None
    worst: dict[str, tuple[float, Any, Any, complex, bool]] = {}
    missing: dict[str, Any] = {}
    for ev in ctx.evaluations:
        model = ev.model
        for block in (model.controller, *model.filters):
            factored = domain_block(block, discrete)
            if factored is None:
                missing.setdefault(block.label, block)
                continue
            for p in factored.poles:
                p = complex(p)
                if _is_integrator(p, discrete) or _tustin_derivative_pole(block, p):
                    continue
                if discrete:
                    badness = abs(p) - 1.0
                    boundary = abs(abs(p) - 1.0) <= 1e-9
                else:
                    badness = p.real / max(abs(p), 1e-300)
                    boundary = abs(p.real) <= 1e-9 * max(abs(p), 1e-300)
                if badness < 0 and not boundary:
                    continue
                best = worst.get(block.label)
                if best is None or badness > best[0]:
                    worst[block.label] = (badness, ev, block, p, boundary)
    out: list[Violation] = []
    for label, block in missing.items():
        out.append(
            note(
                f"{label}: no factored form in the loop's domain, poles not checked",
                block_location(ctx, block),
                key_path=key(block_location(ctx, block).key, "poles"),
            )
        )
    for label in sorted(worst):
        _, ev, block, p, boundary = worst[label]
        h = 1.0 / float(ctx.spec.sample_rate_hz) if discrete else None
        if discrete:
            measured, limit, unit = abs(p), 1.0, "|z|"
            where = f"z = {p.real:.6g}{p.imag:+.6g}j (|z| = {abs(p):.6g})"
        else:
            measured, limit, unit = p.real, 0.0, "rad/s"
            where = f"s = {p.real:.6g}{p.imag:+.6g}j rad/s"
        state = "a pole on the stability boundary" if boundary else "an unstable pole"
        out.append(
            Violation(
                variant=variant_id(ev),
                message=f"{label} has {state} at {where}",
                measured=float(measured),
                limit=limit,
                unit=unit,
                frequency_hz=_pole_frequency_hz(p, h),
                location=block_location(ctx, block),
                key_path=key(block_location(ctx, block).key or label, "poles"),
            )
        )
    return out


# ------------------------------------------------------- derivative filter
def _derivative(fields: Mapping[str, Any]) -> tuple[bool, float | None, str, str | None]:
    """``(has_derivative, filter_hz, derivative_field, filter_field)`` of a PID table.

    Parallel form: kd s/(s/w_d + 1) with w_d from ``derivative_filter_hz``.
    Standard and series forms: the derivative's filter pole is at n/td_s rad/s
    (n defaults to 10, FORMATS.md section 3).
    """
    form = str(fields.get("form", "parallel"))
    if form == "parallel":
        kd = as_number(fields.get("kd", 0.0)) or 0.0
        if kd == 0.0:
            return False, None, "kd", None
        f_hz = as_number(fields.get("derivative_filter_hz"))
        return True, (f_hz if f_hz and f_hz > 0 else None), "kd", "derivative_filter_hz"
    td = as_number(fields.get("td_s", 0.0)) or 0.0
    if td <= 0.0:
        return False, None, "td_s", None
    n = as_number(fields.get("n", 10.0))
    if n is None or not n > 0:
        return True, None, "td_s", "n"
    return True, n / (2.0 * math.pi * td), "td_s", "n"


def derivative_filter(ctx: LoopContext, params: Mapping[str, Any]) -> Iterable[Violation]:
    """A PID derivative has a filter, below the Nyquist frequency."""
    controller = ctx.spec.controller
    if controller.kind != "pid":
        return []
    has_d, filter_hz, d_field, f_field = _derivative(controller.fields)
    if not has_d:
        return []
    base = key(controller.location.key, "derivative")
    if not ctx.evaluations:
        # An unfiltered derivative in a continuous loop makes the loop not
        # analysable; that finding (this rule's id) is raised with the reason.
        return unanalysed_notes(ctx, "derivative filter", key_path=base)
    model = ctx.evaluations[0].model
    method = str(model.controller.method or controller.fields.get("discretization") or "")
    nyq = nyquist_hz(ctx)
    if filter_hz is None:
        discrete = ctx.spec.sample_rate_hz is not None
        factored = domain_block(model.controller, discrete)
        pole_at_minus_one = (
            discrete
            and factored is not None
            and bool(np.any(np.abs(factored.poles + 1.0) <= _MINUS_ONE_TOLERANCE))
        )
        if pole_at_minus_one or (discrete and method.startswith("tustin")):
            message = (
                f"the derivative term (`{d_field}`) has no filter and {method or 'Tustin'} "
                "puts its pole at z = -1: the controller output rings at the Nyquist "
                f"frequency{f' ({format_number(nyq)} Hz)' if nyq else ''}; "
                "set `derivative_filter_hz`"
            )
        elif discrete:
            # FORMATS.md section 3: allowed in a discrete loop with backward or
            # forward Euler. Said as a note (its gain still peaks at Nyquist).
            message = (
                f"the derivative term (`{d_field}`) has no filter: allowed under "
                f"{method or 'Euler'} discretization, but its gain rises up to the Nyquist "
                "frequency (noise); `derivative_filter_hz` would limit it"
            )
        else:
            message = (
                f"the derivative term (`{d_field}`) has no filter: it is improper in a "
                "continuous loop; set `derivative_filter_hz`"
            )
        return [
            Violation(
                variant=None,
                message=message,
                measured=None,
                limit=nyq,
                unit="Hz" if nyq else None,
                frequency_hz=nyq,
                location=controller_field_location(ctx, d_field),
                related=(controller.location,),
                key_path=key(base, "missing"),
                severity=(
                    Severity.NOTE
                    if discrete and not (pole_at_minus_one or method.startswith("tustin"))
                    else None
                ),
            )
        ]
    if nyq is not None and filter_hz >= nyq:
        return [
            Violation(
                variant=None,
                message=(
                    f"the derivative filter at {format_number(filter_hz)} Hz is not below the "
                    f"Nyquist frequency {format_number(nyq)} Hz: in the sampled controller it "
                    "does not filter"
                ),
                measured=filter_hz,
                limit=nyq,
                unit="Hz",
                frequency_hz=filter_hz,
                location=controller_field_location(ctx, f_field or d_field),
                related=(controller.location,),
                key_path=key(base, "above-nyquist"),
            )
        ]
    return []


# ------------------------------------------------------------- noise gain
def high_frequency_gain(controller_path) -> tuple[float, float | None]:
    """``(|C F| in dB, frequency_hz)`` at high frequency.

    Sampled: at z = -1 (the Nyquist frequency). Continuous: the limit
    w -> inf, i.e. the leading-coefficient gain for a biproper path, -inf dB
    for a strictly proper one, +inf for an improper one (frequency ``None``).
    """
    h = controller_path.sample_time_s
    if h is not None:
        if np.any(np.abs(controller_path.poles + 1.0) <= _MINUS_ONE_TOLERANCE):
            return math.inf, 0.5 / h
        with np.errstate(divide="ignore", invalid="ignore"):
            value = controller_path.evaluate(np.array([-1.0 + 0j]))[0]
        return float(db(value)), 0.5 / h
    degree = controller_path.relative_degree
    if degree > 0:
        return -math.inf, None
    if degree < 0:
        return math.inf, None
    return float(db(controller_path.gain)), None


def _gain_field(ctx: LoopContext) -> str | None:
    fields = ctx.spec.controller.fields
    for name in ("kd", "td_s", "kp", "gain"):
        value = as_number(fields.get(name))
        if value:
            return name
    return None


def noise_gain(ctx: LoopContext, params: Mapping[str, Any]) -> Iterable[Violation]:
    """High-frequency gain of C F1..Fn at most ``max_db``."""
    max_db = params.get("max_db")
    if max_db is None:
        return []
    base = key(ctx.spec.controller.location.key, "noise-gain")
    if not ctx.evaluations:
        return unanalysed_notes(ctx, "controller noise gain", key_path=base)
    gains = [(high_frequency_gain(ev.model.controller_path), ev) for ev in ctx.evaluations]
    (value, f_hz), ev = max(gains, key=lambda item: item[0][0])
    if not value > float(max_db):
        return []
    field = _gain_field(ctx)
    where = "at the Nyquist frequency" if f_hz is not None else "as the frequency grows"
    return [
        Violation(
            variant=variant_id(ev),
            message=(
                f"controller gain {where} is {format_number(value)} dB, above "
                f"{format_number(max_db)} dB: "
                "sensor noise reaches the actuator amplified"
            ),
            measured=value if math.isfinite(value) else None,
            limit=float(max_db),
            unit="dB",
            frequency_hz=f_hz,
            location=(
                controller_field_location(ctx, field) if field else controller_location(ctx)
            ),
            related=tuple(f.location for f in ctx.spec.controller.filters),
            key_path=base,
        )
    ]


RULES: tuple[RuleSpec, ...] = (
    RuleSpec(
        id="controller.stable",
        default_severity=Severity.ERROR,
        summary="Controller and filter poles stable (integrators allowed).",
        explanation=(
            "Looks at the poles of the controller and of each filter as the loop runs them "
            "(discretized in a sampled loop) and reports any pole in the right half-plane "
            "(outside the unit circle), or on the stability boundary other than an "
            "integrator at s = 0 (z = 1). The z = -1 pole of an unfiltered Tustin "
            "derivative is left to controller.derivative-filter. With `allow_unstable = "
            "true` the rule checks nothing.\n\n"
            "Why it matters: an unstable controller or filter runs away whenever the loop "
            "is open (saturation, start-up, a sensor fault, manual mode), and a filter that "
            "is unstable on its own is almost always a typo or a discretization gone wrong "
            "(a cutoff above the Nyquist frequency, a biquad with a wrong sign).\n\n"
            "How to fix it: check the filter's frequencies and damping, and the biquad's "
            "`a` coefficients; keep continuous designs below the Nyquist frequency. A design "
            "that needs an unstable controller on purpose sets `allow_unstable = true` for "
            "that loop in an override."
        ),
        source="common practice (a stable controller where the plant allows it)",
        parameters=(
            Parameter(
                "allow_unstable", "boolean", None, False, "accept unstable controller poles"
            ),
        ),
        function=controller_stable,
    ),
    RuleSpec(
        id="controller.derivative-filter",
        default_severity=Severity.ERROR,
        summary="A derivative term has a filter, below the Nyquist frequency.",
        explanation=(
            "For a PID with derivative action (`kd` != 0, or `td_s` > 0) checks that the "
            "derivative is filtered (`derivative_filter_hz` in the parallel form; the "
            "standard and series forms always filter at n/td_s) and, in a sampled loop, "
            "that the filter lies below the Nyquist frequency.\n\n"
            "Why it matters: a pure derivative is improper in continuous time (the loop "
            "cannot be analysed) and amplifies noise without bound. Discretized by Tustin, "
            "k*s becomes k*(2/h)*(z - 1)/(z + 1), a pole at z = -1: the controller output "
            "alternates sign every sample. A filter above the Nyquist frequency does not "
            "filter anything the sampled controller can see.\n\n"
            "How to fix it: set `derivative_filter_hz` (typically a few times the "
            "crossover and well below the Nyquist frequency), or raise `n` of a standard "
            "or series PID."
        ),
        source="common practice (Åström & Hägglund, Advanced PID Control, 2006, on "
        "derivative filtering; from memory); the z = -1 pole from Tustin's map",
        parameters=(),
        function=derivative_filter,
    ),
    RuleSpec(
        id="controller.noise-gain",
        default_severity=Severity.WARNING,
        summary="Controller gain at high frequency (noise amplification) at most max_db.",
        explanation=(
            "Evaluates the controller path C*F1*...*Fn at high frequency: at the Nyquist "
            "frequency (z = -1) in a sampled loop, in the limit w -> inf in a continuous "
            "one, and requires at most `max_db`. There is no default: the gain carries the "
            "units of the loop (volts per ampere, ...), so each ruleset or override sets "
            "the limit for its loops.\n\n"
            "Why it matters: the high-frequency controller gain multiplies sensor noise "
            "and quantization straight into the actuator: heating in motors, audible "
            "noise, PWM saturation, wear.\n\n"
            "How to fix it: lower the derivative filter frequency or `kd`, add or lower a "
            "low-pass filter, or lower `kp`."
        ),
        source="per loop family (no default; the value depends on the loop's units)",
        parameters=(
            Parameter(
                "max_db", "number", "dB", None, "largest controller gain at high frequency"
            ),
        ),
        function=noise_gain,
    ),
)
