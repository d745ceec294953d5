"""Randomized stability verdicts against independent closed-loop pole computations.

Outside references, named beside each check:

* continuous loops: eigenvalues (``numpy.linalg.eigvals``) of the closed-loop
  state-space matrix ``A - B (1 + D)^-1 C`` of a cascade realization of L;
  the realization itself is cross-checked against ``scipy.signal.freqresp``
  of the same matrices and against ``mpmath.polyroots`` (30 digits) of the
  characteristic polynomial for low orders;
* discrete loops: ``numpy.roots`` of the characteristic polynomial
  ``den(z) + num(z)`` in z, order <= 8 (low enough for numpy.roots);
* frequency response: ``scipy.signal.freqresp`` / ``scipy.signal.dfreqresp``.

Cases whose closed-loop poles lie within a tiny distance of the stability
boundary are skipped (the verdict there is a matter of rounding); the test
counts them and asserts they are rare.
"""

from __future__ import annotations

import functools

import numpy as np
import pytest

from ruleguard.analysis.margins import analyse_open_loop
from ruleguard.analysis.openloop import OpenLoop
from ruleguard.models.lti import Factored, factored_to_state_space

N_CONTINUOUS = 1040  # enough draws that at least 1,000 are compared after skips
N_DISCRETE = 1000
BOUNDARY_SKIP = 1e-7


def _conjugate_roots(rng, count, unstable_fraction, axis_prob, scale=(0.05, 50.0)):
    """Random conjugate-symmetric roots in the s-plane (real ones and pairs)."""
    roots = []
    while len(roots) < count:
        mag = float(np.exp(rng.uniform(np.log(scale[0]), np.log(scale[1]))))
        sign = 1.0 if rng.random() < unstable_fraction else -1.0
        if rng.random() < axis_prob:
            if count - len(roots) >= 2 and rng.random() < 0.5:
                # undamped pair near the crossover region (far above it |L| is
                # so small that the closed-loop pair stays within rounding of
                # the axis, a case neither method can decide)
                wn = float(np.exp(rng.uniform(np.log(0.2), np.log(5.0))))
                roots += [1j * wn, -1j * wn]
            else:
                roots.append(0.0)  # integrator
            continue
        if count - len(roots) >= 2 and rng.random() < 0.6:
            zeta = float(rng.choice([rng.uniform(0.001, 0.05), rng.uniform(0.05, 1.0)]))
            re = sign * zeta * mag
            im = mag * np.sqrt(max(1 - zeta**2, 0.0))
            roots += [complex(re, im), complex(re, -im)]
        else:
            roots.append(sign * mag)
    return np.array(roots, dtype=complex)


def _closed_loop_poles(block: Factored, k: float = 1.0) -> np.ndarray:
    ss = factored_to_state_space(block.scaled(k))
    d = ss.d[0, 0]
    a_cl = ss.a - ss.b @ ss.c / (1.0 + d)
    return np.linalg.eigvals(a_cl)


def _mp_closed_loop_roots(block: Factored, dps: int = 80) -> np.ndarray:
    """Roots of den + num by mpmath.polyroots at ``dps`` digits (products formed exactly)."""
    import mpmath

    with mpmath.workdps(dps):
        def times(poly, r):
            out = [mpmath.mpc(0)] * (len(poly) + 1)
            for i, c in enumerate(poly):
                out[i] += c
                out[i + 1] -= c * r
            return out

        num = [mpmath.mpc(block.gain)]
        for z in block.zeros:
            num = times(num, mpmath.mpc(z.real, z.imag))
        den = [mpmath.mpc(1)]
        for p in block.poles:
            den = times(den, mpmath.mpc(p.real, p.imag))
        num = [mpmath.mpc(0)] * (len(den) - len(num)) + num
        char = [mpmath.re(d + n) for d, n in zip(den, num, strict=True)]
        while char and char[0] == 0:
            char = char[1:]
        roots = mpmath.polyroots(char, maxsteps=4000, extraprec=6 * dps)
        return np.array([complex(r) for r in roots])


def _random_continuous(rng):
    n = int(rng.integers(1, 31))
    nz = int(rng.integers(0, n + 1))
    poles = _conjugate_roots(rng, n, unstable_fraction=rng.choice([0.0, 0.15, 0.4]),
                             axis_prob=0.05)
    zeros = _conjugate_roots(rng, nz, unstable_fraction=0.2, axis_prob=0.0)[:nz]
    if np.count_nonzero(np.abs(zeros.imag) > 0) % 2 or len(zeros) != nz:
        zeros = zeros[np.abs(zeros.imag) == 0]
    # random gain, scaled so that |L| ~ 1 somewhere in the pole range
    probe = Factored(zeros, poles, 1.0).response(np.array([1.0]))[0]
    k = float(np.exp(rng.uniform(np.log(0.05), np.log(20.0)))) / max(abs(probe), 1e-300)
    if rng.random() < 0.3:
        k *= float(np.exp(rng.uniform(np.log(1e-4), np.log(0.1))))  # low gains: more stable
    if rng.random() < 0.1:
        k = -k
    return Factored(zeros, poles, k)


def test_state_space_realization_matches_scipy_freqresp():
    # scipy.signal.freqresp on the realization's matrices (orders <= 12, where
    # its internal polynomial form is well conditioned) and numpy.linalg.solve
    # of C (jwI - A)^-1 B + D (all orders) versus the factored response:
    # validates factored_to_state_space independently of the factored form.
    import scipy.signal

    rng = np.random.default_rng(7)
    for _ in range(60):
        block = _random_continuous(rng)
        ss = factored_to_state_space(block)
        w = np.geomspace(0.013, 170.0, 37)
        w = w[np.min(np.abs(1j * w[:, None] - block.poles[None, :]), axis=1) > 1e-6]
        ref = block.response(w)
        n = ss.a.shape[0]
        direct = np.array([(ss.c @ np.linalg.solve(1j * wi * np.eye(n) - ss.a, ss.b))[0, 0]
                           for wi in w]) + ss.d[0, 0]
        assert np.allclose(direct, ref, rtol=1e-5, atol=1e-10 * np.max(np.abs(ref)))
        if n <= 12:
            _, h = scipy.signal.freqresp((ss.a, ss.b, ss.c, ss.d), w)
            assert np.allclose(h, ref, rtol=1e-5, atol=1e-10 * np.max(np.abs(ref)))
        eig = np.linalg.eigvals(ss.a)
        gap = np.max(np.min(np.abs(eig[:, None] - block.poles[None, :]), axis=1))
        # (repeated poles, e.g. several integrators, make eigenvalues sensitive
        # as eps**(1/m): hence the loose bound)
        assert gap < 1e-3 * max(1.0, float(np.max(np.abs(block.poles))))


def test_closed_loop_eigenvalues_match_mpmath_roots_low_order():
    # mpmath.polyroots (30 digits) of den + num versus eigenvalues of the
    # closed-loop realization: validates the reference itself.
    import mpmath

    rng = np.random.default_rng(11)
    mpmath.mp.dps = 30
    checked = 0
    while checked < 30:
        block = _random_continuous(rng)
        if block.poles.size > 8:
            continue
        num = np.real(np.poly(block.zeros)) * block.gain
        den = np.real(np.poly(block.poles))
        char = np.polyadd(den, num)
        roots = np.array([complex(r) for r in mpmath.polyroots(
            [mpmath.mpf(float(c)) for c in char], maxsteps=400, extraprec=200)])
        eig = _closed_loop_poles(block)
        assert np.count_nonzero(roots.real > 0) == np.count_nonzero(eig.real > 0) or (
            np.min(np.abs(roots.real)) < BOUNDARY_SKIP * max(1.0, np.max(np.abs(roots))))
        checked += 1


def test_random_continuous_verdicts_against_eigenvalues():
    # Reference: numpy.linalg.eigvals of A - B (1 + D)^-1 C (cascade realization).
    rng = np.random.default_rng(20261201)
    disagreements, skipped, unstable, conflicts = [], 0, 0, 0
    for case in range(N_CONTINUOUS):
        block = _random_continuous(rng)
        poles_cl = _closed_loop_poles(block)
        scale = max(1.0, float(np.max(np.abs(poles_cl), initial=1.0)))
        if np.min(np.abs(poles_cl.real), initial=np.inf) < BOUNDARY_SKIP * scale:
            skipped += 1
            continue
        z_ref = int(np.count_nonzero(poles_cl.real > 0))
        result = analyse_open_loop(OpenLoop(block)).stability
        if result.closed_loop_unstable_poles != z_ref:
            # The eigenvalue problem can be ill-conditioned (large gains, high
            # order): arbitrate with mpmath.polyroots at 80 digits.
            mp_roots = _mp_closed_loop_roots(block)
            z_mp = int(np.count_nonzero(mp_roots.real > 0))
            if z_mp != z_ref:
                conflicts += 1
                z_ref = z_mp
        unstable += z_ref > 0
        if result.closed_loop_unstable_poles != z_ref or result.stable != (z_ref == 0):
            disagreements.append((case, block.poles.size, z_ref, result))
    assert not disagreements, disagreements[:5]
    assert conflicts <= N_CONTINUOUS // 100, conflicts
    # near-boundary closed loops (mostly undamped open-loop pairs where |L| is
    # small, so the closed-loop pair moves off the axis by less than 1e-7)
    assert skipped <= N_CONTINUOUS // 30, skipped
    assert N_CONTINUOUS - skipped >= 1000
    print(f"continuous: {N_CONTINUOUS - skipped} compared, {skipped} skipped, "
          f"{conflicts} eigenvalue/mpmath conflicts, {unstable} unstable, 0 disagreements")
    assert 0.2 * N_CONTINUOUS < unstable < 0.9 * N_CONTINUOUS  # a real mix


def test_random_continuous_gain_ranges_against_eigenvalues():
    # Each reported stable gain range is checked at gains inside it and just
    # outside it with eigenvalues of the scaled closed loop.
    rng = np.random.default_rng(99)
    checked = 0
    for _ in range(260):
        block = _random_continuous(rng)
        if block.poles.size > 14:
            continue
        m = analyse_open_loop(OpenLoop(block)).margins
        bounds = sorted({b for r in m.stable_gain_ranges_db for b in r if b is not None})
        probes = [b + d for b in bounds for d in (-0.05, 0.05)] + [-60.0, 0.0, 60.0]
        for db in probes:
            if any(abs(db - b) < 0.01 for b in bounds):
                continue
            k = 10.0 ** (db / 20.0)
            poles_cl = _closed_loop_poles(block, k)
            scale = max(1.0, float(np.max(np.abs(poles_cl))))
            if np.min(np.abs(poles_cl.real)) < 1e-6 * scale:
                continue
            inside = any((lo is None or lo < db) and (hi is None or db < hi)
                         for lo, hi in m.stable_gain_ranges_db)
            assert inside == bool(np.all(poles_cl.real < 0)), (block.poles, block.zeros,
                                                              block.gain, db, m)
            checked += 1
    assert checked > 300


def _random_discrete(rng):
    n = int(rng.integers(1, 9))
    nz = int(rng.integers(0, n + 1))
    h = float(np.exp(rng.uniform(np.log(1e-4), np.log(0.1))))

    def roots(count, out_prob, circle_prob):
        r = []
        while len(r) < count:
            u = rng.random()
            if u < circle_prob:
                if count - len(r) >= 2 and rng.random() < 0.5:
                    th = rng.uniform(0.1, 3.0)
                    r += [np.exp(1j * th), np.exp(-1j * th)]
                else:
                    r.append(1.0 if rng.random() < 0.8 else -1.0)
                continue
            rad = rng.uniform(1.02, 2.0) if rng.random() < out_prob else rng.uniform(0.0, 0.98)
            if rng.random() < 0.1:
                rad = 1.0 - float(np.exp(rng.uniform(np.log(1e-4), np.log(5e-3))))  # light
            if count - len(r) >= 2 and rng.random() < 0.5:
                th = rng.uniform(0.05, 3.1)
                r += [rad * np.exp(1j * th), rad * np.exp(-1j * th)]
            else:
                r.append(rad if rng.random() < 0.7 else -rad)
        return np.array(r, dtype=complex)

    poles = roots(n, rng.choice([0.0, 0.2, 0.5]), 0.08)
    zeros = roots(nz, 0.3, 0.0)
    if len(zeros) > nz:
        zeros = zeros[:nz] if np.all(zeros[:nz].imag == 0) else zeros[np.abs(zeros.imag) == 0]
    probe = Factored(zeros, poles, 1.0, sample_time_s=h).response(np.array([0.3 / h]))[0]
    k = float(np.exp(rng.uniform(np.log(0.05), np.log(5.0)))) / max(abs(probe), 1e-300)
    if rng.random() < 0.1:
        k = -k
    return Factored(zeros, poles, k, sample_time_s=h)


def test_random_discrete_verdicts_against_numpy_roots():
    # Reference: numpy.roots of den(z) + k num(z), order <= 8.
    rng = np.random.default_rng(31415)
    disagreements, skipped, unstable = [], 0, 0
    for case in range(N_DISCRETE):
        block = _random_discrete(rng)
        num = np.real(np.poly(block.zeros)) * block.gain
        den = np.real(np.poly(block.poles))
        char = np.polyadd(den, num)
        cl = np.roots(char)
        if np.min(np.abs(np.abs(cl) - 1.0), initial=np.inf) < 1e-7:
            skipped += 1
            continue
        z_ref = int(np.count_nonzero(np.abs(cl) > 1.0))
        # a char polynomial that loses degree means poles go to infinity: none here
        result = analyse_open_loop(OpenLoop(block)).stability
        unstable += z_ref > 0
        if result.closed_loop_unstable_poles != z_ref:
            disagreements.append((case, block.poles, block.zeros, block.gain, z_ref, result))
    assert not disagreements, disagreements[:3]
    assert skipped <= N_DISCRETE // 30, skipped
    print(f"discrete: {N_DISCRETE - skipped} compared, {skipped} skipped, "
          f"{unstable} unstable, 0 disagreements")
    assert 0.2 * N_DISCRETE < unstable < 0.9 * N_DISCRETE


@pytest.mark.parametrize("seed", [1, 2, 3])
def test_frequency_response_against_scipy(seed):
    # scipy.signal.freqresp (continuous, factored form) and dfreqresp (discrete).
    import scipy.signal

    from ruleguard.analysis.contour import sample_contour

    rng = np.random.default_rng(seed)
    block = _random_continuous(rng)
    c = sample_contour(OpenLoop(block))
    w = c.w[(c.w > 0)][::7]
    _, h = scipy.signal.freqresp((block.zeros, block.poles, block.gain), w)
    assert np.allclose(c.evaluate(w), h, rtol=1e-9, atol=0)
    d = _random_discrete(rng)
    cd = sample_contour(OpenLoop(d))
    wd = cd.w[::5]
    _, hd = scipy.signal.dfreqresp((d.zeros, d.poles, d.gain, d.sample_time_s),
                                   wd * d.sample_time_s)
    assert np.allclose(cd.evaluate(wd), hd, rtol=1e-9, atol=0)


class _ResponseOnly:
    """A block seen only through its response (no ``block`` attribute, no hints)."""

    unstable_poles = 0
    integrators = 0
    w_min = 0.0

    def __init__(self, block: Factored):
        self._block = block
        self.unstable_poles = block.unstable_pole_count()
        self.w_max = np.inf if block.sample_time_s is None else np.pi / block.sample_time_s

    def response(self, w):
        return self._block.response(w)

    def grid(self):
        return self._block.corner_frequencies()


def _split(block: Factored, rng) -> OpenLoop | None:
    """The same loop with its stable, off-boundary poles and some zeros moved into a factor."""
    movable = ~block.on_boundary(block.poles) & ~block.unstable_mask(block.poles)
    real_p = [p for p, ok in zip(block.poles, movable, strict=True) if ok and p.imag == 0]
    fac_p = real_p[: max(1, len(real_p) // 2)] if real_p else []
    fac_z = [z for z in block.zeros if z.imag == 0][: len(fac_p)]
    rest_p = list(block.poles)
    for p in fac_p:
        rest_p.remove(p)
    rest_z = list(block.zeros)
    for z in fac_z:
        rest_z.remove(z)
    if len(rest_z) > len(rest_p):
        return None
    h = block.sample_time_s
    factor = _ResponseOnly(Factored(fac_z, fac_p, 1.0, sample_time_s=h))
    return OpenLoop(Factored(rest_z, rest_p, block.gain, sample_time_s=h), (factor,))


def test_loops_with_response_factors_match_the_rational_verdict():
    # Moving part of a random loop into a factor known only by its response
    # must not change the verdict (reference: the same eigenvalue / numpy.roots
    # comparisons as above, through the rational analysis that passed them).
    rng = np.random.default_rng(2718)
    compared = 0
    for i in range(300):
        block = _random_continuous(rng) if i % 2 else _random_discrete(rng)
        if block.poles.size > 16:
            continue
        whole = analyse_open_loop(OpenLoop(block)).stability
        if whole.through_critical_point:
            continue
        parts = _split(block, rng)
        if parts is None:
            continue
        split = analyse_open_loop(parts).stability
        assert split.closed_loop_unstable_poles == whole.closed_loop_unstable_poles, (
            block.zeros, block.poles, block.gain, block.sample_time_s)
        compared += 1
    assert compared > 150


def test_delay_margin_is_the_destabilising_delay():
    # The delay margin is the smallest extra delay that destabilises the loop
    # (FORMATS.md section 5). With one gain crossover where |L| falls, the
    # pair of closed-loop roots on j w_c crosses to the right as the delay
    # grows (Cooke & van den Driessche, J. Math. Anal. Appl. 86, 1982): the
    # loop with 0.98 DM must be stable, with 1.02 DM unstable.
    rng = np.random.default_rng(4242)
    checked = 0
    for _ in range(400):
        n = int(rng.integers(1, 11))
        poles = -np.exp(rng.uniform(np.log(0.1), np.log(30.0), n))
        pairs = rng.random(n // 2) < 0.5
        for i in np.nonzero(pairs)[0]:  # some well damped pairs
            wn, zeta = -poles[2 * i], rng.uniform(0.1, 0.9)
            p = complex(-zeta * wn, wn * np.sqrt(1 - zeta**2))
            poles = poles.astype(complex)
            poles[2 * i], poles[2 * i + 1] = p, p.conjugate()
        if rng.random() < 0.5:
            poles[0] = 0.0
        zeros = -np.exp(rng.uniform(np.log(0.1), np.log(30.0), int(rng.integers(0, n))))
        shape = Factored(zeros, poles, 1.0)
        w0 = float(np.exp(rng.uniform(np.log(0.03), np.log(3.0))))
        block = shape.scaled(1.0 / abs(shape.response(np.array([w0]))[0]))
        a = analyse_open_loop(OpenLoop(block))
        m = a.margins
        if not a.stability.stable or len(m.crossovers) != 1 or m.delay_margin_s is None:
            continue
        wc = 2 * np.pi * m.crossovers[0].hz
        slope = np.abs(block.response(np.array([wc * 1.0001]))[0]) - 1.0
        if slope >= 0 or m.delay_margin_s > 1e3:
            continue
        for factor, stable in ((0.98, True), (1.02, False)):
            delayed = Factored(block.zeros, block.poles, block.gain, factor * m.delay_margin_s)
            assert analyse_open_loop(OpenLoop(delayed)).stability.stable == stable
        checked += 1
        if checked >= 40:
            break
    assert checked >= 25


def test_delay_margin_in_samples_is_exact_for_whole_samples():
    # K/(z-1), K = 0.5: delay_margin_samples = 2.608 (see tests/test_margins.py);
    # z^-2 more keeps it stable, z^-3 more destabilises it (|z^-n| = 1 leaves the
    # crossover where it is and takes n theta_c of phase)
    h = 0.01
    m = analyse_open_loop(OpenLoop(Factored([], [1.0], 0.5, sample_time_s=h))).margins
    n = m.delay_margin_samples
    assert 2 < n < 3
    for extra, stable in ((2, True), (3, False)):
        block = Factored([], [1.0] + [0.0] * extra, 0.5, sample_time_s=h)
        assert analyse_open_loop(OpenLoop(block)).stability.stable == stable


@functools.cache
def _unit_pade(order: int):
    """Roots and gain of the [order/order] Pade approximant of e^{-x} (mpmath, 40 digits)."""
    import mpmath

    with mpmath.workdps(40):
        taylor = [mpmath.mpf(-1) ** k / mpmath.factorial(k) for k in range(2 * order + 1)]
        p, q = mpmath.pade(taylor, order, order)  # coefficients, lowest power first
        zeros = [complex(r) for r in mpmath.polyroots(p[::-1], maxsteps=400, extraprec=200)]
        poles = [complex(r) for r in mpmath.polyroots(q[::-1], maxsteps=400, extraprec=200)]
        gain = float(p[-1] / q[-1])
    return np.array(zeros), np.array(poles), gain


def _pade_delay(tau: float, order: int = 10) -> Factored:
    """[order/order] Pade approximant of e^{-s tau} (x = s tau scaled from the unit one)."""
    zeros, poles, gain = _unit_pade(order)
    return Factored(zeros / tau, poles / tau, gain)


def test_random_delay_loops_against_pade_eigenvalues():
    # Reference: eigenvalues of the closed loop with the delay replaced by its
    # [10/10] Pade approximant (the approximant's phase error stays below
    # 1e-6 rad for w tau < 6; cases where |L| > 0.2 at w tau >= 6 are skipped,
    # since there the approximant could decide the encirclements).
    rng = np.random.default_rng(1618)
    compared = skipped = conflicts = 0
    disagreements = []
    for _ in range(400):
        n = int(rng.integers(1, 9))
        poles = _conjugate_roots(rng, n, unstable_fraction=rng.choice([0.0, 0.2]),
                                 axis_prob=0.05, scale=(0.1, 10.0))
        nz = int(rng.integers(0, n))
        zeros = _conjugate_roots(rng, nz, unstable_fraction=0.2, axis_prob=0.0,
                                 scale=(0.1, 10.0))
        shape = Factored(zeros, poles, 1.0)
        k = float(np.exp(rng.uniform(np.log(0.1), np.log(10.0)))) / abs(
            shape.response(np.array([1.0]))[0])
        tau = float(np.exp(rng.uniform(np.log(0.01), np.log(2.0))))
        rational = shape.scaled(k)
        w = np.geomspace(6.0 / tau, 1e4 / tau, 400)
        if np.max(np.abs(rational.response(w))) > 0.2:
            skipped += 1
            continue
        approx = rational * _pade_delay(tau)
        poles_cl = _closed_loop_poles(approx)
        scale = max(1.0, float(np.max(np.abs(poles_cl))))
        if np.min(np.abs(poles_cl.real)) < 1e-6 * scale:
            skipped += 1
            continue
        z_ref = int(np.count_nonzero(poles_cl.real > 0))
        delayed = Factored(rational.zeros, rational.poles, rational.gain, tau)
        result = analyse_open_loop(OpenLoop(delayed)).stability
        if result.closed_loop_unstable_poles != z_ref:
            # arbitrate an ill-conditioned eigenvalue problem with mpmath (80 digits)
            mp_roots = _mp_closed_loop_roots(approx)
            if np.min(np.abs(mp_roots.real)) < 1e-6 * scale:
                skipped += 1
                continue
            z_ref = int(np.count_nonzero(mp_roots.real > 0))
            conflicts += 1
        compared += 1
        if result.closed_loop_unstable_poles != z_ref:
            disagreements.append((rational.zeros, rational.poles, rational.gain, tau, z_ref))
    assert not disagreements, disagreements[:2]
    assert compared >= 200, (compared, skipped)
    print(f"delay loops: {compared} compared with Pade eigenvalues, {skipped} skipped, "
          f"{conflicts} eigenvalue/mpmath conflicts, 0 disagreements")
