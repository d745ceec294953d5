"""Crossings of the sampled Nyquist curve, refined on the exact response.

A crossing is bracketed by a sign change between neighbouring samples of the
adaptively sampled contour (:mod:`ruleguard.analysis.contour`) and refined by
Brent's method on the exact response. Narrow crossing pairs that a step could
hide (a near-tangency) are looked for at every local extremum of the crossing
function close to its threshold, by bounded minimization; if the extremum
passes the threshold it becomes a sample and the pair is bracketed.

References
----------
R. P. Brent, Algorithms for Minimization without Derivatives, Prentice-Hall,
1973, chapters 4 (zero finding) and 5 (minimization).
M. Dowell and P. Jarratt, "A modified regula falsi method for computing the
root of an equation", BIT 11, 1971 (the Illinois method, used vectorized when
a transport delay makes crossings numerous).
"""

from __future__ import annotations

import math
from collections.abc import Callable

import numpy as np

from ruleguard.analysis.contour import SampledContour, _minimize
from ruleguard.frozen import record
from ruleguard.models.arrays import sorted_unique

#: Crossings of the negative real axis with ``|L|`` below this stand for k -> inf.
NEGLIGIBLE_GAIN = 1e-10
_BRENT_LIMIT = 48


@record
class AxisCrossing:
    """A crossing of the negative real axis by the closed Nyquist curve.

    ``value`` is the real value of ``L`` there (negative); ``weight`` its
    contribution to the winding number about every point to its right
    (``+2`` downward on the positive branch, counted twice by symmetry,
    ``+-1`` at the ends, which lie on the symmetry axis); ``w`` in rad/s.
    """

    w: float
    value: float
    weight: int
    kind: str  # "interior", "start", "end"


def _brent(fun: Callable[[float], float], a: float, b: float) -> float:
    from ruleguard.analysis.scalar import brent_root

    return brent_root(fun, a, b, xtol=1e-15 * max(abs(a), abs(b), 1e-300), rtol=1e-15,
                      maxiter=200)


def _illinois(fun_vec: Callable[[np.ndarray], np.ndarray], a: np.ndarray,
              b: np.ndarray, fa: np.ndarray, fb: np.ndarray) -> np.ndarray:
    """Vectorized Illinois (modified regula falsi) on brackets ``[a, b]``.

    Dowell & Jarratt (1971): the retained end point's function value is
    halved whenever it is retained twice, which restores superlinear
    convergence of regula falsi.
    """
    a, b, fa, fb = (np.array(v, dtype=float) for v in (a, b, fa, fb))
    for _ in range(60):
        with np.errstate(invalid="ignore", divide="ignore"):
            c = (a * fb - b * fa) / (fb - fa)
        lo, hi = np.minimum(a, b), np.maximum(a, b)
        c = np.where(np.isfinite(c) & (c > lo) & (c < hi), c, 0.5 * (a + b))
        fc = fun_vec(c)
        swap = np.sign(fc) != np.sign(fb)
        a = np.where(swap, b, a)
        fa = np.where(swap, fb, 0.5 * fa)
        b, fb = c, fc
        if np.all((np.abs(b - a) <= 1e-14 * np.abs(b)) | (fc == 0)):
            break
    return b


def _scan(w: np.ndarray, g: np.ndarray) -> np.ndarray:
    """Indices ``i`` where ``g`` changes sign between samples ``i`` and ``i + 1``."""
    s = g >= 0
    return np.nonzero((s[:-1] != s[1:]) & np.isfinite(g[:-1]) & np.isfinite(g[1:]))[0]


def refine_tangencies(contour: SampledContour, kind: str) -> None:
    """Add samples at local extrema that pass a threshold between samples.

    ``kind`` is ``"unit"`` (``log|L| = 0``) or ``"axis"`` (``Im L = 0`` with
    ``Re L < 0``).
    """
    for bi in range(len(contour.branches)):
        br = contour.branches[bi]
        if br.w.size < 3:
            continue
        g = _gvalues(br.L, kind)
        gi, gl, gr = g[1:-1], g[:-2], g[2:]
        ext_max = (gi >= gl) & (gi >= gr) & (gi < 0)
        ext_min = (gi <= gl) & (gi <= gr) & (gi >= 0)
        near = np.abs(gi) < (0.6 if kind == "unit" else 0.4)
        if kind == "axis":
            near &= br.L[1:-1].real < 0
        cand = np.nonzero((ext_max | ext_min) & near)[0] + 1
        new = []
        gs = _gscalar(contour, kind)
        for i in cand[:64]:
            sign = 1.0 if g[i] >= 0 else -1.0

            def fun(x, sign=sign, gs=gs):
                return sign * gs(x)

            wx, val = _minimize(fun, float(br.w[i - 1]), float(br.w[i + 1]))
            if val < 0:
                new.append(wx)
        if new:
            contour.insert_points(bi, np.asarray(new))


def _gvalues(L: np.ndarray, kind: str) -> np.ndarray:
    with np.errstate(divide="ignore", invalid="ignore"):
        if kind == "unit":
            return np.log(np.abs(L))
        return L.imag / np.abs(L)


def _gscalar(contour: SampledContour, kind: str) -> Callable[[float], float]:
    """``w -> _gvalues(L(w), kind)`` for one frequency, as a float.

    The same numbers as ``_gvalues`` on a one-element array: numpy's ``abs``
    and ``log`` on numpy scalars run the same loops as on arrays (and differ
    from ``math.log`` / Python's ``abs`` in the last bit now and then, so
    those are not used); the special values ``log 0 = -inf`` and ``0 / 0 =
    nan`` are set here without numpy's warning machinery.
    """
    ev = contour.scalar_evaluator()
    if contour.open_loop.factors:
        def vector_g(x: float) -> float:
            return float(_gvalues(np.array([ev(x)]), kind)[0])

        return vector_g
    npabs, nplog, c128 = np.abs, np.log, np.complex128
    if kind == "unit":
        def unit_g(x: float) -> float:
            a = npabs(c128(ev(x)))
            if a == 0.0:
                return -math.inf
            return float(nplog(a))

        return unit_g

    def axis_g(x: float) -> float:
        L = ev(x)
        a = npabs(c128(L))
        if a == 0.0 or a != a:
            return math.nan
        return float(L.imag / a)

    return axis_g


def _refine_roots(contour: SampledContour, kind: str, a: np.ndarray, b: np.ndarray,
                  ga: np.ndarray, gb: np.ndarray) -> np.ndarray:
    if a.size == 0:
        return a

    def fvec(x):
        return _gvalues(contour.evaluate(x), kind)

    if a.size > _BRENT_LIMIT or contour.open_loop.factors:
        # vectorized: many roots, or a response whose per-call cost is high
        return _illinois(fvec, a, b, ga, gb)

    fs = _gscalar(contour, kind)
    return np.array([_brent(fs, float(x), float(y)) for x, y in zip(a, b, strict=False)])


def unit_gain_crossings(contour: SampledContour) -> np.ndarray:
    """Frequencies (rad/s) where ``|L| = 1`` on the frequency axis, increasing."""
    out = []
    for br in contour.branches:
        g = _gvalues(br.L, "unit")
        idx = _scan(br.w, g)
        if idx.size:
            out.append(_refine_roots(contour, "unit", br.w[idx], br.w[idx + 1], g[idx],
                                     g[idx + 1]))
    # an end of the range exactly on the unit circle
    for w_end, L_end in _end_samples(contour):
        if abs(abs(L_end) - 1.0) <= 1e-12 and w_end > 0:
            out.append(np.array([w_end]))
    if not out:
        return np.zeros(0)
    return sorted_unique(np.concatenate(out))


def _end_samples(contour: SampledContour):
    res = []
    if contour.starts_at_zero:
        br = contour.branches[0]
        res.append((float(br.w[0]), complex(br.L[0])))
    if contour.end in ("nyquist", "data"):
        br = contour.branches[-1]
        res.append((float(br.w[-1]), complex(br.L[-1])))
    return res


def _direction_near(L: np.ndarray, from_end: bool) -> float:
    """Sign of Im L at the first sample (from the given end) off the real axis."""
    seq = L[::-1] if from_end else L
    for v in seq[:64]:
        if abs(v.imag) > 1e-12 * abs(v):
            return 1.0 if v.imag > 0 else -1.0
    return 0.0


def _on_axis(v: complex) -> bool:
    return abs(v.imag) <= 1e-12 * abs(v)


def negative_axis_crossings(contour: SampledContour) -> list[AxisCrossing]:
    """Every crossing of the negative real axis by the closed curve.

    Interior crossings of the positive branch count twice (mirror image);
    the ends of the frequency range (``w = 0``, the Nyquist frequency, the end
    of a factor's data, ``w -> inf`` of a biproper loop) lie on the symmetry
    axis and count once. Indentation arcs cross at ``-inf`` (k -> 0) and the
    ``w -> inf`` end of a strictly proper loop at ``0`` (k -> inf): they bound
    the gain range and are not listed.
    """
    out: list[AxisCrossing] = []
    nb = len(contour.branches)
    for bi, br in enumerate(contour.branches):
        w, L = br.w, br.L
        lo, hi = 0, w.size
        # an end point on the real axis is an end crossing (below), not a bracket end
        if bi == 0 and contour.starts_at_zero and _on_axis(complex(L[0])):
            lo = 1
        if bi == nb - 1 and contour.end in ("nyquist", "data") and _on_axis(complex(L[-1])):
            hi = w.size - 1
        if hi - lo < 2:
            continue
        g = _gvalues(L[lo:hi], "axis")
        idx = _scan(w[lo:hi], g)
        if idx.size == 0:
            continue
        # keep brackets on the negative side (Re < 0 at one of the ends)
        re = L[lo:hi].real
        keep = (re[idx] < 0) | (re[idx + 1] < 0)
        idx = idx[keep]
        if idx.size == 0:
            continue
        roots = _refine_roots(contour, "axis", w[lo:hi][idx], w[lo:hi][idx + 1], g[idx],
                              g[idx + 1])
        vals = contour.evaluate(roots)
        for r, v, i in zip(roots, vals, idx, strict=False):
            if not (v.real < 0) or abs(v) < NEGLIGIBLE_GAIN:
                continue
            downward = g[i] >= 0 and g[i + 1] < 0
            out.append(AxisCrossing(float(r), float(v.real), 2 if downward else -2, "interior"))
    # start of the range, w = 0 (junction from conj(L0) to L0)
    if contour.starts_at_zero:
        br = contour.branches[0]
        L0 = complex(br.L[0])
        if L0.real < 0 and abs(L0) >= NEGLIGIBLE_GAIN:
            s = 1.0 if L0.imag > 1e-12 * abs(L0) else (
                -1.0 if L0.imag < -1e-12 * abs(L0) else _direction_near(br.L[1:], False))
            # from Im = -s to Im = s: upward when s > 0
            if s:
                out.append(AxisCrossing(float(br.w[0]), L0.real, -1 if s > 0 else 1, "start"))
    # end of the range: segment from L_end to conj(L_end)
    rd = contour.rational.relative_degree
    if contour.end in ("nyquist", "data") or (contour.end == "infinity" and rd == 0):
        br = contour.branches[-1]
        Le = complex(br.L[-1])
        if Le.real < 0 and abs(Le) >= NEGLIGIBLE_GAIN:
            s = 1.0 if Le.imag > 1e-12 * abs(Le) else (
                -1.0 if Le.imag < -1e-12 * abs(Le) else _direction_near(br.L[:-1], True))
            # from Im = s to Im = -s: downward when s > 0
            if s:
                out.append(AxisCrossing(float(br.w[-1]), Le.real, 1 if s > 0 else -1, "end"))
    return out


def first_fall_below(contour: SampledContour, fun_vec, level: float,
                     fun_np_scalar=None) -> float | None:
    """Lowest frequency (rad/s) where ``fun_vec(L)`` falls below ``level`` (bracketed, Brent).

    ``fun_np_scalar``, when given, is ``fun_vec`` on one numpy complex scalar
    (the same numbers as on a one-element array, without building one).
    """
    for br in contour.branches:
        v = fun_vec(br.L)
        below = np.nonzero(v < level)[0]
        if below.size == 0:
            continue
        j = int(below[0])
        if j == 0:
            return float(br.w[0])
        ev = contour.scalar_evaluator()
        if fun_np_scalar is None:
            def fs(x, ev=ev):
                return float(fun_vec(np.array([ev(x)]))[0]) - level
        else:
            def fs(x, ev=ev):
                return float(fun_np_scalar(np.complex128(ev(x)))) - level

        return _brent(fs, float(br.w[j - 1]), float(br.w[j]))
    return None


def peak(contour: SampledContour, fun_vec, fun_scalar=None,
         candidates: int = 4, upper_bound=None) -> tuple[float, float]:
    """Maximum of ``fun_vec(L)`` over the frequency axis, refined (Brent minimization).

    Returns ``(value, w)``. The largest grid maxima (those above a fifth of
    the grid's largest value: between samples ``|1 + L|`` changes by less than
    a factor 5, see ``SampledContour.refine_for_point``) are refined on the
    exact response between their neighbours; ``fun_scalar`` is the same
    function of a complex scalar.

    ``upper_bound(L_e, r)``, when given, bounds ``fun`` over every ``L`` with
    ``|L - L_e| <= r``. Candidates are refined best first, and one whose
    bracket provably stays below the best value refined so far is skipped:
    on a step ``[a, b]`` of the rational part with step bound ``beta``
    (``|log L(w) - log L(a)| <= beta`` for every ``w`` in the step, see
    ``RationalResponse.step_bound``), ``|L(w) - L(a)| <= (e^beta - 1) |L(a)|``
    because ``|e^z - 1| <= e^|z| - 1``. The skipped candidate could not have
    won, so the result is the same as without the bound.
    """
    if fun_scalar is None:
        def fun_scalar(L):
            return float(fun_vec(np.array([L]))[0])

    found = []
    for bi, br in enumerate(contour.branches):
        v = fun_vec(br.L)
        if v.size == 0:
            continue
        # v >= both neighbours (an end has -inf beyond it), finite
        ok = np.isfinite(v)
        ok[1:] &= v[1:] >= v[:-1]
        ok[:-1] &= v[:-1] >= v[1:]
        idx = np.flatnonzero(ok)
        found += zip(v[idx].tolist(), [bi] * idx.size, idx.tolist(), strict=True)
    if not found:
        return -math.inf, math.nan
    found.sort(reverse=True)
    top = found[0][0]
    chosen = [f for f in found[:candidates] if f[0] >= 0.2 * top]
    if contour.open_loop.factors:
        return _peak_zoom(contour, fun_vec, chosen)
    best, best_w = -math.inf, math.nan
    for val, bi, i in chosen:
        br = contour.branches[bi]
        wv = float(br.w[i])
        lo, hi = br.w[max(i - 1, 0)], br.w[min(i + 1, br.w.size - 1)]
        if (upper_bound is not None and math.isfinite(best)
                and _bracket_bound(br, i, upper_bound) * (1.0 + 1e-9) < best):
            continue  # cannot beat the best one (see the docstring)
        if hi > lo:
            ev = contour.scalar_evaluator()

            def neg(x, ev=ev):
                return -fun_scalar(ev(x))

            wx, nv = _minimize(neg, float(lo), float(hi))
            if -nv > val:
                val, wv = -nv, wx
        if val > best:
            best, best_w = val, wv
    return best, best_w


def _bracket_bound(br, i: int, upper_bound) -> float:
    """Upper bound of the peaked function over ``[w_{i-1}, w_{i+1}]`` of branch ``br``."""
    worst = 0.0
    lo = max(i - 1, 0)
    Ls = br.L[lo:i + 2].tolist()  # plain complex numbers, from sample lo on
    betas = br.bound[lo:i + 1].tolist()
    for k in (i - 1, i):  # the steps [k, k + 1] on either side of sample i
        if k < 0 or k + 1 >= br.w.size:
            continue
        beta = betas[k - lo]
        if not math.isfinite(beta) or beta > 50.0:
            return math.inf
        grow = math.expm1(beta)
        step = math.inf
        for L_e in (Ls[k - lo], Ls[k + 1 - lo]):  # the step bound holds from either end
            if not (math.isfinite(L_e.real) and math.isfinite(L_e.imag)):
                continue
            step = min(step, upper_bound(L_e, grow * abs(L_e)))
        worst = max(worst, step)
    return worst


def _peak_zoom(contour: SampledContour, fun_vec, chosen) -> tuple[float, float]:
    """Vectorized zoom search of several peaks at once (responses given by factors).

    Each bracket ``[w_{i-1}, w_{i+1}]`` is sampled at 33 points, narrowed to
    the neighbours of the best one and sampled again, until its width is
    below ``1e-9 w``: one vectorized evaluation per step for all brackets,
    where a scalar search would pay the factors' per-call cost many times.
    For a peak that is smooth and unimodal inside its bracket this converges
    to the maximum like a golden-section search (Kiefer, "Sequential minimax
    search for a maximum", Proc. AMS 4, 1953), sixteen times narrower per step.
    """
    lo, hi, best, best_w = [], [], [], []
    for val, bi, i in chosen:
        br = contour.branches[bi]
        lo.append(float(br.w[max(i - 1, 0)]))
        hi.append(float(br.w[min(i + 1, br.w.size - 1)]))
        best.append(val)
        best_w.append(float(br.w[i]))
    lo, hi = np.array(lo), np.array(hi)
    best, best_w = np.array(best), np.array(best_w)
    t = np.linspace(0.0, 1.0, 33)
    for _ in range(20):
        width = hi - lo
        if np.all(width <= 1e-9 * np.maximum(hi, 1e-300)):
            break
        x = lo[:, None] + width[:, None] * t[None, :]
        v = fun_vec(contour.evaluate(x.ravel())).reshape(x.shape)
        v = np.where(np.isfinite(v), v, -np.inf)
        j = np.argmax(v, axis=1)
        rows = np.arange(x.shape[0])
        better = v[rows, j] > best
        best = np.where(better, v[rows, j], best)
        best_w = np.where(better, x[rows, j], best_w)
        lo = x[rows, np.maximum(j - 1, 0)]
        hi = x[rows, np.minimum(j + 1, t.size - 1)]
    k = int(np.argmax(best))
    return float(best[k]), float(best_w[k])
