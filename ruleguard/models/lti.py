"""Linear time-invariant blocks in factored form.

Every block is kept as zeros, poles, gain and delay (never as multiplied-out
polynomials, METHODS.md "Representation"). A block lives in the s-plane
(``sample_time_s is None``) or in the z-plane (``sample_time_s > 0``).
Tabulated responses (measured plants) are :class:`MeasuredResponse`.

Conventions
-----------
* ``gain`` is the leading-coefficient gain: ``H = gain * prod(x - zeros) /
  prod(x - poles)`` with ``x = s`` or ``x = z``.
* Frequencies ``w`` are in rad/s everywhere; a z-plane block is evaluated at
  ``z = exp(j w h)``.
* ``delay_s`` is an exact transport delay ``exp(-s delay_s)`` of an s-plane
  block. A z-plane block carries whole-sample delays as poles at ``z = 0``.
"""

from __future__ import annotations

import cmath
import math
from dataclasses import field

import numpy as np

from ruleguard.frozen import record
from ruleguard.models.arrays import sorted_unique

#: Relative tolerance within which a pole counts as lying on the stability
#: boundary (imaginary axis or unit circle). A continuous pole p is on the
#: boundary when ``|Re p| <= BOUNDARY_RTOL * max(|p|, 1e-300)`` or
#: ``|p| <= BOUNDARY_ATOL``; a discrete pole when ``| |p| - 1 | <= BOUNDARY_RTOL``.
BOUNDARY_RTOL = 1e-9
BOUNDARY_ATOL = 1e-12
#: Evaluations of at most this many (points x factors) use one broadcast
#: product instead of a loop over the factors (fewer numpy calls per point).
_BROADCAST_LIMIT = 4096
#: Larger evaluations stack the zero/pole ratios of up to this many
#: (points x factors) in one array (16 MB), beyond it they loop over the factors.
_STACK_LIMIT = 1 << 20


def _as_complex_vector(values, name: str) -> np.ndarray:
    if type(values) is np.ndarray and values.dtype == _COMPLEX and values.ndim == 1:
        arr = values  # what asarray/reshape would give (a view of the same data)
    else:
        arr = np.asarray(values, dtype=complex).reshape(-1)
    # a few roots: Python's test per element is cheaper than two numpy calls
    finite = (all(map(cmath.isfinite, arr.tolist())) if arr.size <= 32
              else bool(np.isfinite(arr).all()))
    if not finite:
        raise ValueError(f"{name} must be finite, got {arr!r}")
    return arr


_COMPLEX = np.dtype(complex)


@record(eq=False)
class Factored:
    """A single-input single-output rational block in factored form.

    Parameters
    ----------
    zeros, poles:
        Complex roots (conjugate-symmetric for a real block).
    gain:
        Leading-coefficient gain.
    delay_s:
        Exact transport delay of an s-plane block (``0`` for z-plane blocks).
    sample_time_s:
        ``None`` for an s-plane block, the sample period h for a z-plane block.
    """

    zeros: np.ndarray
    poles: np.ndarray
    gain: float
    delay_s: float = 0.0
    sample_time_s: float | None = None

    def __post_init__(self) -> None:
        put = object.__setattr__
        put(self, "zeros", _as_complex_vector(self.zeros, "zeros"))
        put(self, "poles", _as_complex_vector(self.poles, "poles"))
        gain = float(self.gain)
        delay = float(self.delay_s)
        put(self, "gain", gain)
        put(self, "delay_s", delay)
        if self.sample_time_s is not None:
            h = float(self.sample_time_s)
            if not h > 0.0:
                raise ValueError(f"sample_time_s must be positive, got {h}")
            put(self, "sample_time_s", h)
            if delay != 0.0:
                raise ValueError("a z-plane block carries delays as poles at z = 0, not delay_s")
        if not math.isfinite(gain) or not math.isfinite(delay) or delay < 0:
            raise ValueError("gain and delay_s must be finite, delay_s >= 0")

    # ------------------------------------------------------------------ basics
    def content_key(self) -> tuple:
        """Exact content of the block as hashable data: the bytes of its roots,
        its gain, delay and sample time (equal keys: the same block, bit for
        bit). The key of the per-process memos of blocks (rounding, holds)."""
        return (self.zeros.tobytes(), self.poles.tobytes(), self.zeros.size,
                self.gain.hex(), self.delay_s.hex(),
                None if self.sample_time_s is None else self.sample_time_s.hex())

    @property
    def is_discrete(self) -> bool:
        return self.sample_time_s is not None

    @property
    def relative_degree(self) -> int:
        """Number of poles minus number of zeros (negative: improper)."""
        return int(self.poles.size - self.zeros.size)

    @property
    def is_proper(self) -> bool:
        return self.relative_degree >= 0

    def variable(self, w) -> np.ndarray:
        """The complex variable on the boundary: ``j w`` or ``exp(j w h)``."""
        w = np.asarray(w, dtype=float)
        if self.sample_time_s is None:
            return 1j * w
        return np.exp(1j * w * self.sample_time_s)

    def evaluate(self, x) -> np.ndarray:
        """Evaluate the block at complex points ``x`` (s or z), delay included.

        The product is formed factor by factor, pairing each zero with a pole
        so that high orders neither overflow nor underflow.
        """
        x = np.asarray(x, dtype=complex)
        nz, npl = self.zeros.size, self.poles.size
        if x.size * (nz + npl + 1) <= _BROADCAST_LIMIT:
            # few points (root finders, peak refinement): one broadcast product
            # of the same factors in the same order (gain, zero/pole ratios,
            # unpaired zeros, unpaired poles), multiplied left to right
            k = min(nz, npl)
            xe = x[..., None]
            parts = [np.full(x.shape + (1,), self.gain, dtype=complex)]
            if k:
                parts.append((xe - self.zeros[:k]) / (xe - self.poles[:k]))
            if nz > k:
                parts.append(xe - self.zeros[k:])
            if npl > k:
                parts.append(1.0 / (xe - self.poles[k:]))
            out = np.multiply.reduce(np.concatenate(parts, axis=-1), axis=-1)
            if self.delay_s:
                out = out * np.exp(-x * self.delay_s)
            return out
        k = min(nz, npl)
        if k and x.size * (k + 1) <= _STACK_LIMIT:
            # the zero/pole ratios of all points as rows of one array, multiplied
            # row after row by one reduction over the first axis: the same
            # products in the same order as the loop below, with fewer calls
            flat = x.reshape(-1)
            rows = np.empty((k + 1, flat.size), dtype=complex)
            rows[0] = self.gain
            np.divide(flat[None, :] - self.zeros[:k, None], flat[None, :] - self.poles[:k, None],
                      out=rows[1:])
            out = np.multiply.reduce(rows, axis=0).reshape(x.shape)
            start = k
        else:
            out = np.full(x.shape, self.gain, dtype=complex)
            start = 0
        for i in range(start, max(nz, npl)):
            if i < nz and i < npl:
                out = out * ((x - self.zeros[i]) / (x - self.poles[i]))
            elif i < nz:
                out = out * (x - self.zeros[i])
            else:
                out = out / (x - self.poles[i])
        if self.delay_s:
            out = out * np.exp(-x * self.delay_s)
        return out

    def response(self, w) -> np.ndarray:
        """Frequency response at ``w`` rad/s (vectorized)."""
        with np.errstate(divide="ignore", invalid="ignore"):
            return self.evaluate(self.variable(w))

    # --------------------------------------------------------- pole geometry
    def on_boundary(self, roots: np.ndarray) -> np.ndarray:
        """Boolean mask of ``roots`` on the stability boundary (tolerance above)."""
        roots = np.asarray(roots, dtype=complex)
        if self.sample_time_s is None:
            mag = np.abs(roots)
            return (np.abs(roots.real) <= BOUNDARY_RTOL * np.maximum(mag, 1e-300)) | (
                mag <= BOUNDARY_ATOL
            )
        return np.abs(np.abs(roots) - 1.0) <= BOUNDARY_RTOL

    def unstable_mask(self, roots: np.ndarray) -> np.ndarray:
        """Boolean mask of ``roots`` strictly outside the stable region."""
        roots = np.asarray(roots, dtype=complex)
        if self.sample_time_s is None:
            outside = roots.real > 0
        else:
            outside = np.abs(roots) > 1.0
        return outside & ~self.on_boundary(roots)

    def unstable_pole_count(self) -> int:
        return int(np.count_nonzero(self.unstable_mask(self.poles)))

    def boundary_poles(self) -> np.ndarray:
        """Poles on the boundary (integrators, undamped pairs, z = 1, ...)."""
        return self.poles[self.on_boundary(self.poles)]

    def boundary_pole_frequencies(self) -> list[tuple[float, int]]:
        """Boundary poles with non-negative frequency as ``(w rad/s, multiplicity)``.

        A continuous pole ``j w0`` has frequency ``w0``; a discrete pole
        ``exp(j theta)`` has frequency ``theta / h``. Poles closer than the
        boundary tolerance are merged.
        """
        bp = self.boundary_poles()
        # a real pole with a rounding-level imaginary part (s = 0, z = 1, z = -1)
        # sits exactly at frequency 0 or pi/h, whichever sign its imaginary part has
        real = np.abs(bp.imag) <= BOUNDARY_RTOL * np.maximum(np.abs(bp), 1.0)
        if self.sample_time_s is None:
            freqs = np.where(real, 0.0, bp.imag)
        else:
            freqs = np.where(real, np.where(bp.real < 0, np.pi, 0.0), np.angle(bp))
            freqs = freqs / self.sample_time_s
        freqs = freqs[freqs >= -1e-300]
        merged: list[tuple[float, int]] = []
        for f in np.sort(np.abs(freqs)):
            scale = max(abs(f), 1.0) * 1e-7
            if merged and abs(merged[-1][0] - f) <= scale:
                merged[-1] = (merged[-1][0], merged[-1][1] + 1)
            else:
                merged.append((float(f), 1))
        return merged

    def corner_frequencies(self) -> np.ndarray:
        """Characteristic frequencies (rad/s) of the finite nonzero roots."""
        roots = np.concatenate([self.zeros, self.poles])
        if self.sample_time_s is None:
            w = np.abs(roots)
        else:
            # z = exp(s h): the equivalent s-plane magnitude |log z| / h.
            nz = roots[np.abs(roots) > 1e-300]
            w = np.abs(np.log(nz)) / self.sample_time_s
        w = w[np.isfinite(w) & (w > 0)]
        return sorted_unique(w)

    # ----------------------------------------------------------- composition
    def __mul__(self, other: Factored) -> Factored:
        if not isinstance(other, Factored):
            return NotImplemented
        if self.sample_time_s != other.sample_time_s:
            raise ValueError(
                "cannot multiply blocks of different domains "
                f"(sample_time_s {self.sample_time_s} and {other.sample_time_s})"
            )
        return Factored(
            np.concatenate([self.zeros, other.zeros]),
            np.concatenate([self.poles, other.poles]),
            self.gain * other.gain,
            self.delay_s + other.delay_s,
            self.sample_time_s,
        )

    def scaled(self, factor: float) -> Factored:
        return Factored(
            self.zeros, self.poles, self.gain * factor, self.delay_s, self.sample_time_s
        )

    def without_delay(self) -> Factored:
        return Factored(self.zeros, self.poles, self.gain, 0.0, self.sample_time_s)

    @staticmethod
    def unity(sample_time_s: float | None = None) -> Factored:
        return Factored([], [], 1.0, 0.0, sample_time_s)


@record(eq=False)
class StateSpace:
    """A SISO state-space block ``x' = A x + B u, y = C x + D u`` (s-plane).

    Shapes: ``a`` n x n, ``b`` n x 1, ``c`` 1 x n, ``d`` 1 x 1.
    """

    a: np.ndarray
    b: np.ndarray
    c: np.ndarray
    d: np.ndarray
    delay_s: float = 0.0

    def __post_init__(self) -> None:
        a = np.atleast_2d(np.asarray(self.a, dtype=float))
        n = a.shape[0]
        b = np.asarray(self.b, dtype=float).reshape(n, 1) if n else np.zeros((0, 1))
        c = np.asarray(self.c, dtype=float).reshape(1, n) if n else np.zeros((1, 0))
        d = np.asarray(self.d, dtype=float).reshape(1, 1)
        if a.shape != (n, n):
            raise ValueError(f"a must be square (n x n), got shape {a.shape}")
        for name, arr in (("a", a), ("b", b), ("c", c), ("d", d)):
            if not np.all(np.isfinite(arr)):
                raise ValueError(f"{name} must be finite")
        object.__setattr__(self, "a", a)
        object.__setattr__(self, "b", b)
        object.__setattr__(self, "c", c)
        object.__setattr__(self, "d", d)
        object.__setattr__(self, "delay_s", float(self.delay_s))

    @property
    def order(self) -> int:
        return self.a.shape[0]

    def to_factored(self) -> Factored:
        """Factored form: poles = eig(A), zeros = finite invariant zeros.

        The invariant zeros are the finite generalized eigenvalues of the
        Rosenbrock system pencil ``([[A, B], [C, D]], [[I, 0], [0, 0]])``
        (Emami-Naeini & Van Dooren, "Computation of zeros of linear
        multivariable systems", Automatica 18(4), 1982). The gain follows
        from one evaluation at a point away from every root. The pencil is
        balanced and deflated in numpy (:func:`ruleguard.models.matrices.siso_zeros`);
        the QZ algorithm of ``scipy.linalg`` is kept for the cases it declines.
        """
        from ruleguard.models.matrices import balance_scaling, siso_zeros

        n = self.order
        poles = np.linalg.eigvals(self.a) if n else np.zeros(0, complex)
        if n == 0:
            return Factored([], [], float(self.d[0, 0]), self.delay_s)
        m = np.block([[self.a, self.b], [self.c, self.d]])
        t = balance_scaling(m)  # a diagonal similarity keeps the zeros
        m = m * t[None, :] / t[:, None]
        radius = 1.0 + float(np.max(np.abs(poles), initial=1.0))
        gev = siso_zeros(m[:n, :n], m[:n, n], m[n, :n], m[n, n], radius)
        if gev is None:  # a delicate feedthrough or a zero output: the QZ algorithm
            import scipy.linalg  # lazy: rare

            e = np.zeros((n + 1, n + 1))
            e[:n, :n] = np.eye(n)
            with np.errstate(divide="ignore", invalid="ignore"):
                gev = scipy.linalg.eigvals(m, e)
        finite = np.isfinite(gev) & (np.abs(gev) < 1e12 * (1 + np.max(np.abs(poles), initial=1)))
        zeros = gev[finite]
        # Gain from the response at a probe point away from all roots.
        scale = 1.0 + float(np.max(np.abs(np.concatenate([poles, zeros])), initial=1.0))
        probe = complex(0.37 * scale, 1.13 * scale)
        h = complex(self.evaluate(probe).reshape(-1)[0]) * np.exp(probe * self.delay_s)
        shape = complex(Factored(zeros, poles, 1.0).evaluate(probe).reshape(-1)[0])
        if h == 0 or shape == 0:
            return Factored([], poles, 0.0, self.delay_s)
        gain = (h / shape).real
        return Factored(zeros, poles, gain, self.delay_s)

    def evaluate(self, x) -> np.ndarray:
        """Transfer function ``C (xI - A)^-1 B + D`` at complex points (delay included)."""
        x = np.atleast_1d(np.asarray(x, dtype=complex))
        n = self.order
        out = np.empty(x.shape, dtype=complex)
        eye = np.eye(n)
        for i, xi in np.ndenumerate(x):
            if n:
                val = (self.c @ np.linalg.solve(xi * eye - self.a, self.b))[0, 0]
            else:
                val = 0.0
            out[i] = val + self.d[0, 0]
        if self.delay_s:
            out = out * np.exp(-x * self.delay_s)
        return out


def factored_to_state_space(block: Factored) -> StateSpace:
    """A real state-space realization of a proper rational block (delay dropped).

    Built as a series connection of real first- and second-order sections,
    one per real root or conjugate pair, so that no high-order polynomial is
    formed (the cascade form of Oppenheim & Schafer, Discrete-Time Signal
    Processing, 3rd ed., 2010, section 6.3.2; used here in either domain).
    """
    if not block.is_proper:
        raise ValueError("an improper block has no state-space realization")
    sections = _real_sections(block)
    a = np.zeros((0, 0))
    b = np.zeros((0, 1))
    c = np.zeros((1, 0))
    d = np.array([[block.gain]])
    for num, den in sections:
        sa, sb, sc, sd = _section_realization(num, den)
        # series: previous (a, b, c, d) followed by section (sa, sb, sc, sd)
        n1, n2 = a.shape[0], sa.shape[0]
        na = np.zeros((n1 + n2, n1 + n2))
        na[:n1, :n1] = a
        na[n1:, :n1] = sb @ c
        na[n1:, n1:] = sa
        nb = np.vstack([b, sb @ d])
        nc = np.hstack([sd @ c, sc])
        nd = sd @ d
        a, b, c, d = na, nb, nc, nd
    return StateSpace(a, b, c, d, block.delay_s)


def _pair_roots(roots: np.ndarray) -> tuple[list[float], list[complex]]:
    """Split conjugate-symmetric roots into real roots and upper-half pair members."""
    roots = np.asarray(roots, dtype=complex)
    tol = 1e-9
    real = [float(r.real) for r in roots if abs(r.imag) <= tol * max(1.0, abs(r))]
    upper = [complex(r) for r in roots if r.imag > tol * max(1.0, abs(r))]
    lower = [complex(r) for r in roots if r.imag < -tol * max(1.0, abs(r))]
    if len(upper) != len(lower):
        raise ValueError("roots are not conjugate-symmetric")
    return real, upper


def _real_sections(block: Factored) -> list[tuple[np.ndarray, np.ndarray]]:
    """Monic real (numerator, denominator) sections of degree <= 2 whose product is the block."""
    zr, zc = _pair_roots(block.zeros)
    pr, pc = _pair_roots(block.poles)
    zero_lins = [np.array([1.0, -r]) for r in zr]
    zero_quads = [np.array([1.0, -2 * z.real, abs(z) ** 2]) for z in zc]
    pole_lins = [np.array([1.0, -r]) for r in pr]
    pole_quads = [np.array([1.0, -2 * p.real, abs(p) ** 2]) for p in pc]
    # Numerator degree may never exceed denominator degree in a section: a
    # complex zero pair needs a quadratic denominator, so when zero pairs
    # outnumber pole pairs, two real poles make one quadratic section (always
    # possible for a proper block).
    while len(pole_quads) < len(zero_quads) and len(pole_lins) >= 2:
        pole_quads.append(np.polymul(pole_lins.pop(), pole_lins.pop()))
    if len(pole_quads) < len(zero_quads) or (
        2 * len(zero_quads) + len(zero_lins) > 2 * len(pole_quads) + len(pole_lins)
    ):
        raise ValueError("an improper block has no state-space realization")
    sections: list[tuple[np.ndarray, np.ndarray]] = []
    for den in pole_quads:
        if zero_quads:
            num = zero_quads.pop()
        else:
            num = np.array([1.0])
            for _ in range(2):
                if zero_lins:
                    num = np.polymul(num, zero_lins.pop())
        sections.append((num, den))
    for den in pole_lins:
        sections.append((zero_lins.pop() if zero_lins else np.array([1.0]), den))
    if zero_lins or zero_quads:
        raise ValueError("an improper block has no state-space realization")
    return sections


def _section_realization(num: np.ndarray, den: np.ndarray):
    """Controllable canonical realization of a proper section num/den (den monic, degree <= 2)."""
    n = len(den) - 1
    num = np.concatenate([np.zeros(n + 1 - len(num)), num])
    d0 = num[0]
    # strictly proper remainder: num - d0 * den
    rem = num - d0 * den
    if n == 1:
        a = np.array([[-den[1]]])
        b = np.array([[1.0]])
        c = np.array([[rem[1]]])
    else:
        a = np.array([[0.0, 1.0], [-den[2], -den[1]]])
        b = np.array([[0.0], [1.0]])
        c = np.array([[rem[2], rem[1]]])
    return a, b, c, np.array([[d0]])


@record(eq=False)
class MeasuredResponse:
    """A tabulated frequency response (a measured plant).

    Values between points are interpolated linearly in log-frequency on dB
    magnitude and unwrapped phase (FORMATS.md section 2). Nothing is
    extrapolated above the highest frequency; below the lowest the response
    is taken to behave like ``c / s**integrators`` (used to close the contour).

    Parameters
    ----------
    w:
        Increasing frequencies in rad/s (all > 0).
    magnitude_db, phase_deg:
        Magnitude in dB and unwrapped phase in degrees at ``w``.
    unstable_poles:
        Open-loop poles in the right half-plane, as declared by the user.
    integrators:
        Low-frequency slope: the response behaves like ``c / s**k``.
    """

    w: np.ndarray
    magnitude_db: np.ndarray
    phase_deg: np.ndarray
    unstable_poles: int = 0
    integrators: int = 0
    source: str = ""
    notes: tuple[str, ...] = field(default=())

    def __post_init__(self) -> None:
        w = np.asarray(self.w, dtype=float).reshape(-1)
        mag = np.asarray(self.magnitude_db, dtype=float).reshape(-1)
        ph = np.asarray(self.phase_deg, dtype=float).reshape(-1)
        if not (w.shape == mag.shape == ph.shape) or w.size < 2:
            raise ValueError("w, magnitude_db and phase_deg need the same length >= 2")
        if np.any(w <= 0) or np.any(np.diff(w) <= 0):
            raise ValueError("frequencies must be positive and strictly increasing")
        object.__setattr__(self, "w", w)
        object.__setattr__(self, "magnitude_db", mag)
        object.__setattr__(self, "phase_deg", ph)

    @property
    def w_min(self) -> float:
        return float(self.w[0])

    @property
    def w_max(self) -> float:
        return float(self.w[-1])

    def grid(self) -> np.ndarray:
        """The measured frequencies (rad/s)."""
        return self.w

    def response(self, w) -> np.ndarray:
        """Interpolated response at ``w`` rad/s.

        Below ``w_min`` the value follows ``c / (j w)**integrators`` matched at
        ``w_min`` (so the curve closes as the declared integrators say);
        above ``w_max`` the result is NaN (nothing is extrapolated).
        """
        w = np.asarray(w, dtype=float)
        lw = np.log(np.maximum(w, 1e-300))
        lgrid = np.log(self.w)
        mag = np.interp(lw, lgrid, self.magnitude_db)
        ph = np.interp(lw, lgrid, self.phase_deg)
        below = w < self.w[0]
        if np.any(below):
            k = self.integrators
            ratio = np.where(below, self.w[0] / np.maximum(w, 1e-300), 1.0)
            mag = np.where(below, self.magnitude_db[0] + 20.0 * k * np.log10(ratio), mag)
            ph = np.where(below, self.phase_deg[0], ph)
        out = 10.0 ** (mag / 20.0) * np.exp(1j * np.deg2rad(ph))
        return np.where(w > self.w[-1] * (1 + 1e-12), np.nan + 0j, out)
