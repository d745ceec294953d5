"""Exact zero-order-hold equivalent of a factored block in modal coordinates.

The fast route of :func:`ruleguard.models.discretize.zoh_equivalent`. A proper
s-plane block with distinct poles is a sum of first-order modes,
``G(s) = D + sum_i r_i / (s - p_i)``, with the residues
``r_i = K prod_j (p_i - z_j) / prod_{j != i} (p_i - p_j)`` taken from the
factored form itself. Held over one sample period and delayed by
``tau = (d + f) h`` (``0 <= f < 1``, ``tau' = f h``), each mode samples in
closed form ([FPW] section 4.3.4, the modified z-transform; [AW] section 2.3):

``r_i psi_i(h) / (z - e^{p_i h})`` for ``f = 0``, and
``(g0_i z + g1_i) / (z (z - e^{p_i h}))`` with
``g0_i = r_i psi_i(h - tau')``, ``g1_i = r_i e^{p_i (h - tau')} psi_i(tau')``
for ``f > 0``, where ``psi_i(t) = int_0^t e^{p_i s} ds = expm1(p_i t) / p_i``;
the feedthrough ``D`` reads ``u[k]`` (``f = 0``) or ``u[k - 1]`` (``f > 0``),
and the whole samples give ``z^-d``. No matrix exponential and no scalar
iteration is needed: the exponentials of the modes are the matrix
exponential of the block-diagonal (real modal) realization, block by block,
and ``e^{p h} - 1`` comes from ``expm1`` without cancellation.

The same numbers form a real block-diagonal realization (one 2 x 2 rotation
block per conjugate pair, a scalar per real pole, a delay state for ``f > 0``)
whose invariant zeros are the discrete zeros
(:func:`ruleguard.models.discretize.discrete_zeros`).

Validity. A modal sum loses accuracy when its terms are large and cancel
(poles close together, large opposite residues: the eigenvector matrix of the
realization is ill-conditioned, Moler & Van Loan 2003). The route is
therefore taken only when (a) no two poles are within
:data:`MODAL_SEPARATION_RTOL` of each other (repeated poles such as a double
integrator have no modal form), (b) the error amplification
``(sum_i |term_i| + |D|) / |H|`` on the unit circle stays below
:data:`MODAL_AMPLIFICATION_LIMIT`, measured where ``|H|`` holds digits, and
(c) the factored result reproduces the modal sum to
:data:`MODAL_MISFIT_LIMIT`. Otherwise the caller uses the scaling-and-squaring
exponential of the augmented cascade realization.

References
----------
.. [FPW] G. F. Franklin, J. D. Powell, M. L. Workman, *Digital Control of
   Dynamic Systems*, 3rd ed., Addison-Wesley, 1998, section 4.3.4.
.. [AW] K. J. Astrom, B. Wittenmark, *Computer-Controlled Systems*, 3rd ed.,
   Prentice Hall, 1997, section 2.3.
.. [MV] C. Moler, C. Van Loan, "Nineteen dubious ways to compute the
   exponential of a matrix, twenty-five years later", SIAM Review 45(1), 2003
   (method 14, eigenvectors, and its ill-conditioning).
"""

from __future__ import annotations

import math

import numpy as np

from ruleguard.frozen import record
from ruleguard.models.lti import Factored

#: Two poles closer than this (relative to the larger modulus) count as
#: repeated: the block has no well-conditioned modal form.
MODAL_SEPARATION_RTOL = 1e-6
#: Largest accepted ``(sum_i |term_i| + |D|) / |H|`` on the unit circle. The
#: rounding error of the modal sum is about ``n * eps`` times this: 1e4 keeps
#: it near 1e-11 relative for the orders seen in practice.
MODAL_AMPLIFICATION_LIMIT = 1e4
#: Largest accepted misfit between the factored result and the modal sum.
MODAL_MISFIT_LIMIT = 1e-9
#: Roots counted as one conjugate pair (relative tolerance, as in the cascade).
_PAIR_RTOL = 1e-9


@record(eq=False)
class ModalHold:
    """The zero-order-hold equivalent of a block as a sum of sampled modes.

    Mode ``i`` (continuous ``r_i / (s - p_i)``) samples to
    ``r_i (q0_i z + q1_i) / (z (z - l_i))`` with a fractional delay and to
    ``r_i q0_i / (z - l_i)`` without one (``l_i = e^{p_i h}``).

    Attributes
    ----------
    poles:
        Continuous poles ``p_i`` (every member of a conjugate pair).
    residue:
        ``r_i``.
    lam_minus_one:
        ``l_i - 1 = expm1(p_i h)``.
    q0, q1:
        ``psi_i(h - tau')`` and ``e^{p_i (h - tau')} psi_i(tau')`` (``q0 =
        psi_i(h)``, ``q1 = 0`` without a fraction).
    feedthrough:
        ``D``.
    fraction:
        Whether the delay has a fractional part.
    delay_samples:
        Whole samples ``d``.
    sample_time_s:
        ``h``.
    """

    poles: np.ndarray
    residue: np.ndarray
    lam_minus_one: np.ndarray
    q0: np.ndarray
    q1: np.ndarray
    feedthrough: float
    fraction: bool
    delay_samples: int
    sample_time_s: float
    #: ``(upper, real)`` of :func:`_pair_indices` when known (computed once).
    pairs: tuple[list[int], list[int]] | None = None

    def terms(self, z: np.ndarray, z_minus_1: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
        """Mode terms ``(points, modes)`` and the feedthrough term at ``z`` (no ``z^-d``)."""
        den = z_minus_1[:, None] - self.lam_minus_one[None, :]
        if self.fraction:
            num = self.residue * self.q0
            modes = (num[None, :] * z[:, None] + (self.residue * self.q1)[None, :]) / (
                z[:, None] * den
            )
            direct = self.feedthrough / z
        else:
            modes = (self.residue * self.q0)[None, :] / den
            direct = np.full(z.shape, self.feedthrough, dtype=complex)
        return modes, direct

    def evaluate_with_amplification(
        self, z: np.ndarray, z_minus_1: np.ndarray
    ) -> tuple[np.ndarray, np.ndarray]:
        """``H(z)`` (whole-sample delay included) and ``(sum |terms|) / |H|`` per point."""
        modes, direct = self.terms(z, z_minus_1)
        total = modes.sum(axis=1) + direct
        with np.errstate(divide="ignore", invalid="ignore"):
            amplification = (np.abs(modes).sum(axis=1) + np.abs(direct)) / np.abs(total)
        return total * z ** (-self.delay_samples), amplification

    def response(self, w) -> np.ndarray:
        """Frequency response at ``w`` rad/s (``z = e^{j w h}``)."""
        x = 1j * np.atleast_1d(np.asarray(w, dtype=float)) * self.sample_time_s
        return self.evaluate_with_amplification(np.exp(x), np.expm1(x))[0]

    def real_realization(self) -> tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray,
                                        np.ndarray]:
        """A real block-diagonal realization ``(a, b, c, d, a - I)`` of the sampled modes.

        The continuous block in real modal form (a rotation block
        ``[[sigma, omega], [-omega, sigma]]`` per pair ``sigma +/- j omega``,
        input ``[0, t]``, output ``[-2 Im r, 2 Re r] / t``, ``t = sqrt(2 |r|)``;
        a scalar per real pole) is sampled block by block: a function of a
        rotation block is the rotation block of the function of
        ``sigma + j omega``. With a fraction the state is augmented with
        ``u[k - 1]`` as in :func:`ruleguard.models.discretize.zoh_state_space`.
        """
        shifted, b, c, d = self._realization_lists()
        m = len(b)
        shifted_a = np.array(shifted, dtype=float).reshape(m, m)
        return (shifted_a + np.eye(m), np.array(b, dtype=float).reshape(m, 1),
                np.array(c, dtype=float).reshape(1, m), np.array([[d]], dtype=float), shifted_a)

    def delta_pencil(self) -> np.ndarray:
        """The system pencil ``[[(A - I)/h, B/h], [C, D]]`` of :meth:`real_realization`.

        The matrix whose invariant zeros
        (:func:`ruleguard.models.discretize.discrete_zeros`) are the discrete
        zeros in the delta form, built from the same numbers (equal bit for
        bit to dividing the realization's ``a - I`` and ``b`` by ``h``).
        """
        shifted, b, c, d = self._realization_lists()
        m = len(b)
        rows = [shifted[i * m:(i + 1) * m] + [b[i]] for i in range(m)]
        rows.append(c + [d])
        pencil = np.array(rows, dtype=float)
        pencil[:m] /= self.sample_time_s
        return pencil

    def _realization_lists(self) -> tuple[list[float], list[float], list[float], float]:
        """``a - I`` (row-major, flat), ``b``, ``c`` and ``d`` of the real realization."""
        upper, real = self.pairs if self.pairs is not None else _pair_indices(self.poles)
        nu, nr = len(upper), len(real)
        n = 2 * nu + nr
        f = 1 if self.fraction else 0
        m = n + f
        shifted = [0.0] * (m * m)
        b = [0.0] * m
        c = [0.0] * m
        # on Python numbers (a few modes: cheaper than numpy calls), with the
        # operations numpy would do: sqrt is correctly rounded in both, products
        # and quotients are taken in the same order; the moduli of the complex
        # residues come from numpy (its abs of a complex array is not always
        # hypot's last bit), over the same gathered array as before
        residue = self.residue.tolist()
        modulus = np.abs(self.residue[upper]).tolist() if upper else []
        lam = self.lam_minus_one.tolist()
        q0 = self.q0.tolist()
        q1 = self.q1.tolist() if f else None
        # pairs: states 2k, 2k + 1 (k < nu); a function of the rotation block
        # of q is the rotation block of the function, rot(q) @ [0, t] = t [Im q, Re q]
        for k, idx in enumerate(upper):
            r = residue[idx]
            t = math.sqrt(2.0 * modulus[k])
            if not t > 0.0:
                t = 1.0
            lk, qk = lam[idx], q0[idx]
            i, j = 2 * k, 2 * k + 1
            shifted[i * m + i] = lk.real
            shifted[i * m + j] = lk.imag
            shifted[j * m + i] = -lk.imag
            shifted[j * m + j] = lk.real
            b[i], b[j] = qk.imag * t, qk.real * t
            c[i], c[j] = -2.0 * r.imag / t, 2.0 * r.real / t
            if f:
                g = q1[idx]
                shifted[i * m + n] = g.imag * t
                shifted[j * m + n] = g.real * t
        # real poles: states 2 nu ..
        for k, idx in enumerate(real):
            rr = residue[idx].real
            tr = math.sqrt(abs(rr))
            if not tr > 0.0:
                tr = 1.0
            i = 2 * nu + k
            shifted[i * m + i] = lam[idx].real
            b[i] = q0[idx].real * tr
            c[i] = rr / tr
            if f:
                shifted[i * m + n] = q1[idx].real * tr
        if f:
            shifted[n * m + n] = -1.0
            b[n] = 1.0
            c[n] = self.feedthrough
            d = 0.0
        else:
            d = self.feedthrough
        return shifted, b, c, float(d)


def _pair_indices(poles: np.ndarray) -> tuple[list[int], list[int]]:
    """Indices of the upper members of conjugate pairs and of the real poles.

    A pole is real when ``|Im p| <= _PAIR_RTOL max(|p|, 1e-300)`` (on Python
    complex numbers: ``abs`` is ``hypot``, within an ulp of numpy's modulus,
    which only matters for an imaginary part within an ulp of the bound).
    """
    upper: list[int] = []
    real: list[int] = []
    for i, p in enumerate(poles.tolist()):
        bound = _PAIR_RTOL * max(abs(p), 1e-300)
        im = p.imag
        if im > bound:
            upper.append(i)
        elif abs(im) <= bound:
            real.append(i)
    return upper, real


def residues(block: Factored) -> np.ndarray | None:
    """Residues ``r_i`` of a proper block with distinct poles (``None`` if not distinct).

    ``r_i = K prod_j (p_i - z_j) / prod_{j != i} (p_i - p_j)``, each zero
    factor paired with a pole factor so that high orders neither overflow nor
    underflow.
    """
    p = block.poles
    n = p.size
    if n == 0:
        return np.zeros(0, complex)
    diff = p[:, None] - p[None, :]
    off = _off_diagonal(n)
    others = diff[off].reshape(n, n - 1)
    size = np.abs(p)
    mag = np.maximum(size[:, None], size[None, :])[off].reshape(n, n - 1)
    if n > 1 and (np.abs(others) <= MODAL_SEPARATION_RTOL * np.maximum(mag, 1e-300)).any():
        return None
    zf = p[:, None] - block.zeros[None, :]
    m = zf.shape[1]
    k = min(m, n - 1)
    out = np.full(n, block.gain, dtype=complex)
    if k:
        out = out * np.prod(zf[:, :k] / others[:, :k], axis=1)
    if m > k:
        out = out * np.prod(zf[:, k:], axis=1)
    if n - 1 > k:
        out = out / np.prod(others[:, k:], axis=1)
    if not np.isfinite(out).all():
        return None
    return out


_OFF_DIAGONAL: dict[int, np.ndarray] = {}


def _off_diagonal(n: int) -> np.ndarray:
    """The mask ``~eye(n)`` (kept per order, read-only)."""
    mask = _OFF_DIAGONAL.get(n)
    if mask is None:
        mask = ~np.eye(n, dtype=bool)
        mask.flags.writeable = False
        if len(_OFF_DIAGONAL) < 64:
            _OFF_DIAGONAL[n] = mask
    return mask


def _psi(p: np.ndarray, t: float) -> np.ndarray:
    """``int_0^t e^{p s} ds = expm1(p t) / p`` (``t`` for ``p = 0``)."""
    with np.errstate(divide="ignore", invalid="ignore"):
        out = np.expm1(p * t) / p
    return np.where(p == 0, t, out)


def modal_hold(block: Factored, sample_time_s: float, whole: int, fraction: float
               ) -> ModalHold | None:
    """The sampled modes of ``block`` (``None`` when its poles are not distinct).

    Parameters
    ----------
    block:
        Proper s-plane block (its own delay is in ``whole`` and ``fraction``).
    sample_time_s:
        ``h``.
    whole, fraction:
        The total delay as ``(whole + fraction) h`` (:func:`split_delay`).
    """
    if block.is_discrete or not block.is_proper or block.poles.size == 0:
        return None
    upper, real = _pair_indices(block.poles)
    if 2 * len(upper) + len(real) != block.poles.size:
        return None  # not conjugate-symmetric
    r = residues(block)
    if r is None:
        return None
    h = float(sample_time_s)
    p = block.poles
    feed = block.gain if block.zeros.size == block.poles.size else 0.0
    lam_minus_one = np.expm1(p * h)
    if fraction > 0.0:
        rest = h - fraction * h
        q0 = _psi(p, rest)
        q1 = np.exp(p * rest) * _psi(p, fraction * h)
        if not (np.isfinite(q0).all() and np.isfinite(q1).all()):
            return None
    else:
        if p.all():  # no pole at s = 0: the division alone, the same numbers as below
            q0 = lam_minus_one / p  # _psi(p, h), from the same expm1
        else:
            with np.errstate(divide="ignore", invalid="ignore"):
                q0 = np.where(p == 0, h, lam_minus_one / p)
        q1 = np.zeros(q0.shape, dtype=complex)
        if not np.isfinite(q0).all():
            return None
    return ModalHold(p, r, lam_minus_one, q0, q1, float(feed), fraction > 0.0, int(whole), h,
                     (upper, real))
