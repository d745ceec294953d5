"""Stability verdict and every margin of an open loop (FORMATS.md section 5).

:func:`analyse_open_loop` samples the Nyquist contour once
(:mod:`ruleguard.analysis.contour`), decides stability from the winding number
about -1 (Z = P - ccw), and derives from the same curve:

* all gain crossovers ``|L| = 1`` and their phase margins;
* the stable gain ranges: the crossings of the negative real axis split the
  gains ``k > 0`` into intervals; the winding about ``-1/k`` changes by each
  crossing's weight as ``-1/k`` passes it (a winding number is the signed count
  of crossings of any ray from the point, here the ray to ``-inf``), so one
  winding computed by angle summation about -1 fixes all of them;
* delay margin, sensitivity and complementary sensitivity peaks, balanced
  disk margin and closed-loop bandwidth.

Ends of the gain range: an interval reaching an indentation arc (k -> 0) or
the ``w -> inf`` end of a strictly proper loop (k -> inf) is unbounded on
that side (``None``). With a transport delay the curve spirals into the
origin with infinitely many crossings; it is followed down to ``|L| = 1e-2``
(``contour.DELAY_TAIL_LEVEL``) and further, in steps of 40 dB, while the last
interval found is still stable; beyond that the gains are not examined
(a note says so), which is safe because a strictly proper loop with a delay
is unstable for large enough gain.

References
----------
H. Nyquist, "Regeneration theory", Bell System Technical Journal 11(1), 1932.
K. J. Astrom and R. M. Murray, Feedback Systems, 2nd ed., Princeton, 2021,
chapters 10 and 13 (margins, sensitivity peaks, delay margin).
K. J. Astrom and B. Wittenmark, Computer-Controlled Systems, 3rd ed., 1997,
Defs. 3.4-3.5 (margins of sampled loops on L(e^{jwh})).
P. J. Seiler, A. K. Packard and P. Gahinet, "An Introduction to Disk Margins",
IEEE Control Systems Magazine 40(5), 2020.
"""

from __future__ import annotations

import math

import numpy as np

from ruleguard.analysis.contour import SampledContour, sample_contour
from ruleguard.analysis.crossings import (
    AxisCrossing,
    first_fall_below,
    negative_axis_crossings,
    peak,
    refine_tangencies,
    unit_gain_crossings,
)
from ruleguard.analysis.openloop import OpenLoop
from ruleguard.analysis.results import Crossover, DiskMargin, LoopAnalysis, Margins, Stability

_TWO_PI = 2.0 * math.pi
#: Crossing values closer than this (relative) are one crossing.
_MERGE_RTOL = 1e-10
#: Drop of |T| below |T(0)| that defines the bandwidth (3 dB exactly).
BANDWIDTH_DROP_DB = 3.0


def _hz(w: float | None) -> float | None:
    return None if w is None else float(w) / _TWO_PI


def _db(x: float) -> float:
    return 20.0 * math.log10(x)


def wrap_phase_margin(angle_deg: np.ndarray) -> np.ndarray:
    """``180 + angle`` wrapped to (-180, 180] degrees."""
    pm = np.mod(180.0 + np.asarray(angle_deg, dtype=float) + 180.0, 360.0) - 180.0
    return np.where(pm <= -180.0, pm + 360.0, pm)


def gain_crossovers(contour: SampledContour) -> tuple[Crossover, ...]:
    """All gain crossovers with their phase margins (frequencies in Hz)."""
    w = unit_gain_crossings(contour)
    if w.size == 0:
        return ()
    L = contour.evaluate(w)
    pm = wrap_phase_margin(np.degrees(np.angle(L)))
    return tuple(Crossover(float(wi) / _TWO_PI, float(p)) for wi, p in zip(w, pm, strict=False))


def closest_crossover(crossovers: tuple[Crossover, ...]) -> Crossover:
    """The gain crossover closest to -1 in angle: the smallest ``|PM|``.

    Ties (equal ``|PM|`` to the last bit) go to the lower frequency, so the
    choice does not depend on the order the crossings were found in.
    """
    return min(crossovers, key=lambda c: (abs(c.phase_margin_deg), c.hz))


def _merge(crossings: list[AxisCrossing]) -> list[tuple[float, int, float]]:
    """Sort crossings by value; merge equal values: ``(value, weight, w)``."""
    out: list[list] = []
    for c in sorted(crossings, key=lambda c: c.value):
        if out and abs(c.value - out[-1][0]) <= _MERGE_RTOL * abs(c.value):
            out[-1][1] += c.weight
        else:
            out.append([c.value, c.weight, c.w])
    return [(v, k, w) for v, k, w in out]


def gain_intervals(contour: SampledContour, crossings: list[AxisCrossing], p_count: int,
                   reference: tuple[float, int]):
    """Intervals of ``x = -1/k`` on the negative real axis with their stability.

    Parameters
    ----------
    reference:
        A point ``x_ref`` (not a crossing) and the winding number about it.

    Returns
    -------
    list of ``(x_lo, x_hi, w_lo, w_hi, stable)``, ``x_lo = -inf`` / ``x_hi = 0``
    at the ends (k -> 0 / k -> inf); ``w_*`` the crossing frequencies (rad/s).
    """
    merged = _merge(crossings)
    x_ref, w_ref = reference
    # winding for x just right of -inf: subtract crossings left of the reference
    base = w_ref - sum(k for v, k, _ in merged if v < x_ref)
    edges = [(-math.inf, None)] + [(v, w) for v, _, w in merged] + [(0.0, None)]
    out = []
    wind = base
    for i in range(len(edges) - 1):
        if i > 0:
            wind += merged[i - 1][1]
        (x_lo, w_lo), (x_hi, w_hi) = edges[i], edges[i + 1]
        out.append((x_lo, x_hi, w_lo, w_hi, p_count - wind == 0))
    return out


def _to_db(x: float) -> float | None:
    if x == -math.inf or x == 0.0:
        return None
    return -_db(abs(x))


def analyse_open_loop(open_loop: OpenLoop) -> LoopAnalysis:
    """Nyquist stability and every margin of ``open_loop`` (FORMATS.md section 5).

    Parameters
    ----------
    open_loop:
        The open loop ``L`` (negative feedback), continuous or discrete, with
        optional frequency-response factors.

    Returns
    -------
    LoopAnalysis
        Frequencies in Hz. For an unstable loop the gain, lower gain, delay and
        disk margins are ``None``; crossovers, peaks and stable gain ranges
        are still given.

    Notes
    -----
    Stable iff ``P - ccw = 0`` with ``P = open_loop.unstable_pole_count()``.
    Margins follow Astrom & Murray (2021) ch. 10; Ms and Mt are refined to the
    true peaks by Brent's bounded minimization; the disk margin is the
    balanced one of Seiler, Packard & Gahinet (2020),
    ``alpha = 1 / max |S - 1/2|``.

    References
    ----------
    H. Nyquist, "Regeneration theory", Bell System Technical Journal 11(1), 1932.
    P. J. Seiler, A. K. Packard, P. Gahinet, "An Introduction to Disk Margins",
    IEEE Control Systems Magazine 40(5), 2020.
    """
    contour = sample_contour(open_loop)
    p_count = open_loop.unstable_pole_count()
    refine_tangencies(contour, "unit")
    refine_tangencies(contour, "axis")
    ccw = contour.winding(-1.0)
    through = ccw is None
    hidden = contour.has_cancelled_boundary_pole
    stable = (not through) and (not hidden) and (p_count - ccw == 0)
    stability = Stability(
        stable=bool(stable),
        open_loop_unstable_poles=int(p_count),
        ccw_encirclements=ccw,
        # a boundary pole cancelled by a zero stays a closed-loop pole on the
        # boundary: marginal, reported like a curve through -1 (null count, note)
        closed_loop_unstable_poles=None if (through or hidden) else int(p_count - ccw),
        through_critical_point=through,
    )
    notes = []
    if through:
        notes.append("the Nyquist curve passes through -1: the closed loop has a pole on the "
                     "stability boundary (not stable)")

    # ------------------------------------------------ stable gain ranges
    intervals = _intervals_with_tail(open_loop, contour, p_count, ccw, notes)
    if hidden:
        intervals = [(a, b, wa, wb, False) for a, b, wa, wb, _ in intervals]
    ranges = tuple((_to_db(a), _to_db(b)) for a, b, _, _, s in intervals if s)
    gm = gm_hz = lgm = lgm_hz = None
    if stable:
        for a, b, wa, wb, s in intervals:
            if a < -1.0 < b and s:
                gm, gm_hz = _to_db(b), _hz(wb) if b != 0.0 else None
                lgm, lgm_hz = _to_db(a), _hz(wa) if a != -math.inf else None
                break

    # ------------------------------------------------ phase and delay margins
    crossovers = gain_crossovers(contour)
    pm = pm_hz = None
    if crossovers:
        # FORMATS.md section 5 / METHODS.md: each crossover's PM is 180 + angle L
        # wrapped to (-180, 180]; the loop's is that of the crossover closest to
        # -1 in angle (smallest |PM|), sign kept. A crossing near +1 (|PM| near
        # 180) is far from -1 and does not set it.
        closest = closest_crossover(crossovers)
        pm, pm_hz = closest.phase_margin_deg, closest.hz
    dm = dm_samples = None
    if stable and crossovers:
        vals = [math.radians(c.phase_margin_deg % 360.0) / (_TWO_PI * c.hz)
                for c in crossovers if c.hz > 0]
        if vals:
            dm = min(vals)
            if open_loop.sample_rate_hz is not None:
                dm_samples = dm * open_loop.sample_rate_hz

    # ------------------------------------------------ peaks
    ms_db = ms_hz = mt_db = mt_hz = None
    disk = None
    bandwidth = None
    if not through:
        ms, ms_w = _extreme(contour, _abs_s, limit_at_arcs=0.0)
        mt, mt_w = _extreme(contour, _abs_t, limit_at_arcs=1.0)
        ms_db, ms_hz = _db(ms), _hz(ms_w)
        mt_db, mt_hz = (_db(mt), _hz(mt_w)) if mt > 0 else (None, None)
        if stable:
            d, d_w = _extreme(contour, _abs_s_half, limit_at_arcs=0.5)
            disk = disk_margin(1.0 / d, _hz(d_w))
        bandwidth = _hz(_bandwidth(contour))
    margins = Margins(
        gain_margin_db=gm, gain_margin_hz=gm_hz,
        lower_gain_margin_db=lgm, lower_gain_margin_hz=lgm_hz,
        stable_gain_ranges_db=ranges,
        phase_margin_deg=pm, crossover_hz=pm_hz, crossovers=crossovers,
        delay_margin_s=dm, delay_margin_samples=dm_samples,
        sensitivity_peak_db=ms_db, sensitivity_peak_hz=ms_hz,
        complementary_peak_db=mt_db, complementary_peak_hz=mt_hz,
        disk_margin=disk, bandwidth_hz=bandwidth,
    )
    notes.extend(_closure_notes(open_loop, contour))
    notes.extend(contour.notes)
    return LoopAnalysis(stability, margins, tuple(dict.fromkeys(notes)))


def _reference_winding(contour: SampledContour, crossings, ccw):
    if ccw is not None:
        return (-1.0, ccw)
    vals = sorted(c.value for c in crossings)
    left = [v for v in vals if v < -1.0 * (1 + 1e-6)]
    right = [v for v in vals if v > -1.0 * (1 - 1e-6)]
    candidates = []
    if left:
        candidates.append(-math.sqrt(abs(left[-1])))
    else:
        candidates.append(-2.0)
    if right:
        candidates.append(-math.sqrt(abs(right[0])))
    else:
        candidates.append(-0.5)
    for x in candidates:
        n = contour.winding(x)
        if n is not None:
            return (x, n)
    return None


def _intervals_with_tail(open_loop, contour, p_count, ccw, notes):
    """Gain intervals; with a transport delay, look further up while the last one is stable."""
    level = None
    for attempt in range(4):
        crossings = negative_axis_crossings(contour)
        if attempt:
            ccw = contour.winding(-1.0)
        ref = _reference_winding(contour, crossings, ccw)
        if ref is None:
            return []
        intervals = gain_intervals(contour, crossings, p_count, ref)
        spiral = (contour.end == "infinity" and open_loop.rational.delay_s > 0
                  and contour.rational.relative_degree > 0)
        if not (spiral and intervals and intervals[-1][4]):
            return intervals
        if attempt == 3:
            top_db = -_db(abs(contour.branches[-1].L[-1]))
            notes.append(f"transport delay: gain increases beyond +{top_db:.0f} dB "
                         "were not examined")
            return intervals
        level = (abs(contour.branches[-1].L[-1]) if level is None else level) * 1e-2
        contour = sample_contour(open_loop, tail_level=level)
        refine_tangencies(contour, "axis")
    return intervals


def _abs_s(L: np.ndarray) -> np.ndarray:
    with np.errstate(divide="ignore", invalid="ignore"):
        return 1.0 / np.abs(1.0 + L)


def _abs_t(L: np.ndarray) -> np.ndarray:
    with np.errstate(divide="ignore", invalid="ignore"):
        return np.abs(L) / np.abs(1.0 + L)


def _abs_t_np_scalar(L: np.complex128) -> float:
    """``_abs_t`` of one numpy complex scalar: the same numbers (numpy's ``abs``), no warning."""
    d = np.abs(1.0 + L)
    if d == 0.0:  # L = -1
        return math.inf
    if d == math.inf:  # L infinite: inf / inf
        return math.nan
    return np.abs(L) / d


def _abs_s_half(L: np.ndarray) -> np.ndarray:
    with np.errstate(divide="ignore", invalid="ignore"):
        return np.abs(1.0 - L) / (2.0 * np.abs(1.0 + L))


def _s_scalar(L: complex) -> float:
    d = abs(1.0 + L)
    return math.inf if d == 0 else 1.0 / d


def _t_scalar(L: complex) -> float:
    d = abs(1.0 + L)
    return math.inf if d == 0 else abs(L) / d


def _s_half_scalar(L: complex) -> float:
    d = abs(1.0 + L)
    return math.inf if d == 0 else abs(1.0 - L) / (2.0 * d)


_SCALAR = {_abs_s: _s_scalar, _abs_t: _t_scalar, _abs_s_half: _s_half_scalar}


def _gap(L: complex, r: float) -> float:
    """Lower bound of ``|1 + L'|`` over ``|L' - L| <= r`` (0 when the disc reaches -1)."""
    return max(abs(1.0 + L) - r, 0.0)


def _s_upper(L: complex, r: float) -> float:
    g = _gap(L, r)
    return math.inf if g == 0.0 else 1.0 / g


def _t_upper(L: complex, r: float) -> float:
    g = _gap(L, r)
    return math.inf if g == 0.0 else (abs(L) + r) / g


def _s_half_upper(L: complex, r: float) -> float:
    g = _gap(L, r)
    return math.inf if g == 0.0 else (abs(1.0 - L) + r) / (2.0 * g)


#: Bounds of each peaked function over a disc of ``L`` values (triangle
#: inequality), used by :func:`peak` to skip candidates that cannot win.
_UPPER = {_abs_s: _s_upper, _abs_t: _t_upper, _abs_s_half: _s_half_upper}


def _extreme(contour: SampledContour, fun, limit_at_arcs: float) -> tuple[float, float]:
    """Peak of ``fun(L)`` over the frequency axis, arcs' limits included."""
    val, w = peak(contour, fun, _SCALAR[fun], upper_bound=_UPPER[fun])
    for ind in contour.indentations:
        if ind.order > 0 and limit_at_arcs > val:
            val, w = limit_at_arcs, ind.w0
    return float(val), float(w)


def _bandwidth(contour: SampledContour) -> float | None:
    starts_arc = any(i.position == "start" and i.order > 0 for i in contour.indentations)
    if starts_arc:
        t0 = 1.0
    else:
        t0 = float(_abs_t(np.array([contour.branches[0].L[0]]))[0])
    if not (t0 > 0 and math.isfinite(t0)):
        return None
    level = t0 * 10.0 ** (-BANDWIDTH_DROP_DB / 20.0)
    return first_fall_below(contour, _abs_t, level, _abs_t_np_scalar)


def disk_margin(alpha: float, hz: float | None) -> DiskMargin:
    """Balanced disk margin record from ``alpha`` (Seiler, Packard & Gahinet, 2020).

    Gain range ``[(2 - a)/(2 + a), (2 + a)/(2 - a)]`` in dB (unbounded when
    ``a >= 2``), phase ``2 atan(a/2)``.
    """
    if alpha >= 2.0 * (1.0 - 1e-12):
        # Unbounded. An alpha a rounding error below 2 is reported as 2, so the
        # record keeps FORMATS.md section 5: null range exactly when alpha >= 2.
        alpha = max(float(alpha), 2.0)
        rng: tuple[float | None, float | None] = (None, None)
    else:
        rng = (_db((2.0 - alpha) / (2.0 + alpha)), _db((2.0 + alpha) / (2.0 - alpha)))
    return DiskMargin(float(alpha), rng, math.degrees(2.0 * math.atan(alpha / 2.0)), hz)


def _closure_notes(open_loop: OpenLoop, contour: SampledContour) -> list[str]:
    if contour.end != "data" and not (open_loop.factors and contour.end == "nyquist"):
        return []
    out = []
    Le = complex(contour.branches[-1].L[-1])
    top_hz = contour.branches[-1].w[-1] / _TWO_PI
    if contour.end == "data" and abs(Le) >= 0.1:
        out.append(f"|L| at the end of the data ({top_hz:g} Hz) is {_db(abs(Le)):.1f} dB, not "
                   "below -20 dB: the contour is closed by a straight segment there and the "
                   "verdict depends on that closure")
    if open_loop.is_discrete and Le.real < -0.5:
        out.append(f"the closing segment at {top_hz:g} Hz passes left of -0.5 (at "
                   f"{Le.real:.3g}): the verdict depends on the closure")
    return out


# ---------------------------------------------------------------- skewed disk margin
def skewed_disk_range(alpha: float, skew: float) -> tuple[float | None, float | None]:
    """Gain range (dB) of the skewed disk ``D(alpha, skew)``, ``None`` = unbounded.

    The disk holds the factors ``f = (1 + (1 - s) d / 2) / (1 - (1 + s) d / 2)``
    with ``|d| <= alpha`` (Seiler, Packard & Gahinet 2020, eq. for D(alpha, sigma)).
    ``f`` increases with real ``d`` (``df/dd = 1 / (1 - (1 + s) d / 2)^2 > 0``),
    so the real factors around 1 run from ``d = -alpha`` to ``d = alpha``:
    ``[(2 - a(1 - s)) / (2 + a(1 + s)), (2 + a(1 - s)) / (2 - a(1 + s))]``
    (METHODS.md). The upper end is unbounded when ``2 - a(1 + s) <= 0`` (the
    pole of ``f`` lies inside the disk), the lower one when
    ``2 - a(1 - s) <= 0`` (the factor 0 lies inside the disk).
    """
    low_num = 2.0 - alpha * (1.0 - skew)
    high_den = 2.0 - alpha * (1.0 + skew)
    low = _db(low_num / (2.0 + alpha * (1.0 + skew))) if low_num > 0 else None
    high = _db((2.0 + alpha * (1.0 - skew)) / high_den) if high_den > 0 else None
    return (low, high)


def skewed_disk_phase_deg(alpha: float, skew: float) -> float:
    """Phase variation (deg, +-) the skewed disk ``D(alpha, skew)`` tolerates.

    Derivation: ``e^{j theta}`` is in the disk when ``|d| <= alpha`` for
    ``d = (e^{j theta} - 1) / ((1 - s)/2 + (1 + s)/2 e^{j theta})`` (the
    inverse of the disk's map). ``|e^{j theta} - 1|^2 = 4u`` with
    ``u = sin^2(theta/2)``, and the denominator's squared modulus is
    ``(1 + s^2)/2 + (1 - s^2)/2 cos theta = 1 - (1 - s^2) u``. So the condition
    is ``u (4 + a^2 (1 - s^2)) <= a^2``, i.e.
    ``tan(theta/2) = a / sqrt(4 - a^2 s^2)`` at the edge, and every phase
    (180 deg) when ``a |s| >= 2``. For ``s = 0`` this is METHODS.md's
    ``2 atan(a/2)``.

    References
    ----------
    P. J. Seiler, A. K. Packard, P. Gahinet, "An Introduction to Disk Margins",
    IEEE Control Systems Magazine 40(5), 2020.
    """
    room = 4.0 - (alpha * skew) ** 2
    if room <= 0.0:
        return 180.0
    return math.degrees(2.0 * math.atan(alpha / math.sqrt(room)))


def skewed_disk_record(alpha: float, skew: float, hz: float | None) -> DiskMargin:
    """The disk margin record of size ``alpha`` and skew ``skew`` (0: :func:`disk_margin`)."""
    if skew == 0.0:
        return disk_margin(alpha, hz)
    return DiskMargin(float(alpha), skewed_disk_range(alpha, skew),
                      skewed_disk_phase_deg(alpha, skew), hz, float(skew))


def skewed_disk_margin(open_loop: OpenLoop, skew: float) -> DiskMargin:
    """Disk margin of skew ``skew`` of a closed-loop stable ``open_loop``.

    ``alpha = 1 / max_w |S(jw) + (skew - 1)/2|`` (Seiler, Packard & Gahinet
    2020; METHODS.md): skew 0 is the balanced margin (``S - 1/2``), skew 1
    judges ``|S|`` and skew -1 ``|S - 1| = |T|``. The peak is found on the
    adaptively sampled Nyquist contour and refined by Brent's bounded
    minimisation, like Ms; the limits at the indentation arcs (``L -> inf``,
    ``S -> 0``: ``|c|``) and, for a strictly proper continuous loop, at
    ``w -> inf`` (``S -> 1``: ``|1 + c|``) are included. The caller
    ensures the loop is closed-loop stable (the margin is not defined
    otherwise).

    Returns
    -------
    DiskMargin
        ``hz`` where the peak is (``None`` when it is the limit ``w -> inf``).

    References
    ----------
    P. J. Seiler, A. K. Packard, P. Gahinet, "An Introduction to Disk Margins",
    IEEE Control Systems Magazine 40(5), 2020.
    R. P. Brent, Algorithms for Minimization without Derivatives, 1973, ch. 5.
    """
    shift = 0.5 * (float(skew) - 1.0)

    def vec(L: np.ndarray) -> np.ndarray:
        with np.errstate(divide="ignore", invalid="ignore"):
            return np.abs(1.0 / (1.0 + L) + shift)

    def scalar(L: complex) -> float:
        d = 1.0 + L
        return math.inf if d == 0 else abs(1.0 / d + shift)

    contour = sample_contour(open_loop)
    contour.refine_for_point(-1.0)
    value, w = peak(contour, vec, scalar)
    hz = _hz(w) if math.isfinite(w) else None
    for ind in contour.indentations:
        if ind.order > 0 and abs(shift) > value:
            value, hz = abs(shift), _hz(ind.w0)
    if contour.end == "infinity" and contour.rational.relative_degree > 0 and \
            abs(1.0 + shift) > value:
        value, hz = abs(1.0 + shift), None
    alpha = math.inf if value <= 0 else 1.0 / value
    return skewed_disk_record(alpha, skew, hz)
