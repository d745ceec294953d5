"""Where the rules stage spends its time per loop (prints figures).

Run: ``python benchmarks/bench_rules.py [--loops 300] [--repeat 3]``

Builds the generated project of ``bench_vs_grid.py`` (discrete loops of
order 10 with four lightly damped resonances), analyses every loop once,
then times :func:`ruleguard.rules.engine.evaluate` on the analysed loops
(best of ``--repeat`` runs) and, in one more run, the time inside each rule
function and inside the fix hints, in ms per loop.

Side by side: ``python benchmarks/bench_rules.py --against /path/to/other/checkout
[--rounds 5]`` runs, in fresh processes that alternate between this checkout
and the other one (each first on ``PYTHONPATH``), on the same project: the
``rules`` stage of ``ruleguard check --format json --no-cache --jobs 1
--timings`` (the engine judging each loop where it is analysed, as a check
does) and one ``evaluate`` of all the analysed loops; it prints the median
of each in ms per loop, their ratio, and whether the two checks printed the
same report.
"""

from __future__ import annotations

import argparse
import collections
import hashlib
import io
import json
import os
import statistics
import subprocess
import sys
import tempfile
import time
from pathlib import Path

sys.path.insert(0, str(Path(__file__).resolve().parent))

import bench_vs_grid  # noqa: E402


def measure_once(manifest: Path) -> dict:
    """One round in this process: the check's rules stage and one evaluate (seconds)."""
    from ruleguard.cli import run
    from ruleguard.load.project import load_project
    from ruleguard.load.rulesets import load_ruleset
    from ruleguard.pipeline import analyse_loop
    from ruleguard.rules.engine import evaluate

    argv = ["check", "--format", "json", "--no-cache", "--jobs", "1", "--timings",
            "--manifest", str(manifest)]
    out, err = io.StringIO(), io.StringIO()
    code = run(argv, out, err)
    rules_stage = None
    for line in err.getvalue().splitlines():
        parts = line.split()
        if len(parts) >= 2 and parts[0] == "rules":
            rules_stage = float(parts[1])
    project = load_project(manifest)
    ruleset = load_ruleset(project.root, project.ruleset, project.ruleset_location)
    contexts = [analyse_loop(project, spec).context for spec in project.loops]
    start = time.perf_counter()
    findings = evaluate(contexts, ruleset)
    seconds = time.perf_counter() - start
    return {
        "loops": len(project.loops),
        "exit": code,
        "report_sha256": hashlib.sha256(out.getvalue().encode()).hexdigest(),
        "rules_stage_s": rules_stage,
        "evaluate_s": seconds,
        "findings": len(findings),
        "module": __import__("ruleguard").__file__,
    }


def side_by_side(args) -> None:
    here = Path(__file__).resolve().parents[1]
    other = Path(args.against).resolve()
    with tempfile.TemporaryDirectory() as tmp:
        manifest = bench_vs_grid.write_project(Path(tmp), bench_vs_grid.loop_parameters(args.loops))
        results: dict[str, list[dict]] = {"this": [], "other": []}
        for round_ in range(args.rounds):
            order = [("this", here), ("other", other)]
            if round_ % 2:
                order.reverse()
            for label, root in order:
                env = dict(os.environ, PYTHONPATH=str(root), OPENBLAS_NUM_THREADS="1")
                proc = subprocess.run(
                    [sys.executable, str(Path(__file__).resolve()), "--once", str(manifest)],
                    env=env, capture_output=True, text=True, check=True)
                results[label].append(json.loads(proc.stdout.strip().splitlines()[-1]))
    n = results["this"][0]["loops"]
    print(f"{n} loops, {args.rounds} alternating rounds, fresh process each; median ms/loop")
    print(f"  this:  {here}  (imports {results['this'][0]['module']})")
    print(f"  other: {other}  (imports {results['other'][0]['module']})")
    print(f"  {'':34} {'other':>8} {'this':>8} {'ratio':>7}")
    for key, name in (("rules_stage_s", "check --timings: rules stage"),
                      ("evaluate_s", "evaluate (all loops, once)")):
        mine = statistics.median(r[key] for r in results["this"]) * 1e3 / n
        base = statistics.median(r[key] for r in results["other"]) * 1e3 / n
        print(f"  {name:<34} {base:8.3f} {mine:8.3f} {base / mine:6.2f}x")
    same = {r["report_sha256"] for r in results["this"] + results["other"]}
    codes = {r["exit"] for r in results["this"] + results["other"]}
    print(f"  same JSON report and exit code on both sides: {len(same) == 1 and len(codes) == 1}"
          f" (exit {sorted(codes)})")


def main() -> None:
    parser = argparse.ArgumentParser()
    parser.add_argument("--loops", type=int, default=300)
    parser.add_argument("--repeat", type=int, default=3)
    parser.add_argument("--against", metavar="CHECKOUT",
                        help="compare with another checkout, side by side (fresh processes)")
    parser.add_argument("--rounds", type=int, default=5)
    parser.add_argument("--once", metavar="MANIFEST", help=argparse.SUPPRESS)
    args = parser.parse_args()
    if args.once:
        os.environ.setdefault("OPENBLAS_NUM_THREADS", "1")
        print(json.dumps(measure_once(Path(args.once))))
        return
    if args.against:
        side_by_side(args)
        return

    from ruleguard.load.project import load_project
    from ruleguard.load.rulesets import load_ruleset
    from ruleguard.pipeline import analyse_loop
    from ruleguard.rules import catalog, hints
    from ruleguard.rules.engine import evaluate

    n = args.loops
    with tempfile.TemporaryDirectory() as tmp:
        manifest = bench_vs_grid.write_project(Path(tmp), bench_vs_grid.loop_parameters(n))
        project = load_project(manifest)
        ruleset = load_ruleset(project.root, project.ruleset, project.ruleset_location)
        contexts = [analyse_loop(project, spec).context for spec in project.loops]
    evaluate(contexts[:2], ruleset)  # warm-up: imports
    times = []
    for _ in range(args.repeat):
        start = time.perf_counter()
        findings = evaluate(contexts, ruleset)
        times.append(time.perf_counter() - start)
    print(f"{n} loops, {len(findings)} findings")
    print(f"evaluate rules (best of {args.repeat})   {1e3 * min(times) / n:7.3f} ms/loop")

    spent: collections.Counter = collections.Counter()
    saved = {rule_id: spec.function for rule_id, spec in catalog.RULES.items()}
    saved_hint = hints.LoopHints.hint_for

    def timed_rule(rule_id, function):
        def run(ctx, params):
            start = time.perf_counter()
            out = list(function(ctx, params))
            spent[rule_id] += time.perf_counter() - start
            return out
        return run

    def timed_hint(self, *a):
        start = time.perf_counter()
        out = saved_hint(self, *a)
        spent["(fix hints)"] += time.perf_counter() - start
        return out

    try:
        for rule_id, spec in catalog.RULES.items():
            object.__setattr__(spec, "function", timed_rule(rule_id, saved[rule_id]))
        hints.LoopHints.hint_for = timed_hint
        evaluate(contexts, ruleset)
    finally:
        for rule_id, spec in catalog.RULES.items():
            object.__setattr__(spec, "function", saved[rule_id])
        hints.LoopHints.hint_for = saved_hint
    print("inside (one run, ms/loop):")
    for name, seconds in spent.most_common(6):
        print(f"  {name:<34} {1e3 * seconds / n:7.3f}")


if __name__ == "__main__":
    main()
