"""One check run end to end on the demo project (fixtures/gimbal_demo)."""

import datetime as dt
import shutil
from pathlib import Path

import pytest

from ruleguard.pipeline import CheckOptions, RunStatistics, check_project
from ruleguard.rules.base import Severity

DEMO = Path(__file__).resolve().parents[1] / "fixtures" / "gimbal_demo"
AS_OF = dt.date(2026, 12, 1)


@pytest.fixture()
def demo(tmp_path):
    folder = tmp_path / "demo"
    shutil.copytree(DEMO, folder, ignore=shutil.ignore_patterns(".ruleguard-cache"))
    return folder


def test_demo_runs_every_loop_and_fails_on_purpose(demo):
    report = check_project(demo / "ruleguard.toml", CheckOptions(today=AS_OF))
    names = [lp.name for lp in report.loops]
    assert names == [
        "tilt.current",
        "tilt.velocity",
        "tilt.position",
        "pan.current",
        "pan.velocity",
        "pan.position",
        "housing.heater",
        "window.heater",
    ]
    assert all(lp.analysed for lp in report.loops)
    assert all(lp.variants[0].id == "nominal" for lp in report.loops)
    assert all(v.analysis.stability.stable for lp in report.loops for v in lp.variants)
    # The heater's hot, slow corner misses the motion ruleset's 8 dB gain margin.
    errors = [f for f in report.findings if f.severity == Severity.ERROR and not f.waived]
    assert ("margin.gain", "housing.heater") in {(f.rule, f.loop) for f in errors}
    assert report.failed
    # The reviewed exception in policy/mast-house.toml is applied with its reason.
    waived = [f for f in report.findings if f.waived]
    assert [(f.rule, f.loop) for f in waived] == [("sensitivity.peak", "housing.heater")]
    assert "MAST-212" in waived[0].waiver_reason
    # The wind-scheduled window heater passes at every breakpoint and midpoint.
    assert not [f for f in report.findings if f.loop == "window.heater"]


def test_expired_waiver_stops_applying(demo):
    report = check_project(demo / "ruleguard.toml", CheckOptions(today=dt.date(2027, 3, 2)))
    assert not any(f.waived for f in report.findings)
    rules = {(f.rule, f.loop, f.severity) for f in report.findings}
    assert ("sensitivity.peak", "housing.heater", Severity.ERROR) in rules


def test_changed_files_select_only_affected_loops(demo):
    options = CheckOptions(today=AS_OF, changed_files=("plc/heater_params.json",), cwd=str(demo))
    report = check_project(demo / "ruleguard.toml", options)
    assert [lp.name for lp in report.loops] == ["housing.heater"]
    options = CheckOptions(today=AS_OF, changed_files=("firmware/tilt.toml",), cwd=str(demo))
    report = check_project(demo / "ruleguard.toml", options)
    assert [lp.name for lp in report.loops] == ["tilt.current", "tilt.velocity", "tilt.position"]


def test_cache_hit_skips_analysis(demo):
    options = CheckOptions(today=AS_OF, use_cache=True)
    first_stats = RunStatistics()
    first = check_project(demo / "ruleguard.toml", options, statistics=first_stats)
    assert first_stats.analysed_loops == 8 and first_stats.cached_loops == 0
    second_stats = RunStatistics()
    second = check_project(demo / "ruleguard.toml", options, statistics=second_stats)
    assert second_stats.analysed_loops == 0 and second_stats.cached_loops == 8
    assert [(f.rule, f.loop, f.measured) for f in second.findings] == [
        (f.rule, f.loop, f.measured) for f in first.findings
    ]
    # An edit to one controller file re-analyses exactly the loops it feeds.
    heater = demo / "plc" / "heater_params.json"
    heater.write_text(heater.read_text().replace('"P": 16.5', '"P": 12.0'))
    third_stats = RunStatistics()
    check_project(demo / "ruleguard.toml", options, statistics=third_stats)
    assert third_stats.analysed_loops == 1 and third_stats.cached_loops == 7


def test_only_and_skip_select_rules(demo):
    report = check_project(demo / "ruleguard.toml", CheckOptions(today=AS_OF, only=("margin",)))
    assert report.findings and all(f.rule.startswith("margin.") for f in report.findings)
    report = check_project(
        demo / "ruleguard.toml", CheckOptions(today=AS_OF, skip=("margin", "sensitivity"))
    )
    assert not any(f.rule.startswith(("margin.", "sensitivity.")) for f in report.findings)


def test_time_budget_reports_unreached_loops_as_not_analysed(demo):
    report = check_project(
        demo / "ruleguard.toml", CheckOptions(today=AS_OF, time_budget_s=0.0, use_cache=True)
    )
    assert not any(lp.analysed for lp in report.loops)
    reasons = {f.loop: f for f in report.findings if f.rule == "stability.closed-loop"}
    assert set(reasons) == {lp.name for lp in report.loops}
    assert all("time budget" in f.message for f in reasons.values())
    assert report.failed
    # nothing cut short by the clock is cached: a normal run analyses every loop
    stats = RunStatistics()
    check_project(
        demo / "ruleguard.toml", CheckOptions(today=AS_OF, use_cache=True), statistics=stats
    )
    assert stats.analysed_loops == 8


def test_overflowing_gain_fails_the_gate_instead_of_crashing(demo):
    # kp = 1e300 times the plant gain overflows double precision (max ~1.8e308).
    tilt = demo / "firmware" / "tilt.toml"
    tilt.write_text(tilt.read_text().replace("kp = 2.1", "kp = 1e300"))
    report = check_project(demo / "ruleguard.toml", CheckOptions(today=AS_OF))
    current = next(lp for lp in report.loops if lp.name == "tilt.current")
    assert not current.analysed
    found = [f for f in report.findings if f.loop == "tilt.current"]
    # the manifest's bounds (kp in [0.5, 4.0]) flag the value too
    assert sorted(f.rule for f in found) == ["config.bounds", "stability.closed-loop"]
    failure = next(f for f in found if f.rule == "stability.closed-loop")
    assert "numerical failure" in failure.message
    assert failure.location.file == "firmware/tilt.toml"


def _report_json(demo, options):
    from ruleguard.report.json_report import render

    return render(check_project(demo / "ruleguard.toml", options))


@pytest.mark.parametrize("jobs", [1, 2])
def test_loops_judged_by_their_workers_match_judging_here(demo, monkeypatch, jobs):
    """A loop that fits one chunk is judged where it is analysed (pipeline.judge_loop);
    the report must be byte for byte the one of judging every loop in this process,
    including waiver bookkeeping: a second waiver for the same finding is unused
    (the engine applies the first that matches)."""
    import ruleguard.pipeline as pipeline

    policy = next((demo / "policy").glob("*.toml"))
    policy.write_text(
        policy.read_text(encoding="utf-8")
        + '\n[[waivers]]\nrule = "sensitivity.peak"\nloops = ["housing.*"]\n'
        'reason = "overlaps the first"\nexpires = 2027-03-01\n'
        '\n[[waivers]]\nrule = "margin.delay"\nloops = ["nothing.*"]\nreason = "no such loop"\n',
        encoding="utf-8",
    )
    options = CheckOptions(today=AS_OF, jobs=jobs)
    names = []
    real = pipeline.judge_loop

    def counting(project, spec, outcomes, judging):
        names.append(spec.name)
        return real(project, spec, outcomes, judging)

    monkeypatch.setattr(pipeline, "judge_loop", counting)
    judged = _report_json(demo, options)
    if jobs == 1:  # judged in this process: seen (8 loops, at most 16 variants but one)
        assert "housing.heater" in names and "window.heater" not in names
    monkeypatch.setattr(pipeline, "_judging_request", lambda *args: None)
    here = _report_json(demo, options)
    assert judged == here
    # the overlapping waiver and the one naming no loop, as judged here
    assert judged.count('"waiver.unused"') == 2


def test_judged_loops_enter_the_cache_with_their_findings(demo):
    first = check_project(demo / "ruleguard.toml", CheckOptions(today=AS_OF, use_cache=True))
    stats = RunStatistics()
    again = check_project(demo / "ruleguard.toml", CheckOptions(today=AS_OF, use_cache=True),
                          statistics=stats)
    assert stats.analysed_loops == 0 and stats.cached_loops == len(first.loops)
    assert again.findings == first.findings
