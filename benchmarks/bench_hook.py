"""Latency of `ruleguard check` as a pre-commit hook pays it (issue 9, part 4).

Each figure is the median (and minimum) wall-clock time of N fresh processes,
all measured in one run, side by side with its target:

* `ruleguard --version` (the import of the command line alone);
* a cold check of a one-loop project (`ruleguard init` in a temporary
  folder, `check --no-cache`);
* the demo (fixtures/gimbal_demo) with a warm cache, whole project;
* the demo with a warm cache, one file passed as the hook passes it (run
  from the repository root: `ruleguard check fixtures/gimbal_demo/firmware/tilt.toml`),
  content as cached;
* the same with the file really edited before every run (its loops miss the
  cache and are analysed again: "one changed file", also held to 0.3 s).

With ``--baseline DIR`` (a checkout of an older ruleguard, for example
``git worktree add /tmp/before <commit>``), every figure is also measured
for that code (put first on PYTHONPATH), in turn with this code in each
round so both see the same machine load, and the ratio is printed. The
built-in rulesets still come from the installed package: when their keys
differ between the two codes (``extends`` became ``based_on``), the older
code stops at the demo's ruleset with exit status 2, so its demo figures are
lower bounds.

Then the largest imports (`python -X importtime`) of the cache-hit route and
of the cold one-loop check. Run from the repository root:

    python benchmarks/bench_hook.py [--runs 15] [--baseline DIR] [--installed]

With ``--installed`` every command runs on the interpreter of a new virtual
environment (in a temporary folder, without the system's site-packages)
into which this checkout is installed with ``pip install .``, as pre-commit
installs a hook's repository: no editable-install finder and none of the
development machine's ``.pth`` files are imported at start-up (on the
machine of docs/scaling.md those cost about 30 ms of every figure,
``python -c pass`` included). The dependencies come from pip's configured
index (a local one works without a network).
"""

from __future__ import annotations

import argparse
import os
import shutil
import subprocess
import sys
import tempfile
from pathlib import Path

from bench_startup import DEMO, largest_imports, time_commands

CHANGED = "fixtures/gimbal_demo/firmware/tilt.toml"


class _Table:
    def __init__(self, runs: int, baseline: str | None) -> None:
        self.runs = runs
        self.variants: list[dict | None] = [None]
        if baseline:
            self.variants.insert(0, {"PYTHONPATH": str(Path(baseline).resolve())})
        title = f"figure (median of {runs} fresh processes)"
        head = f"{title:<52}"
        if baseline:
            head += f"{'baseline':>10}"
        head += f"{'now':>10}{'min':>8}"
        if baseline:
            head += f"{'ratio':>8}"
        print(head + "  target")

    def row(self, label: str, cmd: list[str], cwd=None, before=None, target_s=None) -> None:
        figures = time_commands([(cmd, env) for env in self.variants], self.runs, cwd, before)
        med, low = figures[-1]
        line = f"{label:<52}"
        if len(figures) == 2:
            line += f"{figures[0][0] * 1000:8.0f}ms"
        line += f"{med * 1000:8.0f}ms{low * 1000:6.0f}ms"
        if len(figures) == 2:
            line += f"{figures[0][0] / med:7.2f}x"
        if target_s:
            verdict = "met" if med < target_s else "NOT met"
            line += f"  < {target_s * 1000:.0f} ms {verdict}"
        print(line, flush=True)


class _Editor:
    """Appends a new comment line to ``path`` at each call (a real edit)."""

    def __init__(self, path: Path) -> None:
        self.path = path
        self.original = path.read_text(encoding="utf-8")
        self.count = 0

    def __call__(self) -> None:
        self.count += 1
        self.path.write_text(self.original + f"# edit {self.count}\n", encoding="utf-8")

    def restore(self) -> None:
        self.path.write_text(self.original, encoding="utf-8")


def main() -> None:
    parser = argparse.ArgumentParser()
    parser.add_argument("--runs", type=int, default=15)
    parser.add_argument("--baseline", help="a checkout of older ruleguard code to compare with")
    parser.add_argument("--installed", action="store_true",
                        help="run in a new venv with this checkout installed by `pip install .`")
    args = parser.parse_args()
    with tempfile.TemporaryDirectory() as venv:
        py = _installed_python(Path(venv)) if args.installed else sys.executable
        _measure(args, py)


def _installed_python(folder: Path) -> str:
    """Python of a new venv in ``folder`` holding this checkout, installed as pre-commit does."""
    subprocess.run([sys.executable, "-m", "venv", str(folder)], check=True)
    py = str(folder / "bin" / "python")
    root = Path(__file__).resolve().parents[1]
    subprocess.run([py, "-m", "pip", "install", "-q", "--disable-pip-version-check", str(root)],
                   check=True, stdout=subprocess.DEVNULL, stderr=subprocess.DEVNULL)
    print(f"interpreter: a new venv with `pip install {root}` ({py})")
    return py


def _measure(args: argparse.Namespace, py: str) -> None:
    rg = [py, "-m", "ruleguard"]
    table = _Table(args.runs, args.baseline)
    table.row("bare interpreter (python -c pass)", [py, "-c", "pass"])
    table.row("ruleguard --version", [*rg, "--version"])
    with tempfile.TemporaryDirectory() as tmp:
        # one set of project folders per compared code: each with its own
        # starter (`init` of that code) and its own copy of the demo
        ones, repos, edits = [], [], []
        for n, env in enumerate(table.variants):
            run_env = dict(os.environ, **(env or {}))
            one = Path(tmp) / f"one-loop-{n}"
            one.mkdir()
            subprocess.run(  # not from the checkout: `-m` puts the cwd first on sys.path
                [*rg, "init", "."], cwd=one, check=True, stdout=subprocess.DEVNULL, env=run_env
            )
            ones.append(one)
            repo = Path(tmp) / f"repo-{n}"
            source = DEMO
            if env and (Path(env["PYTHONPATH"]) / "fixtures" / "gimbal_demo").is_dir():
                source = Path(env["PYTHONPATH"]) / "fixtures" / "gimbal_demo"
            shutil.copytree(source, repo / "fixtures" / "gimbal_demo")
            repos.append(repo)
            edits.append(_Editor(repo / CHANGED))
        cold_cmd = [*rg, "check", "--no-cache"]
        table.row("cold check, one-loop project (--no-cache)", cold_cmd, ones, target_s=0.5)
        demos = [repo / "fixtures" / "gimbal_demo" for repo in repos]
        table.row("demo, warm cache, whole project", [*rg, "check"], demos)
        hook = [*rg, "check", CHANGED]
        table.row("demo, warm cache, `check .../tilt.toml` (hook)", hook, repos, target_s=0.3)
        table.row("demo, `check .../tilt.toml`, file edited each run", hook, repos, before=edits,
                  target_s=0.3)
        for edit in edits:
            edit.restore()
        hit_imports = largest_imports(hook, cwd=repos[-1])
        cold_imports = largest_imports(cold_cmd, cwd=ones[-1])
    for title, heavy in (
        ("cache-hit route (hook, file as cached)", hit_imports),
        ("cold one-loop check", cold_imports),
    ):
        print(f"largest cumulative imports, {title} (us):")
        for cumulative, name in heavy:
            print(f"  {cumulative:9d} {name}")


if __name__ == "__main__":
    main()
