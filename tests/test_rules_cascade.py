"""cascade.separation.

References
----------
* Inner loop K/s closes to T = K/(s + K): -3 dB bandwidth K rad/s (closed
  form). The inner bandwidth comes from ruleguard.analysis.margins; its
  accuracy is that module's business, so the comparison below allows 0.5 %.
* min_ratio 4: common practice (inner loop 4 to 10 times faster than the
  outer crossover; Åström & Hägglund, Advanced PID Control, 2006, from memory).
"""

import math

import pytest
from rule_contexts import (
    analysis,
    block,
    context,
    controller_entry,
    evaluation,
    factored,
    loop_evaluation,
    loop_spec,
    model,
)

from ruleguard.rules.base import Severity
from ruleguard.rules.cascade import separation

INNER_BW_HZ = 100.0


def inner_model():
    spec = loop_spec(controller_entry(path="current"), name="axis.current")
    k = 2 * math.pi * INNER_BW_HZ
    return spec, loop_evaluation(spec, factored([], [0.0], k), analysis(bandwidth_hz=INNER_BW_HZ))


def outer_ctx(crossovers, with_model=True, inner_ctx=None):
    spec = loop_spec(controller_entry(), inner="axis.current")
    inner_spec, inner_ev = inner_model()
    evs = []
    for i, f_c in enumerate(crossovers):
        ctrl = block("controller", "velocity", "pid", factored([], [0.0], 2 * math.pi * f_c),
                     location=spec.controller.location)
        plant = block("plant", "mechanics", "zero_pole_gain", factored([], [], 1.0))
        m = model(spec, ctrl, plant, inner=inner_ev.model if with_model else None)
        evs.append(evaluation(f"corner-{i + 1}", m, analysis(crossovers_hz=[f_c])))
    if inner_ctx is None and not with_model:
        inner_ctx = context(inner_spec, [inner_ev])
    return spec, context(spec, evs, inner=inner_ctx)


def test_separated_cascade_passes():
    _, ctx = outer_ctx([20.0])  # ratio 100/20 = 5
    assert list(separation(ctx, {"min_ratio": 4.0})) == []


def test_close_cascade_fails_worst_variant_from_built_inner_loop():
    spec, ctx = outer_ctx([20.0, 30.0])
    (v,) = separation(ctx, {"min_ratio": 4.0})
    assert v.variant == "corner-2" and v.frequency_hz == 30.0
    assert v.measured == pytest.approx(INNER_BW_HZ / 30.0, rel=5e-3)
    assert v.limit == 4.0 and v.location == spec.controller.location
    assert spec.field_locations["inner"] in v.related


def test_inner_context_used_without_built_inner_loop():
    _, ctx = outer_ctx([30.0], with_model=False)
    (v,) = separation(ctx, {"min_ratio": 4.0})
    assert v.measured == pytest.approx(INNER_BW_HZ / 30.0, rel=1e-12)  # analysis value as given


def test_unstable_inner_is_a_note_and_plain_loop_is_silent():
    inner_spec, inner_ev = inner_model()
    bad = evaluation("nominal", inner_ev.model, analysis(stable=False))
    _, ctx = outer_ctx([30.0], with_model=False, inner_ctx=context(inner_spec, [bad]))
    (n,) = separation(ctx, {"min_ratio": 4.0})
    assert n.severity is Severity.NOTE and "unstable" in n.message
    plain = loop_spec(controller_entry())
    ev = loop_evaluation(plain, factored([], [0.0], 1.0), analysis(crossovers_hz=[0.16]))
    assert list(separation(context(plain, [ev]), {"min_ratio": 4.0})) == []


def test_analysis_of_the_same_inner_model_is_reused():
    # the pipeline puts each outer variant's inner model, analysed, in the inner context;
    # the rule takes that analysis (here a stated 50 Hz) instead of analysing again
    spec = loop_spec(controller_entry(), inner="axis.current")
    inner_spec, inner_ev = inner_model()
    stated = evaluation("nominal", inner_ev.model, analysis(bandwidth_hz=50.0))
    ctrl = block("controller", "velocity", "pid", factored([], [0.0], 2 * math.pi * 20.0),
                 location=spec.controller.location)
    plant = block("plant", "mechanics", "zero_pole_gain", factored([], [], 1.0))
    m = model(spec, ctrl, plant, inner=inner_ev.model)
    ctx = context(spec, [evaluation("nominal", m, analysis(crossovers_hz=[20.0]))],
                  inner=context(inner_spec, [stated]))
    (v,) = separation(ctx, {"min_ratio": 4.0})
    assert v.measured == pytest.approx(50.0 / 20.0, rel=1e-12)
