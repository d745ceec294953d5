"""Rules stability.closed-loop and stability.encirclements on hand-built analyses.

The verdicts follow the Nyquist criterion Z = N + P (Åström & Murray,
Feedback Systems, 2nd ed., 2021, section 10.2): with ccw the counter-clockwise
encirclements of -1, Z = P - ccw closed-loop poles are unstable.
"""

from __future__ import annotations

import numpy as np
from rule_cases import (
    CONTROLLER_FILE,
    PLANT_FILE,
    analysis,
    context,
    loop_spec,
    run,
    stable,
    through_minus_one,
    unstable,
)

from ruleguard.analysis.results import Stability
from ruleguard.rules.base import Severity


class TestClosedLoop:
    def test_stable_in_every_variant_passes(self):
        ctx = context(analysis(stable()), analysis(stable()), analysis(stable(1)))
        assert run("stability.closed-loop", ctx) == []

    def test_unstable_variant_fails_and_names_the_worst(self):
        # corner-1 has Z = 1, corner-2 has Z = 3: the worst is corner-2
        ctx = context(
            analysis(stable()),
            analysis(unstable(0, ccw=-1)),
            analysis(unstable(1, ccw=-2)),
        )
        (v,) = run("stability.closed-loop", ctx)
        assert v.variant == "corner-2"
        assert v.measured == 3.0 and v.limit == 0.0 and v.unit == "poles"
        assert v.severity is None  # the configured severity applies (always error)
        assert "2 of 3 variants fail" in v.message
        assert v.location.file == CONTROLLER_FILE
        assert [loc.file for loc in v.related] == [PLANT_FILE]
        assert v.key_path == f"{CONTROLLER_FILE}:tilt_velocity"
        assert v.frequency_hz == 60.0

    def test_unstable_plant_stabilised_by_feedback_passes(self):
        # P = 2 and two ccw encirclements: Z = 0
        ctx = context(analysis(Stability(True, 2, 2, 0)))
        assert run("stability.closed-loop", ctx) == []

    def test_curve_through_minus_one_is_worst(self):
        ctx = context(analysis(unstable(0, ccw=-2)), analysis(through_minus_one()))
        (v,) = run("stability.closed-loop", ctx)
        assert v.variant == "corner-1"
        assert v.measured is None
        assert "passes through -1" in v.message

    def test_not_analysed_loop_is_left_to_the_engine(self):
        ctx = context(not_analysed_reason="improper controller")
        assert run("stability.closed-loop", ctx) == []

    def test_no_evaluation_without_reason_gives_note(self):
        (v,) = run("stability.closed-loop", context())
        assert v.severity is Severity.NOTE

    def test_verdict_agrees_with_closed_loop_poles(self):
        # Independent check of the rule's reading of Z on K/(s (s+1) (s+2)):
        # Routh-Hurwitz on s^3 + 3 s^2 + 2 s + K gives stability iff 0 < K < 6.
        # Closed-loop poles from numpy.roots (order 3, well conditioned).
        for gain, z_expected in ((2.0, 0), (10.0, 2)):
            poles = np.roots([1.0, 3.0, 2.0, gain])
            z = int(np.sum(poles.real > 0))
            assert z == z_expected
            st = Stability(z == 0, 0, -z, z)
            found = run("stability.closed-loop", context(analysis(st)))
            assert (len(found) == 1) == (z > 0)


class TestEncirclements:
    def test_stated_count_met_by_unstable_plant(self):
        ctx = context(analysis(Stability(True, 1, 1, 0)), spec=loop_spec(required_ccw=1))
        assert run("stability.encirclements", ctx) == []

    def test_required_ccw_mismatch_fails(self):
        # A measured plant declared with 0 unstable poles, but the loop states
        # required_ccw = 1: ccw = 0 counted, so the declaration is suspect.
        spec = loop_spec(required_ccw=1)
        ctx = context(analysis(Stability(True, 0, 0, 0)), spec=spec)
        (v,) = run("stability.encirclements", ctx)
        assert v.measured == 0.0 and v.limit == 1.0 and v.unit == "encirclements"
        assert "required_ccw" in v.message
        assert v.related[0].key == "loops.0.required_ccw"

    def test_required_ccw_met_passes(self):
        spec = loop_spec(required_ccw=1)
        ctx = context(analysis(Stability(True, 1, 1, 0)), spec=spec)
        assert run("stability.encirclements", ctx) == []

    def test_mismatch_with_worst_variant(self):
        spec = loop_spec(required_ccw=2)
        ctx = context(
            analysis(Stability(True, 2, 2, 0)),
            analysis(Stability(False, 2, 1, 1)),
            analysis(Stability(False, 2, -1, 3)),
            spec=spec,
        )
        (v,) = run("stability.encirclements", ctx)
        assert v.variant == "corner-2"
        assert v.measured == -1.0 and v.limit == 2.0

    def test_without_required_ccw_defers_to_closed_loop(self):
        # required = P, and ccw != P is exactly Z != 0: one finding, from
        # stability.closed-loop, not two
        ctx = context(analysis(Stability(False, 2, 1, 1)))
        assert run("stability.encirclements", ctx) == []
        assert len(run("stability.closed-loop", ctx)) == 1

    def test_uncounted_gives_note(self):
        ctx = context(analysis(through_minus_one()), spec=loop_spec(required_ccw=0))
        (v,) = run("stability.encirclements", ctx)
        assert v.severity is Severity.NOTE
        assert "passes through -1" in v.message


class TestOnAnalysedLoops:
    def test_routh_hurwitz_critical_gain(self):
        # K/(s (s+1) (s+2)) is stable iff K < 6 (Routh-Hurwitz)
        from rule_cases import analysed

        assert run("stability.closed-loop", context(analysed([], [0.0, -1.0, -2.0], 5.0))) == []
        (v,) = run("stability.closed-loop", context(analysed([], [0.0, -1.0, -2.0], 7.0)))
        assert v.measured == 2.0

    def test_unstable_plant_needs_one_encirclement(self):
        # K/(s - 1): P = 1; K = 2 gives one ccw encirclement and Z = 0; K = 0.5 none
        from rule_cases import analysed

        spec = loop_spec(required_ccw=1)
        assert run("stability.encirclements", context(analysed([], [1.0], 2.0), spec=spec)) == []
        (v,) = run("stability.encirclements", context(analysed([], [1.0], 0.5), spec=spec))
        assert v.measured == 0.0 and v.limit == 1.0
