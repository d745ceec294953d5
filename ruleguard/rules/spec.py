"""The description of one rule (a row of the rules table) and of a ruleset.

:class:`RuleSpec` and :class:`Parameter` describe the catalog
(:mod:`ruleguard.rules.catalog`). :class:`Ruleset` and its parts are what
:func:`ruleguard.load.rulesets.load_ruleset` produces from a ruleset file and
what :func:`ruleguard.rules.engine.evaluate` applies: every setting keeps the
:class:`~ruleguard.location.Location` it was written at, so a finding can name
the ruleset line of the threshold it was judged against.
"""

from __future__ import annotations

import datetime
from collections.abc import Iterator, Mapping
from dataclasses import field, fields
from typing import Any

from ruleguard.frozen import record
from ruleguard.location import Location
from ruleguard.rules.base import RuleFunction, Severity


@record
class Parameter:
    """A rule parameter. ``unit`` is also the suffix of its name (``min_deg``).

    ``default`` ``None`` means "not configured": the rule does not check that
    limit unless a ruleset sets it. ``minimum``/``maximum`` bound numeric
    values (inclusive); ``choices`` lists the allowed strings.
    """

    name: str
    type: str  # "number" | "integer" | "boolean" | "string" | "points" | "strings"
    unit: str | None
    default: Any
    description: str
    minimum: float | None = None
    maximum: float | None = None
    choices: tuple[str, ...] = ()


@record
class RuleSpec:
    """One rule: id, family, default severity, parameters, texts, source, function.

    ``family`` is the id prefix before the first dot. ``always_on`` rules
    (``stability.closed-loop``) cannot be set to ``disabled``, only waived.
    ``scope`` is ``"loop"`` for rules evaluated on each loop, ``"ruleset"``
    for the findings the engine itself raises about the ruleset (expired or
    unused waivers); their ``function`` is never called with a loop.
    """

    id: str
    default_severity: Severity
    summary: str
    explanation: str
    source: str
    parameters: tuple[Parameter, ...]
    function: RuleFunction
    always_on: bool = False
    scope: str = "loop"

    @property
    def family(self) -> str:
        return self.id.split(".", 1)[0]

    def defaults(self) -> dict[str, Any]:
        return {p.name: p.default for p in self.parameters}

    def parameter(self, name: str) -> Parameter | None:
        for p in self.parameters:
            if p.name == name:
                return p
        return None


class ParameterValues(Mapping[str, Any]):
    """The parameters a rule runs with: defaults merged with ruleset settings.

    A read-only mapping ``name -> value`` that also knows where each value
    was set (:meth:`location_of`), so a rule can name the ruleset line of the
    threshold it applied. Values left at the catalog default have no location.
    """

    __slots__ = ("_values", "_locations")

    def __init__(
        self, values: Mapping[str, Any], locations: Mapping[str, Location] | None = None
    ) -> None:
        self._values = dict(values)
        self._locations = dict(locations or {})

    def __getitem__(self, name: str) -> Any:
        return self._values[name]

    def __iter__(self) -> Iterator[str]:
        return iter(self._values)

    def __len__(self) -> int:
        return len(self._values)

    def __repr__(self) -> str:
        return f"ParameterValues({self._values!r})"

    def location_of(self, name: str) -> Location | None:
        """Where ``name`` was set (``None``: the catalog default)."""
        return self._locations.get(name)

    @property
    def locations(self) -> Mapping[str, Location]:
        return dict(self._locations)


def threshold_location(params: Mapping[str, Any], name: str) -> Location | None:
    """The ruleset location of parameter ``name`` when ``params`` carries it."""
    getter = getattr(params, "location_of", None)
    return getter(name) if getter is not None else None


@record
class RuleSetting:
    """What one ruleset table says about one rule (``[rules."margin.phase"]``).

    ``parameters`` holds only the keys written there; ``locations`` maps each
    of them (and ``"severity"`` when set) to where it was written.
    """

    rule: str
    severity: Severity | None
    parameters: Mapping[str, Any]
    locations: Mapping[str, Location]
    location: Location


@record
class Adjustment:
    """One ``[[adjustments]]`` item: settings for the loops it matches.

    A loop matches when its name matches one of ``loops`` (fnmatch globs) or
    one of its tags is in ``tags``; an item with neither matches every loop.
    ``crossover_hz`` (``[min, max]``, either end ``None``) further requires
    the nominal variant's gain crossover to lie in ``[min, max)`` (scheduling
    by mode frequency).
    """

    loops: tuple[str, ...]
    tags: tuple[str, ...]
    rules: Mapping[str, RuleSetting]
    location: Location
    crossover_hz: tuple[float | None, float | None] | None = None
    index: int = 0


@record
class Waiver:
    """One ``[[waivers]]`` item: findings of ``rule`` on matching loops are waived.

    It applies through ``expires`` (that day included, UTC); after that it
    stops applying and the engine reports it (rule ``waiver.expired``).
    Without ``expires`` (None) it does not expire.
    """

    rule: str
    loops: tuple[str, ...]
    reason: str
    expires: datetime.date | None
    location: Location
    index: int = 0


@record
class Ruleset:
    """A loaded ruleset with its ``based_on`` chain resolved.

    ``rules`` holds the merged per-rule settings (later files win, key by
    key, each value keeping the location where it was last set);
    ``adjustments`` and ``waivers`` are those of the whole chain, base first.
    ``files`` lists the chain's file labels, base first (built-in files as
    ``"<builtin>/NAME.toml"``).
    """

    name: str
    file: str
    rules: Mapping[str, RuleSetting] = field(default_factory=dict)
    adjustments: tuple[Adjustment, ...] = ()
    waivers: tuple[Waiver, ...] = ()
    files: tuple[str, ...] = ()
    location: Location = Location("")
    #: Digest of the texts of ``files`` (set by the loader; empty for a
    #: ruleset made in code): they decide where every setting stands.
    sources_digest: str = field(default="", repr=False, compare=False)

    def severity_of(self, rule_id: str) -> Severity:
        """The severity the ruleset gives ``rule_id`` before any adjustment."""
        from ruleguard.rules.catalog import RULES

        setting = self.rules.get(rule_id)
        if setting is not None and setting.severity is not None:
            return setting.severity
        rule = RULES.get(rule_id)
        return rule.default_severity if rule is not None else Severity.ERROR

    def fingerprint(self) -> str:
        """A hash of everything the ruleset says (cache keys): same content, same hash.

        It hashes the ruleset's ``repr``, the locations included, with one
        shortcut for a loaded ruleset: every location lies in a file of its
        chain, where the loader placed it by the file's text, so the digest of
        those texts (``sources_digest``) stands for their lines, columns and
        keys, which are then not worked out (that would cost the cache-hit
        route the positions of every setting's key).
        """
        import hashlib

        if not self.sources_digest:
            return hashlib.sha256(repr(self).encode("utf-8")).hexdigest()
        text = f"{self.sources_digest}\n{_content_text(self)}"
        return hashlib.sha256(text.encode("utf-8")).hexdigest()


def _content_text(value: Any) -> str:
    """``repr(value)``, each location written as its file only (see ``fingerprint``)."""
    if type(value) is Location:
        return f"Location({value.file!r})"
    if hasattr(type(value), "__dataclass_fields__"):
        shown = (f"{f.name}={_content_text(getattr(value, f.name))}"
                 for f in fields(value) if f.repr)
        return f"{type(value).__qualname__}({', '.join(shown)})"
    if isinstance(value, ParameterValues):
        return f"ParameterValues({_content_text(value._values)})"
    if isinstance(value, Mapping):
        items = (f"{_content_text(k)}: {_content_text(v)}" for k, v in value.items())
        return "{" + ", ".join(items) + "}"
    if isinstance(value, (tuple, list)):
        inner = ", ".join(_content_text(v) for v in value)
        if isinstance(value, list):
            return f"[{inner}]"
        return f"({inner},)" if len(value) == 1 else f"({inner})"
    return repr(value)
