"""One check run: load -> models -> analysis -> rules -> Report.

The only function with a side effect here is the optional cache (a folder
under the manifest's folder, never an input file). Everything else is a
composition of the pure stages.
"""

from __future__ import annotations

import datetime as _dt
import itertools
import time
from collections.abc import Callable, Sequence
from dataclasses import dataclass, field
from pathlib import Path

from ruleguard import __version__
from ruleguard.errors import InputError, LoopNotAnalysable
from ruleguard.frozen import record
from ruleguard.rules.base import Evaluation, Finding, LoopContext, Severity
from ruleguard.timings import stage
from ruleguard.workunits import JudgedLoop

#: Progress callback: (loops done, loops in all, name of the loop now).
Progress = Callable[[int, int, str], None]


@record
class CheckOptions:
    """What `ruleguard check` was asked to do."""

    only: tuple[str, ...] = ()
    skip: tuple[str, ...] = ()
    fail_at: Severity = Severity.ERROR
    today: _dt.date | None = None
    changed_files: tuple[str, ...] = ()
    cwd: str | None = None
    use_cache: bool = False
    #: Sample L over frequency for plots (``--format html``); never cached.
    want_curves: bool = False
    #: Wall-clock budget for the whole check (seconds, ``None``: unlimited).
    #: Loops whose variants are not reached in time are reported as not
    #: analysed (and never cached), so hostile or oversized inputs cannot hang
    #: a hook or a CI job.
    time_budget_s: float | None = 600.0
    #: Workers for the variants (``--jobs``); 1: this process only.
    jobs: int = 1
    #: ``"local"`` (this machine) or ``"dask"`` (``--executor``, docs/scaling.md).
    executor: str = "local"
    #: Scheduler address for ``executor="dask"`` (``None``: a local cluster).
    cluster_address: str | None = None


@record(eq=False)
class AnalysedLoop:
    """A loop after models and analysis, before rules."""

    context: LoopContext
    result: object  # ruleguard.report.model.LoopResult
    #: False when the result depends on the clock (time budget used up).
    cacheable: bool = True


@dataclass
class RunStatistics:
    """Counters of one run (for tests and benchmarks, not for reports)."""

    analysed_loops: int = 0
    cached_loops: int = 0
    evaluations: int = 0
    extra: dict = field(default_factory=dict)


def check_project(
    manifest: str | Path,
    options: CheckOptions | None = None,
    *,
    progress: Progress | None = None,
    statistics: RunStatistics | None = None,
):
    """Check every (selected) loop of the project at ``manifest``; return the Report."""
    options = options or CheckOptions()
    with stage("load"):
        from ruleguard.load.project import load_project
        from ruleguard.load.rulesets import load_ruleset
        from ruleguard.load.sources import remembering_parses
        from ruleguard.load.validation import remembering

        memo, parses = _memos(manifest) if options.use_cache else (None, None)
        with remembering(memo), remembering_parses(parses):
            project = load_project(Path(manifest))
            ruleset = load_ruleset(project.root, project.ruleset, project.ruleset_location)
        if memo is not None:
            with stage("cache"):
                inputs = set(project.texts) | set(_all_inputs(project))
                memo.save(inputs)
                parses.save(inputs)
    return check_loaded(project, ruleset, options, progress=progress, statistics=statistics)


def _memos(manifest: str | Path):
    """The schema-validation memo and the firmware-parse memo of the cache
    folder beside ``manifest``."""
    from ruleguard.cache import LoopCache, ParsedDocuments, ValidatedDocuments

    with stage("cache"):
        root = Path(manifest).absolute().parent.resolve()
        cache = LoopCache(root, enabled=True)
        return ValidatedDocuments(cache), ParsedDocuments(cache)


def _all_inputs(project) -> set[str]:
    inputs = getattr(project, "inputs", None) or {}
    return {rel for files in inputs.values() for rel in files}


def check_loaded(project, ruleset, options: CheckOptions, *, progress=None, statistics=None):
    """The rest of :func:`check_project`, from a loaded project and ruleset."""
    with stage("rules"):
        from ruleguard.report.model import Report, RuleInfo
        from ruleguard.rules.catalog import RULES
        from ruleguard.rules.engine import evaluate

    stats = statistics if statistics is not None else RunStatistics()
    selected = _selected_loops(project, options)
    specs = [spec for spec in project.loops if spec.name in selected]

    cache = None
    if options.use_cache:
        from ruleguard.cache import LoopCache

        cache = LoopCache(project.root, enabled=True)

    today = options.today or _dt.datetime.now(_dt.timezone.utc).date()
    cache_options = {
        "only": list(options.only),
        "skip": list(options.skip),
        "today": today.isoformat(),
    }
    ruleset_print = ruleset.fingerprint() if cache is not None else ""

    deadline = None
    if options.time_budget_s is not None:
        deadline = time.time() + options.time_budget_s
    loop_results: dict[str, object] = {}
    cached_findings: dict[str, tuple[Finding, ...]] = {}
    contexts: list[LoopContext] = []
    keys: dict[str, str] = {}
    built_models: dict[str, dict] = {}  # loop -> variant id -> LoopModel (for curves)
    judging = _judging_request(ruleset, options, today)
    judged_findings: dict[str, tuple[Finding, ...]] = {}
    to_analyse = []
    for spec in specs:
        if cache is not None:
            with stage("cache"):
                key = cache.key_for(project, spec.name, ruleset_print, cache_options)
                keys[spec.name] = key
                hit = cache.get(key)
            if hit is not None:
                loop_results[spec.name], cached_findings[spec.name] = hit
                stats.cached_loops += 1
                continue
        to_analyse.append(spec)
    analysed_by_name = {}
    for i, analysed in enumerate(
        _analyse_loops(project, to_analyse, options, deadline, progress, len(specs),
                       judge=judging)
    ):
        spec = to_analyse[i]
        if isinstance(analysed, JudgedLoop):  # built, analysed and judged by its worker
            if not analysed.cacheable:
                keys.pop(spec.name, None)
            stats.analysed_loops += 1
            stats.evaluations += analysed.evaluations
            loop_results[spec.name] = analysed.result
            judged_findings[spec.name] = analysed.findings
            continue
        analysed = without_unwanted_midpoints(analysed, ruleset)
        analysed_by_name[spec.name] = analysed
        if not analysed.cacheable:
            keys.pop(spec.name, None)
        stats.analysed_loops += 1
        stats.evaluations += len(analysed.context.evaluations)
        loop_results[spec.name] = analysed.result
        if options.want_curves:
            built_models[spec.name] = {
                ev.variant.id: ev.model for ev in analysed.context.evaluations
            }
    contexts = [analysed_by_name[s.name].context for s in specs if s.name in analysed_by_name]
    if progress is not None:
        progress(len(specs), len(specs), "")

    with stage("rules"):
        fresh = evaluate(
            contexts,
            ruleset,
            only=options.only,
            skip=options.skip,
            today=today,
            cached=cached_findings,
            judged=judged_findings,
            loop_names=[s.name for s in project.loops],
        )
    if cache is not None:
        by_loop: dict[str, list[Finding]] = {c.spec.name: [] for c in contexts}
        for name, found in judged_findings.items():
            by_loop[name] = list(found)
        for f in fresh:
            if f.loop in by_loop:
                by_loop[f.loop].append(f)
        with stage("cache"):
            for name, found in by_loop.items():
                if name in keys:  # loops cut short by the time budget are not stored
                    cache.put(keys[name], loop_results[name], tuple(found))
        stats.extra["cache_hits"] = cache.hits
        stats.extra["cache_misses"] = cache.misses

    if options.want_curves:  # after the cache is written: curves never enter it
        with stage("report"):
            for spec in specs:
                loop_results[spec.name] = with_response_curves(
                    project, spec, loop_results[spec.name], built_models.get(spec.name, {})
                )

    with stage("rules"):
        findings = _ordered_findings(specs, fresh, {**cached_findings, **judged_findings})
        active = _active_rules(ruleset, specs, loop_results, options)
        rules = tuple(
            RuleInfo(r.id, r.summary, r.explanation, r.default_severity.value)
            for r in RULES.values()
        )
    return Report(
        tool_version=__version__,
        project_name=project.name,
        manifest_file=project.manifest_file,
        root=project.root,
        loops=tuple(loop_results[s.name] for s in specs),
        findings=findings,
        rules=rules,
        ruleset_name=getattr(ruleset, "name", ""),
        texts=dict(project.texts),
        fail_at=options.fail_at,
        active_rules=active,
        waivers_as_of=today.isoformat(),
    )


@record
class LoopJudging:
    """What a worker needs to apply the ruleset to a loop it analysed whole."""

    ruleset: object
    only: tuple[str, ...]
    skip: tuple[str, ...]
    today: _dt.date


def _judging_request(ruleset, options: CheckOptions, today: _dt.date) -> LoopJudging | None:
    """Judge loops where they are analysed, unless curves are wanted (they need
    the models here) or the rule selection is invalid (its error is raised by
    :func:`ruleguard.rules.engine.evaluate`, in its turn)."""
    from ruleguard.rules.catalog import UnknownRule, check_patterns

    if options.want_curves:
        return None
    try:
        check_patterns(tuple(options.only))
        check_patterns(tuple(options.skip))
    except UnknownRule:
        return None
    return LoopJudging(ruleset, tuple(options.only), tuple(options.skip), today)


def judge_loop(project, spec, outcomes, judging: LoopJudging) -> JudgedLoop:
    """One loop assembled from all its variants' outcomes and judged (in a worker).

    The same steps, in the same order, as :func:`check_loaded` takes for a
    loop analysed in this process; the findings are those
    :func:`ruleguard.rules.engine.evaluate` gives for the loop alone (the
    ruleset's own findings, about waivers, are made by the caller).
    """
    from ruleguard.rules.engine import evaluate

    analysed = _assemble_loop(project, spec, iter(outcomes))
    analysed = without_unwanted_midpoints(analysed, judging.ruleset)
    with stage("rules"):
        found = evaluate([analysed.context], judging.ruleset, only=judging.only,
                         skip=judging.skip, today=judging.today)
    return JudgedLoop(
        analysed.result,
        tuple(f for f in found if f.loop == spec.name),
        len(analysed.context.evaluations),
        analysed.cacheable,
    )


def without_unwanted_midpoints(analysed: AnalysedLoop, ruleset) -> AnalysedLoop:
    """A scheduled loop without its midpoint variants when ``schedule.coverage`` says
    ``midpoints = false`` for it (in its rule table or an adjustment that matches it)."""
    import dataclasses

    from ruleguard.models.schedules import is_midpoint_id
    from ruleguard.rules.engine import effective_rules, nominal_crossover_hz

    context = analysed.context
    if getattr(context.spec.controller, "schedule", None) is None or not context.evaluations:
        return analysed
    config = effective_rules(ruleset, context.spec.name, context.spec.tags,
                             nominal_crossover_hz(context))
    if config["schedule.coverage"].parameters.get("midpoints", True):
        return analysed
    evaluations = tuple(ev for ev in context.evaluations if not is_midpoint_id(ev.variant.id))
    result = dataclasses.replace(
        analysed.result,
        variants=tuple(v for v in analysed.result.variants if not is_midpoint_id(v.id)),
    )
    return dataclasses.replace(
        analysed, context=dataclasses.replace(context, evaluations=evaluations), result=result
    )


def _active_rules(ruleset, specs, loop_results, options: CheckOptions) -> tuple[str, ...]:
    """Rules evaluated on at least one loop: selected by --only/--skip and not off."""
    from ruleguard.rules.base import Severity as _Severity
    from ruleguard.rules.catalog import selected_rules
    from ruleguard.rules.engine import effective_rules

    selected = selected_rules(options.only, options.skip)
    on: set[str] = set()
    for spec in specs:
        result = loop_results[spec.name]
        crossover = None
        if result.variants:
            crossover = result.variants[0].analysis.margins.crossover_hz
        rules = effective_rules(ruleset, spec.name, spec.tags, crossover)
        on.update(r for r, eff in rules.items() if eff.severity is not _Severity.DISABLED)
    return tuple(r for r in selected if r in on)


def _ordered_findings(specs, fresh: Sequence[Finding], cached: dict[str, tuple[Finding, ...]]):
    """Findings in loop order (cached loops in their place), project-wide ones last."""
    order = {s.name: i for i, s in enumerate(specs)}
    all_findings = list(fresh)
    for found in cached.values():
        all_findings.extend(found)
    keyed = [
        (order.get(f.loop, len(order)) if f.loop is not None else len(order), i, f)
        for i, f in enumerate(all_findings)
    ]
    keyed.sort(key=lambda t: (t[0], t[1]))
    return tuple(f for _, _, f in keyed)


def _selected_loops(project, options: CheckOptions) -> set[str]:
    names = {spec.name for spec in project.loops}
    if not options.changed_files:
        return names
    from ruleguard.selection import loops_for_files

    return set(loops_for_files(project, list(options.changed_files), options.cwd)) & names


def analyse_loop(
    project, spec, *, deadline: float | None = None, budget_s: float | None = None
) -> AnalysedLoop:
    """Build and analyse every variant of one loop in this process (pure but for the clock).

    ``deadline`` (a ``time.time()`` value) stops the work between variants.
    A numerical failure (overflow, a singular matrix) while building or
    analysing a variant makes the loop "not analysed" with the reason: the
    gate fails rather than passing an unverified loop.
    """
    from ruleguard.executors import InlineExecutor

    options = CheckOptions(time_budget_s=budget_s)
    found = _analyse_loops(project, [spec], options, deadline, None, 1, InlineExecutor(project))
    return next(iter(found))


def _analyse_loops(project, specs, options: CheckOptions, deadline, progress, total,
                   executor=None, judge: LoopJudging | None = None):
    """Every loop of ``specs`` analysed (an iterator of AnalysedLoop, in order).

    The variants of all loops are cut into chunks
    (:mod:`ruleguard.workunits`) and run by the chosen executor
    (:mod:`ruleguard.executors`); the outcomes come back in order, so the
    result does not depend on the executor or the number of workers.

    With ``judge``, a loop whose variants fit one chunk is also judged
    where it runs and comes back as a :class:`JudgedLoop` (no models).
    """
    from ruleguard.executors import ChunkStream, batch_size, make_executor
    from ruleguard.models.families import loop_variants
    from ruleguard.workunits import chunk_size, split_variants

    families: list[tuple] = []
    count = 0
    for spec in specs:
        try:
            variants = loop_variants(project, spec)
        except InputError as exc:  # raised when its loop's turn comes, as in order
            families.append((spec, None, exc))
            continue
        families.append((spec, variants, None))
        count += len(variants)
    if not specs:
        return
    rounding = _rounding_rule_selected(options)
    if executor is None:
        executor = make_executor(
            project, options.executor, max(1, options.jobs), count, options.cluster_address,
            judging=judge,
        )
    try:
        size = max(
            (chunk_size(len(v), executor.workers) for _, v, _ in families if v), default=1
        )

        # enough loops to keep every worker busy: a small loop goes whole, so
        # its worker can judge it (judge) and send back no models
        many = len(families) >= 2 * executor.workers

        chunks = [
            chunk
            for spec, variants, _ in families if variants
            for chunk in split_variants(
                spec.name, variants,
                max(size, len(variants))
                if many and len(variants) <= WHOLE_LOOP_VARIANTS else size,
                deadline, options.time_budget_s,
                prepare_rounding=rounding, judge=judge,
            )
        ]
        stream = ChunkStream(executor, chunks, batch_size(len(chunks), executor.workers))
        outcomes = iter(stream)
        done = total - len(specs)
        for spec, variants, error in families:
            if progress is not None:
                progress(done, total, spec.name)
            done += 1
            if error is not None:
                raise error
            found = _loop_outcomes(outcomes, stream, spec, variants)
            first = next(found)
            if isinstance(first, JudgedLoop):
                yield first
            else:
                yield _assemble_loop(project, spec, itertools.chain((first,), found))
    finally:
        executor.close()


#: A loop of at most this many variants is one chunk when the run has at
#: least two loops per worker (and so is judged where it is analysed).
WHOLE_LOOP_VARIANTS = 16


def _rounding_rule_selected(options: CheckOptions) -> bool:
    """Whether the workers round coefficients ahead for ``quantization.robust``
    (selected by --only/--skip; a ruleset that disables it only wastes that work)."""
    from ruleguard.rules.catalog import selected_rules

    return "quantization.robust" in selected_rules(options.only, options.skip)


def _loop_outcomes(outcomes, stream, spec, variants):
    """The outcomes of one loop's variants, in order, up to and including a stop.

    The parts equal in every variant (the controller side) are made one object
    across the loop's chunks (:func:`ruleguard.workunits.shared_blocks`), and
    each outcome names the parent's own variant (not the copy a worker sent
    back), so the loop's variants cost the parent memory for what differs only.
    """
    import dataclasses

    from ruleguard.workunits import shared_blocks

    pool: dict = {}
    seen = 0
    while seen < len(variants):
        chunk, found = next(outcomes)
        if chunk.loop != spec.name:  # pragma: no cover - chunks come in loop order
            raise RuntimeError("chunks out of order")
        if found and isinstance(found[0], JudgedLoop):  # judged whole by its worker
            yield found[0]
            seen += len(chunk.variants)
            continue
        for k, outcome in enumerate(shared_blocks(found, pool)):
            own = variants[chunk.start + k]
            if outcome.variant is not own:
                if outcome.variant.id != own.id:  # pragma: no cover - outcomes come in order
                    raise RuntimeError("outcomes out of order")
                outcome = dataclasses.replace(outcome, variant=own)
            if outcome.stop is not None:
                stream.stop_loop(spec.name)
                yield outcome
                return
            yield outcome
        seen += len(chunk.variants)


def _assemble_loop(project, spec, outcomes) -> AnalysedLoop:
    """One loop's AnalysedLoop from its variants' outcomes (read in order)."""
    from ruleguard.report.model import LoopResult, VariantResult

    domain = "discrete" if spec.sample_rate_hz else "continuous"
    evaluations: list[Evaluation] = []
    inner_evaluations: list[Evaluation] = []
    numerical_notes: list[str] = []
    stop = None
    for outcome in outcomes:
        numerical_notes.extend(outcome.numerical_notes)
        if outcome.stop is not None:
            stop = outcome.stop
            break
        model = outcome.model
        if outcome.inner_analysis is not None:
            inner_evaluations.append(Evaluation(outcome.variant, model.inner,
                                                outcome.inner_analysis))
        evaluations.append(
            Evaluation(outcome.variant, model, outcome.analysis, outcome.prepared)
        )
    if stop is not None and stop.input_error:
        raise InputError.at(stop.location, stop.reason)
    reason = None if stop is None else stop.reason
    cacheable = True if stop is None else stop.cacheable
    if reason is not None:
        evaluations = []

    inner_context = None
    if evaluations:
        first = evaluations[0].model
        notes: list[str] = list(first.notes)
        seen = set(notes)  # 10,000 variants' notes: no linear search of the list each
        texts = [*numerical_notes]
        for ev in evaluations:
            for note in ev.analysis.notes:
                texts.append(note if ev.variant.id == "nominal" else f"{ev.variant.id}: {note}")
        for text in texts:
            if text not in seen:
                seen.add(text)
                notes.append(text)
        result = LoopResult(
            name=spec.name,
            domain=domain,
            sample_rate_hz=spec.sample_rate_hz,
            analysed=True,
            discretization=first.discretization if domain == "discrete" else None,
            total_delay_s=first.total_delay_s,
            notes=tuple(notes),
            variants=tuple(
                VariantResult(ev.variant.id, dict(ev.variant.parameters), ev.analysis)
                for ev in evaluations
            ),
            tags=tuple(spec.tags),
        )
        if inner_evaluations:
            inner_spec = next(s for s in project.loops if s.name == spec.inner)
            inner_context = LoopContext(inner_spec, project, tuple(inner_evaluations))
    else:
        result = LoopResult(
            name=spec.name,
            domain=domain,
            sample_rate_hz=spec.sample_rate_hz,
            analysed=False,
            discretization=None,
            total_delay_s=None,
            notes=(reason,) if reason else (),
            variants=(),
            not_analysed_reason=reason,
            tags=tuple(spec.tags),
        )
    extras = {}
    if stop is not None:
        extras = {"not_analysed_rule": stop.rule, "not_analysed_location": stop.location}
    context = LoopContext(
        spec=spec,
        project=project,
        evaluations=tuple(evaluations),
        not_analysed_reason=reason,
        inner=inner_context,
        extras=extras,
    )
    return AnalysedLoop(context, result, cacheable)


# ---------------------------------------------------------------- curves for plots
CURVE_POINTS = 400


def with_response_curves(project, spec, result, models: dict):
    """``result`` with L sampled for the nominal and the worst variant (plots only).

    Which variants: :func:`ruleguard.report.html.plotted_variants`.
    ``models`` maps variant ids to the built LoopModel; a missing one (a
    cached loop) is built again (models only, no analysis).
    """
    import dataclasses

    from ruleguard.report.html import plotted_variants
    from ruleguard.report.model import ResponseCurve

    if not result.analysed or not result.variants:
        return result
    chosen = plotted_variants(result.variants)
    curves = []
    for variant_result, role in chosen:
        model = models.get(variant_result.id)
        if model is None:
            model = _rebuild_model(project, spec, variant_result.id)
            if model is None:
                continue
        hz, values = sample_open_loop(model.open_loop, variant_result.analysis)
        curves.append(ResponseCurve(variant_result.id, role, hz, values))
    return dataclasses.replace(result, curves=tuple(curves))


def _rebuild_model(project, spec, variant_id: str):
    from ruleguard.models.assemble import build_loop
    from ruleguard.models.families import loop_variants

    for variant in loop_variants(project, spec):
        if variant.id == variant_id:
            try:
                return build_loop(project, spec, variant)
            except LoopNotAnalysable:
                return None
    return None


def sample_open_loop(open_loop, analysis, points: int = CURVE_POINTS):
    """L on a log grid for plots: ``(frequency_hz, L)`` as tuples.

    From a decade below the lowest corner or reported frequency to the
    Nyquist frequency (discrete loops) or a decade above the highest reported
    frequency (continuous), inside the range where every factor is known, with
    the reported crossover, phase-crossover and peak frequencies added so the
    markers sit on samples.
    """
    import numpy as np

    two_pi = 2.0 * np.pi
    margins = analysis.margins
    reported_hz = [
        margins.gain_margin_hz, margins.lower_gain_margin_hz, margins.crossover_hz,
        margins.sensitivity_peak_hz, margins.complementary_peak_hz, margins.bandwidth_hz,
        None if margins.disk_margin is None else margins.disk_margin.hz,
    ] + [c.hz for c in margins.crossovers]
    reported = np.array([two_pi * f for f in reported_hz if f is not None and f > 0], float)
    reported = reported[np.isfinite(reported)]
    corners = open_loop.corner_frequencies()
    known = np.concatenate([reported, corners])
    w_floor = max([0.0] + [float(f.w_min) for f in open_loop.factors])
    w_top = open_loop.w_max
    if known.size == 0:
        low, high = 1e-2, 1e2
    else:
        low = float(known.min()) / 10.0
        high = float(reported.max() if reported.size else known.max()) * 10.0
    if open_loop.nyquist_rad_s is not None:
        high = open_loop.nyquist_rad_s
    if np.isfinite(w_top):
        high = min(high, w_top)
    low = max(low, w_floor)
    if not low < high:
        low = high / 1e3
    w = np.geomspace(low, high, points)
    extra = reported[(reported > low) & (reported < high)]
    w = np.unique(np.concatenate([w, extra]))
    with np.errstate(all="ignore"):
        values = np.asarray(open_loop.response(w), dtype=complex)
    return tuple(float(x) for x in w / two_pi), tuple(complex(v) for v in values)
