"""Numbers from loaded fields: floats, expressions, and a variant's values.

Loaded entries (:mod:`ruleguard.load.spec`) keep numbers that may depend on
parameters as expression objects (:mod:`ruleguard.load.expressions`: an
object with ``.evaluate(values) -> float``, ``.names`` and ``.location``).
This module turns a field into a float once a variant has fixed the
parameter values. It never evaluates text: a field that is neither a number
nor an expression object is an input error at its location.
"""

from __future__ import annotations

from collections.abc import Mapping
from typing import Any

from ruleguard.errors import InputError
from ruleguard.location import Location

_MISSING = object()


def is_expression(value: Any) -> bool:
    """True for an expression object of the loader (anything with ``evaluate``)."""
    return hasattr(value, "evaluate") and callable(value.evaluate)


def to_float(value: Any, env: Mapping[str, float], location: Location, what: str) -> float:
    """A float from a number or an expression evaluated over ``env``."""
    if isinstance(value, bool):
        raise InputError.at(location, f"{what}: expected a number, got a boolean")
    if isinstance(value, (int, float)):
        return float(value)
    if is_expression(value):
        return float(value.evaluate(env))
    raise InputError.at(location, f"{what}: expected a number or an expression, got {value!r}")


def resolve_parameters(
    parameters: Mapping[str, Any],
    overrides: Mapping[str, float],
    location: Location,
) -> dict[str, float]:
    """Parameter values with a variant's ``overrides`` laid over them.

    A parameter may be an expression over other parameters; each is
    evaluated once, after the parameters it names. An overridden parameter
    takes the variant's value whatever its expression says. Overrides that
    are not parameters (a varied field such as ``gain``) are kept in the
    result too, so that expressions may name them.

    Raises
    ------
    InputError
        On a cycle among parameter expressions.
    """
    values: dict[str, float] = {k: float(v) for k, v in overrides.items()}
    visiting: set[str] = set()

    def resolve(name: str) -> None:
        if name in values:
            return
        raw = parameters[name]
        if name in visiting:
            loc = getattr(raw, "location", location)
            raise InputError.at(loc, f"parameter {name!r} depends on itself")
        visiting.add(name)
        if is_expression(raw):
            for dep in sorted(getattr(raw, "names", ())):
                if dep in parameters:
                    resolve(dep)
        loc = getattr(raw, "location", location)
        values[name] = to_float(raw, values, loc, f"parameter {name!r}")
        visiting.discard(name)

    for name in sorted(parameters):
        resolve(name)
    return values


class FieldReader:
    """Reads the fields of one entry as numbers, with a variant's overrides.

    Parameters
    ----------
    fields:
        The entry's fields (numbers, expressions, lists, dicts).
    field_locations:
        Location of each field (falls back to ``location``).
    location:
        The entry's table.
    env:
        Parameter values (after :func:`resolve_parameters`).
    overrides:
        Varied fields: their value replaces the field's own.
    """

    def __init__(
        self,
        fields: Mapping[str, Any],
        field_locations: Mapping[str, Location],
        location: Location,
        env: Mapping[str, float] | None = None,
        overrides: Mapping[str, float] | None = None,
    ) -> None:
        self.fields = fields
        self.field_locations = field_locations
        self.location = location
        self.env = dict(env or {})
        self.overrides = dict(overrides or {})

    def where(self, key: str) -> Location:
        loc = self.field_locations.get(key)
        if loc is not None:
            return loc
        return Location(self.location.file, self.location.line, self.location.column,
                        f"{self.location.key}.{key}" if self.location.key else key)

    def has(self, key: str) -> bool:
        return key in self.overrides or (key in self.fields and self.fields[key] is not None)

    def number(self, key: str, default: Any = _MISSING) -> float:
        """The field as a float; ``default`` when absent (an input error without one)."""
        if key in self.overrides:
            return float(self.overrides[key])
        value = self.fields.get(key)
        if value is None:
            if default is _MISSING:
                raise InputError.at(self.location, f"missing required key {key!r}")
            return default
        if type(value) is float or type(value) is int:  # the common case: no location needed
            return float(value)
        return to_float(value, self.env, self.where(key), key)

    def optional(self, key: str) -> float | None:
        return self.number(key, None)

    def text(self, key: str, default: str | None = None) -> str | None:
        value = self.fields.get(key, default)
        if value is None:
            return None
        if not isinstance(value, str):
            raise InputError.at(self.where(key), f"{key}: expected a string, got {value!r}")
        return value

    def item(self, value: Any, key: str) -> float:
        """A number inside a list or table field (coefficient, root, matrix entry)."""
        if type(value) is float or type(value) is int:  # the common case: no location needed
            return float(value)
        return to_float(value, self.env, self.where(key), key)

    def raw(self, key: str, default: Any = None) -> Any:
        return self.fields.get(key, default)
