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
  cache and are analysed again; no target, for comparison).

Then the largest imports (`python -X importtime`) of the cache-hit route and
of the cold one-loop check. Run from the repository root:

    python benchmarks/bench_hook.py [--runs 15]
"""

from __future__ import annotations

import argparse
import shutil
import subprocess
import sys
import tempfile
from pathlib import Path

from bench_startup import DEMO, largest_imports, time_command

CHANGED = "fixtures/gimbal_demo/firmware/tilt.toml"


def _row(label: str, figures: tuple[float, float], target_s: float | None) -> None:
    med, low = figures
    goal = f"target < {target_s * 1000:.0f} ms" if target_s else ""
    verdict = ("met" if med < target_s else "NOT met") if target_s else ""
    print(f"{label:<46} {med * 1000:7.0f} ms  (min {low * 1000:5.0f})  {goal} {verdict}")


def main() -> None:
    parser = argparse.ArgumentParser()
    parser.add_argument("--runs", type=int, default=15)
    runs = parser.parse_args().runs
    py = sys.executable
    rg = [py, "-m", "ruleguard"]
    print(f"median of {runs} fresh processes each")
    _row("bare interpreter (python -c pass)", time_command([py, "-c", "pass"], runs), None)
    _row("ruleguard --version", time_command([*rg, "--version"], runs), None)
    with tempfile.TemporaryDirectory() as tmp:
        one = Path(tmp) / "one-loop"
        one.mkdir()
        subprocess.run([*rg, "init", str(one)], check=True, stdout=subprocess.DEVNULL)
        cold_cmd = [*rg, "check", "--no-cache"]
        _row("cold check, one-loop project (--no-cache)", time_command(cold_cmd, runs, one), 0.5)

        repo = Path(tmp) / "repo"
        demo = repo / "fixtures" / "gimbal_demo"
        shutil.copytree(DEMO, demo)
        warm = [*rg, "check"]
        subprocess.run(warm, cwd=demo, stdout=subprocess.DEVNULL, stderr=subprocess.DEVNULL)
        _row("demo, warm cache, whole project", time_command(warm, runs, demo), None)
        hook = [*rg, "check", CHANGED]
        _row(
            f"demo, warm cache, `check {Path(CHANGED).name}` from repo root",
            time_command(hook, runs, repo),
            0.3,
        )
        changed = repo / CHANGED
        original = changed.read_text(encoding="utf-8")
        edits = iter(range(10**6))

        def edit() -> None:
            changed.write_text(original + f"# edit {next(edits)}\n", encoding="utf-8")

        _row(
            f"demo, `check {Path(CHANGED).name}`, file edited each run",
            time_command(hook, runs, repo, before=edit),
            None,
        )
        changed.write_text(original, encoding="utf-8")
        hit_imports = largest_imports(hook, cwd=repo)
        cold_imports = largest_imports(cold_cmd, cwd=one)
    for title, heavy in (
        ("cache-hit route (hook, file as cached)", hit_imports),
        ("cold one-loop check", cold_imports),
    ):
        print(f"largest cumulative imports, {title} (us):")
        for cumulative, name in heavy:
            print(f"  {cumulative:9d} {name}")


if __name__ == "__main__":
    main()
