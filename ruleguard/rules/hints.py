"""Fix hints: what would make a failing margin finding pass (computed, never applied).

A hint names the range of **controller gain factors** ``k`` (the whole
controller scaled: kp, ki and kd together, or a transfer function's gain)
for which every variant of the loop is closed-loop stable and passes every
margin and sensitivity rule configured for it at once, and, for
``margin.phase`` / ``margin.delay``, the extra loop delay at which the rule
would just pass (negative: delay to remove) and the highest gain crossover
frequency at which it can pass.

How the range is found, exactly where possible. Scaling the loop by ``k``
shifts every stable gain range by ``-20 log10 k`` dB and leaves the phase of
``L`` alone; the crossovers of ``kL`` are where ``|L| = 1/k``. So, per variant:

* stability and ``margin.gain``: each stable range ``[a, b]`` dB of
  ``stable_gain_ranges_db`` allows ``20 log10 k`` in
  ``[a + min_lower_db, b - min_db]``;
* ``margin.phase`` / ``margin.delay``: the frequencies where the rule's
  per-crossover test fails (``|PM| < min_deg``; ``(PM mod 360) / w < min_s``)
  form runs on the sampled Nyquist contour; a crossover of ``kL`` inside a
  run fails, so each run forbids ``k`` in ``[1/max|L|, 1/min|L|]`` over it
  (the image of a connected set under a continuous map is connected). Run
  edges are refined by Brent's root finder and interior extremes of ``|L|``
  by Brent's minimiser, on the exact response;
* ``margin.disk``, ``sensitivity.peak``, ``sensitivity.complementary-peak``:
  each is ``max_w |S_k + c| <= R`` with ``S_k = 1/(1 + kL)`` (``c = (sigma -
  1)/2`` and ``R = 1/alpha`` for the disk; ``c = 0``, ``R = Ms`` for the
  sensitivity peak; ``c = -1``, ``R = Mt`` since ``T = 1 - S``). At one
  frequency ``|1 + c u|^2 > R^2 |u|^2`` with ``u = 1 + kL`` is the quadratic
  ``A k^2 + B k + C < 0``, ``A = (R^2 - c^2)|L|^2``,
  ``B = 2 Re L (R^2 - c^2 - c)``, ``C = R^2 - (1 + c)^2``: it forbids ``k``
  between its roots when ``R > |c|`` (otherwise only the ``k`` between the
  roots are allowed). The forbidden intervals of one run of frequencies
  move continuously, so their union is ``[min lower root, max upper root]``.

The ranges are intersected over the variants and constraints; the interval
nearest the present gain (``k = 1``) is reported, or none ("no gain change
alone passes"). The suggested factor, the end nearest 1 moved 1 dB inside
(a quarter of the interval when narrower), is then **confirmed**: every
variant is re-analysed with ``kL`` and the rules re-run on it.

References
----------
K. J. Åström and R. M. Murray, *Feedback Systems*, 2nd ed., Princeton, 2021,
section 10.3 (margins; gain scaling moves the crossover along |L|).
P. Seiler, A. Packard and P. Gahinet, "An introduction to disk margins",
IEEE Control Systems Magazine 40(5), 2020.
R. P. Brent, *Algorithms for Minimization without Derivatives*, 1973.
"""

from __future__ import annotations

import cmath
import math
from collections.abc import Callable, Mapping, Sequence
from dataclasses import replace
from typing import Any

from ruleguard.deferred import numpy as np
from ruleguard.frozen import record
from ruleguard.rules.base import Evaluation, LoopContext, Severity, Violation

#: Rules a hint is given for, and that the gain factor range satisfies at once.
HINTED_RULES = (
    "margin.gain",
    "margin.phase",
    "margin.delay",
    "margin.disk",
    "sensitivity.peak",
    "sensitivity.complementary-peak",
)
_STABILITY = "stability.closed-loop"
#: How far inside the range the suggested factor lies (dB), at most.
SUGGESTION_INSET_DB = 1.0
_INF = math.inf
#: Stands for an undefined value inside a minimisation (finite, so Brent's steps stay finite).
_POOR = 1e300

Intervals = list[tuple[float, float]]


@record
class FixHint:
    """What would make a failing finding pass.

    Attributes
    ----------
    gain_factor_range:
        ``(low, high)`` controller gain factors (``high`` ``None``: no upper
        end; ``low`` 0: any reduction), or ``None`` when no gain change alone
        makes the loop pass ``rules``.
    suggested_gain_factor:
        A factor inside the range (``None`` without a range).
    confirmed:
        The suggested factor was re-analysed on every variant and passes.
    rules:
        The rules the range satisfies together (those configured for the loop).
    max_extra_delay_s:
        ``margin.phase`` / ``margin.delay``: the extra loop delay at which the
        rule alone would just pass; negative: that much delay must be removed.
    crossover_hz_at_most:
        ``margin.phase`` / ``margin.delay``: the gain crossover must lie below
        this frequency (Hz) for the worst variant's failing crossover to pass.
    """

    gain_factor_range: tuple[float, float | None] | None
    suggested_gain_factor: float | None
    confirmed: bool
    rules: tuple[str, ...]
    max_extra_delay_s: float | None = None
    crossover_hz_at_most: float | None = None

    @property
    def gain_change_db_range(self) -> tuple[float | None, float | None] | None:
        """The range in dB (``None`` ends: unbounded)."""
        if self.gain_factor_range is None:
            return None
        low, high = self.gain_factor_range
        return (
            None if low <= 0 else 20.0 * math.log10(low),
            None if high is None else 20.0 * math.log10(high),
        )


# ------------------------------------------------------------ interval sets (dB)
def normalize(intervals: Sequence[tuple[float, float]]) -> Intervals:
    """Sorted, merged, non-empty intervals."""
    out: Intervals = []
    for lo, hi in sorted((float(a), float(b)) for a, b in intervals if a < b):
        if out and lo <= out[-1][1]:
            out[-1] = (out[-1][0], max(out[-1][1], hi))
        else:
            out.append((lo, hi))
    return out


def intersect(a: Intervals, b: Intervals) -> Intervals:
    """Intersection of two interval sets."""
    return normalize([(max(x0, y0), min(x1, y1)) for x0, x1 in a for y0, y1 in b])


def complement(a: Intervals) -> Intervals:
    """The complement in ``(-inf, inf)``."""
    out, start = [], -_INF
    for lo, hi in normalize(a):
        out.append((start, lo))
        start = hi
    out.append((start, _INF))
    return normalize(out)


def subtract(a: Intervals, forbidden: Intervals) -> Intervals:
    """``a`` without ``forbidden``."""
    return intersect(a, complement(forbidden))


# ------------------------------------------------------------ per-variant constraints
def _db_or(value: float | None, default: float) -> float:
    return default if value is None else float(value)


def stable_factor_db(margins, min_db: float | None, min_lower_db: float | None) -> Intervals:
    """Gain changes (dB) keeping the variant stable, with the gain margin rule's room.

    A stable range ``[a, b]`` of ``stable_gain_ranges_db`` (``None`` ends
    unbounded) becomes ``[a + min_lower_db, b - min_db]`` for the scaled loop
    (its margins are ``b - g`` and ``a - g`` at a change of ``g`` dB).
    """
    out = []
    for a, b in margins.stable_gain_ranges_db:
        lo = _db_or(a, -_INF) + (float(min_lower_db) if min_lower_db is not None else 0.0)
        hi = _db_or(b, _INF) - (float(min_db) if min_db is not None else 0.0)
        out.append((lo, hi))
    return normalize(out)


def _db_of_inverse(L: np.ndarray) -> np.ndarray:
    with np.errstate(divide="ignore", invalid="ignore"):
        return -20.0 * np.log10(np.abs(L))


# Scalar twins of the array expressions, for the root finders and minimisers,
# which evaluate one frequency at a time. They give the same floats as the
# array expressions on a one-element array: the same numpy ufuncs where the
# result depends on the implementation (``absolute`` of a complex number,
# ``log10``), IEEE arithmetic in the same order elsewhere, and the array
# expression itself for any value off the plain path (zero, inf, nan).
_BUFFERS: Any = None


def _scalar_abs(L: complex) -> float:
    """``float(np.abs(L))``: numpy's complex ``absolute`` loop on one element.

    Called through one-element arrays kept per thread (the ufunc on them runs
    the very loop ``np.abs`` runs on a scalar, without wrapping the scalar and
    its result: about half the cost per call).
    """
    global _BUFFERS
    if _BUFFERS is None:
        import threading

        _BUFFERS = threading.local()
    try:
        z, m, absolute = _BUFFERS.abs
    except AttributeError:
        z, m = np.empty(1, dtype=complex), np.empty(1, dtype=float)
        absolute = np.absolute
        _BUFFERS.abs = (z, m, absolute)
    z[0] = L
    absolute(z, m)
    return float(m[0])


def _db_of_inverse_scalar(L: complex) -> float:
    m = _scalar_abs(L)
    if 0.0 < m < _INF:
        return -20.0 * float(np.log10(m))
    return float(_db_of_inverse(np.array([L]))[0])


def _to_db_scalar(k: float) -> float:
    if 0.0 < k < _INF:
        return 20.0 * float(np.log10(k))
    return float(_to_db(np.array([k]))[0])


_MEMOS: Any = None


def _memo(contour) -> dict:
    """What the searches on ``contour`` remember (kept as long as the contour lives)."""
    global _MEMOS
    if _MEMOS is None:
        import weakref

        _MEMOS = weakref.WeakKeyDictionary()
    try:
        return _MEMOS.setdefault(contour, {})
    except TypeError:  # not weakly referable: remember nothing across calls
        return {}


def _scalar_response(contour) -> Callable[[float], complex]:
    """``contour.evaluate_scalar``, remembered per frequency (the searches revisit points)."""
    import weakref

    memo = _memo(contour)
    if "response" in memo:
        return memo["response"]
    seen: dict[float, complex] = {}
    # held weakly: the memo lives in a WeakKeyDictionary keyed by the contour
    try:
        ref = weakref.ref(contour)
    except TypeError:  # not weakly referable (nothing is remembered across calls)
        def ref():
            return contour

    # without factors, the rational part's plain-arithmetic function itself
    # (``scalar_evaluator``: the same numbers as ``evaluate_scalar``, one call
    # less; it holds the roots, not the contour)
    evaluator = None
    if not getattr(getattr(contour, "open_loop", None), "factors", True):
        evaluator = getattr(contour, "scalar_evaluator", lambda: None)()
    if evaluator is None:
        def evaluator(x: float) -> complex:
            return ref().evaluate_scalar(x)

    def response(x: float) -> complex:
        x = float(x)
        if x == 0.0:  # 0.0 and -0.0 are one key
            return evaluator(x)
        value = seen.get(x)
        if value is None:
            value = seen[x] = evaluator(x)
        return value

    memo["response"] = response
    return response


def _runs(mask: np.ndarray) -> list[tuple[int, int]]:
    """``(first, last)`` index of every run of True."""
    idx = np.flatnonzero(mask)
    if idx.size == 0:
        return []
    breaks = np.flatnonzero(np.diff(idx) > 1)
    starts = np.concatenate([[idx[0]], idx[breaks + 1]])
    ends = np.concatenate([idx[breaks], [idx[-1]]])
    return [(int(s), int(e)) for s, e in zip(starts, ends, strict=True)]


def _end_kinds(contour, bi: int) -> tuple[str, str]:
    """What lies beyond each end of branch ``bi``: ``"arc"`` (|L| -> inf),
    ``"zero"`` (|L| -> 0, w -> inf) or ``"end"`` (a real end)."""
    nb = len(contour.branches)
    start = "arc" if (bi > 0 or not contour.starts_at_zero) else "end"
    if bi < nb - 1 or contour.end == "arc":
        stop = "arc"
    elif contour.end == "infinity" and contour.rational.relative_degree > 0:
        stop = "zero"
    else:
        stop = "end"
    return start, stop


def _refined_extreme(fun: Callable[[float], float], w: np.ndarray, j: int, sign: float,
                     run: tuple[int, int]) -> float:
    """``fun`` at the local extremum next to sample ``j`` (sign +1: minimum, -1: maximum).

    Brent's minimiser between the neighbours of ``j`` inside the run
    ``(first, last)``; where ``fun`` is not defined (``nan``, ``inf``) it
    counts as a poor value.
    """
    from ruleguard.analysis.contour import _minimize

    a, b = float(w[max(j - 1, run[0])]), float(w[min(j + 1, run[1])])
    here = fun(float(w[j]))
    if not b > a:
        return here

    def g(x: float) -> float:
        v = fun(x)
        return sign * v if math.isfinite(v) else _POOR

    _, value = _minimize(g, a, b)
    best = sign * here if math.isfinite(here) else _POOR
    return min(best, value) * sign


def _widen(value: Callable[[float], float], a: float, b: float, lo: float, hi: float
           ) -> tuple[float, float]:
    """``[lo, hi]`` widened by ``value``'s extremes on ``[a, b]`` (ends included)."""
    from ruleguard.analysis.contour import _minimize

    lo, hi = min(lo, value(a), value(b)), max(hi, value(a), value(b))
    if b > a:
        lo = min(lo, _minimize(value, a, b)[1])
        hi = max(hi, -_minimize(lambda x: -value(x), a, b)[1])
    return lo, hi


def _edge_root(g: Callable[[float], float], a: float, b: float) -> float | None:
    from ruleguard.analysis.scalar import brent_root

    try:
        return brent_root(g, a, b, xtol=1e-13 * max(abs(a), abs(b), 1e-300), rtol=1e-14)
    except ValueError:
        return None


#: Between neighbouring samples log|L| changes by at most the contour's step
#: bound (0.5, i.e. 4.3 dB): a run whose sampled values lie farther than this
#: from every gain change still in question cannot matter and is not refined.
_REFINE_REACH_DB = 5.0


def _extended(lo: float, hi: float, i0: int, i1: int, n: int, start_kind: str,
              stop_kind: str) -> tuple[float, float]:
    """A run's values extended to the limits beyond the branch ends it touches.

    Next to an indentation arc ``|L| -> inf`` (``k -> 0``: ``-inf`` dB); at
    ``w -> inf`` of a strictly proper loop ``|L| -> 0`` (``+inf`` dB).
    """
    if i0 == 0 and start_kind == "arc":
        lo = -_INF
    if i1 == n - 1:
        if stop_kind == "arc":
            lo = -_INF
        elif stop_kind == "zero":
            hi = _INF
    return lo, hi


def _matters(lo: float, hi: float, within: Intervals | None) -> bool:
    return within is None or bool(
        intersect([(lo - _REFINE_REACH_DB, hi + _REFINE_REACH_DB)], within))


#: dB per neper: ``-20 log10 |L|`` moves by this times the change of ``log |L|``.
_DB_PER_NEPER = 20.0 / math.log(10.0)
#: Added to every bound below (dB): covers the rounding of the computed values
#: the bounds are compared with (relative errors near 1e-14).
_BOUND_SLACK_DB = 1e-6


def _step_bounds(contour) -> bool:
    """Whether the contour's step bounds cover ``|L|`` (and its phase) on every step.

    The contour keeps, per step ``[w_k, w_k+1]`` of a branch, a Taylor bound
    ``beta_k`` on the change of ``log L`` (``Branch.bound``: ``(b - a)(|D(m)| +
    (b - a)/2 max |D'|)`` with ``D`` the logarithmic derivative, see
    ``RationalResponse.step_bound``). The same bound holds from either end to
    any point inside the step (the change from ``a`` to ``x`` is at most
    ``(x - a) max |D|``); it bounds ``log |L|`` and the phase alike. Not so for
    frequency-response factors (their variation is not in it) or zeros on the
    contour (left out of the bound).
    """
    memo = _memo(contour)
    if "bounds" not in memo:
        rational = contour.rational
        memo["bounds"] = bool(
            not contour.open_loop.factors and not getattr(rational, "extras", ())
            and not np.any(rational.block.on_boundary(rational.zeros)))
    return memo["bounds"]


def _step_reach_db(contour) -> Callable[[Any], Any] | None:
    """``branch -> reach`` (dB per step): how far ``-20 log10 |L|`` can move inside a step.

    ``_DB_PER_NEPER * beta_k`` from either end of the step (see
    :func:`_step_bounds`), plus ``_BOUND_SLACK_DB``; ``None`` when the bounds
    do not cover ``|L|``.
    """
    if not _step_bounds(contour):
        return None

    def reach(br):
        return _DB_PER_NEPER * br.bound + _BOUND_SLACK_DB

    return reach


def _cannot_lower(floor: float, lo: float) -> bool:
    """A search whose values are all at least ``floor`` leaves ``min(lo, ...)`` at ``lo``."""
    return floor > lo


def _widen_within(value: Callable[[float], float], a: float, b: float, lo: float, hi: float,
                  base: float, reach: float) -> tuple[float, float]:
    """:func:`_widen` where ``value`` is known to lie in ``[base - reach, base + reach]``
    on ``(a, b)``: a search that cannot move ``lo`` (``hi``) is not run (same result)."""
    from ruleguard.analysis.contour import _minimize

    lo, hi = min(lo, value(a), value(b)), max(hi, value(a), value(b))
    if b > a:
        if not _cannot_lower(base - reach, lo):
            lo = min(lo, _minimize(value, a, b)[1])
        if not _cannot_lower(-(base + reach), -hi):
            hi = max(hi, -_minimize(lambda x: -value(x), a, b)[1])
    return lo, hi


def frequency_test_forbidden(contour, test: Callable[[np.ndarray, np.ndarray], np.ndarray],
                             within: Intervals | None = None
                             ) -> tuple[Intervals, list[tuple[float, float]]]:
    """Gain changes (dB) that put a crossover where ``test(w, L) < 0`` (it fails there).

    Returns the forbidden set and the runs' frequency edges (rad/s, refined).
    Runs far from ``within`` (the changes still in question) keep their
    sampled values (see ``_REFINE_REACH_DB``).
    """
    forbidden, edges = [], []
    response = _scalar_response(contour)
    scalar_test = getattr(test, "scalar", None)
    test_key = getattr(test, "key", None)
    # a run's refinement does not depend on ``within``: remembered per test
    refined_runs = _memo(contour).setdefault("runs", {}) if test_key is not None else None
    reach = _step_reach_db(contour)
    for bi, br in enumerate(contour.branches):
        w, L = br.w, br.L
        g = test(w, L)
        runs = _runs(g < 0)
        if not runs:
            continue
        start_kind, stop_kind = _end_kinds(contour, bi)

        def g_scalar(x: float) -> float:
            if scalar_test is not None:
                return scalar_test(float(x), response(x))
            return float(test(np.array([x]), np.array([response(x)]))[0])

        def value(x: float) -> float:
            return _db_of_inverse_scalar(response(x))

        vals = _db_of_inverse(L)
        steps = reach(br) if reach is not None else None
        for i0, i1 in runs:
            seg = vals[i0:i1 + 1]
            lo, hi = float(np.min(seg)), float(np.max(seg))
            w_lo, w_hi = float(w[i0]), float(w[i1])
            if not _matters(*_extended(lo, hi, i0, i1, w.size, start_kind, stop_kind), within):
                forbidden.append((lo, hi if hi > lo else lo + 1e-12))
                edges.append((w_lo, w_hi))
                continue
            run_key = (test_key, bi, i0, i1, w.size,
                       float(w[max(i0 - 1, 0)]), float(w[min(i1 + 1, w.size - 1)]))
            if refined_runs is not None and run_key in refined_runs:
                lo, hi, w_lo, w_hi = refined_runs[run_key]
                forbidden.append((lo, hi if hi > lo else lo + 1e-12))
                edges.append((w_lo, w_hi))
                continue
            if i0 > 0:
                r = _edge_root(g_scalar, float(w[i0 - 1]), float(w[i0]))
                if r is not None:
                    w_lo = r
                    if steps is None or not math.isfinite(float(vals[i0])):
                        lo, hi = _widen(value, r, float(w[i0]), lo, hi)
                    else:
                        lo, hi = _widen_within(value, r, float(w[i0]), lo, hi,
                                               float(vals[i0]), float(steps[i0 - 1]))
            if i1 < w.size - 1:
                r = _edge_root(g_scalar, float(w[i1]), float(w[i1 + 1]))
                if r is not None:
                    w_hi = r
                    if steps is None or not math.isfinite(float(vals[i1])):
                        lo, hi = _widen(value, float(w[i1]), r, lo, hi)
                    else:
                        lo, hi = _widen_within(value, float(w[i1]), r, lo, hi,
                                               float(vals[i1]), float(steps[i1]))
            jmin, jmax = i0 + int(np.argmin(seg)), i0 + int(np.argmax(seg))
            lo = min(lo, _refined_extreme(value, w, jmin, 1.0, (i0, i1)))
            hi = max(hi, _refined_extreme(value, w, jmax, -1.0, (i0, i1)))
            lo, hi = _extended(lo, hi, i0, i1, w.size, start_kind, stop_kind)
            if refined_runs is not None:
                refined_runs[run_key] = (lo, hi, w_lo, w_hi)
            forbidden.append((lo, hi if hi > lo else lo + 1e-12))
            edges.append((w_lo, w_hi))
    return normalize(forbidden), edges


def phase_test(min_deg: float) -> Callable[[np.ndarray, np.ndarray], np.ndarray]:
    """``|PM| - min_deg`` at each frequency (``margin.phase`` judges |PM|)."""
    from ruleguard.analysis.margins import wrap_phase_margin

    def test(w: np.ndarray, L: np.ndarray) -> np.ndarray:
        return np.abs(wrap_phase_margin(np.degrees(np.angle(L)))) - float(min_deg)

    def scalar(w: float, L: complex) -> float:
        if not cmath.isfinite(L):
            return float(test(np.array([w]), np.array([L]))[0])
        return abs(_wrapped_margin_scalar(L)) - float(min_deg)

    test.scalar = scalar
    test.key = ("margin.phase", float(min_deg))
    return test


def _wrapped_margin_scalar(L: complex) -> float:
    """``wrap_phase_margin(degrees(angle(L)))`` at one finite ``L`` (the same float)."""
    pm = (180.0 + float(np.degrees(np.angle(L))) + 180.0) % 360.0 - 180.0
    return pm + 360.0 if pm <= -180.0 else pm


def delay_test(min_s: float) -> Callable[[np.ndarray, np.ndarray], np.ndarray]:
    """``(PM mod 360 deg, rad) / w - min_s`` at each frequency (``margin.delay``)."""
    from ruleguard.analysis.margins import wrap_phase_margin

    def test(w: np.ndarray, L: np.ndarray) -> np.ndarray:
        pm = np.mod(wrap_phase_margin(np.degrees(np.angle(L))), 360.0)
        with np.errstate(divide="ignore", invalid="ignore"):
            out = np.radians(pm) / w - float(min_s)
        return np.where(w > 0, out, _INF)

    def scalar(w: float, L: complex) -> float:
        if not (cmath.isfinite(L) and w > 0 and math.isfinite(w)):
            return float(test(np.array([w]), np.array([L]))[0])
        pm = _wrapped_margin_scalar(L) % 360.0
        return float(np.radians(pm)) / w - float(min_s)

    test.scalar = scalar
    test.key = ("margin.delay", float(min_s))
    return test


def _quadratic_roots(L: np.ndarray, shift: float, radius: float):
    """Roots (k) of ``A k^2 + B k + C`` for ``|1/(1 + kL) + shift| = radius``."""
    r2c2 = radius * radius - shift * shift
    a = r2c2 * np.abs(L) ** 2
    b = 2.0 * L.real * (r2c2 - shift)
    c = radius * radius - (1.0 + shift) ** 2
    with np.errstate(invalid="ignore", divide="ignore"):
        disc = b * b - 4.0 * a * c
        sq = np.sqrt(np.where(disc > 0, disc, np.nan))
        r1 = (-b - np.sign(a) * sq) / (2.0 * a)
        r2 = (-b + np.sign(a) * sq) / (2.0 * a)
    return np.minimum(r1, r2), np.maximum(r1, r2), disc


def _quadratic_roots_scalar(L: complex, shift: float, radius: float
                            ) -> tuple[float, float, float]:
    """:func:`_quadratic_roots` at one frequency: ``(lower root, upper root, disc)``."""
    r2c2 = radius * radius - shift * shift
    m = _scalar_abs(L)
    a = r2c2 * (m * m)
    b = 2.0 * L.real * (r2c2 - shift)
    c = radius * radius - (1.0 + shift) ** 2
    disc = b * b - 4.0 * a * c
    if not (math.isfinite(a) and math.isfinite(b) and math.isfinite(disc) and a != 0.0):
        r1, r2, d = _quadratic_roots(np.array([L]), shift, radius)
        return float(r1[0]), float(r2[0]), float(d[0])
    if not disc > 0:
        return math.nan, math.nan, disc
    sq = math.sqrt(disc)
    if a > 0:
        r1, r2 = (-b - sq) / (2.0 * a), (-b + sq) / (2.0 * a)
    else:
        r1, r2 = (-b - -sq) / (2.0 * a), (-b + -sq) / (2.0 * a)
    if math.isnan(r1) or math.isnan(r2):
        return math.nan, math.nan, disc
    return min(r1, r2), max(r1, r2), disc


#: Above this bound on the ratio of the two roots, the roots' bounds are not used
#: (the lower root, formed by a difference, could lose more than the bounds' slack).
_ROOT_RATIO_LIMIT = 1e6


#: Slack of the root bounds (dB): the roots near a double root are formed
#: through the square root of a rounded discriminant (relative errors up to
#: about 2e-8, 2e-7 dB), and so are the bounds.
_ROOT_SLACK_DB = 1e-5


def _root_bounds_db(L0: complex, beta: float, shift: float, radius: float
                    ) -> tuple[float, float] | None:
    """Bounds (dB) on the positive roots of the peak quadratic over a step, or ``None``.

    On a step whose end has ``L0`` and whose step bound is ``beta``
    (``|log L - log L0| <= beta`` everywhere on it, see :func:`_step_reach_db`),
    ``|L|`` lies within ``e^(+-beta)`` of ``|L0|`` and the phase within
    ``+-beta`` of ``arg L0``. The quadratic ``A k^2 + B k + C`` (``A = p |L|^2``,
    ``B = 2 Re L q``, ``p = R^2 - c^2 > 0``, ``q = p - c``, ``C = R^2 - (1 + c)^2
    > 0``) has, where its upper root is positive, two positive roots with
    ``k m = (q |cos| +- sqrt(q^2 cos^2 - p C)) / p`` (``m = |L|``, ``cos`` of
    ``arg L``; Vieta: product ``C/(p m^2)``, sum ``2 |q| |cos| / (p m)``): the
    upper one grows with ``|cos|``, the lower one ``C / (m (q |cos| + sqrt(...)))``
    falls with it. So with the largest ``|cos|`` on the step, the smallest
    ``|L|`` for the upper root and the largest for the lower one: returns
    ``(lowest lower root, highest upper root)`` in dB, each widened by
    ``_ROOT_SLACK_DB``. ``None`` where ``C <= 0`` (roots of opposite signs),
    ``L0`` is zero or not finite, or the roots may lie more than
    ``_ROOT_RATIO_LIMIT`` apart (``B^2/(AC) <= 4 q^2 / (p C)``).
    """
    p = radius * radius - shift * shift
    q = abs(p - shift)
    c = radius * radius - (1.0 + shift) ** 2
    if not (p > 0.0 and c > 0.0 and q > 0.0) or 4.0 * q * q / (p * c) > _ROOT_RATIO_LIMIT:
        return None
    m0 = abs(L0)
    if not (0.0 < m0 < _INF and math.isfinite(beta) and beta >= 0.0):
        return None
    phase = math.atan2(L0.imag, L0.real)
    if beta >= 0.5 * math.pi or abs(phase - math.pi * round(phase / math.pi)) <= beta:
        cos_max = 1.0  # the phase may reach 0 or pi on the step
    else:
        cos_max = max(abs(math.cos(phase - beta)), abs(math.cos(phase + beta)))
    grow = math.exp(beta)
    top = q * cos_max + math.sqrt(max((q * cos_max) ** 2 - p * c, 0.0))
    if not (top > 0.0 and math.isfinite(top)):
        return None
    return (20.0 * math.log10(c / (top * m0 * grow)) - _ROOT_SLACK_DB,
            20.0 * math.log10(top * grow / (p * m0)) + _ROOT_SLACK_DB)


def _quadratic_roots_function(shift: float, radius: float
                              ) -> Callable[[complex], tuple[float, float, float]]:
    """``L -> _quadratic_roots_scalar(L, shift, radius)`` with the constants formed once.

    The same operations on the same floats: ``r2c2 - shift`` and the constant
    term do not depend on ``L``, every product keeps its order.
    """
    r2c2 = radius * radius - shift * shift
    b_scale = r2c2 - shift
    c = radius * radius - (1.0 + shift) ** 2
    isfinite, sqrt, isnan, nan = math.isfinite, math.sqrt, math.isnan, math.nan
    magnitude = _scalar_abs

    def roots(L: complex) -> tuple[float, float, float]:
        m = magnitude(L)
        a = r2c2 * (m * m)
        b = 2.0 * L.real * b_scale
        disc = b * b - 4.0 * a * c
        if not (isfinite(a) and isfinite(b) and isfinite(disc) and a != 0.0):
            return _quadratic_roots_scalar(L, shift, radius)
        if not disc > 0:
            return nan, nan, disc
        sq = sqrt(disc)
        if a > 0:
            r1, r2 = (-b - sq) / (2.0 * a), (-b + sq) / (2.0 * a)
        else:
            r1, r2 = (-b - -sq) / (2.0 * a), (-b + -sq) / (2.0 * a)
        if isnan(r1) or isnan(r2):
            return nan, nan, disc
        return min(r1, r2), max(r1, r2), disc

    return roots


def _to_db(k: np.ndarray) -> np.ndarray:
    with np.errstate(divide="ignore", invalid="ignore"):
        return 20.0 * np.log10(k)


def peak_limit_forbidden(contour, shift: float, radius: float,
                         within: Intervals | None = None) -> Intervals:
    """Gain changes (dB) for which ``max_w |1/(1 + kL) + shift| > radius``.

    Runs far from ``within`` keep their sampled values (``_REFINE_REACH_DB``).
    """
    if not radius > abs(shift):
        # only k between the roots pass, at every frequency: intersect on the samples
        allowed = [(-_INF, _INF)]
        for br in contour.branches:
            r1, r2, disc = _quadratic_roots(br.L, shift, radius)
            if np.any(~(disc > 0)) or np.any(r2 <= 0):
                return [(-_INF, _INF)]
            lo = float(np.max(_to_db(np.maximum(r1, 0.0))))
            hi = float(np.min(_to_db(r2)))
            allowed = intersect(allowed, normalize([(lo, hi)]))
        for ind in contour.indentations:
            if ind.order > 0 and abs(shift) > radius:
                return [(-_INF, _INF)]
        return complement(allowed)
    forbidden = []
    response = _scalar_response(contour)
    roots: dict[float, tuple[float, float, float]] = {}
    bounded = _step_bounds(contour)

    quadratic = _quadratic_roots_function(shift, radius)

    def roots_at(x: float) -> tuple[float, float, float]:
        found = roots.get(x) if x != 0.0 else None
        if found is None:
            found = roots[x] = quadratic(response(x))
        return found

    for bi, br in enumerate(contour.branches):
        w = br.w
        r1, r2, _ = _quadratic_roots(br.L, shift, radius)
        valid = np.isfinite(r2) & (r2 > 0)
        runs = _runs(valid)
        if not runs:
            continue
        lo_db = _to_db(np.maximum(r1, 0.0))
        hi_db = _to_db(r2)
        start_kind, stop_kind = _end_kinds(contour, bi)

        def lo_at(x: float) -> float:
            a, b, _ = roots_at(x)
            return _to_db_scalar(a if not a < 0.0 else 0.0) if b > 0 else _INF

        def hi_at(x: float) -> float:
            _, b, _ = roots_at(x)
            return _to_db_scalar(b) if b > 0 else -_INF

        def disc_at(x: float) -> float:
            return roots_at(x)[2]

        for i0, i1 in runs:
            jlo = i0 + int(np.argmin(lo_db[i0:i1 + 1]))
            jhi = i0 + int(np.argmax(hi_db[i0:i1 + 1]))
            lo = float(lo_db[jlo])
            hi = float(hi_db[jhi])
            if not _matters(*_extended(lo, hi, i0, i1, w.size, start_kind, stop_kind), within):
                forbidden.append((lo, hi if hi > lo else lo + 1e-12))
                continue
            if math.isfinite(lo):
                lo = min(lo, _refined_extreme(lo_at, w, jlo, 1.0, (i0, i1)))
            hi = max(hi, _refined_extreme(hi_at, w, jhi, -1.0, (i0, i1)))
            # where the run ends because the roots merge (discriminant 0), the
            # interval closes between samples: refine that edge and the
            # extremes next to it
            for inner, outer in ((i0, i0 - 1), (i1, i1 + 1)):
                if outer < 0 or outer >= w.size:
                    continue
                edge = _edge_root(disc_at, float(w[inner]), float(w[outer]))
                if edge is None:
                    continue
                a, b = sorted((float(w[inner]), edge))
                # the roots' bounds on the step (see _root_bounds_db): a search
                # that cannot move lo (hi) is not run
                skip_lo = skip_hi = False
                if bounded:
                    k = min(inner, outer)
                    found = _root_bounds_db(complex(br.L[inner]), float(br.bound[k]),
                                            shift, radius)
                    if found is not None:
                        skip_lo = _cannot_lower(found[0], lo)
                        skip_hi = _cannot_lower(-found[1], -hi)
                for fun, sign in ((lo_at, 1.0), (hi_at, -1.0)):
                    if skip_lo if sign > 0 else skip_hi:
                        continue
                    def g(x: float, fun=fun, sign=sign) -> float:
                        v = fun(x)
                        return sign * v if math.isfinite(v) else _POOR

                    from ruleguard.analysis.contour import _minimize

                    _, val = _minimize(g, a, b)
                    if abs(val) < _POOR:
                        if sign > 0:
                            lo = min(lo, val)
                        else:
                            hi = max(hi, -val)
                merged = hi_at(edge)
                if math.isfinite(merged):
                    hi = max(hi, merged)
            lo, hi = _extended(lo, hi, i0, i1, w.size, start_kind, stop_kind)
            forbidden.append((lo, hi if hi > lo else lo + 1e-12))
    return normalize(forbidden)


# ------------------------------------------------------------ the loop's constraints
def _active(ctx: LoopContext, rule_id: str) -> Mapping[str, Any] | None:
    extras = ctx.extras or {}
    severity = (extras.get("rule_severities") or {}).get(rule_id)
    if severity is Severity.DISABLED:
        return None
    params = (extras.get("rule_parameters") or {}).get(rule_id)
    if params is None:
        from ruleguard.rules.catalog import RULES

        params = RULES[rule_id].defaults()
    return params


def _min_delay_s(ctx: LoopContext, params: Mapping[str, Any]) -> float | None:
    rate = getattr(ctx.spec, "sample_rate_hz", None)
    if params.get("min_samples") is not None and rate is not None:
        return float(params["min_samples"]) / float(rate)
    if params.get("min_s") is not None:
        return float(params["min_s"])
    return None


@record
class _Limits:
    """The limits of the hinted rules configured for one loop."""

    gain: tuple[float | None, float | None] | None
    phase_deg: float | None
    delay_s: float | None
    peaks: tuple[tuple[str, float, float], ...]  # (rule, shift c, radius R)
    rules: tuple[str, ...]


def loop_limits(ctx: LoopContext) -> _Limits:
    """The configured limits of the hinted rules for this loop."""
    from ruleguard.rules.margins import disk_skew, required_disk_alpha

    rules, peaks = [], []
    gain = phase = delay = None
    p = _active(ctx, "margin.gain")
    if p is not None and (p.get("min_db") is not None or p.get("min_lower_db") is not None):
        gain = (p.get("min_db"), p.get("min_lower_db"))
        rules.append("margin.gain")
    p = _active(ctx, "margin.phase")
    if p is not None and p.get("min_deg") is not None:
        phase = float(p["min_deg"])
        rules.append("margin.phase")
    p = _active(ctx, "margin.delay")
    if p is not None and _min_delay_s(ctx, p) is not None:
        delay = _min_delay_s(ctx, p)
        rules.append("margin.delay")
    p = _active(ctx, "margin.disk")
    if p is not None and required_disk_alpha(p) is not None:
        alpha, _ = required_disk_alpha(p)
        if alpha > 0:
            peaks.append(("margin.disk", 0.5 * (disk_skew(p) - 1.0), 1.0 / alpha))
            rules.append("margin.disk")
    for rule_id, shift in (("sensitivity.peak", 0.0), ("sensitivity.complementary-peak", -1.0)):
        p = _active(ctx, rule_id)
        if p is not None and p.get("max_db") is not None:
            peaks.append((rule_id, shift, 10.0 ** (float(p["max_db"]) / 20.0)))
            rules.append(rule_id)
    return _Limits(gain, phase, delay, tuple(peaks), tuple(rules))


def _contour(ev: Evaluation):
    from ruleguard.analysis.contour import sample_contour

    contour = sample_contour(ev.model.open_loop)
    contour.refine_for_point(-1.0)
    return contour


def variant_allowed_db(ev: Evaluation, limits: _Limits, contour=None) -> Intervals:
    """Gain changes (dB) for which this variant is stable and passes every limit."""
    m = ev.analysis.margins
    min_db, min_lower = limits.gain if limits.gain is not None else (None, None)
    allowed = stable_factor_db(m, min_db, min_lower)
    if not allowed:
        return []
    if limits.phase_deg is None and limits.delay_s is None and not limits.peaks:
        return allowed
    contour = _contour(ev) if contour is None else contour
    tests = []
    if limits.phase_deg is not None:
        tests.append(phase_test(limits.phase_deg))
    if limits.delay_s is not None:
        tests.append(delay_test(limits.delay_s))
    for test in tests:
        allowed = subtract(allowed, frequency_test_forbidden(contour, test, allowed)[0])
    for _, shift, radius in limits.peaks:
        allowed = subtract(allowed, peak_limit_forbidden(contour, shift, radius, allowed))
    return allowed


def nearest_interval(allowed: Intervals) -> tuple[float, float] | None:
    """The interval holding 0 dB, else the one nearest to it (``None`` if empty)."""
    if not allowed:
        return None

    def distance(iv: tuple[float, float]) -> float:
        lo, hi = iv
        return 0.0 if lo <= 0.0 <= hi else min(abs(lo), abs(hi))

    return min(allowed, key=distance)


def suggested_db(interval: tuple[float, float]) -> float:
    """A change inside ``interval``: its end nearest 0 dB moved inwards."""
    lo, hi = interval
    if lo <= 0.0 <= hi:
        return 0.0
    width = hi - lo
    inset = min(SUGGESTION_INSET_DB, 0.25 * width) if math.isfinite(width) else SUGGESTION_INSET_DB
    if lo > 0.0:
        return lo + inset
    return hi - inset


def scaled_evaluation(ev: Evaluation, factor: float) -> Evaluation:
    """The variant with its controller gain (so its whole loop) scaled by ``factor``."""
    from ruleguard.analysis.margins import analyse_open_loop
    from ruleguard.analysis.openloop import OpenLoop

    ol = ev.model.open_loop
    scaled = OpenLoop(replace(ol.rational, gain=ol.rational.gain * factor), ol.factors)
    return Evaluation(ev.variant, replace(ev.model, open_loop=scaled), analyse_open_loop(scaled))


def passes_at(ctx: LoopContext, factor: float, rules: Sequence[str]) -> bool:
    """Re-analyse every variant at ``factor`` and re-run ``rules`` (and stability)."""
    from ruleguard.rules.catalog import RULES

    evaluations = tuple(scaled_evaluation(ev, factor) for ev in ctx.evaluations)
    scaled_ctx = replace(ctx, evaluations=evaluations)
    for rule_id in (_STABILITY, *rules):
        params = _active(ctx, rule_id)
        if params is None:
            continue
        for v in RULES[rule_id].function(scaled_ctx, params):
            if v.severity is None:
                return False
    return True


# ------------------------------------------------------------ delay and crossover parts
def _phase_delay_room(evaluations: Sequence[Evaluation], min_deg: float) -> float | None:
    """Largest extra delay keeping every positive phase margin >= ``min_deg`` (s)."""
    room = None
    for ev in evaluations:
        for c in ev.analysis.margins.crossovers:
            if c.hz <= 0:
                continue
            if c.phase_margin_deg <= 0 and abs(c.phase_margin_deg) < min_deg:
                return None  # a crossover a delay change cannot bring to min_deg
            if c.phase_margin_deg <= 0:
                continue
            t = math.radians(c.phase_margin_deg - min_deg) / (2.0 * math.pi * c.hz)
            room = t if room is None else min(room, t)
    return room


def _delay_room(ctx: LoopContext, evaluations: Sequence[Evaluation], min_s: float) -> float | None:
    values = [ev.analysis.margins.delay_margin_s for ev in evaluations]
    values = [v - min_s for v in values if v is not None]
    return min(values) if values else None


def _crossover_ceiling_hz(ev: Evaluation, test, failing_hz: Sequence[float],
                          contour=None) -> float | None:
    """Lower edge (Hz) of the failing run that holds the lowest failing crossover.

    The run edges are those :func:`frequency_test_forbidden` refines (the
    roots of the test between a run's end sample and its neighbour), but
    only the edges that decide the answer are computed: a refined lower edge
    lies in ``[w[i0-1], w[i0]]`` and an upper one in ``[w[i1], w[i1+1]]``
    (Brent's root finder keeps its bracket), so most runs are decided by
    their samples alone.
    """
    if not failing_hz:
        return None
    contour = _contour(ev) if contour is None else contour
    target = 2.0 * math.pi * min(failing_hz)
    reach = target * (1 + 1e-9)
    response = _scalar_response(contour)
    scalar_test = getattr(test, "scalar", None)

    def g_scalar(x: float) -> float:
        if scalar_test is not None:
            return scalar_test(float(x), response(x))
        return float(test(np.array([x]), np.array([response(x)]))[0])

    best = None
    for br in contour.branches:
        w = br.w
        n = w.size
        for i0, i1 in _runs(test(w, br.L) < 0):
            # w_lo <= reach?  (w_lo = w[i0] without a lower neighbour or root)
            if i0 > 0 and float(w[i0 - 1]) > reach:
                continue
            if i0 == 0 and float(w[i0]) > reach:
                continue
            # target <= w_hi (1 + 1e-9)?
            if i1 < n - 1:
                if not target <= float(w[i1]) * (1 + 1e-9):
                    if target > float(w[i1 + 1]) * (1 + 1e-9):
                        continue
                    r = _edge_root(g_scalar, float(w[i1]), float(w[i1 + 1]))
                    w_hi = r if r is not None else float(w[i1])
                    if not target <= w_hi * (1 + 1e-9):
                        continue
            elif not target <= float(w[i1]) * (1 + 1e-9):
                continue
            w_lo = float(w[i0])
            if i0 > 0:
                r = _edge_root(g_scalar, float(w[i0 - 1]), float(w[i0]))
                if r is not None:
                    w_lo = r
            if w_lo <= reach:
                best = w_lo
    if best is None or best <= 0:
        return None
    return best / (2.0 * math.pi)


# ------------------------------------------------------------ the hint of a finding
class LoopHints:
    """Hints for the findings of one loop (the gain range is computed once)."""

    def __init__(self, ctx: LoopContext) -> None:
        self.ctx = ctx
        self._range: tuple[tuple[float, float] | None, float | None, bool] | None = None
        self._contours: dict[int, Any] = {}
        self.limits = loop_limits(ctx)

    def contour(self, ev: Evaluation):
        key = id(ev)
        if key not in self._contours:
            self._contours[key] = _contour(ev)
        return self._contours[key]

    def gain_range(self) -> tuple[tuple[float, float] | None, float | None, bool]:
        """``(interval dB, suggested dB, confirmed)`` for the whole loop."""
        if self._range is None:
            allowed: Intervals = [(-_INF, _INF)]
            for ev in self.ctx.evaluations:
                allowed = intersect(
                    allowed, variant_allowed_db(ev, self.limits, self._maybe_contour(ev))
                )
                if not allowed:
                    break
            interval = nearest_interval(allowed)
            if interval is None:
                self._range = (None, None, False)
            else:
                pick = suggested_db(interval)
                ok = passes_at(self.ctx, 10.0 ** (pick / 20.0), self.limits.rules)
                if not ok and math.isfinite(interval[0]) and math.isfinite(interval[1]):
                    pick = 0.5 * (interval[0] + interval[1])
                    ok = passes_at(self.ctx, 10.0 ** (pick / 20.0), self.limits.rules)
                self._range = (interval, pick, ok)
        return self._range

    def _maybe_contour(self, ev: Evaluation):
        limits = self.limits
        if limits.phase_deg is None and limits.delay_s is None and not limits.peaks:
            return None
        return self.contour(ev)

    def hint_for(self, rule_id: str, violation: Violation) -> FixHint | None:
        """The hint of a failing finding of ``rule_id`` (``None``: none applies)."""
        if rule_id not in HINTED_RULES or violation.severity is not None:
            return None
        if not self.ctx.evaluations or any(
            getattr(ev, "model", None) is None for ev in self.ctx.evaluations
        ):
            return None
        interval, pick, ok = self.gain_range()
        factor_range = None
        suggestion = None
        if interval is not None:
            lo, hi = interval
            factor_range = (
                0.0 if lo == -_INF else 10.0 ** (lo / 20.0),
                None if hi == _INF else 10.0 ** (hi / 20.0),
            )
            suggestion = 10.0 ** (pick / 20.0)
        extra = ceiling = None
        stable = [ev for ev in self.ctx.evaluations if ev.analysis.stability.stable]
        worst = next((ev for ev in stable if _variant_id(ev) == violation.variant), None)
        if rule_id == "margin.phase" and self.limits.phase_deg is not None and stable:
            min_deg = self.limits.phase_deg
            extra = _phase_delay_room(stable, min_deg)
            if worst is not None:
                failing = [c.hz for c in worst.analysis.margins.crossovers
                           if abs(c.phase_margin_deg) < min_deg and c.hz > 0]
                ceiling = _crossover_ceiling_hz(worst, phase_test(min_deg), failing,
                                                self.contour(worst))
        elif rule_id == "margin.delay" and self.limits.delay_s is not None and stable:
            min_s = self.limits.delay_s
            extra = _delay_room(self.ctx, stable, min_s)
            if worst is not None:
                failing = []
                for c in worst.analysis.margins.crossovers:
                    if c.hz > 0 and math.radians(c.phase_margin_deg % 360.0) / (
                            2.0 * math.pi * c.hz) < min_s:
                        failing.append(c.hz)
                ceiling = _crossover_ceiling_hz(worst, delay_test(min_s), failing,
                                                self.contour(worst))
        return FixHint(
            gain_factor_range=factor_range,
            suggested_gain_factor=suggestion,
            confirmed=bool(ok) if interval is not None else False,
            rules=self.limits.rules,
            max_extra_delay_s=extra,
            crossover_hz_at_most=ceiling,
        )


def _variant_id(ev: Evaluation) -> str | None:
    from ruleguard.rules.evidence import variant_id

    return variant_id(ev)
