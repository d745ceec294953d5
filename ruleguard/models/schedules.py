"""Gain schedules: the operating points a scheduled loop is checked at.

A schedule (:class:`~ruleguard.load.spec.Schedule`) tabulates controller
fields over a scheduling variable. The loop is checked at

* every **breakpoint** ``k`` (1-based, in the file's order, which increases
  in the scheduling value): label ``"k"``, the row's own values;
* the **midpoint** of every interval between breakpoints ``k`` and ``k+1``:
  label ``"k.5"``, scheduling value ``(v_k + v_{k+1})/2`` and every field
  linearly interpolated there, i.e. the mean of the two rows (the
  interpolation most firmware does between table entries, common practice);
* the plant's **nominal operating point** (the nominal value of the plant
  parameter the schedule sets), with the fields linearly interpolated there
  and held at the end values outside the table (what firmware that clamps
  its table index does): this is the loop's ``nominal`` variant.

Each operating point carries where its values stand in the firmware file,
so a finding about it points at that row or array element.
"""

from __future__ import annotations

import bisect
from collections.abc import Mapping
from dataclasses import field

from ruleguard.frozen import record
from ruleguard.load.spec import Schedule
from ruleguard.location import Location


@record
class OperatingPoint:
    """One point of a schedule a scheduled variant is built at.

    Attributes
    ----------
    label:
        ``"3"`` (breakpoint 3), ``"3.5"`` (midpoint of breakpoints 3 and 4) or
        ``"nominal"`` (the plant's nominal operating point).
    value:
        The scheduling variable's value there.
    fields:
        The scheduled controller fields there.
    location, field_locations:
        The row (or breakpoint element) and each field's element; for a
        midpoint or an interpolated nominal, those of the lower breakpoint.
    related:
        The other breakpoint an interpolated point depends on.
    midpoint:
        True for an interval midpoint (``k.5``).
    """

    label: str
    value: float
    fields: Mapping[str, float]
    location: Location
    field_locations: Mapping[str, Location] = field(default_factory=dict)
    related: tuple[Location, ...] = ()
    midpoint: bool = False


def interpolate(schedule: Schedule, value: float) -> tuple[dict[str, float], int, float]:
    """The scheduled fields at ``value``: linear between breakpoints, held outside.

    Returns ``(fields, k, t)``: the fields, the 0-based index ``k`` of the
    lower breakpoint of the interval used and the fraction ``t`` in [0, 1]
    of the way to breakpoint ``k+1`` (``t = 0`` on or below the first
    breakpoint, ``k`` the last index and ``t = 0`` on or above the last).
    """
    points = schedule.points
    values = [p.value for p in points]
    if value <= values[0]:
        return dict(points[0].fields), 0, 0.0
    if value >= values[-1]:
        return dict(points[-1].fields), len(points) - 1, 0.0
    k = bisect.bisect_right(values, value) - 1
    low, high = points[k], points[k + 1]
    t = (value - low.value) / (high.value - low.value)
    fields = {
        name: (1.0 - t) * low.fields[name] + t * high.fields[name] for name in schedule.fields
    }
    return fields, k, t


def breakpoint_point(schedule: Schedule, index: int) -> OperatingPoint:
    """Breakpoint ``index`` (0-based) as an operating point labelled ``index + 1``."""
    point = schedule.points[index]
    return OperatingPoint(
        label=str(point.number),
        value=point.value,
        fields=dict(point.fields),
        location=point.location,
        field_locations=dict(point.field_locations),
    )


def midpoint(schedule: Schedule, index: int) -> OperatingPoint:
    """The midpoint of breakpoints ``index`` and ``index + 1`` (0-based), labelled ``k.5``."""
    low, high = schedule.points[index], schedule.points[index + 1]
    value = 0.5 * (low.value + high.value)
    fields, _, _ = interpolate(schedule, value)
    return OperatingPoint(
        label=f"{low.number}.5",
        value=value,
        fields=fields,
        location=low.location,
        field_locations=dict(low.field_locations),
        related=(high.location,),
        midpoint=True,
    )


def nominal_point(schedule: Schedule, value: float) -> OperatingPoint:
    """The plant's nominal operating point ``value`` with interpolated (held) fields."""
    fields, k, t = interpolate(schedule, value)
    low = schedule.points[k]
    related = (schedule.points[k + 1].location,) if t > 0.0 else ()
    return OperatingPoint(
        label="nominal",
        value=float(value),
        fields=fields,
        location=low.location,
        field_locations=dict(low.field_locations),
        related=related,
    )


def operating_points(schedule: Schedule) -> tuple[OperatingPoint, ...]:
    """Breakpoints and interval midpoints in increasing scheduling value."""
    found: list[OperatingPoint] = []
    for index in range(len(schedule.points)):
        found.append(breakpoint_point(schedule, index))
        if index + 1 < len(schedule.points):
            found.append(midpoint(schedule, index))
    return tuple(found)


def is_midpoint_id(variant_id: str) -> bool:
    """True for the id of a midpoint variant (``schedule-3.5``, ``schedule-3.5/corner-2``)."""
    head = variant_id.split("/", 1)[0]
    return head.startswith("schedule-") and head.endswith(".5")
