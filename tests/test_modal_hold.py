"""The modal route of the ZOH equivalent (ruleguard.models.modal_hold).

References used here:
* mpmath (50-digit arithmetic): the partial-fraction ZOH equivalent of
  tests/test_discretize.py (Franklin, Powell & Workman, Digital Control of
  Dynamic Systems, 3rd ed., 1998, section 4.3, modified z-transform);
* scipy.linalg.expm of the continuous real modal matrix and of the Van Loan
  block matrix (Van Loan, IEEE Trans. Automatic Control 23(3), 1978), for the
  sampled modal matrices;
* scipy.signal.residue for the residues of a low-order block.
"""

from __future__ import annotations

import math

import numpy as np
import pytest
import scipy.linalg
import scipy.signal as sig
from test_discretize import modal_zoh_response_mp

from ruleguard.models import discretize
from ruleguard.models.discretize import split_delay, zoh_equivalent
from ruleguard.models.lti import Factored
from ruleguard.models.modal_hold import modal_hold, residues


def resonant_plant(rng, pairs: int = 4) -> Factored:
    """A plant like a servo axis: slow and fast real poles, resonance/antiresonance pairs."""
    fp = np.sort(10 ** rng.uniform(math.log10(800.0), math.log10(4000.0), pairs))
    zp = 10 ** rng.uniform(-1.7, -1.0, pairs)
    fz = fp * rng.uniform(0.85, 0.97, pairs)
    zz = zp * rng.uniform(0.5, 1.0, pairs)

    def pair(f, z):
        w = 2 * math.pi * f
        return -z * w + 1j * w * np.sqrt(1 - z * z)

    p, z = pair(fp, zp), pair(fz, zz)
    poles = np.concatenate([p, p.conj(), [-rng.uniform(2, 20), -rng.uniform(4000, 9000)]])
    return Factored(np.concatenate([z, z.conj()]), poles, float(rng.uniform(1e4, 1e6)))


@pytest.mark.parametrize("seed", range(6))
@pytest.mark.parametrize("delay_samples", [0.0, 0.37, 1.0, 2.6])
def test_modal_route_against_mpmath(seed, delay_samples):
    rng = np.random.default_rng(seed)
    blk = resonant_plant(rng)
    h = 1e-4
    tau = delay_samples * h
    fast = discretize._modal_equivalent(blk, h, tau)
    assert fast is not None  # distinct, well-separated poles: the modal route is taken
    d, f = split_delay(tau, h)
    w = np.geomspace(1.0, math.pi / h, 60)
    z = np.exp(1j * w * h)
    ref = modal_zoh_response_mp(blk, h, f * h, z) * z ** (-d)
    rel = np.abs(fast.response(w) / ref - 1)
    # measured: about 6e-13 at worst; asserted at the bound of the high-order suite
    assert rel.max() < 1e-9, rel.max()
    # and the public function returns that route's result
    np.testing.assert_allclose(zoh_equivalent(blk, h, tau).response(w), fast.response(w),
                               rtol=1e-14)


@pytest.mark.parametrize("fraction", [0.0, 0.37])
def test_sampled_modal_matrices_against_scipy_expm(fraction):
    # The real block-diagonal realization of the sampled modes equals, block by
    # block, the exponential of the continuous real modal realization:
    # Phi = expm(A h); Gamma0, Gamma1 from the Van Loan block matrix
    # expm([[A, B], [0, 0]] t) (scipy.linalg.expm).
    rng = np.random.default_rng(11)
    blk = resonant_plant(rng, pairs=2)
    h = 1e-4
    modes = modal_hold(blk, h, 0, fraction)
    a, b, c, dd, shifted = modes.real_realization()
    n = blk.poles.size
    # the continuous real modal matrix with the same block order
    ac = np.zeros((n, n))
    k = 0
    order = [i for i in range(n) if modes.poles[i].imag > 0] + [
        i for i in range(n) if modes.poles[i].imag == 0]
    for i in order:
        p = modes.poles[i]
        if p.imag > 0:
            ac[k:k + 2, k:k + 2] = [[p.real, p.imag], [-p.imag, p.real]]
            k += 2
        else:
            ac[k, k] = p.real
            k += 1
    np.testing.assert_allclose(a[:n, :n], scipy.linalg.expm(ac * h), rtol=1e-13, atol=1e-15)
    np.testing.assert_allclose(shifted[:n, :n], a[:n, :n] - np.eye(n), atol=1e-15)
    # Gamma through the Van Loan matrix with the continuous input vector bc:
    # recover bc from Gamma0 = Psi(h - tau') bc and check Gamma1 against expm
    t_rest = h - fraction * h
    m = np.zeros((n + 1, n + 1))
    m[:n, :n] = ac

    def psi_of(t):
        big = np.zeros((2 * n, 2 * n))
        big[:n, :n] = ac
        big[:n, n:] = np.eye(n)
        e = scipy.linalg.expm(big * t)
        return e[:n, :n], e[:n, n:]

    phi_rest, psi_rest = psi_of(t_rest)
    bc = np.linalg.solve(psi_rest, b[:n, 0])
    if fraction:
        _, psi_frac = psi_of(fraction * h)
        np.testing.assert_allclose(shifted[:n, n], phi_rest @ psi_frac @ bc, rtol=1e-10,
                                   atol=1e-12 * np.abs(bc).max() * h)
    # the output vector with bc reproduces the continuous block (residue form)
    s = 1j * np.array([10.0, 3000.0, 20000.0])
    cont = np.array([(c[0, :n] @ np.linalg.solve(x * np.eye(n) - ac, bc)) for x in s])
    np.testing.assert_allclose(cont, blk.evaluate(s), rtol=1e-11)


def test_residues_against_scipy_signal():
    # scipy.signal.residue on the multiplied-out polynomials (order 3, well separated)
    blk = Factored([-2.0], [-1.0, complex(-3.0, 4.0), complex(-3.0, -4.0)], 5.0)
    r_ref, p_ref, _ = sig.residue(blk.gain * np.real(np.poly(blk.zeros)),
                                  np.real(np.poly(blk.poles)))
    got = residues(blk)
    for r, p in zip(r_ref, p_ref, strict=True):
        i = int(np.argmin(np.abs(blk.poles - p)))
        np.testing.assert_allclose(got[i], r, rtol=1e-12)


def test_falls_back_for_repeated_poles():
    # A double integrator has no modal form: the robust route answers, and the
    # closed form h^2 (z + 1) / (2 (z - 1)^2) (Franklin, Powell & Workman 1998,
    # table 4.1 / section 4.3) still holds.
    blk = Factored([], [0.0, 0.0], 1.0)
    h = 0.01
    assert residues(blk) is None
    assert discretize._modal_equivalent(blk, h, 0.0) is None
    zd = zoh_equivalent(blk, h)
    z = np.exp(1j * np.array([0.3, 1.0, 2.5]))
    np.testing.assert_allclose(zd.evaluate(z), h * h * (z + 1) / (2 * (z - 1) ** 2), rtol=1e-11)


def test_falls_back_when_the_modal_sum_cancels():
    # Slow poles sampled fast with relative degree 2: the residues sum to zero
    # analytically, the sampled modal sum cancels near z = -1 by about 1/(p h)
    # and the route is refused; the result is still exact (mpmath).
    blk = Factored([], [-0.5, -5.0], 2.5)
    h = 1e-4
    assert discretize._modal_equivalent(blk, h, 0.0) is None
    w = np.geomspace(1.0, math.pi / h, 30)
    ref = modal_zoh_response_mp(blk, h, 0.0, np.exp(1j * w * h))
    assert np.max(np.abs(zoh_equivalent(blk, h).response(w) / ref - 1)) < 1e-9


@pytest.mark.parametrize("fraction", [0.0, 0.37])
def test_delta_pencil_is_the_realization_over_h_bit_for_bit(fraction):
    # the pencil the discrete zeros are computed from is the real realization
    # with its a - I and b divided by h (what discrete_zeros forms from it)
    rng = np.random.default_rng(12)
    blk = resonant_plant(rng, pairs=3)
    h = 1e-4
    modes = modal_hold(blk, h, 1, fraction)
    a, b, c, dd, shifted = modes.real_realization()
    n = shifted.shape[0]
    ref = np.empty((n + 1, n + 1))
    ref[:n, :n] = shifted / h
    ref[:n, n:] = b / h
    ref[n:, :n] = c
    ref[n, n] = dd[0, 0]
    assert modes.delta_pencil().tobytes() == ref.tobytes()
    np.testing.assert_array_equal(a, shifted + np.eye(n))
