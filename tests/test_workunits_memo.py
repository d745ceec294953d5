"""Analyses of equal open loops done once per process (ruleguard.workunits.remembered_analysis).

The outside reference is the analysis without the memo: the same open loop
analysed directly (ruleguard.analysis.margins.analyse_open_loop) must give a
result that pickles to the same bytes, a whole check of the demo must give
the same report with and without the memo, and the warnings of an analysis
(a variant's numerical notes) must be raised on every use, the first and the
remembered ones alike.
"""

import io
import pickle
import shutil
import warnings
from pathlib import Path

import pytest

import ruleguard.analysis.margins as margins
from ruleguard import workunits
from ruleguard.cli import run
from ruleguard.errors import NumericalWarning
from ruleguard.load.project import load_project
from ruleguard.models.assemble import build_loop
from ruleguard.models.families import loop_variants

DEMO = Path(__file__).resolve().parents[1] / "fixtures" / "gimbal_demo"


@pytest.fixture
def demo(tmp_path):
    folder = tmp_path / "demo"
    shutil.copytree(DEMO, folder, ignore=shutil.ignore_patterns(".ruleguard-cache"))
    return folder


@pytest.fixture(autouse=True)
def empty_memo(monkeypatch):
    monkeypatch.setattr(workunits, "_ANALYSES", {})


def _counting(monkeypatch):
    calls = []
    real = margins.analyse_open_loop

    def counted(open_loop):
        calls.append(open_loop)
        return real(open_loop)

    monkeypatch.setattr(margins, "analyse_open_loop", counted)
    return calls


def test_an_equal_open_loop_is_analysed_once_with_the_same_result(demo, monkeypatch):
    project = load_project(demo / "ruleguard.toml")
    spec = next(s for s in project.loops if s.name == "tilt.current")
    variant = loop_variants(project, spec)[0]
    first = build_loop(project, spec, variant).open_loop
    again = build_loop(project, spec, variant).open_loop  # built anew: equal, not the same
    direct = margins.analyse_open_loop(first)
    calls = _counting(monkeypatch)
    a = workunits.remembered_analysis(first)
    b = workunits.remembered_analysis(again)
    assert len(calls) == 1 and a is b
    assert pickle.dumps(a) == pickle.dumps(direct)


def test_different_open_loops_are_each_analysed(demo, monkeypatch):
    project = load_project(demo / "ruleguard.toml")
    spec = next(s for s in project.loops if s.name == "tilt.current")
    loops = [build_loop(project, spec, v).open_loop for v in loop_variants(project, spec)]
    distinct = {pickle.dumps(ol) for ol in loops}
    calls = _counting(monkeypatch)
    for ol in loops:
        assert pickle.dumps(workunits.remembered_analysis(ol)) == pickle.dumps(
            margins.analyse_open_loop(ol))
    assert len(calls) == len(distinct) + len(loops)  # the memo's + the direct ones


def test_the_warnings_are_raised_at_every_use_and_failures_are_not_kept(monkeypatch):
    said = []

    def fake(open_loop):
        said.append(open_loop)
        warnings.warn(NumericalWarning(f"ill-conditioned {open_loop}"), stacklevel=2)
        if open_loop == "bad":
            raise ValueError("no analysis")
        return ("analysis of", open_loop)

    monkeypatch.setattr(margins, "analyse_open_loop", fake)
    for _ in range(3):
        with warnings.catch_warnings(record=True) as caught:
            warnings.simplefilter("always")
            assert workunits.remembered_analysis("good") == ("analysis of", "good")
        assert [str(w.message) for w in caught] == ["ill-conditioned good"]
        assert all(issubclass(w.category, NumericalWarning) for w in caught)
    assert said == ["good"]
    for _ in range(2):
        with warnings.catch_warnings(record=True) as caught:
            warnings.simplefilter("always")
            with pytest.raises(ValueError):
                workunits.remembered_analysis("bad")
        assert [str(w.message) for w in caught] == ["ill-conditioned bad"]
    assert said == ["good", "bad", "bad"]


def test_the_memo_keeps_at_most_its_size(monkeypatch):
    monkeypatch.setattr(margins, "analyse_open_loop", lambda ol: ("a", ol))
    monkeypatch.setattr(workunits, "_ANALYSES_MAX", 3)
    for i in range(10):
        workunits.remembered_analysis(i)
    assert len(workunits._ANALYSES) == 3


@pytest.mark.parametrize("jobs", ["1", "2"])
def test_a_check_of_the_demo_is_the_same_without_the_memo(demo, monkeypatch, jobs):
    args = ["check", "--no-cache", "--format", "json", "--jobs", jobs,
            "--manifest", str(demo / "ruleguard.toml")]
    calls = _counting(monkeypatch)
    out = io.StringIO()
    code = run(args, out, io.StringIO())
    with_memo = len(calls)
    monkeypatch.setattr(workunits, "remembered_analysis",
                        lambda ol: margins.analyse_open_loop(ol))
    plain = io.StringIO()
    assert run(args, plain, io.StringIO()) == code
    assert out.getvalue() == plain.getvalue()
    if jobs == "1":  # the cascades ask again for analyses of their inner loops
        assert with_memo < len(calls) - with_memo


def test_inner_loops_are_known_by_name_per_project(demo, tmp_path):
    # the reference is the definition: a loop is an inner loop when another names it
    project = load_project(demo / "ruleguard.toml")
    expected = {spec.name for spec in project.loops
                if any(other.inner == spec.name for other in project.loops)}
    assert expected  # the demo's tilt axis is a cascade
    assert {spec.name for spec in project.loops
            if workunits._is_inner_loop(project, spec.name)} == expected
    assert all(workunits._loop_named(project, spec.name) is spec for spec in project.loops)
    # another project (the demo with its cascade cut) gets its own tables
    manifest = tmp_path / "cut" / "ruleguard.toml"
    shutil.copytree(demo, manifest.parent)
    text = manifest.read_text(encoding="utf-8")
    assert text.count("inner = ") >= 1
    cut = "\n".join(line for line in text.splitlines() if not line.startswith("inner = "))
    manifest.write_text(cut + "\n", encoding="utf-8")
    other = load_project(manifest)
    assert not any(workunits._is_inner_loop(other, spec.name) for spec in other.loops)
    assert {spec.name for spec in project.loops
            if workunits._is_inner_loop(project, spec.name)} == expected
