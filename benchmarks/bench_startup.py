"""Start-up and whole-run cost of the command, as a pre-commit hook pays it.

Prints measured wall-clock figures (median of several runs, fresh process each):
`ruleguard --version` (import of the command), and `ruleguard check` on the
demo project with and without the cache. Run from the repository root:

    python benchmarks/bench_startup.py [--runs 5]
"""

from __future__ import annotations

import argparse
import shutil
import statistics
import subprocess
import sys
import tempfile
import time
from pathlib import Path

ROOT = Path(__file__).resolve().parents[1]
DEMO = ROOT / "fixtures" / "gimbal_demo"


def _time(cmd: list[str], runs: int, cwd: Path | None = None) -> tuple[float, float]:
    times = []
    for _ in range(runs):
        start = time.perf_counter()
        subprocess.run(cmd, cwd=cwd, stdout=subprocess.DEVNULL, stderr=subprocess.DEVNULL)
        times.append(time.perf_counter() - start)
    return statistics.median(times), min(times)


def main() -> None:
    parser = argparse.ArgumentParser()
    parser.add_argument("--runs", type=int, default=5)
    runs = parser.parse_args().runs
    py = sys.executable
    base, _ = _time([py, "-c", "pass"], runs)
    print(f"bare interpreter:                 {base * 1000:7.0f} ms (median of {runs})")
    med, low = _time([py, "-m", "ruleguard", "--version"], runs)
    print(f"ruleguard --version:              {med * 1000:7.0f} ms (min {low * 1000:.0f})")
    with tempfile.TemporaryDirectory() as tmp:
        demo = Path(tmp) / "demo"
        shutil.copytree(DEMO, demo)
        manifest = str(demo / "ruleguard.toml")
        med, low = _time(
            [py, "-m", "ruleguard", "check", "--no-cache", "--manifest", manifest], runs
        )
        print(f"check demo, no cache:             {med * 1000:7.0f} ms (min {low * 1000:.0f})")
        subprocess.run(
            [py, "-m", "ruleguard", "check", "--manifest", manifest],
            stdout=subprocess.DEVNULL,
            stderr=subprocess.DEVNULL,
        )
        med, low = _time([py, "-m", "ruleguard", "check", "--manifest", manifest], runs)
        print(f"check demo, warm cache:           {med * 1000:7.0f} ms (min {low * 1000:.0f})")
        out = subprocess.run(
            [
                py,
                "-X",
                "importtime",
                "-m",
                "ruleguard",
                "check",
                "--no-cache",
                "--manifest",
                manifest,
            ],
            capture_output=True,
            text=True,
        ).stderr
    heavy = []
    for line in out.splitlines():
        parts = line.split("|")
        if len(parts) == 3 and parts[1].strip().isdigit():
            heavy.append((int(parts[1]), parts[2].rstrip()))
    heavy.sort(reverse=True)
    print("largest cumulative imports during check (us):")
    for cumulative, name in heavy[:8]:
        print(f"  {cumulative:9d} {name}")


if __name__ == "__main__":
    main()
