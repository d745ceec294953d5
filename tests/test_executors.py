"""Variants run by the executors: the report is the same byte for byte.

The outside reference here is the in-process run itself (one job): a pool of
workers or a Dask cluster must give the identical JSON report, since every
variant is an independent, deterministic computation and the outcomes are
read back in variant order.
"""

import datetime as dt
import shutil
import subprocess
import sys
from pathlib import Path

import pytest

from ruleguard import executors
from ruleguard.pipeline import CheckOptions, check_project
from ruleguard.report import json_report
from ruleguard.workunits import chunk_size, split_variants

DEMO = Path(__file__).resolve().parents[1] / "fixtures" / "gimbal_demo"
AS_OF = dt.date(2026, 12, 1)


@pytest.fixture()
def sampled_demo(tmp_path):
    """The demo with 60 Latin-hypercube variants per loop (enough to start a pool)."""
    folder = tmp_path / "demo"
    shutil.copytree(DEMO, folder, ignore=shutil.ignore_patterns(".ruleguard-cache"))
    manifest = folder / "ruleguard.toml"
    text = manifest.read_text()
    assert 'variants = "corners"' in text
    sampled = "variants = { samples = 60, seed = 3 }"
    manifest.write_text(text.replace('variants = "corners"', sampled))
    return manifest


def _report(manifest, files, **options):
    """The JSON report of the tilt loops (selected through their controller file)."""
    report = check_project(
        manifest,
        CheckOptions(today=AS_OF, changed_files=files, cwd=str(manifest.parent), **options),
    )
    assert [lp.name for lp in report.loops] == ["tilt.current", "tilt.velocity", "tilt.position"]
    assert all(len(lp.variants) == 61 for lp in report.loops)
    return json_report.render(report)


def test_chunks_cover_every_variant_in_order():
    from ruleguard.workunits import MAX_CHUNK_VARIANTS

    variants = tuple(range(10001))
    size = chunk_size(len(variants), 2)
    assert size == MAX_CHUNK_VARIANTS  # 10001 / (2 workers x 4) is above the cap
    chunks = split_variants("x", variants, size)
    assert tuple(v for c in chunks for v in c.variants) == variants
    assert [c.start for c in chunks] == list(range(0, 10001, size))
    assert len(chunks) == 101  # ceil(10001 / 100): a hundred tasks, not 10,001
    assert chunk_size(10, 2) == 2  # ceil(10 / 8): a small loop still feeds both workers


def test_small_runs_start_no_pool(sampled_demo):
    from ruleguard.load.project import load_project

    project = load_project(sampled_demo)
    few = executors.make_executor(project, "local", 2, executors.PARALLEL_MIN_VARIANTS - 1)
    assert isinstance(few, executors.InlineExecutor)
    many = executors.make_executor(project, "local", 2, executors.PARALLEL_MIN_VARIANTS)
    try:
        assert isinstance(many, executors.ProcessExecutor)
    finally:
        many.close()


def test_process_pool_report_is_identical(sampled_demo):
    files = ("firmware/tilt.toml",)  # the three tilt loops, a cascade of cascades
    one = _report(sampled_demo, files, jobs=1)
    two = _report(sampled_demo, files, jobs=2)
    three = _report(sampled_demo, files, jobs=3)
    assert '"sample-60"' in one
    assert one == two == three


def test_time_budget_keeps_its_meaning_with_workers(sampled_demo):
    report = check_project(
        sampled_demo, CheckOptions(today=AS_OF, time_budget_s=0.0, jobs=2)
    )
    assert not any(lp.analysed for lp in report.loops)
    reasons = [f for f in report.findings if f.rule == "stability.closed-loop"]
    assert {f.loop for f in reasons} == {lp.name for lp in report.loops}
    assert all("time budget" in f.message for f in reasons)


def test_unknown_executor_is_an_input_error(sampled_demo):
    from ruleguard.errors import InputError
    from ruleguard.load.project import load_project

    with pytest.raises(InputError) as caught:
        executors.make_executor(load_project(sampled_demo), "grid", 2, 100)
    assert caught.value.key == "--executor"


def test_cli_rejects_zero_jobs(sampled_demo):
    result = subprocess.run(
        [sys.executable, "-m", "ruleguard", "check", "--manifest", str(sampled_demo), "--jobs",
         "0"],
        capture_output=True, text=True, timeout=120,
    )
    assert result.returncode == 2
    assert "--jobs" in result.stderr and "Traceback" not in result.stderr


def test_core_install_does_not_import_the_cluster_engine(sampled_demo):
    code = (
        "import sys\n"
        "from ruleguard.cli import run\n"
        "import io\n"
        f"run(['check', '--manifest', {str(sampled_demo)!r}, '--jobs', '1', '--format', 'json',"
        " '--no-cache', 'plc/heater_params.json'], io.StringIO(), io.StringIO())\n"
        "print('distributed' in sys.modules, 'dask' in sys.modules)\n"
    )
    result = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True,
                            timeout=300, cwd=sampled_demo.parent)
    assert result.stdout.split() == ["False", "False"], result.stderr


def test_dask_local_cluster_report_is_identical(sampled_demo):
    distributed = pytest.importorskip("distributed")
    files = ("firmware/tilt.toml",)
    local = _report(sampled_demo, files, jobs=1)
    with distributed.LocalCluster(
        n_workers=2, threads_per_worker=1, processes=True, dashboard_address=None
    ) as cluster:
        on_cluster = _report(
            sampled_demo, files, executor="dask", cluster_address=cluster.scheduler_address
        )
    assert on_cluster == local


def test_judging_request_crosses_once_per_worker(sampled_demo):
    """A chunk judged in its worker names the request installed there (not a copy
    of the ruleset per chunk); the outcome is that of judging it in this process."""
    import dataclasses
    import pickle

    from ruleguard.load.project import load_project
    from ruleguard.load.rulesets import load_ruleset
    from ruleguard.models.families import loop_variants
    from ruleguard.pipeline import LoopJudging
    from ruleguard.workunits import JudgedLoop, analyse_chunk

    project = load_project(sampled_demo)
    ruleset = load_ruleset(project.root, project.ruleset, project.ruleset_location)
    judging = LoopJudging(ruleset, (), (), AS_OF)
    spec = next(s for s in project.loops if s.name == "housing.heater")
    variants = loop_variants(project, spec)[:4]
    (chunk,) = split_variants(spec.name, variants, len(variants), judge=judging)
    here = analyse_chunk(project, chunk)
    assert isinstance(here[0], JudgedLoop)

    sent = dataclasses.replace(chunk, judge=executors.INSTALLED_JUDGING)
    assert len(pickle.dumps(sent)) < len(pickle.dumps(chunk)) / 2
    saved = executors._WORKER_PROJECT, executors._WORKER_JUDGING
    try:
        executors._install_project(project, judging)
        assert pickle.dumps(executors._run_installed(sent)) == pickle.dumps(here)
    finally:
        executors._WORKER_PROJECT, executors._WORKER_JUDGING = saved

    pool = executors.ProcessExecutor(project, 2, judging)
    try:
        assert pickle.dumps(pool.submit(chunk).result()) == pickle.dumps(here)
    finally:
        pool.close()
