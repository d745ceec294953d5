"""Variants at scale: N Latin-hypercube variants of the demo's tilt velocity loop.

Run: ``python benchmarks/bench_variants.py [--samples 10000] [--jobs 1 2]``.

Builds a temporary copy of the demo (fixtures/gimbal_demo) with only the
tilt current and velocity loops (the velocity loop is a cascade around the
current loop) and ``variants = { samples = N, seed = 11 }``; the velocity
controller is moved to a file of its own so that naming that file selects the
velocity loop alone (changed-files mode, ruleguard/selection.py). Then runs
``ruleguard check --format json --no-cache FILE --jobs J`` once per J in one
process run and prints, side by side: wall time, peak resident memory of
the parent and of its largest worker and their sum (getrusage of the process
and of its waited-for children; an upper bound of the simultaneous peak),
and whether the JSON reports are byte-identical.

It also samples, every 20 ms while the check runs, the proportional set size
(PSS, ``/proc/PID/smaps_rollup``) of the check and all its worker processes
and prints the largest sum seen: the memory the run really holds at once,
each page shared between the parent and its forked workers (the interpreter,
numpy, the loaded project) counted once, split among the processes that
share it. The RSS sum above counts those pages once per process.

``--baseline DIR`` runs the same checks with another checkout of ruleguard
(``DIR`` on ``PYTHONPATH``, e.g. ``git worktree add /tmp/base main`` or
``git archive main | tar -x -C DIR``) right after each run of this one, so
the before/after figures come from the same minutes of a shared machine, and
the reports of both must be byte-identical.
"""

from __future__ import annotations

import argparse
import hashlib
import os
import resource
import shutil
import subprocess
import sys
import tempfile
import threading
import time
from pathlib import Path

DEMO = Path(__file__).resolve().parents[1] / "fixtures" / "gimbal_demo"
SEED = 11

#: Prints its peak RSS and its children's (KiB on Linux) after the check.
RUNNER = """
import io, resource, sys
from ruleguard.cli import main
sys.stdout = io.StringIO()
code = main(sys.argv[1:])
report = sys.stdout.getvalue()
sys.stdout = sys.__stdout__
me = resource.getrusage(resource.RUSAGE_SELF)
them = resource.getrusage(resource.RUSAGE_CHILDREN)
cpu = me.ru_utime + me.ru_stime + them.ru_utime + them.ru_stime
sys.stderr.write(f"CPU {cpu:.3f}\\n")
sys.stderr.write(f"RSS {me.ru_maxrss} {them.ru_maxrss} EXIT {code}\\n")
sys.stdout.write(report)
"""


def build_project(folder: Path, samples: int) -> Path:
    """The benchmark project in ``folder``; returns the velocity controller file."""
    shutil.copytree(DEMO, folder, ignore=shutil.ignore_patterns(".ruleguard-cache"))
    manifest = folder / "ruleguard.toml"
    head, *blocks = manifest.read_text(encoding="utf-8").split("[[loops]]")
    keep = [b for b in blocks if 'name = "tilt.current"' in b or 'name = "tilt.velocity"' in b]
    sampled = f"variants = {{ samples = {samples}, seed = {SEED} }}"
    head = head.replace('variants = "corners"', sampled)
    keep = [
        b.replace('file = "firmware/tilt.toml", path = "velocity"',
                  'file = "firmware/tilt_velocity.toml", path = "velocity"')
        for b in keep
    ]
    manifest.write_text(head + "".join("[[loops]]" + b for b in keep), encoding="utf-8")
    firmware = (folder / "firmware" / "tilt.toml").read_text(encoding="utf-8")
    velocity = firmware[firmware.index("[velocity]"):firmware.index("[position]")]
    (folder / "firmware" / "tilt_velocity.toml").write_text(velocity, encoding="utf-8")
    return folder / "firmware" / "tilt_velocity.toml"


def _tree(pid: int) -> list[int]:
    """``pid`` and its descendants (Linux /proc)."""
    found, todo = [], [pid]
    while todo:
        here = todo.pop()
        found.append(here)
        try:
            for task in os.listdir(f"/proc/{here}/task"):
                with open(f"/proc/{here}/task/{task}/children") as handle:
                    todo.extend(int(c) for c in handle.read().split())
        except OSError:
            continue
    return found


def _pss_kib(pid: int) -> int:
    try:
        with open(f"/proc/{pid}/smaps_rollup") as handle:
            for line in handle:
                if line.startswith("Pss:"):
                    return int(line.split()[1])
    except OSError:
        pass
    return 0


class _PssSampler:
    """The largest PSS sum of a process tree, sampled in a thread."""

    def __init__(self, pid: int, every_s: float = 0.02) -> None:
        self.peak_kib = 0
        self._pid, self._every = pid, every_s
        self._done = threading.Event()
        self._thread = threading.Thread(target=self._run, daemon=True)
        self._thread.start()

    def _run(self) -> None:
        while not self._done.is_set():
            total = sum(_pss_kib(pid) for pid in _tree(self._pid))
            self.peak_kib = max(self.peak_kib, total)
            self._done.wait(self._every)

    def stop(self) -> int:
        self._done.set()
        self._thread.join()
        return self.peak_kib


def run_check(
    folder: Path, selected: Path, jobs: int, code: Path | None = None
) -> tuple[float, int, int, bytes, float, int]:
    """(wall s, parent peak RSS KiB, largest child peak RSS KiB, report bytes,
    CPU s of the check and its workers: less sensitive to a busy machine than wall,
    largest PSS sum of the check and its workers KiB: 0 where /proc has none).

    ``code``: the checkout of ruleguard to run (``None``: the installed one).
    """
    env = None
    if code is not None:
        env = {**os.environ, "PYTHONPATH": str(code)}
    command = [
        sys.executable, "-c", RUNNER, "check", "--format", "json", "--no-cache",
        "--time-budget", "0",  # 0: no budget
        "--jobs", str(jobs), str(selected.relative_to(folder)),
    ]
    start = time.perf_counter()
    process = subprocess.Popen(command, cwd=folder, stdout=subprocess.PIPE,
                               stderr=subprocess.PIPE, env=env)
    sampler = _PssSampler(process.pid)
    out, err = process.communicate()
    wall = time.perf_counter() - start
    pss = sampler.stop()
    line = [x for x in err.decode().splitlines() if x.startswith("RSS ")]
    if not line:
        raise SystemExit(f"check failed: {err.decode()[-2000:]}")
    _, own, kids, _, _code = line[-1].split()
    cpu = [x for x in err.decode().splitlines() if x.startswith("CPU ")][-1]
    return wall, int(own), int(kids), out, float(cpu.split()[1]), pss


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--samples", type=int, default=10000)
    parser.add_argument("--jobs", type=int, nargs="+", default=[1, 2])
    parser.add_argument("--baseline", type=Path, default=None,
                        help="another ruleguard checkout, run after each run of this one")
    args = parser.parse_args()
    with tempfile.TemporaryDirectory() as tmp:
        folder = Path(tmp) / "mast"
        selected = build_project(folder, args.samples)
        rows = []
        base_rows = []
        for jobs in args.jobs:
            rows.append((jobs, *run_check(folder, selected, jobs)))
            if args.baseline is not None:
                base_rows.append((jobs, *run_check(folder, selected, jobs,
                                                   args.baseline.resolve())))
    print(f"tilt.velocity, {args.samples} Latin-hypercube variants (+ nominal), "
          f"{resource.getpagesize()} B pages")
    print(f"{'jobs':>4} {'wall s':>8} {'variants/s':>10} {'parent MB':>9} "
          f"{'worker MB':>9} {'sum MB':>7} {'PSS MB':>7} {'CPU s':>7}  report sha256")
    base = rows[0][1]
    for jobs, wall, own, kids, report, cpu, pss in rows:
        workers = kids * jobs if jobs > 1 else 0
        total = own + workers
        print(f"{jobs:>4} {wall:>8.1f} {(args.samples + 1) / wall:>10.0f} {own / 1024:>9.0f} "
              f"{kids / 1024 if jobs > 1 else 0:>9.0f} {total / 1024:>7.0f} {pss / 1024:>7.0f} "
              f"{cpu:>7.1f}  {hashlib.sha256(report).hexdigest()[:16]}")
    print("(parent, worker: peak RSS of each; sum: parent + jobs x worker, shared pages "
          "counted per process; PSS: the largest sampled sum of all the run's processes)")
    print("speed-up (first / each):", " ".join(f"{base / r[1]:.2f}" for r in rows))
    for (jobs, wall, own, _, _, cpu, _), (_, b_wall, b_own, b_kids, b_report, b_cpu, _) in zip(
        rows, base_rows, strict=False
    ):
        print(f"baseline {jobs} job(s): {b_wall:.1f} s, CPU {b_cpu:.1f} s, parent "
              f"{b_own / 1024:.0f} MB, worker {b_kids / 1024 if jobs > 1 else 0:.0f} MB, "
              f"report {hashlib.sha256(b_report).hexdigest()[:16]}; this / baseline: wall "
              f"{wall / b_wall:.2f}, CPU {cpu / b_cpu:.2f}, parent memory {own / b_own:.2f}")
    identical = len({r[4] for r in rows + base_rows}) == 1
    print("reports byte-identical:", "yes" if identical else "NO")
    print(f"report size: {len(rows[0][4]) / 1e6:.1f} MB")
    if not identical:
        raise SystemExit(1)


if __name__ == "__main__":
    main()
