"""Rules of the ``filter`` family: where filters sit and what they cover.

* ``filter.below-nyquist``: in a sampled loop, every filter frequency lies
  below ``max_fraction`` of the Nyquist frequency, and a notch discretized by
  plain Tustin (no prewarping) is not moved by more than
  ``max_shift_percent``. Tustin maps the analog frequency w to the discrete
  frequency w_d = (2/h) atan(w h/2), always lower (frequency warping).
* ``filter.resonance-coverage``: every lightly damped plant resonance (a pole
  pair with damping below ``max_damping``, 0.2 by default) above the gain
  crossover is attenuated in L by at least ``min_attenuation_db``: the peak of
  |L| around the resonance is at most -``min_attenuation_db`` dB (gain
  stabilisation of the mode).

References
----------
A. V. Oppenheim and R. W. Schafer, *Discrete-Time Signal Processing*, 3rd
ed., Pearson, 2010, section 7.1.2 (the bilinear transformation and its
frequency warping, w_d = (2/h) atan(w h/2); section number from memory).
G. F. Franklin, J. D. Powell and M. L. Workman, *Digital Control of Dynamic
Systems*, 3rd ed., 1998 (prewarping; gain stabilisation of structural modes;
from memory).
"""

from __future__ import annotations

import math
from collections.abc import Iterable, Mapping
from typing import Any

from ruleguard.deferred import arrays, discretize
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
    controller_location,
    filter_field_location,
    filter_location,
    key,
    plant_location,
)
from ruleguard.rules.responses import refine_maxima
from ruleguard.rules.spec import Parameter, RuleSpec

#: Filter fields that place a filter in frequency (FORMATS.md section 3).
FREQUENCY_FIELDS = ("center_hz", "cutoff_hz", "zero_hz", "pole_hz", "prewarp_hz")

#: Filter kinds already given in z: designed in the sampled domain, not placed by an s design.
GIVEN_IN_Z = ("biquad",)


def tustin_shift_percent(
    design_hz: float, sample_rate_hz: float, prewarp_hz: float | None = None
) -> tuple[float, float]:
    """``(landed_hz, shift_percent)`` of a feature at ``design_hz`` under Tustin.

    Plain Tustin: ``landed_hz = (f_s/pi) atan(pi f / f_s)``
    (:func:`ruleguard.models.discretize.prewarp_shift`). Tustin prewarped at
    ``w0``, ``s = c (z - 1)/(z + 1)`` with ``c = w0 / tan(w0 h/2)``: on the unit
    circle ``s = j c tan(w_d h/2)``, so ``w_d = (2/h) atan(w / c)``, exact at
    ``w = w0``. The shift is ``100 (f - landed) / f`` (positive: lower).
    """
    if prewarp_hz is None:
        landed = discretize.prewarp_shift(design_hz, sample_rate_hz)
    else:
        h = 1.0 / sample_rate_hz
        c = discretize.tustin_constant(h, 2.0 * math.pi * prewarp_hz)
        landed = (2.0 / h) * math.atan(2.0 * math.pi * design_hz / c) / (2.0 * math.pi)
    return landed, 100.0 * (design_hz - landed) / design_hz


def _filter_frequencies(entry, block) -> list[tuple[str, float]]:
    """Named frequencies of a filter entry; for an s transfer function, its root frequencies."""
    out = []
    for name in FREQUENCY_FIELDS:
        value = as_number(entry.fields.get(name))
        if value is not None and value > 0:
            out.append((name, value))
    if out or block is None or block.continuous is None:
        return out
    for i, w in enumerate(block.continuous.corner_frequencies()):
        out.append((f"root {i + 1}", float(w) / (2.0 * math.pi)))
    return out


def below_nyquist(ctx: LoopContext, params: Mapping[str, Any]) -> Iterable[Violation]:
    """Filter frequencies below a fraction of Nyquist; plain-Tustin notch shift bounded."""
    nyq = nyquist_hz(ctx)
    filters = ctx.spec.controller.filters
    if nyq is None or not filters:
        return []
    rate = float(ctx.spec.sample_rate_hz)
    max_fraction = float(param(params, "max_fraction", 0.8))
    max_shift = float(param(params, "max_shift_percent", 2.0))
    base = key(ctx.spec.controller.location.key, "filters")
    if not ctx.evaluations:
        return unanalysed_notes(ctx, "filter placement", key_path=base)
    blocks = ctx.evaluations[0].model.filters
    out: list[Violation] = []
    limit_hz = max_fraction * nyq
    for i, entry in enumerate(filters):
        if entry.kind in GIVEN_IN_Z:
            continue
        block = blocks[i] if i < len(blocks) else None
        if block is not None and block.continuous is None:
            continue  # given in z: designed in the sampled domain
        for name, f_hz in _filter_frequencies(entry, block):
            if f_hz < limit_hz:
                continue
            field_loc = (
                filter_field_location(ctx, i, name)
                if name in entry.fields
                else filter_location(ctx, i)
            )
            out.append(
                Violation(
                    variant=None,
                    message=(
                        f"filter {i} ({entry.kind}) `{name}` = {format_number(f_hz)} Hz is not "
                        f"below {format_number(max_fraction)} of the Nyquist frequency "
                        f"{format_number(nyq)} Hz ({format_number(limit_hz)} Hz): the sampled "
                        "filter cannot act there as designed"
                    ),
                    measured=f_hz,
                    limit=limit_hz,
                    unit="Hz",
                    frequency_hz=f_hz,
                    location=field_loc,
                    related=(filter_location(ctx, i),),
                    key_path=key(entry.location.key or f"{base}.{i}", name, "nyquist"),
                )
            )
        method = str(getattr(block, "method", "") or "")
        center = as_number(entry.fields.get("center_hz"))
        prewarp = as_number(entry.fields.get("prewarp_hz"))
        if method == "tustin_prewarp" and prewarp is not None and 0 < prewarp < nyq:
            how = f"Tustin prewarped at {format_number(prewarp)} Hz"
        elif method == "tustin":
            how, prewarp = "plain Tustin", None
        else:
            how = None  # prewarped at the centre (exact there), Euler, or given in z
        if entry.kind == "notch" and how and center and center < nyq:
            landed, shift = tustin_shift_percent(center, rate, prewarp)
            if abs(shift) > max_shift:
                out.append(
                    Violation(
                        variant=None,
                        message=(
                            f"notch {i} designed at {format_number(center)} Hz lands at "
                            f"{format_number(landed)} Hz "
                            f"under {how} ({abs(shift):.3g} % {'low' if shift > 0 else 'high'}, "
                            f"limit {format_number(max_shift)} %): use `discretization = "
                            "\"tustin_prewarp\"` prewarped at the notch centre"
                        ),
                        measured=abs(shift),
                        limit=max_shift,
                        unit="%",
                        frequency_hz=landed,
                        location=filter_field_location(ctx, i, "center_hz"),
                        related=(filter_location(ctx, i),),
                        key_path=key(entry.location.key or f"{base}.{i}", "tustin-shift"),
                    )
                )
    return out


# ------------------------------------------------------ resonance coverage
def plant_resonances(
    block, sample_time_s: float | None, max_damping: float
) -> list[tuple[float, float, float]]:
    """Lightly damped pole pairs of a plant block: ``(wn rad/s, zeta, w_peak rad/s)``.

    Uses the continuous model when there is one (the physical mode); in a
    sampled loop ``w_peak`` is where the mode shows in L(e^{jwh}): its damped
    frequency folded into [0, pi/h] (aliasing). Without a continuous model
    the z-plane poles are mapped back by s = log(z)/h.
    """
    out = []
    h = sample_time_s
    if block.continuous is not None:
        poles = np.asarray(block.continuous.poles, dtype=complex)
    elif block.discrete is not None and h is not None:
        zp = np.asarray(block.discrete.poles, dtype=complex)
        zp = zp[np.abs(zp) > 1e-300]
        poles = np.log(zp) / h
    else:
        return out
    for p in poles:
        wn = abs(p)
        if wn <= 0 or p.imag <= 0:
            continue
        zeta = -p.real / wn
        if not (-1.0 < zeta < max_damping):
            continue
        w_peak = abs(p.imag)
        if h is not None:
            w_peak = abs(np.angle(np.exp(1j * p.imag * h))) / h
        out.append((float(wn), float(zeta), float(w_peak)))
    out.sort()
    return out


#: Samples per resonance window of the screen that rules a variant's resonances out
#: before the fine grid (:func:`_below_floor`).
_SCREEN_POINTS = 33


def _windows(open_loop, resonances: list[tuple[float, float]]) -> list[tuple[float, float]]:
    """The frequency window ``w_peak (1 +- 4 zeta)`` (rad/s) looked at for each resonance."""
    top = open_loop.w_max
    out = []
    for w_peak, zeta in resonances:
        half = min(max(4.0 * abs(zeta), 1e-4), 0.9)
        lo = w_peak * (1.0 - half)
        hi = min(w_peak * (1.0 + half), top) if math.isfinite(top) else w_peak * (1.0 + half)
        out.append((lo, hi))
    return out


#: Rounds of the screen's subdivision of the steps where its bound reaches the floor,
#: and the pieces each such step is cut into.
_SCREEN_ROUNDS, _SCREEN_SPLIT = 4, 8
#: More open steps than this after a round: the screen gives up (the fine grid decides).
_SCREEN_OPEN_LIMIT = 256


def _below_floor(open_loop, windows: list[tuple[float, float]], floor_db: float) -> bool:
    """True when |L| is certainly below ``floor_db`` on every window (rational L only).

    Each window is cut into ``_SCREEN_POINTS - 1`` steps. At a step's
    midpoint ``m``, ``log|L| = log|k| + sum_z log|x - z| - sum_p log|x - p|``
    (``x = j w`` or ``exp(j w h)``; a transport delay leaves ``|L|`` alone),
    and on the step ``|d log|L| / dw| <= |dx/dw| sum_r 1/dist(r, step)``
    over the zeros and poles ``r`` (``|dx/dw|`` is 1, or ``h``), the distance
    taken as ``|x(m) - r|`` minus the path length from ``m`` to the step's
    ends. So on the step ``log|L| <= log|L(m)| + (half step) * bound``. Steps
    whose bound reaches the floor, or has none (a root closer than the step's
    ends), are cut into ``_SCREEN_SPLIT`` and bounded again,
    ``_SCREEN_ROUNDS`` times at most. ``False`` as soon as a midpoint reaches
    the floor, when steps stay open after the last round, and for measured
    factors.
    """
    if open_loop.factors or not windows:
        return False
    rational = open_loop.rational
    if rational.gain == 0.0:
        return False
    starts, widths = [], []
    for lo, hi in windows:
        a, b = min(lo, hi), max(lo, hi)
        if not (math.isfinite(a) and math.isfinite(b) and b > a > 0):
            return False
        starts.append(a)
        widths.append(b - a)
    fractions, pieces = _screen_constants()
    nz = rational.zeros.size
    roots = np.concatenate([rational.zeros, rational.poles])
    # log|L| = log|k| + signs . log|x - r|  (+1 for a zero, -1 for a pole)
    signs = np.ones(roots.size)
    signs[nz:] = -1.0
    h = rational.sample_time_s
    speed = 1.0 if h is None else h
    log_gain = math.log(abs(rational.gain))
    ceiling = (floor_db - 1e-6) * (math.log(10.0) / 20.0)  # natural log of |L|
    steps = _SCREEN_POINTS - 1
    width = np.array(widths)
    mid = (np.array(starts)[:, None] + width[:, None] * fractions).ravel()
    half = np.repeat(width * (0.5 / steps), steps)
    with np.errstate(divide="ignore", invalid="ignore", over="ignore"):
        for round_ in range(_SCREEN_ROUNDS + 1):
            x = 1j * mid if h is None else np.exp((1j * h) * mid)
            far = np.abs(x[:, None] - roots)
            log_mag = np.log(far) @ signs
            log_mag += log_gain
            if not log_mag.max() < ceiling:  # a sample (or a pole) at the floor or above
                return False
            # no bound where a root is closer than the step's ends: a huge slope keeps it open
            reach = speed * half
            far -= reach[:, None]
            np.maximum(far, 1e-300, out=far)
            np.reciprocal(far, out=far)
            top = far.sum(axis=1)
            top *= reach
            top += log_mag
            open_steps = ~(top < ceiling)  # reaches the floor, or no bound
            count = np.count_nonzero(open_steps)
            if not count:
                return True
            if round_ == _SCREEN_ROUNDS or count > _SCREEN_OPEN_LIMIT:
                return False
            mid, half = mid[open_steps], half[open_steps]
            mid = (mid[:, None] + half[:, None] * pieces).ravel()
            half = np.repeat(half * (1.0 / _SCREEN_SPLIT), _SCREEN_SPLIT)
    return False


_CONSTANTS: list = []


def _screen_constants():
    """The step midpoints as fractions of a window, and a step's pieces around its midpoint."""
    if not _CONSTANTS:
        steps = _SCREEN_POINTS - 1
        fractions = (np.arange(steps) + 0.5) / steps
        pieces = (np.arange(_SCREEN_SPLIT) + 0.5) * (2.0 / _SCREEN_SPLIT) - 1.0
        _CONSTANTS[:] = [(fractions, pieces)]
    return _CONSTANTS[0]


def _peaks_db(open_loop, resonances: list[tuple[float, float]],
              floor_db: float | None = None) -> list[tuple[float, float]]:
    """``(w, |L| dB)`` at the largest |L| across each resonance ``(w_peak, zeta)``, refined.

    Every resonance is sampled at 801 points across ``w_peak (1 +- 4 zeta)``
    (one evaluation for all of them); each grid maximum is then refined
    between its neighbours by :func:`ruleguard.rules.responses.refine_maxima`.
    With ``floor_db``, when :func:`_below_floor` shows that |L| stays below it
    across every window, the grid and its refinement are skipped: each
    resonance gets ``(w_peak, -inf)`` (a value below the floor, not a peak).
    """
    if not resonances:
        return []
    windows = _windows(open_loop, resonances)
    if floor_db is not None and _below_floor(open_loop, windows, floor_db):
        return [(float(w_peak), -math.inf) for w_peak, _ in resonances]
    grids = []
    for (w_peak, _), (lo, hi) in zip(resonances, windows, strict=True):
        w = arrays.sorted_unique(np.concatenate([np.linspace(lo, hi, 801), [min(w_peak, hi)]]))
        grids.append(w[w > 0])

    def values(x):
        y = db(open_loop.response(x))
        # nan_to_num changes only values that are not finite: skip it when there are none
        return y if np.isfinite(y).all() else np.nan_to_num(y, nan=-np.inf)

    sizes = [g.size for g in grids]
    y_all = values(np.concatenate(grids))
    lo, hi, w0, y0 = [], [], [], []
    start = 0
    for w, n in zip(grids, sizes, strict=True):
        y = y_all[start:start + n]
        start += n
        i = int(np.argmax(y))
        lo.append(w[max(i - 1, 0)])
        hi.append(w[min(i + 1, w.size - 1)])
        w0.append(w[i])
        y0.append(y[i])
    w_at, peak = refine_maxima(values, np.array(lo), np.array(hi), np.array(w0), np.array(y0))
    return [(float(a), float(b)) for a, b in zip(w_at, peak, strict=True)]


def _responsible_filter(ctx: LoopContext, resonance_hz: float) -> tuple[Any, int | None]:
    """The notch nearest the resonance, else the nearest low-pass, else none."""
    filters = ctx.spec.controller.filters
    best = None
    for kinds in (("notch",), ("lowpass1", "lowpass2", "biquad")):
        for i, entry in enumerate(filters):
            if entry.kind not in kinds:
                continue
            f = as_number(entry.fields.get("center_hz") or entry.fields.get("cutoff_hz"))
            dist = abs(math.log(f / resonance_hz)) if f and f > 0 else math.inf
            if best is None or dist < best[0]:
                best = (dist, i)
        if best is not None:
            return filter_location(ctx, best[1]), best[1]
    return controller_location(ctx), None


def resonance_coverage(ctx: LoopContext, params: Mapping[str, Any]) -> Iterable[Violation]:
    """|L| at every lightly damped plant resonance above crossover <= -min_attenuation_db."""
    min_att = float(param(params, "min_attenuation_db", 6.0))
    max_damping = float(param(params, "max_damping", 0.2))
    base = key(ctx.spec.controller.location.key, "resonance-coverage")
    if not ctx.evaluations:
        return unanalysed_notes(ctx, "resonance coverage", key_path=base)
    discrete = ctx.spec.sample_rate_hz is not None
    h = 1.0 / float(ctx.spec.sample_rate_hz) if discrete else None
    worst: dict[int, tuple] = {}
    unknown = None
    for ev in ctx.evaluations:
        model = ev.model
        if model.plant.continuous is None and domain_block(model.plant, discrete) is None:
            unknown = unknown or ev
            continue
        modes = plant_resonances(model.plant, h, max_damping)
        if model.sensor is not None:
            modes += plant_resonances(model.sensor, h, max_damping)
            modes.sort()
        crossings = [c.hz for c in ev.analysis.margins.crossovers if c.hz is not None]
        f_c = min(crossings) if crossings else 0.0
        above = [(k, wn, zeta, w_peak) for k, (wn, zeta, w_peak) in enumerate(modes)
                 if wn / (2.0 * math.pi) > f_c]
        peaks = _peaks_db(model.open_loop, [(w_peak, zeta) for _, _, zeta, w_peak in above],
                         floor_db=-min_att)
        for (k, wn, zeta, _), (w_at, peak_db) in zip(above, peaks, strict=True):
            best = worst.get(k)
            if best is None or peak_db > best[0]:
                worst[k] = (peak_db, ev, wn, zeta, w_at, f_c)
    out: list[Violation] = []
    if unknown is not None:
        out.append(
            note(
                "resonance coverage not checked: the plant has no factored form (measured "
                "data), so its resonances are not known as poles",
                plant_location(ctx) or ctx.spec.location,
                key_path=key(base, "plant-unknown"),
                variant=variant_id(unknown),
            )
        )
    for k in sorted(worst):
        peak_db, ev, wn, zeta, w_at, f_c = worst[k]
        if peak_db <= -min_att:
            continue
        f_mode = wn / (2.0 * math.pi)
        f_at = w_at / (2.0 * math.pi)
        location, index = _responsible_filter(ctx, f_mode)
        aliased = abs(f_at - f_mode) > 0.05 * f_mode
        where = f" (seen at {format_number(f_at)} Hz after aliasing)" if aliased else ""
        related = tuple(loc for loc in (plant_location(ctx),) if loc is not None)
        fix = "" if index is not None else "; no notch or low-pass filter in the controller"
        out.append(
            Violation(
                variant=variant_id(ev),
                message=(
                    f"plant resonance at {format_number(f_mode)} Hz (damping {zeta:.3g}) above the "
                    f"crossover {format_number(f_c)} Hz{where} has |L| = "
                    f"{format_number(peak_db)} dB at its peak; "
                    f"at most {format_number(-min_att)} dB required{fix}"
                ),
                measured=float(peak_db) if math.isfinite(peak_db) else None,
                limit=-min_att,
                unit="dB",
                frequency_hz=f_at,
                location=location,
                related=related,
                key_path=key(base, f"mode{k}"),
            )
        )
    return out


RULES: tuple[RuleSpec, ...] = (
    RuleSpec(
        id="filter.below-nyquist",
        default_severity=Severity.WARNING,
        summary="Filter frequencies below a fraction of Nyquist; Tustin notch shift bounded.",
        explanation=(
            "In a sampled loop, checks each filter entry designed in s (notch, low-pass, "
            "lead-lag, s-domain transfer function): every frequency that places it "
            "(`center_hz`, `cutoff_hz`, `zero_hz`, `pole_hz`, `prewarp_hz`, or the roots of "
            "a transfer function) must lie below `max_fraction` (0.8) of the Nyquist "
            "frequency. A notch discretized by plain `tustin` (or prewarped at a `prewarp_hz` "
            "other than its centre) must not move by more than `max_shift_percent` (2 %): "
            "Tustin maps the analog frequency w to w_d = (2/h) atan(w h/2), so a notch "
            "designed at f lands at (f_s/pi) atan(pi f/f_s), always lower. Biquads and "
            "z-domain blocks are designed in the sampled domain and are not checked. "
            "Continuous loops are not checked.\n\n"
            "Why it matters: near the Nyquist frequency the sampled filter no longer has "
            "the response it was designed with; a notch that lands a few per cent low "
            "misses a lightly damped resonance entirely, because the notch is narrow.\n\n"
            "How to fix it: use `discretization = \"tustin_prewarp\"` for notches (it "
            "matches the response exactly at the centre), keep filter frequencies well "
            "below half the sample rate, or raise the sample rate."
        ),
        source=(
            "max_fraction 0.8 and max_shift_percent 2: common practice; warping "
            "w_d = (2/h) atan(w h/2) of the bilinear transformation (Oppenheim & Schafer, "
            "Discrete-Time Signal Processing, 3rd ed., 2010)"
        ),
        parameters=(
            Parameter(
                "max_fraction",
                "number",
                None,
                0.8,
                "highest filter frequency as a fraction of the Nyquist frequency",
                minimum=0.0,
                maximum=1.0,
            ),
            Parameter(
                "max_shift_percent",
                "number",
                "%",
                2.0,
                "largest shift of a notch centre under plain Tustin",
                minimum=0.0,
            ),
        ),
        function=below_nyquist,
    ),
    RuleSpec(
        id="filter.resonance-coverage",
        default_severity=Severity.WARNING,
        summary="Plant resonances above crossover attenuated in L by min_attenuation_db.",
        explanation=(
            "Finds the lightly damped resonances of the plant (and sensor): pole pairs with "
            "damping ratio below `max_damping` (0.2), from the continuous model. For each "
            "one above the variant's lowest gain crossover it measures the peak of |L| "
            "across the resonance (on the exact response, refined to the true maximum; in "
            "a sampled loop where the mode shows after aliasing) and requires at most "
            "-`min_attenuation_db` dB (6 dB). Plants given as measured data get a note.\n\n"
            "Why it matters: a lightly damped mode above crossover that |L| does not hold "
            "below 0 dB with margin is phase-stabilised at best: a small shift of the mode "
            "frequency (load, temperature, wear) or of the loop gain makes the loop ring "
            "or go unstable at the mode. Gain stabilisation (|L| well below 1 there) holds "
            "whatever the phase.\n\n"
            "How to fix it: add a notch at the resonance (the finding points at the notch "
            "nearest the mode, if any: check its centre, width and depth), lower a "
            "low-pass cutoff, or lower the loop gain."
        ),
        source=(
            "min_attenuation_db 6 and max_damping 0.2: common practice (gain stabilisation "
            "of structural modes with a 6 dB gain margin)"
        ),
        parameters=(
            Parameter(
                "min_attenuation_db",
                "number",
                "dB",
                6.0,
                "|L| at each resonance peak at most minus this",
            ),
            Parameter(
                "max_damping",
                "number",
                None,
                0.2,
                "a plant pole pair with damping below this is a resonance",
                minimum=0.0,
                maximum=1.0,
            ),
        ),
        function=resonance_coverage,
    ),
)
