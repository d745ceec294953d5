"""Controller and filter blocks against independent references.

References named beside each check: scipy.signal.freqresp (s-plane) and
scipy.signal.freqz (z^-1 polynomials) of the formulas of FORMATS.md section 3
written out term by term here, and closed-form values derived in comments.
"""

from __future__ import annotations

import math

import numpy as np
import pytest
import scipy.signal
from model_builders import controller, filt

from ruleguard.errors import InputError
from ruleguard.load.expressions import parse_expression
from ruleguard.location import Location
from ruleguard.models.blocks import controller_block, filter_block
from ruleguard.models.polynomials import polynomial_roots, second_order_roots

W = np.logspace(-1, 5, 241)
TWO_PI = 2 * math.pi


def freqresp(num, den, w=W):
    """scipy.signal.freqresp of num/den (descending powers of s)."""
    return scipy.signal.freqresp((num, den), w)[1]


def rel_err(a, b):
    return float(np.max(np.abs(np.asarray(a) - np.asarray(b)) / np.abs(np.asarray(b))))


class TestPid:
    def test_parallel_with_filter_matches_sum_of_terms(self):
        # Reference: scipy.signal.freqresp of each term kp, ki/s, kd s/(s/wd + 1), summed.
        kp, ki, kd, fd = 2.1, 6200.0, 0.0004, 4000.0
        wd = TWO_PI * fd
        block = controller_block(controller("pid", kp=kp, ki=ki, kd=kd,
                                            derivative_filter_hz=fd), None)
        ref = (kp + freqresp([ki], [1.0, 0.0]) + freqresp([kd, 0.0], [1.0 / wd, 1.0]))
        assert rel_err(block.model.response(W), ref) < 1e-12
        assert not block.unfiltered_derivative
        assert block.model.poles.size == 2 and block.model.zeros.size == 2
        assert block.characteristic_hz["derivative_filter_hz"] == fd
        assert block.prewarp_hz is None  # a PID without prewarp_hz: plain Tustin

    def test_parallel_pi_only(self):
        # kp + ki/s = kp (s + ki/kp)/s: zero at -ki/kp, pole at 0 (closed form).
        block = controller_block(controller("pid", kp=0.5, ki=20.0), None)
        np.testing.assert_allclose(block.model.zeros, [-40.0])
        np.testing.assert_allclose(block.model.poles, [0.0])
        assert block.model.gain == pytest.approx(0.5)

    def test_parallel_unfiltered_derivative_is_improper_and_flagged(self):
        block = controller_block(controller("pid", kp=1.0, ki=2.0, kd=0.1), None)
        assert block.unfiltered_derivative
        assert not block.is_proper
        # Reference: kp + ki/s + kd s evaluated directly.
        s = 1j * W
        assert rel_err(block.model.response(W), 1.0 + 2.0 / s + 0.1 * s) < 1e-12

    def test_standard_form(self):
        # Reference: scipy.signal.freqresp of gain, gain/(ti s), gain td s/(td s/n + 1), summed.
        gain, ti, td, n = 1.7, 0.02, 0.003, 8.0
        block = controller_block(controller("pid", form="standard", gain=gain, ti_s=ti,
                                            td_s=td, n=n), None)
        ref = gain * (1 + freqresp([1.0], [ti, 0.0]) + freqresp([td, 0.0], [td / n, 1.0]))
        assert rel_err(block.model.response(W), ref) < 1e-12
        assert block.characteristic_hz["derivative_filter_hz"] == pytest.approx(n / (TWO_PI * td))

    def test_standard_form_defaults_n_10_and_no_ti_means_no_integral(self):
        gain, td = 3.0, 0.01
        block = controller_block(controller("pid", form="standard", gain=gain, td_s=td), None)
        ref = gain * (1 + freqresp([td, 0.0], [td / 10.0, 1.0]))
        assert rel_err(block.model.response(W), ref) < 1e-12
        assert not np.any(np.abs(block.model.poles) == 0.0)  # no integrator

    def test_series_form(self):
        # Reference: gain (1 + 1/(ti s)) (1 + td s)/(1 + td s/n) by scipy.signal.freqresp.
        gain, ti, td, n = 0.9, 0.05, 0.004, 10.0
        block = controller_block(controller("pid", form="series", gain=gain, ti_s=ti, td_s=td),
                                 None)
        ref = gain * freqresp([ti, 1.0], [ti, 0.0]) * freqresp([td, 1.0], [td / n, 1.0])
        assert rel_err(block.model.response(W), ref) < 1e-12
        # closed form of the factors: zeros -1/ti, -1/td; poles 0, -n/td; leading gain gain n
        np.testing.assert_allclose(np.sort(block.model.zeros.real), [-1 / td, -1 / ti])
        np.testing.assert_allclose(np.sort(block.model.poles.real), [-n / td, 0.0], atol=1e-12)
        assert block.model.gain == pytest.approx(gain * n)

    def test_unknown_form_is_an_input_error(self):
        with pytest.raises(InputError) as info:
            controller_block(controller("pid", form="ideal", gain=1.0), None)
        assert "form" in info.value.key


class TestFilters:
    def test_lead_lag(self):
        # Reference: gain (s/wz + 1)/(s/wp + 1) by scipy.signal.freqresp.
        block = filter_block(filt("lead_lag", gain=2.0, zero_hz=10.0, pole_hz=90.0), None)
        wz, wp = TWO_PI * 10, TWO_PI * 90
        assert rel_err(block.model.response(W), 2.0 * freqresp([1 / wz, 1], [1 / wp, 1])) < 1e-12
        # closed form: prewarp and characteristic frequency sqrt(zero_hz pole_hz) = 30 Hz
        assert block.prewarp_hz == pytest.approx(30.0)
        assert block.characteristic_hz["geometric_mean_hz"] == pytest.approx(30.0)

    def test_lowpass1(self):
        block = filter_block(filt("lowpass1", cutoff_hz=250.0), None)
        wc = TWO_PI * 250
        assert rel_err(block.model.response(W), freqresp([1.0], [1 / wc, 1.0])) < 1e-12
        # closed form: |H(j wc)| = 1/sqrt(2)
        assert abs(block.model.response(wc)) == pytest.approx(1 / math.sqrt(2), rel=1e-12)

    @pytest.mark.parametrize("zeta", [0.05, 0.707, 1.0, 2.5])
    def test_lowpass2_natural_frequency(self, zeta):
        block = filter_block(filt("lowpass2", cutoff_hz=5000.0, damping=zeta), None)
        w0 = TWO_PI * 5000
        ref = freqresp([w0**2], [1.0, 2 * zeta * w0, w0**2])
        assert rel_err(block.model.response(W), ref) < 1e-11
        # closed form at the natural frequency: H(j w0) = w0^2/(2 zeta w0 j w0) = -j/(2 zeta)
        assert block.model.response(w0) == pytest.approx(-1j / (2 * zeta), rel=1e-12)

    def test_notch_depth_and_width(self):
        center, width, depth = 1800.0, 300.0, 25.0
        block = filter_block(filt("notch", center_hz=center, width_hz=width, depth_db=depth),
                             None)
        w0 = TWO_PI * center
        zp = width / (2 * center)
        zz = zp * 10 ** (-depth / 20)
        ref = freqresp([1, 2 * zz * w0, w0**2], [1, 2 * zp * w0, w0**2])
        assert rel_err(block.model.response(W), ref) < 1e-10
        # closed form at the centre: (2 zz w0 j w0)/(2 zp w0 j w0) = zz/zp = 10^(-depth/20)
        assert 20 * np.log10(abs(block.model.response(w0))) == pytest.approx(-depth, abs=1e-9)
        assert block.characteristic_hz["center_hz"] == center
        assert block.prewarp_hz == center

    def test_explicit_prewarp_wins(self):
        block = filter_block(filt("notch", center_hz=100.0, width_hz=10.0, depth_db=20.0,
                                  prewarp_hz=120.0), None)
        assert block.prewarp_hz == 120.0

    def test_biquad_against_freqz(self):
        # Reference: scipy.signal.freqz(b, a) evaluates (b0 + b1 z^-1 + b2 z^-2)/(a0 + ...).
        b, a, h = [0.2, 0.4, 0.2], [1.0, -0.3, 0.1], 1e-3
        block = filter_block(filt("biquad", b=b, a=a), h)
        w = np.linspace(1.0, 0.99 * math.pi / h, 300)  # a double zero sits at z = -1
        ref = scipy.signal.freqz(b, a, worN=w * h)[1]
        assert rel_err(block.model.response(w), ref) < 1e-12
        assert block.given_in_z and block.model.sample_time_s == h

    def test_biquad_unnormalised_and_short(self):
        # a[0] = 2 is normalised; b shorter than a means trailing zero coefficients.
        b, a, h = [1.0, 0.5], [2.0, -0.6, 0.2], 1e-3
        block = filter_block(filt("biquad", b=b, a=a), h)
        w = np.linspace(1.0, math.pi / h, 200)
        ref = scipy.signal.freqz(b, a, worN=w * h)[1]
        assert rel_err(block.model.response(w), ref) < 1e-12

    def test_biquad_a0_zero_is_an_input_error(self):
        with pytest.raises(InputError):
            filter_block(filt("biquad", b=[1.0], a=[0.0, 1.0]), 1e-3)

    def test_z_block_needs_a_sample_rate(self):
        with pytest.raises(InputError) as info:
            filter_block(filt("biquad", b=[1.0], a=[1.0, -0.5]), None)
        assert "sample_rate_hz" in info.value.message

    def test_transfer_function_in_z(self):
        # FORMATS.md section 3: [0.5]/[1, -0.5] in z is 0.5/(z - 0.5).
        h = 0.01
        block = controller_block(controller("transfer_function", numerator=[0.5],
                                            denominator=[1.0, -0.5], domain="z"), h)
        np.testing.assert_allclose(block.model.poles, [0.5])
        assert block.model.zeros.size == 0 and block.model.gain == 0.5
        # Reference: scipy.signal.dlti((0.5,), (1, -0.5), dt=h).freqresp
        w = np.linspace(0.5, math.pi / h, 50)
        ref = scipy.signal.dlti([0.5], [1.0, -0.5], dt=h).freqresp(w * h)[1]
        assert rel_err(block.model.response(w), ref) < 1e-12

    def test_transfer_function_in_s_high_order(self):
        # Degree > 2 goes through numpy.roots on the user's coefficients.
        num = [3.0, 2.0, 50.0]
        den = np.poly([-1.0, -20.0, -5 + 40j, -5 - 40j]).real
        block = controller_block(controller("transfer_function", numerator=num,
                                            denominator=list(den)), None)
        assert rel_err(block.model.response(W), freqresp(num, den)) < 1e-9

    def test_expression_field(self):
        # A field given as an expression (H2's parser) evaluates to its number.
        expr = parse_expression("2*pi*50/pi", Location("fw.toml", 3, 1, "c.cutoff_hz"))
        block = filter_block(filt("lowpass1", cutoff_hz=expr), None)
        assert block.characteristic_hz["cutoff_hz"] == pytest.approx(100.0)

    def test_unknown_kind(self):
        with pytest.raises(InputError):
            filter_block(filt("pid", kp=1.0), None)
        with pytest.raises(InputError):
            controller_block(controller("magic"), None)

    def test_negative_cutoff_is_an_input_error(self):
        with pytest.raises(InputError) as info:
            filter_block(filt("lowpass1", cutoff_hz=-5.0), None)
        assert info.value.key.endswith("cutoff_hz")


class TestRoots:
    @pytest.mark.parametrize("coeffs", [[1.0, 3.0, 2.0], [2.0, 0.2, 50.0], [1.0, -1e8, 1.0],
                                        [1.0, 0.0, 0.0], [0.0, 4.0, -2.0]])
    def test_closed_form_against_numpy_roots(self, coeffs):
        # Reference: numpy.roots (companion matrix); the closed form keeps the
        # small root of x^2 - 1e8 x + 1 (1e-8) accurate where cancellation would not.
        ours = np.sort_complex(polynomial_roots(coeffs))
        ref = np.sort_complex(np.roots(np.trim_zeros(np.asarray(coeffs), "f")))
        np.testing.assert_allclose(ours, ref, rtol=1e-9, atol=1e-15)

    def test_conjugate_pairs_are_exact(self):
        r = polynomial_roots([1.0, 0.3, 1e4])
        assert r[0] == np.conj(r[1])

    @pytest.mark.parametrize("zeta", [-1.5, -0.2, 0.0, 0.001, 0.5, 1.0, 3.0])
    def test_second_order_roots(self, zeta):
        w = 123.0
        r = second_order_roots(w, zeta)
        # each root satisfies s^2 + 2 zeta w s + w^2 = 0 (definition)
        np.testing.assert_allclose(r**2 + 2 * zeta * w * r + w**2, 0, atol=1e-9 * w**2)
        np.testing.assert_allclose(r[0] * r[1], w**2, rtol=1e-12)


def test_pid_polynomial_arithmetic_is_numpy_polymul_and_polyadd_bit_for_bit():
    # the PID rationals are formed on Python floats; numpy.polymul and
    # numpy.polyadd (the reference) must give the same bits, leading zeros
    # and signed zeros included
    from ruleguard.models.blocks import _polyadd, _polymul

    rng = np.random.default_rng(4)

    def coefficient():
        pick = rng.random()
        if pick < 0.15:
            return 0.0
        if pick < 0.2:
            return -0.0
        return float(rng.uniform(-10, 10) * 10.0 ** rng.integers(-8, 9))

    for _ in range(3000):
        a = [coefficient() for _ in range(int(rng.integers(1, 4)))]
        b = [coefficient() for _ in range(int(rng.integers(1, 4)))]
        assert np.array(_polymul(a, b)).tobytes() == np.polymul(a, b).tobytes(), (a, b)
        assert np.array(_polyadd(a, b)).tobytes() == np.polyadd(a, b).tobytes(), (a, b)
