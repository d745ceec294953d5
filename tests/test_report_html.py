"""The HTML audit report, read back with the standard library's html.parser.

Structure (a section per loop, every finding located, the caution, escaping)
is checked on the parsed document, not on string pieces; the plots are
checked geometrically: points of the drawn SVG are mapped back through the
plot's own axes (:class:`ruleguard.report.plots.Scale`) and compared with
closed-form values and with independent numpy computations.
"""

from __future__ import annotations

import dataclasses
import io
import json
import math
import shutil
from html.parser import HTMLParser
from pathlib import Path

import numpy as np
import pytest
from sample_reports import PHASE_FINDING, heater_loop, sample_report, velocity_loop

from ruleguard import cli
from ruleguard.pipeline import CheckOptions, RunStatistics, check_project
from ruleguard.report import html as html_report
from ruleguard.report import json_report, plots
from ruleguard.report.model import ResponseCurve

DEMO = Path(__file__).resolve().parents[1] / "fixtures" / "gimbal_demo"
VOID = {"meta", "br", "link", "img", "input", "hr", "col", "area", "base", "source", "wbr"}


# ---------------------------------------------------------------- a small DOM
class Node:
    def __init__(self, tag: str, attrs: dict, parent: Node | None) -> None:
        self.tag, self.attrs, self.parent = tag, attrs, parent
        self.children: list[Node] = []
        self.content: list[str | Node] = []  # text and children in document order

    def text(self) -> str:
        return "".join(c if isinstance(c, str) else c.text() for c in self.content)

    def iter(self):
        yield self
        for child in self.children:
            yield from child.iter()

    def find_all(self, tag: str | None = None, css: str | None = None, **attrs):
        for node in self.iter():
            if tag is not None and node.tag != tag:
                continue
            if css is not None and css not in node.attrs.get("class", "").split():
                continue
            if any(node.attrs.get(k.replace("_", "-")) != v for k, v in attrs.items()):
                continue
            yield node

    def find(self, *args, **kwargs) -> Node:
        return next(self.find_all(*args, **kwargs))


class Tree(HTMLParser):
    """Elements with attributes and text; checks that every element closes."""

    def __init__(self) -> None:
        super().__init__(convert_charrefs=True)
        self.root = Node("#document", {}, None)
        self.current = self.root
        self.doctype = None

    def handle_decl(self, decl):
        self.doctype = decl

    def handle_starttag(self, tag, attrs):
        node = Node(tag, {k: (v or "") for k, v in attrs}, self.current)
        self.current.children.append(node)
        self.current.content.append(node)
        if tag not in VOID:
            self.current = node

    def handle_startendtag(self, tag, attrs):
        node = Node(tag, {k: (v or "") for k, v in attrs}, self.current)
        self.current.children.append(node)
        self.current.content.append(node)

    def handle_endtag(self, tag):
        assert self.current.tag == tag, f"</{tag}> closes <{self.current.tag}>"
        self.current = self.current.parent

    def handle_data(self, data):
        self.current.content.append(data)


def parse(page: str) -> Node:
    tree = Tree()
    tree.feed(page)
    tree.close()
    assert tree.current is tree.root, "unclosed elements"
    return tree.root


def _points(polyline: Node) -> list[tuple[float, float]]:
    return [tuple(map(float, p.split(","))) for p in polyline.attrs["points"].split()]


# ---------------------------------------------------------------- invented curves
def _curve_for(variant: str, role: str, gain: float, hz: np.ndarray) -> ResponseCurve:
    s = 2j * np.pi * hz
    values = gain / (s * (s / 40 + 1) * (s / 900 + 1))  # invented, for the page tests
    return ResponseCurve(variant, role, tuple(hz.tolist()), tuple(complex(v) for v in values))


def _report_with_curves(**changes):
    hz = np.geomspace(1.0, 1000.0, 200)
    loop = velocity_loop()
    loop = dataclasses.replace(loop, curves=(
        _curve_for("nominal", "nominal", 400.0, hz),
        _curve_for("corner-2", "unstable", 2000.0, hz),
    ))
    return sample_report(loops=(loop, heater_loop()), findings=(PHASE_FINDING,), **changes)


# ---------------------------------------------------------------- structure
class TestStructure:
    def test_sections_findings_and_caution(self):
        report = sample_report()
        doc = parse(html_report.render(report))
        sections = list(doc.find_all("section", css="loop"))
        assert [s.attrs["data-loop"] for s in sections] == [lp.name for lp in report.loops]
        # every finding: its rule id and its location (file:line:column) in the page
        articles = list(doc.find_all("article", css="finding"))
        assert len(articles) == len(report.findings)
        for finding in report.findings:
            place = finding.location.file
            if finding.location.line is not None:
                place += f":{finding.location.line}"
                if finding.location.column is not None:
                    place += f":{finding.location.column}"
            match = [a for a in articles
                     if a.find("code", css="rule").text() == finding.rule
                     and a.find("code", css="place").text() == place]
            assert match, (finding.rule, place)
        # loop findings sit in their loop's section
        velocity = sections[0]
        assert {a.attrs["data-rule"] for a in velocity.find_all("article")} == {
            "margin.phase", "stability.closed-loop", "margin.gain"}
        # the caution, before the loop table
        caution = doc.find(id="caution")
        assert "not a safety certification" in caution.text()
        assert "protective limits" in caution.text()
        assert "qualified engineering review" in caution.text()
        order = [n for n in doc.iter() if n.attrs.get("id") in ("caution", "overview")]
        assert [n.attrs["id"] for n in order] == ["caution", "overview"]

    def test_masthead_counts_and_result(self):
        report = sample_report()
        doc = parse(html_report.render(report))
        counts = {li.attrs["data-count"]: int(li.find("strong").text())
                  for li in doc.find(id="result").find_all("li")}
        assert doc.find(id="result").find("li").text() == "2 errors"
        assert counts == {"errors": 2, "warnings": 0, "notes": 2, "waived": 1, "loops": 3,
                          "evaluations": 4}
        assert doc.find(id="result").find("div", css="word").text() == "FAIL"
        facts = dict(zip([n.text() for n in doc.find("dl").find_all("dt")],
                         [n.text() for n in doc.find("dl").find_all("dd")], strict=True))
        assert facts["project"] == "pan-tilt-gimbal"
        assert facts["ruleset"] == "gimbal-house"
        assert facts["ruleguard"] == "0.1.0"
        assert facts["waivers judged as of"] == "not recorded"
        dated = parse(html_report.render(sample_report(waivers_as_of="2026-03-01")))
        assert "2026-03-01" in dated.find("dl").text()
        clean = parse(html_report.render(sample_report(loops=(heater_loop(),), findings=())))
        assert clean.find(id="result").find("div", css="word").text() == "PASS"

    def test_overview_table(self):
        doc = parse(html_report.render(sample_report()))
        rows = list(doc.find(id="overview").find("tbody").find_all("tr"))
        cells = [[td.text() for td in r.find_all("td")] for r in rows]
        assert [c[0] for c in cells] == ["tilt.velocity", "heater.temp", "pan.position"]
        velocity = cells[0]
        assert velocity[1] == "fail" and velocity[2] == "unstable in 1 of 3"
        assert velocity[6] == "-12 deg at 61 Hz (corner-2)"  # worst phase margin
        assert velocity[9] == "corner-2 (unstable)"
        assert "no filter" in cells[2][2]
        # links to the sections
        links = [a.attrs["href"] for a in doc.find(id="overview").find_all("a")]
        ids = [s.attrs["id"] for s in doc.find_all("section", css="loop")]
        assert links == [f"#{i}" for i in ids]

    def test_finding_figures_with_units_and_waiver(self):
        doc = parse(html_report.render(sample_report()))
        phase = doc.find("article", data_rule="margin.phase")
        assert phase.find("p", css="figures").text() == (
            "variant corner-1 · measured 38.2 deg · limit 45 deg · at 61 Hz")
        assert "velocity" in phase.find("pre").text()  # the source line 7
        waived = doc.find("article", data_rule="margin.gain")
        assert "is-waived" in waived.attrs["class"]
        assert "fixture-limited travel" in waived.find("p", css="waiver").text()
        variants = doc.find("table", css="variants")
        first = [td.text() for td in variants.find("tbody").find("tr").find_all("td")]
        assert first[0] == "nominal" and first[1] == "tilt_mechanics.gain = 1724"
        assert first[6] == "11.2 dB at 310 Hz"
        assert first[9] == "2.368 ms (4.736 samples)"  # (52/360)/61 Hz s, at 2 kHz

    def test_self_contained(self):
        page = html_report.render(_report_with_curves())
        doc = parse(page)
        assert not list(doc.find_all("script"))
        assert not list(doc.find_all("link")) and not list(doc.find_all("img"))
        for node in doc.iter():
            for name, value in node.attrs.items():
                if name in ("href", "src"):
                    assert value.startswith("#"), (name, value)
                if name.startswith("on"):
                    raise AssertionError(f"event handler {name}")
        assert "@import" not in page and "url(http" not in page
        assert len(list(doc.find_all("svg"))) == 3  # one loop with curves: three plots
        # each plot is also well-formed XML (so it can be cut out as an .svg file)
        import xml.etree.ElementTree as ET

        for chunk in page.split("<svg ")[1:]:
            svg_text = "<svg " + chunk.split("</svg>", 1)[0] + "</svg>"
            assert ET.fromstring(svg_text).tag == "{http://www.w3.org/2000/svg}svg"

    def test_hostile_text_is_escaped(self):
        hostile = "<script>alert(1)</script><img src=x onerror=alert(2)>"
        loop = dataclasses.replace(_report_with_curves().loops[0], name=f"tilt{hostile}")
        variants = list(loop.variants)
        variants[2] = dataclasses.replace(variants[2], id=f"corner-2{hostile}")
        curves = (loop.curves[0], dataclasses.replace(loop.curves[1],
                                                      variant=f"corner-2{hostile}"))
        loop = dataclasses.replace(loop, variants=tuple(variants), curves=curves,
                                   notes=(hostile,))
        finding = dataclasses.replace(PHASE_FINDING, loop=loop.name, message=hostile,
                                      waived=True, waiver_reason=hostile)
        report = sample_report(loops=(loop,), findings=(finding,), project_name=hostile,
                               ruleset_name=hostile)
        doc = parse(html_report.render(report))
        assert not list(doc.find_all("script")) and not list(doc.find_all("img"))
        assert doc.find("section", css="loop").attrs["data-loop"] == loop.name
        assert hostile in doc.find("article").find("p", css="message").text()
        assert hostile in doc.find("p", css="waiver").text()
        legend = [t.text() for t in doc.find_all("text", css="legend")]
        assert f"corner-2{hostile} (unstable)" in legend


def test_odd_samples_still_draw():
    # non-finite samples (boundary poles), L = 0, L = -1 exactly, a one-point curve
    hz = (0.5, 1.0, 2.0, 4.0, 8.0)
    odd = (complex(math.inf, 0), complex(math.nan, math.nan), 0j, -1 + 0j, 0.5 - 0.5j)
    loop = dataclasses.replace(velocity_loop(), curves=(
        ResponseCurve("nominal", "nominal", hz, odd),
        ResponseCurve("corner-2", "unstable", (3.0,), (-2 + 0j,)),
    ))
    doc = parse(html_report.render(sample_report(loops=(loop,), findings=())))
    assert len(list(doc.find_all("svg"))) == 3
    for poly in doc.find_all("polyline"):
        assert all(math.isfinite(v) for p in _points(poly) for v in p)
    no_curves = parse(html_report.render(sample_report(loops=(velocity_loop(),), findings=())))
    assert not list(no_curves.find_all("svg"))
    assert "No response samples" in no_curves.find("section", css="loop").text()


# ---------------------------------------------------------------- geometry
THIRD_ORDER = {
    "ruleguard.toml": (
        '[project]\nname = "third-order"\nplants = ["plants.toml"]\n\n'
        '[[loops]]\nname = "axis.position"\nplant = "cubic"\n'
        'controller = { file = "firmware.toml", path = "position" }\n'
    ),
    "plants.toml": (
        '[plants.cubic]\nkind = "transfer_function"\nnumerator = [1.0]\n'
        "denominator = [1.0, 3.0, 2.0, 0.0]\n"
    ),
    "firmware.toml": '[position]\nkind = "pid"\nkp = 3.0\n',
}
K = 3.0


@pytest.fixture(scope="module")
def third_order(tmp_path_factory):
    """L = K/(s(s+1)(s+2)), K = 3, checked with curves; the page parsed."""
    folder = tmp_path_factory.mktemp("third_order")
    for rel, text in THIRD_ORDER.items():
        (folder / rel).write_text(text, encoding="utf-8")
    report = check_project(folder / "ruleguard.toml", CheckOptions(want_curves=True))
    loop = report.loops[0]
    doc = parse(html_report.render(report))
    return report, loop, doc


def _svg(doc: Node, ident: str) -> Node:
    return doc.find("svg", id=ident)


def _analyses(loop):
    return {v.id: v.analysis for v in loop.variants}


class TestPlotGeometry:
    def test_nyquist_crosses_the_real_axis_at_minus_k_over_6(self, third_order):
        # Outside reference (closed form, Routh-Hurwitz): s(s+1)(s+2) at s = jw is
        # -3 w^2 + j w (2 - w^2), real only at w = sqrt(2), where it is -6; so
        # L(j sqrt 2) = -K/6 (and the critical gain is 6).
        _, loop, doc = third_order
        plot = plots.nyquist_chart(loop.curves, _analyses(loop), ident="loop-1-nyquist")
        svg = _svg(doc, "loop-1-nyquist")
        panel = plot.panel("nyquist")
        x, y = panel.x, panel.y
        y0 = y(0.0)
        crossings = []
        for poly in svg.find_all("polyline", css="branch-positive", data_variant="nominal"):
            pts = _points(poly)
            for (xa, ya), (xb, yb) in zip(pts, pts[1:], strict=False):
                if (ya - y0) * (yb - y0) < 0 or ya == y0:
                    t = 0.0 if ya == y0 else (y0 - ya) / (yb - ya)
                    crossings.append(x.inverse(xa + t * (xb - xa)))
        crossings = [c for c in crossings if c < -1e-3]
        assert len(crossings) == 1
        assert crossings[0] == pytest.approx(-K / 6.0, abs=2e-3)  # 0.01 px of 0.01 px/unit
        # the phase-crossing marker sits there too
        mark = svg.find("path", css="phase-crossover")
        d = mark.attrs["d"].replace("M", "").split()[0]
        assert x.inverse(float(d.split(",")[0])) == pytest.approx(-K / 6.0, abs=2e-3)
        # -1 marked, the unit circle centred at the origin with radius 1
        for css in ("critical-point", "critical-point-centre"):
            ring = svg.find("circle", css=css)
            assert x.inverse(float(ring.attrs["cx"])) == pytest.approx(-1.0, abs=1e-3)
            assert y.inverse(float(ring.attrs["cy"])) == pytest.approx(0.0, abs=1e-3)
        assert svg.find("circle", css="critical-point").attrs["fill"] == "none"
        assert not list(svg.find_all("line", css="critical-point"))
        circle = svg.find("circle", css="unit-circle")
        assert x.inverse(float(circle.attrs["cx"])) == pytest.approx(0.0, abs=1e-3)
        assert x.inverse(float(circle.attrs["cx"]) + float(circle.attrs["r"])) == pytest.approx(
            1.0, abs=1e-3)
        # the page carries the very SVG the plot function draws
        assert plot.svg.count("<polyline") == len(list(svg.find_all("polyline")))

    def test_loop_gain_markers(self, third_order):
        # Outside references: |L(jw)| = 1 <=> w^2 (w^2 + 1)(w^2 + 4) = K^2, a cubic in
        # u = w^2 solved by numpy.roots; phase crossover at sqrt(2) rad/s with
        # GM = 20 log10(6/K) (closed form above).
        report, loop, doc = third_order
        roots = np.roots([1.0, 5.0, 4.0, -K**2])
        u = float(next(r.real for r in roots if abs(r.imag) < 1e-12 and r.real > 0))
        crossover_hz = math.sqrt(u) / (2 * math.pi)
        margins = loop.variants[0].analysis.margins
        assert margins.crossover_hz == pytest.approx(crossover_hz, rel=1e-6)
        assert margins.gain_margin_db == pytest.approx(20 * math.log10(6.0 / K), abs=1e-6)

        plot = plots.loop_gain_plot(loop.curves, _analyses(loop), ident="loop-1-loop-gain")
        svg = _svg(doc, "loop-1-loop-gain")
        mag, phase = plot.panel("magnitude"), plot.panel("phase")
        marker = svg.find("circle", css="crossover")
        assert float(marker.attrs["data-hz"]) == margins.crossover_hz  # the report's frequency
        assert mag.x.inverse(float(marker.attrs["cx"])) == pytest.approx(crossover_hz, rel=1e-4)
        assert mag.y.inverse(float(marker.attrs["cy"])) == pytest.approx(0.0, abs=0.05)  # 0 dB
        # phase crossover: -180 deg at sqrt(2)/(2 pi) Hz, |L| = -GM there
        diamond = svg.find("path", css="phase-crossover")
        px, py = map(float, diamond.attrs["d"].split()[0][1:].split(","))
        assert phase.x.inverse(px) == pytest.approx(math.sqrt(2) / (2 * math.pi), rel=1e-4)
        assert phase.y.inverse(py + 5) == pytest.approx(-180.0, abs=0.05)  # tip 5 px above
        # the drawn magnitude curve at the crossover is 0 dB (the curve, not the marker)
        curve = [p for poly in svg.find_all("polyline", css="magnitude") for p in _points(poly)]
        cx = float(marker.attrs["cx"])
        nearest = min(curve, key=lambda p: abs(p[0] - cx))
        assert abs(nearest[0] - cx) < 0.02
        assert mag.y.inverse(nearest[1]) == pytest.approx(0.0, abs=0.05)
        # the phase-margin bar spans from -180 deg to the phase at crossover
        bar = svg.find("line", css="phase-margin")
        span = phase.y.inverse(float(bar.attrs["y2"])) - phase.y.inverse(float(bar.attrs["y1"]))
        assert span == pytest.approx(margins.phase_margin_deg, abs=0.05)

    def test_sensitivity_peak_marker(self, third_order):
        # Independent computation: |S| = 1/|1 + L| on a dense grid with L from the
        # formula above (numpy only), against the report's Ms and its marker.
        _, loop, doc = third_order
        margins = loop.variants[0].analysis.margins
        w = np.geomspace(0.5, 2.0, 200_001)
        s = 1j * w
        sens = np.abs(1.0 / (1.0 + K / (s * (s + 1) * (s + 2))))
        ms_db = 20 * np.log10(sens.max())
        assert margins.sensitivity_peak_db == pytest.approx(ms_db, abs=1e-6)
        plot = plots.sensitivity_plot(loop.curves, _analyses(loop), ident="loop-1-sensitivity")
        panel = plot.panel("sensitivity")
        svg = _svg(doc, "loop-1-sensitivity")
        marker = svg.find("circle", css="ms-peak")
        assert panel.x.inverse(float(marker.attrs["cx"])) == pytest.approx(
            w[sens.argmax()] / (2 * math.pi), rel=1e-3)
        assert panel.y.inverse(float(marker.attrs["cy"])) == pytest.approx(ms_db, abs=0.05)
        # the drawn |S| curve never rises above the marker
        top = min(p[1] for poly in svg.find_all("polyline", css="sensitivity")
                  for p in _points(poly))
        assert top >= float(marker.attrs["cy"]) - 0.02

    def test_samples_are_the_open_loop(self, third_order):
        # the curve samples equal L computed independently (numpy) at the same frequencies
        _, loop, _ = third_order
        curve = loop.curves[0]
        assert curve.variant == "nominal" and curve.role == "nominal"
        assert 400 <= len(curve.frequency_hz) <= 420
        s = 2j * np.pi * np.array(curve.frequency_hz)
        expected = K / (s * (s + 1) * (s + 2))
        assert np.allclose(np.array(curve.open_loop), expected, rtol=1e-10)
        assert np.all(np.diff(curve.frequency_hz) > 0)
        m = loop.variants[0].analysis.margins
        for hz in (m.crossover_hz, m.gain_margin_hz, m.sensitivity_peak_hz):
            assert hz in curve.frequency_hz  # markers sit on samples


def test_unwrapped_phase_against_numpy():
    # Outside reference: numpy.unwrap of numpy.angle, up to a whole number of turns.
    rng = np.random.default_rng(7)
    w = np.geomspace(0.1, 100.0, 500)
    s = 1j * w
    values = np.exp(-0.2 * s) * 5.0 / ((s + 1) * (s / 30 + 1) ** 2) * (1 + 0.01 * rng.random(500))
    ours = np.array(plots.unwrapped_phase_deg([complex(v) for v in values]))
    reference = np.degrees(np.unwrap(np.angle(values)))
    turns = (ours - reference) / 360.0
    assert np.allclose(turns, np.round(turns[0]), atol=1e-9)
    assert -315.0 < ours[0] <= 45.0


def test_scale_round_trip():
    scale = plots.Scale(0.01, 1000.0, 64.0, 620.0, log=True)
    assert scale(0.01) == 64.0 and scale(1000.0) == pytest.approx(620.0)
    assert scale(1.0) == pytest.approx(64.0 + 0.4 * 556.0)  # 2 of 5 decades
    assert scale.inverse(scale(3.7)) == pytest.approx(3.7)


# ---------------------------------------------------------------- command and pipeline
@pytest.fixture
def demo_copy(tmp_path) -> Path:
    target = tmp_path / "demo"
    shutil.copytree(DEMO, target, ignore=shutil.ignore_patterns(".ruleguard-cache"))
    return target


def test_command_writes_the_page_and_prints_text(demo_copy):
    out_file = demo_copy / "audit" / "report.html"
    stdout, stderr = io.StringIO(), io.StringIO()
    code = cli.run(["check", "--manifest", str(demo_copy / "ruleguard.toml"), "--no-cache",
                    "--format", "html", "--output", str(out_file)], stdout, stderr)
    text_stdout = io.StringIO()
    text_code = cli.run(["check", "--manifest", str(demo_copy / "ruleguard.toml"),
                         "--no-cache"], text_stdout, io.StringIO())
    assert code == text_code == 1, stderr.getvalue()  # the demo fails one loop on purpose
    assert stdout.getvalue() == text_stdout.getvalue()  # the terminal still gets the text
    assert "not a safety certification" in stdout.getvalue()
    doc = parse(out_file.read_text(encoding="utf-8"))
    report = check_project(demo_copy / "ruleguard.toml", CheckOptions())
    sections = list(doc.find_all("section", css="loop"))
    assert [s.attrs["data-loop"] for s in sections] == [lp.name for lp in report.loops]
    for section, loop in zip(sections, report.loops, strict=True):
        if loop.analysed:
            assert len(list(section.find_all("svg"))) == 3, loop.name
    located = {(a.attrs["data-rule"], a.attrs["data-location"])
               for a in doc.find_all("article", css="finding")}
    for f in report.findings:
        place = f"{f.location.file}:{f.location.line}:{f.location.column}"
        assert any(rule == f.rule and loc.startswith(f.location.file) and
                   (f.location.line is None or loc == place) for rule, loc in located), place


def test_json_report_unchanged_and_curves_never_cached(demo_copy):
    manifest = demo_copy / "ruleguard.toml"
    plain = check_project(manifest, CheckOptions())
    assert all(not lp.curves for lp in plain.loops)
    stats = RunStatistics()
    with_curves = check_project(manifest, CheckOptions(want_curves=True, use_cache=True),
                                statistics=stats)
    assert json_report.render(with_curves) == json_report.render(plain)
    assert all(lp.curves for lp in with_curves.loops if lp.analysed)
    assert stats.analysed_loops == len(plain.loops)
    for entry in (demo_copy / ".ruleguard-cache").glob("*.json"):
        assert "curves" not in json.loads(entry.read_text(encoding="utf-8")).get("loop", {})
        assert "open_loop\"" not in entry.read_text(encoding="utf-8")
    # a cached loop gets its curves again (models rebuilt, not analysed)
    again = RunStatistics()
    cached = check_project(manifest, CheckOptions(want_curves=True, use_cache=True),
                           statistics=again)
    assert again.cached_loops == len(plain.loops) and again.analysed_loops == 0
    for fresh, hit in zip(with_curves.loops, cached.loops, strict=True):
        assert [c.variant for c in fresh.curves] == [c.variant for c in hit.curves]
        for a, b in zip(fresh.curves, hit.curves, strict=True):
            assert a.frequency_hz == b.frequency_hz
            assert np.allclose(a.open_loop, b.open_loop, rtol=1e-12, equal_nan=True)
    assert json_report.render(cached) == json_report.render(plain)
