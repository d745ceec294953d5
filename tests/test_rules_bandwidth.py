"""bandwidth.range.

References
----------
* K/s closes to T = K/(s + K): -3 dB bandwidth w = K exactly (closed form,
  checked on the model's response below).
* Bandwidth of K/(z - 1) with K = 1: T = 1/z, |T| = 1 at every frequency, so
  there is no -3 dB point below the Nyquist frequency (closed form).
"""

import math

import numpy as np
import pytest
from rule_contexts import analysis, context, controller_entry, factored, loop_evaluation, loop_spec

from ruleguard.rules import bandwidth
from ruleguard.rules.base import Severity


def test_bandwidth_range_first_order_closed_form():
    spec = loop_spec(controller_entry())
    k = 2 * math.pi * 20.0  # T = K/(s + K): bandwidth 20 Hz
    loop = factored([], [0.0], k)
    L = loop.response(np.array([k]))[0]
    assert abs(L / (1 + L)) == pytest.approx(1 / math.sqrt(2), rel=1e-12)
    ev = loop_evaluation(spec, loop, analysis(bandwidth_hz=20.0))
    ctx = context(spec, [ev])
    assert list(bandwidth.bandwidth_range(ctx, {"min_hz": 15.0, "max_hz": 25.0})) == []
    (lo,) = bandwidth.bandwidth_range(ctx, {"min_hz": 30.0, "max_hz": None})
    assert lo.measured == 20.0 and lo.limit == 30.0 and lo.unit == "Hz"
    (hi,) = bandwidth.bandwidth_range(ctx, {"min_hz": None, "max_hz": 10.0})
    assert hi.limit == 10.0 and "above the maximum" in hi.message
    assert list(bandwidth.bandwidth_range(ctx, {"min_hz": None, "max_hz": None})) == []


def test_bandwidth_unknown_is_a_note():
    spec = loop_spec(controller_entry(), sample_rate_hz=1000.0)
    ev = loop_evaluation(spec, factored([], [1.0], 1.0, h=1e-3), analysis(bandwidth_hz=None))
    (n,) = bandwidth.bandwidth_range(context(spec, [ev]), {"min_hz": 1.0})
    assert n.severity is Severity.NOTE
