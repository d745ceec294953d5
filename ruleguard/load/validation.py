"""Schema validation of input documents, with one clear, located message.

:func:`validate` checks a :class:`~ruleguard.load.sources.Document` (or a
part of it) against a shipped JSON Schema (:mod:`ruleguard.load.schemas`)
and raises a single :class:`~ruleguard.errors.InputError`: the most relevant
error (``jsonschema.exceptions.best_match``, which prefers errors that are
not inside an alternative and descends into the alternative that fits
best), at the file, line and column of the offending key, naming what was
expected and, for a misspelled key or value, the closest allowed one
(``difflib``).

Before the schema, every number is checked to be finite: TOML allows ``nan``
and ``inf`` literals, and no input of ruleguard has a use for them.

Schemas may carry ``"x-expected"``: a short description of the allowed
value, used in messages instead of the raw keyword.

Validation can be remembered (:func:`remembering`): a value that passed a
schema once is not checked again while the memo holds its digest (the
digest covers the ruleguard version, the schema's text and the value's
``repr``, which tells 1, 1.0, True and "1" apart). ``ruleguard check`` keeps
the memo in its cache folder (:class:`ruleguard.cache.ValidatedDocuments`),
so a hook run on unchanged files neither validates nor imports jsonschema.
A value that fails is never remembered: its message is made every time.

``jsonschema`` is a listed dependency and stays the authority for every
message; measured here (fresh process, 2 cores) its import costs 0.08 s.
A value is first checked by the predicate compiled from the same schema
(:mod:`ruleguard.load.schema_predicate`, draft 2020-12 semantics, no
jsonschema import): when it passes, nothing more is done; when it fails
(or the schema is not compilable), ``jsonschema`` validates it as before,
finds the error and the message is made from it. So a valid project never
imports jsonschema, and a message is what ``jsonschema`` finds, whatever
the predicate said. Each compiled validator is cached.
"""

from __future__ import annotations

import contextlib
import difflib
import hashlib
import math
import re
from collections.abc import Callable, Iterable, Iterator
from contextvars import ContextVar
from typing import Any, Protocol

from ruleguard import __version__
from ruleguard.errors import InputError
from ruleguard.load.schema_predicate import passes
from ruleguard.load.schemas import load_schema, schema_text
from ruleguard.load.sources import Document, KeyPath, format_key
from ruleguard.location import Location
from ruleguard.timings import count, stage

_VALIDATORS: dict[str, Any] = {}
_SCHEMA_DIGESTS: dict[str, str] = {}


class ValidationMemo(Protocol):
    """Digests of values known to pass their schema (see :func:`remembering`)."""

    def __contains__(self, digest: object) -> bool: ...

    def add(self, digest: str) -> None: ...


_MEMO: ContextVar[ValidationMemo | None] = ContextVar("ruleguard_validation_memo", default=None)


@contextlib.contextmanager
def remembering(memo: ValidationMemo | None) -> Iterator[ValidationMemo | None]:
    """Inside the block, :func:`validate` skips values whose digest ``memo``
    holds and adds the digests of the values that pass."""
    token = _MEMO.set(memo)
    try:
        yield memo
    finally:
        _MEMO.reset(token)


def validation_digest(schema_name: str, value: Any) -> str:
    """The hex SHA-256 of (ruleguard version, schema text, ``repr(value)``)."""
    schema_digest = _SCHEMA_DIGESTS.get(schema_name)
    if schema_digest is None:
        schema_digest = hashlib.sha256(schema_text(schema_name).encode("utf-8")).hexdigest()
        _SCHEMA_DIGESTS[schema_name] = schema_digest
    material = f"{__version__}\0{schema_name}\0{schema_digest}\0{value!r}"
    return hashlib.sha256(material.encode("utf-8")).hexdigest()


def did_you_mean(word: str, choices: Iterable[str]) -> str | None:
    """The closest of ``choices`` to ``word`` (difflib ratio >= 0.6), or None."""
    options = [c for c in choices if isinstance(c, str)]
    hits = difflib.get_close_matches(str(word), options, n=1, cutoff=0.6)
    if not hits:
        lowered = {c.lower(): c for c in options}
        if str(word).lower() in lowered:
            return lowered[str(word).lower()]
        return None
    return hits[0]


def suggestion(word: str, choices: Iterable[str]) -> str:
    """``"; did you mean 'x'?"`` or ``""``."""
    hit = did_you_mean(word, choices)
    return f"; did you mean '{hit}'?" if hit else ""


def type_name(value: Any) -> str:
    """The JSON-Schema-ish name of a Python value from tomllib/json."""
    if value is None:
        return "null"
    if isinstance(value, bool):
        return "boolean"
    if isinstance(value, int):
        return "integer"
    if isinstance(value, float):
        return "number"
    if isinstance(value, str):
        return "string"
    if isinstance(value, list):
        return "array"
    if isinstance(value, dict):
        return "table"
    return type(value).__name__  # dates and times from TOML


def show_value(value: Any, limit: int = 40) -> str:
    """A short rendering of a value for messages."""
    if isinstance(value, dict):
        return "a table"
    if isinstance(value, list):
        return f"an array of {len(value)} item{'s' if len(value) != 1 else ''}"
    text = repr(value) if isinstance(value, str) else str(value)
    if isinstance(value, bool):
        text = "true" if value else "false"
    return text if len(text) <= limit else text[: limit - 3] + "..."


def _found(value: Any) -> str:
    if isinstance(value, (dict, list)):
        return show_value(value)
    return f"{type_name(value)} {show_value(value)}"


def number_problem(value: Any) -> str | None:
    """Why a number cannot be used (NaN, infinite, too large for a float), or None."""
    if isinstance(value, bool):
        return None
    if isinstance(value, float) and not math.isfinite(value):
        return f"{value} is not a finite number; finite numbers only"
    if isinstance(value, int):
        try:
            float(value)
        except OverflowError:
            return (
                f"the integer of {len(str(abs(value)))} digits is too large "
                "(numbers must fit a 64-bit float)"
            )
    return None


def _has_number_problem(data: Any) -> bool:
    """Whether :func:`number_problem` finds anything in ``data`` (no key paths built)."""
    isfinite = math.isfinite
    stack = [data]
    while stack:
        node = stack.pop()
        kind = type(node)
        if kind is str or kind is bool:
            continue
        if kind is float:
            if not isfinite(node):
                return True
        elif kind is int:
            if not -_SAFE_INT < node < _SAFE_INT and number_problem(node):
                return True
        elif kind is dict:
            stack.extend(node.values())
        elif kind is list:
            stack.extend(node)
        else:  # anything else (dates from TOML, subclasses): as check_finite sees it
            if number_problem(node):
                return True
            if isinstance(node, dict):
                stack.extend(node.values())
            elif isinstance(node, list):
                stack.extend(node)
    return False


#: Integers strictly between -_SAFE_INT and _SAFE_INT fit a float (whose largest is 1.8e308).
_SAFE_INT = 10**300


def check_finite(document: Document, data: Any = None, base: KeyPath = ()) -> None:
    """Raise at the first NaN or infinite number in ``data`` (default: the document)."""
    if not _has_number_problem(document.data if data is None else data):
        return
    stack: list[tuple[KeyPath, Any]] = [(base, document.data if data is None else data)]
    while stack:
        path, node = stack.pop()
        problem = number_problem(node)
        if problem:
            raise document.error(path, problem)
        if isinstance(node, dict):
            stack.extend((path + (k,), v) for k, v in reversed(list(node.items())))
        elif isinstance(node, list):
            stack.extend((path + (i,), v) for i, v in reversed(list(enumerate(node))))


def _validator(schema_name: str) -> Any:
    validator = _VALIDATORS.get(schema_name)
    if validator is None:
        from jsonschema import Draft202012Validator

        validator = Draft202012Validator(load_schema(schema_name))
        _VALIDATORS[schema_name] = validator
    return validator


def validate(
    document: Document,
    schema_name: str,
    *,
    path: KeyPath = (),
    instance: Any = None,
    locate: Callable[[KeyPath], Location] | None = None,
) -> None:
    """Check ``document`` (or the value at ``path``) against schema ``schema_name``.

    Parameters
    ----------
    document:
        The parsed file.
    schema_name:
        ``manifest``, ``plants``, ``controller``, ``ruleset``, ...
    path:
        Key path of the validated value inside the document (default: all).
    instance:
        Validate this value instead of the one at ``path`` (for example a
        controller table after ``map`` renamed its keys); error paths are
        then relative to it and mapped to the file by ``locate``.
    locate:
        Maps an error's key path (``path`` + path inside the instance) to a
        :class:`Location`; default: ``document.locate``.

    Raises
    ------
    InputError
        One located message for the most relevant problem.
    """
    with stage("validation"):
        value = document.get(path) if instance is None else instance
        memo = _MEMO.get()
        digest = None
        if memo is not None:
            digest = validation_digest(schema_name, value)
            if digest in memo:
                count("validations remembered")
                return
        if instance is None:
            check_finite(document, value, tuple(path))
        if passes(schema_name, value):
            errors = []
        else:  # invalid, or a schema the predicate does not compile: the full route
            errors = list(_validator(schema_name).iter_errors(value))
        count("validations run")
    if not errors:
        if digest is not None and memo is not None:
            memo.add(digest)
        return
    from jsonschema.exceptions import best_match

    best = best_match(errors)
    locator = locate or document.locate
    raise _translate(best, tuple(path), locator)


# --------------------------------------------------------------------------- messages


def _leaf(path: KeyPath) -> str:
    """The name of the element at ``path`` for messages (``width_hz``, ``numerator.0``)."""
    if not path:
        return "the top level"
    tail: list = []
    for item in reversed(path):
        tail.insert(0, item)
        if isinstance(item, str):
            break
    return format_key(tuple(tail))


def _expected(schema: Any) -> str | None:
    if isinstance(schema, dict):
        text = schema.get("x-expected")
        if isinstance(text, str):
            return text
    return None


def _schema_type_text(types: Any) -> str:
    names = types if isinstance(types, list) else [types]
    words = {"object": "a table", "array": "an array", "string": "a string",
             "number": "a number", "integer": "a whole number", "boolean": "true or false",
             "null": "null"}
    return " or ".join(words.get(n, n) for n in names)


def _allowed_keys(schema: dict) -> list[str]:
    return sorted(schema.get("properties", {}))


def _translate(
    error: Any,
    base: KeyPath,
    locator: Callable[[KeyPath], Location],
) -> InputError:
    rel = tuple(error.absolute_path)
    path = base + rel

    def _where(where_path: KeyPath) -> str:
        shown = locator(where_path).key
        return f"'{shown}'" if shown else "the top level"

    kind = error.validator
    instance = error.instance
    schema = error.schema if isinstance(error.schema, dict) else {}
    expected = _expected(schema)

    if "propertyNames" in error.absolute_schema_path and isinstance(instance, str):
        want = expected or f"a key matching {error.validator_value}"
        return InputError.at(
            locator(path + (instance,)),
            f"'{instance}' is not allowed as a key in {_where(path)}; expected {want}",
        )
    if kind == "additionalProperties" and isinstance(instance, dict):
        allowed = set(schema.get("properties", {}))
        patterns = schema.get("patternProperties", {})
        extras = [
            k for k in instance
            if k not in allowed and not any(re.search(p, k) for p in patterns)
        ]
        # the first unknown key in the file
        extras.sort(key=lambda k: _order(locator(path + (k,))))
        key = extras[0] if extras else "?"
        hint = suggestion(key, allowed)
        if not hint and allowed:
            hint = f"; allowed keys here: {', '.join(sorted(allowed))}"
        return InputError.at(
            locator(path + (key,)), f"unknown key '{key}' in {_where(path)}{hint}"
        )
    if kind == "required" and isinstance(instance, dict):
        missing = [k for k in error.validator_value if k not in instance]
        key = missing[0] if missing else "?"
        hint = ""
        known = schema.get("properties", {})
        near = did_you_mean(key, [k for k in instance if isinstance(k, str) and k not in known])
        what = f"; expected {expected}" if expected else ""
        if near:
            return InputError.at(
                locator(path + (near,)),
                f"'{near}' is not a key here; did you mean '{key}'? ('{key}' is required in "
                f"{_where(path)}){what}",
            )
        return InputError.at(
            locator(path), f"missing required key '{key}' in {_where(path)}{what}"
        )
    if kind == "type":
        want = expected or _schema_type_text(error.validator_value)
        return InputError.at(
            locator(path),
            f"expected {want} for {_leaf(path)}, found {_found(instance)}",
        )
    if kind == "enum":
        options = [o for o in error.validator_value]
        listed = ", ".join(repr(o) if isinstance(o, str) else str(o) for o in options)
        hint = suggestion(instance, [o for o in options if isinstance(o, str)]) if isinstance(
            instance, str) else ""
        return InputError.at(
            locator(path),
            f"{show_value(instance)} is not allowed for {_leaf(path)}; expected one of "
            f"{listed}{hint}",
        )
    if kind == "const":
        return InputError.at(
            locator(path),
            f"expected {show_value(error.validator_value)} for {_leaf(path)}, found "
            f"{_found(instance)}",
        )
    bounds = {
        "minimum": ">=", "exclusiveMinimum": ">", "maximum": "<=", "exclusiveMaximum": "<",
    }
    if kind in bounds:
        what = f" ({expected})" if expected else ""
        return InputError.at(
            locator(path),
            f"{_leaf(path)} must be {bounds[kind]} {error.validator_value}{what}, found "
            f"{show_value(instance)}",
        )
    if kind in ("minItems", "maxItems"):
        word = "at least" if kind == "minItems" else "at most"
        n = error.validator_value
        return InputError.at(
            locator(path),
            f"{_leaf(path)} needs {word} {n} item{'s' if n != 1 else ''}, found "
            f"{len(instance) if isinstance(instance, list) else '?'}",
        )
    if kind in ("minProperties", "maxProperties"):
        word = "at least" if kind == "minProperties" else "at most"
        return InputError.at(
            locator(path), f"{_where(path)} needs {word} {error.validator_value} key(s)"
        )
    if kind in ("minLength", "maxLength"):
        word = "at least" if kind == "minLength" else "at most"
        return InputError.at(
            locator(path),
            f"{_leaf(path)} must be {word} {error.validator_value} characters long",
        )
    if kind == "pattern":
        want = expected or f"text matching {error.validator_value}"
        return InputError.at(
            locator(path), f"{show_value(instance)} for {_leaf(path)} is not {want}"
        )
    if kind == "propertyNames":
        return InputError.at(locator(path), f"bad key name in {_where(path)}: {error.message}")
    if kind in ("oneOf", "anyOf") and isinstance(instance, dict):
        for option in error.validator_value:
            props = option.get("properties") if isinstance(option, dict) else None
            if props and instance and set(instance) <= set(props):
                missing = [k for k in option.get("required", []) if k not in instance]
                if missing:
                    return InputError.at(
                        locator(path),
                        f"missing key '{missing[0]}' in {_leaf(path)}; a table with "
                        f"{', '.join(sorted(instance))} needs {', '.join(option['required'])}",
                    )
    if kind in ("oneOf", "anyOf", "not", "if", "then"):
        want = expected or "a value of another form"
        hint = ""
        if isinstance(instance, str) and isinstance(error.validator_value, list):
            words: list[str] = []
            for option in error.validator_value:
                if isinstance(option, dict):
                    if isinstance(option.get("const"), str):
                        words.append(option["const"])
                    words.extend(w for w in option.get("enum", []) if isinstance(w, str))
            hint = suggestion(instance, words)
        return InputError.at(
            locator(path),
            f"{_found(instance)} for {_leaf(path)} does not fit; expected {want}{hint}",
        )
    return InputError.at(locator(path), f"{_where(path)}: {error.message}")


def _order(location: Location) -> tuple[int, int]:
    return (location.line or 0, location.column or 0)
