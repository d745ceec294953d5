"""Tests of ruleguard.models.quantize against outside references.

References used (named again beside each check):
* IEEE Std 754-2019: float32 round-to-nearest has a relative error of at
  most 2^-24 for normal numbers; numpy.float32 is an independent rounding;
* two's-complement fixed point q<m>.<n> as FORMATS.md section 3 defines it
  (q1.15 range [-1, 1 - 2^-15]), rounded with Python's fractions.Fraction
  and round() (exact rational arithmetic, ties to even) as the reference;
* numpy.roots of the rounded denominators as an independent pole
  computation; the Jury/Schur-Cohn stability triangle of a second-order
  section (|a2| < 1, |a1| < 1 + a2; Astrom & Wittenmark, Computer-Controlled
  Systems, 3rd ed., 1997, section 3.2 Jury's criterion);
* closed-form Tustin coefficients of a second-order low-pass (derived below).
"""

from __future__ import annotations

import math
from fractions import Fraction

import numpy as np
import pytest

from ruleguard.analysis.loop import BlockModel, LoopModel
from ruleguard.analysis.openloop import OpenLoop
from ruleguard.models.discretize import discretize_block, zoh_equivalent
from ruleguard.models.lti import Factored
from ruleguard.models.quantize import (
    NumericFormat,
    parse_numeric_format,
    quantize_block,
    quantized_model,
    second_order_sections,
)


def lowpass2(cutoff_hz: float, damping: float) -> Factored:
    # FORMATS.md section 3: w^2 / (s^2 + 2 zeta w s + w^2)
    w = 2 * math.pi * cutoff_hz
    p = complex(-damping * w, w * math.sqrt(1 - damping**2))
    return Factored([], [p, p.conjugate()], w * w)


def reference_q_round(x: float, m: int, n: int) -> tuple[float, bool]:
    """q<m>.<n> rounding in exact rational arithmetic (round() is half-to-even)."""
    ticks = round(Fraction(x) * 2**n)
    lo, hi = -(2 ** (m + n - 1)), 2 ** (m + n - 1) - 1
    sat = ticks < lo or ticks > hi
    ticks = min(max(ticks, lo), hi)
    return float(Fraction(ticks, 2**n)), sat


# ---------------------------------------------------------------------------
# Number formats
# ---------------------------------------------------------------------------
class TestFormats:
    def test_parse(self):
        assert parse_numeric_format("float32") == NumericFormat("float32")
        q = parse_numeric_format("q1.15")
        assert (q.integer_bits, q.fraction_bits) == (1, 15)
        # FORMATS.md section 3: q1.15 range [-1, 1 - 2^-15]; q2.14 [-2, 2 - 2^-14]
        assert (q.min_value, q.max_value) == (-1.0, 1.0 - 2.0**-15)
        q2 = parse_numeric_format("q2.14")
        assert (q2.min_value, q2.max_value) == (-2.0, 2.0 - 2.0**-14)
        for bad in ("q0.15", "float16", "q1", "Q1.15", "q40.40", ""):
            with pytest.raises(ValueError):
                parse_numeric_format(bad)

    def test_q_ties_to_even_and_saturation(self):
        q = parse_numeric_format("q1.15")
        step = 2.0**-15
        # ties: 0.5 step rounds to 0, 1.5 steps to 2, 2.5 steps to 2, -1.5 to -2
        values = np.array([0.5, 1.5, 2.5, -1.5, -2.5]) * step
        rounded, sat = q.round(values)
        np.testing.assert_array_equal(rounded, np.array([0, 2, 2, -2, -2]) * step)
        assert not sat.any()
        # saturation bounds: -1 is representable, +1 is not
        rounded, sat = q.round([-1.0, 1.0, 1.9, -1.9, 1.0 - step])
        np.testing.assert_array_equal(rounded, [-1.0, 1 - step, 1 - step, -1.0, 1 - step])
        np.testing.assert_array_equal(sat, [False, True, True, True, False])

    @pytest.mark.parametrize("fmt", ["q1.15", "q2.14", "q4.12", "q1.31", "q3.5"])
    def test_q_against_exact_rational_rounding(self, fmt):
        q = parse_numeric_format(fmt)
        rng = np.random.default_rng(7)
        x = rng.uniform(-2.5 * 2 ** (q.integer_bits - 1), 2.5 * 2 ** (q.integer_bits - 1), 500)
        # include exact ties
        x[:50] = (rng.integers(-1000, 1000, 50) + 0.5) * q.step
        rounded, sat = q.round(x)
        for xi, ri, si in zip(x, rounded, sat, strict=True):
            ref, ref_sat = reference_q_round(float(xi), q.integer_bits, q.fraction_bits)
            assert ri == ref and si == ref_sat, (xi, ri, ref)

    def test_float32_relative_move_bound(self):
        # IEEE 754: round to nearest float32 moves a normal number by at most 2^-24 relative
        f = parse_numeric_format("float32")
        rng = np.random.default_rng(3)
        x = rng.normal(size=2000) * 10.0 ** rng.uniform(-20, 20, 2000)
        rounded, sat = f.round(x)
        assert not sat.any()
        assert np.max(np.abs(rounded - x) / np.abs(x)) <= 2.0**-24
        np.testing.assert_array_equal(rounded, x.astype(np.float32).astype(float))

    def test_float64_is_exact(self):
        f = parse_numeric_format("float64")
        x = np.array([math.pi, -1e-300, 1.9112384962697255])
        rounded, sat = f.round(x)
        np.testing.assert_array_equal(rounded, x)
        assert not sat.any()


# ---------------------------------------------------------------------------
# Sections
# ---------------------------------------------------------------------------
class TestSections:
    def test_lowpass_biquad_coefficients_closed_form(self):
        # Tustin of w^2/(s^2 + 2 zeta w s + w^2) with c = 2/h, K = c^2 + 2 zeta w c + w^2:
        #   a1 = 2 (w^2 - c^2)/K, a2 = (c^2 - 2 zeta w c + w^2)/K, and the
        #   numerator w^2 (1 + z^-1)^2 / K (the bilinear rule applied by hand;
        #   Franklin, Powell & Workman, Digital Control of Dynamic Systems, 1998).
        h, fc, zeta = 1e-4, 100.0, 0.707
        w, c = 2 * math.pi * fc, 2 / h
        k = c * c + 2 * zeta * w * c + w * w
        blk = discretize_block(lowpass2(fc, zeta), "tustin", h)
        cascade = second_order_sections(blk, "float64")
        (sec,) = cascade.sections
        assert sec.a1 == pytest.approx(2 * (w * w - c * c) / k, rel=1e-13)
        assert sec.a2 == pytest.approx((c * c - 2 * zeta * w * c + w * w) / k, rel=1e-13)
        assert (sec.b0, sec.b1, sec.b2) == pytest.approx((1.0, 2.0, 1.0), rel=1e-13)
        assert cascade.scale == pytest.approx(w * w / k, rel=1e-12)
        # a1 close to -2: the hazard for q1.15 (about -1.911 here)
        assert -2 < sec.a1 < -1.9

    def test_q_scaling_puts_numerators_in_range(self):
        blk = discretize_block(lowpass2(100.0, 0.707), "tustin", 1e-4)
        cascade = second_order_sections(blk, "q1.15")
        (sec,) = cascade.sections
        # b = (1, 2, 1) shifted by 2^-2 into [-1, 1 - 2^-15]: (0.25, 0.5, 0.25)
        assert (sec.b0, sec.b1, sec.b2) == (0.25, 0.5, 0.25)
        np.testing.assert_allclose(cascade.to_factored().response([10.0, 3000.0]),
                                   blk.response([10.0, 3000.0]), rtol=1e-12)

    @pytest.mark.parametrize("seed", range(40))
    def test_realization_reproduces_block(self, seed):
        # sections in float64 rebuild the block exactly (up to rounding), also
        # for improper blocks (forward Euler of an unfiltered derivative)
        rng = np.random.default_rng(seed)
        n = int(rng.integers(1, 9))
        poles = rng.uniform(0.2, 0.97, n) * np.exp(1j * rng.uniform(0, math.pi, n))
        poles = np.concatenate([poles[: n // 2], poles[: n // 2].conj(), poles.real[n // 2 :]])
        # integrators (z = 1) and Tustin derivative poles (z = -1) now and then
        poles = np.concatenate([poles, [1.0] * int(rng.integers(0, 2)),
                                [-1.0] * int(rng.integers(0, 2))])
        m = int(rng.integers(0, poles.size + 2))
        zeros = rng.uniform(-1.5, 1.5, m)
        if m >= 2 and rng.random() < 0.5:  # a complex zero pair (PID zeros)
            zc = 0.9 * np.exp(0.3j)
            zeros = np.concatenate([zeros[:-2], [zc, np.conj(zc)]])
        blk = Factored(zeros, poles, float(rng.uniform(0.1, 10)), sample_time_s=1e-3)
        cascade = second_order_sections(blk, "float64")
        w = np.linspace(1.0, math.pi / 1e-3, 50)
        np.testing.assert_allclose(cascade.to_factored().response(w), blk.response(w), rtol=1e-9)
        for sec in cascade.sections:
            # every section realises poles in 1 + a1 z^-1 + a2 z^-2 (numpy.roots as
            # the independent root computation)
            den = [1.0, sec.a1] if sec.order == 1 else [1.0, sec.a1, sec.a2]
            np.testing.assert_allclose(np.sort_complex(np.roots(den)),
                                       np.sort_complex(sec.poles()), atol=1e-12)

    def test_integrator_has_its_own_section(self):
        # PI by Tustin: kp + ki h/2 (z + 1)/(z - 1): the pole z = 1 sits in a
        # first-order section with a1 = -1, exact in every format
        h = 1e-3
        pi_block = discretize_block(Factored([-50.0], [0.0], 2.0), "tustin", h)
        lp = discretize_block(lowpass2(50.0, 0.7), "tustin", h)
        cascade = second_order_sections(pi_block * lp, "q1.15")
        firsts = [s for s in cascade.sections if s.order == 1]
        assert any(s.a1 == -1.0 for s in firsts)
        rebuilt, rep = quantize_block(pi_block * lp, "q1.15")
        assert np.any(rebuilt.poles == 1.0)
        assert rep.boundary_poles_before == rep.boundary_poles_after == 1
        assert not rep.destabilised


# ---------------------------------------------------------------------------
# Quantized blocks: the hazards
# ---------------------------------------------------------------------------
class TestHazards:
    def test_low_frequency_biquad_saturates_in_q115_not_in_q214(self):
        blk = discretize_block(lowpass2(100.0, 0.707), "tustin", 1e-4)
        rebuilt, rep = quantize_block(blk, "q1.15", label="pitch.filters.0 (lowpass2)")
        worst = rep.largest_move
        assert worst.coefficient == "section 1 a1" and worst.saturated
        assert worst.quantized == -1.0  # the most negative q1.15 value
        moved = abs(-1.0 - worst.original) / abs(worst.original)
        assert worst.relative_move == pytest.approx(moved)
        assert worst.block == "pitch.filters.0 (lowpass2)"
        # the poles moved a long way: z^2 - z + a2 has poles at angle ~60 degrees
        assert rep.max_pole_shift > 0.5
        # DC gain: numerator and scale are unchanged (they fit), so the gain at
        # z = 1 scales by (1 + a1 + a2) / (1 + (-1) + a2) (closed form), a drop
        # of about 47 dB here
        (sec,) = second_order_sections(blk, "q1.15").sections
        expected = (1 + sec.a1 + sec.a2) / (1 - 1 + sec.a2)
        ratio = rebuilt.evaluate(1.0)[()] / blk.evaluate(1.0)[()]
        assert ratio.real == pytest.approx(expected, rel=1e-3) and expected < 0.01
        # q2.14 holds a1 ~ -1.91: nothing saturates and the poles barely move
        rebuilt2, rep2 = quantize_block(blk, "q2.14")
        assert not rep2.saturated and rep2.max_pole_shift < 1e-3
        assert all(c.relative_move <= 2.0**-14 / 0.01 for c in rep2.coefficients)

    def test_pole_near_one_rounded_onto_the_circle_is_flagged(self):
        # Real poles 1 - 1e-6 and -0.3: a1 = -0.699999, a2 = -0.2999997, and
        # 1 + a1 + a2 = 1.3e-6 (stable, Jury: 1 + a1 + a2 > 0). q1.15 rounding
        # (reference: exact rational rounding) gives a1 = -22938/32768 and
        # a2 = -9830/32768, whose sum with 1 is exactly 0: a pole on z = 1.
        p1, p2 = 1 - 1e-6, -0.3
        blk = Factored([], [p1, p2], 1e-3, sample_time_s=1e-4)
        a1, a2 = -(p1 + p2), p1 * p2
        ra1, _ = reference_q_round(a1, 1, 15)
        ra2, _ = reference_q_round(a2, 1, 15)
        assert 1 + a1 + a2 > 0 and 1 + ra1 + ra2 == 0.0
        rebuilt, rep = quantize_block(blk, "q1.15")
        assert rep.stable_before and not rep.stable_after and rep.destabilised
        assert rep.boundary_poles_after == 1
        np.testing.assert_allclose(np.max(np.abs(np.roots([1, ra1, ra2]))), 1.0, atol=1e-12)

    def test_q_rounding_cannot_push_a_section_beyond_the_circle(self):
        # Stability triangle (Jury's criterion for z^2 + a1 z + a2): |a2| < 1,
        # |a1| < 1 + a2. Its edges lie on every q grid, so rounding a stable
        # section gives at worst a pole on the circle: checked over many
        # random stable sections, with numpy.roots as the pole computation.
        rng = np.random.default_rng(11)
        for fmt in ("q1.15", "q2.14", "q3.5"):
            for _ in range(300):
                r = 1 - 10 ** rng.uniform(-7, -1)
                theta = rng.uniform(0, math.pi)
                p = r * np.exp(1j * theta)
                blk = Factored([], [p, np.conj(p)], 1.0, sample_time_s=1e-3)
                rebuilt, rep = quantize_block(blk, fmt)
                assert rep.unstable_poles_after == 0
                assert np.max(np.abs(np.roots(np.real(np.poly(rebuilt.poles))))) <= 1 + 1e-7

    def test_float32_moves_each_coefficient_by_at_most_2_pow_minus_24(self):
        h = 1e-4
        blk = discretize_block(lowpass2(30.0, 0.3), "tustin", h) * discretize_block(
            Factored([-300.0], [0.0], 1.5), "tustin", h
        )
        _, rep = quantize_block(blk, "float32")
        assert rep.coefficients
        for c in rep.coefficients:
            assert c.relative_move <= 2.0**-24  # IEEE 754 float32, normal range
            assert c.quantized == float(np.float32(c.original))

    def test_float64_changes_nothing(self):
        blk = discretize_block(lowpass2(30.0, 0.3), "tustin", 1e-4)
        rebuilt, rep = quantize_block(blk, "float64")
        assert all(c.relative_move == 0.0 for c in rep.coefficients)
        w = np.linspace(1, 3e4, 30)
        np.testing.assert_allclose(rebuilt.response(w), blk.response(w), rtol=1e-12)


# ---------------------------------------------------------------------------
# Whole loops
# ---------------------------------------------------------------------------
def sampled_loop(filter_hz: float = 100.0, h: float = 1e-4, inner: bool = False) -> LoopModel:
    """A PI current loop on an R-L plant with a low-pass filter, sampled with a ZOH."""
    pi_cont = Factored([-2000.0], [0.0], 0.2)  # 0.2 (s + 2000)/s: crossover near 42 Hz
    lp_cont = lowpass2(filter_hz, 0.707)
    controller = discretize_block(pi_cont, "tustin", h)
    filt = discretize_block(lp_cont, "tustin", h)
    plant = Factored([], [-2000.0], 2000.0 / 1.5)  # 1/(L s + R), R = 1.5 ohm
    zoh = zoh_equivalent(plant, h, delay_s=h)
    path = controller * filt
    c_block = BlockModel("controller", "cur (pid)", "pid", pi_cont, controller, "tustin")
    f_block = BlockModel("filter", "cur.filters.0 (lowpass2)", "lowpass2", lp_cont, filt, "tustin")
    p_block = BlockModel("plant", "coil (transfer_function)", "transfer_function", plant, zoh,
                         "zoh")
    model = LoopModel(
        name="cur", sample_rate_hz=1 / h, open_loop=OpenLoop(path * zoh), controller=c_block,
        filters=(f_block,), plant=p_block, sensor=None, controller_path=path,
        total_delay_s=h, discretization={"controller": "tustin", "filters": ["tustin"]},
    )
    if inner:
        model = LoopModel(**{**model.__dict__, "inner": sampled_loop(filter_hz, h)})
    return model


class TestQuantizedModel:
    def test_q115_rebuilds_open_loop_and_names_the_coefficient(self):
        model = sampled_loop()
        qmodel, report = quantized_model(model, "q1.15")
        assert report.numeric_format == "q1.15"
        assert [b.label for b in report.blocks] == ["cur (pid)", "cur.filters.0 (lowpass2)"]
        worst = report.largest_move
        assert worst.block == "cur.filters.0 (lowpass2)" and worst.coefficient == "section 1 a1"
        assert worst.saturated and report.saturated
        # the rebuilt open loop is the rounded controller path times the same plant
        w = np.linspace(1.0, math.pi * 1e4, 200)
        expected = (
            qmodel.controller.discrete.response(w)
            * qmodel.filters[0].discrete.response(w)
            * model.plant.discrete.response(w)
        )
        np.testing.assert_allclose(qmodel.open_loop.response(w), expected, rtol=1e-10)
        np.testing.assert_allclose(
            qmodel.controller_path.response(w),
            qmodel.controller.discrete.response(w) * qmodel.filters[0].discrete.response(w),
            rtol=1e-12,
        )
        assert qmodel.open_loop.sample_time_s == model.open_loop.sample_time_s
        assert any("q1.15" in n for n in qmodel.notes)
        # the designed model is untouched (frozen records, pure function)
        assert model.filters[0].discrete is not qmodel.filters[0].discrete

    def test_float64_keeps_the_loop(self):
        model = sampled_loop()
        qmodel, report = quantized_model(model, "float64")
        w = np.linspace(1.0, math.pi * 1e4, 100)
        np.testing.assert_allclose(qmodel.open_loop.response(w), model.open_loop.response(w),
                                   rtol=1e-10)
        assert all(c.relative_move == 0 for c in report.coefficients)

    def test_float32_loop_moves_little(self):
        model = sampled_loop()
        qmodel, report = quantized_model(model, "float32")
        assert not report.saturated and not report.destabilised_blocks
        assert report.largest_move.relative_move <= 2.0**-24
        w = np.geomspace(10.0, math.pi * 1e4 * 0.99, 100)
        rel = np.abs(qmodel.open_loop.response(w) / model.open_loop.response(w) - 1)
        assert rel.max() < 1e-3

    def test_closed_loop_poles_of_rebuilt_loop(self):
        # Independent check of the rebuilt loop: the closed-loop poles from
        # numpy.roots of den(L) + num(L) (low order, so polynomials are fine)
        # agree with the poles of the q2.14 loop being inside the unit circle,
        # as for the designed loop.
        model = sampled_loop()
        for fmt in ("float64", "q2.14"):
            qmodel, _ = quantized_model(model, fmt)
            rat = qmodel.open_loop.rational
            num = np.real(np.poly(rat.zeros)) * rat.gain
            den = np.real(np.poly(rat.poles))
            char = np.polyadd(den, num)
            assert np.max(np.abs(np.roots(char))) < 1.0

    def test_continuous_loop_is_returned_unchanged(self):
        model = sampled_loop()
        cont = LoopModel(**{**model.__dict__, "sample_rate_hz": None,
                            "open_loop": OpenLoop(Factored([], [-1.0], 1.0))})
        qmodel, report = quantized_model(cont, "q1.15")
        assert qmodel is cont and report.blocks == () and report.notes

    def test_cascade_note(self):
        _, report = quantized_model(sampled_loop(inner=True), "float32")
        assert any("inner loop" in n for n in report.notes)

    def test_bad_format(self):
        with pytest.raises(ValueError, match="numeric_format"):
            quantized_model(sampled_loop(), "int16")


def test_rounding_of_an_equal_block_is_remembered_and_equal_to_rounding_afresh():
    """quantize_block remembers its result by exact content: the second call with an
    equal block (another object, as every variant of a loop builds) returns the same
    result, and it equals rounding afresh, field for field."""
    import pickle

    from ruleguard.models import quantize

    def block():
        return Factored(np.array([0.93 + 0.2j, 0.93 - 0.2j, 0.5]),
                        np.array([1.0, 0.95 + 0.1j, 0.95 - 0.1j]), 0.0123, 0.0, 1e-4)

    quantize._ROUNDED_BLOCKS.clear()
    first = quantize_block(block(), "q1.15", "pid", "controller", "pid")
    again = quantize_block(block(), "q1.15", "pid", "controller", "pid")
    assert again is first
    fresh = quantize._quantize_block(block(), quantize.parse_numeric_format("q1.15"),
                                     "pid", "controller", "pid")
    assert pickle.dumps(fresh) == pickle.dumps(first)
    other = quantize_block(block(), "float32", "pid", "controller", "pid")
    assert other is not first  # another format is another rounding
    moved = Factored(np.array([0.93 + 0.2j, 0.93 - 0.2j, 0.5000001]),
                     np.array([1.0, 0.95 + 0.1j, 0.95 - 0.1j]), 0.0123, 0.0, 1e-4)
    assert quantize_block(moved, "q1.15", "pid", "controller", "pid") is not first
