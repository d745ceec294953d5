"""What fix hints cost: a check of the demo project with and without them.

Run: ``python benchmarks/bench_hints.py``. Prints the wall time (median of
three runs, no cache) of ``api.check`` on ``fixtures/gimbal_demo`` with the
hints computed and with the hinted rules list emptied (no hint computed),
their ratio, and how many findings carry a hint.
"""

from __future__ import annotations

import statistics
import time
from pathlib import Path

from ruleguard import api
from ruleguard.rules import engine

DEMO = Path(__file__).resolve().parents[1] / "fixtures" / "gimbal_demo" / "ruleguard.toml"


def _timed(runs: int = 3) -> tuple[float, int]:
    times, hinted = [], 0
    for _ in range(runs):
        start = time.perf_counter()
        report = api.check(DEMO)
        times.append(time.perf_counter() - start)
        hinted = sum(1 for f in report.findings if f.hint is not None)
    return statistics.median(times), hinted


def main() -> None:
    api.check(DEMO)  # warm-up: imports
    with_hints, hinted = _timed()
    saved = engine.HINTED_RULES
    engine.HINTED_RULES = ()
    try:
        without, _ = _timed()
    finally:
        engine.HINTED_RULES = saved
    print(f"demo check with hints:    {with_hints:.3f} s ({hinted} findings with a hint)")
    print(f"demo check without hints: {without:.3f} s")
    print(f"ratio with/without:       {with_hints / without:.2f}")


if __name__ == "__main__":
    main()
