"""The hook as the pre-commit framework runs it (``pre-commit try-repo``).

A temporary git repository holds a copy of the demo project; the framework
builds the hook's environment from this repository (``language: python``)
and runs ``ruleguard check`` with the given file names. The hook must fail
(exit 1, findings) on a file of the demo's failing loop and pass on a file
used only by passing loops, proving the changed-files mode end to end.

Slow (the framework installs ruleguard into a fresh environment, about a
minute per run), but part of CI. It runs ``try-repo`` on this repository's
committed state (plus tracked changes), so the hook installs what a user's
framework would install.
"""

from __future__ import annotations

import os
import shutil
import subprocess
import sys
from pathlib import Path

import pytest

REPO = Path(__file__).resolve().parents[1]
DEMO = REPO / "fixtures" / "gimbal_demo"

pytestmark = pytest.mark.slow


def _pre_commit() -> list[str]:
    exe = shutil.which("pre-commit")
    if exe:
        return [exe]
    return [sys.executable, "-m", "pre_commit"]


def _git(cwd: Path, *args: str) -> None:
    subprocess.run(
        ["git", "-c", "user.email=hook-test@example.invalid", "-c", "user.name=hook test",
         "-c", "commit.gpgsign=false", *args],
        cwd=cwd, check=True, capture_output=True, text=True,
    )


def _demo_files():
    """(a file only failing loops use, a file only passing loops use, failing loops)."""
    from ruleguard.load.project import load_project
    from ruleguard.pipeline import CheckOptions, check_project
    from ruleguard.selection import loop_input_files

    report = check_project(DEMO / "ruleguard.toml", CheckOptions(use_cache=False))
    project = load_project(DEMO / "ruleguard.toml")
    failing = {
        f.loop for f in report.findings
        if f.loop and not f.waived and f.severity.rank >= report.fail_at.rank
    }
    assert failing, "the demo project is meant to have a failing loop"
    inputs = {spec.name: loop_input_files(project, spec.name) for spec in project.loops}
    shared = {project.manifest_file} | set.intersection(*map(set, inputs.values()))
    failing_files = set().union(*(inputs[n] for n in failing)) - shared
    passing_files = set().union(*(inputs[n] for n in inputs if n not in failing)) - shared
    only_failing = sorted(failing_files - passing_files)
    only_passing = sorted(passing_files - failing_files)
    assert only_failing and only_passing
    return only_failing[0], only_passing[0], failing


@pytest.fixture(scope="module")
def hook_repo(tmp_path_factory):
    if not DEMO.is_dir():
        pytest.fail(f"the demo project is missing: {DEMO}")
    if not (REPO / ".git").exists():
        pytest.skip("pre-commit try-repo needs this repository as a git checkout")
    base = tmp_path_factory.mktemp("hook")
    work = base / "firmware-repo"
    shutil.copytree(DEMO, work, ignore=shutil.ignore_patterns(".ruleguard-cache"))
    _git(work, "init", "-q")
    _git(work, "add", "-A")
    _git(work, "commit", "-q", "-m", "firmware parameters")
    env = dict(os.environ)
    env["PRE_COMMIT_HOME"] = str(base / "pre-commit-home")  # isolated hook environments
    env.pop("NO_COLOR", None)
    return work, env


def _try_repo(work: Path, env: dict, *files: str) -> subprocess.CompletedProcess:
    return subprocess.run(
        [*_pre_commit(), "try-repo", str(REPO), "ruleguard", "--color", "never",
         "--verbose", "--files", *files],
        cwd=work, env=env, capture_output=True, text=True, timeout=1200,
    )


def test_hook_fails_on_the_failing_loop_and_passes_elsewhere(hook_repo):
    work, env = hook_repo
    failing_file, passing_file, failing_loops = _demo_files()

    failed = _try_repo(work, env, failing_file)
    out = failed.stdout + failed.stderr
    assert failed.returncode == 1, out
    assert "- exit code: 1" in out, out  # findings (FORMATS.md section 6), not an error
    assert any(f"loop {name}" in out for name in failing_loops), out

    # a file of passing loops only, and a matching file that no loop uses
    # (each try-repo builds the hook environment anew: two runs keep it short)
    (work / "notes.json").write_text('{"not": "an input"}\n', encoding="utf-8")
    _git(work, "add", "notes.json")
    passed = _try_repo(work, env, passing_file, "notes.json")
    out = passed.stdout + passed.stderr
    assert passed.returncode == 0, out
    assert "Passed" in out
    for name in failing_loops:
        assert f"loop {name}" not in out, out
