"""The rules table: every rule by id, with its texts, parameters and function.

``RULES`` joins the ``RULES`` tuples of the family modules (one module per
family, ARCHITECTURE.md) and adds the two rules the engine raises about the
ruleset itself (``waiver.expired``, ``waiver.unused``). A new rule is one
function, one row in its family's tuple, one test class and one explanation.
"""

from __future__ import annotations

import difflib
import importlib
import textwrap
from collections.abc import Iterable, Mapping
from typing import Any

from ruleguard.errors import InternalError
from ruleguard.rules.base import LoopContext, Severity, Violation
from ruleguard.rules.spec import RuleSpec

#: Family modules in catalog order (``ruleguard.rules.<name>``).
FAMILY_MODULES: tuple[str, ...] = (
    "stability",
    "margins",
    "sensitivity",
    "crossover",
    "bandwidth",
    "cascade",
    "controller",
    "structure",
    "filters",
    "sampling",
    "quantization",
    "steady_state",
    "bounds",
    "masks",
    "schedule",
)


def _raised_by_engine(ctx: LoopContext, params: Mapping[str, Any]) -> Iterable[Violation]:
    """Ruleset-scope rules are raised by the engine, never per loop."""
    return ()


_ENGINE_RULES: tuple[RuleSpec, ...] = (
    RuleSpec(
        id="waiver.expired",
        default_severity=Severity.WARNING,
        summary="A waiver in the ruleset has passed its expiry date and no longer applies.",
        explanation=(
            "A waiver applies through its `expires` date (that day included, UTC). After "
            "that the findings it covered are reported again, and this rule names the "
            "waiver at its place in the ruleset file.\n\n"
            "Why it matters: exceptions are granted for a reason and for a time; one that "
            "outlives its review silently turns into policy.\n\n"
            "How to fix it: fix the loop and delete the waiver, or review the exception "
            "again and set a new `expires` date with an updated `reason`."
        ),
        source="common practice (time-limited deviations in design review)",
        parameters=(),
        function=_raised_by_engine,
        scope="ruleset",
    ),
    RuleSpec(
        id="waiver.unused",
        default_severity=Severity.NOTE,
        summary="A waiver matched no finding: it waives nothing and can be removed.",
        explanation=(
            "A waiver whose rule was evaluated but that matched no finding on any loop "
            "(its loop globs match no loop of the project, or the loops it names pass "
            "the rule now). Waivers of rules left out with --only/--skip, or of loops "
            "outside a changed-files run, are not judged.\n\n"
            "Why it matters: stale waivers rot; a waiver left in place will silently hide "
            "the next regression of the same loop.\n\n"
            "How to fix it: delete the waiver, or correct its `rule` or `loops`."
        ),
        source="common practice",
        parameters=(),
        function=_raised_by_engine,
        scope="ruleset",
    ),
)


def _load_family(name: str) -> tuple[RuleSpec, ...]:
    full = f"ruleguard.rules.{name}"
    try:
        module = importlib.import_module(full)
    except ModuleNotFoundError as exc:
        if exc.name == full:
            return ()
        raise
    return tuple(getattr(module, "RULES", ()))


def _build_table() -> dict[str, RuleSpec]:
    table: dict[str, RuleSpec] = {}
    for name in FAMILY_MODULES:
        for rule in _load_family(name):
            if rule.id in table:
                raise InternalError(f"rule id {rule.id!r} defined twice (module {name})")
            table[rule.id] = rule
    for rule in _ENGINE_RULES:
        table[rule.id] = rule
    return table


RULES: dict[str, RuleSpec] = _build_table()


def family_of(rule_id: str) -> str:
    """The family of a rule id: the prefix before the first dot."""
    return rule_id.split(".", 1)[0]


def families() -> tuple[str, ...]:
    """Every family in the table, in catalog order."""
    seen: list[str] = []
    for rule_id in RULES:
        fam = family_of(rule_id)
        if fam not in seen:
            seen.append(fam)
    return tuple(seen)


def suggest(name: str, choices: Iterable[str] | None = None) -> str | None:
    """The closest known rule id or family (for "did you mean ...")."""
    pool = list(choices) if choices is not None else [*RULES, *families()]
    close = difflib.get_close_matches(name, pool, n=1, cutoff=0.6)
    return close[0] if close else None


class UnknownRule(LookupError):
    """A rule id or family that the table does not hold; ``suggestion`` may help."""

    def __init__(self, name: str) -> None:
        self.name = name
        self.suggestion = suggest(name)
        hint = f" (did you mean {self.suggestion!r}?)" if self.suggestion else ""
        super().__init__(f"no rule or rule family {name!r}{hint}")


def matches(rule_id: str, pattern: str) -> bool:
    """True when ``pattern`` is ``rule_id`` or a family prefix of it (``margin``)."""
    return rule_id == pattern or rule_id.startswith(pattern.rstrip(".") + ".")


def check_patterns(patterns: Iterable[str]) -> None:
    """Raise :class:`UnknownRule` for the first pattern that selects no rule."""
    for pattern in patterns:
        if not any(matches(rule_id, pattern) for rule_id in RULES):
            raise UnknownRule(pattern)


def is_selected(rule_id: str, only: Iterable[str] = (), skip: Iterable[str] = ()) -> bool:
    """``--only``/``--skip`` selection: in some ``only`` pattern (if any), in no ``skip``."""
    only = tuple(only)
    if only and not any(matches(rule_id, p) for p in only):
        return False
    return not any(matches(rule_id, p) for p in skip)


def selected_rules(only: Iterable[str] = (), skip: Iterable[str] = ()) -> tuple[str, ...]:
    """The rule ids ``--only``/``--skip`` leave, sorted; unknown patterns raise."""
    only, skip = tuple(only), tuple(skip)
    check_patterns(only)
    check_patterns(skip)
    return tuple(sorted(r for r in RULES if is_selected(r, only, skip)))


def _format_default(value: Any) -> str:
    if value is None:
        return "not set (the limit is not checked)"
    if isinstance(value, bool):
        return "true" if value else "false"
    if isinstance(value, float):
        return f"{value:g}"
    return repr(value) if isinstance(value, str) else str(value)


def _wrap(text: str, width: int, **indents: str) -> list[str]:
    """Lines of at most ``width`` columns, never breaking a word or at a hyphen."""
    return textwrap.wrap(
        text, width=width, break_long_words=False, break_on_hyphens=False, **indents
    )


def _paragraphs(text: str, width: int = 88) -> list[str]:
    """Paragraphs (blank-line separated) filled to ``width`` columns."""
    out: list[str] = []
    for paragraph in text.strip().split("\n\n"):
        if out:
            out.append("")
        out.extend(_wrap(" ".join(paragraph.split()), width) or [""])
    return out


def explain(rule_id: str) -> str:
    """The text of ``ruleguard explain RULE``.

    What the rule checks, why it matters and how to fix a finding (the
    rule's explanation), its default severity, each parameter with type,
    unit and default, and the source of the default threshold.

    Raises
    ------
    UnknownRule
        ``rule_id`` is not in the table (the error suggests the closest id).
    """
    rule = RULES.get(rule_id)
    if rule is None:
        raise UnknownRule(rule_id)
    lines = [
        f"{rule.id}: {rule.summary}",
        "",
        f"family: {rule.family}",
        f"default severity: {rule.default_severity.value}"
        + ("  (always on: may be waived, never disabled)" if rule.always_on else ""),
        "",
        *_paragraphs(rule.explanation),
        "",
    ]
    if rule.parameters:
        lines.append("parameters:")
        for p in rule.parameters:
            unit = f", unit {p.unit}" if p.unit else ""
            bounds = []
            if p.minimum is not None:
                bounds.append(f">= {p.minimum:g}")
            if p.maximum is not None:
                bounds.append(f"<= {p.maximum:g}")
            if p.choices:
                bounds.append("one of " + ", ".join(p.choices))
            limits = f", {' and '.join(bounds)}" if bounds else ""
            lines.extend(
                _wrap(
                    f"{p.name} ({p.type}{unit}{limits}); default "
                    f"{_format_default(p.default)}: {p.description}",
                    88,
                    initial_indent="  ",
                    subsequent_indent="      ",
                )
            )
    else:
        lines.append("parameters: none (severity only)")
    lines += ["", *_wrap(f"source of the default: {rule.source}", 88), ""]
    return "\n".join(lines)
