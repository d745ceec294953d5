"""The description of one rule: a row of the rules table (:mod:`ruleguard.rules.catalog`)."""

from __future__ import annotations

from dataclasses import dataclass
from typing import Any

from ruleguard.rules.base import RuleFunction, Severity


@dataclass(frozen=True)
class Parameter:
    """A rule parameter. ``unit`` is also the suffix of its name (``min_deg``)."""

    name: str
    type: str  # "number" | "integer" | "boolean" | "string" | "points"
    unit: str | None
    default: Any
    description: str


@dataclass(frozen=True)
class RuleSpec:
    """One rule: id, family, default severity, parameters, texts, source, function.

    ``family`` is the id prefix before the first dot. ``always_on`` rules
    (``stability.closed-loop``) cannot be set to ``off``, only waived.
    """

    id: str
    default_severity: Severity
    summary: str
    explanation: str
    source: str
    parameters: tuple[Parameter, ...]
    function: RuleFunction
    always_on: bool = False

    @property
    def family(self) -> str:
        return self.id.split(".", 1)[0]

    def defaults(self) -> dict[str, Any]:
        return {p.name: p.default for p in self.parameters}
