"""JUnit XML read back by a real JUnit reader (junitparser, from the index)."""

from __future__ import annotations

import dataclasses

from junitparser import Failure, JUnitXml, Skipped
from sample_reports import PHASE_FINDING, clean_report, sample_report

from ruleguard.report import junit
from ruleguard.rules.base import Severity

ACTIVE = ("stability.closed-loop", "margin.phase", "margin.gain")


def _parse(report) -> JUnitXml:
    return JUnitXml.fromstring(junit.render(report).encode("utf-8"))


def _cases(xml: JUnitXml) -> dict[tuple[str, str], object]:
    return {(suite.name, case.name): case for suite in xml for case in suite}


class TestStructure:
    def test_one_suite_per_loop_and_one_case_per_rule(self):
        xml = _parse(sample_report(active_rules=ACTIVE))
        names = [suite.name for suite in xml]
        assert names == ["tilt.velocity", "heater.temp", "pan.position", "(project)"]
        heater = next(s for s in xml if s.name == "heater.temp")
        assert [c.name for c in heater] == list(ACTIVE)
        assert all(c.is_passed for c in heater)
        assert heater.tests == 3 and heater.failures == 0
        for case in heater:
            assert case.classname == "ruleguard.heater.temp"

    def test_failures_carry_the_message(self):
        cases = _cases(_parse(sample_report(active_rules=ACTIVE)))
        phase = cases[("tilt.velocity", "margin.phase")]
        assert phase.is_failure
        (failure,) = [r for r in phase.result if isinstance(r, Failure)]
        assert failure.message == PHASE_FINDING.message
        assert failure.type == "error"
        assert "firmware/tilt.toml:7:1" in failure.text
        assert "measured 38.2 deg" in failure.text and "at 61 Hz" in failure.text
        assert cases[("tilt.velocity", "stability.closed-loop")].is_failure

    def test_waived_is_skipped_with_the_reason(self):
        cases = _cases(_parse(sample_report(active_rules=ACTIVE)))
        gain = cases[("tilt.velocity", "margin.gain")]
        assert gain.is_skipped
        (skipped,) = [r for r in gain.result if isinstance(r, Skipped)]
        assert "fixture-limited travel" in skipped.message

    def test_not_analysed_loop(self):
        cases = _cases(_parse(sample_report(active_rules=ACTIVE)))
        assert cases[("pan.position", "margin.phase")].is_skipped
        reason_case = cases[("pan.position", "controller.derivative-filter")]
        # a note is below fail_at: passes, listed in system-out
        assert reason_case.is_passed
        assert "no filter" in reason_case.system_out

    def test_totals(self):
        xml = _parse(sample_report(active_rules=ACTIVE))
        xml.update_statistics()
        assert xml.failures == 2
        assert xml.tests == 3 + 3 + 4 + 1  # velocity, heater, pan (+ reason rule), project

    def test_fail_at_note_turns_notes_into_failures(self):
        cases = _cases(_parse(sample_report(active_rules=ACTIVE, fail_at=Severity.NOTE)))
        assert cases[("pan.position", "controller.derivative-filter")].is_failure
        assert cases[("(project)", "ruleset.unused-waiver")].is_failure

    def test_clean_report_has_no_failures(self):
        xml = _parse(clean_report())
        assert all(case.is_passed for suite in xml for case in suite)

    def test_control_characters_do_not_break_the_xml(self):
        odd = dataclasses.replace(PHASE_FINDING, message="bad \x01 byte <&>")
        cases = _cases(_parse(sample_report(findings=(odd,), active_rules=ACTIVE)))
        failure = cases[("tilt.velocity", "margin.phase")].result[0]
        assert failure.message == "bad \ufffd byte <&>"

    def test_all_rules_when_active_rules_is_unknown(self):
        xml = _parse(sample_report())
        heater = next(s for s in xml if s.name == "heater.temp")
        assert [c.name for c in heater] == [r.id for r in sample_report().rules]
