"""Nyquist contour and winding numbers (ruleguard.analysis.contour).

Every expected count below is derived in a comment from the closed-loop
characteristic polynomial (Routh-Hurwitz for s, Jury or explicit roots for z)
and Z = P - ccw (Nyquist, Bell Syst. Tech. J. 11(1), 1932).
"""

from __future__ import annotations

import math

import numpy as np
import pytest

from ruleguard.analysis.contour import ccw_encirclements, sample_contour
from ruleguard.analysis.openloop import OpenLoop
from ruleguard.models.lti import Factored


def loop(zeros, poles, gain, delay=0.0, h=None):
    return OpenLoop(Factored(zeros, poles, gain, delay, h))


class TestContinuous:
    @pytest.mark.parametrize("gain, ccw", [(1.0, 0), (5.9, 0), (6.1, -2), (30.0, -2)])
    def test_third_order_type_one(self, gain, ccw):
        # K/(s(s+1)(s+2)): s^3 + 3s^2 + 2s + K, Routh row s^1 = (6 - K)/3,
        # stable iff 0 < K < 6, two RHP roots beyond; P = 0 so ccw = -Z.
        assert ccw_encirclements(loop([], [0, -1, -2], gain)) == ccw

    def test_scaled_point_is_the_scaled_gain(self):
        # winding about -1/k of L equals the winding about -1 of kL
        L = loop([], [0, -1, -2], 1.0)
        for k, ccw in [(2.0, 0), (5.99, 0), (6.01, -2), (100.0, -2)]:
            assert ccw_encirclements(L, -1.0 / k) == ccw

    def test_through_critical_point(self):
        # K = 6: closed-loop poles +-j sqrt(2), the curve passes through -1
        assert ccw_encirclements(loop([], [0, -1, -2], 6.0)) is None

    @pytest.mark.parametrize("gain, ccw", [(0.5, 0), (2.0, 1)])
    def test_open_loop_unstable_first_order(self, gain, ccw):
        # K/(s-1): closed-loop pole 1 - K; P = 1, stable (Z = 0) iff K > 1
        assert ccw_encirclements(loop([], [1.0], gain)) == ccw

    def test_undamped_pair_is_indented(self):
        # 1/((s^2+1)(s+1)): s^3 + s^2 + s + 2, Routh first column 1, 1, -1, 2:
        # two sign changes -> Z = 2, P = 0 (the pair is on the axis) -> ccw = -2
        assert ccw_encirclements(loop([], [1j, -1j, -1], 1.0)) == -2

    def test_undamped_pair_stabilised_by_zero(self):
        # 2(s+1)/((s^2+4)(s+3)): s^3 + 3s^2 + 6s + 14; Routh 1, 3, (18-14)/3, 14 > 0
        assert ccw_encirclements(loop([-1], [2j, -2j, -3], 2.0)) == 0

    @pytest.mark.parametrize("gain, ccw", [(0.4, -2), (0.6, 0), (50.0, 0)])
    def test_triple_integrator(self, gain, ccw):
        # K(s+1)^2/s^3: s^3 + K s^2 + 2K s + K, Routh row s^1 = 2K - 1:
        # stable iff K > 1/2, else two RHP roots (first column K > 0, 2K-1 < 0, K > 0)
        assert ccw_encirclements(loop([-1, -1], [0, 0, 0], gain)) == ccw

    @pytest.mark.parametrize("zeta", [0.001, 0.005, 0.02])
    def test_lightly_damped_resonance_not_missed(self, zeta):
        # k/s * wn^2/(s^2 + 2 zeta wn s + wn^2): s^3 + 2 zeta wn s^2 + wn^2 s + k wn^2,
        # Routh: stable iff k < 2 zeta wn; the peak at wn is only 2 zeta wn wide.
        wn = 10.0
        kc = 2 * zeta * wn
        pole = complex(-zeta * wn, wn * math.sqrt(1 - zeta**2))
        for k, ccw in [(0.97 * kc, 0), (1.03 * kc, -2)]:
            L = loop([], [0, pole, pole.conjugate()], k * wn**2)
            assert ccw_encirclements(L) == ccw

    @pytest.mark.parametrize("tau, ccw", [(0.5, 0), (1.5, 0), (1.6, -2), (5.0, -2)])
    def test_integrator_with_dead_time(self, tau, ccw):
        # e^{-s tau}/s: phase -90 - w tau (deg: rad), |L| = 1/w; the first -180
        # crossing is at w = pi/(2 tau) with |L| = 2 tau/pi: stable iff tau < pi/2.
        # Beyond it the first pair of roots crosses into the RHP (Z = 2).
        assert ccw_encirclements(loop([], [0], 1.0, tau)) == ccw

    def test_improper_loop_is_refused(self):
        with pytest.raises(ValueError, match="improper"):
            ccw_encirclements(loop([-1, -2], [-3], 1.0))

    def test_biproper_loop(self):
        # 3(s-1)/(s+1) = L: 1 + L = (4s - 2)/(s+1): root s = 1/2, Z = 1, P = 0
        assert ccw_encirclements(loop([1.0], [-1.0], 3.0)) == -1

    def test_sampling_resolves_a_light_resonance(self):
        # the step bound puts samples inside the half-power band wn(1 +- zeta)
        zeta, wn = 0.001, 10.0
        p = complex(-zeta * wn, wn * math.sqrt(1 - zeta**2))
        c = sample_contour(loop([], [p, p.conjugate(), -1.0], 1.0))
        inside = np.count_nonzero(np.abs(c.w - wn) < zeta * wn)
        assert inside >= 5


class TestDiscrete:
    @pytest.mark.parametrize("gain, ccw", [(0.5, 0), (1.9, 0), (2.1, -1)])
    def test_integrator_z_minus_one(self, gain, ccw):
        # K/(z-1): closed-loop pole 1 - K, inside the unit circle iff 0 < K < 2
        assert ccw_encirclements(loop([], [1.0], gain, h=0.01)) == ccw

    def test_critical_at_nyquist(self):
        # K = 2: closed-loop pole -1 on the unit circle; L(-1) = -1 exactly
        assert ccw_encirclements(loop([], [1.0], 2.0, h=0.01)) is None

    @pytest.mark.parametrize("gain, ccw", [(0.5, 0), (0.99, 0), (1.01, -2)])
    def test_integrator_with_one_sample_delay(self, gain, ccw):
        # K/(z(z-1)): z^2 - z + K, roots product K: a complex pair leaves the
        # unit circle at K = 1 (e^{+-j pi/3})
        assert ccw_encirclements(loop([], [0.0, 1.0], gain, h=1e-3)) == ccw

    def test_pole_at_minus_one_is_indented(self):
        # 0.5/(z+1): closed-loop pole -1.5 outside; P = 0 (z = -1 on the circle)
        assert ccw_encirclements(loop([], [-1.0], 0.5, h=0.1)) == -1

    def test_pair_on_the_unit_circle(self):
        # K (z - 0.5)/((z^2 - 2cos(1) z + 1)(z - 0.2)) with K = 0.1: the
        # reference is numpy.roots of the characteristic polynomial
        th = 1.0
        poles = [np.exp(1j * th), np.exp(-1j * th), 0.2]
        k = 0.1
        char = np.polyadd(np.real(np.poly(poles)), k * np.array([1.0, -0.5]))
        z_ref = int(np.count_nonzero(np.abs(np.roots(char)) > 1))
        assert ccw_encirclements(loop([0.5], poles, k, h=0.02)) == -z_ref

    def test_unstable_open_loop_discrete(self):
        # K/(z - 1.5): closed-loop pole 1.5 - K inside iff 0.5 < K < 2.5; P = 1
        assert ccw_encirclements(loop([], [1.5], 1.0, h=0.01)) == 1
        assert ccw_encirclements(loop([], [1.5], 0.3, h=0.01)) == 0


class _SmoothFactor:
    """A response factor given by a function (the test's own measured data)."""

    unstable_poles = 0
    integrators = 0

    def __init__(self, fun, w_max):
        self._fun = fun
        self._w_max = w_max

    @property
    def w_min(self):
        return 1e-3

    @property
    def w_max(self):
        return self._w_max

    def response(self, w):
        w = np.asarray(w, dtype=float)
        return np.where(w <= self._w_max * (1 + 1e-12), self._fun(w), np.nan)

    def grid(self):
        return np.geomspace(1e-3, self._w_max, 200)


class TestFactors:
    def test_factor_closed_by_a_segment(self):
        # K/s times a plant known only by its response 1/((jw+1)(0.1jw+1)) up to
        # 1000 rad/s: same verdict as the rational loop (Routh on
        # K/(s(s+1)(0.1s+1)): 0.1s^3 + 1.1s^2 + s + K, stable iff K < 11)
        def plant(w):
            s = 1j * w
            return 1.0 / ((s + 1) * (0.1 * s + 1))

        for k, ccw in [(5.0, 0), (15.0, -2)]:
            L = OpenLoop(Factored([], [0.0], k), (_SmoothFactor(plant, 1000.0),))
            assert ccw_encirclements(L) == ccw


class TestDelaySpiral:
    def test_every_spiral_crossing(self):
        # e^{-s}/s crosses the negative real axis where w = pi/2 + 2 pi k (angle
        # -90 deg - w = -180 deg - 2 pi k), at x = -1/w, always upward (the
        # winding about points nearer 0 drops by 2 at each): closed form.
        from ruleguard.analysis.crossings import negative_axis_crossings

        c = sample_contour(loop([], [0.0], 1.0, 1.0), tail_level=1e-3)
        cr = sorted(negative_axis_crossings(c), key=lambda x: x.w)
        assert len(cr) > 100  # enough to take the vectorized (Illinois) path
        k = np.arange(len(cr))
        ref = math.pi / 2 + 2 * math.pi * k
        w = np.array([x.w for x in cr])
        assert np.max(np.abs(w - ref) / ref) < 1e-12
        assert np.allclose([x.value for x in cr], -1.0 / ref, rtol=1e-12)
        assert all(x.weight == -2 for x in cr)


class _BlockFactor:
    """A factored block seen only through its response (like a block at another rate)."""

    unstable_poles = 0
    integrators = 0
    w_min = 0.0
    w_max = math.inf

    def __init__(self, block):
        self.block = block

    def response(self, w):
        return self.block.response(w)

    def grid(self):
        return np.zeros(0)  # no hint: the sampling must find the resonance itself


class TestBlockFactor:
    @pytest.mark.parametrize("ratio, ccw", [(0.97, 0), (1.03, -2)])
    def test_light_resonance_inside_a_factor(self, ratio, ccw):
        # k/s times wn^2/(s^2 + 2 zeta wn s + wn^2) given as a factor: Routh,
        # stable iff k < 2 zeta wn (as in TestContinuous), zeta = 0.001
        zeta, wn = 0.001, 10.0
        p = complex(-zeta * wn, wn * math.sqrt(1 - zeta**2))
        factor = _BlockFactor(Factored([], [p, p.conjugate()], wn**2))
        L = OpenLoop(Factored([], [0.0], ratio * 2 * zeta * wn), (factor,))
        assert ccw_encirclements(L) == ccw


class TestRoundingOnTheBoundary:
    def test_real_boundary_poles_with_rounding_imaginary_parts(self):
        # z = -1 and z = 1 given with -0.0 / 1e-17 imaginary parts (as rounding
        # leaves them) are the same boundary poles: 0.5/((z-1)(z+1)) has
        # z^2 - 1 + 0.5 = 0, roots +-sqrt(0.5): stable, P = 0
        clean = loop([], [1.0, -1.0], 0.5, h=0.1)
        rounded = loop([], [1.0 - 1e-17j, -1.0 - 1e-17j], 0.5, h=0.1)
        assert ccw_encirclements(clean) == ccw_encirclements(rounded) == 0
