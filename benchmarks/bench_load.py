"""The load stage, before and after: ms per loop side by side in one run (prints figures).

Run: ``python benchmarks/bench_load.py [--baseline DIR] [--loops 300] [--rounds 7]``

``--baseline DIR`` is another checkout of ruleguard (the code before a
change, default ``/work/wt/baseline`` when it exists); without one only this
checkout is measured. Each figure is the median over ``--rounds`` rounds,
the two checkouts alternating within each round (the machine is shared, so
only figures taken side by side compare):

* **load ms/loop**: :func:`ruleguard.load.project.load_project` on the
  project of ``benchmarks/bench_vs_grid.py`` (``--loops`` discrete loops,
  one plant registry, one firmware file per loop), in a fresh process per
  round, modules imported and one load done before the timed ones (best
  of three per round, CPU time of the process: the machine may be shared);
  ``same project`` compares the ``repr`` of both
  loaded projects (every value and every location, line and column
  included; ``PYTHONHASHSEED=0`` for the order of sets);
* **demo hook load**: the ``load`` stage of ``ruleguard check --timings
  firmware/tilt.toml`` on a copy of ``fixtures/gimbal_demo`` after a comment
  is appended to that file (the pre-commit route: cache warmed by one full
  check first; wall time as the command reports it), with the whole
  command's CPU time (user + system) beside it;
* **import**: a fresh ``python -c "import ruleguard.load.project,
  ruleguard.load.rulesets"`` (CPU time, interpreter start included).

Byte code is cached (``PYTHONPYCACHEPREFIX`` in a temporary folder) as in
an installed package, whatever ``PYTHONDONTWRITEBYTECODE`` says.
"""

from __future__ import annotations

import argparse
import json
import os
import re
import resource
import shutil
import statistics
import subprocess
import sys
import tempfile
from pathlib import Path

ROOT = Path(__file__).resolve().parents[1]
DEFAULT_BASELINE = Path("/work/wt/baseline")

_LOAD_SCRIPT = r"""
import hashlib, json, sys, time
sys.path.insert(0, sys.argv[1])
from ruleguard.load.project import load_project
manifest = sys.argv[2]
load_project(manifest)
best = min(
    (lambda t: (load_project(manifest), time.process_time() - t)[1])(time.process_time())
    for _ in range(3)
)
digest = hashlib.sha256(repr(load_project(manifest)).encode()).hexdigest()
print(json.dumps({"seconds": best, "digest": digest}))
"""


def _env(tree: Path, cache: Path) -> dict:
    env = dict(os.environ, OPENBLAS_NUM_THREADS="1", PYTHONPATH=str(tree), PYTHONHASHSEED="0",
               PYTHONPYCACHEPREFIX=str(cache))
    env.pop("PYTHONDONTWRITEBYTECODE", None)
    return env


def _load_round(tree: Path, manifest: Path, cache: Path) -> dict:
    out = subprocess.run([sys.executable, "-c", _LOAD_SCRIPT, str(tree), str(manifest)],
                         env=_env(tree, cache), capture_output=True, text=True, check=True)
    return json.loads(out.stdout)


def _children_cpu() -> float:
    usage = resource.getrusage(resource.RUSAGE_CHILDREN)
    return usage.ru_utime + usage.ru_stime


def _hook_round(tree: Path, demo: Path, cache: Path, count: int) -> tuple[float, float]:
    with open(demo / "firmware" / "tilt.toml", "a", encoding="utf-8") as handle:
        handle.write(f"# edited {count}\n")
    start = _children_cpu()
    out = subprocess.run([sys.executable, "-m", "ruleguard", "check", "--timings",
                          "firmware/tilt.toml"], cwd=demo, env=_env(tree, cache),
                         capture_output=True, text=True)
    wall = _children_cpu() - start
    hit = re.search(r"^\s*load\s+([0-9.]+)", out.stdout + out.stderr, re.MULTILINE)
    if hit is None:
        raise RuntimeError(f"no load stage in the output of {tree}:\n{out.stdout}{out.stderr}")
    return float(hit.group(1)), wall


def _import_round(tree: Path, cache: Path) -> float:
    start = _children_cpu()
    subprocess.run([sys.executable, "-c",
                    "import ruleguard.load.project, ruleguard.load.rulesets"],
                   env=_env(tree, cache), check=True)
    return _children_cpu() - start


def main(argv: list[str] | None = None) -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--baseline", type=Path,
                        default=DEFAULT_BASELINE if DEFAULT_BASELINE.is_dir() else None)
    parser.add_argument("--loops", type=int, default=300)
    parser.add_argument("--rounds", type=int, default=7)
    args = parser.parse_args(argv)

    sys.path.insert(0, str(ROOT / "benchmarks"))
    import bench_vs_grid

    trees = {"now": ROOT}
    if args.baseline is not None:
        trees = {"baseline": args.baseline.resolve(), "now": ROOT}
    with tempfile.TemporaryDirectory(prefix="bench-load-") as scratch:
        scratch_path = Path(scratch)
        project = scratch_path / "project"
        manifest = bench_vs_grid.write_project(project,
                                               bench_vs_grid.loop_parameters(args.loops))
        caches = {label: scratch_path / f"pycache-{label}" for label in trees}
        demos = {}
        for label, tree in trees.items():
            demos[label] = scratch_path / f"demo-{label}"
            shutil.copytree(ROOT / "fixtures" / "gimbal_demo", demos[label])
            subprocess.run([sys.executable, "-m", "ruleguard", "check"], cwd=demos[label],
                           env=_env(tree, caches[label]), capture_output=True)  # warm cache

        loads: dict[str, list[float]] = {label: [] for label in trees}
        digests: dict[str, set] = {label: set() for label in trees}
        hooks: dict[str, list[float]] = {label: [] for label in trees}
        walls: dict[str, list[float]] = {label: [] for label in trees}
        imports: dict[str, list[float]] = {label: [] for label in trees}
        for count in range(args.rounds):
            order = list(trees) if count % 2 == 0 else list(reversed(trees))
            for label in order:
                found = _load_round(trees[label], manifest, caches[label])
                loads[label].append(found["seconds"])
                digests[label].add(found["digest"])
                load, wall = _hook_round(trees[label], demos[label], caches[label], count)
                hooks[label].append(load)
                walls[label].append(wall)
                imports[label].append(_import_round(trees[label], caches[label]))

    def median(values: list[float]) -> float:
        return statistics.median(values)

    print(f"load stage, {args.loops} loops, median of {args.rounds} rounds "
          f"(checkouts: {', '.join(f'{k} {v}' for k, v in trees.items())})")
    print(f"{'':28}" + "".join(f"{label:>12}" for label in trees)
          + ("       ratio" if len(trees) == 2 else ""))

    def row(title: str, values: dict[str, list[float]], scale: float, unit: str) -> None:
        figures = {label: median(v) * scale for label, v in values.items()}
        text = f"{title:28}" + "".join(f"{figures[label]:>9.3f} {unit}" for label in trees)
        if len(trees) == 2:
            text += f"{figures['baseline'] / figures['now']:>11.2f}x"
        print(text)

    row("load per loop", loads, 1e3 / args.loops, "ms")
    row("load, whole project", loads, 1e3, "ms")
    row("demo hook: load stage", hooks, 1e3, "ms")
    row("demo hook: command CPU", walls, 1e3, "ms")
    row("import load modules, CPU", imports, 1e3, "ms")
    if len(trees) == 2:
        same = digests["baseline"] == digests["now"] and len(digests["now"]) == 1
        print(f"same project (repr of every value and location): {'yes' if same else 'NO'}")
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
