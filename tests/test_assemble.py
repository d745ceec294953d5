"""Whole loops: continuous, sampled, measured, cascades.

Outside references named beside each check:
* scipy.signal.freqresp of the formulas written out here (continuous loops);
* scipy.signal.cont2discrete ("bilinear", "backward_diff", "euler", "zoh")
  for the discretized controller and the ZOH plant with whole-sample delays;
* the modified z-transform of a first-order plant with a fractional delay,
  derived in a comment;
* cascades: closed-loop poles from numpy.linalg.eigvals of a state-space
  closed loop built independently with scipy.signal.tf2ss, and the closed
  loop evaluated directly as C F G / (1 + C F G H).
"""

from __future__ import annotations

import math

import mpmath
import numpy as np
import pytest
import scipy.signal
from model_builders import controller, filt, loop, plant, project, vary

from ruleguard.errors import InputError, LoopNotAnalysable
from ruleguard.load.spec import MeasuredData
from ruleguard.models.assemble import build_loop, closed_loop_factored
from ruleguard.models.discretize import DelayFactor, HoldFactor
from ruleguard.models.factors import ClosedLoopResponse
from ruleguard.models.families import Variant, loop_variants
from ruleguard.models.lti import Factored

TWO_PI = 2 * math.pi
NOMINAL = Variant("nominal", {})


def polyval_ratio(num, den, x):
    return np.polyval(num, x) / np.polyval(den, x)


def rel_err(a, b):
    a, b = np.asarray(a), np.asarray(b)
    return float(np.max(np.abs(a - b) / np.abs(b)))


def zoh_integrator_lag(z, gain, a, h):
    """Exact ZOH equivalent of gain/(s (s + a)), closed form, coefficients by mpmath.

    Derivation: G(z) = (1 - z^-1) Z{G(s)/s}; partial fractions of
    gain/(s^2 (s + a)) = (gain/a)(1/s^2 - 1/(a s) + 1/(a (s + a))) give, with
    E = exp(-a h),
    G(z) = (gain/a) ((h - (1 - E)/a) z + ((1 - E)/a - h E)) / ((z - 1)(z - E)).
    (scipy.signal.cont2discrete loses about 1e-11 in the zero near z = -1 here,
    which the evaluation close to the Nyquist frequency magnifies.)
    """
    with mpmath.workdps(50):
        e = mpmath.e ** (-a * mpmath.mpf(h))
        b1 = float(gain / a * (h - (1 - e) / a))
        b0 = float(gain / a * ((1 - e) / a - h * e))
        e = float(e)
    return (b1 * z + b0) / ((z - 1) * (z - e))


def to_discrete_polynomials(num, den, h, method):
    """scipy.signal.cont2discrete of a transfer function: (numd, dend)."""
    numd, dend, _ = scipy.signal.cont2discrete((num, den), h, method=method)
    return np.trim_zeros(np.ravel(numd), "f"), np.ravel(dend)


# ------------------------------------------------------------ continuous
class TestContinuous:
    def setup_method(self):
        self.ctrl = controller("pid", kp=2.0, ki=30.0, kd=0.01, derivative_filter_hz=200.0,
                               filters=[filt("notch", center_hz=60.0, width_hz=15.0,
                                             depth_db=20.0)])
        self.motor = plant("motor", "first_order_dead_time", gain=3.0, time_constant_s=0.05,
                           delay_s=0.004, varied=[vary("gain", 2.0, 4.0)])
        self.sense = plant("sense", "transfer_function", numerator=[1.0],
                           denominator=[1 / 2000.0, 1.0], delay_s=0.001)

    def reference(self, w, gain=3.0, extra_delay=0.0):
        # L = C F G H exp(-j w tau), each factor by scipy.signal.freqresp of its formula
        wd, w0 = TWO_PI * 200, TWO_PI * 60
        zp = 15.0 / 120.0
        zz = zp * 0.1
        c = (2.0 + scipy.signal.freqresp(([30.0], [1, 0]), w)[1]
             + scipy.signal.freqresp(([0.01, 0], [1 / wd, 1]), w)[1])
        f = scipy.signal.freqresp(([1, 2 * zz * w0, w0**2], [1, 2 * zp * w0, w0**2]), w)[1]
        g = scipy.signal.freqresp(([gain], [0.05, 1]), w)[1]
        h = scipy.signal.freqresp(([1.0], [1 / 2000.0, 1]), w)[1]
        return c * f * g * h * np.exp(-1j * w * (0.004 + 0.001 + extra_delay))

    def test_open_loop_is_the_product_with_exact_delay(self):
        proj = project([self.motor, self.sense],
                       [loop("a", "motor", self.ctrl, sensor="sense", delay_s=0.0005)])
        model = build_loop(proj, proj.loops[0], loop_variants(proj, proj.loops[0])[0])
        w = np.logspace(-1, 4, 300)
        assert rel_err(model.open_loop.response(w), self.reference(w, extra_delay=5e-4)) < 1e-10
        assert model.total_delay_s == pytest.approx(0.0055)
        assert model.open_loop.rational.delay_s == pytest.approx(0.0055)
        assert model.open_loop.factors == ()
        assert model.discretization == {}
        assert model.sample_rate_hz is None
        assert model.controller.method is None and model.controller.discrete is None
        assert [b.kind for b in model.filters] == ["notch"]
        assert model.sensor is not None and model.sensor.kind == "transfer_function"
        # controller_path = C F
        ref_cf = self.reference(w, extra_delay=5e-4) / (
            scipy.signal.freqresp(([3.0], [0.05, 1]), w)[1]
            * scipy.signal.freqresp(([1.0], [1 / 2000.0, 1]), w)[1]
            * np.exp(-1j * w * 0.0055))
        assert rel_err(model.controller_path.response(w), ref_cf) < 1e-10

    def test_variant_values_reach_the_plant(self):
        proj = project([self.motor, self.sense], [loop("a", "motor", self.ctrl, sensor="sense")])
        variants = loop_variants(proj, proj.loops[0])
        assert [v.id for v in variants] == ["nominal", "corner-1", "corner-2"]
        model = build_loop(proj, proj.loops[0], variants[2])  # gain at its maximum, 4.0
        w = np.logspace(0, 3, 50)
        assert rel_err(model.open_loop.response(w), self.reference(w, gain=4.0)) < 1e-10

    def test_unfiltered_derivative_is_not_analysable(self):
        ctrl = controller("pid", kp=1.0, ki=1.0, kd=0.1)
        proj = project([self.motor], [loop("a", "motor", ctrl)])
        with pytest.raises(LoopNotAnalysable) as info:
            build_loop(proj, proj.loops[0], NOMINAL)
        assert info.value.rule == "controller.derivative-filter"
        assert info.value.location.key == "c.kd"

    def test_improper_transfer_function_controller_is_not_analysable(self):
        ctrl = controller("transfer_function", numerator=[1.0, 2.0, 3.0], denominator=[1.0, 5.0])
        proj = project([self.motor], [loop("a", "motor", ctrl)])
        with pytest.raises(LoopNotAnalysable):
            build_loop(proj, proj.loops[0], NOMINAL)

    def test_z_filter_in_a_continuous_loop_is_an_input_error(self):
        ctrl = controller("pid", kp=1.0, filters=[filt("biquad", b=[1.0], a=[1.0, -0.5])])
        proj = project([self.motor], [loop("a", "motor", ctrl)])
        with pytest.raises(InputError):
            build_loop(proj, proj.loops[0], NOMINAL)

    def test_delay_samples_without_rate_is_an_input_error(self):
        proj = project([self.motor], [loop("a", "motor", self.ctrl, delay_samples=1.0)])
        with pytest.raises(InputError):
            build_loop(proj, proj.loops[0], NOMINAL)

    def test_measured_plant(self):
        f = np.logspace(-1, 3, 401)
        w = TWO_PI * f
        g = 3.0 / (0.05j * w + 1)
        data = MeasuredData(tuple(f), tuple(20 * np.log10(np.abs(g))),
                            tuple(np.degrees(np.unwrap(np.angle(g)))), "m.csv")
        meas = plant("motor", "measured_response", measured=data, file="m.csv", delay_s=0.004)
        proj = project([meas, self.sense], [loop("a", "motor", self.ctrl, sensor="sense")])
        model = build_loop(proj, proj.loops[0], NOMINAL)
        assert model.plant.measured is not None and model.plant.continuous is None
        # at the data points the interpolation is exact: L equals the parametric product
        assert rel_err(model.open_loop.response(w), self.reference(w)) < 1e-10
        assert model.total_delay_s == pytest.approx(0.005)


# -------------------------------------------------------------- sampled
class TestSampled:
    h = 1e-3

    def first_order(self, delay_s):
        return plant("motor", "first_order_dead_time", gain=2.0, time_constant_s=0.02,
                     delay_s=delay_s)

    def test_pi_lowpass_zoh_whole_samples_against_cont2discrete(self):
        ctrl = controller("pid", kp=0.8, ki=40.0, filters=[filt("lowpass1", cutoff_hz=100.0)])
        proj = project([self.first_order(0.002)],
                       [loop("a", "motor", ctrl, rate=1000.0, delay_samples=1.0)])
        model = build_loop(proj, proj.loops[0], NOMINAL)
        h = self.h
        wc = TWO_PI * 100
        # References: scipy.signal.cont2discrete bilinear (Tustin, the default) for C and F,
        # zoh for the plant, and z^-3 for 0.002 s + 1 sample at 1 kHz.
        cn, cd = to_discrete_polynomials([0.8, 40.0], [1.0, 0.0], h, "bilinear")
        fn, fd = to_discrete_polynomials([1.0], [1 / wc, 1.0], h, "bilinear")
        gn, gd = to_discrete_polynomials([2.0], [0.02, 1.0], h, "zoh")
        theta = np.linspace(0.01, math.pi - 0.01, 400)
        z = np.exp(1j * theta)
        ref = polyval_ratio(cn, cd, z) * polyval_ratio(fn, fd, z) * polyval_ratio(gn, gd, z) \
            * z**-3
        assert rel_err(model.open_loop.response(theta / h), ref) < 1e-9
        assert model.discretization == {"controller": "tustin", "filters": ["tustin"],
                                        "plant": "zoh"}
        assert model.total_delay_s == pytest.approx(0.003)
        assert any("default" in n for n in model.notes)
        assert model.open_loop.sample_time_s == h
        assert model.controller.discrete is not None and model.controller.method == "tustin"

    @pytest.mark.parametrize("fraction", [0.25, 0.6])
    def test_fractional_delay_modified_z_transform(self, fraction):
        # Derivation (modified z-transform of K/(T s + 1) with delay (d + f) h):
        # the held step response S(t) = K (1 - exp(-(t - tau)/T)) for t >= tau, so
        # S(kh) = K (1 - beta alpha^(k-d-1)) for k >= d + 1, alpha = exp(-h/T),
        # beta = exp(-h (1 - f)/T); G(z) = (1 - z^-1) Z{S(kh)}
        #      = K z^-(d+1) ((1 - beta) z + (beta - alpha)) / (z - alpha).
        K, T, h = 2.0, 0.02, self.h
        d = 2
        tau_plant = (d - 1 + fraction) * h  # plus one sample of computation delay
        ctrl = controller("pid", kp=1.0)
        proj = project([self.first_order(tau_plant)],
                       [loop("a", "motor", ctrl, rate=1 / h, delay_samples=1.0)])
        model = build_loop(proj, proj.loops[0], NOMINAL)
        alpha, beta = math.exp(-h / T), math.exp(-h * (1 - fraction) / T)
        theta = np.linspace(0.01, math.pi - 0.01, 300)
        z = np.exp(1j * theta)
        ref = K * z ** -(d + 1) * ((1 - beta) * z + (beta - alpha)) / (z - alpha)
        assert rel_err(model.open_loop.response(theta / h), ref) < 1e-9
        assert model.total_delay_s == pytest.approx((d + fraction) * h)

    @pytest.mark.parametrize("method,scipy_method", [("backward_euler", "backward_diff"),
                                                     ("forward_euler", "euler"),
                                                     ("tustin", "bilinear")])
    def test_methods_against_cont2discrete(self, method, scipy_method):
        ctrl = controller("lead_lag", gain=1.5, zero_hz=20.0, pole_hz=80.0,
                          discretization=method)
        proj = project([self.first_order(0.0)], [loop("a", "motor", ctrl, rate=1000.0)])
        model = build_loop(proj, proj.loops[0], NOMINAL)
        wz, wp = TWO_PI * 20, TWO_PI * 80
        cn, cd = to_discrete_polynomials([1.5 / wz, 1.5], [1 / wp, 1.0], self.h, scipy_method)
        theta = np.linspace(0.01, math.pi - 0.01, 200)
        ref = polyval_ratio(cn, cd, np.exp(1j * theta))
        assert rel_err(model.controller_path.response(theta / self.h), ref) < 1e-10
        assert model.discretization["controller"] == method

    def test_prewarp_per_filter_and_pid_falls_back_to_tustin(self):
        depth = 30.0
        ctrl = controller("pid", kp=1.0, ki=5.0, discretization="tustin_prewarp",
                          filters=[filt("notch", 0, center_hz=300.0, width_hz=40.0,
                                        depth_db=depth),
                                   filt("lowpass1", 1, cutoff_hz=200.0,
                                        discretization="backward_euler")])
        proj = project([self.first_order(0.0)], [loop("a", "motor", ctrl, rate=1000.0)])
        model = build_loop(proj, proj.loops[0], NOMINAL)
        assert model.discretization == {"controller": "tustin",
                                        "filters": ["tustin_prewarp", "backward_euler"],
                                        "plant": "zoh"}
        # closed form: prewarped Tustin maps j w0 exactly onto exp(j w0 h), so the
        # discrete notch has its full depth at its centre
        assert model.filters[0].characteristic_hz == {"center_hz": 300.0, "width_hz": 40.0,
                                                      "prewarp_hz": 300.0}
        notch = model.filters[0].discrete
        w0 = TWO_PI * 300
        assert 20 * math.log10(abs(notch.response(w0))) == pytest.approx(-depth, abs=1e-9)

    def test_prewarp_at_or_above_nyquist_falls_back_with_a_note(self):
        ctrl = controller("pid", kp=1.0, discretization="tustin_prewarp",
                          filters=[filt("notch", center_hz=700.0, width_hz=50.0,
                                        depth_db=20.0)])
        proj = project([self.first_order(0.0)], [loop("a", "motor", ctrl, rate=1000.0)])
        model = build_loop(proj, proj.loops[0], NOMINAL)
        assert model.discretization["filters"] == ["tustin"]
        assert any("Nyquist" in n and "plain Tustin" in n for n in model.notes)

    def test_unfiltered_derivative_allowed_in_a_sampled_loop(self):
        ctrl = controller("pid", kp=1.0, kd=0.002, discretization="backward_euler")
        proj = project([self.first_order(0.0)], [loop("a", "motor", ctrl, rate=1000.0)])
        model = build_loop(proj, proj.loops[0], NOMINAL)
        # backward Euler: kp + kd (z - 1)/(h z) (definition of the substitution)
        theta = np.linspace(0.05, 3.0, 50)
        z = np.exp(1j * theta)
        ref = 1.0 + 0.002 * (z - 1) / (self.h * z)
        assert rel_err(model.controller_path.response(theta / self.h), ref) < 1e-12
        # with Tustin the derivative puts a pole at z = -1 (the rule reports it)
        ctrl = controller("pid", kp=1.0, kd=0.002)
        proj = project([self.first_order(0.0)], [loop("a", "motor", ctrl, rate=1000.0)])
        model = build_loop(proj, proj.loops[0], NOMINAL)
        assert np.any(np.abs(model.controller_path.poles + 1) < 1e-12)

    def test_biquad_is_used_as_given(self):
        ctrl = controller("pid", kp=1.0, filters=[filt("biquad", b=[0.2, 0.4, 0.2],
                                                       a=[1.0, -0.3, 0.1])])
        proj = project([self.first_order(0.0)], [loop("a", "motor", ctrl, rate=1000.0)])
        model = build_loop(proj, proj.loops[0], NOMINAL)
        assert model.filters[0].method == "given" and model.filters[0].continuous is None
        theta = np.linspace(0.05, 3.0, 50)
        ref = scipy.signal.freqz([0.2, 0.4, 0.2], [1.0, -0.3, 0.1], worN=theta)[1]
        assert rel_err(model.filters[0].discrete.response(theta / self.h), ref) < 1e-12

    def test_measured_integrating_plant_declares_its_integrator(self):
        # The contour is indented at z = 1 for the PI integrator and the declared one.
        f = np.logspace(0, 2.5, 50)
        data = MeasuredData(tuple(f), tuple(-20 * np.log10(f)), tuple(np.full(50, -90.0)),
                            "m.csv")
        meas = plant("m", "measured_response", measured=data, file="m.csv", integrators=1)
        proj = project([meas], [loop("a", "m", controller("pid", kp=1.0, ki=3.0),
                                     rate=1000.0)])
        model = build_loop(proj, proj.loops[0], NOMINAL)
        assert model.open_loop.boundary_pole_frequencies() == [(0.0, 2)]

    def test_measured_plant_behind_the_hold(self):
        h = self.h
        f = np.logspace(-1, math.log10(500.0), 301)
        w = TWO_PI * f
        g = 2.0 / (0.02j * w + 1)
        data = MeasuredData(tuple(f), tuple(20 * np.log10(np.abs(g))),
                            tuple(np.degrees(np.angle(g))), "m.csv")
        meas = plant("motor", "measured_response", measured=data, file="m.csv",
                     delay_s=0.0004)
        ctrl = controller("pid", kp=0.8, ki=40.0)
        proj = project([meas], [loop("a", "motor", ctrl, rate=1000.0, delay_samples=1.0)])
        model = build_loop(proj, proj.loops[0], NOMINAL)
        kinds = [type(fac) for fac in model.open_loop.factors]
        assert HoldFactor in kinds and DelayFactor in kinds
        assert model.discretization["plant"] == "hold"
        assert any("aliasing" in n for n in model.notes)
        # Reference: C_d (cont2discrete bilinear) z^-1 (whole sample of 1.4 samples)
        # x hold (1 - e^{-j w h})/(j w h) x data x e^{-j w 0.4 h}
        cn, cd = to_discrete_polynomials([0.8, 40.0], [1.0, 0.0], h, "bilinear")
        z = np.exp(1j * w * h)
        hold = (1 - np.exp(-1j * w * h)) / (1j * w * h)
        ref = polyval_ratio(cn, cd, z) / z * hold * g * np.exp(-1j * w * 0.4 * h)
        assert rel_err(model.open_loop.response(w), ref) < 1e-9


# -------------------------------------------------------------- cascades
def direct_closed_loop(c, g, hsens):
    """T = C G / (1 + C G H) evaluated directly (the definition, FORMATS.md section 1)."""
    return c * g / (1 + c * g * hsens)


class TestCascades:
    def entries(self, inner_delay=0.0):
        winding = plant("winding", "transfer_function", numerator=[1.0],
                        denominator=[4e-3, 1.3], delay_s=inner_delay)
        sense = plant("sense", "transfer_function", numerator=[1.0],
                      denominator=[1 / 5000.0, 1.0])
        mech = plant("mech", "zero_pole_gain", gain=50.0, zeros=[], poles=[0.0, -2.0])
        return [winding, sense, mech]

    def test_closed_loop_poles_against_independent_state_space(self):
        ci = controller("pid", kp=5.0, ki=2000.0)
        co = controller("pid", path="v", kp=0.4, ki=1.0)
        proj = project(self.entries(), [loop("cur", "winding", ci, sensor="sense"),
                                        loop("vel", "mech", co, inner="cur")])
        model = build_loop(proj, proj.loops[1], NOMINAL)
        assert model.inner is not None and model.inner.name == "cur"
        # Independent: L_inner = (5 s + 2000)/s * 1/(4e-3 s + 1.3) * 1/(s/5000 + 1)
        # multiplied out (order 3), realised by scipy.signal.tf2ss, closed by
        # A - B C/(1 + D); eigenvalues by numpy.linalg.eigvals.
        num = [5.0, 2000.0]
        den = np.polymul(np.polymul([1.0, 0.0], [4e-3, 1.3]), [1 / 5000.0, 1.0])
        a, b, c, d = scipy.signal.tf2ss(num, den)
        ref_poles = np.linalg.eigvals(a - b @ c / (1 + d[0, 0]))
        inner_t = closed_loop_factored(
            Factored([-400.0], [0.0, -1.3 / 4e-3], 5.0 / 4e-3),
            model.inner.open_loop.rational)
        np.testing.assert_allclose(np.sort_complex(inner_t.poles), np.sort_complex(ref_poles),
                                   rtol=1e-9)
        # T's zeros: the PI zero and the sensor pole (-5000), by the formula
        np.testing.assert_allclose(np.sort(inner_t.zeros.real), [-5000.0, -400.0], rtol=1e-12)
        # the outer loop: C_o T G_o, against C F G/(1 + C F G H) evaluated directly
        w = np.logspace(-1, 5, 300)
        s = 1j * w
        ci_w, gi_w, hi_w = (5.0 + 2000.0 / s), 1 / (4e-3 * s + 1.3), 1 / (s / 5000.0 + 1)
        t_w = direct_closed_loop(ci_w, gi_w, hi_w)
        ref = (0.4 + 1.0 / s) * t_w * 50.0 / (s * (s + 2.0))
        assert rel_err(model.open_loop.response(w), ref) < 1e-9
        assert model.open_loop.factors == ()
        assert rel_err(inner_t.response(w), t_w) < 1e-9

    def test_continuous_inner_with_delay_is_an_exact_response(self):
        ci = controller("pid", kp=5.0, ki=2000.0)
        co = controller("pid", path="v", kp=0.4, ki=1.0)
        proj = project(self.entries(inner_delay=1e-4),
                       [loop("cur", "winding", ci, sensor="sense"),
                        loop("vel", "mech", co, inner="cur")])
        model = build_loop(proj, proj.loops[1], NOMINAL)
        factor = model.open_loop.factors[0]
        assert isinstance(factor, ClosedLoopResponse)
        w = np.logspace(-1, 5, 300)
        s = 1j * w
        gi = np.exp(-1e-4 * s) / (4e-3 * s + 1.3)
        t_w = direct_closed_loop(5.0 + 2000.0 / s, gi, 1 / (s / 5000.0 + 1))
        assert rel_err(factor.response(w), t_w) < 1e-12
        ref = (0.4 + 1.0 / s) * t_w * 50.0 / (s * (s + 2.0))
        assert rel_err(model.open_loop.response(w), ref) < 1e-11

    def test_closed_loop_response_at_zero_frequency(self):
        # With integral action T(0) = 1/H(0) = 1 (closed form: |L(0)| is infinite);
        # the response is evaluated as the limit beside w = 0, not inf/inf.
        ci = controller("pid", kp=5.0, ki=2000.0)
        co = controller("pid", path="v", kp=0.4, ki=1.0)
        proj = project(self.entries(inner_delay=1e-4),
                       [loop("cur", "winding", ci, sensor="sense"),
                        loop("vel", "mech", co, inner="cur")])
        factor = build_loop(proj, proj.loops[1], NOMINAL).open_loop.factors[0]
        value = factor.response(np.array([0.0, 1e-3]))
        assert np.all(np.isfinite(value))
        np.testing.assert_allclose(value, [1.0, 1.0], atol=1e-6)
        assert factor.response(0.0) == pytest.approx(1.0, abs=1e-6)

    def test_same_rate_sampled_cascade(self):
        h = 1e-3
        ci = controller("pid", kp=0.5, ki=200.0)
        co = controller("pid", path="v", kp=0.4, ki=1.0)
        proj = project(self.entries(), [loop("cur", "winding", ci, sensor="sense", rate=1 / h,
                                             delay_samples=1.0),
                                        loop("vel", "mech", co, inner="cur", rate=1 / h,
                                             delay_samples=1.0)])
        model = build_loop(proj, proj.loops[1], NOMINAL)
        assert model.open_loop.factors == ()
        # References (scipy.signal.cont2discrete): C_i, C_o bilinear; the inner forward path
        # ZOH(G_i) z^-1 and the inner loop ZOH(G_i H_i) z^-1; the outer plant ZOH(G_o) z^-1
        # in closed form (zoh_integrator_lag).
        cin, cid = to_discrete_polynomials([0.5, 200.0], [1.0, 0.0], h, "bilinear")
        con, cod = to_discrete_polynomials([0.4, 1.0], [1.0, 0.0], h, "bilinear")
        gn, gd = to_discrete_polynomials([1.0], [4e-3, 1.3], h, "zoh")
        ghn, ghd = to_discrete_polynomials(
            [1.0], np.polymul([4e-3, 1.3], [1 / 5000.0, 1.0]), h, "zoh"
        )
        theta = np.linspace(0.02, math.pi - 0.02, 300)
        z = np.exp(1j * theta)
        ci_z = polyval_ratio(cin, cid, z)
        t_z = ci_z * polyval_ratio(gn, gd, z) / z / (1 + ci_z * polyval_ratio(ghn, ghd, z) / z)
        ref = polyval_ratio(con, cod, z) * t_z * zoh_integrator_lag(z, 50.0, 2.0, h) / z
        assert rel_err(model.open_loop.response(theta / h), ref) < 1e-12
        assert any("same rate" in n for n in model.notes)

    def test_same_rate_inner_with_integrating_plant_has_unit_dc_gain(self):
        # An inner P loop around an integrator with a first-order sensor: T(1) = 1/H(0) = 1
        # at DC (closed form: at z = 1 the loop gain is infinite), and the forward-path
        # integrator cancels exactly against its copy in L (no pole left at z = 1).
        h = 1e-3
        vel = plant("vel", "integrator_dead_time", gain=100.0)
        sense = plant("sense", "first_order_dead_time", gain=1.0, time_constant_s=2e-3)
        pos = plant("pos", "integrator_dead_time", gain=1.0)
        ci = controller("pid", kp=3.0)
        co = controller("pid", path="p", kp=2.0)
        proj = project([vel, sense, pos], [
            loop("v", "vel", ci, sensor="sense", rate=1 / h),
            loop("p", "pos", co, inner="v", rate=1 / h)])
        model = build_loop(proj, proj.loops[1], NOMINAL)
        rational = model.open_loop.rational
        at_one = np.abs(rational.poles - 1.0) < 1e-9
        assert int(np.count_nonzero(at_one)) == 1  # only the outer integrator
        w = 1e-3
        # |L| ~ kp_o * T(1) * (ZOH of 1/s ~ h/(z - 1)) -> kp_o * 1 / (w) at low frequency
        assert abs(model.open_loop.response(w)) * w == pytest.approx(2.0, rel=1e-3)

    def test_different_rates_inner_seen_through_its_response(self):
        hi, ho = 1 / 8000.0, 1e-3
        ci = controller("pid", kp=0.5, ki=200.0)
        co = controller("pid", path="v", kp=0.4, ki=1.0)
        proj = project(self.entries(), [loop("cur", "winding", ci, rate=1 / hi),
                                        loop("vel", "mech", co, inner="cur", rate=1 / ho,
                                             delay_samples=0.5)])
        model = build_loop(proj, proj.loops[1], NOMINAL)
        assert model.discretization["plant"] == "hold"
        assert any("Nyquist" in n and "aliasing" in n for n in model.notes)
        # Reference: C_o(e^{jwh_o}) hold_o(w) e^{-jw 0.5 h_o} T_i(e^{jw h_i}) G_o(jw), with
        # T_i = C_i G_i^zoh/(1 + C_i G_i^zoh) at the inner rate (scipy.signal.cont2discrete).
        cin, cid = to_discrete_polynomials([0.5, 200.0], [1.0, 0.0], hi, "bilinear")
        gn, gd = to_discrete_polynomials([1.0], [4e-3, 1.3], hi, "zoh")
        con, cod = to_discrete_polynomials([0.4, 1.0], [1.0, 0.0], ho, "bilinear")
        w = np.linspace(0.5, 0.99 * math.pi / ho, 300)
        zi, zo = np.exp(1j * w * hi), np.exp(1j * w * ho)
        li = polyval_ratio(cin, cid, zi) * polyval_ratio(gn, gd, zi)
        t_i = li / (1 + li)
        hold = (1 - np.exp(-1j * w * ho)) / (1j * w * ho)
        go = 50.0 / (1j * w * (1j * w + 2.0))
        ref = polyval_ratio(con, cod, zo) * hold * np.exp(-0.5j * w * ho) * t_i * go
        assert rel_err(model.open_loop.response(w), ref) < 1e-8

    def test_same_rate_inner_with_measured_plant(self):
        # The inner closed loop is known by its response (measured plant behind the hold);
        # at the same rate it multiplies the exact ZOH equivalent of the outer plant.
        h = 1e-3
        f = np.logspace(-1, math.log10(500.0), 401)
        wdata = TWO_PI * f
        g = 1 / (4e-3j * wdata + 1.3)
        data = MeasuredData(tuple(f), tuple(20 * np.log10(np.abs(g))),
                            tuple(np.degrees(np.angle(g))), "w.csv")
        winding = plant("winding", "measured_response", measured=data, file="w.csv")
        mech = plant("mech", "zero_pole_gain", gain=50.0, zeros=[], poles=[0.0, -2.0])
        ci = controller("pid", kp=0.5, ki=200.0)
        co = controller("pid", path="v", kp=0.4, ki=1.0)
        proj = project([winding, mech], [loop("cur", "winding", ci, rate=1 / h),
                                         loop("vel", "mech", co, inner="cur", rate=1 / h)])
        model = build_loop(proj, proj.loops[1], NOMINAL)
        assert model.discretization["plant"] == "zoh"
        assert [type(x) for x in model.open_loop.factors] == [ClosedLoopResponse]
        # Reference: T_i = C_i hold G / (1 + C_i hold G) with C_i by cont2discrete bilinear
        # and the hold (1 - e^{-jwh})/(jwh); the outer plant ZOH in closed form.
        cin, cid = to_discrete_polynomials([0.5, 200.0], [1.0, 0.0], h, "bilinear")
        con, cod = to_discrete_polynomials([0.4, 1.0], [1.0, 0.0], h, "bilinear")
        w = wdata[(wdata > 1.0) & (wdata < 0.99 * math.pi / h)]
        gw = 1 / (4e-3j * w + 1.3)
        z = np.exp(1j * w * h)
        hold = (1 - np.exp(-1j * w * h)) / (1j * w * h)
        li = polyval_ratio(cin, cid, z) * hold * gw
        ref = polyval_ratio(con, cod, z) * li / (1 + li) * zoh_integrator_lag(z, 50.0, 2.0, h)
        assert rel_err(model.open_loop.response(w), ref) < 1e-12

    def test_biproper_inner_loop_closed_form(self):
        # L = 3 (s + 2)/(s + 1): T = L/(1 + L) = 3 (s + 2)/(4 s + 7), so the closed
        # loop has its pole at -7/4, its zero at -2 and leading gain 3/4 (by hand).
        t = closed_loop_factored(Factored([-2.0], [-1.0], 3.0), Factored([-2.0], [-1.0], 3.0))
        np.testing.assert_allclose(t.poles, [-1.75], rtol=1e-14)
        np.testing.assert_allclose(t.zeros, [-2.0], rtol=1e-14)
        assert t.gain == pytest.approx(0.75, rel=1e-14)

    def test_ill_posed_inner_loop_is_not_analysable(self):
        # L = -1 at every frequency: 1 + L = 0, the loop equations have no solution.
        static = plant("static", "transfer_function", numerator=[1.0], denominator=[1.0])
        mech = plant("mech", "integrator_dead_time", gain=1.0)
        proj = project([static, mech], [loop("i", "static", controller("pid", kp=-1.0)),
                                        loop("o", "mech", controller("pid", path="o", kp=1.0),
                                             inner="i")])
        with pytest.raises(LoopNotAnalysable) as info:
            build_loop(proj, proj.loops[1], NOMINAL)
        assert "ill-posed" in info.value.reason

    def test_three_level_cascade_nests_closed_loops(self):
        # position(velocity(current)): each outer plant sees the closed loop inside it.
        # Reference: the nested definition T = C G/(1 + C G H) evaluated directly.
        pos = plant("pos", "integrator_dead_time", gain=1.0)
        entries = [*self.entries(), pos]
        ci = controller("pid", kp=5.0, ki=2000.0)
        cv = controller("pid", path="v", kp=0.4, ki=1.0)
        cp = controller("pid", path="p", kp=3.0)
        proj = project(entries, [loop("cur", "winding", ci, sensor="sense"),
                                 loop("vel", "mech", cv, inner="cur"),
                                 loop("pos", "pos", cp, inner="vel")])
        model = build_loop(proj, proj.loops[2], NOMINAL)
        assert model.inner.name == "vel" and model.inner.inner.name == "cur"
        w = np.logspace(-1, 4, 200)
        s = 1j * w
        t_cur = direct_closed_loop(5.0 + 2000.0 / s, 1 / (4e-3 * s + 1.3), 1 / (s / 5000 + 1))
        t_vel = direct_closed_loop(0.4 + 1.0 / s, t_cur * 50.0 / (s * (s + 2.0)), 1.0)
        ref = 3.0 * t_vel / s
        assert rel_err(model.open_loop.response(w), ref) < 1e-8

    def test_inner_not_analysable_propagates(self):
        ci = controller("pid", kp=5.0, kd=0.1)
        co = controller("pid", path="v", kp=0.4)
        proj = project(self.entries(), [loop("cur", "winding", ci),
                                        loop("vel", "mech", co, inner="cur")])
        with pytest.raises(LoopNotAnalysable) as info:
            build_loop(proj, proj.loops[1], NOMINAL)
        assert "inner loop 'cur'" in info.value.reason
        assert info.value.rule == "controller.derivative-filter"

    def test_cascade_cycle_is_an_input_error(self):
        c = controller("pid", kp=1.0)
        proj = project(self.entries(), [loop("a", "winding", c, inner="b"),
                                        loop("b", "mech", c, inner="a")])
        with pytest.raises(InputError):
            build_loop(proj, proj.loops[0], NOMINAL)


# ------------------------------------------------- built loops, analysed
class TestBuiltLoopsAnalysed:
    """Built loops handed to the analysis give the verdicts of independent references."""

    def test_routh_hurwitz_critical_gain(self):
        # Routh-Hurwitz on s^3 + 3 s^2 + 2 s + K: stable for 0 < K < 6, the boundary
        # at s = +- j sqrt(2); so K = 1.5 has a gain margin of 20 log10(4) dB at
        # sqrt(2)/(2 pi) Hz.
        from ruleguard.analysis.margins import analyse_open_loop

        g = plant("g", "zero_pole_gain", gain=1.0, zeros=[], poles=[0.0, -1.0, -2.0])
        proj = project([g], [loop("a", "g", controller("pid", kp=1.5))])
        analysis = analyse_open_loop(build_loop(proj, proj.loops[0], NOMINAL).open_loop)
        assert analysis.stability.stable
        assert analysis.margins.gain_margin_db == pytest.approx(20 * math.log10(4.0), rel=1e-6)
        assert analysis.margins.gain_margin_hz == pytest.approx(math.sqrt(2) / TWO_PI, rel=1e-6)

    @staticmethod
    def sampled_case(seed):
        # Reference: roots of the closed-loop characteristic polynomial
        # den_C den_G z^d + num_C num_G (scipy.signal.cont2discrete for C and G,
        # numpy.roots; order <= 5 here, where numpy.roots is reliable).
        rng = np.random.default_rng(seed)
        h = 1e-3
        kp, ki = rng.uniform(0.1, 20.0), rng.uniform(1.0, 400.0)
        tau_t = rng.uniform(0.002, 0.05)
        d = int(rng.integers(0, 3))
        g = plant("g", "first_order_dead_time", gain=2.0, time_constant_s=tau_t)
        proj = project([g], [loop("a", "g", controller("pid", kp=kp, ki=ki), rate=1 / h,
                                  delay_samples=float(d))])
        cn, cd = to_discrete_polynomials([kp, ki], [1.0, 0.0], h, "bilinear")
        gn, gd = to_discrete_polynomials([2.0], [tau_t, 1.0], h, "zoh")
        den = np.polymul(np.polymul(cd, gd), np.r_[1.0, np.zeros(d)])
        char = np.polyadd(den, np.polymul(cn, gn))
        return proj, bool(np.all(np.abs(np.roots(char)) < 1.0))

    def test_sampled_cases_mix_stable_and_unstable(self):
        verdicts = [self.sampled_case(seed)[1] for seed in range(16)]
        assert 3 <= sum(verdicts) <= 13

    @pytest.mark.parametrize("seed", range(16))
    def test_sampled_pi_verdict_against_characteristic_roots(self, seed):
        from ruleguard.analysis.margins import analyse_open_loop

        proj, stable = self.sampled_case(seed)
        analysis = analyse_open_loop(build_loop(proj, proj.loops[0], NOMINAL).open_loop)
        assert analysis.stability.stable == stable


# ----------------------------------------------- closed loops, randomized
def random_block(rng, n_poles, n_zeros, discrete):
    """A random real block: conjugate pairs and real roots, stable or not."""
    def roots(n):
        out = []
        while len(out) < n:
            if n - len(out) >= 2 and rng.random() < 0.5:
                r = rng.uniform(0.2, 1.1) if discrete else rng.uniform(0.5, 50.0)
                ang = rng.uniform(0.1, 3.0) if discrete else rng.uniform(0.3, 2.8)
                c = r * np.exp(1j * ang) if discrete else r * np.exp(1j * (math.pi / 2 + ang / 2))
                out += [c, np.conj(c)]
            else:
                out.append(rng.uniform(-0.9, 0.9) if discrete else -rng.uniform(0.1, 50.0))
        return np.array(out, dtype=complex)
    return Factored(roots(n_zeros), roots(n_poles), rng.uniform(0.2, 5.0) * rng.choice([-1, 1]),
               0.0, 1e-3 if discrete else None)


@pytest.mark.parametrize("seed", range(40))
def test_closed_loop_factored_against_mpmath_roots_and_direct_evaluation(seed):
    # Reference 1: closed-loop poles = roots of den_F den_H + num_F num_H, found by
    # mpmath.polyroots at 60 digits from the multiplied-out polynomials (exact products
    # at that precision). Reference 2: T = F/(1 + F H) evaluated directly.
    rng = np.random.default_rng(seed)
    discrete = bool(seed % 2)
    nf = int(rng.integers(1, 7))
    fwd = random_block(rng, nf, int(rng.integers(0, nf + 1)), discrete)
    nh = int(rng.integers(0, 3))
    sensor = random_block(rng, nh, int(rng.integers(0, nh + 1)), discrete)
    sensor = Factored(sensor.zeros, sensor.poles, abs(sensor.gain), 0.0, sensor.sample_time_s)
    t = closed_loop_factored(fwd, fwd * sensor)
    with mpmath.workdps(60):
        def poly(roots, k=1):
            p = [mpmath.mpf(k)]
            for r in roots:
                rr = mpmath.mpc(r.real, r.imag)
                p = [a - rr * b for a, b in zip(p + [0], [0] + p, strict=True)]
            return p
        den = poly(np.concatenate([fwd.poles, sensor.poles]))
        num = poly(np.concatenate([fwd.zeros, sensor.zeros]), fwd.gain * sensor.gain)
        num = [0] * (len(den) - len(num)) + num
        char = [a + b for a, b in zip(den, num, strict=True)]
        while abs(char[0]) == 0:
            char = char[1:]
        ref = np.array([complex(r) for r in mpmath.polyroots(char, maxsteps=400, extraprec=400)])
    ours = t.poles
    assert ours.size == ref.size
    for r in ref:  # every reference root has a match (tolerance relative to its size)
        assert np.min(np.abs(ours - r)) <= 1e-10 * max(1.0, abs(r))
    w = np.linspace(0.3, 0.97 * math.pi / 1e-3, 200) if discrete else np.logspace(-1, 3, 200)
    direct = fwd.response(w) / (1 + fwd.response(w) * sensor.response(w))
    assert rel_err(t.response(w), direct) < 1e-11


# ------------------------------------------------- through the real loader
def test_loaded_project_builds_the_formula_loop(tmp_path):
    # A project written to FORMATS.md, read by the loader, built per variant.
    # Reference: L = (kp + ki/s) * 1/(L s + R) * exp(-s tau), evaluated directly.
    (tmp_path / "models").mkdir()
    (tmp_path / "fw").mkdir()
    (tmp_path / "ruleguard.toml").write_text(
        '[project]\nname = "t"\nruleset = "baseline"\nplants = ["models/plants.toml"]\n'
        'variants = { samples = 6, seed = 3 }\n\n'
        '[[loops]]\nname = "cur"\nplant = "winding"\n'
        'controller = { file = "fw/c.toml", path = "current" }\ndelay_s = 0.0001\n'
    )
    (tmp_path / "models" / "plants.toml").write_text(
        '[plants.winding]\nkind = "transfer_function"\nnumerator = [1.0]\n'
        'denominator = ["L", "R"]\nparameters = { L = 4.2e-4, R = 1.3 }\n'
        'vary = { R = { min = 1.1, max = 1.8, scale = "log" } }\n'
    )
    (tmp_path / "fw" / "c.toml").write_text('[current]\nkind = "pid"\nkp = 2.1\nki = 6200.0\n')
    from ruleguard.load.project import load_project

    proj = load_project(tmp_path / "ruleguard.toml")
    spec = proj.loops[0]
    variants = loop_variants(proj, spec)
    assert [v.id for v in variants] == ["nominal"] + [f"sample-{i}" for i in range(1, 7)]
    w = np.logspace(0, 5, 100)
    s = 1j * w
    for v in variants:
        r = v.parameters["winding.R"]
        assert 1.1 <= r <= 1.8
        model = build_loop(proj, spec, v)
        ref = (2.1 + 6200.0 / s) / (4.2e-4 * s + r) * np.exp(-1e-4 * s)
        assert rel_err(model.open_loop.response(w), ref) < 1e-12
    assert variants[0].parameters == {"winding.R": 1.3}


def test_controller_side_is_built_once_per_controller_entry_and_rate():
    # the variants of a loop share its controller entry: the second build
    # returns the same block objects (and the same notes) as the first; an
    # equal but distinct entry, or another rate, is built afresh with equal
    # numbers; the Tustin form checked against scipy.signal.cont2discrete
    import ruleguard.models.assemble as assemble

    h = 1e-3
    g = plant("g", "zero_pole_gain", gain=3.0, zeros=[], poles=[-2.0, -30.0], varied=[
        vary("gain", 2.0, 4.0)])
    pi = controller("pid", kp=1.5, ki=20.0)  # no discretization given: a note, Tustin
    proj = project([g], [loop("a", "g", pi, rate=1.0 / h)])
    spec = proj.loops[0]
    variants = loop_variants(proj, spec)
    assert len(variants) >= 2
    first = build_loop(proj, spec, variants[0])
    second = build_loop(proj, spec, variants[1])
    assert second.controller is first.controller
    assert second.controller.discrete is first.controller.discrete
    assert second.notes == first.notes
    assert any("tustin (the default)" in n for n in first.notes)
    assert not np.array_equal(first.plant.discrete.gain, second.plant.discrete.gain)
    # scipy.signal.cont2discrete of (kp s + ki)/s by the bilinear rule
    num, den, _ = scipy.signal.cont2discrete(([1.5, 20.0], [1.0, 0.0]), h, method="bilinear")
    z = np.exp(1j * np.linspace(0.01, 3.0, 7))
    np.testing.assert_allclose(first.controller.discrete.evaluate(z),
                               polyval_ratio(np.ravel(num), den, z), rtol=1e-12)
    fresh = loop("a", "g", controller("pid", kp=1.5, ki=20.0), rate=1.0 / h)
    third = build_loop(proj, fresh, variants[0])
    assert third.controller is not first.controller
    d1, d3 = first.controller.discrete, third.controller.discrete
    assert d3.zeros.tobytes() == d1.zeros.tobytes() and d3.gain == d1.gain
    other_rate = build_loop(proj, loop("a", "g", pi, rate=2.0 / h), variants[0])
    assert other_rate.controller.discrete.sample_time_s == h / 2
    assert len(assemble._CONTROLLER_SIDES) <= assemble._CONTROLLER_SIDES_MAX
