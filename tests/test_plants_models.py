"""Plant kinds as models, against independent references.

References named beside each check: scipy.signal.freqresp of the same
transfer function or state space, closed forms derived in comments, and the
physical equations of the DC motor and the two-mass drive solved as a
linear system at each frequency (numpy.linalg.solve, mpmath.lu_solve),
independently of the derivation in ruleguard.models.plants.
"""

from __future__ import annotations

import math

import mpmath
import numpy as np
import pytest
import scipy.signal
from model_builders import plant, vary

from ruleguard.errors import InputError
from ruleguard.load.expressions import parse_expression
from ruleguard.load.spec import MeasuredData
from ruleguard.location import Location
from ruleguard.models.lti import MeasuredResponse
from ruleguard.models.plants import plant_model

W = np.logspace(-1, 4, 200)
TWO_PI = 2 * math.pi


def expr(text: str):
    return parse_expression(text, Location("models/plants.toml", 4, 5, "plants.x.f"))


def rel_err(a, b):
    return float(np.max(np.abs(np.asarray(a) - np.asarray(b)) / np.abs(np.asarray(b))))


def freqresp(num, den, w=W):
    return scipy.signal.freqresp((num, den), w)[1]


class TestTransferFunction:
    def test_with_expressions_and_parameters(self):
        # 1/(L s + R) with L, R parameters (FORMATS.md section 2 example).
        entry = plant("winding", "transfer_function", parameters={"L": 4.2e-4, "R": 1.3},
                      numerator=[1.0], denominator=[expr("L"), expr("R")])
        model = plant_model(entry)
        assert rel_err(model.response(W), freqresp([1.0], [4.2e-4, 1.3])) < 1e-12

    def test_variant_overrides_a_parameter(self):
        entry = plant("winding", "transfer_function", parameters={"L": 4.2e-4, "R": 1.3},
                      varied=[vary("R", 1.1, 1.8)], numerator=[1.0],
                      denominator=[expr("L"), expr("R")])
        model = plant_model(entry, {"R": 1.8})
        assert rel_err(model.response(W), freqresp([1.0], [4.2e-4, 1.8])) < 1e-12

    def test_parameters_that_depend_on_parameters(self):
        entry = plant("p", "transfer_function",
                      parameters={"tau": expr("L/R"), "L": 0.5, "R": 2.0},
                      numerator=[1.0], denominator=[expr("tau"), 1.0])
        model = plant_model(entry, {"R": 4.0})
        # tau = L/R = 0.125 with the variant's R: pole at -8 (closed form)
        np.testing.assert_allclose(model.poles, [-8.0])

    def test_delay_is_exact(self):
        entry = plant("p", "transfer_function", numerator=[2.0], denominator=[1.0, 3.0],
                      delay_s=0.01)
        model = plant_model(entry)
        ref = freqresp([2.0], [1.0, 3.0]) * np.exp(-1j * W * 0.01)
        assert rel_err(model.response(W), ref) < 1e-12
        assert model.delay_s == 0.01

    def test_improper_plant_is_an_input_error(self):
        with pytest.raises(InputError):
            plant_model(plant("p", "transfer_function", numerator=[1.0, 0.0, 0.0],
                              denominator=[1.0, 1.0]))

    def test_zero_denominator_is_an_input_error(self):
        with pytest.raises(InputError):
            plant_model(plant("p", "transfer_function", numerator=[1.0], denominator=[0.0]))


class TestZeroPoleGain:
    def test_pairs_and_real_roots(self):
        # gain prod(s - z)/prod(s - p); {freq_hz, damping} are the roots of
        # s^2 + 2 zeta w s + w^2, {re, im} the pair re +- j im.
        entry = plant("mech", "zero_pole_gain", gain=1724.0,
                      zeros=[{"freq_hz": 150.0, "damping": 0.04}],
                      poles=[-3.5, {"freq_hz": 180.0, "damping": 0.03}, {"re": -3.0, "im": 40.0}])
        model = plant_model(entry)
        wz, wp = TWO_PI * 150, TWO_PI * 180
        num = 1724.0 * np.array([1.0, 2 * 0.04 * wz, wz**2])
        den = np.polymul(np.polymul([1.0, 3.5], [1.0, 2 * 0.03 * wp, wp**2]),
                         [1.0, 6.0, 9.0 + 1600.0])
        # Reference: scipy.signal.freqresp of the multiplied-out polynomials (order 5: safe)
        assert rel_err(model.response(W), freqresp(num, den)) < 1e-9

    def test_varied_field_gain(self):
        entry = plant("mech", "zero_pole_gain", gain=1724.0, zeros=[], poles=[-3.5],
                      varied=[vary("gain", 1400.0, 2100.0)])
        assert plant_model(entry, {"gain": 2100.0}).gain == 2100.0
        assert plant_model(entry).gain == 1724.0

    def test_bad_root_table(self):
        with pytest.raises(InputError):
            plant_model(plant("p", "zero_pole_gain", gain=1.0, zeros=[], poles=[{"re": -1.0}]))


class TestStateSpace:
    def test_against_scipy_state_space(self):
        a = [[0.0, 1.0], [-25.0, -0.4]]
        b = [[0.0], [1.0]]
        c = [[25.0, 0.0]]
        d = [[0.0]]
        model = plant_model(plant("arm", "state_space", a=a, b=b, c=c, d=d))
        # Reference: scipy.signal.freqresp of the same state space (scipy goes
        # through ss2tf and warns about its trailing-zero numerator; harmless here).
        with pytest.warns(scipy.signal.BadCoefficients):
            ref = scipy.signal.freqresp(scipy.signal.StateSpace(a, b, c, d), W)[1]
        assert rel_err(model.response(W), ref) < 1e-9
        # and the resolvent C (sI - A)^-1 B + D solved directly at each frequency
        direct = [(np.array(c) @ np.linalg.solve(s * np.eye(2) - np.array(a), np.array(b)))[0, 0]
                  for s in 1j * W]
        assert rel_err(model.response(W), direct) < 1e-12

    def test_shape_mismatch(self):
        with pytest.raises(InputError) as info:
            plant_model(plant("arm", "state_space", a=[[0.0, 1.0], [-1.0, -1.0]],
                              b=[[1.0]], c=[[1.0, 0.0]], d=[[0.0]]))
        assert "shape" in info.value.message


class TestParametricKinds:
    def test_first_order_dead_time(self):
        # gain exp(-tau s)/(T s + 1), closed form
        model = plant_model(plant("heater", "first_order_dead_time", gain=2.4,
                                  time_constant_s=95.0, delay_s=12.0))
        s = 1j * W
        assert rel_err(model.response(W), 2.4 * np.exp(-12.0 * s) / (95.0 * s + 1)) < 1e-12

    def test_second_order_dc_gain_and_resonance(self):
        model = plant_model(plant("res", "second_order", gain=3.0, freq_hz=40.0, damping=0.1))
        w0 = TWO_PI * 40.0
        # closed form: DC gain = gain; at w0: gain w0^2/(2 zeta w0 j w0) = -j gain/(2 zeta)
        assert model.evaluate(0.0) == pytest.approx(3.0, rel=1e-12)
        assert model.response(w0) == pytest.approx(-1j * 3.0 / 0.2, rel=1e-12)

    def test_integrator_dead_time(self):
        model = plant_model(plant("tank", "integrator_dead_time", gain=0.5, delay_s=2.0))
        s = 1j * W
        assert rel_err(model.response(W), 0.5 * np.exp(-2.0 * s) / s) < 1e-12

    @pytest.mark.parametrize("output", ["speed", "current"])
    def test_dc_motor_against_its_physical_equations(self, output):
        R, L, K, J, b = 1.3, 4.2e-4, 0.05, 2e-5, 1e-5
        model = plant_model(plant("m", "dc_motor", resistance_ohm=R, inductance_h=L,
                                  torque_constant_nm_per_a=K, inertia_kg_m2=J,
                                  friction_nm_s_per_rad=b, output=output))
        # Independent reference: at each s solve the armature and rotor equations
        #   (L s + R) I + K Omega = V,   -K I + (J s + b) Omega = 0   for V = 1.
        ref = []
        for s in 1j * W:
            m = np.array([[L * s + R, K], [-K, J * s + b]])
            i, omega = np.linalg.solve(m, np.array([1.0, 0.0]))
            ref.append(omega if output == "speed" else i)
        assert rel_err(model.response(W), np.array(ref)) < 1e-10

    @pytest.mark.parametrize("output", ["motor_speed", "load_speed"])
    @pytest.mark.parametrize("c", [0.0, 0.02])
    def test_two_mass_against_its_physical_equations(self, output, c):
        jm, jl, k = 2e-4, 8e-4, 30.0
        model = plant_model(plant("drive", "two_mass", inertia_motor_kg_m2=jm,
                                  inertia_load_kg_m2=jl, stiffness_nm_per_rad=k,
                                  damping_nm_s_per_rad=c, output=output))
        # Independent reference: shaft torque (c + k/s)(Om - Ol);
        #   Jm s Om + (c + k/s)(Om - Ol) = T,  Jl s Ol - (c + k/s)(Om - Ol) = 0, T = 1,
        # solved with mpmath at 40 digits (at low frequency k/s dwarfs J s and the
        # system is ill-conditioned in double precision).
        wr = math.sqrt(k * (jm + jl) / (jm * jl))
        w = W[np.abs(W / wr - 1) > 1e-3]  # the undamped resonance itself is infinite
        ref = []
        with mpmath.workdps(40):
            for wi in w:
                s = mpmath.mpc(0, wi)
                g = c + k / s
                m = mpmath.matrix([[jm * s + g, -g], [-g, jl * s + g]])
                om, ol = mpmath.lu_solve(m, mpmath.matrix([1, 0]))
                ref.append(complex(om if output == "motor_speed" else ol))
        assert rel_err(model.response(w), np.array(ref)) < 1e-12
        # closed form: rigid-body integrator at s = 0 exactly; resonance
        # w_r = sqrt(k (jm + jl)/(jm jl)) when c = 0
        assert np.any(model.poles == 0)
        if c == 0.0:
            wr = math.sqrt(k * (jm + jl) / (jm * jl))
            assert np.sort(np.abs(model.poles.imag))[-1] == pytest.approx(wr, rel=1e-12)

    def test_dc_motor_bad_output(self):
        with pytest.raises(InputError):
            plant_model(plant("m", "dc_motor", resistance_ohm=1.0, inductance_h=1e-3,
                              torque_constant_nm_per_a=0.1, inertia_kg_m2=1e-4,
                              friction_nm_s_per_rad=0.0, output="torque"))


class TestMeasured:
    def test_measured_data_become_a_response(self):
        f = np.logspace(0, 3, 31)
        data = MeasuredData(tuple(f), tuple(-20 * np.log10(f)), tuple(np.full(31, -90.0)),
                            "models/sweep.csv")
        model = plant_model(plant("pan", "measured_response", measured=data,
                                  file="models/sweep.csv", unstable_poles=0, integrators=1))
        assert isinstance(model, MeasuredResponse)
        assert model.integrators == 1 and model.unstable_poles == 0
        np.testing.assert_allclose(model.w, TWO_PI * f)
        # 1/f in dB with -90 deg is 1/(j f) = 2 pi/(j w) at the data points
        np.testing.assert_allclose(model.response(TWO_PI * f), 1 / (1j * f), rtol=1e-12)

    def test_missing_data_is_an_input_error(self):
        with pytest.raises(InputError):
            plant_model(plant("pan", "measured_response", file="x.csv"))

    def test_unknown_kind(self):
        with pytest.raises(InputError):
            plant_model(plant("p", "black_box"))


class TestMeasuredResolution:
    """The report says when measured data are coarser than a mode's width (METHODS.md)."""

    @staticmethod
    def _sweep(zeta, points_per_decade=100):
        # |G| of wn^2/(s^2 + 2 zeta wn s + wn^2) at wn = 2 pi 100 (closed form); its
        # half-power band is about 2 zeta wn wide (common practice).
        import numpy as np

        f = np.logspace(0, 3, 3 * points_per_decade + 1)
        s = 2j * np.pi * f
        wn = 2 * np.pi * 100.0
        g = wn**2 / (s**2 + 2 * zeta * wn * s + wn**2)
        return 2 * np.pi * f, 20 * np.log10(np.abs(g))

    def test_a_well_sampled_mode_gives_no_note(self):
        from ruleguard.models.plants import coarse_resonances

        # zeta = 0.05: band about 10 Hz wide at 100 Hz; spacing 2.3 Hz at 100/decade
        assert coarse_resonances(*self._sweep(0.05)) == []

    def test_a_lightly_damped_mode_between_samples_is_reported(self):
        import pytest

        from ruleguard.models.plants import coarse_resonances

        # zeta = 0.002: band about 0.4 Hz wide, far below the 2.3 Hz spacing
        found = coarse_resonances(*self._sweep(0.002))
        assert len(found) == 1
        peak_hz, width_hz, spacing_hz, points = found[0]
        assert peak_hz == pytest.approx(100.0, rel=0.03)
        assert points < 3 and spacing_hz > width_hz
