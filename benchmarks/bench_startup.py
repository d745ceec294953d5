"""Start-up and whole-run cost of the command, as a pre-commit hook pays it.

Prints measured wall-clock figures (median of several runs, fresh process each):
`ruleguard --version` (import of the command), and `ruleguard check` on the
demo project with and without the cache. Run from the repository root:

    python benchmarks/bench_startup.py [--runs 5]
"""

from __future__ import annotations

import argparse
import os
import shutil
import statistics
import subprocess
import sys
import tempfile
import time
from pathlib import Path

ROOT = Path(__file__).resolve().parents[1]
DEMO = ROOT / "fixtures" / "gimbal_demo"


def time_command(
    cmd: list[str], runs: int, cwd: Path | None = None, before=None
) -> tuple[float, float]:
    """Median and minimum wall-clock seconds of ``runs`` fresh processes of ``cmd``.

    ``before`` (optional) is called before each run, outside the timing.
    """
    return time_commands([(cmd, None)], runs, cwd, before)[0]


def time_commands(
    variants: list[tuple[list[str], dict | None]], runs: int, cwd=None, before=None
) -> list[tuple[float, float]]:
    """:func:`time_command` for several (command, extra environment) pairs,
    run in turn within each round so that they share the machine's load.
    ``cwd`` and ``before`` may be lists (one per variant).

    One untimed round comes first, and the processes may write byte code (as
    an installed package has it), so no figure includes compiling sources.
    """
    base = {k: v for k, v in os.environ.items() if k != "PYTHONDONTWRITEBYTECODE"}
    envs = [dict(base, **(extra or {})) for _, extra in variants]
    times: list[list[float]] = [[] for _ in variants]
    cwds = cwd if isinstance(cwd, list) else [cwd] * len(variants)
    befores = before if isinstance(before, list) else [before] * len(variants)
    for round_no in range(runs + 1):
        for i, ((cmd, _), env, spent) in enumerate(zip(variants, envs, times, strict=True)):
            if befores[i] is not None:
                befores[i]()
            start = time.perf_counter()
            subprocess.run(
                cmd, cwd=cwds[i], env=env, stdout=subprocess.DEVNULL, stderr=subprocess.DEVNULL
            )
            if round_no:
                spent.append(time.perf_counter() - start)
    return [(statistics.median(t), min(t)) for t in times]


def largest_imports(cmd: list[str], count: int = 8, cwd: Path | None = None):
    """The ``count`` largest cumulative imports (microseconds, module) of ``cmd``
    (a ``python -m ...`` command line: ``-X importtime`` is added after the interpreter)."""
    env = {k: v for k, v in os.environ.items() if k != "PYTHONDONTWRITEBYTECODE"}
    out = subprocess.run(
        [cmd[0], "-X", "importtime", *cmd[1:]], capture_output=True, text=True, cwd=cwd, env=env
    ).stderr
    heavy = []
    for line in out.splitlines():
        parts = line.split("|")
        if len(parts) == 3 and parts[1].strip().isdigit():
            heavy.append((int(parts[1]), parts[2].rstrip()))
    heavy.sort(reverse=True)
    return heavy[:count]


def main() -> None:
    parser = argparse.ArgumentParser()
    parser.add_argument("--runs", type=int, default=5)
    runs = parser.parse_args().runs
    py = sys.executable
    base, _ = time_command([py, "-c", "pass"], runs)
    print(f"bare interpreter:                 {base * 1000:7.0f} ms (median of {runs})")
    med, low = time_command([py, "-m", "ruleguard", "--version"], runs)
    print(f"ruleguard --version:              {med * 1000:7.0f} ms (min {low * 1000:.0f})")
    with tempfile.TemporaryDirectory() as tmp:
        demo = Path(tmp) / "demo"
        shutil.copytree(DEMO, demo)
        manifest = str(demo / "ruleguard.toml")
        med, low = time_command(
            [py, "-m", "ruleguard", "check", "--no-cache", "--manifest", manifest], runs
        )
        print(f"check demo, no cache:             {med * 1000:7.0f} ms (min {low * 1000:.0f})")
        subprocess.run(
            [py, "-m", "ruleguard", "check", "--manifest", manifest],
            stdout=subprocess.DEVNULL,
            stderr=subprocess.DEVNULL,
        )
        med, low = time_command([py, "-m", "ruleguard", "check", "--manifest", manifest], runs)
        print(f"check demo, warm cache:           {med * 1000:7.0f} ms (min {low * 1000:.0f})")
        heavy = largest_imports(
            [py, "-m", "ruleguard", "check", "--no-cache", "--manifest", manifest]
        )
    print("largest cumulative imports during check (us):")
    for cumulative, name in heavy:
        print(f"  {cumulative:9d} {name}")


if __name__ == "__main__":
    main()
