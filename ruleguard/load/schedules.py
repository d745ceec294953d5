"""Gain schedules in firmware files -> :class:`~ruleguard.load.spec.Schedule`.

A loop's controller binding may name a schedule (docs/formats-additions.md,
"Gain schedules")::

    controller = { file = "fw.toml", path = "pitch",
                   schedule = { variable = "speed_mps", rows = "schedule" } }

* **rows**: ``rows`` is the key path (inside the controller table) of an
  array of tables, one per breakpoint; each row holds the scheduling variable
  under the key ``variable`` and the scheduled fields under their canonical
  names (or the firmware names the binding's ``map`` gives, with its
  ``scale``).
* **arrays**: ``breakpoints`` is the key path (inside the controller table)
  of an array of breakpoint values; every numeric controller field whose
  value (after ``map``) is an array is scheduled, element ``i`` belonging to
  breakpoint ``i``.

``plant_parameter`` (default: ``variable``) names the parameter of the loop's
plant entry that the scheduling value sets; that cross-file check is made in
:mod:`ruleguard.load.project`. Breakpoints must be finite and strictly
increasing, at least 2 of them; every breakpoint must give every scheduled
field. Every error points at the firmware element (or the manifest key)
that is wrong.
"""

from __future__ import annotations

import math
from collections.abc import Mapping
from typing import Any

from ruleguard.errors import InputError
from ruleguard.load.sources import Document, KeyPath, format_key
from ruleguard.load.spec import Schedule, SchedulePoint
from ruleguard.load.validation import number_problem
from ruleguard.location import Location

#: Controller fields a schedule may tabulate, by controller kind.
SCHEDULABLE_FIELDS: Mapping[str, tuple[str, ...]] = {
    "pid": ("kp", "ki", "kd", "derivative_filter_hz", "gain", "ti_s", "td_s", "n"),
    "lead_lag": ("gain", "zero_hz", "pole_hz"),
    "transfer_function": (),
}
#: Fewest breakpoints of a schedule.
MIN_POINTS = 2


def _number(document: Document, value: Any, path: KeyPath, what: str) -> float:
    if isinstance(value, bool) or not isinstance(value, (int, float)):
        raise document.error(path, f"{what}: expected a number at '{format_key(path)}', "
                                   f"found {value!r}")
    problem = number_problem(value)
    if problem:
        raise document.error(path, problem)
    out = float(value)
    if not math.isfinite(out):
        raise document.error(path, f"{what}: '{format_key(path)}' is not a finite number")
    return out


def key_and_scale(field_name: str, mapping: Mapping[str, Any]) -> tuple[str, float | None]:
    spec = mapping.get(field_name)
    if spec is None:
        return field_name, None
    if isinstance(spec, str):
        return spec, None
    return spec["key"], spec.get("scale")


def _get(node: Any, key: str) -> tuple[bool, Any, tuple[str | int, ...]]:
    """Walk a dotted ``key`` inside ``node``: (found, value, relative path)."""
    rel: tuple[str | int, ...] = ()
    for part in key.split("."):
        if isinstance(node, dict) and part in node:
            node = node[part]
            rel += (part,)
        elif isinstance(node, list) and part.isdigit() and int(part) < len(node):
            node = node[int(part)]
            rel += (int(part),)
        else:
            return False, None, rel
    return True, node, rel


def row_fields(kind: str, first_row: Any, mapping: Mapping[str, Any]) -> tuple[str, ...]:
    """The scheduled fields of the rows form: those the first row gives."""
    if not isinstance(first_row, dict):
        return ()
    return tuple(
        f for f in SCHEDULABLE_FIELDS.get(kind, ())
        if _get(first_row, key_and_scale(f, mapping)[0])[0]
    )


def _check_increasing(points: list[SchedulePoint], variable: str) -> None:
    if len(points) < MIN_POINTS:
        return
    for before, after in zip(points[:-1], points[1:], strict=True):
        if not after.value > before.value:
            raise InputError.at(
                after.value_location,
                f"schedule breakpoints must increase strictly: {variable} = {after.value:g} "
                f"at breakpoint {after.number} is not above {before.value:g} at breakpoint "
                f"{before.number} (line {before.value_location.line}); sort the schedule",
            )


def read_rows(
    document: Document,
    rows: Any,
    rows_path: KeyPath,
    variable: str,
    fields: tuple[str, ...],
    mapping: Mapping[str, Any],
    origin: Location,
) -> list[SchedulePoint]:
    """The breakpoints of the rows form (``rows`` at ``rows_path`` in ``document``)."""
    if not isinstance(rows, list) or not all(isinstance(r, dict) for r in rows):
        raise InputError.at(
            origin,
            f"schedule rows '{format_key(rows_path)}' in {document.file} must be an array of "
            "tables (one [[...]] table per breakpoint)",
        )
    points: list[SchedulePoint] = []
    for index, row in enumerate(rows):
        row_path = rows_path + (index,)
        if variable not in row:
            raise document.error(
                row_path,
                f"schedule row {index + 1} has no '{variable}' (the scheduling variable the "
                "manifest names)",
            )
        value = _number(document, row[variable], row_path + (variable,), "schedule")
        values: dict[str, float] = {}
        locations: dict[str, Location] = {}
        for field_name in fields:
            key, scale = key_and_scale(field_name, mapping)
            found, raw, rel = _get(row, key)
            if not found:
                raise document.error(
                    row_path,
                    f"schedule row {index + 1} has no '{key}'"
                    + (f" ({field_name})" if key != field_name else "")
                    + "; every row of the schedule must give the same fields as the first",
                )
            number = _number(document, raw, row_path + rel, f"schedule {field_name}")
            values[field_name] = number if scale is None else number * float(scale)
            locations[field_name] = document.locate(row_path + rel)
        points.append(SchedulePoint(
            number=index + 1,
            value=value,
            fields=values,
            location=document.locate(row_path),
            value_location=document.locate(row_path + (variable,)),
            field_locations=locations,
        ))
    return points


def read_arrays(
    document: Document,
    breakpoints: Any,
    breakpoints_path: KeyPath,
    arrays: Mapping[str, tuple[list, KeyPath, float | None]],
    variable: str,
    origin: Location,
) -> list[SchedulePoint]:
    """The breakpoints of the arrays form: ``arrays`` maps field -> (values, path, scale)."""
    if not isinstance(breakpoints, list):
        raise InputError.at(
            origin,
            f"schedule breakpoints '{format_key(breakpoints_path)}' in {document.file} must "
            "be an array of numbers",
        )
    if not arrays:
        raise InputError.at(
            origin,
            f"the schedule has breakpoints but no controller field of the table at "
            f"'{format_key(breakpoints_path[:-1]) or 'the top level'}' is an array; give the "
            "scheduled gains as arrays (kp = [...]) of the breakpoints' length",
        )
    count = len(breakpoints)
    for field_name, (values, path, _scale) in arrays.items():
        if len(values) != count:
            raise document.error(
                path,
                f"schedule array {field_name} has {len(values)} element(s) but the "
                f"breakpoints '{format_key(breakpoints_path)}' have {count}; give one value "
                "per breakpoint",
            )
    points: list[SchedulePoint] = []
    for index, raw in enumerate(breakpoints):
        element = breakpoints_path + (index,)
        value = _number(document, raw, element, "schedule breakpoint")
        values: dict[str, float] = {}
        locations: dict[str, Location] = {}
        for field_name, (items, path, scale) in arrays.items():
            number = _number(document, items[index], path + (index,),
                             f"schedule {field_name}")
            values[field_name] = number if scale is None else number * float(scale)
            locations[field_name] = document.locate(path + (index,))
        points.append(SchedulePoint(
            number=index + 1,
            value=value,
            fields=values,
            location=document.locate(element),
            value_location=document.locate(element),
            field_locations=locations,
        ))
    return points


def make_schedule(
    spec: Mapping[str, Any],
    form: str,
    fields: tuple[str, ...],
    points: list[SchedulePoint],
    location: Location,
    binding_location: Location,
    parameter_location: Location,
) -> Schedule:
    """Check the breakpoints (count, order, finite scaled values) and build the record."""
    variable = spec["variable"]
    if len(points) < MIN_POINTS:
        raise InputError.at(
            location,
            f"a schedule needs at least {MIN_POINTS} breakpoints, found {len(points)}",
        )
    _check_increasing(points, variable)
    for point in points:
        for name, value in point.fields.items():
            if not math.isfinite(value):
                raise InputError.at(point.field_locations[name],
                                    f"schedule {name} x scale is not a finite number")
    return Schedule(
        variable=variable,
        plant_parameter=spec.get("plant_parameter", variable),
        form=form,
        fields=fields,
        points=tuple(points),
        location=location,
        binding_location=binding_location,
        parameter_location=parameter_location,
    )
