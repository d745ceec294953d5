"""Rules margin.gain, margin.phase, margin.delay and margin.disk.

Each rule gets a passing and a failing case on figures from closed forms
(derivations beside each case) or from the definitions of FORMATS.md
section 5; the disk-margin conversions are checked against the values of
Seiler, Packard & Gahinet, "An Introduction to Disk Margins", IEEE Control
Systems Magazine 40(5), 2020 (as worked out in METHODS.md).
"""

from __future__ import annotations

import math

import numpy as np
import pytest
from rule_cases import analysed, analysis, context, loop_spec, run, unstable

from ruleguard.analysis.results import Stability
from ruleguard.location import Location
from ruleguard.rules.base import Severity
from ruleguard.rules.margins import (
    alpha_for_gain_db,
    alpha_for_phase_deg,
    disk_gain_db,
    disk_phase_deg,
)
from ruleguard.rules.spec import ParameterValues


def third_order_gain_margin_db(gain: float) -> float:
    """K/(s (s+1) (s+2)): the phase is -180 deg at w = sqrt(2) (Routh-Hurwitz:
    s^3 + 3 s^2 + 2 s + K has a pole pair at +-j sqrt(2) when K = 6), where
    |L| = K/(sqrt(2) sqrt(3) sqrt(6)) = K/6. So GM = 6/K."""
    w = math.sqrt(2.0)
    l_at_w = gain / (1j * w * (1j * w + 1) * (1j * w + 2))
    assert abs(np.angle(l_at_w, deg=True)) == pytest.approx(180.0, abs=1e-9)
    assert abs(l_at_w) == pytest.approx(gain / 6.0, rel=1e-12)
    return 20 * math.log10(6.0 / gain)


class TestGainMargin:
    def test_passes_with_room(self):
        gm = third_order_gain_margin_db(2.0)  # 9.54 dB
        ctx = context(analysis(gain_margin_db=gm, gain_margin_hz=math.sqrt(2) / (2 * math.pi)))
        assert run("margin.gain", ctx) == []

    def test_fails_below_min_db(self):
        gm = third_order_gain_margin_db(4.0)  # 20 log10 1.5 = 3.52 dB
        hz = math.sqrt(2) / (2 * math.pi)
        ctx = context(
            analysis(gain_margin_db=9.54, gain_margin_hz=hz),
            analysis(gain_margin_db=gm, gain_margin_hz=hz),
        )
        (v,) = run("margin.gain", ctx)
        assert v.variant == "corner-1"
        assert v.measured == pytest.approx(3.5218, abs=1e-4)
        assert v.limit == 6.0 and v.unit == "dB"
        assert v.frequency_hz == pytest.approx(0.2251, abs=1e-4)
        assert v.key_path.endswith("#upper")

    def test_unbounded_upper_margin_passes(self):
        ctx = context(analysis(gain_margin_db=None, gain_margin_hz=None))
        assert run("margin.gain", ctx) == []

    def test_lower_margin_of_unstable_plant(self):
        # L = K/(s - 1): closed-loop pole at s = 1 - K, stable iff K > 1, so the
        # gain may fall by the factor K: lower margin 20 log10(1/K).
        # K = 1.5 -> -3.52 dB (fails 6 dB); K = 4 -> -12.04 dB (passes).
        for gain, fails in ((1.5, True), (4.0, False)):
            assert (1 - gain < 0) is True
            lower = 20 * math.log10(1 / gain)
            a = analysis(
                Stability(True, 1, 1, 0),
                gain_margin_db=None,
                lower_gain_margin_db=lower,
                lower_gain_margin_hz=0.0,
            )
            found = run("margin.gain", context(a))
            assert bool(found) == fails
            if fails:
                (v,) = found
                assert v.measured == pytest.approx(-3.5218, abs=1e-4)
                assert v.limit == -6.0
                assert v.key_path.endswith("#lower")
                assert "falls by 3.522 dB" in v.message

    def test_min_lower_db_zero_checks_upper_only(self):
        a = analysis(lower_gain_margin_db=-1.0, lower_gain_margin_hz=1.0)
        assert run("margin.gain", context(a), min_lower_db=0.0) == []
        assert len(run("margin.gain", context(a))) == 1

    def test_unstable_variants_are_not_judged(self):
        ctx = context(analysis(gain_margin_db=8.0), analysis(unstable()))
        assert run("margin.gain", ctx) == []

    def test_all_unstable_gives_note(self):
        (v,) = run("margin.gain", context(analysis(unstable())))
        assert v.severity is Severity.NOTE
        assert "unstable in every variant" in v.message

    def test_ruleset_line_is_a_related_location(self):
        where = Location("house.toml", 7, 1, 'rules."margin.gain".min_db')
        params = ParameterValues({"min_db": 10.0, "min_lower_db": 6.0}, {"min_db": where})
        ctx = context(analysis(gain_margin_db=8.0))
        from ruleguard.rules.catalog import RULES

        (v,) = list(RULES["margin.gain"].function(ctx, params))
        assert where in v.related


class TestPhaseMargin:
    @staticmethod
    def integrator_with_delay(crossover_rad_s: float, delay_s: float) -> float:
        """L = (w_c/s) e^{-s tau}: |L| = 1 at w_c and angle L = -90 deg - w_c tau,
        so PM = 90 deg - w_c tau (in degrees)."""
        w = crossover_rad_s
        l_at_wc = (w / (1j * w)) * np.exp(-1j * w * delay_s)
        assert abs(l_at_wc) == pytest.approx(1.0)
        pm = 180.0 + math.degrees(np.angle(l_at_wc))
        assert pm == pytest.approx(90.0 - math.degrees(w * delay_s), abs=1e-9)
        return pm

    def test_passes(self):
        pm = self.integrator_with_delay(10.0, 0.1)  # 32.70 deg
        assert run("margin.phase", context(analysis(phase_margin_deg=pm))) == []

    def test_fails_at_smallest_crossover(self):
        pm = self.integrator_with_delay(10.0, 0.11)  # 26.97 deg
        a = analysis(
            phase_margin_deg=pm,
            crossover_hz=10 / (2 * math.pi),
            crossovers=((0.5, 70.0), (10 / (2 * math.pi), pm), (40.0, 50.0)),
        )
        (v,) = run("margin.phase", context(a))
        assert v.measured == pytest.approx(26.97, abs=1e-2)
        assert v.limit == 30.0 and v.unit == "deg"
        assert v.frequency_hz == pytest.approx(1.5915, abs=1e-4)
        assert "3 crossovers" in v.message

    def test_judges_the_size_of_a_negative_margin(self):
        # a stable loop whose crossover closest to -1 has PM = -20 deg (the curve
        # passes 20 deg above -1 the other way round): |PM| = 20 < 30 fails, and the
        # measured value is the size compared with the limit
        a = analysis(phase_margin_deg=-20.0, crossover_hz=2.0,
                     crossovers=((0.5, 70.0), (2.0, -20.0)))
        (v,) = run("margin.phase", context(a))
        assert v.measured == pytest.approx(20.0) and v.limit == 30.0
        assert v.frequency_hz == pytest.approx(2.0)
        a = analysis(phase_margin_deg=-40.0, crossover_hz=2.0,
                     crossovers=((0.5, 70.0), (2.0, -40.0)))
        assert run("margin.phase", context(a)) == []

    def test_no_crossover_passes(self):
        a = analysis(phase_margin_deg=None, crossover_hz=None, crossovers=())
        assert run("margin.phase", context(a)) == []

    def test_configured_limit(self):
        a = analysis(phase_margin_deg=40.0)
        assert run("margin.phase", context(a), min_deg=45.0)[0].limit == 45.0
        assert run("margin.phase", context(a), min_deg=35.0) == []


class TestDelayMargin:
    def test_not_configured_checks_nothing(self):
        a = analysis(phase_margin_deg=1.0, crossover_hz=100.0)
        assert run("margin.delay", context(a)) == []

    def test_seconds(self):
        # integrator with delay, w_c = 10 rad/s, tau = 0.1 s: the delay margin is
        # PM/w_c = (pi/2 - w_c tau)/w_c = pi/20 - 0.1 = 0.0571 s
        pm = 90.0 - math.degrees(1.0)
        hz = 10 / (2 * math.pi)
        a = analysis(phase_margin_deg=pm, crossover_hz=hz)
        assert a.margins.delay_margin_s == pytest.approx(math.pi / 20 - 0.1, rel=1e-12)
        assert run("margin.delay", context(a), min_s=0.05) == []
        (v,) = run("margin.delay", context(a), min_s=0.06)
        assert v.measured == pytest.approx(0.05708, abs=1e-5)
        assert v.unit == "s" and v.limit == 0.06
        assert v.frequency_hz == pytest.approx(hz)

    def test_samples_in_a_sampled_loop(self):
        # 45 deg at 100 Hz: (pi/4)/(2 pi 100) = 1.25 ms = 1.25 samples at 1 kHz
        spec = loop_spec(sample_rate_hz=1000.0)
        a = analysis(phase_margin_deg=45.0, crossover_hz=100.0, sample_rate_hz=1000.0)
        assert run("margin.delay", context(a, spec=spec), min_samples=1.0) == []
        (v,) = run("margin.delay", context(a, spec=spec), min_samples=2.0)
        assert v.measured == pytest.approx(1.25) and v.unit == "samples"

    def test_samples_on_a_continuous_loop_give_note(self):
        a = analysis(phase_margin_deg=45.0, crossover_hz=100.0)
        (v,) = run("margin.delay", context(a), min_samples=1.0)
        assert v.severity is Severity.NOTE
        # with min_s too, the continuous loop is judged in seconds
        (v,) = run("margin.delay", context(a), min_samples=1.0, min_s=0.002)
        assert v.unit == "s" and v.severity is None

    def test_worst_crossover_frequency(self):
        # two crossovers: (60 deg, 10 Hz) -> 16.7 ms, (50 deg, 100 Hz) -> 1.39 ms
        a = analysis(phase_margin_deg=50.0, crossover_hz=100.0,
                     crossovers=((10.0, 60.0), (100.0, 50.0)))
        (v,) = run("margin.delay", context(a), min_s=0.002)
        assert v.frequency_hz == 100.0
        assert v.measured == pytest.approx(math.radians(50) / (2 * math.pi * 100))


class TestDiskMargin:
    @pytest.mark.parametrize(
        "alpha, gain_db, phase_deg",
        # METHODS.md check values (from Seiler, Packard & Gahinet 2020's formulas)
        [(0.5, 4.437, 28.07), (0.6646, 6.00, 36.76), (0.71, 6.45, 39.09)],
    )
    def test_conversions(self, alpha, gain_db, phase_deg):
        assert disk_gain_db(alpha) == pytest.approx(gain_db, abs=5e-3)
        assert disk_phase_deg(alpha) == pytest.approx(phase_deg, abs=5e-3)
        assert alpha_for_gain_db(disk_gain_db(alpha)) == pytest.approx(alpha, rel=1e-12)
        assert alpha_for_phase_deg(disk_phase_deg(alpha)) == pytest.approx(alpha, rel=1e-12)

    def test_integrator_has_unbounded_disk(self):
        # L = k/s: S - 1/2 = (s - k)/(2 (s + k)) has modulus 1/2 on s = jw,
        # so alpha = 1/max|S - 1/2| = 2 (METHODS.md) and the gain range is unbounded.
        w = np.logspace(-3, 3, 2001)
        s = 1j * w
        k = 5.0
        sens = 1 / (1 + k / s)
        alpha = 1 / np.max(np.abs(sens - 0.5))
        assert alpha == pytest.approx(2.0, rel=1e-12)
        assert disk_gain_db(2.0) is None
        a = analysis(disk_alpha=2.0)
        assert run("margin.disk", context(a), min_gain_db=12.0, min_phase_deg=60.0) == []

    def test_gain_requirement(self):
        ctx = context(analysis(disk_alpha=0.71), analysis(disk_alpha=0.5, disk_hz=42.0))
        (v,) = run("margin.disk", ctx, min_gain_db=6.0)
        assert v.variant == "corner-1"
        assert v.measured == pytest.approx(4.437, abs=1e-3) and v.unit == "dB"
        assert v.limit == 6.0 and v.frequency_hz == 42.0

    def test_phase_requirement(self):
        ctx = context(analysis(disk_alpha=0.71))
        (v,) = run("margin.disk", ctx, min_gain_db=6.0, min_phase_deg=45.0)
        assert v.unit == "deg" and v.limit == 45.0
        assert v.measured == pytest.approx(39.09, abs=1e-2)
        assert run("margin.disk", ctx, min_phase_deg=39.0) == []

    def test_alpha_requirement(self):
        ctx = context(analysis(disk_alpha=0.6))
        (v,) = run("margin.disk", ctx, min_alpha=0.65)
        assert v.unit is None and v.measured == 0.6 and v.limit == 0.65
        assert run("margin.disk", ctx, min_alpha=0.55) == []

    def test_not_configured_and_missing(self):
        assert run("margin.disk", context(analysis(disk_alpha=0.1))) == []
        (v,) = run("margin.disk", context(analysis(disk_alpha=None)), min_alpha=0.5)
        assert v.severity is Severity.NOTE


def test_margin_rules_skip_not_analysed_loops():
    # the engine reports the reason once; the margin rules add nothing
    ctx = context(not_analysed_reason="inner loop unstable")
    assert run("margin.gain", ctx) == []
    assert run("margin.phase", ctx) == []
    assert run("margin.delay", ctx, min_s=0.1) == []
    assert run("margin.disk", ctx, min_alpha=0.5) == []


class TestOnAnalysedLoops:
    """The rules on analyses of real open loops (ruleguard.analysis.margins)."""

    def test_third_order_gain_margin(self):
        # K/(s (s+1) (s+2)), K = 4: GM = 6/K = 1.5 (3.52 dB) at sqrt(2) rad/s
        a = analysed([], [0.0, -1.0, -2.0], 4.0)
        (v,) = run("margin.gain", context(a))
        assert v.measured == pytest.approx(20 * math.log10(1.5), abs=1e-6)
        assert v.frequency_hz == pytest.approx(math.sqrt(2) / (2 * math.pi), rel=1e-6)
        assert run("margin.gain", context(analysed([], [0.0, -1.0, -2.0], 2.0))) == []

    def test_integrator_with_delay_phase_and_delay_margin(self):
        # (10/s) e^{-0.11 s}: PM = 90 - 10 * 0.11 rad = 26.97 deg at 10 rad/s,
        # delay margin = pi/20 - 0.11 = 0.04708 s
        a = analysed([], [0.0], 10.0, delay_s=0.11)
        (v,) = run("margin.phase", context(a))
        assert v.measured == pytest.approx(90 - math.degrees(1.1), abs=1e-4)
        assert v.frequency_hz == pytest.approx(10 / (2 * math.pi), rel=1e-6)
        (v,) = run("margin.delay", context(a), min_s=0.05)
        assert v.measured == pytest.approx(math.pi / 20 - 0.11, rel=1e-6)
        assert run("margin.phase", context(analysed([], [0.0], 10.0, delay_s=0.1))) == []

    def test_crossing_near_plus_one_passes(self):
        # L = 1.2 (s + 0.5)/(s + 1): one crossover at w = sqrt(0.64/0.44) rad/s with
        # PM = atan(2w) - atan(w) - 180 = -162.85 deg (closed form, tests/test_margins.py);
        # the closed loop (pole at -1.6/2.2) is stable and the crossing is 162.85 deg
        # away from -1, so margin.phase must not fail
        a = analysed([-0.5], [-1.0], 1.2)
        assert a.stability.stable
        assert a.margins.phase_margin_deg == pytest.approx(-162.85, abs=0.01)
        assert run("margin.phase", context(a)) == []
        assert run("margin.phase", context(a), min_deg=170.0)[0].measured == pytest.approx(
            162.85, abs=0.01)

    def test_three_crossovers_judged_at_the_closest_to_minus_one(self):
        # the resonant loop of tests/test_margins.py (crossovers checked there against
        # scipy brentq): PMs about +79.5, -153.0 and +109.6 deg; the closest to -1 is
        # +79.5 deg, so a 60 deg limit passes and an 80 deg limit fails at that crossover
        w1, w2 = 2 * np.pi * 150, 2 * np.pi * 180
        num = np.polymul([1.0, 50.0], [1.0, 2 * 0.04 * w1, w1**2]) * 1724 * 0.2
        den = np.polymul(np.polymul([1.0, 0.0], [1.0, 3.5]), [1.0, 2 * 0.03 * w2, w2**2])
        a = analysed(np.roots(num / num[0]), np.roots(den), num[0])
        assert len(a.margins.crossovers) == 3
        assert run("margin.phase", context(a), min_deg=60.0) == []
        (v,) = run("margin.phase", context(a), min_deg=80.0)
        assert v.measured == pytest.approx(79.53, abs=0.01)
        assert v.frequency_hz == pytest.approx(a.margins.crossovers[0].hz, rel=1e-12)

    def test_unstable_plant_lower_margin(self):
        # K/(s - 1), K = 1.5: stable for K > 1, lower margin 20 log10(1/1.5)
        (v,) = run("margin.gain", context(analysed([], [1.0], 1.5)))
        assert v.key_path.endswith("#lower")
        assert v.measured == pytest.approx(-20 * math.log10(1.5), abs=1e-6)
        assert run("margin.gain", context(analysed([], [1.0], 4.0))) == []

    def test_disk_margin_of_an_integrator_is_unbounded(self):
        a = analysed([], [0.0], 5.0)
        assert run("margin.disk", context(a), min_gain_db=20.0, min_phase_deg=80.0) == []
