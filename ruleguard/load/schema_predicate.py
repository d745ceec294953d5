"""A fast yes/no check of a value against one of our shipped JSON Schemas.

:func:`passes` answers "is this value valid under schema ``name``?" with
the verdict of the JSON Schema standard (draft 2020-12), without importing
``jsonschema``. It serves :func:`ruleguard.load.validation.validate` as a
first pass: a value it accepts needs nothing more; a value it rejects goes
through the full ``jsonschema`` route, which finds the error and makes the
located message. Messages are therefore those of that route whatever this
module says, and a wrong "invalid" verdict here costs only time.

Each schema is compiled once into nested closures (no generated source):
one closure per schema node, with the keywords that apply to one JSON type
(``properties``, ``required``, ``additionalProperties``... for objects)
grouped behind a single type test. The semantics follow draft 2020-12 as
``jsonschema`` implements it:

* ``true`` is not a number; a float with an integral value (``1.0``) is an
  ``integer``; ``const``/``enum`` compare as JSON does (``true`` differs
  from ``1``, lists and tables compare element by element);
* ``pattern`` is searched (``re.search``), not anchored;
* ``additionalProperties`` covers the keys not named in ``properties`` and
  not matched by a ``patternProperties`` pattern; ``items`` covers the
  elements after ``prefixItems``;
* ``$ref`` (to ``#`` or a JSON pointer inside the same schema) applies
  together with its sibling keywords;
* ``if``/``then``/``else``, ``allOf``, ``anyOf``, ``oneOf`` (exactly one),
  ``not``; ``then``/``else`` without ``if`` do nothing.

A schema holding any keyword outside :data:`KEYWORDS` (``format``,
``unevaluatedProperties``, ``$dynamicRef``, a nested ``$id``, ...) or an
unknown type name is not compiled: :func:`passes` then returns ``None``
and the caller asks ``jsonschema``. Annotations (``title``,
``description``, ``$comment``, ``default``, ``examples``, ``x-...``) are
ignored, as the standard says.
"""

from __future__ import annotations

import numbers
import re
from collections.abc import Callable, Mapping, Sequence
from functools import cache
from typing import Any
from urllib.parse import unquote

Check = Callable[[Any], bool]

#: Keywords the compiler understands (assertions and applicators).
KEYWORDS = frozenset({
    "type", "$ref", "properties", "patternProperties", "additionalProperties",
    "required", "propertyNames", "minProperties", "maxProperties",
    "items", "prefixItems", "minItems", "maxItems",
    "const", "enum", "minLength", "maxLength", "pattern",
    "minimum", "maximum", "exclusiveMinimum", "exclusiveMaximum",
    "if", "then", "else", "allOf", "anyOf", "oneOf", "not",
})

#: Keywords that carry no assertion (``$id`` and ``$schema`` at the root only).
ANNOTATIONS = frozenset({
    "title", "description", "$comment", "default", "examples", "deprecated",
    "readOnly", "writeOnly", "$defs",
})
_ROOT_ONLY = frozenset({"$id", "$schema"})


class Unsupported(Exception):
    """The schema uses something the compiler does not handle."""


# --------------------------------------------------------------------------- types


def _is_number(value: Any) -> bool:
    kind = type(value)
    if kind is int or kind is float:
        return True
    return isinstance(value, numbers.Number) and not isinstance(value, bool)


def _is_integer(value: Any) -> bool:
    kind = type(value)
    if kind is int:
        return True
    if kind is float:
        return value.is_integer()
    if isinstance(value, bool):
        return False
    return isinstance(value, int) or (isinstance(value, float) and value.is_integer())


_TYPE_TESTS: dict[str, Check] = {
    "object": lambda v: isinstance(v, dict),
    "array": lambda v: isinstance(v, list),
    "string": lambda v: isinstance(v, str),
    "boolean": lambda v: isinstance(v, bool),
    "null": lambda v: v is None,
    "number": _is_number,
    "integer": _is_integer,
}


def _unbool(value: Any, true: object = object(), false: object = object()) -> Any:
    if value is True:
        return true
    if value is False:
        return false
    return value


def json_equal(one: Any, two: Any) -> bool:
    """Equality as JSON Schema's ``const``/``enum`` mean it (``true`` is not ``1``)."""
    if one is two:
        return True
    if isinstance(one, str) or isinstance(two, str):
        return one == two
    if isinstance(one, Sequence) and isinstance(two, Sequence):
        return len(one) == len(two) and all(
            json_equal(a, b) for a, b in zip(one, two, strict=True)
        )
    if isinstance(one, Mapping) and isinstance(two, Mapping):
        return len(one) == len(two) and all(
            key in two and json_equal(value, two[key]) for key, value in one.items()
        )
    return _unbool(one) == _unbool(two)


# --------------------------------------------------------------------------- compiler


def _always(value: Any) -> bool:
    return True


def _never(value: Any) -> bool:
    return False


def _all_of(checks: list[Check]) -> Check:
    if not checks:
        return _always
    if len(checks) == 1:
        return checks[0]
    if len(checks) == 2:
        first, second = checks

        def both(value: Any) -> bool:
            return first(value) and second(value)

        return both
    frozen = tuple(checks)

    def every(value: Any) -> bool:
        for check in frozen:
            if not check(value):
                return False
        return True

    return every


class _Compiler:
    def __init__(self, root: Any) -> None:
        self.root = root
        self.refs: dict[str, Check | None] = {}

    def resolve(self, ref: str) -> Any:
        if not isinstance(ref, str) or not ref.startswith("#"):
            raise Unsupported(f"$ref {ref!r}")
        pointer = unquote(ref[1:])
        node = self.root
        if pointer == "":
            return node
        if not pointer.startswith("/"):
            raise Unsupported(f"$ref {ref!r} (anchors)")
        for raw in pointer[1:].split("/"):
            part = raw.replace("~1", "/").replace("~0", "~")
            if isinstance(node, dict) and part in node:
                node = node[part]
            elif isinstance(node, list) and part.isdigit() and int(part) < len(node):
                node = node[int(part)]
            else:
                raise Unsupported(f"$ref {ref!r} does not resolve")
        return node

    def ref(self, ref: str) -> Check:
        if ref not in self.refs:
            self.refs[ref] = None  # being compiled: a cycle goes through the table
            self.refs[ref] = self.node(self.resolve(ref), root=(ref == "#"))
        done = self.refs[ref]
        if done is not None:
            return done
        table = self.refs

        def later(value: Any) -> bool:
            return table[ref](value)  # type: ignore[misc]

        return later

    def node(self, schema: Any, root: bool = False) -> Check:
        if schema is True:
            return _always
        if schema is False:
            return _never
        if not isinstance(schema, dict):
            raise Unsupported(f"schema of type {type(schema).__name__}")
        for key in schema:
            if key in KEYWORDS or key in ANNOTATIONS:
                continue
            if isinstance(key, str) and key.startswith("x-"):
                continue
            if root and key in _ROOT_ONLY:
                continue
            raise Unsupported(f"keyword {key!r}")
        checks: list[Check] = []
        if "type" in schema:
            checks.append(self.type_check(schema["type"]))
        if "$ref" in schema:
            checks.append(self.ref(schema["$ref"]))
        if "const" in schema:
            checks.append(self.const_check(schema["const"]))
        if "enum" in schema:
            checks.append(self.enum_check(schema["enum"]))
        for build in (self.object_check, self.array_check, self.string_check,
                      self.number_check):
            check = build(schema)
            if check is not None:
                checks.append(check)
        checks.extend(self.applicators(schema))
        return _all_of(checks)

    # ------------------------------------------------------------ keywords

    def type_check(self, types: Any) -> Check:
        names = [types] if isinstance(types, str) else types
        if not isinstance(names, list) or not names:
            raise Unsupported("type")
        tests = []
        for name in names:
            if name not in _TYPE_TESTS:
                raise Unsupported(f"type {name!r}")
            tests.append(_TYPE_TESTS[name])
        if len(tests) == 1:
            return tests[0]
        frozen = tuple(tests)

        def any_type(value: Any) -> bool:
            for test in frozen:
                if test(value):
                    return True
            return False

        return any_type

    @staticmethod
    def const_check(const: Any) -> Check:
        if isinstance(const, str):
            def same_text(value: Any) -> bool:
                return isinstance(value, str) and value == const

            return same_text

        def same(value: Any) -> bool:
            return json_equal(value, const)

        return same

    @staticmethod
    def enum_check(options: Any) -> Check:
        if not isinstance(options, list):
            raise Unsupported("enum")
        if options and all(isinstance(o, str) for o in options):
            words = frozenset(options)

            def one_of_words(value: Any) -> bool:
                return isinstance(value, str) and value in words

            return one_of_words
        frozen = tuple(options)

        def one_of(value: Any) -> bool:
            for option in frozen:
                if json_equal(option, value):
                    return True
            return False

        return one_of

    def object_check(self, schema: dict) -> Check | None:
        keys = ("properties", "patternProperties", "additionalProperties", "required",
                "propertyNames", "minProperties", "maxProperties")
        if not any(k in schema for k in keys):
            return None
        properties = schema.get("properties", {})
        patterns = schema.get("patternProperties", {})
        if not isinstance(properties, dict) or not isinstance(patterns, dict):
            raise Unsupported("properties")
        props = {name: self.node(sub) for name, sub in properties.items()}
        pattern_checks = tuple(
            (re.compile(p).search, self.node(sub)) for p, sub in patterns.items()
        )
        searches = tuple(search for search, _ in pattern_checks)
        extra = schema.get("additionalProperties", True)
        if isinstance(extra, dict):
            extra_check: Check | None = self.node(extra)
            forbid = False
        elif extra is True:
            extra_check, forbid = None, False
        elif extra is False:
            extra_check, forbid = None, True
        else:
            raise Unsupported("additionalProperties")
        required = tuple(schema.get("required", ()))
        names = self.node(schema["propertyNames"]) if "propertyNames" in schema else None
        least = schema.get("minProperties")
        most = schema.get("maxProperties")
        watch_extras = forbid or extra_check is not None
        if not pattern_checks and names is None and least is None and most is None:
            return _plain_table(props, required, extra_check if watch_extras else None,
                                forbid)

        def table(value: Any) -> bool:
            if not isinstance(value, dict):
                return True
            for name in required:
                if name not in value:
                    return False
            if least is not None and len(value) < least:
                return False
            if most is not None and len(value) > most:
                return False
            for key, item in value.items():
                sub = props.get(key)
                if sub is not None:
                    if not sub(item):
                        return False
                elif watch_extras and key not in properties and not any(
                    search(key) for search in searches
                ):
                    if forbid or not extra_check(item):  # type: ignore[misc]
                        return False
                if names is not None and not names(key):
                    return False
            for search, sub in pattern_checks:
                for key, item in value.items():
                    if search(key) and not sub(item):
                        return False
            return True

        return table

    def array_check(self, schema: dict) -> Check | None:
        if not any(k in schema for k in ("items", "prefixItems", "minItems", "maxItems")):
            return None
        prefix = schema.get("prefixItems", [])
        if not isinstance(prefix, list):
            raise Unsupported("prefixItems")
        firsts = tuple(self.node(sub) for sub in prefix)
        n_first = len(firsts)
        rest_schema = schema.get("items", True)
        if rest_schema is False:
            rest: Check | None = None
            forbid = True
        else:
            rest = None if rest_schema is True else self.node(rest_schema)
            forbid = False
        least = schema.get("minItems")
        most = schema.get("maxItems")

        def array(value: Any) -> bool:
            if not isinstance(value, list):
                return True
            size = len(value)
            if least is not None and size < least:
                return False
            if most is not None and size > most:
                return False
            for check, item in zip(firsts, value, strict=False):
                if not check(item):
                    return False
            if size > n_first:
                if forbid:
                    return False
                if rest is not None:
                    for index in range(n_first, size):
                        if not rest(value[index]):
                            return False
            return True

        return array

    @staticmethod
    def string_check(schema: dict) -> Check | None:
        if not any(k in schema for k in ("minLength", "maxLength", "pattern")):
            return None
        least = schema.get("minLength")
        most = schema.get("maxLength")
        search = re.compile(schema["pattern"]).search if "pattern" in schema else None

        def text(value: Any) -> bool:
            if not isinstance(value, str):
                return True
            if least is not None and len(value) < least:
                return False
            if most is not None and len(value) > most:
                return False
            return search is None or search(value) is not None

        return text

    @staticmethod
    def number_check(schema: dict) -> Check | None:
        keys = ("minimum", "maximum", "exclusiveMinimum", "exclusiveMaximum")
        if not any(k in schema for k in keys):
            return None
        low = schema.get("minimum")
        high = schema.get("maximum")
        above = schema.get("exclusiveMinimum")
        below = schema.get("exclusiveMaximum")

        def number(value: Any) -> bool:
            if not _is_number(value):
                return True
            # the same comparisons as the standard's (a NaN fails none)
            if low is not None and value < low:
                return False
            if high is not None and value > high:
                return False
            if above is not None and value <= above:
                return False
            if below is not None and value >= below:
                return False
            return True

        return number

    def applicators(self, schema: dict) -> list[Check]:
        checks: list[Check] = []
        if "if" in schema:
            condition = self.node(schema["if"])
            then = self.node(schema["then"]) if "then" in schema else _always
            other = self.node(schema["else"]) if "else" in schema else _always

            def branch(value: Any) -> bool:
                return then(value) if condition(value) else other(value)

            checks.append(branch)
        for key in ("allOf", "anyOf", "oneOf"):
            if key in schema:
                if not isinstance(schema[key], list) or not schema[key]:
                    raise Unsupported(key)
                subs = tuple(self.node(sub) for sub in schema[key])
                if key == "allOf":
                    checks.append(_all_of(list(subs)))
                elif key == "anyOf":
                    checks.append(_any(subs))
                else:
                    checks.append(_exactly_one(subs))
        if "not" in schema:
            negated = self.node(schema["not"])

            def invert(value: Any) -> bool:
                return not negated(value)

            checks.append(invert)
        return checks


_ABSENT = object()


def _plain_table(
    props: dict[str, Check], required: tuple, extra_check: Check | None, forbid: bool
) -> Check:
    """The object check without patterns, property names or size limits (most of
    the shipped schemas): the same answers, fewer steps per call (a table with a
    few checked properties, a branch's condition say, looks up those only)."""
    items = tuple(props.items())
    count = len(items)
    if extra_check is None and not forbid:

        def table(value: Any) -> bool:
            if not isinstance(value, dict):
                return True
            for name in required:
                if name not in value:
                    return False
            if len(value) < count:
                for key, item in value.items():
                    sub = props.get(key)
                    if sub is not None and not sub(item):
                        return False
            else:
                for name, sub in items:
                    item = value.get(name, _ABSENT)
                    if item is not _ABSENT and not sub(item):
                        return False
            return True

        return table

    def closed_table(value: Any) -> bool:
        if not isinstance(value, dict):
            return True
        for name in required:
            if name not in value:
                return False
        for key, item in value.items():
            sub = props.get(key)
            if sub is not None:
                if not sub(item):
                    return False
            elif forbid or not extra_check(item):  # type: ignore[misc]
                return False
        return True

    return closed_table


def _any(subs: tuple[Check, ...]) -> Check:
    def some(value: Any) -> bool:
        for sub in subs:
            if sub(value):
                return True
        return False

    return some


def _exactly_one(subs: tuple[Check, ...]) -> Check:
    def one(value: Any) -> bool:
        hits = 0
        for sub in subs:
            if sub(value):
                hits += 1
                if hits > 1:
                    return False
        return hits == 1

    return one


def compile_schema(schema: Any) -> Check:
    """A predicate ``value -> bool`` for ``schema`` (a parsed JSON Schema).

    Raises
    ------
    Unsupported
        The schema uses a keyword, type or reference outside what this
        module handles.
    """
    compiler = _Compiler(schema)
    check = compiler.node(schema, root=True)
    compiler.refs.setdefault("#", check)
    return check


@cache
def predicate(name: str) -> Check | None:
    """The compiled predicate of shipped schema ``name``, or None if it is not compilable."""
    from ruleguard.load.schemas import load_schema

    try:
        return compile_schema(load_schema(name))
    except (Unsupported, re.error, TypeError, ValueError):
        return None


def passes(name: str, value: Any) -> bool | None:
    """True if ``value`` is valid under shipped schema ``name``, False if not,
    None when the schema is not compilable (ask ``jsonschema``)."""
    check = predicate(name)
    if check is None:
        return None
    try:
        return bool(check(value))
    except Exception:  # noqa: BLE001 - the full route decides and explains
        return False
