"""Build-stage cost of the zero-order-hold equivalents of the demo (issue 9, speed).

Run from the repository root: ``python benchmarks/bench_modal_build.py``

Collects every plant block the demo project (fixtures/gimbal_demo, all
variants, one process) hands to the exact zero-order hold, then prints the
best (of 7 rounds) mean CPU microseconds per call (process time:
the machine is shared) of ``_modal_equivalent`` (the sampled-modes route,
discrete zeros included) and of ``discrete_zeros`` alone over those blocks,
and the milliseconds of ``build_loop`` per variant for every loop of the demo.
"""

from __future__ import annotations

import io
import os
import time
from pathlib import Path

ROOT = Path(__file__).resolve().parents[1]
DEMO = ROOT / "fixtures" / "gimbal_demo"


def per_call_us(fn, items, rounds: int = 7, min_time_s: float = 0.08) -> float:
    """Best of ``rounds`` mean CPU times per call (the machine is shared: CPU time, minimum)."""
    for it in items:
        fn(*it)  # warm-up
    best = float("inf")
    for _ in range(rounds):
        n = 0
        start = time.process_time()
        while True:
            for it in items:
                fn(*it)
            n += len(items)
            elapsed = time.process_time() - start
            if elapsed >= min_time_s:
                break
        best = min(best, 1e6 * elapsed / n)
    return best


def main() -> None:
    import ruleguard.models.assemble as assemble
    import ruleguard.models.discretize as disc
    from ruleguard.cli import run

    calls, builds = [], []
    modal, build = disc._modal_equivalent, assemble.build_loop

    def spy_modal(block, h, delay):
        calls.append((block, h, delay))
        return modal(block, h, delay)

    def spy_build(*args, **kwargs):
        builds.append((args, kwargs))
        return build(*args, **kwargs)

    disc._modal_equivalent = spy_modal
    assemble.build_loop = spy_build
    here = os.getcwd()
    try:
        os.chdir(DEMO)
        run(["check", "--no-cache", "-q", "--jobs", "1"], io.StringIO(), io.StringIO())
    finally:
        os.chdir(here)
        disc._modal_equivalent = modal
        assemble.build_loop = build
    dss = []
    for block, h, delay in calls:
        from ruleguard.models import modal_hold as mh

        whole, fraction = disc.split_delay(block.delay_s + float(delay), h)
        modes = mh.modal_hold(block, h, whole, fraction)
        if modes is not None:
            a, b, c, d, shifted = modes.real_realization()
            dss.append((disc.DiscreteStateSpace(a, b, c, d, h, whole, shifted),))
    print(f"{len(calls)} zero-order-hold calls from the demo, {len(builds)} variant builds")
    print(f"  _modal_equivalent  {per_call_us(modal, calls):9.0f} us/call")
    print(f"  discrete_zeros     {per_call_us(disc.discrete_zeros, dss):9.0f} us/call")
    per_build = per_call_us(build, [a for a, _ in builds]) / 1e3
    print(f"  build_loop         {per_build:9.2f} ms/variant")


if __name__ == "__main__":
    main()
