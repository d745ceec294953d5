"""Sampled-data models: controller discretization, exact ZOH plants, hold factors.

Controller and filter blocks designed in the s-plane are mapped to the
z-plane by the substitution the firmware's difference equations implement
(:func:`discretize_block`). A plant with its sensor and transport delay,
seen through a zero-order hold and a sampler, is replaced by its exact
zero-order-hold equivalent (:func:`zoh_equivalent`), computed from the matrix
exponential of a state-space realization, with a fractional delay handled
exactly by state augmentation (the modified z-transform). Blocks known only
through their frequency response use :class:`HoldFactor` and
:class:`DelayFactor`.

Every mapping works on the factored form (zeros, poles, gain): no polynomial
is ever multiplied out, so high orders and widely spread roots keep their
accuracy (METHODS.md "Representation").

References
----------
.. [FPW] G. F. Franklin, J. D. Powell, M. L. Workman, *Digital Control of
   Dynamic Systems*, 3rd ed., Addison-Wesley, 1998 (ch. 4 pole-zero mapping
   of the substitution rules, ch. 6 ZOH equivalents and delays).
.. [AW] K. J. Astrom, B. Wittenmark, *Computer-Controlled Systems: Theory and
   Design*, 3rd ed., Prentice Hall, 1997 (section 2.3 sampling of systems
   with time delay, ch. 8 approximating continuous-time controllers).
.. [VL] C. F. Van Loan, "Computing integrals involving the matrix
   exponential", IEEE Trans. Automatic Control 23(3), 1978.
.. [EV] A. Emami-Naeini, P. Van Dooren, "Computation of zeros of linear
   multivariable systems", Automatica 18(4), 1982.
"""

from __future__ import annotations

import math
import warnings
from dataclasses import field

import numpy as np

from ruleguard.errors import NumericalWarning
from ruleguard.frozen import record
from ruleguard.models.lti import Factored, StateSpace

#: Methods accepted by :func:`discretize_block`.
DISCRETIZATION_METHODS = ("tustin", "tustin_prewarp", "backward_euler", "forward_euler")

#: A delay whose fractional part (in samples) lies within this distance of an
#: integer is taken as that integer: it only absorbs the floating-point noise
#: of ``delay_s / sample_time_s`` (e.g. ``0.003 / 0.001 = 2.9999999999999996``).
#: At the Nyquist frequency it is a phase of at most ``pi * 1e-9`` rad.
DELAY_SNAP_SAMPLES = 1e-9

#: Generalized eigenvalues of the discrete system pencil with a modulus above
#: ``ZERO_INFINITY_RATIO * (1 + max |pole|)`` are taken as zeros at infinity.
#: Dropping a finite zero that large changes the response on the unit circle
#: by at most about ``2 / ZERO_INFINITY_RATIO`` relative (the gain is refitted).
ZERO_INFINITY_RATIO = 1e10


# --------------------------------------------------------------------------
# Substitution rules (Tustin, prewarped Tustin, backward and forward Euler)
# --------------------------------------------------------------------------
def tustin_constant(sample_time_s: float, prewarp_rad_s: float | None = None) -> float:
    """The constant ``c`` of the bilinear substitution ``s = c (z - 1)/(z + 1)``.

    ``c = 2/h`` for plain Tustin; with prewarping at ``w0``,
    ``c = w0 / tan(w0 h / 2)``, so that the discrete block at ``e^{j w0 h}``
    equals the continuous block at ``j w0`` exactly.

    Parameters
    ----------
    sample_time_s:
        Sample period h (s).
    prewarp_rad_s:
        Prewarping frequency ``w0`` (rad/s), strictly between 0 and the
        Nyquist frequency ``pi/h``; ``None`` for plain Tustin.

    References
    ----------
    Franklin, Powell & Workman, Digital Control of Dynamic Systems, 3rd ed.,
    1998, section 6.3.2 (bilinear rule with prewarping).
    """
    h = _check_sample_time(sample_time_s)
    if prewarp_rad_s is None:
        return 2.0 / h
    w0 = float(prewarp_rad_s)
    if not (np.isfinite(w0) and 0.0 < w0 < math.pi / h):
        raise ValueError(
            f"prewarp frequency {w0} rad/s must lie strictly between 0 and the "
            f"Nyquist frequency {math.pi / h} rad/s"
        )
    return w0 / math.tan(0.5 * w0 * h)


def discretize_block(
    block: Factored,
    method: str,
    sample_time_s: float,
    prewarp_rad_s: float | None = None,
) -> Factored:
    """Map a continuous controller or filter block to the z-plane.

    Each factor ``(s - q)`` of the block is substituted individually, so the
    result is again in factored form. With a substitution
    ``s = (alpha z + beta) / (gamma z + delta)`` a factor becomes

    ``s - q = a_q (z - r_q) / (gamma z + delta)``

    with a root ``r_q`` and a coefficient ``a_q``; the denominators
    ``(gamma z + delta)`` of all factors cancel except for
    ``(number of poles - number of zeros)`` of them, which become extra zeros
    (a strictly proper block) or extra poles (an improper block). The gain is
    matched exactly: ``K_d = K prod(a_zeros) / prod(a_poles)``.

    * ``"tustin"``: ``s = c (z - 1)/(z + 1)``, ``c = 2/h``. Then
      ``s - q = ((c - q) z - (c + q)) / (z + 1)``, so ``a_q = c - q``,
      ``r_q = (c + q)/(c - q)``; excess poles give zeros at ``z = -1`` and an
      improper block (an unfiltered derivative) gets poles at ``z = -1``. A
      root at ``q = c`` maps to ``z = infinity``: its factor is the constant
      ``-2c`` and it has no finite root.
    * ``"tustin_prewarp"``: the same with ``c = w0 / tan(w0 h / 2)``
      (:func:`tustin_constant`); ``prewarp_rad_s`` is required.
    * ``"backward_euler"``: ``s = (z - 1)/(z h)``. Then
      ``s - q = ((1 - q h)/h) (z - 1/(1 - q h)) / z``: ``a_q = (1 - q h)/h``,
      ``r_q = 1/(1 - q h)``; excess poles give zeros at ``z = 0``, an improper
      block gets poles at ``z = 0`` (so ``kd s`` becomes
      ``kd (z - 1)/(h z)``, a causal difference). A root at ``q = 1/h`` has
      the constant factor ``-1/h``.
    * ``"forward_euler"``: ``s = (z - 1)/h``. Then
      ``s - q = (z - (1 + q h))/h``: ``a_q = 1/h``, ``r_q = 1 + q h``; the
      numbers of zeros and poles are kept, so an improper block stays
      improper (non-causal) and the caller must say so.

    Parameters
    ----------
    block:
        Continuous block (``sample_time_s is None``) without transport delay.
    method:
        One of :data:`DISCRETIZATION_METHODS`.
    sample_time_s:
        Sample period h (s).
    prewarp_rad_s:
        Prewarping frequency (rad/s) for ``"tustin_prewarp"`` (required
        there, rejected for the other methods). FORMATS.md section 3 says a
        block without a prewarping frequency gets plain ``"tustin"``: the
        caller chooses, so that the method reported is the method used.

    Returns
    -------
    Factored
        The z-plane block, ``sample_time_s = h``.

    Raises
    ------
    ValueError
        Unknown method, a z-plane block, a block with transport delay, a
        missing or misplaced prewarping frequency, or a prewarping frequency
        at or above the Nyquist frequency.

    References
    ----------
    Franklin, Powell & Workman, Digital Control of Dynamic Systems, 3rd ed.,
    1998, section 6.3 (numerical-integration equivalents: forward and
    backward rectangular rules, bilinear rule, prewarping).
    Astrom & Wittenmark, Computer-Controlled Systems, 3rd ed., 1997,
    section 8.2 (approximations of continuous-time controllers).
    """
    if not isinstance(block, Factored):
        raise TypeError(f"block must be a Factored, got {type(block).__name__}")
    if block.is_discrete:
        raise ValueError("discretize_block needs a continuous (s-plane) block")
    if block.delay_s:
        raise ValueError(
            "a controller block with a transport delay cannot be discretized by substitution; "
            "use zoh_equivalent for delayed plants"
        )
    h = _check_sample_time(sample_time_s)
    if method not in DISCRETIZATION_METHODS:
        raise ValueError(
            f"unknown discretization method {method!r}; expected one of "
            + ", ".join(DISCRETIZATION_METHODS)
        )
    if method == "tustin_prewarp":
        if prewarp_rad_s is None:
            raise ValueError(
                "method 'tustin_prewarp' needs prewarp_rad_s (a block without a prewarping "
                "frequency is discretized by plain 'tustin')"
            )
    elif prewarp_rad_s is not None:
        raise ValueError(f"prewarp_rad_s is only used by 'tustin_prewarp', not by {method!r}")

    if method in ("tustin", "tustin_prewarp"):
        c = tustin_constant(h, prewarp_rad_s)

        def factor(q: np.ndarray):
            return c - q, -(c + q), -1.0  # a z + b = (c - q) z - (c + q); common root z = -1

        def degenerate(q: np.ndarray) -> np.ndarray:
            return -(c + q)

        scale = c
    elif method == "backward_euler":

        def factor(q: np.ndarray):
            return (1.0 - q * h) / h, -np.ones_like(q) / h, 0.0

        def degenerate(q: np.ndarray) -> np.ndarray:
            return -np.ones_like(q) / h

        scale = 1.0 / h
    else:  # forward_euler

        def factor(q: np.ndarray):
            return np.full_like(q, 1.0 / h), -(1.0 + q * h) / h, None

        def degenerate(q: np.ndarray) -> np.ndarray:  # never used: a_q = 1/h != 0
            return -(1.0 + q * h) / h

        scale = 1.0 / h

    zr, za, zconst, common = _map_roots(block.zeros, factor, degenerate, scale)
    pr, pa, pconst, _ = _map_roots(block.poles, factor, degenerate, scale)
    excess = block.poles.size - block.zeros.size
    extra = np.zeros(0, complex)
    if common is not None and excess:
        extra = np.full(abs(excess), common, dtype=complex)
    zeros = np.concatenate([zr, extra]) if excess > 0 else zr
    poles = np.concatenate([pr, extra]) if excess < 0 else pr
    gain = block.gain * _ratio_of_products(
        np.concatenate([za, zconst]), np.concatenate([pa, pconst])
    )
    return Factored(zeros, poles, gain, 0.0, h)


def _map_roots(roots: np.ndarray, factor, degenerate, scale: float):
    """Roots, coefficients and constant factors of ``(s - q)`` under a substitution."""
    q = np.asarray(roots, dtype=complex)
    if q.size == 0:
        empty = np.zeros(0, complex)
        _, _, common = factor(np.zeros(0, complex))
        return empty, empty, empty, common
    a, b, common = factor(q)
    a = np.asarray(a, dtype=complex)
    b = np.asarray(b, dtype=complex)
    # a root at q = c (Tustin) or q = 1/h (backward Euler) goes to z = infinity
    at_infinity = np.abs(a) <= 1e-14 * (scale + np.abs(q))
    if not at_infinity.any():  # the usual case: every root stays finite
        return -b / a, a, degenerate(q[:0]), common
    finite = ~at_infinity
    mapped = -b[finite] / a[finite]
    return mapped, a[finite], degenerate(q[at_infinity]), common


def _ratio_of_products(num: np.ndarray, den: np.ndarray) -> float:
    """``prod(num) / prod(den)`` for conjugate-symmetric factors, as a real number.

    Factors are paired one numerator with one denominator so that high orders
    neither overflow nor underflow.
    """
    num = np.asarray(num, dtype=complex)
    den = np.asarray(den, dtype=complex)
    out = complex(1.0)
    for i in range(max(num.size, den.size)):
        if i < num.size and i < den.size:
            out *= num[i] / den[i]
        elif i < num.size:
            out *= num[i]
        else:
            out /= den[i]
    if abs(out.imag) > 1e-8 * max(abs(out), 1e-300):
        raise ValueError("roots are not conjugate-symmetric: the discretized gain is not real")
    return float(out.real)


def prewarp_shift(center_hz: float, sample_rate_hz: float) -> float:
    """Where plain Tustin puts a feature designed at ``center_hz`` (Hz).

    The bilinear substitution with ``c = 2/h`` maps the continuous frequency
    ``w`` to the discrete frequency ``w_d = (2/h) atan(w h / 2)``: a notch
    designed at ``f`` appears at ``f_d = (f_s/pi) atan(pi f / f_s)``, always
    lower, and the shift grows quickly towards the Nyquist frequency.

    Parameters
    ----------
    center_hz:
        Design frequency of the feature (Hz), >= 0.
    sample_rate_hz:
        Sample rate f_s = 1/h (Hz), > 0.

    Returns
    -------
    float
        The frequency (Hz) where the discretized block shows the feature.

    References
    ----------
    Franklin, Powell & Workman, Digital Control of Dynamic Systems, 3rd ed.,
    1998, section 6.3.2 (frequency warping of the bilinear rule).
    """
    f = float(center_hz)
    fs = float(sample_rate_hz)
    if not (np.isfinite(fs) and fs > 0.0):
        raise ValueError(f"sample_rate_hz must be positive, got {fs}")
    if not (np.isfinite(f) and f >= 0.0):
        raise ValueError(f"center_hz must be finite and >= 0, got {f}")
    return fs / math.pi * math.atan(math.pi * f / fs)


# --------------------------------------------------------------------------
# Exact zero-order-hold equivalent with transport delay
# --------------------------------------------------------------------------
@record(eq=False)
class DiscreteStateSpace:
    """A discrete SISO realization ``x[k+1] = A x[k] + B u[k], y[k] = C x[k] + D u[k]``.

    Produced by :func:`zoh_state_space`. Shapes: ``a`` n x n, ``b`` n x 1,
    ``c`` 1 x n, ``d`` 1 x 1. The whole-sample delay is kept apart
    (``delay_samples``: ``H(z) = z^-d (C (zI - A)^-1 B + D)``).
    """

    a: np.ndarray
    b: np.ndarray
    c: np.ndarray
    d: np.ndarray
    sample_time_s: float
    delay_samples: int = 0
    #: ``a - I`` computed without cancellation (``A int_0^h e^{As} ds`` for a
    #: ZOH equivalent); ``None`` means ``a - I`` formed directly.
    a_minus_identity: np.ndarray | None = None

    @property
    def order(self) -> int:
        return self.a.shape[0]

    def shifted_a(self) -> np.ndarray:
        """``a - I`` (accurate when ``a`` has eigenvalues near ``z = 1``)."""
        if self.a_minus_identity is not None:
            return self.a_minus_identity
        return self.a - np.eye(self.order)

    def evaluate(self, z) -> np.ndarray:
        """Transfer function at complex points ``z`` (whole-sample delay included)."""
        z = np.atleast_1d(np.asarray(z, dtype=complex))
        return self._evaluate(z, z - 1.0)

    def response(self, w) -> np.ndarray:
        """Frequency response at ``w`` rad/s (``z = exp(j w h)``)."""
        x = 1j * np.atleast_1d(np.asarray(w, dtype=float)) * self.sample_time_s
        return self._evaluate(np.exp(x), np.expm1(x))

    def _evaluate(self, z: np.ndarray, z_minus_1: np.ndarray) -> np.ndarray:
        """``C ((z - 1) I - (A - I))^-1 B + D``: accurate near ``z = 1`` too."""
        flat = z.reshape(-1)
        shift = z_minus_1.reshape(-1)
        n = self.order
        if n:
            # one batched solve of ((z_k - 1) I - (A - I)) x_k = B for all points
            mats = shift[:, None, None] * np.eye(n) - self.shifted_a()[None, :, :]
            rhs = np.broadcast_to(self.b.astype(complex), (flat.size, n, 1))
            x = np.linalg.solve(mats, rhs)
            vals = (self.c.astype(complex) @ x)[:, 0, 0]
        else:
            vals = np.zeros(flat.size, dtype=complex)
        out = (vals + self.d[0, 0]) * flat ** (-self.delay_samples)
        return out.reshape(z.shape)

    def pulse_response(self, samples: int) -> np.ndarray:
        """Output samples ``y[0..samples-1]`` for the unit pulse ``u[0] = 1``."""
        n = self.order
        y = np.zeros(samples)
        x = self.b[:, 0].copy() if n else np.zeros(0)
        d = self.delay_samples
        if d < samples:
            y[d] = self.d[0, 0]
        for k in range(d + 1, samples):
            y[k] = float(self.c[0] @ x) if n else 0.0
            x = self.a @ x
        return y


def split_delay(delay_s: float, sample_time_s: float) -> tuple[int, float]:
    """Split a delay into whole samples ``d`` and a fraction ``f`` in ``[0, 1)``.

    ``delay_s = (d + f) h``. A fraction within :data:`DELAY_SNAP_SAMPLES` of 0
    or 1 is floating-point noise and is taken as 0 (with ``d`` adjusted).
    """
    h = _check_sample_time(sample_time_s)
    tau = float(delay_s)
    if not (np.isfinite(tau) and tau >= 0.0):
        raise ValueError(f"delay must be finite and >= 0, got {tau}")
    samples = tau / h
    d = math.floor(samples)
    f = samples - d
    if f >= 1.0 - DELAY_SNAP_SAMPLES:
        d, f = d + 1, 0.0
    elif f <= DELAY_SNAP_SAMPLES:
        f = 0.0
    return int(d), float(f)


def zoh_state_space(
    block: Factored | StateSpace, sample_time_s: float, delay_s: float = 0.0
) -> DiscreteStateSpace:
    """Exact discrete realization of hold -> block (with delay) -> sampler.

    Let the total delay be ``tau = (d + f) h`` with whole samples ``d`` and a
    fraction ``0 <= f < 1`` (:func:`split_delay`), ``tau' = f h``. With the
    input held, ``u(t) = u[k]`` on ``[kh, (k+1)h)``, the state of
    ``x' = A x + B u(t - tau)`` obeys ([AW] section 2.3)

    ``x[k+1] = Phi x[k] + Gamma1 u[k-1-d] + Gamma0 u[k-d]``

    ``Phi = e^{A h}``, ``Gamma0 = int_0^{h - tau'} e^{A s} ds B``,
    ``Gamma1 = e^{A (h - tau')} int_0^{tau'} e^{A s} ds B``,

    and ``y[k] = C x[k] + D u(kh - tau) = C x[k] + D u[k-1-d]`` when
    ``f > 0`` (``D u[k-d]`` when ``f = 0``). The integrals come from one
    block-matrix exponential per interval ([VL]):
    ``expm([[A, I, B], [0, 0, 0], [0, 0, 0]] t)`` holds ``e^{A t}``,
    ``Psi(t) = int_0^t e^{A s} ds`` and ``Psi(t) B``; ``Phi - I = A Psi(h)``
    is kept as well (``a_minus_identity``), free of the cancellation of
    ``e^{A h} - I`` for slow modes. For ``f > 0`` the state is augmented with
    ``u[k-1]``, which adds a pole at ``z = 0``; the ``d`` whole samples are
    kept as ``delay_samples``. Nothing is rounded and no rational
    approximation of the delay is used. A Factored block is realised by
    :func:`scaled_cascade_realization`; a StateSpace block is balanced by a
    diagonal similarity first.

    Parameters
    ----------
    block:
        Continuous proper block (Factored or StateSpace); its own ``delay_s`` is
        part of the total delay.
    sample_time_s:
        Sample period h (s).
    delay_s:
        Further delay (s) in series (sensor, computation: FORMATS.md section 1).

    References
    ----------
    Astrom & Wittenmark, Computer-Controlled Systems, 3rd ed., 1997,
    section 2.3 (sampling a system with a time delay).
    Franklin, Powell & Workman, Digital Control of Dynamic Systems, 3rd ed.,
    1998, section 4.3.4 (ZOH equivalent with fractional delay, modified
    z-transform).
    Van Loan, "Computing integrals involving the matrix exponential", IEEE
    Trans. Automatic Control 23(3), 1978.
    """
    from ruleguard.models.matrices import expm  # numpy only: no scipy import

    h = _check_sample_time(sample_time_s)
    ss, own_delay = _as_state_space(block)
    d, f = split_delay(own_delay + float(delay_s), h)
    a, b, c, dd = ss.a, ss.b, ss.c, ss.d
    n = a.shape[0]
    # expm([[A, I, B], [0, 0, 0], [0, 0, 0]] t) holds e^{At}, Psi(t) =
    # int_0^t e^{As} ds and Psi(t) B; Phi - I = A Psi(h) without cancellation.
    m = np.zeros((2 * n + 1, 2 * n + 1))
    m[:n, :n] = a
    m[:n, n : 2 * n] = np.eye(n)
    m[:n, 2 * n :] = b

    def blocks(t: float):
        e = expm(m * t)
        return e[:n, :n], e[:n, n : 2 * n], e[:n, 2 * n :]

    if f == 0.0:
        phi, psi, gamma = blocks(h)
        return DiscreteStateSpace(phi, gamma, c, dd, h, d, a @ psi)
    t_frac = f * h
    phi_rest, psi_rest, gamma0 = blocks(h - t_frac)
    phi_frac, psi_frac, int_frac = blocks(t_frac)
    phi = phi_rest @ phi_frac
    gamma1 = phi_rest @ int_frac
    ad = np.zeros((n + 1, n + 1))
    ad[:n, :n] = phi
    ad[:n, n:] = gamma1
    shifted = ad - np.eye(n + 1)
    # Psi(h) = Psi(h - tau') + e^{A (h - tau')} Psi(tau')
    shifted[:n, :n] = a @ (psi_rest + phi_rest @ psi_frac)
    bd = np.zeros((n + 1, 1))
    bd[:n] = gamma0
    bd[n, 0] = 1.0
    cd = np.hstack([c, dd])
    return DiscreteStateSpace(ad, bd, cd, np.zeros((1, 1)), h, d, shifted)


def zoh_equivalent(
    block: Factored | StateSpace, sample_time_s: float, delay_s: float = 0.0
) -> Factored:
    """Exact zero-order-hold equivalent of a continuous block with transport delay.

    The discrete realization of :func:`zoh_state_space` is put in factored
    form:

    * poles: ``exp(p h)`` for every continuous pole ``p`` (these are the
      eigenvalues of ``Phi = e^{A h}``, taken from the continuous poles so
      that repeated poles such as a double integrator stay exactly at
      ``z = 1``), a pole at ``z = 0`` for a fractional delay, and ``d``
      poles at ``z = 0`` for the whole samples;
    * zeros: the finite generalized eigenvalues of the discrete system
      pencil ``([[Phi, Gamma], [C, D]], [[I, 0], [0, 0]])`` ([EV]);
    * gain: fitted (real, least squares) to the realization's response at
      points on the unit circle away from every root.

    The realization is a well-scaled modal cascade
    (:func:`scaled_cascade_realization`) and the zeros are computed in the
    delta form (:func:`discrete_zeros`); measured against a 50-digit modal
    computation the response of plants of order 50 agrees to about 1e-11
    relative (tests/test_discretize.py).

    Parameters
    ----------
    block:
        Continuous proper block (Factored or StateSpace), delay included.
    sample_time_s:
        Sample period h (s).
    delay_s:
        Further delay in series (s): sensor, computation (``delay_samples * h``).

    Returns
    -------
    Factored
        z-plane block with ``sample_time_s = h``.

    Warns
    -----
    NumericalWarning
        When the factored form does not reproduce the realization's response
        to within 1e-5 relative at the fitting points.

    References
    ----------
    Astrom & Wittenmark, Computer-Controlled Systems, 3rd ed., 1997,
    sections 2.3 and 2.6 (poles and zeros of sampled systems).
    Franklin, Powell & Workman, Digital Control of Dynamic Systems, 3rd ed.,
    1998, section 4.3.
    Emami-Naeini & Van Dooren, "Computation of zeros of linear multivariable
    systems", Automatica 18(4), 1982.

    Notes
    -----
    The equivalent of a :class:`Factored` block is remembered per process by
    exact content (its roots' bytes, gain, delay, ``h`` and ``delay_s``): an
    equal block asks again for the same (frozen) result, with the warnings of
    the first computation raised again.
    """
    h = _check_sample_time(sample_time_s)
    if isinstance(block, Factored):
        from ruleguard.memo import remembered

        key = (*block.content_key(), h.hex(), float(delay_s).hex())
        return remembered(_HOLDS, _HOLDS_MAX, key, _zoh_equivalent, block, h, delay_s)
    return _zoh_equivalent(block, h, delay_s)


#: Zero-order-hold equivalents computed in this process (content key ->
#: result, :mod:`ruleguard.memo`): a cascade builds its inner loops again in
#: every variant of every outer loop, and a family's variants share most of
#: their plants (the demo's tilt axis asks for 38 holds of 10 distinct blocks).
_HOLDS: dict = {}
_HOLDS_MAX = 256


def _zoh_equivalent(block: Factored | StateSpace, h: float, delay_s: float) -> Factored:
    if isinstance(block, Factored):
        fast = _modal_equivalent(block, h, delay_s)
        if fast is not None:
            return fast
    dss = zoh_state_space(block, h, delay_s)
    if isinstance(block, Factored):
        cont_poles = block.poles
    else:
        cont_poles = np.linalg.eigvals(block.a) if block.order else np.zeros(0, complex)
    poles = np.exp(np.asarray(cont_poles, dtype=complex) * h)
    augmented = dss.order - np.asarray(cont_poles).size
    poles = np.concatenate([poles, np.zeros(augmented + dss.delay_samples, complex)])
    if not np.any(dss.c) and dss.d[0, 0] == 0.0:
        return Factored([], poles, 0.0, 0.0, h)  # a zero block has no zeros to speak of
    zeros = discrete_zeros(dss)
    gain = _fit_gain(dss, zeros, poles)
    return Factored(zeros, poles, gain, 0.0, h)


def discrete_zeros(dss: DiscreteStateSpace, pole_radius: float | None = None) -> np.ndarray:
    """Finite invariant zeros of a discrete realization (whole-sample delay excluded).

    With ``z = 1 + h delta`` the transfer function is
    ``C (delta I - F)^-1 G + D``, ``F = (A - I)/h``, ``G = B/h`` (the delta
    form of Middleton & Goodwin). Its zeros are the finite generalized
    eigenvalues of the Rosenbrock pencil ``([[F, G], [C, D]], [[I, 0], [0, 0]])``
    ([EV]); eigenvalues with a modulus above :data:`ZERO_INFINITY_RATIO` times
    the scale of ``F`` are at infinity. Working in ``delta`` keeps zeros near
    ``z = 1`` (slow dynamics sampled fast) accurate: their distance from 1 is
    computed directly instead of as a small difference of numbers near 1.
    The result is made exactly conjugate-symmetric.

    The pencil is balanced and its infinite eigenvalues are deflated in numpy
    (:func:`ruleguard.models.matrices.siso_zeros`); only a feedthrough in the
    delicate range it declines, or a zero output, goes to the QZ algorithm of
    ``scipy.linalg``. ``pole_radius`` (``max |eig(F)|``) may be passed when
    the caller knows the poles, saving one eigenvalue computation.

    References
    ----------
    Emami-Naeini & Van Dooren, "Computation of zeros of linear multivariable
    systems", Automatica 18(4), 1982.
    R. H. Middleton, G. C. Goodwin, Digital Control and Estimation: A Unified
    Approach, Prentice Hall, 1990 (the delta operator).
    """
    n = dss.order
    if n == 0:
        return np.zeros(0, complex)
    h = dss.sample_time_s
    f = dss.shifted_a() / h
    pencil = np.empty((n + 1, n + 1))
    pencil[:n, :n] = f
    pencil[:n, n:] = dss.b / h
    pencil[n:, :n] = dss.c
    pencil[n, n] = dss.d[0, 0]
    if pole_radius is None:
        pole_radius = float(np.max(np.abs(np.linalg.eigvals(f)), initial=0.0))
    return _delta_pencil_zeros(pencil, h, pole_radius)


def _delta_pencil_zeros(pencil: np.ndarray, h: float, pole_radius: float) -> np.ndarray:
    """The discrete zeros ``1 + h delta`` from the delta-form pencil (:func:`discrete_zeros`)."""
    from ruleguard.models.matrices import balance_scaling, siso_zeros

    n = pencil.shape[0] - 1
    # a diagonal similarity leaves E = diag(I, 0) as it is: balance the
    # pencil (Parlett-Reinsch) so that fast and slow modes have like scales
    t = balance_scaling(pencil)
    if not (t == 1.0).all():  # (x * 1) / 1 is x: nothing to do for a balanced pencil
        pencil = pencil * t[None, :] / t[:, None]
    radius = 1.0 / h + pole_radius
    gev = siso_zeros(pencil[:n, :n], pencil[:n, n], pencil[n, :n], pencil[n, n], radius)
    if gev is None:  # a delicate feedthrough or a zero block: the QZ algorithm
        import scipy.linalg  # lazy: rare

        e = np.zeros((n + 1, n + 1))
        e[:n, :n] = np.eye(n)
        alpha, beta = scipy.linalg.eig(pencil, e, right=False, homogeneous_eigvals=True)
        finite = np.abs(alpha) < ZERO_INFINITY_RATIO * radius * np.abs(beta)
        gev = alpha[finite] / beta[finite]
    else:
        gev = gev[np.abs(gev) < ZERO_INFINITY_RATIO * radius]
    delta = _conjugate_symmetric(gev)
    return 1.0 + h * delta


def _conjugate_symmetric(roots: np.ndarray) -> np.ndarray:
    """Make nearly real roots real and pair the complex ones exactly.

    On Python complex numbers (a dozen roots: cheaper than numpy calls), with
    the operations numpy would do: the pair mean is the complex product
    ``0.5 * (u + conj(l))`` written out (``(0.5 re - 0 im, 0 re + 0.5 im)``),
    so the result is the same bit for bit; ``abs`` (``hypot``) is within an
    ulp of numpy's modulus, which only matters for an imaginary part within
    an ulp of the tolerance; the sort by real part is stable (equal real
    parts keep their order).
    """
    values = np.asarray(roots, dtype=complex).reshape(-1).tolist()
    tol = 1e-9
    real: list[complex] = []
    upper: list[complex] = []
    lower: list[complex] = []
    for r in values:
        bound = tol * max(abs(r), 1.0)
        im = r.imag
        if abs(im) <= bound:
            real.append(complex(r.real, 0.0))
        elif im > bound:
            upper.append(r)
        elif im < -bound:
            lower.append(r)
        # (a NaN fails every comparison and is dropped, as by the masks of numpy)
    if len(upper) != len(lower):
        # unpaired rounding: keep them as they are (the gain fit reports it)
        return np.asarray(roots, dtype=complex)
    upper.sort(key=_real_part)
    lower.sort(key=_real_part)
    paired = []
    for u, lo in zip(upper, lower, strict=True):
        sr = u.real + lo.real
        si = u.imag - lo.imag
        paired.append(complex(0.5 * sr - 0.0 * si, 0.0 * sr + 0.5 * si))
    return np.array(real + paired + [p.conjugate() for p in paired], dtype=complex)


def _real_part(r: complex) -> float:
    return r.real


_FIT_POINTS: tuple[np.ndarray, np.ndarray, np.ndarray] | None = None


def _fit_points() -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """``(theta, z, z - 1)`` of the gain fit, ``z = e^{j theta}`` (computed once, read-only).

    The points ``theta = w h`` run from near ``z = 1`` up to the Nyquist
    point; they do not depend on ``h``.
    """
    global _FIT_POINTS
    if _FIT_POINTS is None:
        theta = np.concatenate([np.geomspace(1e-7, 0.05, 120), np.linspace(0.05, math.pi, 200)])
        x = 1j * theta
        points = (theta, np.exp(x), np.expm1(x))
        for arr in points:
            arr.flags.writeable = False
        _FIT_POINTS = points
    return _FIT_POINTS


def _gain_and_misfit(h: float, zeros: np.ndarray, poles: np.ndarray, z: np.ndarray,
                     target: np.ndarray, mag: np.ndarray | None = None,
                     top: float | None = None) -> tuple[float, float, np.ndarray]:
    """Least-squares real gain, its largest relative misfit, and the points used (at ``z``).

    ``mag`` and ``top`` (``|target|`` and its largest value) may be passed
    when the caller has them.
    """
    with np.errstate(all="ignore"):
        shape = Factored(zeros, poles, 1.0, 0.0, h).evaluate(z)
    if mag is None or top is None:
        mag = np.abs(target)
        top = float(np.max(mag, initial=0.0))
    if top == 0.0:
        return 0.0, 0.0, np.zeros(z.shape, dtype=bool)
    keep = (mag >= 1e-6 * top) & np.isfinite(shape) & (np.abs(shape) > 0)
    if keep.all():
        ratio = shape / target  # every point: the same numbers as through the mask
    else:
        if not keep.any():
            keep = mag >= 0.5 * top
        ratio = shape[keep] / target[keep]
    gain = float(np.real(np.sum(np.conj(ratio))) / np.sum(np.abs(ratio) ** 2))
    resid = float(np.max(np.abs(gain * ratio - 1.0)))
    return gain, resid, keep


def _fit_gain(dss: DiscreteStateSpace, zeros: np.ndarray, poles: np.ndarray) -> float:
    """Real gain matching ``dss`` on the unit circle, in the relative sense.

    Candidate points run over the whole circle (geometrically spaced from
    near ``z = 1`` up to the Nyquist point); points where the realization's
    response is below 1e-6 of its largest value (deep roll-off, where double
    precision holds no digits) or that sit on a root are left out, and the
    gain minimises the relative misfit ``sum |g s_k / t_k - 1|^2`` over the
    rest (``s`` the factored shape, ``t`` the realization).
    """
    h = dss.sample_time_s
    _, z, z_minus_1 = _fit_points()
    target = dss._evaluate(z, z_minus_1)
    gain, resid, _ = _gain_and_misfit(h, zeros, poles, z, target)
    if not resid <= 1e-5:
        warnings.warn(
            f"zero-order-hold equivalent: the factored form reproduces the state-space "
            f"response only to {resid:.1e} relative",
            NumericalWarning,
            stacklevel=3,
        )
    return gain


def _modal_equivalent(block: Factored, h: float, delay_s: float) -> Factored | None:
    """The ZOH equivalent by sampled modes (:mod:`ruleguard.models.modal_hold`), or None.

    ``None`` (use the exponential of the augmented realization instead) when
    the poles are not distinct, when the modal sum amplifies rounding by more
    than :data:`~ruleguard.models.modal_hold.MODAL_AMPLIFICATION_LIMIT`, or
    when the factored result misses the modal sum by more than
    :data:`~ruleguard.models.modal_hold.MODAL_MISFIT_LIMIT`.
    """
    from ruleguard.models import modal_hold as mh

    if block.is_discrete or not block.is_proper or block.poles.size == 0:
        return None
    whole, fraction = split_delay(block.delay_s + float(delay_s), h)
    modes = mh.modal_hold(block, h, whole, fraction)
    if modes is None:
        return None
    _, z, z_minus_1 = _fit_points()
    target, amplification = modes.evaluate_with_amplification(z, z_minus_1)
    mag = np.abs(target)
    top = float(mag.max())  # (320 points, all >= 0: the maximum with initial=0)
    if not (top > 0.0 and math.isfinite(top)):
        return None
    # every point counts (also the deep roll-off): the zeros are computed from
    # the same numbers and must hold their digits where |H| is small too
    if not float(amplification.max()) <= mh.MODAL_AMPLIFICATION_LIMIT:
        return None
    poles = np.exp(block.poles * h)
    extra = int(modes.fraction) + whole
    if extra:
        poles = np.concatenate([poles, np.zeros(extra, complex)])
    # the eigenvalues of (A - I)/h are known: expm1(p h)/h, and -1/h for the delay state
    radius = float(np.abs(modes.lam_minus_one).max()) / h  # at least one pole
    if modes.fraction:
        radius = max(radius, 1.0 / h)
    zeros = _delta_pencil_zeros(modes.delta_pencil(), h, radius)
    gain, resid, _ = _gain_and_misfit(h, zeros, poles, z, target, mag, top)
    if not resid <= mh.MODAL_MISFIT_LIMIT:
        return None
    return Factored(zeros, poles, gain, 0.0, h)


def _as_state_space(block: Factored | StateSpace) -> tuple[StateSpace, float]:
    if isinstance(block, StateSpace):
        if block.order == 0:
            return block, block.delay_s
        from ruleguard.models.matrices import balance_scaling

        # diagonal similarity x = T x' (Parlett-Reinsch balancing) so that the
        # matrix exponential works on a matrix with rows and columns of like size
        scale = balance_scaling(block.a)
        a = block.a * scale[None, :] / scale[:, None]
        b = block.b / scale[:, None]
        c = block.c * scale[None, :]
        return StateSpace(a, b, c, block.d, block.delay_s), block.delay_s
    if isinstance(block, Factored):
        if block.is_discrete:
            raise ValueError("zoh_equivalent needs a continuous (s-plane) block")
        if not block.is_proper:
            raise ValueError("an improper block has no zero-order-hold equivalent")
        return scaled_cascade_realization(block), block.delay_s
    raise TypeError(f"block must be a Factored or StateSpace, got {type(block).__name__}")


# --------------------------------------------------------------------------
# Grouping roots into sections, and a well-scaled cascade realization
# --------------------------------------------------------------------------
def _split_conjugates(roots: np.ndarray) -> tuple[list[complex], list[float]]:
    """Upper-half members of conjugate pairs, and real roots (tolerance 1e-9 relative)."""
    roots = np.asarray(roots, dtype=complex)
    tol = 1e-9
    scale = np.maximum(np.abs(roots), 1e-300)
    upper = [complex(r) for r in roots[roots.imag > tol * scale]]
    lower = roots[roots.imag < -tol * scale]
    real = [float(r.real) for r in roots[np.abs(roots.imag) <= tol * scale]]
    if len(upper) != lower.size:
        raise ValueError("roots are not conjugate-symmetric")
    return upper, real


def boundary_distance(root: complex, discrete: bool) -> float:
    """How far a root lies from the stability boundary (0 on it).

    ``| 1 - |z| |`` in the z-plane; ``|Re s| / |s|`` (the damping ratio of a
    pole pair) in the s-plane, 0 for ``s = 0``.
    """
    if discrete:
        return abs(1.0 - abs(root))
    mag = abs(root)
    return 0.0 if mag == 0.0 else abs(root.real) / mag


def section_groups(
    zeros: np.ndarray, poles: np.ndarray, discrete: bool
) -> list[tuple[tuple[complex, ...], tuple[complex, ...]]]:
    """Group the roots of a proper real block into sections of order <= 2.

    The standard pairing for cascade realizations: poles are taken in order
    of closeness to the stability boundary (the most sensitive first); each
    conjugate pair forms a section, real poles are paired with the nearest
    remaining real pole (an odd one out, the real pole farthest from the
    boundary, forms a first-order section). Real poles on the boundary
    (``s = 0``; ``z = 1`` or ``z = -1``) form first-order sections of their
    own, as firmware accumulators do, unless complex zero pairs need them in
    a second-order section. Zeros (conjugate pairs, real zeros) are then
    placed one by one, each time the zero and section closest to each other
    (distance ``|z - p|`` in the z-plane, ``|z - p| / max(|z|, |p|)`` in the
    s-plane, so that a slow zero is not put with a fast pole), among the
    moves that leave the remaining zeros placeable; sections may keep fewer
    zeros than poles. Pairing each pole with its nearest zeros keeps every section's
    gain close to flat, which minimises the sensitivity of the realization to
    coefficient rounding and keeps the states of a cascade well scaled.

    Parameters
    ----------
    zeros, poles:
        Conjugate-symmetric roots, ``len(zeros) <= len(poles)``.
    discrete:
        Whether the roots are in the z-plane (for the boundary distance).

    Returns
    -------
    list of (zeros, poles)
        One entry per section, most sensitive first; each tuple holds full
        conjugate pairs (both members).

    References
    ----------
    L. B. Jackson, Digital Filters and Signal Processing, 3rd ed., Kluwer,
    1996, section 11.5 (pole-zero pairing and ordering of cascade sections).
    A. V. Oppenheim, R. W. Schafer, Discrete-Time Signal Processing, 3rd ed.,
    2010, section 6.9 (sensitivity of cascade forms to coefficient
    quantization).
    """
    zc, zr = _split_conjugates(zeros)
    pc, pr = _split_conjugates(poles)
    if 2 * len(zc) + len(zr) > 2 * len(pc) + len(pr):
        raise ValueError("an improper block cannot be split into proper sections")
    # ---- pole groups
    groups: list[tuple[complex, ...]] = [(p, p.conjugate()) for p in pc]
    # real poles on the boundary (integrators, z = -1) stand alone when the
    # complex zero pairs leave room, so that an accumulator is realised as
    # a1 = -1 exactly whatever the number format
    on_boundary = [r for r in pr if boundary_distance(complex(r), discrete) <= 1e-9]
    reals = [r for r in pr if boundary_distance(complex(r), discrete) > 1e-9]
    reals.sort(key=lambda r: boundary_distance(complex(r), discrete))
    singles: list[tuple[complex, ...]] = []
    if len(reals) % 2:
        singles.append((complex(reals.pop()),))  # farthest from the boundary stands alone
    while reals:
        first = reals.pop(0)
        k = int(np.argmin([abs(first - r) for r in reals]))
        groups.append((complex(first), complex(reals.pop(k))))
    singles = [(complex(r),) for r in on_boundary] + singles
    # complex zero pairs need second-order sections: merge singles if short
    while len(zc) > len(groups) and len(singles) >= 2:
        first, second = singles.pop(0), singles.pop(0)
        groups.append(first + second)
    groups = groups + singles
    groups.sort(key=lambda g: min(boundary_distance(r, discrete) for r in g))
    # ---- zero assignment: repeatedly the closest (zero, section) pair that
    # fits and leaves the remaining zeros placeable
    units: list[tuple[complex, ...]] = [(z, z.conjugate()) for z in zc] + [
        (complex(z),) for z in zr
    ]
    assigned: list[list[complex]] = [[] for _ in groups]
    cap = np.array([len(g) for g in groups])
    size = np.array([len(u) for u in units])
    cost = np.zeros((len(units), len(groups)))
    for ui, u in enumerate(units):
        z = u[0]
        for k, g in enumerate(groups):
            if discrete:
                cost[ui, k] = min(abs(z - p) for p in g)
            else:
                cost[ui, k] = min(abs(z - p) / max(abs(z), abs(p), 1e-300) for p in g)
    left = np.ones(len(units), dtype=bool)
    while left.any():
        # a move (unit u -> section k) must leave an untouched second-order
        # section for every conjugate zero pair still to place (the total
        # room always suffices: zeros never outnumber poles)
        pairs = int(np.count_nonzero(left & (size == 2)))
        free_doubles = int(np.count_nonzero(cap == 2))
        fits = (cap[None, :] >= size[:, None]) & left[:, None]
        pairs_after = pairs - (size == 2)[:, None]
        doubles_after = free_doubles - (cap == 2)[None, :]
        allowed = fits & (pairs_after <= doubles_after)
        if not allowed.any():  # pragma: no cover - the counts guarantee a move
            raise ValueError("could not pair zeros with poles")
        masked = np.where(allowed, cost, np.inf)
        ui, k = np.unravel_index(int(np.argmin(masked)), masked.shape)
        assigned[k].extend(units[ui])
        cap[k] -= size[ui]
        left[ui] = False
    order = sorted(
        range(len(groups)), key=lambda k: min(boundary_distance(r, discrete) for r in groups[k])
    )
    return [(tuple(assigned[k]), groups[k]) for k in order]


def scaled_cascade_realization(block: Factored) -> StateSpace:
    """A well-scaled real state-space realization of a proper s-plane block.

    A cascade of sections (:func:`section_groups`, each pole pair with its
    nearest zeros) in which every section is realised in real modal form
    (``[[sigma, omega], [-omega, sigma]]`` for a pair ``sigma +/- j omega``,
    ``[[p1, m], [0, p2]]`` with ``m = max |p|`` for two real poles, equal or
    not), so that no entry grows like ``omega^2`` as in a companion
    form. Each section is normalised to unit gain at ``s = |p|`` and its
    input and output vectors are balanced; the block's gain is applied at
    the output. The matrix exponential of such a realization stays accurate
    for orders of 50 and more, where a companion-form cascade loses all
    digits (its matrix is far from normal).

    References
    ----------
    Oppenheim & Schafer, Discrete-Time Signal Processing, 3rd ed., 2010,
    section 6.3 (cascade forms); C. Moler, C. Van Loan, "Nineteen dubious
    ways to compute the exponential of a matrix, twenty-five years later",
    SIAM Review 45(1), 2003 (sensitivity of the exponential to non-normality).
    """
    if block.is_discrete or not block.is_proper:
        raise ValueError("needs a proper s-plane block")
    if block.poles.size == 0:
        return StateSpace(np.zeros((0, 0)), np.zeros((0, 1)), np.zeros((1, 0)), [[block.gain]])
    a = np.zeros((0, 0))
    b = np.zeros((0, 1))
    c = np.zeros((1, 0))
    d = np.array([[1.0]])
    total = block.gain
    mags = np.abs(np.concatenate([block.zeros, block.poles]))
    mags = mags[mags > 0]
    # sections whose roots are all at s = 0 are normalised at the block's
    # typical frequency (geometric mean of its nonzero root magnitudes)
    typical = float(np.exp(np.mean(np.log(mags)))) if mags.size else 1.0
    for zg, pg in section_groups(block.zeros, block.poles, discrete=False):
        sa, sb, sc, sd, g = _modal_section(
            np.array(zg, complex), np.array(pg, complex), typical
        )
        total *= g
        n1, n2 = a.shape[0], sa.shape[0]
        na = np.zeros((n1 + n2, n1 + n2))
        na[:n1, :n1] = a
        na[n1:, :n1] = sb @ c
        na[n1:, n1:] = sa
        a = na
        b = np.vstack([b, sb @ d])
        c = np.hstack([sd @ c, sc])
        d = sd @ d
    return StateSpace(a, b, c * total, d * total)


def _modal_section(zeros: np.ndarray, poles: np.ndarray, typical: float):
    """Real modal realization of ``g * prod(s - z) / prod(s - p)`` normalised to unit gain.

    The section is normalised to unit gain at ``|s| = max |root|``
    (``typical`` when every root is at 0). Returns ``(a, b, c, d, g)``: the realization of the
    normalised section and the factor ``g`` taken out of it.
    """
    n = poles.size
    ref = float(np.max(np.abs(np.concatenate([poles, zeros]))))
    if not ref > 0.0:
        ref = typical
    # numerator and denominator as real polynomials (degree <= 2, so exact enough)
    num = np.real(np.poly(zeros)) if zeros.size else np.array([1.0])
    den = np.real(np.poly(poles))
    # at s = ref e^{j 0.9}: off both axes, where integrators, real poles in
    # either half-plane and undamped pairs sit
    probe = ref * complex(math.cos(0.9), math.sin(0.9))
    with np.errstate(divide="ignore", invalid="ignore"):
        val = abs(np.polyval(num, probe) / np.polyval(den, probe))
    g = 1.0 / val if np.isfinite(val) and val > 0 else 1.0
    num = num * g
    num = np.concatenate([np.zeros(n + 1 - num.size), num])
    d0 = num[0]
    rem = num - d0 * den  # strictly proper remainder, degree < n
    if n == 1:
        a = np.array([[poles[0].real]])
        bb = np.array([[1.0]])
        cc = np.array([[rem[1]]])
    else:
        p = poles[0] if poles[0].imag >= 0 else poles[1]
        if abs(p.imag) > 0:
            a = np.array([[p.real, p.imag], [-p.imag, p.real]])
        else:
            # two real poles: a scaled triangular (Jordan-like) block, which
            # also holds a double pole and avoids the cancelling residues of
            # a diagonal form when the poles are close
            p1, p2 = poles[0].real, poles[1].real
            a = np.array([[p1, max(abs(p1), abs(p2)) or ref], [0.0, p2]])
        bb = np.array([[0.0], [1.0]])
        # C adj(sI - A) B = r1 s + r0 with adj(sI - A) = [[s - a22, a12], [a21, s - a11]]
        b1, b2 = bb[0, 0], bb[1, 0]
        m = np.array(
            [
                [b1, b2],
                [-a[1, 1] * b1 + a[0, 1] * b2, a[1, 0] * b1 - a[0, 0] * b2],
            ]
        )
        cc = np.linalg.solve(m, np.array([rem[1], rem[2]])).reshape(1, 2)
    nb = float(np.linalg.norm(bb))
    nc = float(np.linalg.norm(cc))
    if nc > 0:
        beta = np.sqrt(nc / nb)
        bb = bb * beta
        cc = cc / beta
    return a, bb, cc, np.array([[d0]]), 1.0 / g


def _check_sample_time(sample_time_s: float) -> float:
    h = float(sample_time_s)
    if not (np.isfinite(h) and h > 0.0):
        raise ValueError(f"sample_time_s must be positive and finite, got {sample_time_s}")
    return h


# --------------------------------------------------------------------------
# Frequency-response factors for blocks without a factored form
# --------------------------------------------------------------------------
class _KnownAtEveryFrequency:
    """Range and detail of a factor given in closed form: every ``w``, no grid points."""

    @property
    def w_min(self) -> float:
        return 0.0

    @property
    def w_max(self) -> float:
        return math.inf

    def grid(self) -> np.ndarray:
        return np.zeros(0)


@record(eq=False)
class HoldFactor(_KnownAtEveryFrequency):
    """The zero-order hold seen in the frequency domain, ``(1 - e^{-j w h})/(j w h)``.

    Equal to ``e^{-j w h/2} sin(w h/2)/(w h/2)`` (1 at ``w = 0``): a phase lag
    of ``w h / 2`` and a gain droop. Used in front of a measured plant in a
    discrete loop (aliasing ignored, METHODS.md "Sampled-data loops").

    References
    ----------
    Astrom & Wittenmark, Computer-Controlled Systems, 3rd ed., 1997,
    section 7.7 (frequency response of the hold).
    """

    sample_time_s: float
    unstable_poles: int = field(default=0, init=False)
    integrators: int = field(default=0, init=False)

    def __post_init__(self) -> None:
        object.__setattr__(self, "sample_time_s", _check_sample_time(self.sample_time_s))

    def response(self, w) -> np.ndarray:
        x = np.asarray(w, dtype=float) * self.sample_time_s
        # numpy's sinc(t) = sin(pi t)/(pi t): sin(x/2)/(x/2) = sinc(x/(2 pi))
        return np.exp(-0.5j * x) * np.sinc(x / (2.0 * math.pi))


@record(eq=False)
class DelayFactor(_KnownAtEveryFrequency):
    """An exact transport delay ``e^{-j w tau}`` as a frequency-response factor.

    For delays in series with a block known only by its frequency response
    (a measured plant in a discrete loop).
    """

    delay_s: float
    unstable_poles: int = field(default=0, init=False)
    integrators: int = field(default=0, init=False)

    def __post_init__(self) -> None:
        tau = float(self.delay_s)
        if not (np.isfinite(tau) and tau >= 0.0):
            raise ValueError(f"delay_s must be finite and >= 0, got {self.delay_s}")
        object.__setattr__(self, "delay_s", tau)

    def response(self, w) -> np.ndarray:
        return np.exp(-1j * np.asarray(w, dtype=float) * self.delay_s)
