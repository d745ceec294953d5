"""The text report for people: GNU-style finding lines, excerpts, tables, colour."""

from __future__ import annotations

import dataclasses
import io
import re

from sample_reports import PHASE_FINDING, clean_report, sample_report

from ruleguard.report import text
from ruleguard.rules.base import Severity

# The GNU Coding Standards, "Formatting Error Messages":
#   sourcefile:lineno:column: message
# (https://www.gnu.org/prep/standards/html_node/Errors.html); editors' "jump to
# error" features parse this form.
GNU_LINE = re.compile(
    r"^(?P<file>[^:\s][^:]*):(?P<line>\d+):(?P<column>\d+): "
    r"(?P<severity>error|warning|note): (?P<rule>[a-z][\w.-]*): (?P<message>.+)$"
)
ANSI = "\x1b["


class FakeTerminal(io.StringIO):
    def isatty(self) -> bool:
        return True


def _render(**options) -> str:
    return text.render(sample_report(), **options)


class TestFindingLines:
    def test_every_located_unwaived_finding_has_a_gnu_line(self):
        out = _render()
        parsed = [m.groupdict() for m in map(GNU_LINE.match, out.splitlines()) if m]
        expected = [
            f for f in sample_report().findings
            if not f.waived and f.location.line is not None
        ]
        assert len(parsed) == len(expected)
        first = next(p for p in parsed if p["rule"] == "margin.phase")
        assert (first["file"], first["line"], first["column"], first["severity"]) == (
            "firmware/tilt.toml", "7", "1", "error"
        )
        assert first["message"] == PHASE_FINDING.message

    def test_file_only_location_keeps_the_file_and_severity(self):
        out = _render()
        assert (
            "firmware/pan.toml: note: controller.derivative-filter: "
            "the derivative term has no filter" in out
        )

    def test_detail_gives_measured_limit_frequency_loop_variant(self):
        lines = _render().splitlines()
        i = next(i for i, line in enumerate(lines) if GNU_LINE.match(line)
                 and "margin.phase" in line)
        detail = lines[i + 1]
        for part in ("loop tilt.velocity", "variant corner-1", "measured 38.2 deg",
                     "limit 45 deg", "at 61 Hz"):
            assert part in detail

    def test_excerpt_shows_the_source_line_with_a_marker_at_the_column(self):
        lines = _render().splitlines()
        i = next(i for i, line in enumerate(lines) if line.startswith("firmware/tilt.toml:9:1"))
        source = next(line for line in lines[i:] if "┆" in line)
        marker = lines[lines.index(source) + 1]
        assert source.split("┆ ", 1)[1] == "kp = 0.35"  # line 9 of the sample file
        bar = source.index("┆")
        assert marker.index("┆") == bar
        assert marker[bar + 2:] == "^~"  # under "kp", from column 1

    def test_marker_follows_the_column(self):
        moved = dataclasses.replace(
            PHASE_FINDING,
            location=dataclasses.replace(PHASE_FINDING.location, line=9, column=6),
        )
        out = text.render(sample_report(findings=(moved,)))
        lines = out.splitlines()
        source = next(line for line in lines if line.endswith("┆ kp = 0.35"))
        marker = lines[lines.index(source) + 1]
        # column 6 is the "0" of 0.35: the marker starts 5 characters in
        assert marker.split("┆ ", 1)[1] == "     ^~~~"

    def test_related_places_and_waiver_reason(self):
        out = _render()
        assert "see models/plants.toml:1:1 (plants.tilt_mechanics)" in out
        assert "see house.toml:6:1 (rules.margin.phase.min_deg)" in out
        assert "firmware/tilt.toml:9:1: waived warning: margin.gain:" in out
        assert "waiver: fixture-limited travel; accepted at design review" in out

    def test_errors_come_before_notes(self):
        out = _render()
        assert out.index(": error: ") < out.index(": note: ")

    def test_input_text_is_not_markup(self):
        odd = dataclasses.replace(PHASE_FINDING, message="gain [bold]K[/bold] too high")
        out = text.render(sample_report(findings=(odd,)), color=True)
        assert "[bold]K[/bold]" in out


class TestTables:
    def test_loop_table_has_nominal_and_worst(self):
        out = _render()
        phase = next(line for line in out.splitlines() if line.startswith("phase margin"))
        assert "52 deg at 61 Hz" in phase  # nominal
        assert "-12 deg at 61 Hz" in phase and phase.rstrip().endswith("corner-2")
        closed = next(line for line in out.splitlines() if line.startswith("closed loop"))
        assert "stable" in closed and "1 unstable" in closed and "corner-2" in closed
        delay = next(line for line in out.splitlines() if line.startswith("delay margin "))
        # corner-1: 38.2 deg at 61 Hz -> 38.2/360/61 s = 1.7395 ms (FORMATS.md section 5)
        assert "1.74 ms" in delay and delay.rstrip().endswith("corner-1")

    def test_units_and_unbounded(self):
        out = _render()
        assert "gain margin                  11.2 dB at 310 Hz" in out
        heater = out[out.index("loop heater.temp"):out.index("loop pan.position")]
        gain = next(line for line in heater.splitlines() if line.startswith("gain margin"))
        assert gain.rstrip().endswith("unbounded")
        assert "loop delay 12 s" in heater
        assert "worst of" not in heater  # a single variant has no worst column

    def test_loop_header_and_not_analysed(self):
        out = _render()
        assert "sampled at 2000 Hz" in out and "controller tustin" in out
        assert "not analysed: the derivative term has no filter" in out

    def test_caution_is_last_and_result_line(self):
        out = _render()
        tail = [line for line in out.splitlines() if line.strip()]
        assert tail[-1].startswith("Caution: these are linear-model analyses")
        assert "validate" in out.lower() and "qualified engineering review" in out
        assert tail[-2].startswith("FAIL  2 errors, 0 warnings, 2 notes, 1 waived")
        clean = text.render(clean_report())
        assert "PASS  0 errors" in clean

    def test_fail_at_shown(self):
        out = text.render(sample_report(fail_at=Severity.WARNING))
        assert "fails at warning" in out


class TestModes:
    def test_quiet_prints_findings_only(self):
        out = _render(quiet=True)
        assert "ccw encirclements" not in out and "loop heater.temp" not in out
        assert "Caution" not in out and "waived" not in out
        assert sum(1 for line in out.splitlines() if GNU_LINE.match(line)) == 3
        assert text.render(clean_report(), quiet=True) == ""

    def test_no_colour_unless_asked(self):
        assert ANSI not in _render()
        assert ANSI in _render(color=True)

    def test_wants_color(self):
        assert text.wants_color(FakeTerminal(), environ={}) is True
        assert text.wants_color(io.StringIO(), environ={}) is False
        # https://no-color.org: present and not empty disables colour
        assert text.wants_color(FakeTerminal(), environ={"NO_COLOR": "1"}) is False
        assert text.wants_color(FakeTerminal(), environ={"NO_COLOR": ""}) is True
        assert text.wants_color(None, environ={}) is False

    def test_gnu_lines_are_never_wrapped(self):
        long = dataclasses.replace(PHASE_FINDING, message="x" * 300)
        out = text.render(sample_report(findings=(long,)), width=60)
        assert any(GNU_LINE.match(line) and line.endswith("x" * 300)
                   for line in out.splitlines())
