"""filter.below-nyquist and filter.resonance-coverage.

References
----------
* Tustin warping: the bilinear map sends the analog frequency w to
  w_d = (2/h) atan(w h/2) (Oppenheim & Schafer, Discrete-Time Signal
  Processing, 3rd ed., 2010); a notch at f lands at (f_s/pi) atan(pi f/f_s).
  Checked against the numerically located minimum of the discretized notch.
* Notch (FORMATS.md section 3): at its centre the notch gain is
  zeta_z/zeta_p = 10^(-depth_db/20) (closed form: the s^2 + w^2 terms cancel
  at s = j w and the 2 zeta w s terms remain).
* Peak of |L| across a resonance: compared with numpy.polyval on the
  multiplied-out (low-order) loop over a 200001-point grid.
"""

import math

import numpy as np
import pytest
from rule_contexts import (
    PLANT_LOCATION,
    analysis,
    block,
    context,
    controller_block,
    controller_entry,
    evaluation,
    factored,
    loop_spec,
    model,
    pair,
    velocity_manifest,
    write_files,
)

from ruleguard.models.discretize import discretize_block
from ruleguard.rules.base import Severity
from ruleguard.rules.filters import below_nyquist, resonance_coverage, tustin_shift_percent


def notch(center_hz, width_hz, depth_db):
    w = 2 * math.pi * center_hz
    zp = width_hz / (2 * center_hz)
    zz = zp * 10 ** (-depth_db / 20)
    return factored(pair(center_hz, zz), pair(center_hz, zp), 1.0), w, zp, zz


def sampled_ctx(filters, rate, methods):
    h = 1.0 / rate
    spec = loop_spec(controller_entry(fields={"kp": 1.0}, filters=[(k, f) for k, f, _ in filters]),
                     sample_rate_hz=rate)
    ctrl = controller_block(spec, factored([], [], 1.0), factored([], [], 1.0, h=h), "tustin")
    fblocks = []
    for i, ((kind, _, c), method) in enumerate(zip(filters, methods, strict=True)):
        if c is None:
            d = factored([-1.0], [0.5], 1.0, h=h)
        else:
            ffields = spec.controller.filters[i].fields
            prewarp = 2 * math.pi * ffields.get("prewarp_hz", ffields.get("center_hz", 0)) or None
            d = discretize_block(c, method, h, prewarp if method == "tustin_prewarp" else None)
        fblocks.append(block("filter", f"velocity.filters.{i} ({kind})", kind, c, d, method,
                             spec.controller.filters[i].location))
    plant = block("plant", "mechanics", "zero_pole_gain", factored([], [-1.0], 1.0),
                  factored([], [0.5], 1.0, h=h), "zoh", PLANT_LOCATION)
    return spec, context(spec, [evaluation("nominal", model(spec, ctrl, plant, fblocks),
                                           analysis())])


def test_tustin_shift_closed_form_matches_discretized_notch_minimum():
    rate, f0 = 20000.0, 1800.0
    c, w0, _, _ = notch(f0, 300.0, 25.0)
    d = discretize_block(c, "tustin", 1 / rate)
    w = 2 * math.pi * np.linspace(1700, 1850, 150001)
    landed_numeric = w[np.argmin(np.abs(d.response(w)))] / (2 * math.pi)
    landed, shift = tustin_shift_percent(f0, rate)
    assert landed == pytest.approx(landed_numeric, abs=2e-3)
    assert landed == pytest.approx(rate / math.pi * math.atan(math.pi * f0 / rate), rel=1e-14)
    x = math.pi * f0 / rate  # 0.09 pi
    assert shift == pytest.approx(100 * (1 - math.atan(x) / x), rel=1e-12)  # 2.5438 %


def test_plain_tustin_notch_shift_fails_prewarp_passes():
    c, *_ = notch(1800.0, 300.0, 25.0)
    fields = {"center_hz": 1800.0, "width_hz": 300.0, "depth_db": 25.0}
    spec, ctx = sampled_ctx([("notch", fields, c)], 20000.0, ["tustin"])
    (v,) = below_nyquist(ctx, {"max_fraction": 0.8, "max_shift_percent": 2.0})
    assert v.measured == pytest.approx(2.5438, abs=1e-4) and v.limit == 2.0 and v.unit == "%"
    assert v.location == spec.controller.filters[0].field_locations["center_hz"]
    assert v.related == (spec.controller.filters[0].location,)
    spec, ctx = sampled_ctx([("notch", fields, c)], 20000.0, ["tustin_prewarp"])
    assert list(below_nyquist(ctx, {"max_fraction": 0.8, "max_shift_percent": 2.0})) == []
    # a low notch moves by 0.2 %: fine under plain Tustin
    low, *_ = notch(500.0, 100.0, 20.0)
    spec, ctx = sampled_ctx([("notch", {"center_hz": 500.0}, low)], 20000.0, ["tustin"])
    assert list(below_nyquist(ctx, {"max_fraction": 0.8, "max_shift_percent": 2.0})) == []


def test_notch_prewarped_elsewhere_shift_closed_form():
    # prewarped at w0: c = w0/tan(w0 h/2), the centre lands at (2/h) atan(w/c)
    rate, f0, fp = 20000.0, 1800.0, 500.0
    h = 1 / rate
    c_tustin = (2 * math.pi * fp) / math.tan(math.pi * fp * h)
    landed_cf = (2 / h) * math.atan(2 * math.pi * f0 / c_tustin) / (2 * math.pi)
    c, *_ = notch(f0, 300.0, 25.0)
    d = discretize_block(c, "tustin_prewarp", h, 2 * math.pi * fp)
    w = 2 * math.pi * np.linspace(1700, 1850, 150001)
    assert landed_cf == pytest.approx(w[np.argmin(np.abs(d.response(w)))] / (2 * math.pi),
                                      abs=2e-3)
    fields = {"center_hz": f0, "width_hz": 300.0, "depth_db": 25.0, "prewarp_hz": fp}
    spec, ctx = sampled_ctx([("notch", fields, c)], rate, ["tustin_prewarp"])
    (v,) = below_nyquist(ctx, {"max_fraction": 0.8, "max_shift_percent": 2.0})
    assert v.measured == pytest.approx(100 * (1 - landed_cf / f0), rel=1e-9)  # 2.36 %
    assert v.frequency_hz == pytest.approx(landed_cf, rel=1e-12)
    assert "prewarped at 500 Hz" in v.message


def test_filter_frequency_near_nyquist_fails_biquad_skipped():
    w = 2 * math.pi * 9000.0
    lp2 = factored([], pair(9000.0, 0.707), w * w)
    spec, ctx = sampled_ctx(
        [("lowpass2", {"cutoff_hz": 9000.0, "damping": 0.707}, lp2), ("biquad", {}, None)],
        20000.0,
        ["tustin", "given"],
    )
    (v,) = below_nyquist(ctx, {"max_fraction": 0.8, "max_shift_percent": 2.0})
    assert v.measured == 9000.0 and v.limit == pytest.approx(8000.0)
    assert v.location == spec.controller.filters[0].field_locations["cutoff_hz"]


# ------------------------------------------------------ resonance coverage
F_R, Z_R = 180.0, 0.03
W_R = 2 * math.pi * F_R
K_LOOP = 2 * math.pi * 20.0  # k w_r^2 / (s (s^2 + ...)): crossover near 20 Hz


def resonant_ctx(filters=(), filter_factored=(), f_r=F_R, crossover_hz=20.0):
    w_r = 2 * math.pi * f_r
    spec = loop_spec(controller_entry(fields={"kp": 1.0}, filters=list(filters)))
    g = factored([], [0.0, *pair(f_r, Z_R)], K_LOOP * w_r * w_r)
    ctrl = controller_block(spec, factored([], [], 1.0))
    fblocks = [block("filter", f"velocity.filters.{i}", kind, c,
                     location=spec.controller.filters[i].location)
               for i, ((kind, _), c) in enumerate(zip(filters, filter_factored, strict=True))]
    plant = block("plant", "mechanics", "zero_pole_gain", g, location=PLANT_LOCATION)
    m = model(spec, ctrl, plant, fblocks)
    return spec, context(spec, [evaluation("nominal", m, analysis(crossovers_hz=[crossover_hz]))])


def reference_peak_db(num, den, f_lo, f_hi):
    w = 2 * math.pi * np.linspace(f_lo, f_hi, 200001)
    s = 1j * w
    return float(np.max(20 * np.log10(np.abs(np.polyval(num, s) / np.polyval(den, s)))))


def test_uncovered_resonance_fails_with_true_peak():
    spec, ctx = resonant_ctx()
    (v,) = resonance_coverage(ctx, {"min_attenuation_db": 6.0, "max_damping": 0.2})
    num = [K_LOOP * W_R**2]
    den = np.polymul([1.0, 0.0], [1.0, 2 * Z_R * W_R, W_R**2])
    assert v.measured == pytest.approx(reference_peak_db(num, den, 170, 190), abs=1e-3)
    assert v.limit == -6.0 and v.unit == "dB"
    assert v.frequency_hz == pytest.approx(F_R * math.sqrt(1 - 2 * Z_R**2), rel=1e-3)
    assert v.location == spec.controller.location  # no filter at all
    assert v.related == (PLANT_LOCATION,)


def test_notch_on_resonance_passes_and_weak_notch_is_located():
    fields = {"center_hz": F_R, "width_hz": 60.0, "depth_db": 40.0}
    deep, *_ = notch(F_R, 60.0, 40.0)
    _, ctx = resonant_ctx([("notch", fields)], [deep])
    assert list(resonance_coverage(ctx, {"min_attenuation_db": 6.0, "max_damping": 0.2})) == []
    shallow, *_ = notch(F_R, 60.0, 3.0)
    spec, ctx = resonant_ctx([("notch", {**fields, "depth_db": 3.0})], [shallow])
    (v,) = resonance_coverage(ctx, {"min_attenuation_db": 6.0, "max_damping": 0.2})
    assert v.location == spec.controller.filters[0].location


def test_resonance_below_crossover_or_well_damped_is_not_checked():
    _, ctx = resonant_ctx(crossover_hz=250.0)
    assert list(resonance_coverage(ctx, {"min_attenuation_db": 6.0, "max_damping": 0.2})) == []
    _, ctx = resonant_ctx()
    assert list(resonance_coverage(ctx, {"min_attenuation_db": 6.0, "max_damping": 0.02})) == []


def test_measured_plant_is_a_note():
    spec = loop_spec(controller_entry(fields={"kp": 1.0}))
    ctrl = block("controller", "velocity", "pid", factored([], [], 1.0))
    plant = block("plant", "mechanics (measured_response)", "measured_response",
                  location=PLANT_LOCATION)
    m = model(spec, ctrl, plant)
    (n,) = resonance_coverage(context(spec, [evaluation("nominal", m, analysis())]), {})
    assert n.severity is Severity.NOTE


# ----------------------------------------------------- through the pipeline
E2E_FILES = {
    "ruleguard.toml": velocity_manifest(
        loop_lines="sample_rate_hz = 4000.0\ndelay_samples = 1.0\n"
    ),
    "models/plants.toml": """[plants.mechanics]
kind = "zero_pole_gain"
gain = 1.26330e10
poles = [0.0, { freq_hz = 400.0, damping = 0.02 }]
""",
    "firmware/axis.toml": """[velocity]
kind = "pid"
kp = 0.0628
ki = 0.0
discretization = "tustin"

[[velocity.filters]]
kind = "notch"
center_hz = 1200.0
width_hz = 200.0
depth_db = 20.0

[[velocity.filters]]
kind = "lowpass2"
cutoff_hz = 1900.0
damping = 0.7
""",
}


def test_filter_rules_on_a_loaded_sampled_project(tmp_path):
    """Loader, models, analysis and rules together; |L| checked with scipy.signal."""
    import warnings

    from scipy import signal

    from ruleguard.api import check

    report = check(write_files(tmp_path, E2E_FILES))
    found = {}
    for f in report.findings:
        found.setdefault(f.rule, []).append(f)
    below = {f.location.line: f for f in found["filter.below-nyquist"]}
    x = math.pi * 1200.0 / 4000.0
    assert below[9].measured == pytest.approx(100 * (1 - math.atan(x) / x), rel=1e-9)  # 19.8 %
    assert below[9].location.key.endswith("center_hz")
    assert below[15].measured == 1900.0 and below[15].limit == pytest.approx(1600.0)
    (cov,) = found["filter.resonance-coverage"]
    assert cov.location.file == "firmware/axis.toml" and cov.location.line == 7  # the notch

    # Independent |L| near the resonance: ZOH plant by scipy.signal.cont2discrete, the
    # filters by scipy.signal.bilinear (plain Tustin), one sample of delay.
    fs, h = 4000.0, 1 / 4000.0
    w_r = 2 * math.pi * 400.0
    den_g = np.polymul([1.0, 0.0], [1.0, 2 * 0.02 * w_r, w_r * w_r])
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        num_gd, den_gd, _ = signal.cont2discrete(([1.26330e10], den_g), h, method="zoh")
    wn, zp = 2 * math.pi * 1200.0, 200.0 / 2400.0
    zz = zp * 10 ** (-20 / 20)
    num_n, den_n = signal.bilinear([1, 2 * zz * wn, wn * wn], [1, 2 * zp * wn, wn * wn], fs)
    wl = 2 * math.pi * 1900.0
    num_l, den_l = signal.bilinear([wl * wl], [1, 2 * 0.7 * wl, wl * wl], fs)
    f = np.linspace(380.0, 420.0, 40001)
    z = np.exp(1j * 2 * math.pi * f * h)
    loop = (0.0628 * np.polyval(np.ravel(num_gd), z) / np.polyval(den_gd, z)
            * np.polyval(num_n, z) / np.polyval(den_n, z)
            * np.polyval(num_l, z) / np.polyval(den_l, z) / z)
    peak = 20 * np.log10(np.max(np.abs(loop)))
    assert cov.measured == pytest.approx(peak, abs=1e-3)
    assert cov.frequency_hz == pytest.approx(f[np.argmax(np.abs(loop))], abs=2e-3)


def test_resonance_above_nyquist_is_measured_where_it_aliases():
    # a 700 Hz mode sampled at 1 kHz shows at |700 - 1000| = 300 Hz (ZOH pole e^{p h})
    import warnings

    from scipy import signal

    from ruleguard.models.discretize import zoh_equivalent

    rate, h = 1000.0, 1e-3
    w_r = 2 * math.pi * 700.0
    g = factored([], [0.0, *pair(700.0, 0.01)], 2 * math.pi * 20.0 * w_r * w_r)
    spec = loop_spec(controller_entry(fields={"kp": 1.0}), sample_rate_hz=rate)
    ctrl = controller_block(spec, factored([], [], 1.0), factored([], [], 1.0, h=h), "tustin")
    plant = block("plant", "mechanics", "zero_pole_gain", g, zoh_equivalent(g, h), "zoh",
                  PLANT_LOCATION)
    m = model(spec, ctrl, plant)
    ctx = context(spec, [evaluation("nominal", m, analysis(crossovers_hz=[20.0]))])
    (v,) = resonance_coverage(ctx, {"min_attenuation_db": 6.0, "max_damping": 0.2})
    assert "aliasing" in v.message and v.frequency_hz == pytest.approx(300.0, rel=1e-2)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        num, den, _ = signal.cont2discrete(([g.gain], np.real(np.poly(g.poles))), h, "zoh")
    f = np.linspace(290.0, 310.0, 40001)
    z = np.exp(1j * 2 * math.pi * f * h)
    mag = 20 * np.log10(np.abs(np.polyval(np.ravel(num), z) / np.polyval(den, z)))
    assert v.measured == pytest.approx(np.max(mag), abs=1e-3)
    assert v.frequency_hz == pytest.approx(f[np.argmax(mag)], abs=2e-3)
