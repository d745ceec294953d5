"""The rule engine: effective configuration, adjustments, waivers, selection, order."""

from __future__ import annotations

import datetime
import inspect
import textwrap

import pytest
from rule_cases import analysis, context, loop_spec, project, unstable

from ruleguard.errors import InputError
from ruleguard.load.rulesets import load_ruleset
from ruleguard.location import Location
from ruleguard.rules.base import Severity
from ruleguard.rules.engine import effective_rules, evaluate, iter_findings

ORIGIN = Location("ruleguard.toml", 3, 1, "project.ruleset")
DAY = datetime.date(2027, 1, 15)


def ruleset(tmp_path, text: str, name: str = "house.toml"):
    (tmp_path / name).write_text(textwrap.dedent(text), encoding="utf-8")
    return load_ruleset(str(tmp_path), name, ORIGIN)


# The contexts here carry analyses only (no built models), so the engine runs
# the families that judge analyses; rules reading the models are H4b's tests.
OWN = ("stability", "margin", "sensitivity", "waiver")


def run_engine(contexts, rs, *, only=OWN, **kwargs):
    return evaluate(contexts, rs, only=only, **kwargs)


def rules_of(findings):
    return [(f.loop, f.rule) for f in findings]


def weak_phase(pm: float = 40.0, **more):
    return analysis(phase_margin_deg=pm, **more)


class TestEffectiveConfiguration:
    def test_defaults_then_ruleset(self, tmp_path):
        rs = ruleset(tmp_path, """
            [ruleset]
            based_on = "baseline"
            [rules."margin.phase"]
            min_deg = 45.0
            severity = "warning"
        """)
        eff = effective_rules(rs, "tilt.velocity")
        assert eff["margin.phase"].severity is Severity.WARNING
        assert eff["margin.phase"].parameters["min_deg"] == 45.0
        assert eff["margin.phase"].parameters.location_of("min_deg").line == 5
        assert eff["margin.gain"].parameters["min_db"] == 6.0
        assert eff["margin.gain"].parameters.location_of("min_db").file == (
            "<builtin>/baseline.toml"
        )

    def test_adjustments_apply_in_order(self, tmp_path):
        rs = ruleset(tmp_path, """
            [rules."margin.phase"]
            min_deg = 45.0
            [[adjustments]]
            tags = ["process"]
            rules = { "margin.phase" = { min_deg = 35.0 } }
            [[adjustments]]
            loops = ["heater.*"]
            rules = { "margin.phase" = { min_deg = 40.0, severity = "note" } }
            [[adjustments]]
            loops = ["pan.*"]
            rules = { "margin.phase" = { min_deg = 50.0 } }
        """)
        both = effective_rules(rs, "heater.main", ("process",))["margin.phase"]
        assert both.parameters["min_deg"] == 40.0  # the later adjustment wins
        assert both.severity is Severity.NOTE
        assert both.parameters.location_of("min_deg").line == 9
        tag_only = effective_rules(rs, "oven.zone1", ("process",))["margin.phase"]
        assert tag_only.parameters["min_deg"] == 35.0
        assert tag_only.severity is Severity.ERROR
        none = effective_rules(rs, "tilt.velocity", ("motion",))["margin.phase"]
        assert none.parameters["min_deg"] == 45.0

    def test_crossover_band_override(self, tmp_path):
        rs = ruleset(tmp_path, """
            [[adjustments]]
            crossover_hz = { max = 0.06 }
            rules = { "margin.phase" = { min_deg = 20.0 } }
        """)
        low = effective_rules(rs, "pitch.attitude", crossover_hz=0.05)["margin.phase"]
        high = effective_rules(rs, "pitch.attitude", crossover_hz=0.06)["margin.phase"]
        none = effective_rules(rs, "pitch.attitude", crossover_hz=None)["margin.phase"]
        assert low.parameters["min_deg"] == 20.0
        assert high.parameters["min_deg"] == 30.0  # [min, max): 0.06 is out
        assert none.parameters["min_deg"] == 30.0

    def test_closed_loop_is_never_off(self, tmp_path):
        with pytest.raises(InputError) as err:
            ruleset(tmp_path, """
                [rules."stability.closed-loop"]
                severity = "disabled"
            """)
        assert err.value.line == 3 and "waive" in err.value.message


class TestFindings:
    def test_severity_off_and_parameters(self, tmp_path):
        rs = ruleset(tmp_path, """
            [rules."margin.phase"]
            severity = "disabled"
            [rules."sensitivity.peak"]
            max_db = 2.0
            severity = "warning"
        """)
        ctx = context(weak_phase(20.0, sensitivity_peak_db=3.0))
        found = run_engine([ctx], rs, today=DAY)
        assert rules_of(found) == [("tilt.velocity", "sensitivity.peak")]
        (f,) = found
        assert f.severity is Severity.WARNING and f.limit == 2.0
        # the ruleset line of the threshold is a related location
        assert any(loc.file == "house.toml" and loc.line == 5 for loc in f.related)
        assert f.loop == "tilt.velocity" and f.variant == "nominal"

    def test_note_violations_stay_notes(self, tmp_path):
        rs = ruleset(tmp_path, '[ruleset]\nbased_on = "baseline"\n')
        ctx = context(analysis(sensitivity_peak_db=None))
        (f,) = run_engine([ctx], rs, today=DAY)
        assert f.rule == "sensitivity.peak" and f.severity is Severity.NOTE

    def test_order_is_loop_then_rule(self, tmp_path):
        rs = ruleset(tmp_path, '[ruleset]\nbased_on = "baseline"\n')
        a = loop_spec("b.first", path="first")
        b = loop_spec("a.second", path="second")
        proj = project(a, b)
        bad = analysis(phase_margin_deg=10.0, gain_margin_db=2.0, sensitivity_peak_db=9.0)
        found = run_engine(
            [context(bad, spec=a, proj=proj), context(bad, spec=b, proj=proj)], rs, today=DAY
        )
        assert rules_of(found) == [
            ("b.first", "margin.gain"),
            ("b.first", "margin.phase"),
            ("b.first", "sensitivity.peak"),
            ("a.second", "margin.gain"),
            ("a.second", "margin.phase"),
            ("a.second", "sensitivity.peak"),
        ]

    def test_lazy_iterator(self, tmp_path):
        rs = ruleset(tmp_path, '[ruleset]\nbased_on = "baseline"\n')
        it = iter_findings([context(weak_phase(10.0))], rs, only=OWN, today=DAY)
        assert inspect.isgenerator(it)
        assert next(it).rule == "margin.phase"

    def test_only_and_skip(self, tmp_path):
        rs = ruleset(tmp_path, '[ruleset]\nbased_on = "baseline"\n')
        bad = analysis(phase_margin_deg=10.0, gain_margin_db=2.0, sensitivity_peak_db=9.0)
        ctx = context(bad)
        only_margin = run_engine([ctx], rs, only=["margin"], today=DAY)
        assert {f.rule for f in only_margin} == {"margin.gain", "margin.phase"}
        skip_phase = run_engine([ctx], rs, skip=["margin.phase"], today=DAY)
        assert {f.rule for f in skip_phase} == {"margin.gain", "sensitivity.peak"}
        with pytest.raises(InputError) as err:
            evaluate([ctx], rs, only=["margn"], today=DAY)
        assert err.value.file == "<command line>"
        assert err.value.key == "--only" and "margin" in err.value.message

    def test_not_analysed_loop(self, tmp_path):
        rs = ruleset(tmp_path, """
            [rules."controller.derivative-filter"]
            severity = "disabled"
        """)
        where = Location("firmware/axis.toml", 14, 1, "velocity.kd")
        ctx = context(
            not_analysed_reason="derivative without filter in a continuous loop",
            extras={"not_analysed_rule": "controller.derivative-filter",
                    "not_analysed_location": where},
        )
        found = run_engine([ctx], rs, only=["margin"], today=DAY)
        (f,) = found  # reported although not selected and configured off
        assert f.rule == "controller.derivative-filter"
        assert f.severity is Severity.ERROR  # the loop has no stability verdict
        assert f.location == where
        assert "not analysed" in f.message

    def test_unstable_inner_loop_reported_once(self, tmp_path):
        rs = ruleset(tmp_path, '[ruleset]\nbased_on = "baseline"\n')
        ctx = context(
            not_analysed_reason="inner loop tilt.current is not closed-loop stable",
            extras={"not_analysed_rule": "stability.closed-loop",
                    "not_analysed_location": Location("ruleguard.toml", 30, 1, "loops.1.inner")},
        )
        found = run_engine([ctx], rs, today=DAY)
        assert rules_of(found) == [("tilt.velocity", "stability.closed-loop")]


class TestWaivers:
    TEXT = """
        [ruleset]
        based_on = "baseline"

        [[waivers]]
        rule = "margin.phase"
        loops = ["tilt.*"]
        reason = "fixture-limited travel; accepted at design review"
        expires = 2027-03-01
    """

    def test_waiver_applies_through_its_day(self, tmp_path):
        rs = ruleset(tmp_path, self.TEXT)
        ctx = context(weak_phase(20.0))
        for day in (DAY, datetime.date(2027, 3, 1)):
            (f,) = run_engine([ctx], rs, today=day)
            assert f.waived and f.waiver_reason.startswith("fixture-limited")
            assert f.severity is Severity.ERROR

    def test_expired_waiver_stops_applying_and_warns(self, tmp_path):
        rs = ruleset(tmp_path, self.TEXT)
        ctx = context(weak_phase(20.0))
        found = run_engine([ctx], rs, today=datetime.date(2027, 3, 2))
        assert rules_of(found) == [("tilt.velocity", "margin.phase"), (None, "waiver.expired")]
        phase, expired = found
        assert not phase.waived
        assert expired.severity is Severity.WARNING
        assert expired.location.file == "house.toml" and expired.location.line == 5
        assert "2027-03-01" in expired.message and "margin.phase" in expired.message

    def test_unused_waiver_is_a_note(self, tmp_path):
        rs = ruleset(tmp_path, self.TEXT)
        ctx = context(weak_phase(50.0))  # passes: nothing to waive
        (f,) = run_engine([ctx], rs, today=DAY)
        assert f.rule == "waiver.unused" and f.severity is Severity.NOTE
        assert f.location.line == 5

    def test_waiver_of_unknown_loops_is_unused(self, tmp_path):
        rs = ruleset(tmp_path, self.TEXT.replace('["tilt.*"]', '["tlt.*"]'))
        found = run_engine([context(weak_phase(20.0))], rs, today=DAY)
        assert rules_of(found) == [("tilt.velocity", "margin.phase"), (None, "waiver.unused")]
        assert "no loop matches" in found[1].message

    def test_unused_not_judged_when_rule_or_loop_left_out(self, tmp_path):
        rs = ruleset(tmp_path, self.TEXT)
        tilt = loop_spec("tilt.velocity", path="tv")
        pan = loop_spec("pan.velocity", path="pv")
        proj = project(tilt, pan)
        good = context(weak_phase(50.0), spec=pan, proj=proj)
        # the rule is skipped: the waiver is not judged
        assert run_engine([good], rs, skip=["margin.phase"], today=DAY) == ()
        # its only loop is outside this run (changed-files mode): not judged
        assert run_engine([good], rs, today=DAY) == ()

    def test_cached_findings_count_as_matches(self, tmp_path):
        rs = ruleset(tmp_path, self.TEXT)
        (waived,) = run_engine([context(weak_phase(20.0))], rs, today=DAY)
        assert run_engine([], rs, today=DAY, cached={"tilt.velocity": (waived,)}) == ()
        # only cached loops, none of them the waiver's: it cannot be judged
        assert run_engine([], rs, today=DAY, cached={"pan.velocity": ()}) == ()

    def test_family_waiver_and_closed_loop_waiver(self, tmp_path):
        rs = ruleset(tmp_path, """
            [[waivers]]
            rule = "stability"
            loops = ["tilt.velocity"]
            reason = "bench prototype, never run closed loop"
            expires = "2027-06-30"
        """)
        found = run_engine([context(analysis(unstable()))], rs, today=DAY)
        stability = [f for f in found if f.rule.startswith("stability.")]
        assert [f.rule for f in stability] == ["stability.closed-loop"]
        assert stability[0].waived
        # margins cannot be judged on an unstable loop: notes, not waived
        others = [f for f in found if not f.rule.startswith("stability.")]
        assert others and all(f.severity is Severity.NOTE and not f.waived for f in others)

    def test_default_today_is_utc(self, tmp_path):
        rs = ruleset(tmp_path, self.TEXT.replace("2027-03-01", "2000-01-01"))
        found = run_engine([context(weak_phase(20.0))], rs)
        assert [f.rule for f in found] == ["margin.phase", "waiver.expired"]


def test_rules_see_the_loop_configuration(tmp_path, monkeypatch):
    # A rule that re-runs others (quantization.robust) reads the effective
    # parameters and severities of this loop from ctx.extras.
    from ruleguard.rules import catalog
    from ruleguard.rules.spec import RuleSpec

    seen = {}

    def spy(ctx, params):
        seen.update(ctx.extras)
        return ()

    spec = catalog.RULES["margin.phase"]
    monkeypatch.setitem(catalog.RULES, "margin.phase", RuleSpec(
        spec.id, spec.default_severity, spec.summary, spec.explanation, spec.source,
        spec.parameters, spy))
    rs = ruleset(tmp_path, """
        [rules."margin.gain"]
        min_db = 9.0
        [rules."sensitivity.peak"]
        severity = "disabled"
    """)
    run_engine([context(weak_phase())], rs, today=DAY)
    assert seen["rule_parameters"]["margin.gain"]["min_db"] == 9.0
    assert seen["rule_severities"]["sensitivity.peak"] is Severity.DISABLED


def test_waiver_findings_take_their_severity_from_the_ruleset(tmp_path):
    # a team may make expired waivers errors, and silence unused ones
    rs = ruleset(tmp_path, TestWaivers.TEXT + """
        [rules."waiver.expired"]
        severity = "error"
        [rules."waiver.unused"]
        severity = "disabled"
    """)
    late = datetime.date(2027, 3, 2)
    found = run_engine([context(weak_phase(20.0))], rs, today=late)
    assert [(f.rule, f.severity) for f in found] == [
        ("margin.phase", Severity.ERROR), ("waiver.expired", Severity.ERROR)]
    assert run_engine([context(weak_phase(50.0))], rs, today=DAY) == ()
