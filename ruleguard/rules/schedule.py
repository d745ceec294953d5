"""Rules of the ``schedule`` family: gain schedules over an operating range.

A scheduled loop (docs/formats-additions.md, "Gain schedules") is checked by
every other rule at each breakpoint ``schedule-k`` and interval midpoint
``schedule-k.5``, crossed with the plant family. These two rules judge the
schedule as a whole:

* ``schedule.coverage``: the breakpoints span the operating range the plant
  entry declares (``operating_range``). Outside the table firmware holds the
  end gains, at operating points nothing here has checked. Its parameter
  ``midpoints`` (default true) decides whether the midpoint variants are
  checked at all (the pipeline drops them when it is false).
* ``schedule.smoothness``: neighbouring breakpoints' gain crossover
  frequencies differ by at most ``max_ratio``, at every member of the plant
  family. A large step in crossover between neighbours means the
  interpolated gains between them are a guess the table does not support,
  and switching or fast sweeps of the operating point excite transients.

References
----------
W. J. Rugh and J. S. Shamma, "Research on gain scheduling", Automatica
36(10), 2000 (the scheduling variable should vary slowly and the frozen
designs at neighbouring points should be close; checking interpolated
points between the design points is the customary validation step; from
memory).
"""

from __future__ import annotations

from collections.abc import Iterable, Mapping
from typing import Any

from ruleguard.rules.base import Evaluation, LoopContext, Severity, Violation
from ruleguard.rules.evidence import format_number, not_analysed, note, param
from ruleguard.rules.locations import key, plant_location, related_locations
from ruleguard.rules.spec import Parameter, RuleSpec

#: Default largest ratio of neighbouring breakpoints' crossover frequencies.
DEFAULT_MAX_RATIO = 2.0


def _schedule(ctx: LoopContext):
    return getattr(ctx.spec.controller, "schedule", None)


def _base_key(ctx: LoopContext, *parts: str) -> str:
    controller = ctx.spec.controller
    return key(f"{controller.file}:{controller.path}", "schedule", *parts)


def schedule_coverage(ctx: LoopContext, params: Mapping[str, Any]) -> Iterable[Violation]:
    """The breakpoints' range [first, last] contains the plant's declared operating range."""
    schedule = _schedule(ctx)
    if schedule is None:
        return []
    plants = getattr(ctx.project, "plants", None) or {}
    entry = plants.get(ctx.spec.plant)
    name = schedule.plant_parameter
    declared = None if entry is None else entry.operating_range.get(name)
    if declared is None:
        where = plant_location(ctx) or ctx.spec.location
        return [note(
            f"schedule coverage not checked: plant '{ctx.spec.plant}' declares no "
            f"operating_range for '{name}' (add operating_range = {{ {name} = [min, max] }} "
            "to its registry entry)",
            where,
            key_path=_base_key(ctx, "coverage", "undeclared"),
            related=(schedule.location,),
        )]
    low, high, range_location = declared
    first, last = schedule.points[0], schedule.points[-1]
    out: list[Violation] = []
    related = (range_location, *related_locations(ctx, params))
    if low < first.value:
        out.append(_uncovered_end(ctx, schedule, first, low, related, "low"))
    if high > last.value:
        out.append(_uncovered_end(ctx, schedule, last, high, related, "high"))
    return out


#: Words of the coverage finding at each end of the schedule.
_END_WORDS = {
    "low": ("starts at", "operated from", "below the first", "at or below the operating "
            "range's minimum"),
    "high": ("ends at", "operated up to", "above the last", "at or above the operating "
             "range's maximum"),
}


def _uncovered_end(ctx: LoopContext, schedule, point, bound: float, related,
                   end: str) -> Violation:
    """The ``schedule.coverage`` finding of an operating range that reaches past the
    schedule's first (``end="low"``) or last (``"high"``) breakpoint ``point``."""
    at, operated, beyond, where = _END_WORDS[end]
    return Violation(
        variant=None,
        message=(
            f"the schedule {at} {schedule.variable} = {format_number(point.value)} "
            f"but the plant is {operated} {format_number(bound)}: {beyond} "
            "breakpoint the firmware holds its gains at operating points no variant "
            f"checks; add a breakpoint {where}"
        ),
        measured=float(point.value),
        limit=float(bound),
        unit=None,
        frequency_hz=None,
        location=point.value_location,
        related=related,
        key_path=_base_key(ctx, "coverage", end),
    )


def _breakpoint_evaluations(ctx: LoopContext) -> dict[str, dict[int, Evaluation]]:
    """Breakpoint evaluations by plant-family member (``""`` the nominal plant), then number."""
    found: dict[str, dict[int, Evaluation]] = {}
    for ev in ctx.evaluations:
        variant_id = str(getattr(ev.variant, "id", ""))
        head, _, member = variant_id.partition("/")
        if not head.startswith("schedule-"):
            continue
        label = head[len("schedule-"):]
        if not label.isdigit():
            continue  # a midpoint
        found.setdefault(member, {})[int(label)] = ev
    return found


def schedule_smoothness(ctx: LoopContext, params: Mapping[str, Any]) -> Iterable[Violation]:
    """Neighbouring breakpoints' crossover frequencies differ by at most ``max_ratio``."""
    schedule = _schedule(ctx)
    if schedule is None or not_analysed(ctx):
        return []
    max_ratio = float(param(params, "max_ratio", DEFAULT_MAX_RATIO))
    by_member = _breakpoint_evaluations(ctx)
    worst: tuple[float, Evaluation, Evaluation, int] | None = None
    missing: list[str] = []
    count = len(schedule.points)
    for member in sorted(by_member, key=lambda m: (m != "", m)):
        points = by_member[member]
        for number in range(1, count):
            before, after = points.get(number), points.get(number + 1)
            if before is None or after is None:
                continue
            f1 = before.analysis.margins.crossover_hz
            f2 = after.analysis.margins.crossover_hz
            if f1 is None or f2 is None or not (f1 > 0 and f2 > 0):
                missing.append(str((before if f1 is None else after).variant.id))
                continue
            ratio = max(f1, f2) / min(f1, f2)
            if worst is None or ratio > worst[0]:
                worst = (ratio, before, after, number)
    out: list[Violation] = []
    if missing:
        out.append(note(
            f"schedule smoothness not judged where |L| never crosses 0 dB: variant "
            f"{missing[0]}" + (f" and {len(missing) - 1} other(s)" if len(missing) > 1 else ""),
            schedule.location,
            key_path=_base_key(ctx, "smoothness", "no-crossover"),
            variant=missing[0],
        ))
    if worst is not None and worst[0] > max_ratio:
        ratio, before, after, number = worst
        low_point, high_point = schedule.points[number - 1], schedule.points[number]
        f1 = before.analysis.margins.crossover_hz
        f2 = after.analysis.margins.crossover_hz
        out.append(Violation(
            variant=str(after.variant.id),
            message=(
                f"gain crossover steps from {format_number(f1)} Hz at breakpoint {number} "
                f"({schedule.variable} = {format_number(low_point.value)}) to "
                f"{format_number(f2)} Hz at breakpoint {number + 1} "
                f"({schedule.variable} = {format_number(high_point.value)}): a ratio of "
                f"{format_number(ratio)}, above {format_number(max_ratio)}; add a breakpoint "
                "between them or even out the gains"
            ),
            measured=ratio,
            limit=max_ratio,
            unit=None,
            frequency_hz=f2,
            location=high_point.location,
            related=(low_point.location, *related_locations(ctx, params, ("max_ratio",))),
            key_path=_base_key(ctx, "smoothness"),
        ))
    return out


RULES: tuple[RuleSpec, ...] = (
    RuleSpec(
        id="schedule.coverage",
        default_severity=Severity.ERROR,
        summary="A gain schedule's breakpoints span the plant's declared operating range.",
        explanation=(
            "For a loop whose controller binding names a `schedule`: the first breakpoint "
            "must be at or below, and the last at or above, the ends of the "
            "`operating_range` the plant entry declares for the scheduling variable. A "
            "plant without that declaration gets a note. With `midpoints = true` (the "
            "default) every interval's midpoint is checked by all rules with linearly "
            "interpolated gains (variants `schedule-k.5`); `midpoints = false` leaves "
            "them out.\n\n"
            "Why it matters: outside its table, firmware holds the end gains; the loop then "
            "runs at operating points (and plant gains) that no variant of the check "
            "covered.\n\n"
            "How to fix it: add breakpoints at the ends of the operating range, or correct "
            "the declared range."
        ),
        source="common practice (a schedule is validated over the whole operating envelope; "
               "Rugh & Shamma, Automatica 36(10), 2000)",
        parameters=(
            Parameter(
                "midpoints", "boolean", None, True,
                "check the midpoint of every interval with interpolated gains",
            ),
        ),
        function=schedule_coverage,
    ),
    RuleSpec(
        id="schedule.smoothness",
        default_severity=Severity.WARNING,
        summary="Neighbouring breakpoints' gain crossovers differ by at most a set ratio.",
        explanation=(
            "For a scheduled loop: at every member of the plant family, the gain crossover "
            "frequencies of neighbouring breakpoints (variants `schedule-k` and "
            "`schedule-(k+1)`) may differ by at most the factor `max_ratio` (default 2, one "
            "octave). The finding names the worst pair and points at the later row; a "
            "breakpoint without a crossover gets a note.\n\n"
            "Why it matters: a loop whose speed jumps between neighbouring points relies on "
            "interpolated gains the table does not support, and moving through the "
            "operating range then disturbs the loop.\n\n"
            "How to fix it: add breakpoints between the two, or retune them so the loop's "
            "crossover changes gradually."
        ),
        source="ruleguard's choice: one octave between neighbouring design points (no "
               "published threshold; Rugh & Shamma, Automatica 36(10), 2000, ask for "
               "neighbouring designs to be close)",
        parameters=(
            Parameter(
                "max_ratio", "number", None, DEFAULT_MAX_RATIO,
                "largest ratio of neighbouring breakpoints' crossover frequencies",
                minimum=1.0,
            ),
        ),
        function=schedule_smoothness,
    ),
)
