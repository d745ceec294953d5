"""The Markdown pull-request summary, read back by a CommonMark parser.

markdown-it-py (a CommonMark implementation, installed with rich) renders the
summary with its table extension, so the checks look at the page a reviewer
sees, not at our own string pieces.
"""

from __future__ import annotations

import dataclasses
import html
import re

from markdown_it import MarkdownIt
from sample_reports import PHASE_FINDING, clean_report, heater_loop, sample_report

from ruleguard.report import markdown


def _html(report) -> str:
    return MarkdownIt("commonmark").enable("table").render(markdown.render(report))


def _table_rows(page: str) -> list[list[str]]:
    body = page.split("<tbody>", 1)[1].split("</tbody>", 1)[0]
    rows = re.findall(r"<tr>(.*?)</tr>", body, re.S)
    return [
        [html.unescape(re.sub(r"<[^>]+>", "", c)).strip()
         for c in re.findall(r"<td[^>]*>(.*?)</td>", row, re.S)]
        for row in rows
    ]


class TestSummary:
    def test_loops_table(self):
        rows = _table_rows(_html(sample_report()))
        assert [r[0] for r in rows] == ["tilt.velocity", "heater.temp", "pan.position"]
        assert all(len(r) == 7 for r in rows)
        velocity, heater, position = rows
        assert velocity[1] == "❌ fail" and heater[1] == "✅ pass"
        assert velocity[2] == "unstable in 1 of 3"
        assert velocity[4] == "-12 deg at 61 Hz (corner-2)"  # worst phase margin
        assert velocity[5] == "1.74 ms (corner-1)"  # 38.2 deg / 360 / 61 Hz
        assert heater[3] == "unbounded"
        assert position[1] == "❌ not analysed"
        assert "no filter" in position[2]

    def test_result_findings_waivers_and_caution(self):
        text = markdown.render(sample_report())
        assert text.startswith("## ruleguard: ❌ FAIL")
        assert "2 errors, 0 warnings, 2 notes, 1 waived" in text
        page = _html(sample_report())
        assert "<h3>Findings</h3>" in page
        assert page.count("<li>") == 4 + 1 + 1  # 4 findings, 1 waived with its reason line
        assert "<details>" in page and "fixture-limited travel" in page
        assert "measured 38.2 deg, limit 45 deg, at 61 Hz" in page
        assert "not a safety certification" in text.splitlines()[-1]

    def test_clean(self):
        text = markdown.render(clean_report())
        assert text.startswith("## ruleguard: ✅ PASS")
        assert "No findings." in text

    def test_input_text_cannot_change_the_page(self):
        odd_loop = dataclasses.replace(heater_loop(), name="heat|er")
        odd = dataclasses.replace(
            PHASE_FINDING, loop="heat|er",
            message="<script>alert(1)</script> | **not bold** [link](http://x)",
        )
        page = _html(sample_report(loops=(odd_loop,), findings=(odd,)))
        rows = _table_rows(page)
        assert len(rows) == 1 and len(rows[0]) == 7  # the pipe did not add a column
        assert "<script>" not in page
        assert "<strong>not bold</strong>" not in page
        assert "<a href" not in page

    def test_heading_level(self):
        assert markdown.render(clean_report(), heading_level=3).startswith("### ruleguard")
