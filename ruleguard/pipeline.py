"""One check run: load -> models -> analysis -> rules -> Report.

The only function with a side effect here is the optional cache (a folder
under the manifest's folder, never an input file). Everything else is a
composition of the pure stages.
"""

from __future__ import annotations

import datetime as _dt
import time
import warnings
from collections.abc import Callable, Sequence
from dataclasses import dataclass, field
from pathlib import Path

from ruleguard import __version__
from ruleguard.errors import LoopNotAnalysable, NumericalWarning
from ruleguard.rules.base import Evaluation, Finding, LoopContext, Severity
from ruleguard.timings import stage

#: Progress callback: (loops done, loops in all, name of the loop now).
Progress = Callable[[int, int, str], None]


@dataclass(frozen=True)
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


@dataclass(frozen=True, eq=False)
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
        from ruleguard.load.validation import remembering

        memo = _validation_memo(manifest) if options.use_cache else None
        with remembering(memo):
            project = load_project(Path(manifest))
            ruleset = load_ruleset(project.root, project.ruleset, project.ruleset_location)
        if memo is not None:
            with stage("cache"):
                memo.save(set(project.texts) | set(_all_inputs(project)))
    return check_loaded(project, ruleset, options, progress=progress, statistics=statistics)


def _validation_memo(manifest: str | Path):
    """The schema-validation memo of the cache folder beside ``manifest``."""
    from ruleguard.cache import LoopCache, ValidatedDocuments

    with stage("cache"):
        root = Path(manifest).absolute().parent.resolve()
        return ValidatedDocuments(LoopCache(root, enabled=True))


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
    ruleset_print = ruleset.fingerprint()

    deadline = None
    if options.time_budget_s is not None:
        deadline = time.monotonic() + options.time_budget_s
    loop_results: dict[str, object] = {}
    cached_findings: dict[str, tuple[Finding, ...]] = {}
    contexts: list[LoopContext] = []
    keys: dict[str, str] = {}
    built_models: dict[str, dict] = {}  # loop -> variant id -> LoopModel (for curves)
    for i, spec in enumerate(specs):
        if progress is not None:
            progress(i, len(specs), spec.name)
        if cache is not None:
            with stage("cache"):
                key = cache.key_for(project, spec.name, ruleset_print, cache_options)
                keys[spec.name] = key
                hit = cache.get(key)
            if hit is not None:
                loop_results[spec.name], cached_findings[spec.name] = hit
                stats.cached_loops += 1
                continue
        analysed = analyse_loop(project, spec, deadline=deadline, budget_s=options.time_budget_s)
        analysed = without_unwanted_midpoints(analysed, ruleset)
        if not analysed.cacheable:
            keys.pop(spec.name, None)
        stats.analysed_loops += 1
        stats.evaluations += len(analysed.context.evaluations)
        loop_results[spec.name] = analysed.result
        contexts.append(analysed.context)
        if options.want_curves:
            built_models[spec.name] = {
                ev.variant.id: ev.model for ev in analysed.context.evaluations
            }
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
        )
    if cache is not None:
        by_loop: dict[str, list[Finding]] = {c.spec.name: [] for c in contexts}
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
        findings = _ordered_findings(specs, fresh, cached_findings)
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
    """Build and analyse every variant of one loop (pure but for the clock).

    ``deadline`` (a ``time.monotonic()`` value) stops the work between
    variants. A numerical failure (overflow, a singular matrix) while
    building or analysing a variant makes the loop "not analysed" with the
    reason: the gate fails rather than passing an unverified loop.
    """
    from ruleguard.models.families import loop_variants
    from ruleguard.report.model import LoopResult, VariantResult

    domain = "discrete" if spec.sample_rate_hz else "continuous"
    with stage("build"):
        variants = loop_variants(project, spec)
    evaluations: list[Evaluation] = []
    inner_evaluations: list[Evaluation] = []
    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always")
        reason, reason_rule, reason_location, cacheable = _analyse_variants(
            project, spec, variants, deadline, budget_s, evaluations, inner_evaluations
        )
    numerical_notes = [
        f"numerical: {w.message}" for w in caught if issubclass(w.category, NumericalWarning)
    ]
    if reason is not None:
        evaluations = []

    inner_context = None
    if evaluations:
        first = evaluations[0].model
        notes: list[str] = list(first.notes)
        for text in numerical_notes:
            if text not in notes:
                notes.append(text)
        for ev in evaluations:
            for note in ev.analysis.notes:
                text = note if ev.variant.id == "nominal" else f"{ev.variant.id}: {note}"
                if text not in notes:
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
    if reason is not None:
        extras = {"not_analysed_rule": reason_rule, "not_analysed_location": reason_location}
    context = LoopContext(
        spec=spec,
        project=project,
        evaluations=tuple(evaluations),
        not_analysed_reason=reason,
        inner=inner_context,
        extras=extras,
    )
    return AnalysedLoop(context, result, cacheable)


def _analyse_variants(project, spec, variants, deadline, budget_s, evaluations, inner_evaluations):
    """Fill ``evaluations`` (and ``inner_evaluations``) variant by variant.

    Returns ``(reason, rule, location, cacheable)``: the reason the loop is
    not analysed (``None`` when every variant was), the rule and location of
    that finding, and whether the outcome may be cached.
    """
    import numpy as np

    from ruleguard.analysis.margins import analyse_open_loop
    from ruleguard.models.assemble import build_loop

    try:
        for variant in variants:
            if deadline is not None and time.monotonic() > deadline:
                return (
                    f"the time budget of the whole check ({budget_s:g} s) was used up before "
                    f"variant {variant.id} of this loop; raise it with --time-budget",
                    "stability.closed-loop",
                    spec.location,
                    False,
                )
            try:
                model, inner_reason, inner_analysis, analysis = _variant_analysis(
                    project, spec, variant, build_loop, analyse_open_loop
                )
            except (ValueError, ArithmeticError, np.linalg.LinAlgError) as exc:
                raise _numerical_failure(spec, variant, exc) from exc
            if inner_analysis is not None:
                inner_evaluations.append(Evaluation(variant, model.inner, inner_analysis))
            if inner_reason is not None:
                location = spec.field_locations.get("inner", spec.location)
                return inner_reason, "stability.closed-loop", location, True
            evaluations.append(Evaluation(variant, model, analysis))
    except LoopNotAnalysable as exc:
        return exc.reason, exc.rule, exc.location, True
    return None, None, None, True


def _variant_analysis(project, spec, variant, build_loop, analyse):
    """Build one variant, check its inner loops, analyse it.

    Returns ``(model, inner_reason, inner_analysis, analysis)``; ``analysis``
    is None when an inner loop is unstable (``inner_reason`` says why).
    """
    with stage("build"):
        model = build_loop(project, spec, variant)
    inner_reason, inner_analysis = _inner_loop_problem(model, variant, analyse)
    if inner_reason is not None:
        return model, inner_reason, inner_analysis, None
    if not model.open_loop.rational.is_proper:
        raise LoopNotAnalysable(
            "the open loop has more zeros than poles (improper): its frequency "
            "response grows without bound and the Nyquist contour cannot be closed",
            "stability.closed-loop",
            spec.controller.location,
        )
    with stage("analysis"):
        analysis = analyse(model.open_loop)
    return model, None, inner_analysis, analysis


def _numerical_failure(spec, variant, exc: Exception) -> LoopNotAnalysable:
    which = "" if variant.id == "nominal" else f" (variant {variant.id})"
    return LoopNotAnalysable(
        f"numerical failure while building or analysing the loop{which}: {exc}. The loop "
        "could not be verified; check the magnitudes of its gains and coefficients (values "
        "this large or small overflow double precision). If they are physically sensible, "
        "please report this as a ruleguard bug.",
        "stability.closed-loop",
        spec.controller.location,
    )


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


def _inner_loop_problem(model, variant, analyse):
    """Why the inner loops of a cascade make the outer loop unusable (or None),
    and the analysis of the direct inner loop (None without one)."""
    inner = model.inner
    direct = None
    while inner is not None:
        with stage("analysis"):
            analysis = analyse(inner.open_loop)
        if direct is None:
            direct = analysis
        if not analysis.stability.stable:
            which = "" if variant.id == "nominal" else f" in variant {variant.id}"
            reason = (
                f"inner loop {inner.name} is not closed-loop stable{which}; "
                f"the outer loop {model.name} was not analysed"
            )
            return reason, direct
        inner = inner.inner
    return None, direct
