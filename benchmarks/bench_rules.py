"""Where the rules stage spends its time per loop (prints figures).

Run: ``python benchmarks/bench_rules.py [--loops 300] [--repeat 3]``

Builds the generated project of ``bench_vs_grid.py`` (discrete loops of
order 10 with four lightly damped resonances), analyses every loop once,
then times :func:`ruleguard.rules.engine.evaluate` on the analysed loops
(best of ``--repeat`` runs) and, in one more run, the time inside each rule
function and inside the fix hints, in ms per loop. Compare two checkouts
by running the script with each on ``PYTHONPATH``.
"""

from __future__ import annotations

import argparse
import collections
import sys
import tempfile
import time
from pathlib import Path

sys.path.insert(0, str(Path(__file__).resolve().parent))

import bench_vs_grid  # noqa: E402


def main() -> None:
    parser = argparse.ArgumentParser()
    parser.add_argument("--loops", type=int, default=300)
    parser.add_argument("--repeat", type=int, default=3)
    args = parser.parse_args()

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
