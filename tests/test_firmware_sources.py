"""C headers and YAML files through a whole check run (the demo project).

The demo's pan position loop reads its gains from firmware/pan_position.h
and its velocity loop from firmware/pan_velocity.yaml. Checked here: the
numbers equal those the same gains give from TOML (the figures of both runs
compared), findings and input errors point at the literal in the header,
changed-files mode selects the loop of a changed header, the cache is
invalidated by a header change, and mutated C and YAML never end in a
traceback (hypothesis).
"""

from __future__ import annotations

import datetime as dt
import io
import json
import shutil
from pathlib import Path

import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from ruleguard.cli import run
from ruleguard.errors import InputError
from ruleguard.load.project import load_project
from ruleguard.pipeline import CheckOptions, RunStatistics, check_project

DEMO = Path(__file__).resolve().parents[1] / "fixtures" / "gimbal_demo"
AS_OF = dt.date(2026, 12, 1)

PAN_TOML = """\
[velocity]
kind = "pid"
form = "parallel"
kp = 0.35
ki = 14.0
kd = 0.0
numeric_format = "q4.12"

[[velocity.filters]]
kind = "lowpass1"
cutoff_hz = 250.0

[position]
kind = "pid"
form = "parallel"
kp = 95.0
ki = 0.0
kd = 0.0
"""


@pytest.fixture()
def demo(tmp_path):
    folder = tmp_path / "demo"
    shutil.copytree(DEMO, folder, ignore=shutil.ignore_patterns(".ruleguard-cache"))
    return folder


def _json_report(manifest: Path) -> dict:
    out, err = io.StringIO(), io.StringIO()
    code = run(["check", "--manifest", str(manifest), "--format", "json", "--no-cache",
                "--as-of", "2026-12-01"], stdout=out, stderr=err)
    assert code in (0, 1), err.getvalue()
    return json.loads(out.getvalue())


def test_header_and_yaml_give_the_figures_of_the_same_gains_in_toml(demo):
    from_sources = _json_report(demo / "ruleguard.toml")
    (demo / "firmware" / "pan_gains.toml").write_text(PAN_TOML)
    manifest = demo / "ruleguard.toml"
    text = manifest.read_text()
    text = text.replace('file = "firmware/pan_velocity.yaml", path = "velocity"',
                        'file = "firmware/pan_gains.toml", path = "velocity"')
    text = text.replace('file = "firmware/pan_position.h", path = "pan_position_gains", '
                        'kind = "pid"', 'file = "firmware/pan_gains.toml", path = "position"')
    manifest.write_text(text)
    from_toml = _json_report(manifest)
    for name in ("pan.velocity", "pan.position"):
        ours = next(lp for lp in from_sources["loops"] if lp["name"] == name)
        theirs = next(lp for lp in from_toml["loops"] if lp["name"] == name)
        assert ours["variants"] == theirs["variants"]
    assert from_sources["summary"] == from_toml["summary"]


def test_findings_point_at_the_literal_in_the_header(demo):
    header = demo / "firmware" / "pan_position.h"
    # a position gain far too high: the margin rules fail at the literal of kp
    header.write_text(header.read_text().replace(".kp = 95.0f", ".kp = 9500.0f"))
    report = check_project(demo / "ruleguard.toml", CheckOptions(today=AS_OF))
    lines = header.read_text().split("\n")
    kp_line = next(i for i, line in enumerate(lines, start=1) if ".kp = 9500.0f" in line)
    kp_column = lines[kp_line - 1].index("9500.0f") + 1
    located = {(f.location.file, f.location.line, f.location.column, f.location.key)
               for f in report.findings if f.loop == "pan.position"}
    # findings about the controller as a whole stand at the struct's name
    name_line = next(i for i, line in enumerate(lines, start=1) if "pan_position_gains =" in line)
    name_column = lines[name_line - 1].index("pan_position_gains") + 1
    assert ("firmware/pan_position.h", name_line, name_column, "pan_position_gains") in located
    entry = next(s for s in load_project(demo / "ruleguard.toml").loops
                 if s.name == "pan.position")
    kp = entry.controller.field_locations["kp"]
    assert (kp.file, kp.line, kp.column, kp.key) == (
        "firmware/pan_position.h", kp_line, kp_column, "pan_position_gains.kp")
    velocity = next(s for s in load_project(demo / "ruleguard.toml").loops
                    if s.name == "pan.velocity")
    ki = velocity.controller.field_locations["ki"]
    yaml_lines = (demo / "firmware" / "pan_velocity.yaml").read_text().split("\n")
    assert yaml_lines[ki.line - 1][ki.column - 1:].startswith("14.0")


def test_input_error_in_a_header_is_located_with_an_excerpt(demo):
    header = demo / "firmware" / "pan_position.h"
    header.write_text(header.read_text().replace(".ki = 0.0f", ".ki = PAN_KI"))
    out, err = io.StringIO(), io.StringIO()
    code = run(["check", "--manifest", str(demo / "ruleguard.toml"), "--no-cache"],
               stdout=out, stderr=err)
    assert code == 2
    first, source, marker = err.getvalue().splitlines()[:3]
    lines = header.read_text().split("\n")
    line = next(i for i, text in enumerate(lines, start=1) if "PAN_KI" in text)
    column = lines[line - 1].index("PAN_KI") + 1
    assert first.startswith(f"firmware/pan_position.h:{line}:{column}: error: "
                            "[pan_position_gains.ki] 'pan_position_gains.ki' takes its value "
                            "from 'PAN_KI'")
    assert source.endswith(lines[line - 1].rstrip())
    assert marker.endswith("^") and marker.index("^") == source.index("PAN_KI")


def test_changed_header_selects_its_loop(demo):
    options = CheckOptions(today=AS_OF, changed_files=("firmware/pan_position.h",),
                           cwd=str(demo))
    report = check_project(demo / "ruleguard.toml", options)
    assert [lp.name for lp in report.loops] == ["pan.position"]
    options = CheckOptions(today=AS_OF, changed_files=("firmware/pan_velocity.yaml",),
                           cwd=str(demo))
    report = check_project(demo / "ruleguard.toml", options)
    # the pan position loop's plant holds the closed velocity loop (cascade)
    assert [lp.name for lp in report.loops] == ["pan.velocity", "pan.position"]


def test_cache_is_invalidated_by_a_header_change(demo):
    options = CheckOptions(today=AS_OF, use_cache=True)
    loops = len(check_project(demo / "ruleguard.toml", options,
                              statistics=RunStatistics()).loops)
    stats = RunStatistics()
    check_project(demo / "ruleguard.toml", options, statistics=stats)
    assert stats.analysed_loops == 0 and stats.cached_loops == loops
    header = demo / "firmware" / "pan_position.h"
    header.write_text(header.read_text().replace(".kp = 95.0f", ".kp = 90.0f"))
    stats = RunStatistics()
    check_project(demo / "ruleguard.toml", options, statistics=stats)
    assert stats.analysed_loops == 1 and stats.cached_loops == loops - 1
    # a comment is a change of the bytes too: the cache keys by input bytes
    header.write_text(header.read_text() + "/* reviewed */\n")
    stats = RunStatistics()
    check_project(demo / "ruleguard.toml", options, statistics=stats)
    assert stats.analysed_loops == 1


# ------------------------------------------------------------------ fuzz

C_BASE = (DEMO / "firmware" / "pan_position.h").read_text()
YAML_BASE = (DEMO / "firmware" / "pan_velocity.yaml").read_text()
PIECES = st.sampled_from([
    "#define", "#if", "#ifdef X", "#else", "#endif", "{", "}", "(", ")", ";", ",", "=", ".kp",
    "0x", "1e", "f", "-", "/", "/*", "*/", "//", "\"", "'", "\\\n", "\n", "\t", "&a", "*a",
    "!!python/object:os.system", "<<:", ": ", "- ", "[", "]", "---", "%YAML 1.1", "~", "\x7f",
    "9" * 400, "é",
])


@st.composite
def mutated(draw, base: str) -> str:
    text = base
    for _ in range(draw(st.integers(1, 4))):
        at = draw(st.integers(0, len(text)))
        if draw(st.booleans()):
            text = text[:at] + draw(PIECES) + text[at:]
        else:
            text = text[:at] + text[at + draw(st.integers(1, 20)):]
    return text


_FUZZ_DIR: list = []


def _fuzz_demo(tmp_path_factory) -> Path:
    if not _FUZZ_DIR:
        folder = tmp_path_factory.mktemp("fuzz") / "demo"
        shutil.copytree(DEMO, folder, ignore=shutil.ignore_patterns(".ruleguard-cache"))
        _FUZZ_DIR.append(folder)
    return _FUZZ_DIR[0]


@pytest.mark.parametrize(("rel", "base"), [("firmware/pan_position.h", C_BASE),
                                           ("firmware/pan_velocity.yaml", YAML_BASE)])
@given(data=st.data())
@settings(max_examples=60, deadline=None,
          suppress_health_check=[HealthCheck.function_scoped_fixture])
def test_mutated_sources_never_crash(tmp_path_factory, rel, base, data):
    folder = _fuzz_demo(tmp_path_factory)
    text = data.draw(mutated(base))
    (folder / rel).write_text(text, encoding="utf-8")
    try:
        try:
            load_project(folder / "ruleguard.toml")
        except InputError as exc:
            assert exc.file in (rel, "ruleguard.toml") and exc.message
            assert exc.line is None or exc.line >= 1
    finally:
        (folder / rel).write_text(base, encoding="utf-8")
