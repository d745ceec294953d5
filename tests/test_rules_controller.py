"""controller.stable, controller.derivative-filter, controller.noise-gain.

References
----------
* Jury's test for z^2 + a1 z + a2: both roots inside the unit circle iff
  |a2| < 1 and |a1| < 1 + a2 (Åström & Wittenmark, Computer-Controlled
  Systems, 3rd ed., 1997; from memory); cross-checked with numpy.roots.
* Tustin s = (2/h)(z - 1)/(z + 1) maps s = inf to z = -1: the pure derivative
  kd s becomes kd (2/h)(z - 1)/(z + 1) (pole at z = -1), and the gain of any
  Tustin-discretized block at z = -1 equals the continuous gain as w -> inf.
* Parallel PID with filter: kp + kd s/(s/wd + 1) -> kp + kd wd as s -> inf
  (closed form).
"""

import math

import numpy as np
import pytest
from rule_contexts import (
    analysis,
    block,
    context,
    controller_block,
    controller_entry,
    evaluation,
    factored,
    loop_spec,
    model,
    velocity_manifest,
    write_files,
)

from ruleguard.models.discretize import discretize_block
from ruleguard.rules.base import Severity
from ruleguard.rules.controller import (
    controller_stable,
    derivative_filter,
    high_frequency_gain,
    noise_gain,
)

KP, KD, FD = 2.0, 0.01, 1000.0
WD = 2 * math.pi * FD


def filtered_pid():
    # kp + kd s/(s/wd + 1) = ((kp/wd + kd) s + kp)/(s/wd + 1)
    lead = KP / WD + KD
    return factored([-KP / lead], [-WD], lead * WD)


def ctx_with(spec, ctrl_c, filters=(), method="tustin"):
    h = None if spec.sample_rate_hz is None else 1.0 / spec.sample_rate_hz
    disc = (lambda b: discretize_block(b, method, h)) if h else (lambda b: None)
    ctrl = controller_block(spec, ctrl_c, disc(ctrl_c), method if h else None)
    fblocks = []
    for i, (c, d) in enumerate(filters):
        fblocks.append(block("filter", f"velocity.filters.{i}", spec.controller.filters[i].kind,
                             c, d if d is not None else disc(c), "given" if d is not None else
                             method, spec.controller.filters[i].location))
    unity = factored([], [], 1.0, h=h)
    plant = block("plant", "mechanics", "zero_pole_gain", factored([], [-1.0], 1.0),
                  unity if h else None)
    return context(spec, [evaluation("nominal", model(spec, ctrl, plant, fblocks), analysis())])


# ------------------------------------------------------------------ stable
def test_stable_controller_and_filters_pass():
    spec = loop_spec(controller_entry(fields={"kp": 1.0, "ki": 10.0},
                                      filters=[("lowpass2", {"cutoff_hz": 500.0})]))
    pi = factored([-10.0], [0.0], 1.0)  # the integrator at s = 0 is allowed
    w = 2 * math.pi * 500
    pair = [complex(-0.7 * w, w * math.sqrt(0.51)), complex(-0.7 * w, -w * math.sqrt(0.51))]
    lp2 = factored([], pair, w * w)
    assert list(controller_stable(ctx_with(spec, pi, [(lp2, None)]), {})) == []


def test_unstable_continuous_filter_is_located_at_its_entry():
    spec = loop_spec(controller_entry(fields={"kp": 1.0},
                                      filters=[("lowpass1", {"cutoff_hz": 50.0})]))
    bad = factored([], [2 * math.pi * 50], -2 * math.pi * 50)  # 1/(1 - s/wc): pole at +wc
    (v,) = controller_stable(ctx_with(spec, factored([], [], 1.0), [(bad, None)]), {})
    assert v.location == spec.controller.filters[0].location
    assert v.measured == pytest.approx(2 * math.pi * 50) and v.limit == 0.0
    assert list(controller_stable(ctx_with(spec, factored([], [], 1.0), [(bad, None)]),
                                  {"allow_unstable": True})) == []


def test_biquad_outside_unit_circle_by_jury():
    a1, a2 = -2.2, 1.3
    assert not (abs(a2) < 1 and abs(a1) < 1 + a2)  # Jury: unstable
    poles = np.roots([1.0, a1, a2])
    assert np.max(np.abs(poles)) > 1  # numpy.roots agrees (|p|^2 = a2 = 1.3)
    h = 1e-3
    spec = loop_spec(controller_entry(fields={"kp": 1.0}, filters=[("biquad", {})]),
                     sample_rate_hz=1000.0)
    bq = factored([-1.0, -1.0], poles, 0.1, h=h)
    (v,) = controller_stable(ctx_with(spec, factored([], [], 1.0), [(None, bq)]), {})
    assert v.measured == pytest.approx(math.sqrt(1.3), rel=1e-12) and v.unit == "|z|"
    # a Jury-stable biquad passes
    ok = factored([-1.0, -1.0], np.roots([1.0, -1.2, 0.5]), 0.1, h=h)
    assert list(controller_stable(ctx_with(spec, factored([], [], 1.0), [(None, ok)]), {})) == []


# ------------------------------------------------------- derivative filter
def test_unfiltered_derivative_under_tustin_has_pole_at_minus_one():
    spec = loop_spec(controller_entry(fields={"kp": KP, "kd": KD}), sample_rate_hz=1000.0)
    pd = factored([-KP / KD], [], KD)  # kp + kd s, improper
    ctx = ctx_with(spec, pd)
    poles = ctx.evaluations[0].model.controller.discrete.poles
    assert np.min(np.abs(poles + 1.0)) < 1e-12  # closed form: Tustin pole at z = -1
    (v,) = derivative_filter(ctx, {})
    assert "z = -1" in v.message
    assert v.location == spec.controller.field_locations["kd"]
    assert list(controller_stable(ctx, {})) == []  # left to the derivative rule
    (g,) = noise_gain(ctx, {"max_db": 40.0})
    assert g.measured is None and "infinite" in g.message


def test_filtered_derivative_below_nyquist_passes_above_fails():
    fields = {"kp": KP, "kd": KD, "derivative_filter_hz": FD}
    spec = loop_spec(controller_entry(fields=fields), sample_rate_hz=20000.0)
    assert list(derivative_filter(ctx_with(spec, filtered_pid()), {})) == []
    slow = loop_spec(controller_entry(fields=fields), sample_rate_hz=1500.0)  # Nyquist 750 Hz
    (v,) = derivative_filter(ctx_with(slow, filtered_pid()), {})
    assert v.measured == FD and v.limit == 750.0
    assert v.location == slow.controller.field_locations["derivative_filter_hz"]


def test_standard_form_filter_at_n_over_td():
    fields = {"form": "standard", "gain": 1.0, "td_s": 1e-3, "n": 10.0}
    spec = loop_spec(controller_entry(fields=fields), sample_rate_hz=2000.0)
    # derivative filter pole at n/td_s = 1e4 rad/s = 1591.5 Hz > Nyquist 1000 Hz
    c = factored([-1.0 / 1e-3 * 0.5], [-1e4], 11.0)
    (v,) = derivative_filter(ctx_with(spec, c), {})
    assert v.measured == pytest.approx(1e4 / (2 * math.pi))
    assert v.location == spec.controller.field_locations["n"]


def test_no_derivative_or_not_analysed_is_silent():
    spec = loop_spec(controller_entry(fields={"kp": 1.0, "kd": 0.0}), sample_rate_hz=1000.0)
    assert list(derivative_filter(ctx_with(spec, factored([], [], 1.0)), {})) == []
    cont = loop_spec(controller_entry(fields={"kp": 1.0, "kd": 0.1}))
    ctx = context(cont, [], not_analysed_reason="improper controller")
    assert list(derivative_filter(ctx, {})) == []


# ------------------------------------------------------------- noise gain
def test_noise_gain_continuous_closed_form():
    spec = loop_spec(controller_entry(fields={"kp": KP, "kd": KD, "derivative_filter_hz": FD}))
    expected = 20 * math.log10(KP + KD * WD)  # 36.24 dB
    value, f_hz = high_frequency_gain(filtered_pid())
    assert value == pytest.approx(expected, abs=1e-9) and f_hz is None
    ctx = ctx_with(spec, filtered_pid())
    assert list(noise_gain(ctx, {"max_db": 40.0})) == []
    (v,) = noise_gain(ctx, {"max_db": 30.0})
    assert v.measured == pytest.approx(expected, abs=1e-9)
    assert v.location == spec.controller.field_locations["kd"]
    assert list(noise_gain(ctx, {"max_db": None})) == []  # no limit configured


def test_noise_gain_sampled_at_nyquist_equals_continuous_limit_under_tustin():
    spec = loop_spec(controller_entry(fields={"kp": KP, "kd": KD, "derivative_filter_hz": FD}),
                     sample_rate_hz=8000.0)
    ctx = ctx_with(spec, filtered_pid())
    (v,) = noise_gain(ctx, {"max_db": 30.0})
    assert v.measured == pytest.approx(20 * math.log10(KP + KD * WD), abs=1e-9)
    assert v.frequency_hz == 4000.0


def test_unanalysed_without_reason_is_a_note():
    spec = loop_spec(controller_entry(fields={"kp": 1.0}))
    (n,) = controller_stable(context(spec, []), {})
    assert n.severity is Severity.NOTE


# ----------------------------------------------------- through the pipeline
def write_project(root, sample_rate_line, discretization="tustin"):
    files = {
        "ruleguard.toml": velocity_manifest(loop_lines=f"{sample_rate_line}\n"),
        "models/plants.toml": """[plants.mechanics]
kind = "zero_pole_gain"
gain = 50.0
poles = [-5.0, -80.0]
""",
        "firmware/axis.toml": f"""[velocity]
kind = "pid"
kp = 1.0
ki = 2.0
kd = 0.01
discretization = "{discretization}"
""",
    }
    return write_files(root, files)


def _derivative_findings(manifest):
    from ruleguard.api import check

    report = check(manifest)
    return [f for f in report.findings if f.rule == "controller.derivative-filter"]


def test_unfiltered_derivative_reported_once_continuous_and_sampled(tmp_path):
    cont = _derivative_findings(write_project(tmp_path / "c", ""))
    assert len(cont) == 1  # the loop is not analysed: one finding, with the reason
    assert cont[0].location.file == "firmware/axis.toml"
    sampled = _derivative_findings(write_project(tmp_path / "d", "sample_rate_hz = 1000.0"))
    assert len(sampled) == 1 and "z = -1" in sampled[0].message
    assert sampled[0].location.line == 5  # the kd line
    euler = _derivative_findings(
        write_project(tmp_path / "e", "sample_rate_hz = 1000.0", "backward_euler")
    )
    assert len(euler) == 1 and "z = -1" not in euler[0].message
    # FORMATS.md section 3: allowed with backward or forward Euler, so only a note
    assert euler[0].severity.value == "note"
    assert sampled[0].severity.value == "error"


def test_undamped_filter_pair_is_on_the_boundary():
    # a resonant filter 1/(s^2 + w^2): poles at +-j w, marginal (not an integrator)
    spec = loop_spec(controller_entry(fields={"kp": 1.0}, filters=[("transfer_function", {})]))
    w = 2 * math.pi * 50
    res = factored([], [1j * w, -1j * w], w * w)
    (v,) = controller_stable(ctx_with(spec, factored([], [], 1.0), [(res, None)]), {})
    assert "on the stability boundary" in v.message
    assert v.frequency_hz == pytest.approx(50.0)
