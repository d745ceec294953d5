"""The loop-result cache: keys over every input, JSON round trip, safe on disk."""

from __future__ import annotations

import dataclasses
import datetime as dt
import json
import os

import pytest
from sample_projects import make_project
from sample_reports import PHASE_FINDING, STABILITY_FINDING, WAIVED_FINDING, velocity_loop

from ruleguard import cache as cache_module
from ruleguard.cache import CACHE_FOLDER, LoopCache

OPTIONS = {"only": [], "skip": [], "today": "2026-12-01"}
FINDINGS = (PHASE_FINDING, STABILITY_FINDING, WAIVED_FINDING)


@pytest.fixture
def root(tmp_path):
    return tmp_path / "repo"


@pytest.fixture
def project(root):
    return make_project(root)


def _key(project, loop="tilt.velocity", ruleset="rs-1", options=OPTIONS, cache=None):
    cache = cache or LoopCache(project.root)
    return cache.key_for(project, loop, ruleset, options)


def _snapshot(root) -> dict[str, bytes]:
    return {
        str(p.relative_to(root)): p.read_bytes()
        for p in root.rglob("*")
        if p.is_file() and CACHE_FOLDER not in p.parts
    }


class TestRoundTrip:
    def test_put_then_get_returns_equal_records(self, project):
        cache = LoopCache(project.root)
        key = _key(project, cache=cache)
        assert cache.get(key) is None
        cache.put(key, velocity_loop(), FINDINGS)
        again = LoopCache(project.root)  # a later run
        loop, findings = again.get(key)
        # equal dataclasses, infinities and None kept (the sample has both)
        assert loop == velocity_loop()
        assert findings == FINDINGS
        assert (again.hits, again.misses) == (1, 0)
        assert (cache.hits, cache.misses, cache.stores) == (0, 1, 1)

    def test_entries_are_json_not_pickle(self, project):
        cache = LoopCache(project.root)
        key = _key(project, cache=cache)
        cache.put(key, velocity_loop(), FINDINGS)
        raw = (project_root(project) / CACHE_FOLDER / f"{key}.json").read_text("utf-8")
        data = json.loads(raw)
        assert data["tool_version"] == cache_module.__version__
        assert data["loop"]["name"] == "tilt.velocity"

    def test_a_hit_skips_the_analysis(self, project):
        """The pipeline's use of the cache, with a counting analysis."""
        calls = []

        def analyse(name):
            calls.append(name)
            return velocity_loop(), FINDINGS

        def run():
            cache = LoopCache(project.root)
            key = cache.key_for(project, "tilt.velocity", "rs-1", OPTIONS)
            hit = cache.get(key)
            if hit is None:
                hit = analyse("tilt.velocity")
                cache.put(key, *hit)
            return cache, hit

        first, result_1 = run()
        second, result_2 = run()
        assert calls == ["tilt.velocity"]  # analysed once
        assert (first.misses, second.hits) == (1, 1)
        assert result_1 == result_2


def project_root(project):
    from pathlib import Path

    return Path(project.root)


class TestKeys:
    def test_stable_for_the_same_inputs(self, project):
        assert _key(project) == _key(project)
        assert len(_key(project)) == 64

    def test_changes_with_an_input_file(self, project, root):
        before = _key(project)
        (root / "firmware/tilt.toml").write_text("[current]\nkp = 2.2\n[velocity]\nkp = 0.3\n")
        changed = make_project(root, write=False)
        assert _key(changed) != before

    def test_changes_with_the_inner_loop_inputs(self, project, root):
        before = _key(project, "tilt.velocity")
        (root / "models/sensors.toml").write_text("[plants.current_sense]\n# recalibrated\n")
        assert _key(make_project(root, write=False), "tilt.velocity") != before

    def test_changes_with_a_file_not_in_texts(self, project, root):
        # the CSV of a measured plant is read from disk
        before = _key(project, "pan.velocity")
        (root / "models/pan_sweep.csv").write_text("freq_hz,magnitude_db,phase_deg\n1,19,-90\n")
        assert _key(make_project(root, write=False), "pan.velocity") != before

    def test_unchanged_by_an_unrelated_file(self, project, root):
        before = _key(project, "pan.velocity")
        (root / "firmware/tilt.toml").write_text("[current]\nkp = 9.9\n")
        (root / "notes/readme.toml").write_text("# edited\n")
        assert _key(make_project(root, write=False), "pan.velocity") == before

    def test_changes_with_ruleset_options_date_loop_and_version(self, project, monkeypatch):
        base = _key(project)
        assert _key(project, ruleset="rs-2") != base
        assert _key(project, options={**OPTIONS, "only": ["margin"]}) != base
        assert _key(project, options={**OPTIONS, "skip": ["margin.disk"]}) != base
        assert _key(project, options={**OPTIONS, "today": "2026-12-02"}) != base
        assert _key(project, loop="tilt.current") != base
        monkeypatch.setattr(cache_module, "__version__", "9.9.9")
        assert _key(project) != base

    def test_today_defaults_to_the_utc_date(self, project):
        today = dt.datetime.now(dt.timezone.utc).date().isoformat()
        without = _key(project, options={"only": [], "skip": []})
        assert without == _key(project, options={"only": [], "skip": [], "today": today})


class TestOnDisk:
    def test_folder_is_git_ignored_and_tagged(self, project, root):
        cache = LoopCache(project.root)
        cache.put(_key(project, cache=cache), velocity_loop(), FINDINGS)
        folder = root / CACHE_FOLDER
        assert (folder / ".gitignore").read_text() == "*\n"
        # Cache Directory Tagging Specification signature
        assert (folder / "CACHEDIR.TAG").read_text().startswith(
            "Signature: 8a477f597d28d172789f06886806bc55")

    def test_inputs_are_never_written(self, project, root):
        before = _snapshot(root)
        cache = LoopCache(project.root)
        for loop in ("tilt.current", "tilt.velocity", "pan.velocity"):
            key = cache.key_for(project, loop, "rs", OPTIONS)
            cache.get(key)
            cache.put(key, velocity_loop(), FINDINGS)
        assert _snapshot(root) == before

    @pytest.mark.parametrize("damage", ["garbage", "truncate", "wrong-shape", "other-version",
                                        "other-key", "empty"])
    def test_a_damaged_entry_is_a_miss(self, project, root, damage):
        cache = LoopCache(project.root)
        key = _key(project, cache=cache)
        cache.put(key, velocity_loop(), FINDINGS)
        path = root / CACHE_FOLDER / f"{key}.json"
        text = path.read_text()
        data = json.loads(text)
        if damage == "garbage":
            path.write_bytes(b"\x80\x81 not json")
        elif damage == "truncate":
            path.write_text(text[: len(text) // 2])
        elif damage == "wrong-shape":
            data["loop"]["variants"][0]["margins"] = [1, 2, 3]
            path.write_text(json.dumps(data))
        elif damage == "other-version":
            data["tool_version"] = "0.0.1"
            path.write_text(json.dumps(data))
        elif damage == "other-key":
            data["key"] = "0" * 64
            path.write_text(json.dumps(data))
        else:
            path.write_text("")
        fresh = LoopCache(project.root)
        assert fresh.get(key) is None
        assert (fresh.hits, fresh.misses) == (0, 1)
        fresh.put(key, velocity_loop(), FINDINGS)  # a damaged entry is replaced
        assert LoopCache(project.root).get(key) is not None

    def test_disabled_cache_neither_reads_nor_writes(self, project, root):
        cache = LoopCache(project.root, enabled=False)
        key = _key(project, cache=cache)
        cache.put(key, velocity_loop(), FINDINGS)
        assert cache.get(key) is None and cache.misses == 1
        assert not (root / CACHE_FOLDER).exists()

    def test_symlinked_cache_folder_is_not_used(self, project, root, tmp_path):
        outside = tmp_path / "outside"
        outside.mkdir()
        (root / CACHE_FOLDER).symlink_to(outside, target_is_directory=True)
        cache = LoopCache(project.root)
        key = _key(project, cache=cache)
        cache.put(key, velocity_loop(), FINDINGS)
        assert list(outside.iterdir()) == []
        assert cache.get(key) is None

    def test_keys_that_are_not_hashes_are_refused(self, project, root):
        cache = LoopCache(project.root)
        cache.put("../../firmware/tilt", velocity_loop(), FINDINGS)
        assert cache.stores == 0
        assert cache.get("../../firmware/tilt") is None

    def test_unwritable_folder_is_tolerated(self, project, root):
        if os.geteuid() == 0:
            # root ignores permission bits; use a file where the folder should be
            (root / CACHE_FOLDER).write_text("not a folder")
        else:
            (root / CACHE_FOLDER).mkdir()
            os.chmod(root / CACHE_FOLDER, 0o500)
        cache = LoopCache(project.root)
        key = _key(project, cache=cache)
        cache.put(key, velocity_loop(), FINDINGS)  # no exception
        assert cache.get(key) is None

    def test_clear_removes_the_folder(self, project, root):
        cache = LoopCache(project.root)
        for loop in ("tilt.current", "pan.velocity"):
            cache.put(cache.key_for(project, loop, "rs", OPTIONS), velocity_loop(), ())
        assert cache.clear() == 2
        assert not (root / CACHE_FOLDER).exists()

    def test_old_entries_are_pruned(self, project, root, monkeypatch):
        monkeypatch.setattr(cache_module, "MAX_ENTRIES", 3)
        cache = LoopCache(project.root)
        keys = []
        for i in range(5):
            key = cache.key_for(project, "tilt.velocity", f"rs-{i}", OPTIONS)
            keys.append(key)
            cache.put(key, velocity_loop(), ())
            path = root / CACHE_FOLDER / f"{key}.json"
            os.utime(path, (1_000_000 + i, 1_000_000 + i))
        cache._prune()
        left = sorted(p.stem for p in (root / CACHE_FOLDER).glob("*.json"))
        assert left == sorted(keys[2:])


def test_finding_round_trip_keeps_related_and_waiver():
    from ruleguard.report.records import finding_from_dict, finding_to_dict

    odd = dataclasses.replace(PHASE_FINDING, measured=float("-inf"), waived=True,
                              waiver_reason="r")
    back = finding_from_dict(json.loads(json.dumps(finding_to_dict(odd, finite_only=False))))
    assert back == odd


@pytest.mark.slow
def test_pipeline_second_run_is_served_from_the_cache(tmp_path):
    """The real pipeline on a copy of the demo: the second run analyses nothing
    (counted, not timed) and reports exactly what the first one did."""
    import shutil
    from pathlib import Path

    from ruleguard.pipeline import CheckOptions, RunStatistics, check_project
    from ruleguard.report import json_report, sarif

    demo = Path(__file__).resolve().parents[1] / "fixtures" / "gimbal_demo"
    work = tmp_path / "demo"
    shutil.copytree(demo, work, ignore=shutil.ignore_patterns(CACHE_FOLDER))
    options = CheckOptions(use_cache=True, today=dt.date(2026, 12, 1))

    first_stats, second_stats = RunStatistics(), RunStatistics()
    first = check_project(work / "ruleguard.toml", options, statistics=first_stats)
    second = check_project(work / "ruleguard.toml", options, statistics=second_stats)
    loops = len(first.loops)
    assert (first_stats.analysed_loops, first_stats.cached_loops) == (loops, 0)
    assert (second_stats.analysed_loops, second_stats.cached_loops) == (0, loops)
    assert json_report.render(second) == json_report.render(first)
    assert sarif.render(second) == sarif.render(first)

    # an edit to a file of some loops: exactly those are analysed again
    from ruleguard.load.project import load_project
    from ruleguard.selection import loop_input_files

    project = load_project(work / "ruleguard.toml")
    inputs = {spec.name: loop_input_files(project, spec.name) for spec in project.loops}
    controller = project.loops[-1].controller.file
    users = {name for name, files in inputs.items() if controller in files}
    assert 0 < len(users) < loops
    path = work / controller
    path.write_text(path.read_text() + "\n")
    third_stats = RunStatistics()
    check_project(work / "ruleguard.toml", options, statistics=third_stats)
    assert (third_stats.analysed_loops, third_stats.cached_loops) == (
        len(users), loops - len(users))
