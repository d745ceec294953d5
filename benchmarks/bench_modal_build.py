"""Build-stage cost of the zero-order-hold equivalents of the demo (issue 9, speed).

Run from the repository root: ``python benchmarks/bench_modal_build.py``
(or ``python benchmarks/bench_modal_build.py --grid-project --baseline DIR``)

Collects every plant block the demo project (fixtures/gimbal_demo, all
variants, one process) hands to the exact zero-order hold, then prints the
best (of 7 rounds) mean CPU microseconds per call (process time:
the machine is shared) of ``_modal_equivalent`` (the sampled-modes route,
discrete zeros included) and of ``discrete_zeros`` alone over those blocks,
and the milliseconds of ``build_loop`` per variant for every loop of the demo.

``--grid-project`` times ``build_loop`` instead over the loops of the project
that ``benchmarks/bench_vs_grid.py`` builds (``--loops``, default 300: 10th-order
zero-pole-gain plants, ZOH at 10 kHz, one sample of delay, Tustin PI;
``--delay-samples 1.37`` gives them a fractional delay instead), in a
fresh process per round for this checkout and, with ``--baseline DIR``, for
the checkout in ``DIR`` (rounds alternate, so both see the same load on a
shared machine). It prints the CPU milliseconds per loop (median and best of
the rounds; and of the first pass of each process, which pays the lazy
imports as a check does) side by side, their ratio, how many open loops (zeros, poles,
gain) the two checkouts did not build bit for bit the same, and whether the
builds imported ``scipy.linalg`` (the QZ fallback of the discrete zeros).
"""

from __future__ import annotations

import argparse
import io
import json
import os
import statistics
import subprocess
import sys
import tempfile
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


# ------------------------------------------------- the grid project, side by side
ROUND_SCRIPT = r"""
import hashlib, json, os, sys, time
from pathlib import Path
from ruleguard.load.project import load_project
from ruleguard.models.assemble import build_loop
from ruleguard.models.families import loop_variants
project = load_project(Path(sys.argv[1]))
items = [(spec, v) for spec in project.loops for v in loop_variants(project, spec)]
digests = []
first = time.process_time()
for spec, v in items:  # warm-up (lazy imports, first calls), and the fingerprints
    r = build_loop(project, spec, v).open_loop.rational
    digests.append(hashlib.sha256(r.zeros.tobytes() + r.poles.tobytes()
                                  + float(r.gain).hex().encode()).hexdigest())
first = time.process_time() - first
best = float("inf")
for _ in range(int(sys.argv[2])):
    start = time.process_time()
    for spec, v in items:
        build_loop(project, spec, v)
    best = min(best, time.process_time() - start)
print(json.dumps({"ms_per_loop": 1e3 * best / len(items), "loops": len(items),
                  "first_pass_ms_per_loop": 1e3 * first / len(items),
                  "digests": digests, "scipy": "scipy.linalg" in sys.modules}))
"""


def _round(tree: Path, manifest: Path, repeats: int) -> dict:
    env = dict(os.environ, PYTHONPATH=str(tree), OPENBLAS_NUM_THREADS="1",
               OMP_NUM_THREADS="1", MKL_NUM_THREADS="1")
    # run in the project's folder: ``python -c`` puts the working directory
    # first on sys.path, which must not hold another checkout
    out = subprocess.run([sys.executable, "-c", ROUND_SCRIPT, str(manifest), str(repeats)],
                         env=env, check=True, capture_output=True, text=True,
                         cwd=manifest.parent).stdout
    return json.loads(out.strip().splitlines()[-1])


def grid_project(loops: int, baseline: Path | None, rounds: int, repeats: int,
                 delay_samples: float = 1.0) -> None:
    sys.path.insert(0, str(ROOT / "benchmarks"))
    import bench_vs_grid

    trees = {"now": ROOT}
    if baseline is not None:
        trees = {"baseline": baseline.resolve(), "now": ROOT}
    with tempfile.TemporaryDirectory() as tmp:
        manifest = bench_vs_grid.write_project(Path(tmp) / "project",
                                               bench_vs_grid.loop_parameters(loops))
        if delay_samples != 1.0:  # e.g. 1.37: a fractional delay, the augmented realization
            text = manifest.read_text().replace("delay_samples = 1.0",
                                                f"delay_samples = {delay_samples!r}")
            manifest.write_text(text)
        results: dict[str, list[dict]] = {name: [] for name in trees}
        for _ in range(rounds):  # alternate: both checkouts see the same machine load
            for name, tree in trees.items():
                results[name].append(_round(tree, manifest, repeats))
    print(f"build_loop over the {loops} loops of bench_vs_grid.py's project "
          f"(delay_samples = {delay_samples:g}) "
          f"(CPU ms per loop; {rounds} alternating rounds, best of {repeats} passes each)")
    medians = {}
    for name, rows in results.items():
        ms = [r["ms_per_loop"] for r in rows]
        medians[name] = statistics.median(ms)
        cold = statistics.median(r["first_pass_ms_per_loop"] for r in rows)
        print(f"  {name:<9} median {medians[name]:6.3f}  best {min(ms):6.3f}  first pass "
              f"(lazy imports included) {cold:6.3f}  ({trees[name]})")
    if baseline is not None:
        print(f"  ratio baseline / now (medians): {medians['baseline'] / medians['now']:.2f}")
        differ = sum(x != y for x, y in zip(results["baseline"][0]["digests"],
                                            results["now"][0]["digests"], strict=True))
        print(f"  open loops (zeros, poles, gain) not bit for bit the same: {differ} of "
              f"{results['now'][0]['loops']}")
    for name, rows in results.items():
        print(f"  {name}: scipy.linalg imported by the builds: {rows[0]['scipy']}")


if __name__ == "__main__":
    parser = argparse.ArgumentParser()
    parser.add_argument("--grid-project", action="store_true",
                        help="time build_loop on bench_vs_grid.py's project instead of the demo")
    parser.add_argument("--baseline", type=Path, help="another checkout to time side by side")
    parser.add_argument("--loops", type=int, default=300)
    parser.add_argument("--rounds", type=int, default=5)
    parser.add_argument("--repeats", type=int, default=3)
    parser.add_argument("--delay-samples", type=float, default=1.0,
                        help="the loops' delay_samples (1.0 in bench_vs_grid.py)")
    args = parser.parse_args()
    if args.grid_project:
        grid_project(args.loops, args.baseline, args.rounds, args.repeats, args.delay_samples)
    else:
        main()
