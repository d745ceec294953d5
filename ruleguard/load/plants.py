"""Plant registry files (FORMATS.md section 2) -> :class:`PlantEntry` records.

A registry file holds ``[plants.NAME]`` tables. Each is validated against the
``plants`` schema, its numbers become floats and its strings
:class:`~ruleguard.load.expressions.Expression` objects, and then it is
checked for sense at its nominal parameter values and at each end of every
``vary`` range (one range at a time): every name an expression uses is a
parameter, denominators are not all zero, models are proper and at most of
order :data:`MAX_ORDER`, state-space shapes match, frequencies, time
constants and physical constants are positive, delays are not negative.
Every problem is an :class:`~ruleguard.errors.InputError` at the key.

Sensors are entries of the same registry.
"""

from __future__ import annotations

from collections.abc import Callable, Mapping
from math import isfinite
from pathlib import Path
from typing import Any

from ruleguard.errors import InputError
from ruleguard.load.expressions import (
    CONSTANTS,
    FUNCTIONS,
    Expression,
    evaluate_parameters,
    number_or_expression,
)
from ruleguard.load.measured import read_measured
from ruleguard.load.sources import Document, KeyPath, read_document
from ruleguard.load.spec import PlantEntry, VaryRange
from ruleguard.load.validation import suggestion, validate
from ruleguard.location import Location

#: Largest model order (poles) a plant entry may have.
MAX_ORDER = 200

#: Scalar number-or-expression fields of each kind (these may be varied).
SCALAR_FIELDS: Mapping[str, tuple[str, ...]] = {
    "transfer_function": ("delay_s",),
    "zero_pole_gain": ("gain", "delay_s"),
    "state_space": ("delay_s",),
    "first_order_dead_time": ("gain", "time_constant_s", "delay_s"),
    "second_order": ("gain", "freq_hz", "damping", "delay_s"),
    "integrator_dead_time": ("gain", "delay_s"),
    "dc_motor": (
        "resistance_ohm",
        "inductance_h",
        "torque_constant_nm_per_a",
        "inertia_kg_m2",
        "friction_nm_s_per_rad",
        "delay_s",
    ),
    "two_mass": (
        "inertia_motor_kg_m2",
        "inertia_load_kg_m2",
        "stiffness_nm_per_rad",
        "damping_nm_s_per_rad",
        "delay_s",
    ),
    "measured_response": ("delay_s",),
}

_POSITIVE = {
    "time_constant_s",
    "freq_hz",
    "resistance_ohm",
    "inductance_h",
    "torque_constant_nm_per_a",
    "inertia_kg_m2",
    "inertia_motor_kg_m2",
    "inertia_load_kg_m2",
    "stiffness_nm_per_rad",
}
_NON_NEGATIVE = {"delay_s", "friction_nm_s_per_rad", "damping_nm_s_per_rad"}
_NON_ZERO = {"gain"}


def load_registry(
    root: str | Path,
    rel_path: str,
    origin: Location | None,
    texts: dict[str, str],
) -> tuple[Document, dict[str, PlantEntry]]:
    """Read one registry file; returns its document and its entries by name."""
    document = read_document(root, rel_path, origin)
    texts[document.file] = document.text
    validate(document, "plants")
    entries: dict[str, PlantEntry] = {}
    for name, raw in document.data["plants"].items():
        entries[name] = build_entry(document, name, raw, root, texts)
    return document, entries


def build_entry(
    document: Document,
    name: str,
    raw: Mapping[str, Any],
    root: str | Path,
    texts: dict[str, str],
) -> PlantEntry:
    """One validated ``[plants.NAME]`` table -> :class:`PlantEntry` (checked)."""
    base: KeyPath = ("plants", name)
    kind = raw["kind"]
    field_locations: dict[str, Location] = {}

    def at(*path: str | int) -> Location:
        return document.locate(base + path)

    # parameters
    parameters: dict[str, float | Expression] = {}
    for pname, value in raw.get("parameters", {}).items():
        where = at("parameters", pname)
        if pname in CONSTANTS:
            raise InputError.at(where, f"parameter '{pname}' has the name of a constant; rename it")
        if pname in FUNCTIONS:
            raise InputError.at(where, f"parameter '{pname}' has the name of a function; rename it")
        if pname in raw and pname != "parameters":
            raise InputError.at(
                where,
                f"parameter '{pname}' has the name of a key of this entry; rename it so that "
                "expressions and vary are unambiguous",
            )
        parameters[pname] = number_or_expression(value, where)
        field_locations[f"parameters.{pname}"] = where

    # fields
    fields: dict[str, Any] = {}
    for key, value in raw.items():
        if key in ("kind", "parameters", "vary", "description", "operating_range"):
            continue
        field_locations[key] = at(key)
        fields[key] = _convert(value, base + (key,), document, field_locations, key)
    if "delay_s" not in fields:
        fields["delay_s"] = 0.0
    if kind == "zero_pole_gain" and "zeros" not in fields:
        fields["zeros"] = []
    if kind == "state_space" and "d" not in fields:
        fields["d"] = [[0.0]]
    if kind == "measured_response":
        fields.setdefault("integrators", 0)
        fields.setdefault("magnitude_unit", "db")

    _check_names(parameters, fields, name)

    # vary
    vary: dict[str, VaryRange] = {}
    scalars = SCALAR_FIELDS[kind]
    for vname, item in raw.get("vary", {}).items():
        where = at("vary", vname)
        field_locations[f"vary.{vname}"] = where
        if vname not in parameters and vname not in scalars:
            choices = sorted(set(parameters) | {s for s in scalars if s in raw})
            hint = suggestion(vname, choices)
            listed = f" (parameters and numeric keys: {', '.join(choices)})" if not hint else ""
            raise InputError.at(
                where,
                f"vary names '{vname}', which is neither a parameter nor a numeric key of "
                f"plant '{name}'{hint}{listed}",
            )
        lo, hi = float(item["min"]), float(item["max"])
        scale = item.get("scale", "linear")
        if lo > hi:
            raise InputError.at(where, f"vary '{vname}': min ({lo:g}) is above max ({hi:g})")
        if scale == "log" and lo <= 0:
            raise InputError.at(
                where, f"vary '{vname}': scale = \"log\" needs min > 0, found {lo:g}"
            )
        vary[vname] = VaryRange(vname, lo, hi, scale, where)

    # operating range (of a scheduling variable)
    operating_range: dict[str, tuple[float, float, Location]] = {}
    for oname, pair in raw.get("operating_range", {}).items():
        where = at("operating_range", oname)
        if oname not in parameters:
            hint = suggestion(oname, sorted(parameters))
            raise InputError.at(
                where,
                f"operating_range names '{oname}', which is not a parameter of plant "
                f"'{name}'{hint}; declare it in parameters (its nominal value) first",
            )
        if oname in raw.get("vary", {}):
            raise InputError.at(
                where,
                f"'{oname}' has both an operating_range and a vary range; a scheduling "
                "variable is set by the schedule, not varied",
            )
        lo, hi = float(pair[0]), float(pair[1])
        if lo > hi:
            raise InputError.at(
                where, f"operating_range '{oname}': min ({lo:g}) is above max ({hi:g})"
            )
        operating_range[oname] = (lo, hi, where)
        field_locations[f"operating_range.{oname}"] = where

    measured = None
    if kind == "measured_response":
        measured = read_measured(
            root,
            fields["file"],
            at("file"),
            fields["magnitude_unit"],
            texts,
        )

    entry = PlantEntry(
        name=name,
        kind=kind,
        fields=fields,
        parameters=parameters,
        vary=vary,
        location=document.locate(base),
        field_locations=field_locations,
        file=document.file,
        measured=measured,
        operating_range=operating_range,
    )
    check_entry(entry)
    return entry


#: Integer fields, kept as they are.
_WHOLE_NUMBERS = ("unstable_poles", "integrators")


def _convert(
    value: Any,
    path: KeyPath,
    document: Document,
    field_locations: dict[str, Location],
    key: str,
) -> Any:
    """Numbers -> float, strings -> Expression in number positions, recursively."""
    if type(value) is float and key not in _WHOLE_NUMBERS and isfinite(value):
        return value  # what number_or_expression gives (its location is for errors only)
    if isinstance(value, bool):  # excluded by the schemas; kept for safety
        raise document.error(path, "expected a number, found a boolean")
    if isinstance(value, (int, float)) and key not in _WHOLE_NUMBERS:
        return number_or_expression(value, document.locate(path))
    if isinstance(value, int):
        return value
    if isinstance(value, str):
        if key in ("file", "output", "magnitude_unit"):
            return value
        return number_or_expression(value, document.locate(path))
    plain = key not in _WHOLE_NUMBERS  # (a finite float item is kept as it is, as above)
    if isinstance(value, list):
        items = []
        prefix = ".".join(str(p) for p in path[2:])
        for index, item in enumerate(value):
            sub = path + (index,)
            field_locations[f"{prefix}.{index}" if prefix else str(index)] = document.locate(sub)
            if type(item) is float and plain and isfinite(item):
                items.append(item)
            else:
                items.append(_convert(item, sub, document, field_locations, key))
        return items
    if isinstance(value, dict):
        table = {}
        for k, v in value.items():
            if type(v) is float and plain and isfinite(v):
                table[k] = v
            else:
                table[k] = _convert(v, path + (k,), document, field_locations, key)
        return table
    return value


def _expressions(value: Any) -> list[Expression]:
    """The expressions in ``value`` (nested lists and tables), in order."""
    found: list[Expression] = []
    _collect_expressions(value, found)
    return found


def _collect_expressions(value: Any, found: list[Expression]) -> None:
    if isinstance(value, Expression):
        found.append(value)
    elif isinstance(value, list):
        for item in value:
            if type(item) is not float:
                _collect_expressions(item, found)
    elif isinstance(value, dict):
        for item in value.values():
            if type(item) is not float:
                _collect_expressions(item, found)


def _check_names(parameters: Mapping[str, Any], fields: Mapping[str, Any], name: str) -> None:
    known = sorted(parameters)
    for expression in [*_expressions(list(parameters.values())), *_expressions(dict(fields))]:
        for used in sorted(expression.names):
            if used not in parameters:
                hint = suggestion(used, known)
                listed = f" (parameters: {', '.join(known)})" if known and not hint else ""
                if not known:
                    listed = f"; plant '{name}' has no parameters table"
                raise InputError.at(
                    expression.location,
                    f"expression '{expression.text}' uses '{used}', which is not a parameter of "
                    f"plant '{name}'{hint}{listed}",
                )


# --------------------------------------------------------------------------- sanity


def check_entry(entry: PlantEntry) -> None:
    """Check the entry at nominal values and at each end of each vary range."""
    _check_at(entry, {})
    for vname, rng in entry.vary.items():
        for bound, value in (("min", rng.min), ("max", rng.max)):
            try:
                _check_at(entry, {vname: value})
            except InputError as exc:
                raise InputError.at(
                    rng.location,
                    f"with {vname} = {value:g} (vary {vname}.{bound}): {exc.message}",
                ) from None
    for oname, (low, high, where) in entry.operating_range.items():
        for bound, value in (("min", low), ("max", high)):
            try:
                _check_at(entry, {oname: value})
            except InputError as exc:
                raise InputError.at(
                    where,
                    f"with {oname} = {value:g} (operating_range {bound}): {exc.message}",
                ) from None


def _check_at(entry: PlantEntry, overrides: Mapping[str, float]) -> None:
    param_overrides = {k: v for k, v in overrides.items() if k in entry.parameters}
    field_overrides = {k: v for k, v in overrides.items() if k not in entry.parameters}
    values = evaluate_parameters(entry.parameters, param_overrides)
    fields = entry.fields
    locations = entry.field_locations

    def where(key: str) -> Location:
        return locations.get(key, entry.location)

    def number(key: str, item: Any = None) -> float:
        if item is None:
            if key in field_overrides:
                return float(field_overrides[key])
            item = fields[key]
        if isinstance(item, Expression):
            return item.evaluate(values)
        return float(item)

    for key in SCALAR_FIELDS[entry.kind]:
        if key not in fields and key not in field_overrides:
            continue
        value = number(key)
        if key in _POSITIVE and not value > 0:
            raise InputError.at(where(key), f"{key} must be > 0, found {value:g}")
        if key in _NON_NEGATIVE and not value >= 0:
            raise InputError.at(where(key), f"{key} must be >= 0, found {value:g}")
        if key in _NON_ZERO and value == 0:
            raise InputError.at(where(key), f"{key} is 0: the plant would have no output")
    if entry.kind == "second_order":
        damping = number("damping")
        if damping < 0:
            raise InputError.at(
                where("damping"),
                f"damping must be >= 0, found {damping:g} (give an unstable plant as "
                "zero_pole_gain or transfer_function)",
            )
    _KIND_CHECKS.get(entry.kind, lambda *a: None)(entry, number, where)


def _strip(coefficients: list[float]) -> list[float]:
    for index, value in enumerate(coefficients):
        if value != 0:
            return coefficients[index:]
    return []


def _check_transfer_function(entry: PlantEntry, number: Callable, where: Callable) -> None:
    num = _strip([number("", c) for c in entry.fields["numerator"]])
    den = _strip([number("", c) for c in entry.fields["denominator"]])
    if not den:
        raise InputError.at(where("denominator"), "the denominator is all zeros")
    if not num:
        raise InputError.at(
            where("numerator"), "the numerator is all zeros: the plant would have no output"
        )
    if len(den) - 1 > MAX_ORDER:
        raise InputError.at(
            where("denominator"), f"order {len(den) - 1} exceeds the limit of {MAX_ORDER}"
        )
    if len(num) > len(den):
        raise InputError.at(
            where("numerator"),
            f"improper plant: numerator degree {len(num) - 1} is above denominator degree "
            f"{len(den) - 1} (a physical plant has at least as many poles as zeros)",
        )


def _root_order(entry: PlantEntry, key: str, number: Callable, where: Callable) -> int:
    order = 0
    for index, item in enumerate(entry.fields.get(key, [])):
        place = where(f"{key}.{index}")
        if isinstance(item, dict) and "freq_hz" in item:
            freq = number("", item["freq_hz"])
            damping = number("", item["damping"])
            if not freq > 0:
                raise InputError.at(place, f"{key}.{index}.freq_hz must be > 0, found {freq:g}")
            if not -1.0 <= damping <= 1.0:
                raise InputError.at(
                    place,
                    f"{key}.{index}.damping must be within [-1, 1] for a pair, found {damping:g}"
                    " (give real roots as plain numbers)",
                )
            order += 2
        elif isinstance(item, dict):
            number("", item["re"])
            number("", item["im"])
            order += 2
        else:
            number("", item)
            order += 1
    return order


def _check_zero_pole_gain(entry: PlantEntry, number: Callable, where: Callable) -> None:
    poles = _root_order(entry, "poles", number, where)
    zeros = _root_order(entry, "zeros", number, where)
    if poles > MAX_ORDER:
        raise InputError.at(where("poles"), f"order {poles} exceeds the limit of {MAX_ORDER}")
    if zeros > poles:
        raise InputError.at(
            where("zeros"),
            f"improper plant: {zeros} zeros but only {poles} pole{'s' if poles != 1 else ''} "
            "(a physical plant has at "
            "least as many poles as zeros)",
        )


def _check_state_space(entry: PlantEntry, number: Callable, where: Callable) -> None:
    a, b, c, d = (entry.fields[k] for k in "abcd")
    n = len(a)
    if n > MAX_ORDER:
        raise InputError.at(where("a"), f"order {n} exceeds the limit of {MAX_ORDER}")
    shapes = {"a": (n, n), "b": (n, 1), "c": (1, n), "d": (1, 1)}
    for key, matrix in zip("abcd", (a, b, c, d), strict=True):
        rows, cols = shapes[key]
        found_cols = {len(row) for row in matrix}
        if len(matrix) != rows or found_cols != {cols}:
            found = f"{len(matrix)}x{'/'.join(str(x) for x in sorted(found_cols))}"
            raise InputError.at(
                where(key),
                f"'{key}' must be {rows}x{cols} (a is n x n, b n x 1, c 1 x n, d 1 x 1 for a "
                f"single-input single-output model with n = {n}), found {found}",
            )
        for row in matrix:
            for item in row:
                number("", item)


def _check_measured(entry: PlantEntry, number: Callable, where: Callable) -> None:
    if entry.fields.get("unstable_poles", 0) > MAX_ORDER:  # pragma: no cover - schema caps it
        raise InputError.at(where("unstable_poles"), "too many unstable poles")


_KIND_CHECKS: dict[str, Callable] = {
    "transfer_function": _check_transfer_function,
    "zero_pole_gain": _check_zero_pole_gain,
    "state_space": _check_state_space,
    "measured_response": _check_measured,
}
