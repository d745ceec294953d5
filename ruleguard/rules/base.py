"""Findings as data, and the one signature every rule has.

A rule is a small function ``rule(context, params) -> Iterable[Violation]``.
It never prints and never decides severity or waivers: the engine
(:mod:`ruleguard.rules.engine`) stamps each :class:`Violation` with the rule
id, the severity from the active ruleset and any waiver, giving a
:class:`Finding`.
"""

from __future__ import annotations

from collections.abc import Callable, Iterable, Mapping
from dataclasses import field
from enum import Enum
from typing import Any

from ruleguard.frozen import record
from ruleguard.location import Location


class Severity(str, Enum):
    """Finding severity; ``DISABLED`` only appears in ruleset configuration."""

    ERROR = "error"
    WARNING = "warning"
    NOTE = "note"
    DISABLED = "disabled"

    @property
    def rank(self) -> int:
        return {"error": 3, "warning": 2, "note": 1, "disabled": 0}[self.value]


@record
class Violation:
    """What a rule observed on one loop (the worst variant)."""

    variant: str | None
    message: str
    measured: float | None
    limit: float | None
    unit: str | None
    frequency_hz: float | None
    location: Location
    related: tuple[Location, ...] = ()
    key_path: str = ""
    #: ``None``: the rule's configured severity. ``Severity.NOTE`` for
    #: "not computable here" observations, which must never pass silently.
    severity: Severity | None = None
    #: What would pass (:class:`ruleguard.rules.hints.FixHint`), computed for
    #: failing margin and sensitivity findings; never applied.
    hint: Any = None


@record
class Finding:
    """A rule finding as reported (FORMATS.md section 5, ``findings[]``)."""

    rule: str
    severity: Severity
    loop: str | None
    variant: str | None
    message: str
    measured: float | None
    limit: float | None
    unit: str | None
    frequency_hz: float | None
    location: Location
    related: tuple[Location, ...] = ()
    waived: bool = False
    waiver_reason: str | None = None
    key_path: str = ""
    #: A :class:`ruleguard.rules.hints.FixHint` or ``None``.
    hint: Any = None


@record(eq=False)
class Evaluation:
    """One analysed (loop, variant)."""

    variant: Any  # ruleguard.models.families.Variant
    model: Any  # ruleguard.analysis.loop.LoopModel
    analysis: Any  # ruleguard.analysis.results.LoopAnalysis
    #: Per-variant work done ahead for a rule, by key (computed by the
    #: workers with the analysis, see ruleguard.workunits); a rule computes
    #: what is missing itself.
    prepared: Mapping[str, Any] = field(default_factory=dict)


@record(eq=False)
class LoopContext:
    """Everything a rule may look at for one loop.

    ``evaluations`` is empty when the loop could not be analysed; then
    ``not_analysed_reason`` says why.
    """

    spec: Any  # ruleguard.load.spec.LoopSpec
    project: Any  # ruleguard.load.spec.Project
    evaluations: tuple[Evaluation, ...]
    not_analysed_reason: str | None = None
    inner: LoopContext | None = None
    extras: Mapping[str, Any] = field(default_factory=dict)


RuleFunction = Callable[[LoopContext, Mapping[str, Any]], Iterable[Violation]]
