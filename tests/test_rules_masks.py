"""response.mask.

References (closed forms, derived here)
---------------------------------------
* L = K/s with K = 2 pi 10: |L| = 10/f, i.e. 20 log10(10/f) dB.
  Against the upper mask [[100, -20], [1000, -50]] (slope -30 dB/decade) the
  excess is 10 log10(f) - 20 dB, largest at 1000 Hz: 10 dB.
* S = 1/(1 + L) = s/(s + K): |S| = f/sqrt(f^2 + 10^2).
* Second-order resonance k wn^2/(s^2 + 2 zeta wn s + wn^2): peak
  k/(2 zeta sqrt(1 - zeta^2)) at wn sqrt(1 - 2 zeta^2) (standard result,
  e.g. Ogata, Modern Control Engineering; from memory; it follows from
  d|G|/dw = 0).
"""

import math

import numpy as np
import pytest
from rule_contexts import (
    analysis,
    context,
    controller_entry,
    factored,
    loop_evaluation,
    loop_spec,
    pair,
    velocity_manifest,
    write_files,
)

from ruleguard.rules.base import Severity
from ruleguard.rules.masks import mask_level, response_mask


def integrator_ctx(stable=True):
    spec = loop_spec(controller_entry())
    ev = loop_evaluation(spec, factored([], [0.0], 2 * math.pi * 10.0), analysis(stable=stable))
    return spec, context(spec, [ev])


def test_mask_level_is_linear_in_log_frequency():
    f = np.array([100.0, 316.227766, 1000.0])
    assert mask_level(f, np.array([100.0, 1000.0]), np.array([-20.0, -50.0])) == pytest.approx(
        [-20.0, -35.0, -50.0], abs=1e-6
    )


def test_loop_upper_mask_worst_point_closed_form():
    spec, ctx = integrator_ctx()
    (v,) = response_mask(ctx, {"signal": "loop", "upper": [[100.0, -20.0], [1000.0, -50.0]]})
    assert v.frequency_hz == pytest.approx(1000.0, rel=1e-9)
    assert v.measured == pytest.approx(-40.0, abs=1e-9) and v.limit == pytest.approx(-50.0)
    assert "by 10 dB" in v.message and v.location == spec.controller.location
    assert list(response_mask(ctx, {"signal": "loop",
                                    "upper": [[100.0, -20.0], [1000.0, -39.0]]})) == []


def test_sensitivity_upper_mask_at_low_frequency():
    _, ctx = integrator_ctx()
    s_db = 20 * math.log10(0.5 / math.sqrt(0.25 + 100.0))  # -26.03 dB at 0.5 Hz
    assert list(response_mask(ctx, {"signal": "sensitivity",
                                    "upper": [[0.01, -20.0], [0.5, -20.0]]})) == []
    (v,) = response_mask(ctx, {"signal": "sensitivity", "upper": [[0.01, -30.0], [0.5, -30.0]]})
    assert v.frequency_hz == pytest.approx(0.5, rel=1e-9)
    assert v.measured == pytest.approx(s_db, abs=1e-9)
    _, bad = integrator_ctx(stable=False)
    (n,) = response_mask(bad, {"signal": "sensitivity", "upper": [[0.01, -30.0], [0.5, -30.0]]})
    assert n.severity is Severity.NOTE


def test_lower_mask():
    _, ctx = integrator_ctx()
    # |L| = 10/f >= 0 dB up to 10 Hz; a lower bound of +3 dB to 10 Hz fails at 10 Hz by 3 dB
    (v,) = response_mask(ctx, {"signal": "loop", "lower": [[1.0, 3.0], [10.0, 3.0]]})
    assert v.frequency_hz == pytest.approx(10.0, rel=1e-9)
    assert v.measured == pytest.approx(0.0, abs=1e-9) and "below the lower" in v.message


def test_narrow_resonance_between_breakpoints_is_found():
    zeta, f_n, k = 0.001, 300.0, 0.01
    w_n = 2 * math.pi * f_n
    spec = loop_spec(controller_entry())
    ev = loop_evaluation(spec, factored([], pair(f_n, zeta), k * w_n * w_n), analysis())
    (v,) = response_mask(context(spec, [ev]),
                         {"signal": "loop", "upper": [[100.0, -20.0], [1000.0, -20.0]]})
    assert v.measured == pytest.approx(
        20 * math.log10(k / (2 * zeta * math.sqrt(1 - zeta**2))), abs=1e-6
    )
    assert v.frequency_hz == pytest.approx(f_n * math.sqrt(1 - 2 * zeta**2), rel=1e-7)


def test_controller_mask_sampled_and_clipped_at_nyquist():
    h = 1e-3
    spec = loop_spec(controller_entry(), sample_rate_hz=1000.0)
    ev = loop_evaluation(spec, factored([1.0], [-0.5], 0.5, h=h), analysis())
    # C = 0.5 (z - 1)/(z + 0.5) grows with frequency: |C(-1)| = 0.5 * 2/0.5 = 2 at 500 Hz
    out = list(response_mask(context(spec, [ev]),
                             {"signal": "controller", "upper": [[100.0, 0.0], [2000.0, 0.0]]}))
    notes = [v for v in out if v.severity is Severity.NOTE]
    (v,) = [v for v in out if v.severity is None]
    assert len(notes) == 1 and "not checked" in notes[0].message
    assert v.frequency_hz == pytest.approx(500.0) and v.measured == pytest.approx(
        20 * math.log10(2.0), abs=1e-9
    )


def test_bad_masks_are_notes_and_no_mask_is_silent():
    _, ctx = integrator_ctx()
    assert list(response_mask(ctx, {"signal": "loop"})) == []
    (n,) = response_mask(ctx, {"signal": "loop", "upper": [[100.0, 0.0], [50.0, 0.0]]})
    assert n.severity is Severity.NOTE and "increase" in n.message
    (n,) = response_mask(ctx, {"signal": "plant", "upper": [[100.0, 0.0]]})
    assert n.severity is Severity.NOTE and "unknown signal" in n.message


def test_worst_point_matches_brute_force_on_random_loops():
    """50 seeded random loops (order <= 6, some lightly damped pairs) against a brute-force
    numpy.polyval evaluation of the multiplied-out loop on 400001 log-spaced points."""
    rng = np.random.default_rng(7)
    spec = loop_spec(controller_entry())
    f = np.logspace(0, 3, 400001)
    for _ in range(50):
        poles, zeros = [], []
        for _ in range(rng.integers(1, 3)):
            poles += pair(10 ** rng.uniform(0.3, 2.7), 10 ** rng.uniform(-3, -0.5))
        poles += list(-(10 ** rng.uniform(0, 3, size=rng.integers(0, 3))))
        zeros += list(-(10 ** rng.uniform(0, 3, size=rng.integers(0, 2))))
        loop = factored(zeros, poles, 10 ** rng.uniform(0, 6))
        ev = loop_evaluation(spec, loop, analysis())
        s = 2j * np.pi * f
        brute = 20 * np.log10(
            np.abs(loop.gain * np.polyval(np.atleast_1d(np.poly(zeros)), s)
                   / np.polyval(np.poly(poles), s))
        )
        worst = np.max(brute)
        level = worst - rng.uniform(0.5, 20.0)  # a flat mask the peak always crosses
        (v,) = response_mask(context(spec, [ev]),
                             {"signal": "loop", "upper": [[1.0, level], [1000.0, level]]})
        assert v.measured >= worst - 1e-6  # never misses the peak the brute force sees
        assert v.measured == pytest.approx(worst, abs=1e-3)  # and refines to it


def test_mask_from_a_ruleset_file_through_the_pipeline(tmp_path):
    """A ruleset's mask reaches the rule; the finding names the ruleset line as related.

    Controller C = kp + kd s/(s/wd + 1) with kp = 1, kd = 0.001, wd = 2 pi 2000 in a
    continuous loop: |C| at 10 kHz = |1 + 0.001 j w/(j w/wd + 1)| (closed form below).
    """
    from ruleguard.api import check

    files = {
        "ruleguard.toml": velocity_manifest("mask-e2e", "policy/house.toml"),
        "policy/house.toml": """[ruleset]
name = "house"
based_on = "baseline"

[rules."response.mask"]
signal = "controller"
upper = [[1000.0, 20.0], [10000.0, 20.0]]
""",
        "models/plants.toml": """[plants.mechanics]
kind = "zero_pole_gain"
gain = 500.0
poles = [-5.0, -800.0]
""",
        "firmware/axis.toml": """[velocity]
kind = "pid"
kp = 1.0
ki = 0.0
kd = 0.001
derivative_filter_hz = 2000.0
""",
    }
    report = check(write_files(tmp_path, files))
    (f,) = [f for f in report.findings if f.rule == "response.mask"]
    wd = 2 * math.pi * 2000.0
    w = 2 * math.pi * 10000.0
    c_db = 20 * math.log10(abs(1 + 0.001 * 1j * w / (1j * w / wd + 1)))  # 22.1 dB
    assert f.frequency_hz == pytest.approx(10000.0, rel=1e-9)
    assert f.measured == pytest.approx(c_db, abs=1e-9) and f.limit == pytest.approx(20.0)
    assert f.location.file == "firmware/axis.toml"
    assert any(loc.file == "policy/house.toml" for loc in f.related)
