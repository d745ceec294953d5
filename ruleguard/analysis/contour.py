"""The Nyquist contour of an open loop: adaptive sampling and winding numbers.

The contour (FORMATS.md section 5, METHODS.md "Nyquist stability"):

* continuous loops: up the imaginary axis, indented to the right around every
  pole on it (integrators of any order, undamped pairs), closed at infinity;
* discrete loops: the unit circle, ``theta = w h`` from ``-pi`` to ``pi``,
  indented outward around every pole on it (``z = 1``, ``z = -1``, ...);
* loops with a frequency-response factor known up to ``w_max`` only: the
  positive branch up to ``w_max``, closed by the straight segment from
  ``L(w_max)`` to its conjugate.

Only the positive-frequency branch is sampled; the negative one is its mirror
image (conjugate symmetry), so it changes the angle of ``L - p`` about any
real point ``p`` by the same amount. The winding number about ``p`` is

``(2 * [angle change along the positive branch and its interior arcs]
+ [start arc or nothing] + [end arc or closing segment]) / (2 pi)``.

Choice of method for the indentation arcs: an arc of radius ``eps`` around a
boundary pole of net order ``m`` maps to a clockwise arc of ``m pi`` at large
radius. Instead of adding ``-m pi`` blindly, the exact angle between the arc's
end points (both evaluated on the exact response) is taken and completed by the
multiple of ``2 pi`` that brings it nearest to ``-m pi``. ``eps`` is shrunk
until ``|L| >= ARC_LEVEL`` at the arc ends, so that the arc stays far outside
every point of interest and the completion is unambiguous; the sum is then an
exact multiple of ``2 pi`` up to rounding.

Sampling is adaptive, never a fixed grid. On the rational part a rigorous
bound on the change of ``log L`` between neighbours is enforced: with
``D = d log L / dw`` and the distances from the roots to the step,
``|log L(b) - log L(a)| <= dw (|D(mid)| + dw/2 * sum 1/dist^2)`` (a Taylor
bound on the logarithmic derivative of a rational function, with ``tau`` added
for a transport delay). Steps are bisected until the bound is below
``STEP_BOUND``; this clusters points around lightly damped poles and zeros
(width ``zeta wn``) without knowing them in advance. For every point ``p``
whose winding is wanted, steps are bisected further until the curve provably
stays inside a disc that excludes ``p``, and, for factors known only through
their response, until the angle of ``L - p`` changes by less than
``ANGLE_BOUND`` between neighbours.

References
----------
H. Nyquist, "Regeneration theory", Bell System Technical Journal 11(1), 1932.
K. J. Astrom and R. M. Murray, Feedback Systems, 2nd ed., Princeton, 2021,
section 10.2 (the Nyquist criterion with indentations).
K. J. Astrom and B. Wittenmark, Computer-Controlled Systems, 3rd ed.,
Prentice Hall, 1997, section 3.4 (the discrete Nyquist criterion).
"""

from __future__ import annotations

import cmath
import math
from dataclasses import dataclass, field

import numpy as np

from ruleguard.analysis.openloop import OpenLoop
from ruleguard.frozen import record
from ruleguard.models.arrays import sorted_unique
from ruleguard.models.lti import Factored

#: The curve passes through a point ``p`` when ``min |L - p| <= CRITICAL_TOL * max(1, |p|)``.
CRITICAL_TOL = 1e-8
#: Bound on ``|log L(b) - log L(a)|`` between neighbouring samples (rational part).
STEP_BOUND = 0.5
#: Bound on the change of ``angle(L - p)`` between neighbours (empirical check).
ANGLE_BOUND = 0.35
#: ``|L|`` at the end points of every indentation arc.
ARC_LEVEL = 1e4
#: ``|L|`` at the top of a continuous strictly proper contour (no delay).
TAIL_LEVEL = 1e-5
#: ``|L|`` at the top of a continuous strictly proper contour with a delay.
DELAY_TAIL_LEVEL = 1e-2
#: Zeros closer than this (relative) to a boundary pole cancel it.
CANCEL_RTOL = 1e-8
_MAX_PASSES = 80
_add_reduce = np.add.reduce
_mul_reduce = np.multiply.reduce
#: Samples per branch beyond which no further bisection is done (a curve that
#: runs along a point, e.g. L = -1 identically, would otherwise never stop).
_MAX_SAMPLES = 60_000
_WIDTH_FLOOR = 1e-13
_SMALL_L = 1e-4


# --------------------------------------------------------------------------- rational
class RationalResponse:
    """Fast exact evaluation of a factored block on the stability boundary.

    Vectorized over frequency (each zero paired with a pole so that high
    orders neither overflow nor underflow) and with a scalar path in plain
    complex arithmetic for the root finders.
    """

    def __init__(self, block: Factored, extras: tuple[RationalResponse, ...] = ()) -> None:
        #: factored blocks inside response factors (their roots also bound the steps)
        self.extras = extras
        if not block.is_proper:
            raise ValueError(
                f"the open loop is improper ({block.zeros.size} zeros, {block.poles.size} "
                "poles): it has no Nyquist contour"
            )
        self.block = block
        self.h = block.sample_time_s
        self.delay = block.delay_s
        self.gain = block.gain
        self.zeros = block.zeros
        self.poles = block.poles
        n = self.zeros.size
        self._pz = self.zeros
        self._pp = self.poles[:n]
        self._extra = self.poles[n:]
        self.roots = np.concatenate([self.zeros, self.poles])
        # Zeros on the contour itself (notches with infinite depth, z = -1 of a
        # Tustin block) make log L singular without making L change fast: L
        # passes through 0, far from any point of interest. They are left out
        # of the step bound, which would otherwise bisect towards them forever.
        off = ~block.on_boundary(self.zeros)
        self._bound_zeros = int(np.count_nonzero(off))
        self._bound_roots = np.concatenate([self.zeros[off], self.poles])
        zl = np.asarray(self.zeros, dtype=complex).tolist()
        pl = np.asarray(self.poles, dtype=complex).tolist()
        #: (zero, pole) pairs, then the poles left over, in the order of the
        #: vectorized path (plain complex numbers for :meth:`value`)
        self._pairs = tuple(zip(zl, pl[:n], strict=True))
        self._lone = tuple(pl[n:])
        #: the function :meth:`value` (constants bound as locals: it runs in
        #: every step of the root finders and minimisers)
        self.scalar = _scalar_function(self._pairs, self._lone, complex(self.gain), self.h,
                                       self.delay)

    @property
    def relative_degree(self) -> int:
        return self.block.relative_degree

    def variable(self, w) -> np.ndarray:
        w = np.asarray(w, dtype=float)
        return 1j * w if self.h is None else np.exp(1j * w * self.h)

    def values(self, w) -> np.ndarray:
        """``R(j w)`` or ``R(exp(j w h))`` for an array of frequencies (rad/s)."""
        x = self.variable(w)
        out = np.full(x.shape, self.gain, dtype=complex)
        xc = x[..., None]
        with np.errstate(divide="ignore", invalid="ignore", over="ignore", under="ignore"):
            if self._pz.size:  # np.prod is this reduction
                out = out * _mul_reduce((xc - self._pz) / (xc - self._pp), axis=-1)
            if self._extra.size:
                out = out / _mul_reduce(xc - self._extra, axis=-1)
            if self.delay:
                out = out * np.exp(-x * self.delay)
        return out

    def value(self, w: float) -> complex:
        """Scalar evaluation in plain complex arithmetic (root finders)."""
        return self.scalar(w)

    def step_bound(self, wa: np.ndarray, wb: np.ndarray) -> np.ndarray:
        """Upper bound on ``|log R(wb) - log R(wa)|`` for each step ``[wa, wb]``.

        Taylor bound on the logarithmic derivative of a rational function:
        ``|log R(b) - log R(a)| <= (b - a) (|D(m)| + (b - a)/2 max|D'|)``, with
        ``D = sum 1/(x - z) - sum 1/(x - p)`` (times ``dx/dw``) and ``|D'|``
        bounded by ``sum 1/dist^2`` over the roots (distance from each root to
        the step). A transport delay adds ``tau`` to ``|D|``.
        """
        own = self._own_step_bound(wa, wb)
        for extra in self.extras:
            own = own + extra.step_bound(wa, wb)
        return own

    def _own_step_bound(self, wa, wb) -> np.ndarray:
        wa = np.asarray(wa, dtype=float)
        wb = np.asarray(wb, dtype=float)
        mid = 0.5 * (wa + wb)
        half = 0.5 * (wb - wa)
        if self._bound_roots.size == 0:
            return 2 * half * self.delay
        x = self.variable(mid)
        diff = x[:, None] - self._bound_roots[None, :]
        with np.errstate(divide="ignore", invalid="ignore"):
            inv = 1.0 / diff
            nz = self._bound_zeros
            # ndarray.sum is this reduction
            s1 = _add_reduce(inv[:, :nz], axis=1) - _add_reduce(inv[:, nz:], axis=1)
            if self.h is None:
                reach = half
                d1 = np.abs(s1 - self.delay)
                dist = np.abs(diff) - reach[:, None]
                s2 = np.where(dist > 0, 1.0 / np.where(dist > 0, dist, 1.0) ** 2, np.inf).sum(1)
                return 2 * half * (d1 + half * s2)
            h = self.h
            reach = half * h
            d1 = h * np.abs(s1)
            dist = np.abs(diff) - reach[:, None]
            ok = dist > 0
            if ok.all():  # the usual case: the same sums without the masking
                s2 = _add_reduce(1.0 / dist**2 + 1.0 / dist, axis=1)
            else:
                safe = np.where(ok, dist, 1.0)
                s2 = np.where(ok, 1.0 / safe**2 + 1.0 / safe, np.inf).sum(1)
            return 2 * half * (d1 + half * h * h * s2)


def _scalar_function(pairs: tuple, lone: tuple, gain: complex, h: float | None, delay: float):
    """``w -> R(j w)`` or ``R(exp(j w h))`` for one float ``w``, in plain complex arithmetic.

    The gain times each (zero, pole) ratio, then divided by each pole left
    over, left to right, times ``exp(-x delay)``; ``inf`` when ``x`` is a pole.
    """
    exp = cmath.exp
    inf = complex(math.inf, 0.0)

    def scalar(w: float) -> complex:
        x = 1j * w if h is None else exp(1j * w * h)
        out = gain
        try:
            for z, p in pairs:
                out *= (x - z) / (x - p)
            for p in lone:
                out /= x - p
        except ZeroDivisionError:
            return inf
        if delay:
            out *= exp(-x * delay)
        return out

    return scalar


# --------------------------------------------------------------------------- records
@record
class Indentation:
    """A small outward arc around a boundary pole at ``w0`` (rad/s).

    ``order`` is the net order (poles minus cancelling zeros); ``position`` is
    ``"start"`` (w0 = 0), ``"end"`` (the Nyquist frequency) or ``"interior"``.
    """

    w0: float
    order: int
    eps: float
    position: str
    cancelled: bool = False


@dataclass(eq=False)
class Branch:
    """Samples of one piece of the positive frequency axis between indentations."""

    w: np.ndarray
    L: np.ndarray
    bound: np.ndarray  # step bound per interval (len(w) - 1)


@dataclass(eq=False)
class SampledContour:
    """The adaptively sampled positive branch of the Nyquist contour.

    Attributes
    ----------
    branches:
        Pieces of the positive frequency axis, in increasing frequency.
    indentations:
        Arcs around boundary poles (start, interior, end).
    starts_at_zero:
        True when ``w = 0`` is a sample (no pole at s = 0 / z = 1).
    end:
        ``"infinity"`` (continuous, closed at large radius by a segment through
        ``L(inf)``), ``"nyquist"`` (discrete, ``theta = pi``), ``"data"`` (end of a
        factor's known range) or ``"arc"`` (a pole at the end point).
    notes:
        Caveats worth reporting.
    """

    open_loop: OpenLoop
    rational: RationalResponse
    branches: list[Branch]
    indentations: tuple[Indentation, ...]
    starts_at_zero: bool
    end: str
    top_w: float
    notes: list[str] = field(default_factory=list)

    # ------------------------------------------------------------ evaluation
    def evaluate(self, w) -> np.ndarray:
        """``L`` at frequencies ``w`` (rad/s), exact."""
        w = np.asarray(w, dtype=float)
        out = self.rational.values(w)
        for f in self.open_loop.factors:
            out = out * np.asarray(f.response(w), dtype=complex)
        return out

    def evaluate_scalar(self, w: float) -> complex:
        if not self.open_loop.factors:
            return self.rational.scalar(float(w))
        return complex(self.evaluate(np.array([float(w)]))[0])

    def scalar_evaluator(self):
        """The function ``w -> L(w)`` (a float to a complex) that :meth:`evaluate_scalar` is.

        Without factors it is the rational part's plain-arithmetic
        :meth:`RationalResponse.value` itself (the same numbers, one call less
        per evaluation in the root finders and minimisers).
        """
        if not self.open_loop.factors:
            return self.rational.scalar
        return self.evaluate_scalar

    @property
    def w(self) -> np.ndarray:
        return np.concatenate([b.w for b in self.branches])

    @property
    def L(self) -> np.ndarray:
        return np.concatenate([b.L for b in self.branches])

    @property
    def interior_indentations(self) -> tuple[Indentation, ...]:
        return tuple(i for i in self.indentations if i.position == "interior")

    @property
    def has_cancelled_boundary_pole(self) -> bool:
        return any(i.cancelled for i in self.indentations)

    # ------------------------------------------------------------ refinement
    def _insert(self, bi: int, split: np.ndarray) -> None:
        """Bisect the flagged intervals of branch ``bi``."""
        br = self.branches[bi]
        idx = np.nonzero(split)[0]
        if idx.size == 0:
            return
        mids = 0.5 * (br.w[idx] + br.w[idx + 1])
        Lm = self.evaluate(mids)
        left, right = _halves_bound(self.rational, br.w[idx], mids, br.w[idx + 1])
        w = _insert_after(br.w, idx, mids)
        L = _insert_after(br.L, idx, Lm)
        bound = br.bound.copy()
        bound[idx] = left
        bound = _insert_after(bound, idx, right)
        self.branches[bi] = Branch(w, L, bound)

    def refine_for_point(self, point: complex) -> None:
        """Bisect until the winding about ``point`` is certain between samples."""
        p = complex(point)
        factors = bool(self.open_loop.factors)
        with np.errstate(invalid="ignore", over="ignore", divide="ignore"):
            for bi in range(len(self.branches)):
                for _ in range(_MAX_PASSES):
                    br = self.branches[bi]
                    if br.w.size < 2:
                        break
                    d = br.L - p
                    ad = np.abs(d)
                    a0, a1 = ad[:-1], ad[1:]
                    L0 = np.abs(br.L[:-1])
                    reach = np.expm1(np.minimum(br.bound, 50.0)) * L0
                    ang = np.abs(np.angle(d[1:] / d[:-1]))
                    split = (reach >= 0.8 * np.minimum(a0, a1)) | (ang > ANGLE_BOUND)
                    if factors:
                        L1 = np.abs(br.L[1:])
                        dlog = np.abs(np.log(L1 / np.maximum(L0, 1e-300)))
                        big = np.maximum(L1, L0) > _SMALL_L
                        split |= (dlog > STEP_BOUND) & big
                    w = br.w
                    split &= (w[1:] - w[:-1]) > _WIDTH_FLOOR * np.maximum(w[1:], 1.0)
                    n_new = np.count_nonzero(split)
                    if not n_new or w.size + n_new > _MAX_SAMPLES:
                        break
                    self._insert(bi, split)

    def insert_points(self, bi: int, w_new: np.ndarray) -> None:
        """Add samples at ``w_new`` (inside branch ``bi``) and update the step bounds."""
        br = self.branches[bi]
        w_new = np.asarray(w_new, dtype=float)
        w_new = w_new[(w_new > br.w[0]) & (w_new < br.w[-1])]
        if w_new.size == 0:
            return
        w = sorted_unique(np.concatenate([br.w, w_new]))
        L = np.empty(w.size, dtype=complex)
        old = np.isin(w, br.w)
        L[old] = br.L[np.searchsorted(br.w, w[old])]
        L[~old] = self.evaluate(w[~old])
        self.branches[bi] = Branch(w, L, self.rational.step_bound(w[:-1], w[1:]))

    def refine_empirical(self) -> None:
        """Bisect where ``log L`` changes by more than the step bound between samples.

        Used for frequency-response factors, whose variation the rational
        step bound does not cover.
        """
        for bi in range(len(self.branches)):
            for _ in range(_MAX_PASSES):
                br = self.branches[bi]
                with np.errstate(divide="ignore", invalid="ignore"):
                    r = br.L[1:] / br.L[:-1]
                    change = np.abs(np.log(np.abs(r))) + np.abs(np.angle(r))
                # where |L| is tiny (a factor's zero on the contour) the log
                # changes fast but L stays far from every point of interest
                big = np.maximum(np.abs(br.L[1:]), np.abs(br.L[:-1])) > _SMALL_L
                split = (change > STEP_BOUND) & big & (
                    np.diff(br.w) > _WIDTH_FLOOR * np.maximum(br.w[1:], 1.0))
                if not split.any() or br.w.size + np.count_nonzero(split) > _MAX_SAMPLES:
                    break
                self._insert(bi, split)

    # ------------------------------------------------------------ geometry
    def min_distance(self, point: complex,
                     threshold: float | None = None) -> tuple[float, float | None]:
        """Smallest ``|L - point|`` on the contour and the frequency (rad/s) where.

        With ``threshold``, only the question "is the distance at most
        ``threshold``?" is answered exactly: a local minimum whose bracket
        provably stays farther than ``threshold`` (on a step of the rational
        part with step bound ``beta``, ``|L(w) - L(a)| <= (e^beta - 1) |L(a)|``)
        keeps its sampled value instead of being refined.
        """
        p = complex(point)
        prune = threshold is not None and not self.open_loop.factors
        best, best_w = math.inf, None
        for br in self.branches:
            d = np.abs(br.L - p)
            if d.size == 0:
                continue
            order = _local_minima(d)
            if order.size:
                best_grid = float(d[order[0]])
                if best_grid < best:
                    best, best_w = best_grid, float(br.w[order[0]])
            # only minima that come close are refined (the samples already
            # bound the curve, see refine_for_point)
            order = order[d[order] < 0.25 * max(1.0, abs(p))]
            for i in order[:4]:
                lo = br.w[max(i - 1, 0)]
                hi = br.w[min(i + 1, br.w.size - 1)]
                val, wv = float(d[i]), float(br.w[i])
                if prune and _bracket_floor(br, int(i), d) * (1.0 - 1e-9) > threshold:
                    hi = lo  # provably farther than the threshold: not refined
                if hi > lo:
                    ev = self.scalar_evaluator()
                    wv2, val2 = _minimize(lambda x, ev=ev: abs(ev(x) - p), lo, hi)
                    if val2 < val:
                        val, wv = val2, wv2
                if val < best:
                    best, best_w = val, wv
        # closing segment (end of the positive branch to its mirror image)
        if self.end != "arc" and self.branches and self.branches[-1].w.size:
            Le = complex(self.branches[-1].L[-1])
            seg = _segment_distance(p, Le, Le.conjugate())
            if seg < best:
                best, best_w = seg, float(self.branches[-1].w[-1])
        return best, best_w

    def angle_sum(self, point: complex) -> float:
        """Total change of ``angle(L - point)`` around the closed contour (rad)."""
        p = complex(point)
        half = 0.0
        for br in self.branches:
            d = br.L - p
            if d.size >= 2:
                half += float(np.sum(np.angle(d[1:] / d[:-1])))
        start = 0.0
        end = 0.0
        gap = 0
        for ind in self.indentations:
            if ind.position == "start":
                L1 = complex(self.branches[0].L[0])
                start = _arc_sweep(L1.conjugate(), L1, p, ind.order)
            elif ind.position == "end":
                Le = complex(self.branches[-1].L[-1])
                end = _arc_sweep(Le, Le.conjugate(), p, ind.order)
            else:
                # the gap between branch ``gap`` and ``gap + 1``
                La = complex(self.branches[gap].L[-1])
                Lb = complex(self.branches[gap + 1].L[0])
                half += _arc_sweep(La, Lb, p, ind.order)
                gap += 1
        if self.starts_at_zero:
            # junction from the mirror image conj(L0) to L0 (zero when L0 is real)
            L0 = complex(self.branches[0].L[0])
            start = _principal((L0 - p) / (L0.conjugate() - p)) if L0 != p else 0.0
        if self.end != "arc":
            Le = complex(self.branches[-1].L[-1])
            end = _principal((Le.conjugate() - p) / (Le - p)) if Le != p else 0.0
        return 2.0 * half + start + end

    def winding(self, point: complex = -1.0) -> int | None:
        """Counter-clockwise encirclements of ``point`` (None: the curve passes through it)."""
        p = complex(point)
        self.refine_for_point(p)
        tol = CRITICAL_TOL * max(1.0, abs(p))
        dist, _ = self.min_distance(p, threshold=tol)
        if dist <= tol:
            return None
        total = self.angle_sum(p) / (2 * math.pi)
        n = round(total)
        if abs(total - n) > 0.05:
            self.notes.append(
                f"winding number about {p.real:g} not resolved cleanly ({total:.3f} turns); "
                "the verdict may be unreliable"
            )
        return int(n)


# --------------------------------------------------------------------------- helpers
def _bracket_floor(br: Branch, i: int, dist: np.ndarray) -> float:
    """Lower bound of ``|L - p|`` over ``[w_{i-1}, w_{i+1}]`` (``dist`` = sampled ``|L - p|``).

    On each step ``[k, k + 1]`` the curve stays within ``(e^beta - 1) |L_e|``
    of either end point ``L_e`` (``beta`` the step bound, valid from both ends).
    """
    floor = math.inf
    for k in (i - 1, i):
        if k < 0 or k + 1 >= br.w.size:
            continue
        beta = float(br.bound[k])
        if not math.isfinite(beta) or beta > 50.0:
            return 0.0
        grow = math.expm1(beta)
        step = max(float(dist[e]) - grow * abs(complex(br.L[e])) for e in (k, k + 1))
        floor = min(floor, step)
    return max(floor, 0.0) if math.isfinite(floor) else 0.0


def _principal(ratio: complex) -> float:
    return math.atan2(ratio.imag, ratio.real)


def _arc_sweep(La: complex, Lb: complex, p: complex, order: int) -> float:
    """Angle of ``L - p`` swept by an indentation arc from ``La`` to ``Lb``.

    The principal angle between the end points, completed by the multiple of
    ``2 pi`` nearest to the ``-order * pi`` the arc sweeps at large radius.
    """
    if La == p or Lb == p:
        return 0.0
    delta = _principal((Lb - p) / (La - p))
    if order <= 0:
        return delta
    target = -order * math.pi
    k = round((target - delta) / (2 * math.pi))
    return delta + 2 * math.pi * k


def _segment_distance(p: complex, a: complex, b: complex) -> float:
    ab = b - a
    if ab == 0:
        return abs(p - a)
    t = ((p - a) * ab.conjugate()).real / abs(ab) ** 2
    t = min(max(t, 0.0), 1.0)
    return abs(p - (a + t * ab))


def _local_minima(values: np.ndarray) -> np.ndarray:
    """Indices of local minima (ends included), smallest first."""
    v = np.asarray(values, dtype=float)
    n = v.size
    if n == 1:
        return np.array([0])
    # v <= both neighbours (an end has +inf beyond it), finite
    ok = np.isfinite(v)
    ok[1:] &= v[1:] <= v[:-1]
    ok[:-1] &= v[:-1] <= v[1:]
    idx = np.flatnonzero(ok)
    return idx[np.argsort(v[idx])]


def _minimize(fun, lo: float, hi: float) -> tuple[float, float]:
    """Bounded scalar minimization (Brent's localmin, :mod:`ruleguard.analysis.scalar`)."""
    from ruleguard.analysis.scalar import brent_minimize

    x, fx = brent_minimize(fun, lo, hi, xatol=1e-10 * max(abs(hi), 1e-300))
    return float(x), float(fx)


def _boundary_location(rational: RationalResponse, w0: float) -> complex:
    if rational.h is None:
        return complex(0.0, w0)
    return cmath.exp(1j * w0 * rational.h)


def _indentations(open_loop: OpenLoop, rational: RationalResponse, top: float,
                  boundary: list[tuple[float, int]]):
    """Boundary poles (``boundary``: ``OpenLoop.boundary_pole_frequencies()``) as
    indentations with their net order (cancelling zeros removed)."""
    out = []
    for w0, m in boundary:
        loc = _boundary_location(rational, w0)
        tol = CANCEL_RTOL * max(1.0, abs(loc))
        ncancel = int(np.count_nonzero(np.abs(rational.zeros - loc) <= tol))
        order = m - ncancel
        if w0 <= 0.0:
            position = "start"
        elif math.isfinite(top) and w0 >= top * (1 - 1e-12):
            position = "end"
        elif w0 > top:
            continue
        else:
            position = "interior"
        out.append([w0, order, position, ncancel > 0])
    return out


def _scale_hint(rational: RationalResponse, open_loop: OpenLoop,
                boundary: list[tuple[float, int]]) -> tuple[float, float]:
    """Smallest and largest characteristic frequency of the loop (rad/s).

    Those of ``OpenLoop.corner_frequencies()`` (the same values: ``|s|`` of
    every finite nonzero root, ``|log z| / h`` in a discrete loop, the
    factors' grids), of the boundary poles and of a delay; only their extremes
    are needed, so they are neither sorted nor made unique.
    """
    roots = rational.roots
    if rational.h is None:
        rw = np.abs(roots)
    else:
        rw = np.abs(np.log(roots[np.abs(roots) > 1e-300])) / rational.h
    parts = [rw]
    for f in open_loop.factors:
        parts.append(np.asarray(f.grid(), dtype=float))
    bw = [w0 for w0, _ in boundary if w0 > 0]
    parts.append(np.asarray(bw, dtype=float))
    pool = np.concatenate(parts)
    if rational.delay:
        pool = np.append(pool, 1.0 / rational.delay)
    pool = pool[np.isfinite(pool) & (pool > 0)]
    if pool.size == 0:
        return 1.0, 1.0
    return float(pool.min()), float(pool.max())


def _choose_eps(contour_eval, rational: RationalResponse, w0: float, position: str,
                neighbours: list[float], scale: float, order: int = 1) -> float:
    """Indentation radius: small against nearby roots, with ``|L| >= ARC_LEVEL`` at its ends."""
    loc = _boundary_location(rational, w0)
    d = np.abs(rational.roots - loc)
    d = d[d > CANCEL_RTOL * max(1.0, abs(loc))]
    if rational.h is not None:
        d = d / rational.h
    near = [float(d.min())] if d.size else []
    if w0 > 0 and rational.h is None:
        near.append(2 * w0)
    near += [abs(w0 - n) for n in neighbours if n != w0]
    base = min(near) if near else scale
    eps = 1e-3 * base
    if order <= 0:
        return eps  # cancelled: |L| stays finite there
    for _ in range(16):
        probes = []
        if position in ("interior", "start"):
            probes.append(w0 + eps)
        if position in ("interior", "end"):
            probes.append(w0 - eps)
        vals = np.abs(contour_eval(np.asarray(probes)))
        if np.all(vals >= ARC_LEVEL):
            break
        eps *= 0.1
    return eps


def _seeds(rational: RationalResponse, open_loop: OpenLoop, a: float, b: float,
           lo_scale: float) -> np.ndarray:
    """Initial samples of ``[a, b]``: a log grid, root neighbourhoods, data points."""
    pts = [np.array([a, b])]
    lo = max(a, lo_scale)
    if b > lo > 0:
        n = max(int(8 * math.log10(b / lo)) + 2, 2)
        pts.append(_geometric(lo, b, n))
    offsets = _SEED_OFFSETS
    for part in (rational, *rational.extras):
        r = part.roots
        if not r.size:
            continue
        if part.h is None:
            wr, dr = np.abs(r.imag), np.abs(r.real)
        else:
            nz = r[np.abs(r) > 1e-300]
            wr = np.abs(np.angle(nz)) / part.h
            dr = np.abs(np.log(np.abs(nz))) / part.h
        cand = (wr[:, None] + dr[:, None] * offsets[None, :]).ravel()
        pts.append(cand)
    for f in open_loop.factors:
        pts.append(np.asarray(f.grid(), dtype=float))
    w = np.concatenate(pts)
    w = w[np.isfinite(w) & (w >= a) & (w <= b)]
    return sorted_unique(w)


#: Seeds around each root, in units of its distance to the contour.
_SEED_OFFSETS = np.array([-10, -3, -1, -0.3, 0.0, 0.3, 1, 3, 10])


def _geometric(lo: float, hi: float, n: int) -> np.ndarray:
    """``np.geomspace(lo, hi, n)`` for ``0 < lo < hi`` and ``n >= 2``, the same numbers.

    numpy's own steps (``linspace`` of the base-10 logarithms, ``10 ** y``,
    the end points set exactly), without its general argument handling (sign
    rotation, complex and array inputs), which costs more than the
    arithmetic here.
    """
    log_lo = np.log10(np.float64(lo))
    log_hi = np.log10(np.float64(hi))
    delta = log_hi - log_lo
    div = n - 1
    y = np.arange(0, n, dtype=float)
    step = delta / div
    if step == 0:
        y /= div
        y *= delta
    else:
        y *= step
    y += log_lo
    y[-1] = log_hi
    out = np.power(10.0, y)
    out[0] = lo
    out[-1] = hi
    return out


def _halves_bound(rational: RationalResponse, a: np.ndarray, mid: np.ndarray,
                  b: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Step bounds of the halves ``[a, mid]`` and ``[mid, b]`` (one vectorized call)."""
    both = rational.step_bound(np.concatenate([a, mid]), np.concatenate([mid, b]))
    return both[: a.size], both[a.size:]


def _refine_rational(rational: RationalResponse, w: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Bisect steps until the rational step bound is below ``STEP_BOUND``."""
    w = np.asarray(w, dtype=float)
    bound = rational.step_bound(w[:-1], w[1:])
    for _ in range(_MAX_PASSES):
        split = (bound > STEP_BOUND) & ((w[1:] - w[:-1]) > _WIDTH_FLOOR * np.maximum(w[1:], 1.0))
        idx = np.flatnonzero(split)
        if idx.size == 0 or w.size + idx.size > _MAX_SAMPLES:
            break
        wa, wb = w[idx], w[idx + 1]
        mids = 0.5 * (wa + wb)
        left, right = _halves_bound(rational, wa, mids, wb)
        w = _insert_after(w, idx, mids)
        bound[idx] = left
        bound = _insert_after(bound, idx, right)
    return w, bound


def _insert_after(a: np.ndarray, idx: np.ndarray, new: np.ndarray) -> np.ndarray:
    """``a`` with ``new[k]`` placed right after ``a[idx[k]]`` (``idx`` increasing, distinct).

    What ``np.insert(a, idx + 1, new)`` gives, without its general-purpose
    argument handling (it runs once per bisection pass).
    """
    out = np.empty(a.size + idx.size, dtype=a.dtype)
    pos = idx + np.arange(1, idx.size + 1)
    keep = np.ones(out.size, dtype=bool)
    keep[pos] = False
    out[pos] = new
    out[keep] = a
    return out


def sample_contour(open_loop: OpenLoop, tail_level: float | None = None) -> SampledContour:
    """Adaptively sample the positive branch of the Nyquist contour of ``open_loop``.

    Parameters
    ----------
    open_loop:
        The loop; its rational part must be proper.
    tail_level:
        ``|L|`` at which a continuous strictly proper contour is closed
        (default ``TAIL_LEVEL``, or ``DELAY_TAIL_LEVEL`` with a delay).

    Returns
    -------
    SampledContour
        Samples satisfying the rational step bound (``STEP_BOUND``); call
        :meth:`SampledContour.winding` for a winding number.

    References
    ----------
    H. Nyquist, "Regeneration theory", Bell System Technical Journal 11(1), 1932.
    """
    extras = []
    for f in open_loop.factors:
        block = getattr(f, "block", None)  # a factored block seen through its response
        if isinstance(block, Factored) and block.is_proper:
            extras.append(RationalResponse(block))
    rational = RationalResponse(open_loop.rational, tuple(extras))
    notes: list[str] = []
    boundary = open_loop.boundary_pole_frequencies()
    lo_scale, hi_scale = _scale_hint(rational, open_loop, boundary)
    top = open_loop.w_max  # Nyquist, end of data, or inf

    def ev(w):
        out = rational.values(w)
        for f in open_loop.factors:
            out = out * np.asarray(f.response(w), dtype=complex)
        return out

    raw = _indentations(open_loop, rational, top, boundary)
    bws = [r[0] for r in raw]
    indents: list[Indentation] = []
    for w0, order, position, cancelled in raw:
        eps = _choose_eps(ev, rational, w0, position, bws, hi_scale, order)
        indents.append(Indentation(w0, order, eps, position, cancelled))
        if cancelled:
            notes.append(
                f"a pole on the stability boundary at {w0 / (2 * math.pi):g} Hz is cancelled "
                "by a zero: the closed loop keeps that pole and is not asymptotically stable"
            )

    end_kind = "nyquist" if open_loop.is_discrete else "infinity"
    if open_loop.factors and math.isfinite(top):
        ny = open_loop.nyquist_rad_s
        if ny is None or top < ny * (1 - 1e-12):
            end_kind = "data"
    if any(i.position == "end" for i in indents):
        end_kind = "arc"

    if not math.isfinite(top):
        # continuous: go up until L has settled (|L| small, or L ~ D for biproper)
        level = DELAY_TAIL_LEVEL if rational.delay else TAIL_LEVEL
        if tail_level is not None:
            level = tail_level
        top = 100.0 * hi_scale
        for _ in range(40):
            v = abs(complex(ev(np.array([top]))[0]))
            if rational.relative_degree > 0 and v <= level:
                break
            if rational.relative_degree == 0:
                v2 = abs(complex(ev(np.array([10 * top]))[0]))
                if abs(v2 - v) <= 1e-9 * max(v, 1e-300) and not rational.delay:
                    break
                if rational.delay and top > 1e4 * hi_scale:
                    notes.append(
                        "biproper loop with a transport delay: the response does not settle; "
                        f"examined up to {top / (2 * math.pi):g} Hz"
                    )
                    break
            top *= 4.0 if rational.delay else 10.0

    # branches between indentations
    starts_at_zero = not any(i.position == "start" for i in indents)
    edges: list[tuple[float, float]] = []
    a = 0.0
    for ind in indents:
        if ind.position == "start":
            a = ind.eps
        elif ind.position == "interior":
            edges.append((a, ind.w0 - ind.eps))
            a = ind.w0 + ind.eps
    b = top
    for ind in indents:
        if ind.position == "end":
            b = ind.w0 - ind.eps
    edges.append((a, b))
    lo_seed = 1e-3 * lo_scale
    branches: list[Branch] = []
    for a, b in edges:
        if not b > a:
            raise ValueError("indentations overlap; boundary poles too close together")
        w = _seeds(rational, open_loop, a, b, lo_seed)
        if a == 0.0 and open_loop.factors and not np.isfinite(ev(np.array([0.0]))[0]):
            w[0] = 1e-6 * lo_seed
        w, bound = _refine_rational(rational, w)
        branches.append(Branch(w, ev(w), bound))
    contour = SampledContour(
        open_loop, rational, branches, tuple(indents), starts_at_zero, end_kind, top, notes
    )
    # empirical check on the response as a whole (factors, rounding)
    if open_loop.factors:
        contour.refine_empirical()
    return contour


def ccw_encirclements(open_loop: OpenLoop, point: float = -1.0) -> int | None:
    """Net counter-clockwise encirclements of ``point`` by the Nyquist curve of ``open_loop``.

    Parameters
    ----------
    open_loop:
        The open loop ``L`` (negative feedback).
    point:
        A point of the complex plane (``-1`` for the closed loop ``1 + L``,
        ``-1/k`` for the loop with its gain scaled by ``k``).

    Returns
    -------
    int or None
        The winding number, or ``None`` when the curve passes through
        ``point`` within ``CRITICAL_TOL``.

    References
    ----------
    H. Nyquist, "Regeneration theory", Bell System Technical Journal 11(1), 1932.
    """
    return sample_contour(open_loop).winding(point)
