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


def test_batch_size_keeps_sixteen_tasks_per_worker():
    # 300 one-variant chunks on 2 workers: 300 // 32 = 9, capped at MAX_BATCH
    assert executors.batch_size(300, 2) == executors.MAX_BATCH == 8
    assert executors.batch_size(63, 2) == 1  # fewer than 2 x 16 x 2 chunks: one per task
    assert executors.batch_size(64, 2) == 2
    assert executors.batch_size(0, 1) == 1


class _BatchRecorder:
    """An executor with ``submit_batch`` that runs nothing: chunk ``start`` is its outcome;
    the loops in ``failing`` raise (as a worker's chunk would)."""

    workers = 2

    def __init__(self, failing=()):
        self.groups = []
        self.cancelled = []
        self.failing = set(failing)

    def submit(self, chunk):  # pragma: no cover - a batched stream never calls it
        raise AssertionError("batched stream submitted one chunk")

    def submit_batch(self, chunks):
        self.groups.append(tuple((c.loop, c.start) for c in chunks))
        values = tuple(
            executors._Raised(ValueError(c.loop)) if c.loop in self.failing else (c.start,)
            for c in chunks
        )
        recorder = self

        class _Task:
            def result(self):
                return values

            def cancel(self):
                recorder.cancelled.append(values)
                return True

        return _Task()


def _chunks(plan):
    return [c for loop, n in plan for c in split_variants(loop, tuple(range(n)), 1)]


def test_batched_stream_keeps_order_and_drops_stopped_loops():
    fake = _BatchRecorder()
    stream = executors.ChunkStream(fake, _chunks([("a", 30), ("b", 2), ("c", 30)]), batch=4)
    seen = []
    for chunk, outcomes in stream:
        assert outcomes == (chunk.start,)
        seen.append((chunk.loop, chunk.start))
        if chunk.loop == "a" and chunk.start == 1:
            stream.stop_loop("a")  # a/2, a/3 came in the same batch: dropped
    assert seen == [("a", 0), ("a", 1), ("b", 0), ("b", 1)] + [("c", k) for k in range(30)]
    assert all(len(g) <= 4 for g in fake.groups)
    assert fake.groups[0] == (("a", 0), ("a", 1), ("a", 2), ("a", 3))
    # window of 2 workers x 3 batches: a/0-23 at the start, a/24-27 once the first
    # batch was read (before the stop); a/28 and a/29 are never submitted
    submitted = {item for g in fake.groups for item in g}
    assert ("a", 27) in submitted and ("a", 28) not in submitted
    assert len(fake.cancelled) == 6  # the batches a/4-7 ... a/24-27


def test_batched_stream_cancels_a_batch_of_stopped_loops_only():
    fake = _BatchRecorder()
    stream = executors.ChunkStream(fake, _chunks([("a", 12), ("b", 1)]), batch=4)
    seen = []
    for chunk, _ in stream:
        seen.append((chunk.loop, chunk.start))
        stream.stop_loop("a")
    assert seen == [("a", 0), ("b", 0)]
    # window 6 batches: a/0-3, a/4-7, a/8-11 and b/0 in flight; the two all-"a" ones cancelled
    assert len(fake.cancelled) == 2


def test_batched_stream_raises_at_the_failing_chunks_turn():
    fake = _BatchRecorder(failing={"b"})
    stream = executors.ChunkStream(fake, _chunks([("a", 2), ("b", 1), ("c", 1)]), batch=4)
    seen = []
    with pytest.raises(ValueError, match="b"):
        for chunk, _ in stream:
            seen.append((chunk.loop, chunk.start))
    assert seen == [("a", 0), ("a", 1)]  # the chunks before it arrive first


def test_batched_process_pool_report_is_identical(sampled_demo, monkeypatch):
    files = ("firmware/tilt.toml",)
    one = _report(sampled_demo, files, jobs=1)
    # 3 loops of 61 variants in chunks of 8 (the last of each loop: 5); tasks of at
    # most 24 variants: 8 + 8 + 8 twice, then 8 + 5 + the next loop's first 8 (21)
    monkeypatch.setattr(executors, "batch_size", lambda count, workers: 24)
    tasks = []
    real = executors.ProcessExecutor.submit_batch

    def spy(self, chunks):
        tasks.append([(c.loop, len(c.variants)) for c in chunks])
        return real(self, chunks)

    monkeypatch.setattr(executors.ProcessExecutor, "submit_batch", spy)
    assert _report(sampled_demo, files, jobs=2) == one
    assert all(sum(n for _, n in task) <= 24 for task in tasks)
    assert sum(n for task in tasks for _, n in task) == 3 * 61
    assert len(tasks) == 8 and any(len({loop for loop, _ in t}) == 2 for t in tasks)


def test_batched_time_budget_stops_every_loop(sampled_demo, monkeypatch):
    monkeypatch.setattr(executors, "batch_size", lambda count, workers: 20)
    report = check_project(sampled_demo, CheckOptions(today=AS_OF, time_budget_s=0.0, jobs=2))
    assert not any(lp.analysed for lp in report.loops)
    reasons = [f for f in report.findings if f.rule == "stability.closed-loop"]
    assert {f.loop for f in reasons} == {lp.name for lp in report.loops}


# ------------------------------------------------------------- --timings with workers
def _timed_check(manifest, *extra):
    import io

    from ruleguard.cli import run

    base = ["check", "--manifest", str(manifest), "--format", "json", "--no-cache",
            "--as-of", AS_OF.isoformat(), *extra, str(manifest.parent / "firmware" / "tilt.toml")]
    plain_out, plain_err = io.StringIO(), io.StringIO()
    plain = run(base, plain_out, plain_err)
    out, err = io.StringIO(), io.StringIO()
    code = run([*base, "--timings"], out, err)
    assert (code, out.getvalue()) == (plain, plain_out.getvalue())  # stdout unchanged
    return err.getvalue()


def _assert_worker_tables(err: str, workers: int) -> None:
    from test_timings import tables

    main, in_workers = tables(err)
    assert "waiting" in main  # the parent's wait for the workers' results
    assert "build" not in main and "analysis" not in main  # those ran in the workers
    # (loops of 61 variants are judged here, so "rules" is not among the workers')
    for name in ("build", "analysis", "other", "idle", "total"):
        assert name in in_workers, err
    for table in (main, in_workers):
        parts = sum(s for name, (s, _) in table.items() if name != "total")
        assert parts == pytest.approx(table["total"][0], abs=0.01)
    assert f"of the {workers} worker processes" in err
    tasks = int(err.split(" tasks)")[0].rsplit(" ", 1)[1])
    assert tasks >= 2 * 61 // 8  # chunks of at most 8 variants, two loops at least
    # the workers had their pool's whole span, and the parent waited for it
    assert in_workers["total"][0] >= in_workers["analysis"][0] + in_workers["build"][0]


def test_timings_show_the_worker_processes_time(sampled_demo):
    _assert_worker_tables(_timed_check(sampled_demo, "--jobs", "2"), 2)


def test_timings_of_one_job_have_no_worker_table(sampled_demo):
    from test_timings import tables

    err = _timed_check(sampled_demo, "--jobs", "1")
    (main,) = tables(err)
    assert {"build", "analysis", "rules"} <= main.keys() and "waiting" not in main


def test_timings_show_the_dask_workers_time(sampled_demo):
    distributed = pytest.importorskip("distributed")
    with distributed.LocalCluster(
        n_workers=2, threads_per_worker=1, processes=True, dashboard_address=None
    ) as cluster:
        err = _timed_check(sampled_demo, "--executor", "dask",
                           "--cluster-address", cluster.scheduler_address)
    _assert_worker_tables(err, 2)
