"""Rules sensitivity.peak and sensitivity.complementary-peak, and the sources
of their default thresholds.

Bounds: GM >= Ms/(Ms - 1), PM >= 2 asin(1/(2 Ms)) (Skogestad, "Simple analytic
rules for model reduction and PID controller tuning", J. Process Control 13,
2003, p. 297; Ms = 1.7 gives GM >= 2.43 and PM >= 34.2 deg there), and
GM >= 1 + 1/Mt, PM >= 2 asin(1/(2 Mt)) (Skogestad & Postlethwaite,
Multivariable Feedback Control, 2nd ed., 2005, section 2.4.3; from memory).
"""

from __future__ import annotations

import math

import numpy as np
import pytest
from rule_cases import analysis, context, run, unstable

from ruleguard.rules.base import Severity
from ruleguard.rules.catalog import RULES
from ruleguard.rules.sensitivity import (
    gain_margin_bound_from_ms,
    gain_margin_bound_from_mt,
    phase_margin_bound_from_ms,
    phase_margin_bound_from_mt,
)


def db(x: float) -> float:
    return 20 * math.log10(x)


class TestBounds:
    def test_skogestad_worked_values(self):
        # Skogestad 2003, p. 297: Ms = 1.7 -> GM >= 2.43, PM >= 34.2 deg
        assert gain_margin_bound_from_ms(1.7) == pytest.approx(2.43, abs=5e-3)
        assert phase_margin_bound_from_ms(1.7) == pytest.approx(34.2, abs=5e-2)

    def test_ms_two_implies_gm_two_and_pm_29(self):
        # issue "full rule catalog": Ms <= 2 implies GM >= 2 and PM >= 29 deg
        assert gain_margin_bound_from_ms(2.0) == pytest.approx(2.0)
        assert phase_margin_bound_from_ms(2.0) == pytest.approx(28.955, abs=1e-3)

    def test_mt_bounds(self):
        # Mt = 1.5: GM >= 1 + 1/1.5 = 1.667 (4.44 dB), PM >= 2 asin(1/3) = 38.94 deg
        assert db(gain_margin_bound_from_mt(1.5)) == pytest.approx(4.437, abs=1e-3)
        assert phase_margin_bound_from_mt(1.5) == pytest.approx(38.94, abs=1e-2)

    def test_default_thresholds_agree_with_margin_defaults(self):
        # The baseline Ms limit (6 dB) implies the baseline gain margin (6 dB)
        # and a phase margin within 1.1 deg of the baseline 30 deg.
        ms = 10 ** (RULES["sensitivity.peak"].defaults()["max_db"] / 20)
        assert ms == pytest.approx(2.0, abs=0.01)
        assert db(gain_margin_bound_from_ms(ms)) >= RULES["margin.gain"].defaults()["min_db"]
        pm_default = RULES["margin.phase"].defaults()["min_deg"]
        assert abs(phase_margin_bound_from_ms(ms) - pm_default) < 1.1
        mt = 10 ** (RULES["sensitivity.complementary-peak"].defaults()["max_db"] / 20)
        assert mt == pytest.approx(1.5, abs=0.01)

    @pytest.mark.parametrize("gain", [0.2, 0.5, 0.8, 1.2])
    @pytest.mark.parametrize("delay_s", [0.0, 0.1, 0.3])
    def test_bounds_hold_on_real_loops(self, gain, delay_s):
        # Independent numeric check (numpy, dense grid) on L = K e^{-s tau}/(s (s + 1)^2)
        # (stable for these gains and delays: without delay Routh-Hurwitz on
        # s^3 + 2 s^2 + s + K needs K < 2): the margins never fall below the bounds.
        w = np.logspace(-3, 2, 400_001)
        s = 1j * w
        L = gain * np.exp(-s * delay_s) / (s * (s + 1) ** 2)
        ms = np.max(np.abs(1 / (1 + L)))
        mt = np.max(np.abs(L / (1 + L)))
        im = L.imag
        cross = np.nonzero((np.sign(im[:-1]) != np.sign(im[1:])) & (L.real[:-1] < 0))[0]
        gm = 1 / np.max(np.abs(L[cross]))  # the first negative-real crossing bounds GM
        assert gm > 1  # stable
        mag = np.abs(L)
        up = np.nonzero(np.sign(mag[:-1] - 1) != np.sign(mag[1:] - 1))[0]
        pm = min(180 + np.degrees(np.angle(L[i])) for i in up)
        assert gm >= gain_margin_bound_from_ms(ms) * (1 - 1e-3)
        assert pm >= phase_margin_bound_from_ms(ms) - 1e-2
        assert gm >= gain_margin_bound_from_mt(mt) * (1 - 1e-3)
        assert pm >= phase_margin_bound_from_mt(mt) - 1e-2


class TestSensitivityPeak:
    def test_passes(self):
        assert run("sensitivity.peak", context(analysis(sensitivity_peak_db=5.9))) == []

    def test_fails_with_worst_variant_and_frequency(self):
        ctx = context(
            analysis(sensitivity_peak_db=5.0),
            analysis(sensitivity_peak_db=7.5, sensitivity_peak_hz=130.0),
            analysis(sensitivity_peak_db=6.5),
        )
        (v,) = run("sensitivity.peak", ctx)
        assert v.variant == "corner-1"
        assert v.measured == 7.5 and v.limit == 6.0 and v.unit == "dB"
        assert v.frequency_hz == 130.0
        assert "2 of 3 variants fail" in v.message
        # Ms = 10^(7.5/20) = 2.371: GM >= 2.371/1.371 = 1.729 (4.757 dB),
        # PM >= 2 asin(1/4.742) = 24.34 deg
        assert "Ms = 2.371" in v.message
        assert "GM >= 4.757 dB, PM >= 24.34 deg" in v.message

    def test_missing_peak_gives_note(self):
        (v,) = run("sensitivity.peak", context(analysis(sensitivity_peak_db=None)))
        assert v.severity is Severity.NOTE

    def test_unstable_only_gives_note(self):
        (v,) = run("sensitivity.peak", context(analysis(unstable())))
        assert v.severity is Severity.NOTE


class TestComplementaryPeak:
    def test_passes(self):
        ctx = context(analysis(complementary_peak_db=3.4))
        assert run("sensitivity.complementary-peak", ctx) == []

    def test_fails(self):
        ctx = context(analysis(complementary_peak_db=4.2, complementary_peak_hz=75.0))
        (v,) = run("sensitivity.complementary-peak", ctx)
        assert v.measured == 4.2 and v.limit == 3.5 and v.frequency_hz == 75.0
        assert "Mt = " in v.message

    def test_configured_limit(self):
        ctx = context(analysis(complementary_peak_db=2.5))
        assert len(run("sensitivity.complementary-peak", ctx, max_db=2.0)) == 1


def test_on_an_analysed_loop():
    # K/(s (s+1)^2): Ms from H1's analysis against a dense numpy grid
    from rule_cases import analysed

    a = analysed([], [0.0, -1.0, -1.0], 1.2)
    w = np.logspace(-3, 2, 200_001)
    L = 1.2 / (1j * w * (1j * w + 1) ** 2)
    ms_db = db(np.max(np.abs(1 / (1 + L))))
    assert a.margins.sensitivity_peak_db == pytest.approx(ms_db, abs=1e-3)
    (v,) = run("sensitivity.peak", context(a), max_db=ms_db - 0.1)
    assert v.measured == pytest.approx(ms_db, abs=1e-3)
    assert run("sensitivity.peak", context(a), max_db=ms_db + 0.1) == []
