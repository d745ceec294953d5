"""Measured speed of the sampled-data models (prints figures; not a timed test).

Run: ``python benchmarks/bench_discretize.py``

Prints milliseconds per call of
* ``zoh_equivalent`` for flexible-structure plants of order 2, 10, 30 and 50,
  without and with a fractional delay (and the accuracy of the result
  against the realization's own frequency response), with the route taken:
  "modal" (sampled modes in closed form, :mod:`ruleguard.models.modal_hold`)
  or "expm" (exponential of the augmented cascade realization, the fallback:
  these plants have a rigid-body pole at -0.5 rad/s sampled at 10 kHz, whose
  modal sum cancels). Then the same for servo plants with distinct,
  well-separated poles (slow and fast real poles, resonance pairs from 800 Hz),
  which take the modal route;
* ``discretize_block`` for a notch and a PID;
* ``quantized_model`` for a sampled PI + low-pass loop and for every loop of
  the demo project (first variant), in float32, q1.15 and q2.14.
"""

from __future__ import annotations

import math
import time
import warnings
from pathlib import Path

import numpy as np

from ruleguard.analysis.loop import BlockModel, LoopModel
from ruleguard.analysis.openloop import OpenLoop
from ruleguard.models.discretize import discretize_block, zoh_equivalent, zoh_state_space
from ruleguard.models.lti import Factored
from ruleguard.models.quantize import quantized_model

ROOT = Path(__file__).resolve().parents[1]


def per_call_ms(fn, min_time_s: float = 0.3) -> float:
    fn()  # warm-up (lazy imports)
    n = 0
    start = time.perf_counter()
    while True:
        fn()
        n += 1
        elapsed = time.perf_counter() - start
        if elapsed >= min_time_s and n >= 3:
            return 1e3 * elapsed / n


def flexible_plant(order: int, seed: int = 0) -> Factored:
    rng = np.random.default_rng(seed)
    m = max((order - 2) // 2, 0)
    wp = 2 * np.pi * np.sort(10 ** rng.uniform(1, 3.3, size=m))
    zp = 10 ** rng.uniform(-3, -1, size=m)
    wz = wp * 10 ** rng.uniform(-0.1, 0.1, size=m)
    zz = 10 ** rng.uniform(-3, -1, size=m)
    p = -zp * wp + 1j * wp * np.sqrt(1 - zp**2)
    z = -zz * wz + 1j * wz * np.sqrt(1 - zz**2)
    blk = Factored(np.concatenate([z, z.conj()]), np.concatenate([p, p.conj(), [-0.5, -5.0]]), 1.0)
    return blk.scaled(1.0 / abs(blk.evaluate(1j)[()]))


def servo_plant(order: int, seed: int = 0) -> Factored:
    """Slow and fast real poles and (order - 2) / 2 resonance/antiresonance pairs."""
    rng = np.random.default_rng(seed)
    m = max((order - 2) // 2, 0)
    fp = np.sort(10 ** rng.uniform(math.log10(800.0), math.log10(4000.0), m))
    zp = 10 ** rng.uniform(-1.7, -1.0, m)
    fz, zz = fp * rng.uniform(0.85, 0.97, m), zp * rng.uniform(0.5, 1.0, m)
    p = -zp * 2 * np.pi * fp + 1j * 2 * np.pi * fp * np.sqrt(1 - zp**2)
    z = -zz * 2 * np.pi * fz + 1j * 2 * np.pi * fz * np.sqrt(1 - zz**2)
    return Factored(np.concatenate([z, z.conj()]),
                    np.concatenate([p, p.conj(), [-5.0, -6000.0]]), 1e5)


def route(plant: Factored, h: float, delay: float) -> str:
    from ruleguard.models.discretize import _modal_equivalent

    return "modal" if _modal_equivalent(plant, h, delay) is not None else "expm"


def lowpass2(fc: float, zeta: float) -> Factored:
    w = 2 * math.pi * fc
    p = complex(-zeta * w, w * math.sqrt(1 - zeta**2))
    return Factored([], [p, p.conjugate()], w * w)


def sampled_loop(h: float = 1e-4) -> LoopModel:
    pi_cont = Factored([-2000.0], [0.0], 0.2)
    lp = lowpass2(100.0, 0.707)
    c, f = discretize_block(pi_cont, "tustin", h), discretize_block(lp, "tustin", h)
    plant = Factored([], [-2000.0], 2000.0 / 1.5)
    zoh = zoh_equivalent(plant, h, delay_s=h)
    return LoopModel(
        name="bench", sample_rate_hz=1 / h, open_loop=OpenLoop(c * f * zoh),
        controller=BlockModel("controller", "c", "pid", pi_cont, c, "tustin"),
        filters=(BlockModel("filter", "f", "lowpass2", lp, f, "tustin"),),
        plant=BlockModel("plant", "p", "transfer_function", plant, zoh, "zoh"),
        sensor=None, controller_path=c * f, total_delay_s=h, discretization={},
    )


def main() -> None:
    h = 1e-4
    for title, make in (("flexible plant", flexible_plant), ("servo plant", servo_plant)):
        print(f"zoh_equivalent ({title}, h = 1e-4 s)")
        print(f"{'order':>6} {'delay':>10} {'route':>6} {'ms/call':>9} {'max rel. dev.':>14}")
        for order in (2, 10, 30, 50):
            plant = make(order)
            for frac in (0.0, 0.37):
                ms = per_call_ms(lambda plant=plant, frac=frac: zoh_equivalent(plant, h, frac * h))
                with warnings.catch_warnings():
                    warnings.simplefilter("ignore")
                    zd = zoh_equivalent(plant, h, frac * h)
                dss = zoh_state_space(plant, h, frac * h)
                w = np.geomspace(1.0, math.pi / h, 400)
                dev = np.max(np.abs(zd.response(w) / dss.response(w) - 1))
                label = "whole" if frac == 0 else f"{frac} h"
                print(f"{order:>6} {label:>10} {route(plant, h, frac * h):>6} {ms:>9.3f} "
                      f"{dev:>14.2e}")

    print("\ndiscretize_block")
    notch = Factored([complex(-10, 2 * math.pi * 1800), complex(-10, -2 * math.pi * 1800)],
                [complex(-300, 2 * math.pi * 1800), complex(-300, -2 * math.pi * 1800)], 1.0)
    pid = Factored([-100.0, -2000.0], [0.0, -4000.0], 3.0)
    for name, blk, method, pw in (
        ("notch tustin_prewarp", notch, "tustin_prewarp", 2 * math.pi * 1800),
        ("pid tustin", pid, "tustin", None),
        ("pid backward_euler", pid, "backward_euler", None),
    ):
        ms = per_call_ms(lambda blk=blk, method=method, pw=pw: discretize_block(blk, method, h, pw))
        print(f"  {name:<24} {ms:8.4f} ms/call")

    print("\nquantized_model")
    model = sampled_loop()
    for fmt in ("float32", "q1.15", "q2.14"):
        ms = per_call_ms(lambda fmt=fmt: quantized_model(model, fmt))
        print(f"  PI + low-pass loop {fmt:<8} {ms:8.3f} ms/call")
    manifest = ROOT / "fixtures" / "gimbal_demo" / "ruleguard.toml"
    if manifest.exists():
        from ruleguard.errors import LoopNotAnalysable
        from ruleguard.load.project import load_project
        from ruleguard.models.assemble import build_loop
        from ruleguard.models.families import loop_variants

        project = load_project(manifest)
        for spec in project.loops:
            if spec.sample_rate_hz is None:
                continue
            try:
                built = build_loop(project, spec, loop_variants(project, spec)[0])
            except LoopNotAnalysable:
                continue
            ms = per_call_ms(lambda built=built: quantized_model(built, "q1.15"), 0.1)
            print(f"  demo {spec.name:<22} q1.15    {ms:8.3f} ms/call")


if __name__ == "__main__":
    main()
