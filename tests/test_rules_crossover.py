"""crossover.range: gain crossover bounds and the sample-rate fraction.

References
----------
* h*w_c <= 0.5: Åström & Wittenmark, Computer-Controlled Systems, 3rd ed.,
  1997 (rule of thumb for the sampling period); 0.08 of the sample rate is
  2*pi*0.08 = 0.503 rad per sample.
* Crossover of K/(z - 1) in closed form: |e^{j theta} - 1| = 2 sin(theta/2),
  so |L| = 1 at theta = 2 asin(K/2) (issue "Sampled-data loops", tests).
* Crossover of K/s: |K/(j w)| = 1 at w = K.
"""

import math

import numpy as np
import pytest
from rule_contexts import analysis, context, controller_entry, factored, loop_evaluation, loop_spec

from ruleguard.rules.base import Severity
from ruleguard.rules.crossover import RULES, crossover_range

RATE = 1000.0
H = 1.0 / RATE


def discrete_integrator_context(gain, variant="nominal"):
    spec = loop_spec(controller_entry(), sample_rate_hz=RATE)
    loop = factored([], [1.0], gain, h=H)
    theta = 2.0 * math.asin(gain / 2.0)
    # the test data itself: |L| = 1 at the closed-form crossover
    assert abs(abs(loop.response(np.array([theta / H]))[0]) - 1.0) < 1e-12
    ev = loop_evaluation(spec, loop, analysis(crossovers_hz=[theta / (2 * math.pi * H)]), variant)
    return spec, ev, theta


def test_default_fraction_is_h_wc_half():
    (rule,) = RULES
    fraction = rule.defaults()["max_fraction_of_sample_rate"]
    # 2*pi*f_c/f_s = h*w_c: 0.08 of the sample rate is h*w_c = 0.503 (Åström & Wittenmark 0.5)
    assert 2 * math.pi * fraction == pytest.approx(0.5, abs=0.005)


def test_sampled_crossover_within_fraction_passes():
    spec, ev, theta = discrete_integrator_context(0.4)
    assert theta < 0.5  # 2 asin(0.2) = 0.4027
    assert list(crossover_range(context(spec, [ev]), RULES[0].defaults())) == []


def test_sampled_crossover_above_fraction_fails():
    spec, ev_ok, _ = discrete_integrator_context(0.4, "corner-1")
    _, ev_bad, theta = discrete_integrator_context(0.6, "corner-2")
    assert theta > 0.503  # 2 asin(0.3) = 0.6094
    (v,) = crossover_range(context(spec, [ev_ok, ev_bad]), RULES[0].defaults())
    assert v.variant == "corner-2"
    assert v.limit == pytest.approx(0.08 * RATE)
    assert v.measured == pytest.approx(theta / (2 * math.pi * H), rel=1e-12)
    assert v.unit == "Hz" and v.frequency_hz == v.measured
    assert v.location == spec.controller.location
    assert v.related == (spec.field_locations["sample_rate_hz"],)
    assert v.key_path.endswith("sample-rate-fraction")


def test_continuous_min_and_max():
    spec = loop_spec(controller_entry())
    k = 2 * math.pi * 50.0  # K/s crosses at w = K: 50 Hz
    ev = loop_evaluation(spec, factored([], [0.0], k), analysis(crossovers_hz=[k / (2 * math.pi)]))
    ctx = context(spec, [ev])
    params = {"min_hz": 10.0, "max_hz": 100.0, "max_fraction_of_sample_rate": 0.08}
    assert list(crossover_range(ctx, params)) == []
    (low,) = crossover_range(ctx, {**params, "min_hz": 60.0})
    assert low.limit == 60.0 and low.measured == pytest.approx(50.0)
    (high,) = crossover_range(ctx, {**params, "max_hz": 40.0})
    assert high.limit == 40.0 and "above the maximum" in high.message


def test_several_crossovers_use_lowest_and_highest():
    spec = loop_spec(controller_entry())
    ev = loop_evaluation(spec, factored([], [0.0], 1.0), analysis(crossovers_hz=[20.0, 300.0]))
    out = list(crossover_range(context(spec, [ev]), {"min_hz": 25.0, "max_hz": 250.0}))
    assert sorted(v.measured for v in out) == [20.0, 300.0]


def test_no_crossover_is_a_note_and_no_limits_is_silent():
    spec = loop_spec(controller_entry(), sample_rate_hz=RATE)
    ev = loop_evaluation(spec, factored([], [0.5], 0.1, h=H), analysis(crossovers_hz=[]))
    (v,) = crossover_range(context(spec, [ev]), RULES[0].defaults())
    assert v.severity is Severity.NOTE and "never crosses" in v.message
    cont = loop_spec(controller_entry())
    ev = loop_evaluation(cont, factored([], [0.0], 1.0), analysis(crossovers_hz=[0.16]))
    assert list(crossover_range(context(cont, [ev]), RULES[0].defaults())) == []


def test_not_analysed_loop_adds_nothing():
    spec = loop_spec(controller_entry(), sample_rate_hz=RATE)
    ctx = context(spec, [], not_analysed_reason="inner loop unstable")
    assert list(crossover_range(ctx, RULES[0].defaults())) == []
