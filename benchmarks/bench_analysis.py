"""Time analyse_open_loop on typical loops of order 4, 12 and 30.

Run: ``python benchmarks/bench_analysis.py``. Prints milliseconds per call
(median of repeated runs, after one warm-up call that pays the scipy import)
for continuous and discrete loops, with and without a delay.
"""

from __future__ import annotations

import math
import statistics
import time

import numpy as np

from ruleguard.analysis.margins import analyse_open_loop
from ruleguard.analysis.openloop import OpenLoop
from ruleguard.models.lti import Factored


def typical_loop(order: int, rng: np.random.Generator, delay: bool, discrete: bool) -> OpenLoop:
    """A PI-type controller on a plant with a rigid mode and lightly damped resonances."""
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


def main() -> None:
    rng = np.random.default_rng(5)
    analyse_open_loop(typical_loop(4, rng, False, False))  # warm-up: imports
    print(f"{'order':>5} {'domain':>10} {'delay':>6} {'ms/call':>8} {'samples':>8}")
    for order in (4, 12, 30):
        for discrete in (False, True):
            for delay in (False, True):
                times = []
                for _ in range(15):
                    ol = typical_loop(order, rng, delay, discrete)
                    t0 = time.perf_counter()
                    analyse_open_loop(ol)
                    times.append(time.perf_counter() - t0)
                from ruleguard.analysis.contour import sample_contour

                n = sample_contour(ol).w.size
                print(f"{order:>5} {'discrete' if discrete else 'continuous':>10} "
                      f"{'yes' if delay else 'no':>6} {1e3 * statistics.median(times):8.1f} "
                      f"{n:8d}")


if __name__ == "__main__":
    main()
