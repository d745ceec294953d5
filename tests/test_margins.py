"""Margins against closed-form results (ruleguard.analysis.margins).

Each expected value is derived in the comment beside it; where a polynomial
root is needed it comes from mpmath (30 digits) as an independent
computation. Accuracy target (METHODS.md): 1e-6 relative on margins and
frequencies, 1e-4 degree on phases.
"""

from __future__ import annotations

import math

import mpmath
import numpy as np
import pytest

from ruleguard.analysis.margins import analyse_open_loop, disk_margin
from ruleguard.analysis.openloop import OpenLoop
from ruleguard.models.lti import Factored

REL = 1e-6
DEG = 1e-4
TWO_PI = 2 * math.pi


def loop(zeros, poles, gain, delay=0.0, h=None):
    return OpenLoop(Factored(zeros, poles, gain, delay, h))


def db(x):
    return 20 * math.log10(x)


def close(a, b, rel=REL):
    return a == pytest.approx(b, rel=rel, abs=1e-12)


def positive_real_roots(coeffs):
    """Positive real roots of a polynomial (highest power first), mpmath 30 digits."""
    mpmath.mp.dps = 30
    roots = mpmath.polyroots([mpmath.mpf(c) for c in coeffs], maxsteps=200, extraprec=100)
    return sorted(float(mpmath.re(r)) for r in roots
                  if abs(mpmath.im(r)) < 1e-20 and mpmath.re(r) > 0)


class TestThirdOrderTypeOne:
    """L = K/(s(s+1)(s+2)) (Routh-Hurwitz: s^3 + 3s^2 + 2s + K, critical K = 6, w = sqrt 2)."""

    def test_gain_margin(self):
        a = analyse_open_loop(loop([], [0, -1, -2], 1.0))
        m = a.margins
        assert a.stability.stable and a.stability.ccw_encirclements == 0
        # at K = 6 the auxiliary polynomial 3s^2 + 6 gives w = sqrt(2): GM = 6
        assert close(m.gain_margin_db, db(6.0))
        assert close(m.gain_margin_hz * TWO_PI, math.sqrt(2))
        assert m.lower_gain_margin_db is None and m.lower_gain_margin_hz is None
        assert m.stable_gain_ranges_db[0][0] is None
        assert len(m.stable_gain_ranges_db) == 1 and close(m.stable_gain_ranges_db[0][1], db(6))

    def test_phase_margin_and_delay_margin(self):
        m = analyse_open_loop(loop([], [0, -1, -2], 1.0)).margins
        # |L| = 1: w^2 (w^2 + 1)(w^2 + 4) = 1, i.e. u^3 + 5u^2 + 4u - 1 = 0, u = w^2
        (u,) = positive_real_roots([1, 5, 4, -1])
        wc = math.sqrt(u)
        pm = 90 - math.degrees(math.atan(wc)) - math.degrees(math.atan(wc / 2))
        assert len(m.crossovers) == 1
        assert close(m.crossover_hz * TWO_PI, wc)
        assert m.phase_margin_deg == pytest.approx(pm, abs=DEG)
        # delay margin = PM (rad) / w_c
        assert close(m.delay_margin_s, math.radians(pm) / wc)
        assert m.delay_margin_samples is None

    def test_unstable_gain(self):
        a = analyse_open_loop(loop([], [0, -1, -2], 10.0))
        assert not a.stability.stable
        assert a.stability.closed_loop_unstable_poles == 2
        m = a.margins
        assert m.gain_margin_db is None and m.delay_margin_s is None and m.disk_margin is None
        # still reported: the stable range, now below 0 dB (K < 6 of 10)
        assert close(m.stable_gain_ranges_db[0][1], db(0.6))
        assert m.phase_margin_deg < 0

    def test_on_the_critical_point(self):
        a = analyse_open_loop(loop([], [0, -1, -2], 6.0))
        assert a.stability.through_critical_point
        assert not a.stability.stable
        assert a.stability.ccw_encirclements is None
        assert a.stability.closed_loop_unstable_poles is None
        assert a.notes


class TestDeadTimeIntegrator:
    """L = K e^{-s tau}/s: |L| = K/w, angle = -90 deg - w tau."""

    @pytest.mark.parametrize("k, tau", [(1.0, 0.2), (3.0, 0.1), (0.5, 2.0)])
    def test_margins(self, k, tau):
        m = analyse_open_loop(loop([], [0.0], k, tau)).margins
        # crossover w_c = K; PM = 90 deg - K tau (rad -> deg)
        assert close(m.crossover_hz * TWO_PI, k)
        assert m.phase_margin_deg == pytest.approx(90 - math.degrees(k * tau), abs=DEG)
        # phase -180 at w = pi/(2 tau): GM = pi/(2 K tau)
        assert close(m.gain_margin_db, db(math.pi / (2 * k * tau)))
        assert close(m.gain_margin_hz * TWO_PI, math.pi / (2 * tau))
        # delay margin (pi/2 - K tau)/K
        assert close(m.delay_margin_s, (math.pi / 2 - k * tau) / k)
        assert m.stable_gain_ranges_db[0][0] is None
        assert len(m.stable_gain_ranges_db) == 1  # every higher interval is unstable

    def test_stable_iff_k_tau_below_half_pi(self):
        assert analyse_open_loop(loop([], [0.0], 1.0, 1.55)).stability.stable
        a = analyse_open_loop(loop([], [0.0], 1.0, 1.6))
        assert not a.stability.stable and a.stability.closed_loop_unstable_poles == 2


class TestOpenLoopUnstable:
    """L = K/(s - 1): closed-loop pole 1 - K; P = 1, stable iff K > 1."""

    def test_stabilised(self):
        a = analyse_open_loop(loop([], [1.0], 2.0))
        assert a.stability.stable and a.stability.open_loop_unstable_poles == 1
        assert a.stability.ccw_encirclements == 1
        m = a.margins
        # L(0) = -K: the curve starts on the negative real axis at -2, k = 1/2
        assert close(m.lower_gain_margin_db, db(0.5))
        assert m.lower_gain_margin_hz == 0.0
        assert m.gain_margin_db is None
        assert len(m.stable_gain_ranges_db) == 1
        assert m.stable_gain_ranges_db[0][1] is None
        # |L| = 1 at w = sqrt(K^2 - 1); PM = atan(w) (angle L = atan(w) - 180)
        wc = math.sqrt(3.0)
        assert close(m.crossover_hz * TWO_PI, wc)
        assert m.phase_margin_deg == pytest.approx(60.0, abs=DEG)

    def test_not_stabilised(self):
        a = analyse_open_loop(loop([], [1.0], 0.5))
        assert not a.stability.stable and a.stability.closed_loop_unstable_poles == 1
        m = a.margins
        assert m.lower_gain_margin_db is None and m.gain_margin_db is None
        # the gains that would stabilise it: k > 2, i.e. above +6.02 dB
        assert len(m.stable_gain_ranges_db) == 1
        assert close(m.stable_gain_ranges_db[0][0], db(2.0))
        assert m.stable_gain_ranges_db[0][1] is None


class TestConditionallyStable:
    """L = K (s+1)^2 / (s^3 (s/10 + 1)^2).

    Times 100: s^5 + 20 s^4 + 100 s^3 + 100K s^2 + 200K s + 100K. Routh:
    a1 = 100 - 5K, a2 = 195K; b1 = (6100K - 500K^2)/a1, b2 = 100K;
    c1 > 0  <=>  100000 K^2 - 1289500 K + 1e6 < 0, so stable for K1 < K < K2
    with K1,2 = (1289500 -+ sqrt(1289500^2 - 4e11))/2e5. At each end the
    auxiliary polynomial b1 s^2 + b2 gives w^2 = 100K/b1.
    """

    def test_two_finite_ends(self):
        disc = math.sqrt(1289500.0**2 - 4e11)
        k1, k2 = (1289500.0 - disc) / 2e5, (1289500.0 + disc) / 2e5

        def omega(k):
            a1 = 100 - 5 * k
            b1 = (6100 * k - 500 * k * k) / a1
            return math.sqrt(100 * k / b1)

        k = 3.0
        a = analyse_open_loop(loop([-1, -1], [0, 0, 0, -10, -10], k * 100))
        m = a.margins
        assert a.stability.stable
        assert close(m.lower_gain_margin_db, db(k1 / k))
        assert close(m.gain_margin_db, db(k2 / k))
        assert close(m.lower_gain_margin_hz * TWO_PI, omega(k1))
        assert close(m.gain_margin_hz * TWO_PI, omega(k2))
        assert len(m.stable_gain_ranges_db) == 1

    def test_below_the_lower_end(self):
        a = analyse_open_loop(loop([-1, -1], [0, 0, 0, -10, -10], 0.5 * 100))
        assert not a.stability.stable and a.stability.closed_loop_unstable_poles == 2


class TestResonance:
    """L = k/s * (wn/wz)^2 (s^2 + 2 z wz s + wz^2)/(s^2 + 2 z wn s + wn^2), z = 0.001.

    |L|^2 = 1 is a cubic in u = w^2:
    c^2 ((wz^2 - u)^2 + 4 z^2 wz^2 u) = u ((wn^2 - u)^2 + 4 z^2 wn^2 u), c = k (wn/wz)^2,
    solved by mpmath; the two narrow crossings around wn lie within a few
    z*wn of it.
    """

    @pytest.mark.parametrize("zeta", [0.001, 0.02])
    def test_all_crossovers(self, zeta):
        wz, wn, k = 8.0, 10.0, 1.0
        c = k * (wn / wz) ** 2
        zp = complex(-zeta * wz, wz * math.sqrt(1 - zeta**2))
        pp = complex(-zeta * wn, wn * math.sqrt(1 - zeta**2))
        L = loop([zp, zp.conjugate()], [0.0, pp, pp.conjugate()], c)
        a = analyse_open_loop(L)
        # expand: lhs - rhs = -u^3 + (2wn^2 - 4z^2wn^2 + c^2) u^2 + ... (below)
        A, B = wz**2, wn**2
        lhs = np.array([c * c, c * c * (-2 * A + 4 * zeta**2 * A), c * c * A * A])
        rhs = np.array([1.0, -2 * B + 4 * zeta**2 * B, B * B, 0.0])
        poly = np.polysub(np.concatenate([[0.0], lhs]), rhs)
        us = positive_real_roots(list(poly))
        ws = [math.sqrt(u) for u in us]
        got = [cr.hz * TWO_PI for cr in a.margins.crossovers]
        assert len(got) == len(ws) == 3
        for g, w in zip(got, ws, strict=True):
            assert close(g, w)
        # reference phases from mpmath at the reference crossovers
        for cr, w in zip(a.margins.crossovers, ws, strict=True):
            s = mpmath.mpc(0, w)
            val = c * (s * s + 2 * zeta * wz * s + wz**2) / (
                s * (s * s + 2 * zeta * wn * s + wn**2))
            ang = float(mpmath.degrees(mpmath.arg(val)))
            pm = (180 + ang + 180) % 360 - 180
            assert cr.phase_margin_deg == pytest.approx(pm, abs=DEG)
        # eigenvalues of the closed loop (numpy.linalg via roots of den + num, order 3)
        char = np.polyadd(np.real(np.poly([0.0, pp, pp.conjugate()])),
                          c * np.real(np.poly([zp, zp.conjugate()])))
        assert a.stability.stable == bool(np.all(np.roots(char).real < 0))

    @pytest.mark.parametrize("zeta", [0.001, 0.005, 0.02])
    def test_gain_margin_at_a_sharp_peak(self, zeta):
        # k/s * wn^2/(s^2 + 2 zeta wn s + wn^2): Routh critical k = 2 zeta wn at w = wn
        wn = 10.0
        pp = complex(-zeta * wn, wn * math.sqrt(1 - zeta**2))
        k = 0.5 * 2 * zeta * wn
        m = analyse_open_loop(loop([], [0.0, pp, pp.conjugate()], k * wn**2)).margins
        assert close(m.gain_margin_db, db(2.0))
        assert close(m.gain_margin_hz * TWO_PI, wn)


class TestRightHalfPlaneZero:
    """L = K (1 - s)/(s (s + 1)): s^2 + (1 - K) s + K, stable iff 0 < K < 1."""

    def test_margins(self):
        k = 0.5
        a = analyse_open_loop(loop([1.0], [0.0, -1.0], -k))
        m = a.margins
        assert a.stability.stable
        # at K = 1: s^2 + 1 -> w = 1; GM = 1/K
        assert close(m.gain_margin_db, db(1 / k))
        assert close(m.gain_margin_hz * TWO_PI, 1.0)
        # |L| = K/w -> w_c = K; PM = 90 - 2 atan(K) degrees
        assert close(m.crossover_hz * TWO_PI, k)
        assert m.phase_margin_deg == pytest.approx(90 - 2 * math.degrees(math.atan(k)), abs=DEG)


class TestDoubleIntegratorWithLead:
    """L = k (s + 1)/(s^2 (s + 9)): s^3 + 9 s^2 + k s + k, Routh 9k > k: stable for all k > 0."""

    def test_no_finite_gain_margins(self):
        a = analyse_open_loop(loop([-1.0], [0, 0, -9.0], 27.0))
        m = a.margins
        assert a.stability.stable
        assert m.stable_gain_ranges_db == ((None, None),)
        assert m.gain_margin_db is None and m.lower_gain_margin_db is None
        # k = 27 puts the crossover at w = 3: 27^2 (9 + 1) = 81 (9 + 81);
        # PM = atan(3) - atan(1/3) = 53.1301 deg (the lead's maximum)
        assert close(m.crossover_hz * TWO_PI, 3.0)
        pm = math.degrees(math.atan(3.0) - math.atan(1 / 3))
        assert m.phase_margin_deg == pytest.approx(pm, abs=DEG)


class TestUndampedPairs:
    def test_stable_for_every_gain(self):
        # k(s+1)/((s^2+4)(s+3)): s^3 + 3s^2 + (4+k)s + 12 + k; Routh 3(4+k) > 12+k <=> k > 0
        m = analyse_open_loop(loop([-1], [2j, -2j, -3], 2.0)).margins
        assert m.stable_gain_ranges_db == ((None, None),)

    def test_unstable_for_every_gain(self):
        # k/((s^2+1)(s+1)): s^3 + s^2 + s + 1 + k; Routh needs 1 > 1 + k: never for k > 0
        a = analyse_open_loop(loop([], [1j, -1j, -1], 1.0))
        assert not a.stability.stable and a.stability.closed_loop_unstable_poles == 2
        assert a.margins.stable_gain_ranges_db == ()

    def test_triple_integrator_lower_margin(self):
        # K(s+1)^2/s^3: stable iff K > 1/2 (Routh row s^1 = 2K - 1); at K = 1/2
        # the auxiliary polynomial K s^2 + K gives w = 1
        m = analyse_open_loop(loop([-1, -1], [0, 0, 0], 2.0)).margins
        assert close(m.lower_gain_margin_db, db(0.25))
        assert close(m.lower_gain_margin_hz * TWO_PI, 1.0)
        assert m.gain_margin_db is None


class TestDiscrete:
    """K/(z - 1) and K/(z (z - 1)) (Astrom & Wittenmark, Computer-Controlled Systems, 1997)."""

    @pytest.mark.parametrize("k", [0.2, 0.5, 1.5])
    def test_integrator(self, k):
        h = 0.01
        a = analyse_open_loop(loop([], [1.0], k, h=h))
        m = a.margins
        assert a.stability.stable
        # L(-1) = -K/2: the gain-margin point is the Nyquist frequency itself
        assert close(m.gain_margin_db, db(2 / k))
        assert close(m.gain_margin_hz, 0.5 / h)
        # |e^{j theta} - 1| = 2 sin(theta/2) = K; angle L = -90 deg - theta/2
        theta = 2 * math.asin(k / 2)
        assert close(m.crossover_hz * TWO_PI * h, theta)
        pm = 90 - math.degrees(theta / 2)
        assert m.phase_margin_deg == pytest.approx(pm, abs=DEG)
        dm = math.radians(pm) / (theta / h)
        assert close(m.delay_margin_s, dm)
        assert close(m.delay_margin_samples, dm / h)

    def test_integrator_unstable(self):
        a = analyse_open_loop(loop([], [1.0], 2.5, h=0.01))
        assert not a.stability.stable and a.stability.closed_loop_unstable_poles == 1

    @pytest.mark.parametrize("k", [0.3, 0.5, 0.9])
    def test_integrator_with_sample_delay(self, k):
        h = 1e-3
        m = analyse_open_loop(loop([], [0.0, 1.0], k, h=h)).margins
        # z^2 - z + K: roots on the circle at K = 1, z = e^{+-j pi/3}
        assert close(m.gain_margin_db, db(1 / k))
        assert close(m.gain_margin_hz * TWO_PI * h, math.pi / 3)
        # |L| = K / |e^{j theta} - 1| -> 2 sin(theta/2) = K; angle = -90 - 3 theta/2
        theta = 2 * math.asin(k / 2)
        assert m.phase_margin_deg == pytest.approx(90 - math.degrees(1.5 * theta), abs=DEG)

    def test_sample_delay_unstable(self):
        a = analyse_open_loop(loop([], [0.0, 1.0], 1.2, h=1e-3))
        assert not a.stability.stable and a.stability.closed_loop_unstable_poles == 2


class TestPeaksAndDiskMargin:
    """L = 4/(s (s + 1)): T = 4/(s^2 + s + 4), wn = 2, zeta = 1/4."""

    def setup_method(self):
        self.m = analyse_open_loop(loop([], [0, -1], 4.0)).margins

    def test_complementary_peak(self):
        # second-order resonance: Mt = 1/(2 zeta sqrt(1 - zeta^2)) at wn sqrt(1 - 2 zeta^2)
        z = 0.25
        assert close(self.m.complementary_peak_db, db(1 / (2 * z * math.sqrt(1 - z * z))))
        assert close(self.m.complementary_peak_hz * TWO_PI, 2 * math.sqrt(1 - 2 * z * z))

    def test_sensitivity_peak(self):
        # |S|^2 = g(u) = (u^2 + u)/(u^2 - 7u + 16), u = w^2; g' = 0 <=> u^2 - 4u - 2 = 0
        u = 2 + math.sqrt(6)
        ms = math.sqrt((u * u + u) / (u * u - 7 * u + 16))
        assert close(self.m.sensitivity_peak_db, db(ms))
        assert close(self.m.sensitivity_peak_hz * TWO_PI, math.sqrt(u))

    def test_bandwidth(self):
        # |T| = 10^(-3/20): (4 - u)^2 + u = 16/c^2, u^2 - 7u + 16 - 16/c^2 = 0
        c2 = 10 ** (-3 / 10)
        u = (7 + math.sqrt(49 - 4 * (16 - 16 / c2))) / 2
        assert close(self.m.bandwidth_hz * TWO_PI, math.sqrt(u))

    def test_disk_margin(self):
        # S - 1/2 = (s^2 + s - 4)/(2 (s^2 + s + 4)); |.|^2 = ((u+4)^2 + u)/(4 ((4-u)^2 + u))...
        # maximised numerically with mpmath as the independent reference
        mpmath.mp.dps = 30

        def f(w):
            s = mpmath.mpc(0, w)
            return -abs((s * s + s - 4) / (2 * (s * s + s + 4)))

        w_star = mpmath.findroot(lambda w: mpmath.diff(f, w), 1.9)
        alpha = float(-1 / f(w_star))
        dm = self.m.disk_margin
        assert close(dm.alpha, alpha)
        assert close(dm.hz * TWO_PI, float(w_star), rel=1e-5)

    @pytest.mark.parametrize("alpha, gain_db, phase_deg", [
        (0.5, 4.44, 28.07), (0.6646, 6.00, 36.76), (0.71, 6.45, 39.09)])
    def test_check_values(self, alpha, gain_db, phase_deg):
        # METHODS.md check values (Seiler, Packard & Gahinet, IEEE CSM 40(5), 2020, formulas)
        d = disk_margin(alpha, None)
        assert d.gain_range_db[1] == pytest.approx(gain_db, abs=0.005)
        assert d.gain_range_db[0] == pytest.approx(-gain_db, abs=0.005)
        assert d.phase_deg == pytest.approx(phase_deg, abs=0.005)

    def test_integrator_has_alpha_two(self):
        # L = k/s: S - 1/2 = (s - k)/(2(s + k)), |.| = 1/2 at every w -> alpha = 2
        d = analyse_open_loop(loop([], [0.0], 3.0)).margins.disk_margin
        assert d.alpha == pytest.approx(2.0, rel=1e-9)
        assert d.gain_range_db == (None, None)
        assert d.phase_deg == pytest.approx(90.0, rel=1e-9)

    def test_unstable_plant_alpha(self):
        # L = 2/(s - 1): S - 1/2 = (s - 3)/(2 (s + 1)), max at w = 0: 3/2 -> alpha = 2/3
        d = analyse_open_loop(loop([], [1.0], 2.0)).margins.disk_margin
        assert close(d.alpha, 2 / 3)
        assert close(d.gain_range_db[1], db(2.0))  # (2 + 2/3)/(2 - 2/3) = 2
        assert d.phase_deg == pytest.approx(math.degrees(2 * math.atan(1 / 3)), abs=DEG)

    def test_implied_bounds(self):
        # Skogestad (J. Process Control 13, 2003): GM >= Ms/(Ms - 1), PM >= 2 asin(1/(2 Ms))
        a = analyse_open_loop(loop([], [0, -1, -2], 1.0)).margins
        ms = 10 ** (a.sensitivity_peak_db / 20)
        assert 10 ** (a.gain_margin_db / 20) >= ms / (ms - 1)
        assert a.phase_margin_deg >= math.degrees(2 * math.asin(1 / (2 * ms)))


class _SampledPlant:
    """A plant known only by its response on a grid (like measured data), closed form inside."""

    unstable_poles = 0
    integrators = 0

    def __init__(self, w_max, points_per_decade=100):
        self._w = np.geomspace(1e-2, w_max, int(points_per_decade * math.log10(w_max / 1e-2)))

    @property
    def w_min(self):
        return float(self._w[0])

    @property
    def w_max(self):
        return float(self._w[-1])

    def _exact(self, w):
        s = 1j * np.asarray(w, dtype=float)
        return 1.0 / ((s + 1) * (s + 2))

    def response(self, w):
        w = np.asarray(w, dtype=float)
        return np.where(w <= self.w_max * (1 + 1e-12), self._exact(w), np.nan)

    def grid(self):
        return self._w


class TestResponseFactors:
    def test_same_margins_as_the_rational_loop(self):
        rational = analyse_open_loop(loop([], [0, -1, -2], 1.0)).margins
        a = analyse_open_loop(OpenLoop(Factored([], [0.0], 1.0), (_SampledPlant(1e3),)))
        assert a.stability.stable
        assert close(a.margins.gain_margin_db, rational.gain_margin_db)
        assert close(a.margins.phase_margin_deg, rational.phase_margin_deg)
        assert not any("closed by a straight segment" in n for n in a.notes)

    def test_note_when_data_ends_too_early(self):
        a = analyse_open_loop(OpenLoop(Factored([], [0.0], 1.0), (_SampledPlant(0.5),)))
        assert any("closed by a straight segment" in n for n in a.notes)


class TestAccuracySweep:
    def test_third_order_crossover_over_gains(self):
        # u^3 + 5u^2 + 4u - K^2 = 0 for |K/(jw(jw+1)(jw+2))| = 1, u = w^2
        for k in [0.1, 0.5, 2.0, 4.0, 5.5]:
            m = analyse_open_loop(loop([], [0, -1, -2], k)).margins
            (u,) = positive_real_roots([1, 5, 4, -k * k])
            assert close(m.crossover_hz * TWO_PI, math.sqrt(u))
            assert close(m.gain_margin_db, db(6 / k))


class _Constant:
    """A response factor equal to 1 at every frequency (known to infinity)."""

    unstable_poles = 0
    integrators = 0
    w_min = 0.0
    w_max = math.inf

    def response(self, w):
        return np.ones(np.shape(w), dtype=complex)

    def grid(self):
        return np.zeros(0)


class TestDiscreteWithFactor:
    def test_closure_at_nyquist_and_note(self):
        # K/(z-1) times a factor: the contour is closed at theta = pi by the
        # segment from L to conj(L); L(-1) = -K/2 = -0.75 lies left of -0.5
        L = OpenLoop(Factored([], [1.0], 1.5, sample_time_s=0.01), (_Constant(),))
        a = analyse_open_loop(L)
        assert a.stability.stable
        assert close(a.margins.gain_margin_db, db(2 / 1.5))
        assert close(a.margins.gain_margin_hz, 50.0)
        assert any("left of -0.5" in n for n in a.notes)


class TestFirstOrderDeadTime:
    """L = K e^{-s tau}/(T s + 1) (proportional control of a first-order plant with dead time).

    Phase crossover: atan(w T) + w tau = pi (solved by mpmath.findroot), GM =
    sqrt(1 + (w T)^2)/K. Gain crossover: w_c = sqrt(K^2 - 1)/T, PM = 180 deg -
    atan(w_c T) - w_c tau (deg).
    """

    @pytest.mark.parametrize("k, tau, T", [(2.0, 0.1, 1.0), (5.0, 0.02, 0.5), (1.5, 1.0, 3.0)])
    def test_margins(self, k, tau, T):
        mpmath.mp.dps = 30
        w180 = float(mpmath.findroot(lambda w: mpmath.atan(w * T) + w * tau - mpmath.pi,
                                     math.pi / (2 * tau)))
        m = analyse_open_loop(loop([], [-1 / T], k / T, tau)).margins
        assert close(m.gain_margin_hz * TWO_PI, w180)
        assert close(m.gain_margin_db, db(math.sqrt(1 + (w180 * T) ** 2) / k))
        wc = math.sqrt(k * k - 1) / T
        pm = 180 - math.degrees(math.atan(wc * T) + wc * tau)
        assert close(m.crossover_hz * TWO_PI, wc)
        assert m.phase_margin_deg == pytest.approx(pm, abs=DEG)
        assert close(m.delay_margin_s, math.radians(pm) / wc)

    def test_low_gain_has_no_crossover(self):
        # K < 1: |L| < 1 everywhere: no phase margin, unbounded delay margin
        m = analyse_open_loop(loop([], [-1.0], 0.5, 0.3)).margins
        assert m.phase_margin_deg is None and m.crossovers == ()
        assert m.delay_margin_s is None
        assert m.gain_margin_db > 0


class TestCancelledBoundaryPole:
    def test_hidden_integrator_is_not_stable(self):
        # s/(s (s + 1)): the closed loop keeps the pole at s = 0 (common practice:
        # a cancelled boundary pole is a hidden marginal mode)
        a = analyse_open_loop(loop([0.0], [0.0, -1.0], 1.0))
        assert not a.stability.stable
        assert a.stability.closed_loop_unstable_poles is None
        assert a.margins.stable_gain_ranges_db == ()
        assert any("cancelled" in n for n in a.notes)


class TestLargeGainMarginWithDelay:
    def test_spiral_examined_until_the_first_crossing(self):
        # 1e-3 e^{-0.1 s}/(s + 1): phase crossover atan(w) + 0.1 w = pi (mpmath),
        # GM = sqrt(1 + w^2)/1e-3 = +84.3 dB, far below the default tail level
        mpmath.mp.dps = 30
        w180 = float(mpmath.findroot(lambda w: mpmath.atan(w) + 0.1 * w - mpmath.pi, 20))
        m = analyse_open_loop(loop([], [-1.0], 1e-3, 0.1)).margins
        assert close(m.gain_margin_db, db(math.sqrt(1 + w180**2) / 1e-3))
        assert close(m.gain_margin_hz * TWO_PI, w180)
        assert len(m.stable_gain_ranges_db) == 1


class TestZerosOnTheContour:
    def test_tustin_zero_at_minus_one(self):
        # K (z + 1)/((z - 1)(z - 0.5)): z^2 + (K - 1.5) z + 0.5 + K; Jury: stable
        # iff |0.5 + K| < 1, i.e. 0 < K < 0.5; at K = 0.5, z^2 - z + 1 = 0 puts the
        # roots at e^{+-j pi/3}: GM = 0.5/K at theta = pi/3
        h, k = 1e-3, 0.2
        m = analyse_open_loop(loop([-1.0], [1.0, 0.5], k, h=h)).margins
        assert close(m.gain_margin_db, db(0.5 / k))
        assert close(m.gain_margin_hz * TWO_PI * h, math.pi / 3)

    def test_infinitely_deep_notch(self):
        # k/s * (s^2 + 25)/(s^2 + 2 s + 25): s^3 + (2 + k) s^2 + 25 s + 25 k,
        # Routh: 25 (2 + k) > 25 k always: stable for every k > 0
        a = analyse_open_loop(loop([5j, -5j], [0.0, -1 + 2 * math.sqrt(6) * 1j,
                                               -1 - 2 * math.sqrt(6) * 1j], 3.0))
        assert a.stability.stable
        assert a.margins.stable_gain_ranges_db == ((None, None),)


def test_phase_margin_is_the_crossover_closest_to_minus_one():
    # L = 344.8 (s + 50)(s^2 + 2(0.04)w1 s + w1^2) / (s (s + 3.5)(s^2 + 2(0.03)w2 s + w2^2)),
    # w1 = 2 pi 150, w2 = 2 pi 180: an anti-resonance/resonance pair makes |L| cross 1
    # three times. At the middle crossing angle L is about +27 deg, which the wrap to
    # (-180, 180] reads as PM = -153 deg: that crossing is far from -1. FORMATS.md
    # section 5 defines phase_margin_deg as the PM of the crossover with the smallest
    # |PM|, sign kept. The closed loop is stable (numpy.roots of the characteristic
    # polynomial, order 5).
    import numpy as np

    from ruleguard.analysis.margins import analyse_open_loop
    from ruleguard.analysis.openloop import OpenLoop
    from ruleguard.models.lti import Factored

    w1, w2 = 2 * np.pi * 150, 2 * np.pi * 180
    num = np.polymul([1.0, 50.0], [1.0, 2 * 0.04 * w1, w1**2]) * 1724 * 0.2
    den = np.polymul(np.polymul([1.0, 0.0], [1.0, 3.5]), [1.0, 2 * 0.03 * w2, w2**2])
    loop = OpenLoop(Factored(np.roots(num / num[0]), np.roots(den), num[0]))
    result = analyse_open_loop(loop)
    closed = np.roots(np.polyadd(den, num))
    assert result.stability.stable == bool(np.all(closed.real < 0)) is True
    pms = [c.phase_margin_deg for c in result.margins.crossovers]
    assert len(pms) == 3 and min(pms) < -150.0
    closest = min(pms, key=abs)
    assert abs(closest) < 90.0
    assert result.margins.phase_margin_deg == closest
    # independent check of every crossover with scipy.optimize.brentq on |L(jw)| = 1
    # (numpy.polyval of the multiplied-out polynomials) and of the chosen crossing's phase
    from scipy.optimize import brentq

    def mag(w):
        s = 1j * w
        return abs(np.polyval(num, s) / np.polyval(den, s)) - 1.0

    grid = np.geomspace(1.0, 1e4, 200001)
    vals = np.array([mag(w) for w in grid[::50]])
    coarse = grid[::50]
    roots = [brentq(mag, coarse[i], coarse[i + 1], xtol=1e-12)
             for i in range(len(coarse) - 1) if vals[i] * vals[i + 1] < 0]
    assert len(roots) == 3
    hz = sorted(c.hz for c in result.margins.crossovers)
    assert hz == pytest.approx(np.array(roots) / (2 * np.pi), rel=1e-7)
    s = 2j * np.pi * result.margins.crossover_hz
    value = np.polyval(num, s) / np.polyval(den, s)
    assert abs(value) == pytest.approx(1.0, rel=1e-9)
    wrapped = (180.0 + np.degrees(np.angle(value)) + 180.0) % 360.0 - 180.0
    assert wrapped == pytest.approx(result.margins.phase_margin_deg, abs=1e-6)


def test_phase_margin_of_a_crossing_near_plus_one():
    # L(s) = 1.2 (s + 0.5)/(s + 1) (issue 12's check value): |L|^2 = 1.44 (w^2 + 0.25)
    # /(w^2 + 1) = 1 gives 0.44 w^2 = 1 - 0.36, w = sqrt(0.64/0.44) rad/s. The angle is
    # atan(2w) - atan(w) > 0, so PM = 180 + atan(2w) - atan(w) wrapped to (-180, 180]
    # = atan(2w) - atan(w) - 180 = -162.85 deg (closed form). The closed loop
    # 1 + L = (2.2 s + 1.6)/(s + 1) has its pole at s = -1.6/2.2: stable.
    w = math.sqrt(0.64 / 0.44)
    expected = math.degrees(math.atan(2 * w) - math.atan(w)) - 180.0
    assert expected == pytest.approx(-162.85, abs=0.01)
    result = analyse_open_loop(OpenLoop(Factored([-0.5], [-1.0], 1.2)))
    assert result.stability.stable
    assert len(result.margins.crossovers) == 1
    assert result.margins.crossover_hz * 2 * math.pi == pytest.approx(w, rel=1e-9)
    assert result.margins.phase_margin_deg == pytest.approx(expected, abs=1e-9)
