"""sampling.rate.

References
----------
* Bandwidth of K/(z - 1) in closed form (derived here): T = K/(z - a) with
  a = 1 - K, |T(e^{j theta})|^2 = K^2/(1 - 2 a cos(theta) + a^2) and T(1) = 1,
  so |T| = 1/sqrt(2) at cos(theta) = (1 + a^2 - 2 K^2)/(2 a). The ratio of
  sample rate to bandwidth is then 2 pi / theta.
* min_ratio 10: common practice (10 to 30 samples per bandwidth period).
"""

import math

import numpy as np
import pytest
from rule_contexts import analysis, context, controller_entry, factored, loop_evaluation, loop_spec

from ruleguard.rules import sampling
from ruleguard.rules.base import Severity

RATE = 1000.0
H = 1.0 / RATE


def theta_bandwidth(k):
    a = 1.0 - k
    return math.acos((1 + a * a - 2 * k * k) / (2 * a))


def sampled(k, variant="nominal", bw_known=True):
    spec = loop_spec(controller_entry(), sample_rate_hz=RATE)
    loop = factored([], [1.0], k, h=H)
    bw_hz = None
    if bw_known:
        theta = theta_bandwidth(k)
        L = loop.response(np.array([theta / H]))[0]
        assert abs(L / (1 + L)) == pytest.approx(1 / math.sqrt(2), rel=1e-12)
        bw_hz = theta / (2 * math.pi * H)
    return spec, loop_evaluation(spec, loop, analysis(bandwidth_hz=bw_hz), variant)


def test_sampling_rate_passes_with_many_samples_per_bandwidth():
    spec, ev = sampled(0.1)
    assert 2 * math.pi / theta_bandwidth(0.1) == pytest.approx(59.57, abs=0.01)
    assert list(sampling.sampling_rate(context(spec, [ev]), {"min_ratio": 10.0})) == []


def test_sampling_rate_fails_and_names_worst_variant_and_manifest_entry():
    spec, ok = sampled(0.1, "corner-1")
    _, bad = sampled(0.8, "corner-2")
    (v,) = sampling.sampling_rate(context(spec, [ok, bad]), {"min_ratio": 10.0})
    assert v.variant == "corner-2"
    assert v.measured == pytest.approx(2 * math.pi / theta_bandwidth(0.8), rel=1e-12)  # 2.84
    assert v.limit == 10.0 and v.unit == "ratio"
    assert v.location == spec.field_locations["sample_rate_hz"]
    assert v.related == (spec.controller.location,)


def test_bandwidth_beyond_range_bounds_the_ratio():
    # K = 1: T = 1/z, |T| = 1 at every frequency: no -3 dB point below Nyquist,
    # so the bandwidth is at least f_s/2 and the ratio at most 2.
    spec, ev = sampled(1.0, bw_known=False)
    (v,) = sampling.sampling_rate(context(spec, [ev]), {"min_ratio": 10.0})
    assert v.measured == pytest.approx(2.0) and "at most" in v.message
    # a ratio of at most 2 proves nothing against min_ratio 1.5: a note, not a pass
    (n,) = sampling.sampling_rate(context(spec, [ev]), {"min_ratio": 1.5})
    assert n.severity is Severity.NOTE


def test_sampling_rate_skips_continuous_and_notes_unstable():
    cont = loop_spec(controller_entry())
    ev = loop_evaluation(cont, factored([], [0.0], 1.0), analysis(bandwidth_hz=0.16))
    assert list(sampling.sampling_rate(context(cont, [ev]), {"min_ratio": 10.0})) == []
    spec = loop_spec(controller_entry(), sample_rate_hz=RATE)
    ev = loop_evaluation(spec, factored([], [1.0], 3.0, h=H), analysis(stable=False))
    (n,) = sampling.sampling_rate(context(spec, [ev]), {"min_ratio": 10.0})
    assert n.severity is Severity.NOTE and "unstable" in n.message
