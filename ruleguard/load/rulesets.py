"""Rulesets: built-in and user files, ``based_on`` chains, adjustments and waivers.

:func:`load_ruleset` turns a ruleset reference (a built-in name such as
``motion``, or a path relative to the manifest's folder) into a frozen
:class:`~ruleguard.rules.spec.Ruleset` (FORMATS.md section 4):

* the file is read by :func:`ruleguard.load.sources.read_document` (contained
  in the project folder) or, for a built-in, from the package resources of
  ``ruleguard.rulesets`` under the label ``<builtin>/NAME.toml``;
* it is validated against the ``ruleset`` JSON Schema, then every rule id
  and parameter against the rules table (:mod:`ruleguard.rules.catalog`),
  with a did-you-mean for misspellings;
* ``based_on`` (a built-in name, or a path relative to the basing file's
  folder) is loaded first, recursively, and a cycle is an error at the
  ``based_on`` key that closes it;
* every setting keeps its :class:`~ruleguard.location.Location`.

A reference is a path when it ends in ``.toml``/``.json`` or holds a ``/``;
otherwise it names a built-in ruleset. A ruleset without ``based_on`` starts
from the catalog defaults (the values ``baseline`` states, so extending
``baseline`` differs only in that findings can name baseline's lines).
"""

from __future__ import annotations

import datetime
import functools
import hashlib
import math
import posixpath
from importlib import resources
from typing import Any

from ruleguard.errors import InputError
from ruleguard.load.sources import Document, KeyPath, parse_text, read_document
from ruleguard.load.validation import check_finite, suggestion, validate
from ruleguard.location import Location
from ruleguard.rules.base import Severity
from ruleguard.rules.catalog import RULES, matches
from ruleguard.rules.spec import Adjustment, Parameter, Ruleset, RuleSetting, Waiver

BUILTIN_PREFIX = "<builtin>/"
_MAX_CHAIN = 32


@functools.cache
def _builtin_folder():
    """The folder of the built-in rulesets (found once per process).

    Installed, they are the package data of ``ruleguard.rulesets`` (the
    repository's top-level ``rulesets/``, mapped by pyproject.toml). When the
    package is imported straight from a source checkout (``python -m
    ruleguard`` or ``python -m pytest`` run in the repository root, which
    puts the checkout first on ``sys.path``), that mapping does not exist, and
    the checkout's own ``rulesets/`` folder is used.
    """
    try:
        return resources.files("ruleguard.rulesets")
    except ModuleNotFoundError:
        from pathlib import Path

        return Path(__file__).resolve().parents[2] / "rulesets"


def builtin_names() -> tuple[str, ...]:
    """Names of the built-in rulesets shipped in the package, sorted."""
    folder = _builtin_folder()
    return tuple(
        sorted(
            entry.name[: -len(".toml")]
            for entry in folder.iterdir()
            if entry.name.endswith(".toml")
        )
    )


def builtin_text(name: str) -> str:
    """The text of built-in ruleset ``name`` (``KeyError`` when there is none)."""
    if name not in builtin_names():
        raise KeyError(name)
    return _builtin_folder().joinpath(f"{name}.toml").read_text("utf-8")


def is_path_reference(ref: str) -> bool:
    """A ruleset reference is a path when it ends in .toml/.json or holds a ``/``."""
    lowered = ref.lower()
    return lowered.endswith((".toml", ".json")) or "/" in ref or "\\" in ref


def load_ruleset(root: str, ref: str, location: Location) -> Ruleset:
    """Load the ruleset ``ref`` named at ``location``.

    Parameters
    ----------
    root:
        The project (manifest) folder; user ruleset files must lie inside it.
    ref:
        A built-in name (``baseline``, ``motion``, ``process``, ``power``,
        ``flight``) or a path relative to ``root``.
    location:
        Where ``ref`` was written (the manifest's ``project.ruleset``, or the
        command line), for errors about the reference itself.

    Raises
    ------
    InputError
        Unknown built-in, unreadable or invalid file, unknown rule or
        parameter, bad value, ``based_on`` cycle: one located message.
    """
    return _Loader(str(root)).load(ref, location, base_dir="", chain=())


class _Loader:
    def __init__(self, root: str) -> None:
        self.root = root

    # ------------------------------------------------------------------ reading

    def _document(self, ref: str, origin: Location, base_dir: str) -> Document:
        if is_path_reference(ref):
            if origin.file.startswith(BUILTIN_PREFIX):
                raise InputError.at(
                    origin, f"a built-in ruleset can only extend built-in rulesets, not {ref!r}"
                )
            rel = posixpath.normpath(posixpath.join(base_dir, ref.replace("\\", "/")))
            return read_document(self.root, rel, origin)
        names = builtin_names()
        if ref not in names:
            raise InputError.at(
                origin,
                f"no built-in ruleset {ref!r}{suggestion(ref, names)}; built-in rulesets: "
                f"{', '.join(names)} (a path to a ruleset file ends in .toml or .json)",
            )
        return parse_text(f"{BUILTIN_PREFIX}{ref}.toml", builtin_text(ref), "toml")

    def load(
        self, ref: str, origin: Location, base_dir: str, chain: tuple[str, ...]
    ) -> Ruleset:
        doc = self._document(ref, origin, base_dir)
        if doc.file in chain:
            cycle = " -> ".join([*chain[chain.index(doc.file):], doc.file])
            raise InputError.at(origin, f"based_on cycle: {cycle}")
        if len(chain) >= _MAX_CHAIN:
            raise InputError.at(origin, f"based_on chain longer than {_MAX_CHAIN} files")
        data = _check_document(doc)
        chain = (*chain, doc.file)

        meta = data.get("ruleset", {})
        parent: Ruleset | None = None
        if "based_on" in meta:
            here = "" if doc.file.startswith(BUILTIN_PREFIX) else posixpath.dirname(doc.file)
            parent = self.load(
                meta["based_on"], doc.locate(("ruleset", "based_on")), here, chain
            )

        own_rules = {
            rule_id: _rule_setting(doc, ("rules", rule_id), rule_id, table)
            for rule_id, table in data.get("rules", {}).items()
        }
        adjustments = tuple(
            _adjustment(doc, i, item) for i, item in enumerate(data.get("adjustments", []))
        )
        waivers = tuple(_waiver(doc, i, item) for i, item in enumerate(data.get("waivers", [])))

        if parent is not None:
            rules = dict(parent.rules)
            for rule_id, setting in own_rules.items():
                rules[rule_id] = _merge(rules.get(rule_id), setting)
            adjustments = (*parent.adjustments, *adjustments)
            waivers = (*parent.waivers, *waivers)
            files = (*parent.files, doc.file)
        else:
            rules = own_rules
            files = (doc.file,)
        sources = hashlib.sha256(
            f"{parent.sources_digest if parent else ''}\0{doc.file}\0{doc.text}".encode()
        ).hexdigest()
        adjustments = tuple(_renumber(o, i) for i, o in enumerate(adjustments))
        waivers = tuple(_renumber(w, i) for i, w in enumerate(waivers))
        name = meta.get("name") or posixpath.splitext(posixpath.basename(doc.file))[0]
        return Ruleset(
            name=name,
            file=doc.file,
            rules=dict(rules),
            adjustments=adjustments,
            waivers=waivers,
            files=files,
            location=doc.locate(()),
            sources_digest=sources,
        )


def _renumber(item, index: int):
    from dataclasses import replace

    return replace(item, index=index)


def _merge(base: RuleSetting | None, top: RuleSetting) -> RuleSetting:
    """``top`` over ``base``, key by key; each value keeps where it was last set."""
    if base is None:
        return top
    parameters = {**base.parameters, **top.parameters}
    locations = {**base.locations, **top.locations}
    return RuleSetting(
        rule=top.rule,
        severity=top.severity if top.severity is not None else base.severity,
        parameters=dict(parameters),
        locations=dict(locations),
        location=top.location,
    )


# ---------------------------------------------------------------------- checks


def _jsonable(value: Any) -> Any:
    """TOML dates as ISO strings so the JSON Schema sees what a JSON file would hold."""
    if isinstance(value, dict):
        return {k: _jsonable(v) for k, v in value.items()}
    if isinstance(value, list):
        return [_jsonable(v) for v in value]
    if isinstance(value, datetime.datetime | datetime.time):
        return value  # left as is: the schema rejects it with its type
    if isinstance(value, datetime.date):
        return value.isoformat()
    return value


#: Keys of the earlier ruleset layout and what replaced them (FORMATS.md section 4).
_RENAMED_KEYS = {
    ("ruleset", "extends"): "`extends` is now `based_on`: write based_on = \"NAME\" in [ruleset]",
    ("overrides",): "`[[overrides]]` is now `[[adjustments]]` (the same keys: loops, tags, "
                    "crossover_hz, rules)",
}


def _old_layout(doc: Document, data: dict) -> None:
    """Keys and values of the earlier layout are errors naming their new names."""
    for path, message in _RENAMED_KEYS.items():
        table: Any = data
        for part in path[:-1]:
            table = table.get(part) if isinstance(table, dict) else None
        if isinstance(table, dict) and path[-1] in table:
            raise doc.error(path, message)
    tables: list[tuple[KeyPath, Any]] = [(("rules",), data.get("rules"))]
    for i, item in enumerate(data.get("adjustments") or []):
        if isinstance(item, dict):
            tables.append((("adjustments", i, "rules"), item.get("rules")))
    for path, rules in tables:
        if not isinstance(rules, dict):
            continue
        for rule_id, table in rules.items():
            if isinstance(table, dict) and table.get("severity") == "off":
                raise doc.error(
                    (*path, rule_id, "severity"),
                    'severity "off" is now "disabled" (error | warning | note | disabled)',
                )


def _check_document(doc: Document) -> dict:
    if not isinstance(doc.data, dict):
        raise doc.error((), "a ruleset must be a table (TOML) or an object (JSON)")
    check_finite(doc, doc.data)
    _old_layout(doc, doc.data)
    for i, item in enumerate(doc.data.get("waivers", []) or []):
        if isinstance(item, dict):
            expires = item.get("expires")
            if isinstance(expires, datetime.datetime | datetime.time):
                raise doc.error(
                    ("waivers", i, "expires"),
                    f"expires must be a date (YYYY-MM-DD), not {expires.isoformat()}: "
                    "a waiver applies through its expiry day, UTC",
                )
    validate(doc, "ruleset", instance=_jsonable(doc.data), locate=doc.locate)
    return doc.data


def _severity(doc: Document, path: KeyPath, rule_id: str, value: str) -> Severity:
    severity = Severity(value)
    rule = RULES[rule_id]
    if severity is Severity.DISABLED and rule.always_on:
        raise doc.error(
            path,
            f"{rule_id} cannot be disabled; waive it for named loops with a reason and "
            "an expiry date ([[waivers]]) instead",
        )
    return severity


def _rule_setting(doc: Document, path: KeyPath, rule_id: str, table: dict) -> RuleSetting:
    rule = RULES.get(rule_id)
    if rule is None:
        raise doc.error(
            path,
            f"unknown rule {rule_id!r}{suggestion(rule_id, RULES)}; `ruleguard rules` lists "
            "every rule",
        )
    severity = None
    parameters: dict[str, Any] = {}
    locations: dict[str, Location] = {}
    names = [p.name for p in rule.parameters]
    for key, value in table.items():
        key_path = (*path, key)
        if key == "severity":
            severity = _severity(doc, key_path, rule_id, value)
            locations["severity"] = doc.locate(key_path)
            continue
        parameter = rule.parameter(key)
        if parameter is None:
            known = ", ".join(names) if names else "none (only severity)"
            raise doc.error(
                key_path,
                f"rule {rule_id} has no parameter {key!r}{suggestion(key, names)}; its "
                f"parameters: {known}",
            )
        parameters[key] = _parameter_value(doc, key_path, rule_id, parameter, value)
        locations[key] = doc.locate(key_path)
    return RuleSetting(
        rule=rule_id,
        severity=severity,
        parameters=dict(parameters),
        locations=dict(locations),
        location=doc.locate(path),
    )


def _is_number(value: Any) -> bool:
    return isinstance(value, int | float) and not isinstance(value, bool)


def _parameter_value(
    doc: Document, path: KeyPath, rule_id: str, parameter: Parameter, value: Any
) -> Any:
    unit = f" ({parameter.unit})" if parameter.unit else ""
    what = f"{rule_id} parameter {parameter.name}{unit}"
    kind = parameter.type
    if kind in ("number", "integer"):
        if kind == "integer" and not (isinstance(value, int) and not isinstance(value, bool)):
            raise doc.error(path, f"{what} must be an integer, found {value!r}")
        if not _is_number(value):
            raise doc.error(path, f"{what} must be a number, found {_shown(value)}")
        _check_range(doc, path, what, parameter, float(value))
        return value if kind == "integer" else float(value)
    if kind == "boolean":
        if not isinstance(value, bool):
            raise doc.error(path, f"{what} must be true or false, found {_shown(value)}")
        return value
    if kind == "string":
        if not isinstance(value, str):
            raise doc.error(path, f"{what} must be a string, found {_shown(value)}")
        if parameter.choices and value not in parameter.choices:
            raise doc.error(
                path,
                f"{what} must be one of {', '.join(parameter.choices)}, found {value!r}"
                f"{suggestion(value, parameter.choices)}",
            )
        return value
    if kind == "strings":
        if not isinstance(value, list) or not all(isinstance(v, str) for v in value):
            raise doc.error(path, f"{what} must be an array of strings")
        return tuple(value)
    if kind == "points":
        return _points(doc, path, what, value)
    raise doc.error(path, f"{what}: unsupported parameter type {kind!r}")  # pragma: no cover


def _shown(value: Any) -> str:
    if isinstance(value, bool):
        return "true" if value else "false"
    if isinstance(value, list):
        return "an array"
    if isinstance(value, dict):
        return "a table"
    return repr(value)


def _check_range(
    doc: Document, path: KeyPath, what: str, parameter: Parameter, value: float
) -> None:
    if not math.isfinite(value):
        raise doc.error(path, f"{what} must be a finite number")
    if parameter.minimum is not None and value < parameter.minimum:
        raise doc.error(path, f"{what} must be >= {parameter.minimum:g}, found {value:g}")
    if parameter.maximum is not None and value > parameter.maximum:
        raise doc.error(path, f"{what} must be <= {parameter.maximum:g}, found {value:g}")


def _points(doc: Document, path: KeyPath, what: str, value: Any) -> tuple:
    """``[[freq_hz, db], ...]``: at least one pair, frequencies positive and increasing."""
    if not isinstance(value, list) or not value:
        raise doc.error(path, f"{what} must be a non-empty array of [freq_hz, db] pairs")
    points = []
    previous = 0.0
    for i, item in enumerate(value):
        if (
            not isinstance(item, list)
            or len(item) != 2
            or not all(_is_number(v) for v in item)
        ):
            raise doc.error((*path, i), f"{what}: item {i} must be a pair [freq_hz, db]")
        freq, level = float(item[0]), float(item[1])
        if not (freq > previous):
            raise doc.error(
                (*path, i),
                f"{what}: frequencies must be positive and increasing, found {freq:g} Hz "
                f"after {previous:g} Hz",
            )
        previous = freq
        points.append((freq, level))
    return tuple(points)


def _adjustment(doc: Document, index: int, item: dict) -> Adjustment:
    path: KeyPath = ("adjustments", index)
    rules = {
        rule_id: _rule_setting(doc, (*path, "rules", rule_id), rule_id, table)
        for rule_id, table in item.get("rules", {}).items()
    }
    band = item.get("crossover_hz")
    crossover = None
    if band is not None:
        low, high = band.get("min"), band.get("max")
        if low is not None and high is not None and not low < high:
            raise doc.error(
                (*path, "crossover_hz"), f"crossover_hz needs min < max, found [{low}, {high})"
            )
        crossover = (
            float(low) if low is not None else None,
            float(high) if high is not None else None,
        )
    return Adjustment(
        loops=tuple(item.get("loops", ())),
        tags=tuple(item.get("tags", ())),
        rules=dict(rules),
        location=doc.locate(path),
        crossover_hz=crossover,
        index=index,
    )


def _waiver(doc: Document, index: int, item: dict) -> Waiver:
    path: KeyPath = ("waivers", index)
    rule_id = item["rule"]
    if not any(matches(r, rule_id) for r in RULES):
        raise doc.error(
            (*path, "rule"),
            f"unknown rule {rule_id!r}{suggestion(rule_id, RULES)}; a waiver names a rule id "
            "or a family prefix",
        )
    if rule_id.startswith("waiver"):
        raise doc.error((*path, "rule"), "a waiver cannot waive the waiver findings themselves")
    expires = item.get("expires")  # optional (FORMATS.md section 4 requires only the reason)
    if isinstance(expires, str):
        try:
            expires = datetime.date.fromisoformat(expires)
        except ValueError:
            raise doc.error(
                (*path, "expires"), f"expires is not a calendar date: {expires!r}"
            ) from None
    return Waiver(
        rule=rule_id,
        loops=tuple(item["loops"]),
        reason=item["reason"].strip(),
        expires=expires,
        location=doc.locate(path),
        index=index,
    )
