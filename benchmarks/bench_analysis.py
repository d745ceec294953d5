"""Time analyse_open_loop, baseline checkout against this one, side by side.

Run: ``python benchmarks/bench_analysis.py [--baseline /work/wt/baseline]
[--loops 300] [--rounds 5]``.

Two sets of open loops, captured from the real pipeline (``ruleguard check
--format json --no-cache --jobs 1``, every call of ``analyse_open_loop``
recorded):

* ``project``: the project of benchmarks/bench_vs_grid.py (``--loops``
  discrete 10th-order loops at 10 kHz);
* ``demo``: fixtures/gimbal_demo (continuous, discrete, measured plants,
  cascades, variants);

and ``typical``: PI-type loops of order 4, 12 and 30, continuous and
discrete, with and without a delay (built here).

Each checkout runs in its own subprocess (its ``ruleguard`` first on
``sys.path``); the rounds alternate baseline / now and the medians of the
CPU milliseconds per call (``time.process_time``: the machine is shared,
and CPU time is less disturbed by the other processes than wall time) are
printed side by side with their ratio. The same
subprocesses return every result (``repr`` of each ``LoopAnalysis``); the
last lines give the number of results that are not byte-identical and the
largest relative change of any number in them.

Without ``--baseline`` (or when the folder does not exist), only this
checkout is timed.
"""

from __future__ import annotations

import argparse
import json
import math
import os
import re
import statistics
import subprocess
import sys
import tempfile
from pathlib import Path

ROOT = Path(__file__).resolve().parents[1]


# ------------------------------------------------------------------ worker side
def typical_loop(order: int, rng, delay: bool, discrete: bool):
    """A PI-type controller on a plant with a rigid mode and lightly damped resonances."""
    import numpy as np

    from ruleguard.analysis.openloop import OpenLoop
    from ruleguard.models.lti import Factored

    poles = [0.0, -2.0 * math.pi * 5.0]           # integrator, controller roll-off
    zeros = [-2.0 * math.pi * 1.0]                 # PI zero
    while len(poles) < order:
        if order - len(poles) >= 2:
            wn = 2 * math.pi * float(np.exp(rng.uniform(np.log(20), np.log(400))))
            zeta = float(rng.uniform(0.005, 0.05))
            p = complex(-zeta * wn, wn * math.sqrt(1 - zeta**2))
            poles += [p, p.conjugate()]
            wz = wn * float(rng.uniform(0.8, 1.2))
            z = complex(-zeta * wz, wz * math.sqrt(1 - zeta**2))
            if len(zeros) + 2 < len(poles):
                zeros += [z, z.conjugate()]
        else:
            poles.append(-2 * math.pi * float(rng.uniform(50, 500)))
    block = Factored(zeros, poles, 1.0)
    gain = 1.0 / abs(block.response(np.array([2 * math.pi * 2.0]))[0])
    if not discrete:
        return OpenLoop(Factored(zeros, poles, gain, 0.002 if delay else 0.0))
    h = 1.0 / 4000.0
    zp = np.exp(np.asarray(poles, dtype=complex) * h)
    zz = np.exp(np.asarray(zeros, dtype=complex) * h)
    factored = Factored(zz, zp, 1.0, sample_time_s=h)
    if delay:
        factored = factored * Factored([], [0.0, 0.0], 1.0, sample_time_s=h)
    g = 1.0 / abs(factored.response(np.array([2 * math.pi * 2.0]))[0])
    return OpenLoop(factored.scaled(g))


def _captured(manifest: Path) -> list:
    """The open loops the pipeline hands to analyse_open_loop for ``manifest``."""
    import io

    import ruleguard.analysis.margins as margins
    from ruleguard.cli import run

    seen = []
    real = margins.analyse_open_loop

    def recording(open_loop):
        seen.append(open_loop)
        return real(open_loop)

    margins.analyse_open_loop = recording
    try:
        run(["check", "--format", "json", "--no-cache", "--jobs", "1", "--manifest",
             str(manifest)], io.StringIO(), io.StringIO())
    finally:
        margins.analyse_open_loop = real
    return seen


def worker(folder: Path, rounds: int) -> None:
    import time

    import numpy as np

    from ruleguard.analysis.margins import analyse_open_loop

    sets = {
        "project": _captured(folder / "project" / "ruleguard.toml"),
        "demo": _captured(ROOT / "fixtures" / "gimbal_demo" / "ruleguard.toml"),
    }
    rng = np.random.default_rng(5)
    sets["typical"] = [typical_loop(order, rng, delay, discrete)
                       for order in (4, 12, 30) for discrete in (False, True)
                       for delay in (False, True) for _ in range(5)]
    results = {name: [repr(analyse_open_loop(ol)) for ol in loops]
               for name, loops in sets.items()}
    times = {name: [] for name in sets}
    for _ in range(rounds):
        for name, loops in sets.items():
            t0 = time.process_time()  # CPU time: less disturbed by other processes
            for ol in loops:
                analyse_open_loop(ol)
            times[name].append((time.process_time() - t0) / len(loops))
    json.dump({"times": times, "results": results, "sizes": {k: len(v) for k, v in sets.items()}},
              sys.stdout)


# ------------------------------------------------------------------ parent side
_NUMBER = re.compile(r"-?(?:\d+\.\d*|\.\d+|\d+)(?:[eE][-+]?\d+)?|-?inf|nan")


def _max_relative_change(a: str, b: str) -> float:
    """Largest relative difference of the numbers in two reprs (inf: different shape)."""
    xa, xb = _NUMBER.findall(a), _NUMBER.findall(b)
    if len(xa) != len(xb) or _NUMBER.sub("#", a) != _NUMBER.sub("#", b):
        return math.inf
    worst = 0.0
    for sa, sb in zip(xa, xb, strict=True):
        fa, fb = float(sa), float(sb)
        if fa == fb or (math.isnan(fa) and math.isnan(fb)):
            continue
        worst = max(worst, abs(fa - fb) / max(abs(fa), abs(fb)))
    return worst


def _run_worker(checkout: Path, folder: Path, rounds: int) -> dict:
    env = dict(os.environ, PYTHONPATH=str(checkout), OPENBLAS_NUM_THREADS="1",
               OMP_NUM_THREADS="1", MKL_NUM_THREADS="1")
    out = subprocess.run([sys.executable, str(Path(__file__).resolve()), "--worker",
                          str(folder), "--rounds", str(rounds)],
                         env=env, check=True, capture_output=True, text=True, cwd=checkout)
    return json.loads(out.stdout)


def main() -> None:
    parser = argparse.ArgumentParser()
    parser.add_argument("--baseline", default="/work/wt/baseline")
    parser.add_argument("--loops", type=int, default=300)
    parser.add_argument("--rounds", type=int, default=3, help="timed rounds per subprocess")
    parser.add_argument("--repeats", type=int, default=3, help="subprocess pairs, alternating")
    parser.add_argument("--worker", metavar="FOLDER", help=argparse.SUPPRESS)
    args = parser.parse_args()
    if args.worker:
        worker(Path(args.worker), args.rounds)
        return
    sys.path.insert(0, str(ROOT / "benchmarks"))
    from bench_vs_grid import loop_parameters, write_project

    checkouts = {"now": ROOT}
    base = Path(args.baseline)
    if base.is_dir() and base.resolve() != ROOT:
        checkouts = {"baseline": base, "now": ROOT}
    with tempfile.TemporaryDirectory() as tmp:
        folder = Path(tmp)
        write_project(folder / "project", loop_parameters(args.loops))
        runs: dict[str, list[dict]] = {k: [] for k in checkouts}
        for _ in range(args.repeats):
            for name, path in checkouts.items():  # alternating
                runs[name].append(_run_worker(path, folder, args.rounds))
    sizes = runs["now"][0]["sizes"]
    print("analyse_open_loop, CPU ms per call (median of "
          f"{args.repeats} x {args.rounds} rounds, alternating):")
    head = f"  {'set':<8} {'calls':>6}" + "".join(f" {k:>9}" for k in checkouts)
    print(head + ("    ratio" if len(checkouts) == 2 else ""))
    for name, n in sizes.items():
        med = {k: statistics.median(t for r in rs for t in r["times"][name])
               for k, rs in runs.items()}
        line = f"  {name:<8} {n:>6}" + "".join(f" {1e3 * med[k]:9.3f}" for k in checkouts)
        if len(checkouts) == 2:
            line += f" {med['baseline'] / med['now']:8.2f}x"
        print(line)
    if len(checkouts) == 2:
        for name in sizes:
            a = runs["baseline"][0]["results"][name]
            b = runs["now"][0]["results"][name]
            differ = [i for i, (x, y) in enumerate(zip(a, b, strict=True)) if x != y]
            worst = max((_max_relative_change(a[i], b[i]) for i in differ), default=0.0)
            print(f"  results {name}: {len(differ)} of {len(a)} not byte-identical, "
                  f"max relative change {worst:.3g}")


if __name__ == "__main__":
    main()
