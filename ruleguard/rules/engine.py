"""Ruleset x analysed loops -> findings.

For each loop the engine works out the effective configuration of every rule
(catalog defaults, then the ruleset's ``[rules."..."]`` tables, then every
matching ``[[adjustments]]`` item in order), runs the selected rules, stamps
each :class:`~ruleguard.rules.base.Violation` with its severity and any
waiver, and finally reports on the ruleset itself (expired and unused
waivers). Everything is one lazy iterator (:func:`iter_findings`);
:func:`evaluate` collects it. Nothing here prints or reads files.

The configuration depends only on which adjustments match a loop: it is
resolved once per ruleset and set of matching adjustments and shared by the
loops alike (read-only; each caller of :func:`effective_rules` gets its own
mapping).

Order of findings: loops in the order given, rules by id within a loop, a
rule's own order within a rule; the ruleset findings (``waiver.*``) last.

Rules that re-run other rules (``quantization.robust`` re-checks the margin
rules on rounded coefficients) find the loop's effective configuration in
the context they receive: ``ctx.extras["rule_parameters"]`` maps every rule
id to its :class:`~ruleguard.rules.spec.ParameterValues` for this loop and
``ctx.extras["rule_severities"]`` to its :class:`Severity` (``DISABLED`` for rules
turned off here).
"""

from __future__ import annotations

import datetime
import fnmatch
from collections.abc import Callable, Iterable, Iterator, Mapping, Sequence
from dataclasses import replace

from ruleguard.deferred import numpy as np
from ruleguard.errors import InputError
from ruleguard.frozen import record
from ruleguard.location import Location
from ruleguard.rules.base import Finding, LoopContext, Severity, Violation
from ruleguard.rules.catalog import RULES, UnknownRule, check_patterns, is_selected, matches
from ruleguard.rules.hints import HINTED_RULES, LoopHints
from ruleguard.rules.locations import at_operating_point
from ruleguard.rules.spec import Adjustment, ParameterValues, Ruleset, RuleSetting, Waiver

CLOSED_LOOP = "stability.closed-loop"


@record
class EffectiveRule:
    """How one rule runs on one loop: severity, parameters and where they were set.

    ``location`` is the last ruleset table (rule table or adjustment) that set
    anything for this rule on this loop, ``None`` when all is default.
    """

    rule: str
    severity: Severity
    parameters: ParameterValues
    location: Location | None


def utc_today() -> datetime.date:
    """Today's date in UTC (waivers apply through their expiry day, UTC)."""
    return datetime.datetime.now(datetime.timezone.utc).date()


def nominal_crossover_hz(ctx: LoopContext) -> float | None:
    """Gain crossover of the nominal variant (the first evaluation), if any."""
    if not ctx.evaluations:
        return None
    margins = getattr(ctx.evaluations[0].analysis, "margins", None)
    return getattr(margins, "crossover_hz", None)


def adjustment_applies(
    adjustment: Adjustment,
    loop_name: str,
    tags: Iterable[str] = (),
    crossover_hz: float | None = None,
) -> bool:
    """Does ``adjustment`` match a loop (name globs or tags, then crossover band)?"""
    if adjustment.loops or adjustment.tags:
        by_name = any(fnmatch.fnmatchcase(loop_name, glob) for glob in adjustment.loops)
        by_tag = bool(set(adjustment.tags) & set(tags))
        if not (by_name or by_tag):
            return False
    if adjustment.crossover_hz is not None:
        low, high = adjustment.crossover_hz
        if crossover_hz is None:
            return False
        if low is not None and crossover_hz < low:
            return False
        if high is not None and crossover_hz >= high:
            return False
    return True


def waiver_applies(waiver: Waiver, rule_id: str, loop_name: str | None) -> bool:
    """Does ``waiver`` cover a finding of ``rule_id`` on ``loop_name``?"""
    if loop_name is None or not matches(rule_id, waiver.rule):
        return False
    return any(fnmatch.fnmatchcase(loop_name, glob) for glob in waiver.loops)


def waiver_active(waiver: Waiver, today: datetime.date) -> bool:
    """A waiver applies through its expiry day (included); one without expiry always."""
    return waiver.expires is None or today <= waiver.expires


def _apply(
    setting: RuleSetting,
    severity: Severity,
    values: dict,
    locations: dict,
) -> Severity:
    if setting.severity is not None:
        severity = setting.severity
    for name, value in setting.parameters.items():
        values[name] = value
        loc = setting.locations.get(name)
        if loc is not None:
            locations[name] = loc
        else:
            locations.pop(name, None)
    return severity


def _matching(
    ruleset: Ruleset, loop_name: str | None, tags: tuple[str, ...], crossover_hz: float | None
) -> tuple[int, ...]:
    """Positions in ``ruleset.adjustments`` of the items that apply to the loop."""
    if loop_name is None:
        return ()
    return tuple(
        i
        for i, o in enumerate(ruleset.adjustments)
        if adjustment_applies(o, loop_name, tags, crossover_hz)
    )


def _resolve(ruleset: Ruleset, matching: Sequence[Adjustment]) -> dict[str, EffectiveRule]:
    result: dict[str, EffectiveRule] = {}
    for rule_id, rule in RULES.items():
        severity = rule.default_severity
        values = rule.defaults()
        locations: dict[str, Location] = {}
        where: Location | None = None
        base = ruleset.rules.get(rule_id)
        if base is not None:
            severity = _apply(base, severity, values, locations)
            where = base.location
        for adjustment in matching:
            setting = adjustment.rules.get(rule_id)
            if setting is not None:
                severity = _apply(setting, severity, values, locations)
                where = setting.location
        if rule.always_on and severity is Severity.DISABLED:
            severity = rule.default_severity
        result[rule_id] = EffectiveRule(
            rule_id, severity, ParameterValues(values, locations), where
        )
    return result


class _Resolved:
    """One resolved configuration: the rules and the views rules read from ``ctx.extras``."""

    __slots__ = ("rules", "parameters", "severities")

    def __init__(self, rules: dict[str, EffectiveRule]) -> None:
        self.rules = rules
        self.parameters = {r: e.parameters for r, e in rules.items()}
        self.severities = {r: e.severity for r, e in rules.items()}


#: id(ruleset) -> (weak reference to it, the catalog it was resolved against,
#: matching adjustment positions -> resolved configuration). The configuration
#: of a loop depends only on which adjustments match it, so the loops that
#: match the same ones (most of a project) share one resolution.
_RESOLUTIONS: dict[int, tuple] = {}


def _resolved(ruleset: Ruleset, matching: tuple[int, ...]) -> _Resolved:
    catalog = list(RULES.values())
    entry = _RESOLUTIONS.get(id(ruleset))
    if entry is None or entry[0]() is not ruleset or entry[1] != catalog:
        import weakref

        key = id(ruleset)
        try:
            ref = weakref.ref(ruleset, lambda _, key=key: _RESOLUTIONS.pop(key, None))
        except TypeError:  # not weakly referable: resolve every time
            return _Resolved(_resolve(ruleset, [ruleset.adjustments[i] for i in matching]))
        entry = _RESOLUTIONS[key] = (ref, catalog, {})
    table = entry[2]
    found = table.get(matching)
    if found is None:
        found = table[matching] = _Resolved(
            _resolve(ruleset, [ruleset.adjustments[i] for i in matching])
        )
    return found


def effective_rules(
    ruleset: Ruleset,
    loop_name: str | None = None,
    tags: Iterable[str] = (),
    crossover_hz: float | None = None,
) -> dict[str, EffectiveRule]:
    """The configuration of every rule for one loop (``loop_name=None``: no adjustment)."""
    matching = _matching(ruleset, loop_name, tuple(tags), crossover_hz)
    return dict(_resolved(ruleset, matching).rules)


def _lower(a: Severity, b: Severity | None) -> Severity:
    if b is None:
        return a
    return a if a.rank <= b.rank else b


def _with_ruleset_location(
    related: tuple[Location, ...], effective: EffectiveRule, ruleset: Ruleset
) -> tuple[Location, ...]:
    files = set(ruleset.files) | {ruleset.file}
    if effective.location is None or any(loc.file in files for loc in related):
        return related
    return (*related, effective.location)


def _finding(
    rule_id: str,
    severity: Severity,
    loop: str | None,
    violation: Violation,
    related: tuple[Location, ...],
    waiver: Waiver | None,
) -> Finding:
    return Finding(
        rule=rule_id,
        severity=severity,
        loop=loop,
        variant=violation.variant,
        message=violation.message,
        measured=violation.measured,
        limit=violation.limit,
        unit=violation.unit,
        frequency_hz=violation.frequency_hz,
        location=violation.location,
        related=related,
        waived=waiver is not None,
        waiver_reason=waiver.reason if waiver is not None else None,
        key_path=violation.key_path,
        hint=violation.hint,
    )


def _with_hint(hints: LoopHints, rule_id: str, violation: Violation) -> Violation:
    """``violation`` with its fix hint (unchanged when none can be computed)."""
    try:
        hint = hints.hint_for(rule_id, violation)
    except (ArithmeticError, ValueError, np.linalg.LinAlgError):
        # a hint is advice: a numerical failure computing it never changes the verdict
        return violation
    return violation if hint is None else replace(violation, hint=hint)


def _not_analysed_violation(ctx: LoopContext) -> Violation:
    extras = ctx.extras or {}
    location = extras.get("not_analysed_location") or ctx.spec.controller.location
    controller = ctx.spec.controller
    return Violation(
        variant=None,
        message=f"loop not analysed: {ctx.not_analysed_reason}",
        measured=None,
        limit=None,
        unit=None,
        frequency_hz=None,
        location=location,
        key_path=f"{controller.file}:{controller.path}#not-analysed",
    )


def _check_selection(only: Sequence[str], skip: Sequence[str]) -> None:
    for option, patterns in (("--only", only), ("--skip", skip)):
        try:
            check_patterns(patterns)
        except UnknownRule as exc:
            raise InputError("<command line>", None, None, option, str(exc)) from None


#: (catalog, only, skip) of the last run -> its loop rules and their selection
#: (a check judges its loops one by one with the same selection)
_SELECTION: list = [None]


def _loop_rules(only: tuple[str, ...], skip: tuple[str, ...]) -> tuple[list[str], dict[str, bool]]:
    """The loop-scope rule ids, sorted, and whether ``--only``/``--skip`` select each."""
    key = (list(RULES.values()), only, skip)
    entry = _SELECTION[0]  # (key, value), replaced whole: a concurrent run sees one or the other
    if entry is None or entry[0] != key:
        loop_rules = sorted(r for r, spec in RULES.items() if spec.scope == "loop")
        entry = (key, (loop_rules, {r: is_selected(r, only, skip) for r in loop_rules}))
        _SELECTION[0] = entry
    return entry[1]


def iter_findings(
    contexts: Iterable[LoopContext],
    ruleset: Ruleset,
    *,
    only: Sequence[str] = (),
    skip: Sequence[str] = (),
    today: datetime.date | None = None,
    cached: Mapping[str, Sequence[Finding]] | None = None,
    judged: Mapping[str, Sequence[Finding]] | None = None,
    loop_names: Sequence[str] | None = None,
) -> Iterator[Finding]:
    """Every finding, lazily, in the documented order (see :func:`evaluate`)."""
    only, skip = tuple(only), tuple(skip)
    _check_selection(only, skip)
    if today is None:
        today = utc_today()
    elif isinstance(today, datetime.datetime):
        today = today.date()
    active = [w for w in ruleset.waivers if waiver_active(w, today)]
    hits = {id(w): 0 for w in active}
    evaluated: set[str] = set()
    # the project's loop names, for waiver.unused: read only when a waiver needs them
    project_loops: Callable[[], list[str]] | None = None

    for loop_name, found in (cached or {}).items():
        evaluated.add(loop_name)
        for f in found:
            for w in active:
                if f.waived and waiver_applies(w, f.rule, f.loop):
                    hits[id(w)] += 1

    for loop_name, found in (judged or {}).items():
        # judged this run elsewhere: each finding used the first waiver that applies
        evaluated.add(loop_name)
        for f in found:
            if f.waived:
                waiver = next((w for w in active if waiver_applies(w, f.rule, f.loop)), None)
                if waiver is not None:
                    hits[id(waiver)] += 1
    if judged and loop_names is not None:
        names = list(loop_names)  # as the first analysed context would give
        project_loops = names.copy

    loop_rules, selected = _loop_rules(only, skip)
    for ctx in contexts:
        name = ctx.spec.name
        evaluated.add(name)
        if project_loops is None:
            project_loops = _loop_names_of(ctx.project)
        resolved = _resolved(
            ruleset,
            _matching(ruleset, name, tuple(ctx.spec.tags), nominal_crossover_hz(ctx)),
        )
        config = resolved.rules
        ctx = replace(
            ctx,
            extras={
                **(ctx.extras or {}),
                "rule_parameters": dict(resolved.parameters),
                "rule_severities": dict(resolved.severities),
            },
        )
        reason_rule = None
        if ctx.not_analysed_reason is not None and not ctx.evaluations:
            reason_rule = (ctx.extras or {}).get("not_analysed_rule") or CLOSED_LOOP
        hints = None  # the loop's fix hints, computed at its first failing margin finding
        ids = loop_rules if reason_rule is None or reason_rule in loop_rules else sorted(
            [*loop_rules, reason_rule]
        )
        for rule_id in ids:
            effective = config.get(rule_id)
            if rule_id == reason_rule:
                # A loop that could not be analysed has no stability verdict: its
                # finding is never hidden by --only/--skip or by `disabled`.
                severity = effective.severity if effective is not None else Severity.ERROR
                if severity is Severity.DISABLED:
                    severity = config[CLOSED_LOOP].severity
                violations: Iterable[Violation] = (_not_analysed_violation(ctx),)
            else:
                if not selected[rule_id] or effective.severity is Severity.DISABLED:
                    continue
                severity = effective.severity
                violations = RULES[rule_id].function(ctx, effective.parameters)
            for violation in violations:
                if violation.severity is None and rule_id in HINTED_RULES and ctx.evaluations:
                    if hints is None:
                        hints = LoopHints(ctx)
                    violation = _with_hint(hints, rule_id, violation)
                violation = at_operating_point(ctx, violation)
                waiver = next((w for w in active if waiver_applies(w, rule_id, name)), None)
                if waiver is not None:
                    hits[id(waiver)] += 1
                related = violation.related
                if effective is not None:
                    related = _with_ruleset_location(related, effective, ruleset)
                yield _finding(
                    rule_id,
                    _lower(severity, violation.severity),
                    name,
                    violation,
                    related,
                    waiver,
                )

    yield from _ruleset_findings(
        ruleset, today, active, hits, evaluated, project_loops, only, skip
    )


def _loop_names_of(project) -> Callable[[], list[str]]:
    def names() -> list[str]:
        return [s.name for s in getattr(project, "loops", ())]

    return names


def _ruleset_findings(
    ruleset: Ruleset,
    today: datetime.date,
    active: list[Waiver],
    hits: dict[int, int],
    evaluated: set[str],
    project_loops: Callable[[], list[str]] | None,
    only: tuple[str, ...],
    skip: tuple[str, ...],
) -> Iterator[Finding]:
    top = _resolved(ruleset, ()).rules
    expired_rule, unused_rule = top["waiver.expired"], top["waiver.unused"]
    if is_selected("waiver.expired", only, skip) and expired_rule.severity is not Severity.DISABLED:
        for w in ruleset.waivers:
            if waiver_active(w, today):
                continue
            yield _ruleset_finding(
                "waiver.expired",
                expired_rule.severity,
                w,
                f"waiver of {w.rule} for {', '.join(w.loops)} expired on "
                f"{w.expires.isoformat()} and no longer applies (reason given: {w.reason})",
            )
    if not is_selected("waiver.unused", only, skip) or unused_rule.severity is Severity.DISABLED:
        return
    all_loops: list[str] | None = None
    for w in active:
        if hits[id(w)] or not any(is_selected(r, only, skip) for r in RULES if matches(r, w.rule)):
            continue
        if all_loops is None:
            all_loops = project_loops() if project_loops is not None else sorted(evaluated)
        named = [n for n in all_loops if any(fnmatch.fnmatchcase(n, g) for g in w.loops)]
        if named and not any(n in evaluated for n in named):
            continue  # its loops are not part of this run: not judged
        if not named and project_loops is None:
            continue  # only cached loops here: the project's loop names are unknown
        why = (
            "its loops pass the rule"
            if named
            else f"no loop matches {', '.join(repr(g) for g in w.loops)}"
        )
        yield _ruleset_finding(
            "waiver.unused",
            unused_rule.severity,
            w,
            f"waiver of {w.rule} for {', '.join(w.loops)} matched no finding ({why}); "
            "remove it or correct it",
        )


def _ruleset_finding(rule_id: str, severity: Severity, waiver: Waiver, message: str) -> Finding:
    return Finding(
        rule=rule_id,
        severity=severity,
        loop=None,
        variant=None,
        message=message,
        measured=None,
        limit=None,
        unit=None,
        frequency_hz=None,
        location=waiver.location,
        key_path=f"waivers:{waiver.rule}:{','.join(waiver.loops)}",
    )


def evaluate(
    contexts: Iterable[LoopContext],
    ruleset: Ruleset,
    *,
    only: Sequence[str] = (),
    skip: Sequence[str] = (),
    today: datetime.date | None = None,
    cached: Mapping[str, Sequence[Finding]] | None = None,
    judged: Mapping[str, Sequence[Finding]] | None = None,
    loop_names: Sequence[str] | None = None,
) -> tuple[Finding, ...]:
    """Apply ``ruleset`` to analysed loops; return every finding.

    Parameters
    ----------
    contexts:
        One :class:`~ruleguard.rules.base.LoopContext` per loop, in report order.
    ruleset:
        The loaded ruleset (:func:`ruleguard.load.rulesets.load_ruleset`).
    only, skip:
        ``--only``/``--skip`` patterns: rule ids or family prefixes. An unknown
        pattern is an :class:`~ruleguard.errors.InputError` (file
        ``"<command line>"``). The finding of a loop that could not be analysed
        is reported whatever the selection.
    today:
        The date waivers are judged on (default: today, UTC).
    cached:
        Findings of loops taken from the cache (loop name -> findings): they are
        not re-evaluated, but count as evaluated for ``waiver.unused``.
    judged:
        Findings of loops judged this run by the workers that analysed them
        (:func:`ruleguard.pipeline.judge_loop`): not returned again, and
        their waivers count as used exactly as if judged here.
    loop_names:
        The project's loop names, for ``waiver.unused`` when loops were
        judged elsewhere (otherwise read from the contexts' project).

    Returns
    -------
    tuple of Finding
        Loops in the order given, rules by id within a loop; ``waiver.*``
        findings about the ruleset last.
    """
    return tuple(
        iter_findings(contexts, ruleset, only=only, skip=skip, today=today, cached=cached,
                      judged=judged, loop_names=loop_names)
    )
