"""Accuracy figures: ruleguard against outside references (prints measured errors).

Run: ``python benchmarks/bench_accuracy.py``  (about 15 s on 2 cores)

The tests assert bounds; this script prints the measured figures behind them,
so a closing note or a release can quote numbers rather than "passes":

1. Closed forms. ``L = K/(s+1)^3``: the phase crossover is at ``w = sqrt(3)``
   (``-3 atan w = -pi``) where ``|L| = K/8``, so ``GM = 20 log10(8/K)`` dB;
   the gain crossover solves ``(1 + w^2)^(3/2) = K``, so
   ``w_c = sqrt(K^(2/3) - 1)``, ``PM = 180 - 3 atan(w_c)`` deg and the delay
   margin is ``PM(rad) / w_c``. ``L = k exp(-s tau)/s``: ``w_c = k``,
   ``PM = pi/2 - k tau`` rad, the phase crossover ``w = pi/(2 tau)`` gives
   ``GM = 20 log10(pi/(2 tau k))`` dB, the delay margin ``(pi/2 - k tau)/k``.
2. The demo's tilt current and heater loops recomputed independently with
   ``scipy.signal.cont2discrete`` and ``scipy.optimize.brentq``
   (tests/reference/test_demo_independent.py).
3. Zero-order-hold equivalents of order-10 resonant plants (the kind of
   benchmarks/bench_vs_grid.py) and of flexible plants of order 10, 30 and 50,
   against a 50-digit mpmath modal computation (Franklin, Powell & Workman,
   1998, section 4.3; tests/test_discretize.py).
4. Stability verdicts of seeded random loops against closed-loop roots: the
   suites of tests/reference print their own counts.
"""

from __future__ import annotations

import io
import json
import math
import sys
import time
from pathlib import Path

import numpy as np

ROOT = Path(__file__).resolve().parents[1]
sys.path[:0] = [str(ROOT), str(ROOT / "benchmarks"), str(ROOT / "tests"),
                str(ROOT / "tests" / "reference")]


def _closed_forms() -> None:
    from ruleguard.analysis.margins import analyse_open_loop
    from ruleguard.analysis.openloop import OpenLoop
    from ruleguard.models.lti import Factored

    errors = {"gain margin (dB)": [], "phase margin (deg)": [], "crossover (rel)": [],
              "delay margin (rel)": []}
    cases = 0
    for k in (1.5, 2.0, 4.0, 6.0, 7.5):
        m = analyse_open_loop(OpenLoop(Factored(np.array([]), np.full(3, -1.0), k))).margins
        wc = math.sqrt(k ** (2.0 / 3.0) - 1.0)
        pm = 180.0 - 3.0 * math.degrees(math.atan(wc))
        errors["gain margin (dB)"].append(abs(m.gain_margin_db - 20 * math.log10(8.0 / k)))
        errors["phase margin (deg)"].append(abs(m.phase_margin_deg - pm))
        errors["crossover (rel)"].append(abs(m.crossover_hz * 2 * math.pi / wc - 1))
        errors["delay margin (rel)"].append(abs(m.delay_margin_s / (math.radians(pm) / wc) - 1))
        cases += 1
    for k, tau in ((1.0, 0.5), (2.0, 0.1), (0.3, 3.0)):
        m = analyse_open_loop(OpenLoop(Factored(np.array([]), np.array([0.0]), k, tau))).margins
        pm = math.degrees(math.pi / 2 - k * tau)
        errors["gain margin (dB)"].append(
            abs(m.gain_margin_db - 20 * math.log10(math.pi / (2 * tau * k))))
        errors["phase margin (deg)"].append(abs(m.phase_margin_deg - pm))
        errors["crossover (rel)"].append(abs(m.crossover_hz * 2 * math.pi / k - 1))
        errors["delay margin (rel)"].append(
            abs(m.delay_margin_s / ((math.pi / 2 - k * tau) / k) - 1))
        cases += 1
    print(f"1. closed forms, {cases} loops (K/(s+1)^3 and k e^(-s tau)/s): largest error")
    for name, vals in errors.items():
        print(f"   {name:<22} {max(vals):.1e}")


def _demo_against_scipy() -> None:
    from test_demo_independent import DEMO, HEATER, TILT_CURRENT, _margins, _nominal, _pi_loop

    from ruleguard.cli import run

    out, err = io.StringIO(), io.StringIO()
    code = run(["check", "--manifest", str(DEMO), "--format", "json", "--no-cache",
                "--as-of", "2026-12-01"], stdout=out, stderr=err)
    if code not in (0, 1):
        raise SystemExit(err.getvalue())
    report = json.loads(out.getvalue())
    loops = {"tilt.current": TILT_CURRENT, "housing.heater": HEATER}
    print("2. demo loops against scipy.signal.cont2discrete + brentq:")
    print(f"   {'loop':<16}{'PM diff deg':>13}{'f_c rel':>10}{'GM diff dB':>12}{'f_180 rel':>11}")
    for name, loop in loops.items():
        pm, fc, gm, f180 = _margins(*_pi_loop(**loop), loop["h"])
        got = _nominal(report, name)["margins"]
        print(f"   {name:<16}{abs(got['phase_margin_deg'] - pm):>13.1e}"
              f"{abs(got['crossover_hz'] / fc - 1):>10.1e}"
              f"{abs(got['gain_margin_db'] - gm):>12.1e}"
              f"{abs(got['gain_margin_hz'] / f180 - 1):>11.1e}")


def _zoh_against_mpmath() -> None:
    from bench_discretize import flexible_plant  # the plants of TestZohHighOrder
    from test_discretize import modal_zoh_response_mp
    from test_modal_hold import resonant_plant

    from ruleguard.models.discretize import split_delay, zoh_equivalent

    h = 1e-4
    w = np.geomspace(1.0, math.pi / h, 60)
    z = np.exp(1j * w * h)
    print("3. zero-order hold against 50-digit mpmath (60 frequencies each, h = 1e-4 s):")
    groups = {"resonant, order 10": [(resonant_plant(np.random.default_rng(s)), d)
                                     for s in range(6) for d in (0.0, 0.37, 1.0, 2.6)]}
    for order, seed in ((10, 1), (30, 2), (50, 3)):
        groups[f"flexible, order {order}"] = [(flexible_plant(order, seed), d) for d in (0.0, 0.37)]
    for name, cases in groups.items():
        worst = []
        for blk, samples in cases:
            d, f = split_delay(samples * h, h)
            ref = modal_zoh_response_mp(blk, h, f * h, z) * z ** (-d)
            worst.append(float(np.max(np.abs(zoh_equivalent(blk, h, samples * h).response(w)
                                              / ref - 1))))
        print(f"   {name:<20} {len(cases):>3} plants   relative error median "
              f"{np.median(worst):.1e}, max {max(worst):.1e}")


def _verdicts() -> None:
    import test_random_loops as rl
    import test_random_sampled_loops as rs

    print("4. stability verdicts against closed-loop roots (seeded random loops):")
    for fn in (rl.test_random_continuous_verdicts_against_eigenvalues,
               rl.test_random_discrete_verdicts_against_numpy_roots,
               rl.test_random_delay_loops_against_pade_eigenvalues,
               rs.test_sampled_verdicts_match_closed_loop_roots):
        sys.stdout.write("   ")
        fn()


def main() -> None:
    for part in (_closed_forms, _demo_against_scipy, _zoh_against_mpmath, _verdicts):
        t0 = time.perf_counter()
        part()
        print(f"   ({time.perf_counter() - t0:.1f} s)")


if __name__ == "__main__":
    main()
