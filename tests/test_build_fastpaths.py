"""The Python-number fast paths of the model build against numpy computations.

Each helper below replaced a few numpy calls on arrays of about ten entries
by Python arithmetic or a direct call of numpy's eigenvalue ufunc; these
tests check them bit for bit against the numpy formulation they replaced
(an independent computation with numpy's array operations), and the
eigenvalues against scipy's QZ-free ``scipy.linalg.eigvals``.
"""

from __future__ import annotations

import numpy as np
import pytest
import scipy.linalg

from ruleguard.models import discretize as disc
from ruleguard.models import modal_hold as mh
from ruleguard.models.lti import Factored
from ruleguard.models.matrices import real_eigvals


def _bits(x: np.ndarray) -> bytes:
    return np.ascontiguousarray(x).tobytes()


# ------------------------------------------------------------ eigenvalues
@pytest.mark.parametrize("seed", range(6))
def test_real_eigvals_is_numpy_eigvals_bit_for_bit_and_matches_scipy(seed):
    rng = np.random.default_rng(seed)
    a = rng.standard_normal((4 + seed, 4 + seed)) * 10.0 ** rng.uniform(-3, 3)
    got = real_eigvals(a)
    want = np.linalg.eigvals(a).astype(complex)  # numpy, through its checks
    assert got.dtype == np.complex128
    assert _bits(got) == _bits(want)
    # scipy's LAPACK wrapper (independent): the same set of eigenvalues
    ref = scipy.linalg.eigvals(a)
    scale = np.max(np.abs(ref))
    for lam in got:
        assert np.min(np.abs(ref - lam)) <= 1e-12 * scale


def test_real_eigvals_real_spectrum_and_non_finite_input():
    # a symmetric matrix has real eigenvalues: numpy returns them as reals,
    # converted to complex with +0.0 imaginary parts
    a = np.array([[2.0, 1.0, 0.0], [1.0, 3.0, 1.0], [0.0, 1.0, 4.0]])
    got = real_eigvals(a)
    want = np.linalg.eigvals(a).astype(complex)
    assert _bits(got) == _bits(want)
    assert not np.signbit(got.imag).any()
    bad = a.copy()
    bad[0, 1] = np.nan
    with pytest.raises(np.linalg.LinAlgError):
        real_eigvals(bad)


# --------------------------------------------------- conjugate pairing
def _conjugate_symmetric_numpy(roots):
    """The pairing as numpy masks and sorts (the formulation replaced)."""
    roots = np.asarray(roots, dtype=complex)
    tol = 1e-9
    scale = np.maximum(np.abs(roots), 1.0)
    real = roots[np.abs(roots.imag) <= tol * scale].real.astype(complex)
    upper = roots[roots.imag > tol * scale]
    lower = roots[roots.imag < -tol * scale]
    if upper.size != lower.size:
        return roots
    lower_sorted = lower[np.argsort(lower.real, kind="stable")]
    upper_sorted = upper[np.argsort(upper.real, kind="stable")]
    paired = 0.5 * (upper_sorted + np.conj(lower_sorted))
    return np.concatenate([real, paired, np.conj(paired)])


@pytest.mark.parametrize("seed", range(8))
def test_conjugate_symmetric_against_numpy_bit_for_bit(seed):
    rng = np.random.default_rng(100 + seed)
    pairs = rng.standard_normal(4) * 1e3 + 1j * np.abs(rng.standard_normal(4)) * 1e3
    noise = 1e-13 * (rng.standard_normal(4) + 1j * rng.standard_normal(4)) * 1e3
    reals = rng.standard_normal(3) * 1e2 + 1j * 1e-12 * rng.standard_normal(3)
    roots = np.concatenate([pairs, np.conj(pairs) + noise, reals, [0.0, -0.0 + 0j]])
    rng.shuffle(roots)
    got = disc._conjugate_symmetric(roots)
    want = _conjugate_symmetric_numpy(roots)
    assert _bits(got) == _bits(want)
    # exactly conjugate-symmetric: the multiset equals its conjugate
    # (values, not bits: the conjugate of a real root has a -0.0 imaginary part)
    assert np.array_equal(np.sort_complex(got), np.sort_complex(np.conj(got)))


def test_conjugate_symmetric_unpaired_and_nan():
    odd = np.array([1.0 + 2.0j, 3.0 - 1.0j, 3.0 - 2.0j, 5.0 + 0.0j])
    assert _bits(disc._conjugate_symmetric(odd)) == _bits(_conjugate_symmetric_numpy(odd))
    with_nan = np.array([1.0 + 2.0j, 1.0 - 2.0j, complex(np.nan, 0.0), 4.0 + 0j])
    assert _bits(disc._conjugate_symmetric(with_nan)) == _bits(
        _conjugate_symmetric_numpy(with_nan))


# ------------------------------------------------------- modal realization
def _pair_indices_numpy(poles):
    scale = np.maximum(np.abs(poles), 1e-300)
    upper = [int(i) for i in np.nonzero(poles.imag > mh._PAIR_RTOL * scale)[0]]
    real = [int(i) for i in np.nonzero(np.abs(poles.imag) <= mh._PAIR_RTOL * scale)[0]]
    return upper, real


def _plant(seed: int) -> Factored:
    rng = np.random.default_rng(seed)
    w = 2 * np.pi * rng.uniform(300.0, 4000.0, 3)
    zeta = rng.uniform(0.01, 0.1, 3)
    pairs = -zeta * w + 1j * w * np.sqrt(1 - zeta**2)
    wz = w * rng.uniform(0.8, 0.95, 3)
    zpairs = -zeta * wz + 1j * wz * np.sqrt(1 - zeta**2)
    poles = np.concatenate([pairs, np.conj(pairs), [-rng.uniform(2, 20), -6000.0]])
    zeros = np.concatenate([zpairs, np.conj(zpairs)])
    return Factored(zeros, poles, float(rng.uniform(1e3, 1e6)))


def _realization_numpy(modes: mh.ModalHold):
    """``a - I``, ``b``, ``c`` of the real realization with numpy array operations."""
    upper, real = _pair_indices_numpy(modes.poles)
    nu, nr = len(upper), len(real)
    n = 2 * nu + nr
    f = 1 if modes.fraction else 0
    m = n + f
    shifted = np.zeros((m, m))
    b = np.zeros(m)
    c = np.zeros(m)
    r = modes.residue[upper]
    t = np.sqrt(2.0 * np.abs(r))
    t = np.where(t > 0.0, t, 1.0)
    lam, q0, q1 = modes.lam_minus_one[upper], modes.q0[upper], modes.q1[upper]
    for k in range(nu):
        i, j = 2 * k, 2 * k + 1
        shifted[i, i] = shifted[j, j] = lam[k].real
        shifted[i, j], shifted[j, i] = lam[k].imag, -lam[k].imag
        b[i], b[j] = (q0.imag * t)[k], (q0.real * t)[k]
        c[i], c[j] = (-2.0 * r.imag / t)[k], (2.0 * r.real / t)[k]
        if f:
            shifted[i, n], shifted[j, n] = (q1.imag * t)[k], (q1.real * t)[k]
    rr = modes.residue[real].real
    tr = np.sqrt(np.abs(rr))
    tr = np.where(tr > 0.0, tr, 1.0)
    for k in range(nr):
        i = 2 * nu + k
        shifted[i, i] = modes.lam_minus_one[real][k].real
        b[i] = (modes.q0[real].real * tr)[k]
        c[i] = (rr / tr)[k]
        if f:
            shifted[i, n] = (modes.q1[real].real * tr)[k]
    if f:
        shifted[n, n], b[n], c[n] = -1.0, 1.0, modes.feedthrough
    return shifted, b, c


@pytest.mark.parametrize("seed", range(4))
@pytest.mark.parametrize("fraction", [0.0, 0.37])
def test_modal_realization_lists_against_numpy_bit_for_bit(seed, fraction):
    block = _plant(seed)
    assert mh._pair_indices(block.poles) == _pair_indices_numpy(block.poles)
    modes = mh.modal_hold(block, 1e-4, 1, fraction)
    assert modes is not None
    shifted, b, c, d = modes._realization_lists()
    m = len(b)
    want_shifted, want_b, want_c = _realization_numpy(modes)
    assert _bits(np.array(shifted).reshape(m, m)) == _bits(want_shifted)
    assert _bits(np.array(b)) == _bits(want_b)
    assert _bits(np.array(c)) == _bits(want_c)
    assert d == (0.0 if fraction else modes.feedthrough)


def test_psi_without_a_pole_at_zero_is_the_masked_division():
    block = _plant(7)
    modes = mh.modal_hold(block, 1e-4, 1, 0.0)
    p = block.poles
    want = np.where(p == 0, 1e-4, np.expm1(p * 1e-4) / p)
    assert _bits(modes.q0) == _bits(want)
    # with an integrator the masked form gives psi(0, h) = h (closed form)
    integ = Factored(block.zeros, np.concatenate([block.poles[:-1], [0.0]]), block.gain)
    modes0 = mh.modal_hold(integ, 1e-4, 1, 0.0)
    assert modes0.q0[-1] == 1e-4
