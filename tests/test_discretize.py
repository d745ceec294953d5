"""Tests of ruleguard.models.discretize against outside references.

References used (named again beside each check):
* closed-form sampled responses derived in the comments;
* scipy.signal.cont2discrete (methods "zoh", "bilinear", "euler",
  "backward_diff") and scipy.signal.dlti / dimpulse as independent
  computations;
* mpmath (50-digit arithmetic) for a modal, partial-fraction ZOH equivalent
  of a high-order plant (Franklin, Powell & Workman, Digital Control of
  Dynamic Systems, 3rd ed., 1998, section 4.3: ZOH equivalent and modified
  z-transform of r/(s - p));
* Astrom & Wittenmark, Computer-Controlled Systems, 3rd ed., 1997 (hold
  phase w h / 2, sampling of delayed systems, section 2.3).
"""

from __future__ import annotations

import math
import warnings

import mpmath
import numpy as np
import pytest
import scipy.signal as sig

from ruleguard.errors import NumericalWarning
from ruleguard.models.discretize import (
    DelayFactor,
    HoldFactor,
    discretize_block,
    prewarp_shift,
    scaled_cascade_realization,
    section_groups,
    split_delay,
    tustin_constant,
    zoh_equivalent,
    zoh_state_space,
)
from ruleguard.models.lti import Factored, StateSpace

METHODS = ("tustin", "backward_euler", "forward_euler")


def pulse_response_of(block: Factored, samples: int) -> np.ndarray:
    """Unit-pulse response of a z-plane Factored, simulated by scipy.signal.dlsim."""
    system = (block.zeros, block.poles, block.gain, block.sample_time_s)
    u = np.zeros(samples)
    u[0] = 1.0
    _, y = sig.dlsim(system, u)
    return np.asarray(y).reshape(-1)


def random_block(rng, n_poles: int, n_zeros: int, w_lo=1.0, w_hi=1e3) -> Factored:
    """A stable real block with conjugate pairs and real roots spread over decades."""

    def roots(k):
        out = []
        while len(out) < k:
            w = 10 ** rng.uniform(np.log10(w_lo), np.log10(w_hi))
            if k - len(out) >= 2 and rng.random() < 0.6:
                zeta = 10 ** rng.uniform(-2, -0.1)
                r = complex(-zeta * w, w * math.sqrt(1 - zeta**2))
                out += [r, r.conjugate()]
            else:
                out.append(complex(-w, 0.0))
        return np.array(out)

    poles = roots(n_poles)
    zeros = roots(n_zeros)
    blk = Factored(zeros, poles, 1.0)
    return blk.scaled(1.0 / abs(blk.evaluate(0.0)[()]))


def scipy_discretized_response(blk: Factored, h: float, method: str, w: np.ndarray) -> np.ndarray:
    """Frequency response of scipy.signal.cont2discrete(method) of the block.

    scipy works on a state-space realization (its polynomial route loses
    digits when roots spread over decades), so the block is first realised by
    our cascade realization, which is itself checked here against the
    block's factored response. The discretization is then scipy's alone.
    """
    ss = scaled_cascade_realization(blk)
    wc = np.geomspace(0.1, 1e5, 50)
    ref_c = blk.evaluate(1j * wc)
    # a biproper block whose high-frequency gain dwarfs its low-frequency
    # gain loses digits in any realization (C x + D cancels): absolute tolerance
    np.testing.assert_allclose(
        ss.evaluate(1j * wc), ref_c, rtol=1e-10, atol=1e-12 * np.abs(ref_c).max()
    )
    ad, bd, cd, dd, _ = sig.cont2discrete((ss.a, ss.b, ss.c, ss.d), h, method=method)
    return state_space_response(ad, bd, cd, dd, np.exp(1j * w * h))


def state_space_response(a, b, c, d, z) -> np.ndarray:
    """C (zI - A)^-1 B + D by numpy.linalg.solve (scipy's dlti.freqresp goes
    through polynomials and loses digits at high order)."""
    eye = np.eye(a.shape[0])
    return np.array([(c @ np.linalg.solve(zi * eye - a, b))[0, 0] + d[0, 0] for zi in z])


# ---------------------------------------------------------------------------
# ZOH: pulse-response samples against closed forms
# ---------------------------------------------------------------------------
class TestZohPulseResponseClosedForm:
    # First-order plant G(s) = a/(s + a) e^{-s tau}, tau = (d + f) h.
    # Its unit-step response is s(t) = 1 - e^{-a (t - tau)} for t >= tau, 0
    # before. The hold turns the unit pulse u[0] = 1 into a rectangle of
    # width h, so the continuous output is y(t) = s(t) - s(t - h) and the
    # sampled plant's pulse response must be y(k h) exactly:
    #   f = 0:  y[k] = 0 (k <= d), (1 - e^{-ah}) e^{-a (k - d - 1) h} (k > d);
    #   f > 0:  y[d+1] = 1 - e^{-a (1 - f) h} (only the first part of the
    #           rectangle has arrived), then y[k] = (e^{a h} - 1) e^{-a (k - d - f) h}.
    @staticmethod
    def continuous_samples(a, h, tau, samples):
        t = np.arange(samples) * h

        def step(t):
            return np.where(t >= 0, 1.0 - np.exp(-a * np.maximum(t, 0.0)), 0.0)

        return step(t - tau) - step(t - tau - h)

    @pytest.mark.parametrize("delay_samples", [0.0, 1.0, 3.0, 0.25, 0.5, 1.7, 2.999])
    def test_first_order_with_delay(self, delay_samples):
        a, h = 300.0, 1e-3
        tau = delay_samples * h
        plant = Factored([], [-a], a, delay_s=tau)
        zd = zoh_equivalent(plant, h)
        expected = self.continuous_samples(a, h, tau, 40)
        # closed form derived above
        np.testing.assert_allclose(pulse_response_of(zd, 40), expected, rtol=1e-12, atol=1e-15)
        # the realization itself (before factoring) gives the same samples
        dss = zoh_state_space(plant, h)
        np.testing.assert_allclose(dss.pulse_response(40), expected, rtol=1e-12, atol=1e-15)

    def test_first_order_fraction_closed_form_coefficients(self):
        # f > 0: H(z) = z^-d (g0 z + g1) / (z (z - e^{-ah})) with
        # g0 = 1 - e^{-a (h - tau')}, g1 = e^{-a (h - tau')} (1 - e^{-a tau'})
        # (Astrom & Wittenmark, Computer-Controlled Systems, 1997, section 2.3,
        # the first-order example with a fractional delay).
        a, h, tp = 50.0, 0.01, 0.004
        zd = zoh_equivalent(Factored([], [-a], a), h, delay_s=2 * h + tp)
        g0 = 1 - math.exp(-a * (h - tp))
        g1 = math.exp(-a * (h - tp)) * (1 - math.exp(-a * tp))
        assert zd.gain == pytest.approx(g0, rel=1e-13)
        np.testing.assert_allclose(zd.zeros, [-g1 / g0], rtol=1e-12)
        np.testing.assert_allclose(
            np.sort(np.abs(zd.poles)), [0, 0, 0, math.exp(-a * h)], atol=1e-15
        )

    @pytest.mark.parametrize("delay_samples", [0.0, 0.4, 2.6])
    def test_second_order_underdamped(self, delay_samples):
        # G(s) = w^2 / (s^2 + 2 zeta w s + w^2); step response
        # s(t) = 1 - e^{-zeta w t} (cos(wd t) + zeta/sqrt(1 - zeta^2) sin(wd t)),
        # wd = w sqrt(1 - zeta^2) (any control text; common practice). The ZOH
        # pulse response is s(kh - tau) - s(kh - tau - h) as above.
        w, zeta, h = 2 * math.pi * 40.0, 0.05, 1e-3
        tau = delay_samples * h
        wd = w * math.sqrt(1 - zeta**2)
        p = complex(-zeta * w, wd)

        def step(t):
            tt = np.maximum(t, 0.0)
            val = 1 - np.exp(-zeta * w * tt) * (
                np.cos(wd * tt) + zeta / math.sqrt(1 - zeta**2) * np.sin(wd * tt)
            )
            return np.where(t >= 0, val, 0.0)

        t = np.arange(200) * h
        expected = step(t - tau) - step(t - tau - h)
        zd = zoh_equivalent(Factored([], [p, p.conjugate()], w * w, delay_s=tau), h)
        np.testing.assert_allclose(pulse_response_of(zd, 200), expected, rtol=0, atol=1e-12)

    def test_pure_gain_with_delay(self):
        # K e^{-s tau}: y[k] = K u(kh - tau); with u held, a fractional delay
        # reads the previous sample: K z^-(d+1) for f > 0, K z^-d for f = 0.
        h = 0.01
        zd = zoh_equivalent(Factored([], [], 2.5), h, delay_s=2.3 * h)
        assert zd.zeros.size == 0 and zd.poles.size == 3 and np.all(zd.poles == 0)
        assert zd.gain == pytest.approx(2.5, rel=1e-14)
        zd = zoh_equivalent(Factored([], [], 2.5), h, delay_s=2 * h)
        assert zd.poles.size == 2 and zd.gain == pytest.approx(2.5, rel=1e-14)

    def test_direct_feedthrough_with_fraction(self):
        # G(s) = 2 (s + 3)/(s + 1) = 2 + 4/(s + 1): the feedthrough reads
        # u(kh - tau'), i.e. the previous sample for 0 < tau' < h.
        h = 0.01
        plant = Factored([-3.0], [-1.0], 2.0)
        zd = zoh_equivalent(plant, h, delay_s=0.5 * h)
        t = np.arange(30) * h

        def step(t):  # step response of 2 + 4/(s + 1): 2 + 4 (1 - e^{-t})
            return np.where(t >= 0, 2 + 4 * (1 - np.exp(-np.maximum(t, 0))), 0.0)

        expected = step(t - 0.5 * h) - step(t - 1.5 * h)
        np.testing.assert_allclose(pulse_response_of(zd, 30), expected, atol=1e-12)

    def test_double_integrator(self):
        # 1/s^2 sampled with a hold: h^2 (z + 1) / (2 (z - 1)^2) (Franklin,
        # Powell & Workman, 1998, ZOH equivalent of the double integrator);
        # the poles stay exactly at z = 1 (boundary classification needs it).
        h = 0.02
        zd = zoh_equivalent(Factored([], [0.0, 0.0], 1.0), h)
        assert np.all(zd.poles == 1.0)
        np.testing.assert_allclose(zd.zeros, [-1.0], atol=1e-12)
        assert zd.gain == pytest.approx(h * h / 2, rel=1e-12)


# ---------------------------------------------------------------------------
# ZOH: agreement with scipy.signal.cont2discrete("zoh")
# ---------------------------------------------------------------------------
class TestZohAgainstScipy:
    @pytest.mark.parametrize("seed", range(12))
    def test_random_blocks(self, seed):
        rng = np.random.default_rng(seed)
        n = int(rng.integers(1, 9))
        m = int(rng.integers(0, n))  # strictly proper, as plants are
        blk = random_block(rng, n, m)
        h = 10 ** rng.uniform(-4, -2)
        d = int(rng.integers(0, 3))
        zd = zoh_equivalent(blk, h, delay_s=d * h)
        # independent: scipy.signal.cont2discrete(method="zoh"), times z^-d
        w = np.linspace(0.01, math.pi / h, 400)
        ref = scipy_discretized_response(blk, h, "zoh", w) * np.exp(-1j * w * h * d)
        # scipy's own rounding is ~1e-8 here; values below 1e-12 of the peak
        # (deep roll-off) are compared absolutely
        np.testing.assert_allclose(zd.response(w), ref, rtol=1e-7, atol=1e-12 * np.abs(ref).max())

    @pytest.mark.parametrize(
        "zeros,poles,gain",
        [
            ([], [2.0], 3.0),  # unstable first-order plant
            ([], [0.0, -10.0], 10.0),  # motor: integrator and a lag
            ([-5.0], [0.0, 0.0, -40.0], 40.0),  # double integrator with a lead
            ([], [complex(0, 30), complex(0, -30)], 900.0),  # undamped resonance
        ],
    )
    def test_unstable_and_boundary_plants(self, zeros, poles, gain):
        # scipy.signal.cont2discrete("zoh") as the independent computation;
        # poles stay exactly exp(p h) (on the unit circle for boundary poles)
        blk = Factored(zeros, poles, gain)
        h = 5e-3
        zd = zoh_equivalent(blk, h)
        np.testing.assert_allclose(
            np.sort_complex(zd.poles), np.sort_complex(np.exp(np.array(poles) * h)), rtol=1e-15
        )
        w = np.linspace(0.37, math.pi / h, 300)
        ref = scipy_discretized_response(blk, h, "zoh", w)
        np.testing.assert_allclose(zd.response(w), ref, rtol=1e-8, atol=1e-14 * np.abs(ref).max())
        if any(p == 0 for p in poles):
            assert zd.boundary_poles().size == sum(1 for p in poles if p == 0)

    def test_zero_block(self):
        zd = zoh_equivalent(Factored([], [-1.0], 0.0), 0.1, delay_s=0.05)
        assert zd.gain == 0.0 and zd.zeros.size == 0 and zd.poles.size == 2

    def test_state_space_input_against_scipy(self):
        a = np.array([[0.0, 1.0], [-4e4, -40.0]])
        b = np.array([[0.0], [4e4]])
        c = np.array([[1.0, 0.0]])
        d = np.array([[0.1]])
        h = 1e-3
        zd = zoh_equivalent(StateSpace(a, b, c, d), h)
        ad, bd, cd, dd, _ = sig.cont2discrete((a, b, c, d), h, method="zoh")
        w = np.linspace(0.1, math.pi / h, 300)
        ref = state_space_response(ad, bd, cd, dd, np.exp(1j * w * h))
        np.testing.assert_allclose(zd.response(w), ref, rtol=1e-10)

    def test_factored_and_state_space_inputs_agree(self):
        blk = Factored([-20.0], [-5.0, complex(-3, 40), complex(-3, -40)], 800.0, delay_s=0.0031)
        ss = scaled_cascade_realization(blk)
        ss = StateSpace(ss.a, ss.b, ss.c, ss.d, delay_s=blk.delay_s)
        h = 0.002
        w = np.linspace(0.1, math.pi / h, 200)
        np.testing.assert_allclose(
            zoh_equivalent(ss, h).response(w), zoh_equivalent(blk, h).response(w), rtol=1e-11
        )


# ---------------------------------------------------------------------------
# ZOH at high order against an independent 50-digit modal computation
# ---------------------------------------------------------------------------
def modal_zoh_response_mp(block: Factored, h: float, tau_frac: float, z_points) -> np.ndarray:
    """ZOH equivalent of a block with distinct poles by partial fractions, in mpmath.

    G(s) = D + sum_i r_i / (s - p_i), r_i = K prod(p_i - z) / prod_{j != i}(p_i - p_j).
    With a hold and a delay tau' in [0, h) each term r/(s - p) samples to
    (Franklin, Powell & Workman, 1998, section 4.3, modified z-transform)
        (g0 z + g1) / (z (z - e^{p h})),
        g0 = r (e^{p (h - tau')} - 1) / p,  g1 = r e^{p (h - tau')} (e^{p tau'} - 1) / p
    (for tau' = 0: r (e^{p h} - 1) / p / (z - e^{p h})); the feedthrough D
    reads u[k - 1] when tau' > 0. Here D = 0 (strictly proper block).
    """
    mpmath.mp.dps = 50
    zs = [mpmath.mpc(complex(z)) for z in block.zeros]
    ps = [mpmath.mpc(complex(p)) for p in block.poles]
    k = mpmath.mpf(block.gain)
    hh = mpmath.mpf(h)
    tp = mpmath.mpf(tau_frac)
    residues = []
    for i, p in enumerate(ps):
        num = k
        for z in zs:
            num *= p - z
        for j, q in enumerate(ps):
            if j != i:
                num /= p - q
        residues.append(num)
    out = []
    for zc in z_points:
        z = mpmath.mpc(complex(zc))
        acc = mpmath.mpc(0)
        for r, p in zip(residues, ps, strict=True):
            e = mpmath.exp(p * hh)
            if tp == 0:
                acc += r * (e - 1) / p / (z - e)
            else:
                g0 = r * (mpmath.exp(p * (hh - tp)) - 1) / p
                g1 = r * mpmath.exp(p * (hh - tp)) * (mpmath.exp(p * tp) - 1) / p
                acc += (g0 * z + g1) / (z * (z - e))
        out.append(complex(acc))
    return np.array(out)


class TestZohHighOrder:
    @pytest.mark.parametrize("order,seed", [(10, 1), (30, 2), (50, 3)])
    @pytest.mark.parametrize("fraction", [0.0, 0.37])
    def test_flexible_structure_against_mpmath(self, order, seed, fraction):
        # A flexible mechanism: a rigid-body pole near the origin and lightly
        # damped pole/zero pairs from 10 Hz to 2 kHz, sampled at 10 kHz.
        rng = np.random.default_rng(seed)
        m = (order - 2) // 2
        wp = 2 * np.pi * np.sort(10 ** rng.uniform(1, 3.3, size=m))
        zp = 10 ** rng.uniform(-3, -1, size=m)
        wz = wp * 10 ** rng.uniform(-0.1, 0.1, size=m)
        zz = 10 ** rng.uniform(-3, -1, size=m)
        p = -zp * wp + 1j * wp * np.sqrt(1 - zp**2)
        z = -zz * wz + 1j * wz * np.sqrt(1 - zz**2)
        blk = Factored(
            np.concatenate([z, z.conj()]), np.concatenate([p, p.conj(), [-0.5, -5.0]]), 1.0
        )
        blk = blk.scaled(1.0 / abs(blk.evaluate(1j)[()]))
        h = 1e-4
        with warnings.catch_warnings():
            warnings.simplefilter("error", NumericalWarning)
            zd = zoh_equivalent(blk, h, delay_s=fraction * h)
        w = np.geomspace(1.0, math.pi / h, 60)
        zpts = np.exp(1j * w * h)
        ref = modal_zoh_response_mp(blk, h, fraction * h, zpts)
        got = zd.response(w)
        rel = np.abs(got - ref) / np.abs(ref)
        # measured: below 3e-11 relative up to order 50; asserted with margin
        assert rel.max() < 1e-9, rel.max()


class TestZohRandomPlants:
    def test_random_plants_with_delays_against_mpmath(self):
        # 80 seeded random stable plants of order 1-20 (strictly proper, roots
        # over up to five decades), sample times 1e-4..1e-1 s, delays of 0-5
        # samples: the factored ZOH equivalent against the 50-digit modal
        # computation (mpmath; Franklin, Powell & Workman, 1998, section 4.3).
        # Relative error where |H| is above 1e-6 of its peak, absolute error
        # (relative to the peak) everywhere: below, a deep roll-off or a
        # notch dip holds few digits in double precision.
        rng = np.random.default_rng(2026)
        worst = 0.0
        worst_abs = 0.0
        for _ in range(80):
            n = int(rng.integers(1, 21))
            blk = random_block(rng, n, int(rng.integers(0, n)), w_lo=0.1,
                               w_hi=10 ** rng.uniform(2, 4))
            h = 10 ** rng.uniform(-4, -1)
            tau = rng.uniform(0, 5) * h
            with warnings.catch_warnings():
                warnings.simplefilter("error", NumericalWarning)
                zd = zoh_equivalent(blk, h, delay_s=tau)
            d, f = split_delay(tau, h)
            w = np.geomspace(1e-2, math.pi / h, 25)
            z = np.exp(1j * w * h)
            ref = modal_zoh_response_mp(blk, h, f * h, z) * z ** (-d)
            got = zd.response(w)
            peak = np.abs(ref).max()
            sel = np.abs(ref) > 1e-6 * peak
            worst = max(worst, float(np.max(np.abs(got[sel] / ref[sel] - 1))))
            worst_abs = max(worst_abs, float(np.max(np.abs(got - ref)) / peak))
        # measured: 4e-7 relative and 2e-7 of the peak at worst, 1e-12 typical
        assert worst < 1e-6, worst
        assert worst_abs < 1e-6, worst_abs


# ---------------------------------------------------------------------------
# Substitution rules
# ---------------------------------------------------------------------------
class TestSubstitution:
    @pytest.mark.parametrize("seed", range(8))
    @pytest.mark.parametrize("method", METHODS)
    def test_substitution_identity(self, seed, method):
        # By definition the discrete block is H_d(z) = H(s(z)) for the
        # method's substitution s(z) (Franklin, Powell & Workman, 1998,
        # section 6.3); checked at random points of the z-plane with the
        # continuous factored form, which pins zeros, poles and gain at once.
        rng = np.random.default_rng(100 + seed)
        n = int(rng.integers(1, 7))
        blk = random_block(rng, n, int(rng.integers(0, n + 1)), w_hi=2e2)
        h = 1e-3
        zd = discretize_block(blk, method, h)
        zpts = rng.normal(size=20) + 1j * rng.normal(size=20)
        s_of_z = {
            "tustin": 2 / h * (zpts - 1) / (zpts + 1),
            "backward_euler": (zpts - 1) / (zpts * h),
            "forward_euler": (zpts - 1) / h,
        }[method]
        np.testing.assert_allclose(zd.evaluate(zpts), blk.evaluate(s_of_z), rtol=1e-10)
        # DC is kept exactly by all three rules (s = 0 <-> z = 1)
        assert zd.evaluate(1.0)[()].real == pytest.approx(blk.evaluate(0.0)[()].real, rel=1e-12)

    @pytest.mark.parametrize(
        "method,scipy_method",
        [("tustin", "bilinear"), ("forward_euler", "euler"), ("backward_euler", "backward_diff")],
    )
    @pytest.mark.parametrize("seed", range(6))
    def test_against_scipy_cont2discrete(self, method, scipy_method, seed):
        # scipy.signal.cont2discrete as an independent computation; compared
        # through frequency responses.
        rng = np.random.default_rng(200 + seed)
        n = int(rng.integers(1, 6))
        blk = random_block(rng, n, int(rng.integers(0, n + 1)), w_hi=3e2)
        h = 1e-3
        zd = discretize_block(blk, method, h)
        w = np.linspace(0.1, 0.999 * math.pi / h, 300)
        ref = scipy_discretized_response(blk, h, scipy_method, w)
        np.testing.assert_allclose(zd.response(w), ref, rtol=1e-7, atol=1e-12 * np.abs(ref).max())

    def test_tustin_frequency_warping_closed_form(self):
        # Bilinear rule: H_d(e^{j theta}) = H(j (2/h) tan(theta / 2)) for all
        # theta (Franklin, Powell & Workman, 1998, section 6.3.2).
        blk = Factored([-30.0], [complex(-5, 200), complex(-5, -200), -1000.0], 5e4)
        h = 1e-3
        zd = discretize_block(blk, "tustin", h)
        theta = np.linspace(0.01, math.pi - 0.01, 200)
        expected = blk.evaluate(1j * 2 / h * np.tan(theta / 2))
        np.testing.assert_allclose(zd.evaluate(np.exp(1j * theta)), expected, rtol=1e-11)

    def test_tustin_excess_poles_give_zeros_at_minus_one(self):
        blk = Factored([], [-10.0, -20.0, -30.0], 6000.0)
        zd = discretize_block(blk, "tustin", 0.01)
        assert np.sum(zd.zeros == -1.0) == 3
        # Nyquist: |H_d(-1)| = 0 exactly (all three zeros there)
        assert zd.evaluate(-1.0)[()] == 0

    def test_unfiltered_derivative(self):
        # PID kp + ki/s + kd s = (kd s^2 + kp s + ki)/s: improper.
        kp, ki, kd, h = 2.0, 50.0, 0.01, 1e-3
        disc = np.roots([kd, kp, ki])
        pid = Factored(disc, [0.0], kd)
        # Tustin: kd s -> kd (2/h)(z - 1)/(z + 1): a pole at z = -1
        zt = discretize_block(pid, "tustin", h)
        assert np.any(zt.poles == -1.0) and zt.is_proper
        # backward Euler: kd (z - 1)/(h z): a pole at z = 0, causal
        zb = discretize_block(pid, "backward_euler", h)
        assert np.any(zb.poles == 0.0) and zb.is_proper
        zpts = np.array([0.3 + 0.4j, 2.0, -0.7j])
        s = (zpts - 1) / (zpts * h)
        np.testing.assert_allclose(zb.evaluate(zpts), kp + ki / s + kd * s, rtol=1e-12)
        # forward Euler keeps the block improper (non-causal): said in the docstring
        assert not discretize_block(pid, "forward_euler", h).is_proper

    def test_root_mapped_to_infinity(self):
        # Tustin maps s = 2/h to z = infinity: the factor is the constant -4/h.
        h = 0.01
        blk = Factored([2 / h], [-5.0], 1.0)
        zd = discretize_block(blk, "tustin", h)
        zpts = np.array([0.2 + 0.1j, -3.0])
        np.testing.assert_allclose(
            zd.evaluate(zpts), blk.evaluate(2 / h * (zpts - 1) / (zpts + 1)), rtol=1e-12
        )
        assert zd.zeros.size == 0


class TestPrewarp:
    @staticmethod
    def notch(center_hz, width_hz, depth_db):
        # FORMATS.md section 3 notch: (s^2 + 2 zz w s + w^2)/(s^2 + 2 zp w s + w^2)
        w = 2 * math.pi * center_hz
        zp = width_hz / (2 * center_hz)
        zz = zp * 10 ** (-depth_db / 20) if math.isfinite(depth_db) else 0.0
        pz = complex(-zz * w, w * math.sqrt(1 - zz**2))
        pp = complex(-zp * w, w * math.sqrt(1 - zp**2))
        return Factored([pz, pz.conjugate()], [pp, pp.conjugate()], 1.0), w

    @pytest.mark.parametrize("center_hz,fs", [(1800.0, 8000.0), (300.0, 1000.0), (50.0, 2000.0)])
    def test_notch_depth_exact_at_centre(self, center_hz, fs):
        # With c = w0 / tan(w0 h / 2), the point e^{j w0 h} maps back to
        # s = j w0 exactly, so |H_d(e^{j w0 h})| = |H(j w0)| = zz/zp, the
        # continuous depth 10^(-depth/20) (closed form of the notch at its centre).
        blk, w0 = self.notch(center_hz, 0.2 * center_hz, 25.0)
        h = 1 / fs
        zd = discretize_block(blk, "tustin_prewarp", h, prewarp_rad_s=w0)
        assert abs(zd.response(w0)[()]) == pytest.approx(10 ** (-25 / 20), rel=1e-11)

    @pytest.mark.parametrize("center_hz,fs", [(1800.0, 8000.0), (450.0, 1000.0)])
    def test_infinitely_deep_notch_lands_exactly(self, center_hz, fs):
        blk, w0 = self.notch(center_hz, 0.1 * center_hz, math.inf)
        h = 1 / fs
        zd = discretize_block(blk, "tustin_prewarp", h, prewarp_rad_s=w0)
        assert abs(zd.response(w0)[()]) < 1e-12
        np.testing.assert_allclose(np.abs(np.angle(zd.zeros)), w0 * h, rtol=1e-13)
        np.testing.assert_allclose(np.abs(zd.zeros), 1.0, rtol=1e-14)

    @pytest.mark.parametrize("center_hz,fs", [(1800.0, 8000.0), (100.0, 1000.0), (3900.0, 8000.0)])
    def test_plain_tustin_shift_matches_tan_warping(self, center_hz, fs):
        # Plain Tustin maps s = j w to z = (c + j w)/(c - j w), c = 2/h, whose
        # angle is 2 atan(w h / 2): the notch appears at
        # f_d = (fs / pi) atan(pi f / fs) (closed form, tan warping;
        # Franklin, Powell & Workman, 1998, section 6.3.2).
        blk, w0 = self.notch(center_hz, 0.1 * center_hz, math.inf)
        h = 1 / fs
        zd = discretize_block(blk, "tustin", h)
        f_zero = float(np.max(np.angle(zd.zeros))) / (2 * math.pi * h)
        expected = fs / math.pi * math.atan(math.pi * center_hz / fs)
        assert f_zero == pytest.approx(expected, rel=1e-12)
        assert prewarp_shift(center_hz, fs) == pytest.approx(expected, rel=1e-15)
        assert prewarp_shift(center_hz, fs) < center_hz

    def test_prewarp_constant(self):
        h = 1e-3
        assert tustin_constant(h) == 2 / h
        # small w0: c -> 2/h (tan x ~ x)
        assert tustin_constant(h, 1e-3) == pytest.approx(2 / h, rel=1e-12)
        w0 = 1000.0
        assert tustin_constant(h, w0) == pytest.approx(w0 / math.tan(w0 * h / 2), rel=1e-15)

    def test_prewarp_rejected_at_nyquist_and_when_missing(self):
        blk, _ = self.notch(100.0, 10.0, 20.0)
        with pytest.raises(ValueError, match="Nyquist"):
            discretize_block(blk, "tustin_prewarp", 1e-3, prewarp_rad_s=math.pi / 1e-3)
        with pytest.raises(ValueError, match="prewarp_rad_s"):
            discretize_block(blk, "tustin_prewarp", 1e-3)
        with pytest.raises(ValueError, match="only used"):
            discretize_block(blk, "tustin", 1e-3, prewarp_rad_s=100.0)


class TestBadBlocks:
    def test_errors(self):
        blk = Factored([], [-1.0], 1.0)
        with pytest.raises(ValueError, match="unknown discretization method"):
            discretize_block(blk, "matched", 0.1)
        with pytest.raises(ValueError, match="continuous"):
            discretize_block(Factored([], [0.5], 1.0, sample_time_s=0.1), "tustin", 0.1)
        with pytest.raises(ValueError, match="transport delay"):
            discretize_block(Factored([], [-1.0], 1.0, delay_s=0.1), "tustin", 0.1)
        with pytest.raises(ValueError, match="improper"):
            zoh_equivalent(Factored([-1.0], [], 1.0), 0.1)
        with pytest.raises(ValueError, match="sample_time_s"):
            zoh_equivalent(blk, 0.0)
        with pytest.raises(ValueError, match="delay"):
            zoh_equivalent(blk, 0.1, delay_s=-1.0)


# ---------------------------------------------------------------------------
# Delays, hold and delay factors
# ---------------------------------------------------------------------------
class TestFactors:
    def test_split_delay(self):
        assert split_delay(0.003, 0.001) == (3, 0.0)  # 2.9999999999999996 samples
        d, f = split_delay(0.0025, 0.001)
        assert d == 2 and f == pytest.approx(0.5, rel=1e-12)
        assert split_delay(0.0, 0.001) == (0, 0.0)

    def test_hold_factor_closed_form(self):
        # (1 - e^{-j w h})/(j w h) = e^{-j w h/2} sin(w h/2)/(w h/2): phase
        # -w h/2 (Astrom & Wittenmark, Computer-Controlled Systems, 1997).
        h = 1e-3
        hold = HoldFactor(h)
        w = np.linspace(1.0, math.pi / h, 100)
        direct = (1 - np.exp(-1j * w * h)) / (1j * w * h)
        np.testing.assert_allclose(hold.response(w), direct, rtol=1e-12)
        np.testing.assert_allclose(np.angle(hold.response(w)), -w * h / 2, atol=1e-12)
        assert hold.response(0.0)[()] == 1.0
        assert hold.unstable_poles == 0 and hold.integrators == 0
        assert hold.w_min == 0.0 and hold.w_max == math.inf and hold.grid().size == 0

    def test_hold_factor_is_a_response_factor(self):
        from ruleguard.analysis.openloop import OpenLoop, ResponseFactor

        hold = HoldFactor(0.01)
        assert isinstance(hold, ResponseFactor)
        assert isinstance(DelayFactor(0.002), ResponseFactor)
        loop = OpenLoop(Factored([], [], 1.0, sample_time_s=0.01), (hold, DelayFactor(0.002)))
        assert loop.w_max == pytest.approx(math.pi / 0.01)
        assert loop.response(10.0)[()] == pytest.approx(
            hold.response(10.0)[()] * np.exp(-0.02j), rel=1e-14
        )

    def test_delay_factor(self):
        tau = 0.0037
        w = np.linspace(0, 1e4, 50)
        np.testing.assert_allclose(DelayFactor(tau).response(w), np.exp(-1j * w * tau), rtol=1e-15)
        with pytest.raises(ValueError):
            DelayFactor(-1.0)


class TestSectionGroups:
    def test_groups_keep_pairs_and_counts(self):
        rng = np.random.default_rng(5)
        for _ in range(50):
            n = int(rng.integers(1, 12))
            blk = random_block(rng, n, int(rng.integers(0, n + 1)))
            groups = section_groups(blk.zeros, blk.poles, discrete=False)
            zs = np.concatenate([np.array(g[0], complex) for g in groups])
            ps = np.concatenate([np.array(g[1], complex) for g in groups])
            np.testing.assert_allclose(np.sort_complex(zs), np.sort_complex(blk.zeros))
            np.testing.assert_allclose(np.sort_complex(ps), np.sort_complex(blk.poles))
            for zg, pg in groups:
                assert 1 <= len(pg) <= 2 and len(zg) <= len(pg)
                # each section is real: its roots are closed under conjugation
                assert np.allclose(np.sort_complex(np.conj(pg)), np.sort_complex(pg))
                assert np.allclose(np.sort_complex(np.conj(zg)), np.sort_complex(zg))
