"""ruleguard against the grid script an engineer would write instead (prints figures).

Run: ``python benchmarks/bench_vs_grid.py [--loops 300] [--no-subprocess]
[--batching ROUNDS] [--timings] [--baseline DIR [--rounds 11]]``

Builds, in a temporary folder, a project of ``--loops`` discrete loops at
10 kHz (each: a 10th-order plant with four lightly damped resonance pairs
seen through a zero-order hold, one sample of computation delay, a PI
controller discretized by Tustin), then runs in one process run:

* the naive script: per loop ``scipy.signal.cont2discrete`` (``"zoh"``) on a
  state-space realization of the plant, the delay as ``z^-1``, the PI by the
  bilinear rule, the response of the product on a 20,000-point logarithmic
  grid up to the Nyquist frequency, and the margins read off that grid;
* ruleguard: the real ``ruleguard check --format json --no-cache`` on the
  same project, through :func:`ruleguard.cli.run` in this process.

With ``--timings``, the check is run once more with ``--timings`` and its
tables printed: this process's stages, and how the worker processes spent
their time (build, analysis, rules, other, idle). Its workers are forked
from this process, whose imports are paid, as for the first ratio.

With ``--baseline DIR``, the check also runs as a fresh process
(``python -m ruleguard``) with this checkout and with ``DIR`` (another
checkout, e.g. ``git worktree add /tmp/before <commit>``) first on
``PYTHONPATH``, alternating, ``--rounds`` times at the default ``--jobs``
and at ``--jobs 1``: the medians side by side, their ratio and whether the
two checkouts printed the same report.

The stage times are followed by the cost per validated value of the
schema check alone: the compiled predicate (what a valid value costs) and
jsonschema (what the route of an invalid value costs).

Both are warmed up first on a one-loop project (imports paid), so the first
ratio compares work per loop. The end-to-end ratio runs both as fresh
processes (start-up included). The last line compares the phase margins the
two give: the grid script's error (its companion-form realization from
``zpk2ss``, polynomial coefficients from ``ss2tf`` and a finite grid) is the
price of its speed; ruleguard's ZOH of these plants agrees with a 50-digit
modal computation to about 1e-12 (tests/test_modal_hold.py).
"""

from __future__ import annotations

import argparse
import io
import json
import math
import os
import subprocess
import sys
import tempfile
import time
from pathlib import Path

import numpy as np

ROOT = Path(__file__).resolve().parents[1]
SAMPLE_RATE_HZ = 10_000.0
GRID_POINTS = 20_000
CROSSOVER_HZ = 100.0


# ------------------------------------------------------------------ the project
def loop_parameters(n_loops: int, seed: int = 9) -> list[dict]:
    """Random plants (order 10) and PI gains giving a crossover near CROSSOVER_HZ."""
    rng = np.random.default_rng(seed)
    loops = []
    wc = 2 * math.pi * CROSSOVER_HZ
    for i in range(n_loops):
        res_hz = np.sort(10 ** rng.uniform(math.log10(800.0), math.log10(4000.0), 4))
        res_damp = 10 ** rng.uniform(-1.7, -1.0, 4)
        anti_hz = res_hz * rng.uniform(0.85, 0.97, 4)   # collocated: antiresonance below
        anti_damp = res_damp * rng.uniform(0.5, 1.0, 4)
        slow = -float(rng.uniform(2.0, 20.0))             # mechanical pole (rad/s)
        fast = -float(rng.uniform(4000.0, 9000.0))        # electrical pole (rad/s)
        zeros = [complex(-z * 2 * math.pi * f, 2 * math.pi * f * math.sqrt(1 - z * z))
                 for f, z in zip(anti_hz, anti_damp, strict=True)]
        poles = [complex(-z * 2 * math.pi * f, 2 * math.pi * f * math.sqrt(1 - z * z))
                 for f, z in zip(res_hz, res_damp, strict=True)]
        zc = np.array(zeros + [z.conjugate() for z in zeros])
        pc = np.array(poles + [p.conjugate() for p in poles] + [slow, fast])
        s = 1j * wc
        shape = np.prod(s - zc) / np.prod(s - pc)
        ki_over_kp = wc / float(rng.uniform(4.0, 8.0))
        kp = 1.0
        pi_resp = kp * (1 + ki_over_kp / s)
        gain = float(1.0 / abs(shape * pi_resp))
        loops.append({
            "name": f"axis{i:03d}.speed",
            "plant": f"stage{i:03d}",
            "gain": gain, "slow": slow, "fast": fast,
            "zeros": list(zip(anti_hz.tolist(), anti_damp.tolist(), strict=True)),
            "poles": list(zip(res_hz.tolist(), res_damp.tolist(), strict=True)),
            "kp": kp, "ki": kp * ki_over_kp,
        })
    return loops


def write_project(folder: Path, loops: list[dict]) -> Path:
    """The manifest, one plant registry and one firmware file per loop."""
    (folder / "models").mkdir(parents=True, exist_ok=True)
    (folder / "firmware").mkdir(exist_ok=True)
    lines = ['[project]', 'name = "grid-comparison"', 'ruleset = "motion"',
             'plants = ["models/plants.toml"]', '']
    plants = []
    for lp in loops:
        lines += ['[[loops]]', f'name = "{lp["name"]}"', f'plant = "{lp["plant"]}"',
                  f'controller = {{ file = "firmware/{lp["plant"]}.toml", path = "speed" }}',
                  f'sample_rate_hz = {SAMPLE_RATE_HZ!r}', 'delay_samples = 1.0', '']
        pairs = ", ".join(f"{{ freq_hz = {f!r}, damping = {z!r} }}" for f, z in lp["zeros"])
        ppairs = ", ".join(f"{{ freq_hz = {f!r}, damping = {z!r} }}" for f, z in lp["poles"])
        plants += [f'[plants.{lp["plant"]}]', 'kind = "zero_pole_gain"',
                   f'gain = {lp["gain"]!r}', f'zeros = [{pairs}]',
                   f'poles = [{lp["slow"]!r}, {lp["fast"]!r}, {ppairs}]', '']
        (folder / "firmware" / f'{lp["plant"]}.toml').write_text(
            '[speed]\nkind = "pid"\nform = "parallel"\n'
            f'kp = {lp["kp"]!r}\nki = {lp["ki"]!r}\nkd = 0.0\ndiscretization = "tustin"\n')
    (folder / "models" / "plants.toml").write_text("\n".join(plants))
    manifest = folder / "ruleguard.toml"
    manifest.write_text("\n".join(lines))
    return manifest


# ------------------------------------------------------------------ the naive script
NAIVE_SCRIPT = r'''
import json, math, sys
import numpy as np
import scipy.signal as sig

def naive_margins(lp, fs=%(fs)r, points=%(points)d):
    h = 1.0 / fs
    zeros = []
    for f, z in lp["zeros"]:
        w = 2 * math.pi * f
        zeros += [complex(-z * w, w * math.sqrt(1 - z * z))]
    poles = [lp["slow"], lp["fast"]]
    for f, z in lp["poles"]:
        w = 2 * math.pi * f
        poles += [complex(-z * w, w * math.sqrt(1 - z * z))]
    zeros = zeros + [z.conjugate() for z in zeros]
    poles = poles + [p.conjugate() for p in poles if isinstance(p, complex)]
    a, b, c, d = sig.zpk2ss(zeros, poles, lp["gain"])
    ad, bd, cd, dd, _ = sig.cont2discrete((a, b, c, d), h, method="zoh")
    num, den = sig.ss2tf(ad, bd, cd, dd)
    num = np.polymul(num[0], [1.0])               # plant
    den = np.polymul(den, [1.0, 0.0])             # one sample of delay: z^-1
    cnum, cden, _ = sig.cont2discrete(([lp["kp"], lp["ki"]], [1.0, 0.0]), h, method="bilinear")
    w = np.geomspace(2 * math.pi * 0.1, math.pi * fs, points)
    _, gz = sig.freqz(num, den, worN=w * h)
    _, cz = sig.freqz(np.ravel(cnum), cden, worN=w * h)
    L = gz * cz
    mag = np.abs(L)
    phase = np.unwrap(np.angle(L))
    out = {"phase_margin_deg": None, "crossover_hz": None, "gain_margin_db": None}
    idx = np.nonzero((mag[:-1] >= 1) & (mag[1:] < 1))[0]
    if idx.size:
        i = idx[0]
        t = math.log(mag[i]) / (math.log(mag[i]) - math.log(mag[i + 1]))
        ph = phase[i] + t * (phase[i + 1] - phase[i])
        out["phase_margin_deg"] = float((math.degrees(ph) + 180.0 + 180.0) %% 360.0 - 180.0)
        out["crossover_hz"] = float(w[i] + t * (w[i + 1] - w[i])) / (2 * math.pi)
    k = np.round((phase + math.pi) / (2 * math.pi))
    g = phase + math.pi - 2 * math.pi * k
    jdx = np.nonzero(np.sign(g[:-1]) != np.sign(g[1:]))[0]
    jdx = jdx[np.abs(g[jdx]) < 1.0]
    if jdx.size:
        out["gain_margin_db"] = float(-20 * np.log10(mag[jdx]).max())
    out["sensitivity_peak_db"] = float(20 * np.log10(np.max(1 / np.abs(1 + L))))
    return out

if __name__ == "__main__":
    loops = json.load(open(sys.argv[1]))
    json.dump([naive_margins(lp) for lp in loops], sys.stdout)
'''


def naive_namespace() -> dict:
    ns: dict = {"__name__": "naive_grid"}
    exec(NAIVE_SCRIPT % {"fs": SAMPLE_RATE_HZ, "points": GRID_POINTS}, ns)  # our own text
    return ns


# ------------------------------------------------------------------ running
def _check(manifest: Path, *extra: str) -> tuple[int, str, str]:
    """``ruleguard check --format json --no-cache`` in this process: (code, stdout, stderr)."""
    from ruleguard.cli import run

    out, err = io.StringIO(), io.StringIO()
    code = run(["check", "--format", "json", "--no-cache", *extra, "--manifest", str(manifest)],
               out, err)
    if code not in (0, 1):
        raise SystemExit(f"ruleguard check failed ({code}): {err.getvalue()}")
    return code, out.getvalue(), err.getvalue()


def run_ruleguard(manifest: Path) -> tuple[int, dict]:
    code, out, _ = _check(manifest)
    return code, json.loads(out)


def stage_times(manifest: Path) -> dict[str, float]:
    """Seconds per stage of the same check, run stage by stage (where the time goes)."""
    from ruleguard.load.project import load_project
    from ruleguard.load.rulesets import load_ruleset
    from ruleguard.pipeline import analyse_loop
    from ruleguard.rules.engine import evaluate

    out = {}
    start = time.perf_counter()
    project = load_project(manifest)
    ruleset = load_ruleset(project.root, project.ruleset, project.ruleset_location)
    out["load and validate inputs"] = time.perf_counter() - start
    start = time.perf_counter()
    contexts = [analyse_loop(project, spec).context for spec in project.loops]
    out["build models, analyse"] = time.perf_counter() - start
    start = time.perf_counter()
    evaluate(contexts, ruleset)
    out["evaluate rules"] = time.perf_counter() - start
    return out


def validation_times(manifest: Path) -> tuple[int, float, float] | None:
    """(documents, s/document by the compiled predicate, s/document by jsonschema)
    for the values the load validates (None for code without the predicate)."""
    from ruleguard.load import validation
    from ruleguard.load.project import load_project

    real = getattr(validation, "passes", None)
    if real is None:
        return None
    seen: list = []

    def recording(name, value):
        seen.append((name, value))
        return real(name, value)

    validation.passes = recording
    try:
        load_project(manifest)
    finally:
        validation.passes = real
    from jsonschema import Draft202012Validator

    from ruleguard.load.schemas import load_schema

    checkers = {name: Draft202012Validator(load_schema(name)) for name, _ in seen}
    start = time.perf_counter()
    assert all(real(name, value) for name, value in seen)
    fast = time.perf_counter() - start
    start = time.perf_counter()
    assert not any(list(checkers[name].iter_errors(value)) for name, value in seen)
    full = time.perf_counter() - start
    return len(seen), fast / len(seen), full / len(seen)


def print_timings(manifest: Path) -> None:
    """The ``--timings`` tables of one more check of the project (every core)."""
    _, _, err = _check(manifest, "--timings")
    print("ruleguard check --timings (seconds):")
    print("".join(f"  {line}\n" for line in err.splitlines()), end="")


def compare_batching(manifest: Path, rounds: int, n: int) -> None:
    """Median wall time of the check with ``MAX_BATCH = 1`` (one chunk a task)
    and with the default, alternating in this process; the reports must agree."""
    import statistics

    from ruleguard import executors

    default = executors.MAX_BATCH
    times: dict[int, list[float]] = {1: [], default: []}
    reports = set()
    try:
        for _ in range(rounds):
            for limit in (1, default):
                executors.MAX_BATCH = limit
                seconds, (_, report) = timed(run_ruleguard, manifest)
                times[limit].append(seconds)
                reports.add(json.dumps(report, sort_keys=True))
    finally:
        executors.MAX_BATCH = default
    one, many = statistics.median(times[1]), statistics.median(times[default])
    print(f"pool tasks, median of {rounds} alternating rounds (ms/loop): one chunk a task "
          f"{1e3 * one / n:.2f}, up to {default} chunks a task {1e3 * many / n:.2f}, "
          f"ratio {one / many:.2f}, reports identical: {len(reports) == 1}")


def compare_checkouts(manifest: Path, baseline: Path, rounds: int, n: int) -> None:
    """The check as a fresh process, this checkout against ``baseline``, alternating.

    ``python -m ruleguard check --format json --no-cache`` with each checkout
    first on ``PYTHONPATH``, at the default ``--jobs`` and at ``--jobs 1``,
    ``rounds`` times each; prints the medians, their ratio and whether the
    reports of the two checkouts are byte-identical.
    """
    import statistics

    sides = {"baseline": baseline, "now": ROOT}
    print(f"end to end against {baseline}, fresh processes, {rounds} alternating rounds, "
          "median s (ms/loop):")
    for jobs in ((), ("--jobs", "1")):
        seconds: dict[str, list[float]] = {side: [] for side in sides}
        reports: dict[str, set[bytes]] = {side: set() for side in sides}
        for _ in range(rounds):
            for side, checkout in sides.items():
                env = dict(os.environ, PYTHONPATH=str(checkout))
                start = time.perf_counter()
                done = subprocess.run([sys.executable, "-m", "ruleguard", "check", "--format",
                                       "json", "--no-cache", *jobs, "--manifest", str(manifest)],
                                      capture_output=True, env=env, cwd=str(checkout))
                seconds[side].append(time.perf_counter() - start)
                if done.returncode not in (0, 1):
                    raise SystemExit(f"{side}: ruleguard check failed ({done.returncode}): "
                                     f"{done.stderr.decode(errors='replace')}")
                reports[side].add(done.stdout)
        med = {side: statistics.median(values) for side, values in seconds.items()}
        label = " ".join(jobs) or "default --jobs"
        same = len(reports["baseline"] | reports["now"]) == 1
        print(f"  {label:<15} baseline {med['baseline']:6.3f} ({1e3 * med['baseline'] / n:5.2f})"
              f"  now {med['now']:6.3f} ({1e3 * med['now'] / n:5.2f})"
              f"  ratio {med['baseline'] / med['now']:5.2f}x  reports identical: {same}")


def timed(fn, *args, **kwargs):
    start = time.perf_counter()
    value = fn(*args, **kwargs)
    return time.perf_counter() - start, value


def main() -> None:
    parser = argparse.ArgumentParser()
    parser.add_argument("--loops", type=int, default=300)
    parser.add_argument("--no-subprocess", action="store_true",
                        help="skip the end-to-end (fresh process) comparison")
    parser.add_argument("--batching", type=int, metavar="ROUNDS", default=0,
                        help="also time the check with one chunk a pool task against "
                             "tasks of several chunks (the default), ROUNDS alternating rounds")
    parser.add_argument("--timings", action="store_true",
                        help="also print the check's --timings tables (parent and workers)")
    parser.add_argument("--baseline", metavar="DIR",
                        help="also run the check as a fresh process with this checkout and "
                             "with DIR (another checkout of ruleguard), alternating")
    parser.add_argument("--rounds", type=int, default=11,
                        help="alternating rounds of --baseline (default 11)")
    parser.add_argument("--profile", metavar="FILE",
                        help="write a cProfile of the ruleguard run to FILE")
    args = parser.parse_args()
    for name in ("OPENBLAS_NUM_THREADS", "OMP_NUM_THREADS", "MKL_NUM_THREADS"):
        os.environ.setdefault(name, "1")  # as the ruleguard command does
    loops = loop_parameters(args.loops)
    naive = naive_namespace()["naive_margins"]
    with tempfile.TemporaryDirectory() as tmp:
        tmp = Path(tmp)
        manifest = write_project(tmp / "project", loops)
        warm = write_project(tmp / "warm", loops[:1])
        data = tmp / "loops.json"
        data.write_text(json.dumps(loops))
        script = tmp / "naive_grid.py"
        script.write_text(NAIVE_SCRIPT % {"fs": SAMPLE_RATE_HZ, "points": GRID_POINTS})

        # warm-up: imports and first-call costs on both sides
        naive(loops[0])
        run_ruleguard(warm)
        t_naive, grid = timed(lambda: [naive(lp) for lp in loops])
        if args.profile:
            import cProfile

            prof = cProfile.Profile()
            prof.enable()
        t_rg, (_, report) = timed(run_ruleguard, manifest)
        if args.profile:
            prof.disable()
            prof.dump_stats(args.profile)
        n = len(loops)
        print(f"{n} discrete loops of order 10 at {SAMPLE_RATE_HZ:g} Hz "
              f"(ZOH plant, 1 sample delay, Tustin PI); grid of {GRID_POINTS} points")
        print("in-process, imports paid beforehand:")
        print(f"  naive grid script      {t_naive:7.2f} s  {n / t_naive:8.1f} loops/s  "
              f"{1e3 * t_naive / n:7.2f} ms/loop")
        print(f"  ruleguard check        {t_rg:7.2f} s  {n / t_rg:8.1f} loops/s  "
              f"{1e3 * t_rg / n:7.2f} ms/loop")
        print(f"  ratio (ruleguard loops/s over naive loops/s): {t_naive / t_rg:6.2f}")
        if args.timings:  # before the stages: they fill this process's memos (holds)
            print_timings(manifest)
        stages = stage_times(manifest)
        print("ruleguard stages, run one by one on one core (ms/loop; the check above "
              "uses every core and writes the report):")
        for name, seconds in stages.items():
            print(f"  {name:<28} {1e3 * seconds / n:7.2f}")
        print(f"  {'sum of the stages':<28} {1e3 * sum(stages.values()) / n:7.2f}")
        checks = validation_times(manifest)
        if checks:
            docs, fast, full = checks
            print(f"schema validation of the {docs} validated values (ms/value): compiled "
                  f"predicate {1e3 * fast:.3f}, jsonschema {1e3 * full:.3f}, "
                  f"ratio {full / fast:.0f}x")

        if args.batching:
            compare_batching(manifest, args.batching, n)

        if args.baseline:
            compare_checkouts(manifest, Path(args.baseline).resolve(), args.rounds, n)

        if not args.no_subprocess:
            py = sys.executable
            env = dict(os.environ)
            t_sub_naive, _ = timed(subprocess.run, [py, str(script), str(data)],
                                   stdout=subprocess.DEVNULL, check=True, env=env)
            t_sub_rg, _ = timed(subprocess.run,
                                [py, "-m", "ruleguard", "check", "--format", "json",
                                 "--no-cache", "--manifest", str(manifest)],
                                stdout=subprocess.DEVNULL, env=env)
            print("end to end, fresh processes (start-up included):")
            print(f"  naive grid script      {t_sub_naive:7.2f} s")
            print(f"  ruleguard check        {t_sub_rg:7.2f} s")
            print(f"  ratio (naive time over ruleguard time):        "
                  f"{t_sub_naive / t_sub_rg:6.2f}")

    # agreement of the phase margins (first crossover of the grid vs ruleguard's)
    dev = []
    for lp, g, loop in zip(loops, grid, report["loops"], strict=True):
        assert loop["name"] == lp["name"]
        m = loop["variants"][0]["margins"] if loop["variants"] else {}
        if g["phase_margin_deg"] is not None and m.get("phase_margin_deg") is not None:
            dev.append(abs(g["phase_margin_deg"] - m["phase_margin_deg"]))
    if dev:
        print(f"phase margin, grid vs ruleguard: median |diff| {np.median(dev):.2e} deg, "
              f"max {np.max(dev):.2e} deg over {len(dev)} loops")


if __name__ == "__main__":
    main()
