"""quantization.robust.

The case: an open-loop unstable plant 1/(s - a), a = 2 pi 10 rad/s, under a
proportional gain kc = 2 pi 100 and a low-pass biquad (1 kHz, damping 0.7,
prewarped Tustin) at 20 kHz. The loop needs kc F(1) G(0) > 1 in magnitude,
so its lower gain margin is 20 log10(kc/a) = 20 dB (closed form). The
biquad's denominator z^2 + a1 z + a2 has a1 = -1.564: it fits q2.14 (range
[-2, 2)) but saturates to -1 in q1.15 (range [-1, 1), FORMATS.md section 3).
The DC gain of the section is sum(b)/(1 + a1 + a2), so saturation divides
the loop gain at z = 1 by (1 + a2 - 1)/(1 + a1 + a2) = 8.0 (-18.07 dB) and
the lower gain margin shrinks to about -1.93 dB: margin.gain (lower margin at
most -6 dB) fails in q1.15, while q2.14 and float32 move the coefficients by
at most 2^-15 and the margins hold.

References
----------
* Lower gain margin of kc/(s - a) at DC: Nyquist, the loop is stable iff
  kc > a (Routh-Hurwitz on s - a + kc), closed form.
* ZOH keeps the DC gain: G_zoh(z = 1) = G(s = 0) (Åström & Wittenmark,
  Computer-Controlled Systems, 3rd ed., 1997).
"""

import math

import numpy as np
import pytest
from rule_contexts import (
    block,
    context,
    controller_block,
    controller_entry,
    evaluation,
    factored,
    loop_spec,
    model,
    pair,
)

from ruleguard.analysis.margins import analyse_open_loop
from ruleguard.location import Location
from ruleguard.models.discretize import discretize_block, zoh_equivalent
from ruleguard.models.quantize import quantized_model
from ruleguard.rules.quantization import quantization_robust

RATE = 20000.0
H = 1.0 / RATE
A = 2 * math.pi * 10.0
KC = 2 * math.pi * 100.0
W_LP = 2 * math.pi * 1000.0


def lowpass_loop(numeric_format):
    fields = {"kp": KC, "numeric_format": numeric_format}
    lp_fields = {"cutoff_hz": 1000.0, "damping": 0.7}
    spec = loop_spec(controller_entry(fields=fields, filters=[("lowpass2", lp_fields)]),
                     sample_rate_hz=RATE)
    ctrl = controller_block(spec, factored([], [], KC), factored([], [], KC, h=H), "tustin")
    lp_c = factored([], pair(1000.0, 0.7), W_LP * W_LP)
    lp = block("filter", "velocity.filters.0 (lowpass2)", "lowpass2", lp_c,
               discretize_block(lp_c, "tustin_prewarp", H, W_LP), "tustin_prewarp",
               spec.controller.filters[0].location)
    g = factored([], [A], 1.0)
    plant = block("plant", "mechanics (zero_pole_gain)", "zero_pole_gain", g,
                  zoh_equivalent(g, H), "zoh", Location("models/plants.toml", 1, 1, "plants.m"))
    m = model(spec, ctrl, plant, [lp])
    return spec, context(spec, [evaluation("nominal", m, analyse_open_loop(m.open_loop))])


def test_preconditions_closed_forms():
    _, ctx = lowpass_loop("q1.15")
    exact = ctx.evaluations[0].analysis
    assert exact.stability.stable
    assert exact.margins.lower_gain_margin_db == pytest.approx(-20 * math.log10(KC / A), abs=1e-6)
    poles = ctx.evaluations[0].model.filters[0].discrete.poles
    a1 = float(np.real(-np.sum(poles)))
    assert 1.0 < abs(a1) < 2.0  # saturates in q1.15, fits q2.14


def test_q115_saturation_loses_the_lower_gain_margin():
    spec, ctx = lowpass_loop("q1.15")
    model_ = ctx.evaluations[0].model
    _, report = quantized_model(model_, "q1.15")
    coeff = {c.coefficient: c for c in report.blocks[1].coefficients}
    assert coeff["section 1 a1"].quantized == -1.0 and coeff["section 1 a1"].saturated
    a1, a2 = coeff["section 1 a1"].original, coeff["section 1 a2"].original
    a1q, a2q = coeff["section 1 a1"].quantized, coeff["section 1 a2"].quantized
    drop_db = 20 * math.log10((1 + a1q + a2q) / (1 + a1 + a2))  # +18.07 dB less loop gain
    expected_lower_db = -20 * math.log10(KC / A) + drop_db  # about -1.93 dB
    out = list(quantization_robust(ctx, {}))
    (v,) = [v for v in out if "margin.gain" in v.message]
    assert v.measured == pytest.approx(expected_lower_db, abs=1e-3)
    assert "velocity.filters.0 (lowpass2)" in v.message and "section 1 a1" in v.message
    assert "saturated" in v.message
    assert v.location == spec.controller.filters[0].location
    assert spec.controller.field_locations["numeric_format"] in v.related
    assert not [v for v in out if "margin.phase" in v.message]  # 36.7 deg still above 30


def test_q214_and_float_formats_pass():
    for fmt_name in ("q2.14", "float32", "float64"):
        _, ctx = lowpass_loop(fmt_name)
        assert list(quantization_robust(ctx, {})) == [], fmt_name


def test_margin_thresholds_from_the_pipeline():
    # with the lower-margin requirement relaxed to 1 dB the q1.15 loop (-1.93 dB) passes
    spec, ctx = lowpass_loop("q1.15")
    from dataclasses import replace

    from ruleguard.rules.margins import RULES as MARGIN_RULES

    params = {r.id: r.defaults() for r in MARGIN_RULES}
    params["margin.gain"] = {**params["margin.gain"], "min_lower_db": 1.0}
    relaxed = replace(ctx, extras={"rule_parameters": params})
    assert [v for v in quantization_robust(relaxed, {}) if "margin.gain" in v.message] == []


def test_continuous_loop_has_nothing_to_check():
    spec = loop_spec(controller_entry(fields={"kp": 1.0, "numeric_format": "q1.15"}))
    ctrl = block("controller", "velocity", "pid", factored([], [], 1.0))
    plant = block("plant", "m", "factored", factored([], [0.0], 1.0))
    m = model(spec, ctrl, plant)
    ctx = context(spec, [evaluation("nominal", m, analyse_open_loop(m.open_loop))])
    assert list(quantization_robust(ctx, {})) == []


def test_marginal_biquad_from_rounding_is_reported():
    # z^2 + a1 z + a2 with a2 = -0.5, a1 = 0.49999: roots 0.500003 and -0.999993 (inside);
    # a1 rounds to 0.5 on the q1.15 grid (2^-15 = 3.05e-5), giving (z + 1)(z - 0.5): on the circle
    poles = np.roots([1.0, 0.49999, -0.5])
    assert np.max(np.abs(poles)) < 1.0
    assert np.max(np.abs(np.roots([1.0, 0.5, -0.5]))) == pytest.approx(1.0)
    fields = {"kp": 0.1, "numeric_format": "q1.15"}
    spec = loop_spec(controller_entry(fields=fields, filters=[("biquad", {})]), sample_rate_hz=RATE)
    ctrl = block("controller", "velocity (pid)", "pid", None, factored([], [], 0.1, h=H), "tustin",
                 spec.controller.location)
    bq = block("filter", "velocity.filters.0 (biquad)", "biquad", None,
               factored([0.3, 0.2], poles, 0.5, h=H), "given", spec.controller.filters[0].location)
    plant = block("plant", "m", "factored", None, factored([], [0.9], 0.1, h=H), "zoh")
    m = model(spec, ctrl, plant, [bq])
    ctx = context(spec, [evaluation("nominal", m, analyse_open_loop(m.open_loop))])
    out = list(quantization_robust(ctx, {}))
    stab = [v for v in out if v.key_path.endswith("block-stability")]
    assert len(stab) == 1 and stab[0].location == spec.controller.filters[0].location
    assert stab[0].measured == pytest.approx(1.0, abs=1e-9)


def test_margin_rule_turned_off_is_not_rechecked():
    from dataclasses import replace

    from ruleguard.rules.base import Severity

    _, ctx = lowpass_loop("q1.15")
    off = replace(ctx, extras={"rule_severities": {"margin.gain": Severity.DISABLED}})
    assert [v for v in quantization_robust(off, {}) if "margin.gain" in v.message] == []


def test_controller_path_with_zero_gain_is_a_note():
    from ruleguard.rules.base import Severity

    fields = {"kp": 0.0, "numeric_format": "q1.15"}
    spec = loop_spec(controller_entry(fields=fields), sample_rate_hz=RATE)
    ctrl = block("controller", "velocity (pid)", "pid", factored([], [], 0.0),
                 factored([], [], 0.0, h=H), "tustin", spec.controller.location)
    plant = block("plant", "m", "factored", factored([], [-1.0], 1.0),
                  factored([], [0.5], 1.0, h=H), "zoh")
    m = model(spec, ctrl, plant)
    ctx = context(spec, [evaluation("nominal", m, analyse_open_loop(m.open_loop))])
    (n,) = quantization_robust(ctx, {})
    assert n.severity is Severity.NOTE and n.location == spec.controller.field_locations[
        "numeric_format"]
