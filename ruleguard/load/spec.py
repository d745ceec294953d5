"""Frozen records produced by loading: what the user wrote, validated and located.

The loaders (:mod:`ruleguard.load.project`) turn the manifest, the plant
registry, the controller tables and the ruleset into these records. Nothing
here is computed from models; numbers that may depend on parameters stay as
:class:`~ruleguard.load.expressions.Expression` until a variant fixes the
parameter values (:mod:`ruleguard.models.families`).

Every record carries the :class:`~ruleguard.location.Location` of its table
and of each field (``field_locations``), so an input error or a finding can
point at the exact line.
"""

from __future__ import annotations

from collections.abc import Mapping
from dataclasses import field
from typing import Any

from ruleguard.frozen import record
from ruleguard.location import Location


@record
class VaryRange:
    """A varied parameter: ``vary = { R = { min = 1.1, max = 1.8, scale = "log" } }``."""

    name: str
    min: float
    max: float
    scale: str  # "linear" | "log"
    location: Location


@record
class MeasuredData:
    """A measured frequency response read from CSV (``measured_response`` plants)."""

    freq_hz: tuple[float, ...]
    magnitude_db: tuple[float, ...]
    phase_deg: tuple[float, ...]  # unwrapped
    file: str


@record
class PlantEntry:
    """One entry of the plant registry (``[plants.NAME]``), also used for sensors.

    ``fields`` holds every key of the entry except ``kind``, ``parameters``
    and ``vary``, with numbers as float, expressions as
    :class:`~ruleguard.load.expressions.Expression`, root lists as lists of
    float / Expression / ``{"re", "im"}`` / ``{"freq_hz", "damping"}`` dicts,
    matrices as lists of lists.
    """

    name: str
    kind: str
    fields: Mapping[str, Any]
    parameters: Mapping[str, Any]  # name -> float or Expression
    vary: Mapping[str, VaryRange]
    location: Location
    field_locations: Mapping[str, Location]
    file: str
    measured: MeasuredData | None = None
    #: ``operating_range = { speed_mps = [0, 30] }``: the range of a parameter
    #: the plant is operated over (a scheduling variable), with its location.
    operating_range: Mapping[str, tuple[float, float, Location]] = field(default_factory=dict)


@record
class FilterEntry:
    """One ``[[<controller>.filters]]`` item."""

    kind: str
    fields: Mapping[str, Any]
    location: Location
    field_locations: Mapping[str, Location]
    index: int


@record
class SchedulePoint:
    """One breakpoint of a gain schedule (a row, or one element of each array).

    ``number`` is 1-based in the order of the file (which must be increasing
    in ``value``); ``fields`` holds the scheduled controller fields at this
    point (canonical names, after ``map``/``scale``), ``field_locations``
    the firmware's own element of each, ``value_location`` the element of the
    scheduling variable.
    """

    number: int
    value: float
    fields: Mapping[str, float]
    location: Location
    value_location: Location
    field_locations: Mapping[str, Location]


@record
class Schedule:
    """A gain schedule: controller fields tabulated over a scheduling variable.

    ``form`` is ``"rows"`` (an array of tables, one per breakpoint) or
    ``"arrays"`` (a breakpoint array and one array per scheduled field).
    ``plant_parameter`` is the parameter of the loop's plant entry that the
    scheduling variable sets (by default its own name).
    """

    variable: str
    plant_parameter: str
    form: str
    fields: tuple[str, ...]
    points: tuple[SchedulePoint, ...]
    location: Location
    binding_location: Location
    #: The manifest key that names the plant parameter (``plant_parameter``,
    #: else ``variable``).
    parameter_location: Location

    @property
    def low(self) -> float:
        return self.points[0].value

    @property
    def high(self) -> float:
        return self.points[-1].value


@record
class ControllerEntry:
    """The controller table at ``path`` of a firmware file, after ``map``/``scale``.

    ``fields`` uses ruleguard's canonical names (``kp``, ``ki``, ``ti_s``, ...)
    whatever names the firmware file uses; ``field_locations`` points at the
    firmware's own key for each canonical field.
    """

    kind: str
    fields: Mapping[str, Any]
    filters: tuple[FilterEntry, ...]
    location: Location
    field_locations: Mapping[str, Location]
    file: str
    path: str
    schedule: Schedule | None = None


@record
class LoopSpec:
    """One ``[[loops]]`` item of the manifest."""

    name: str
    plant: str
    controller: ControllerEntry
    sample_rate_hz: float | None
    delay_samples: float
    delay_s: float
    sensor: str | None
    inner: str | None
    tags: tuple[str, ...]
    required_ccw: int | None
    bounds: Mapping[str, tuple[float, float]]
    location: Location
    field_locations: Mapping[str, Location]


@record
class VariantPolicy:
    """``variants = "corners"`` or ``{ samples = N, seed = S }``."""

    mode: str  # "corners" | "samples"
    samples: int = 0
    seed: int = 0


@record
class Project:
    """Everything a manifest names, loaded and validated.

    ``root`` is the absolute manifest folder (string); every other path is
    relative to it with ``/``. ``texts`` keeps each input file's text for
    source excerpts in reports; ``inputs`` maps every loop name to the set of
    files its result depends on (changed-files mode, cache keys).
    """

    root: str
    manifest_file: str
    name: str
    ruleset: str
    ruleset_location: Location
    plant_files: tuple[str, ...]
    plants: Mapping[str, PlantEntry]
    loops: tuple[LoopSpec, ...]
    variants: VariantPolicy
    texts: Mapping[str, str] = field(default_factory=dict)
    inputs: Mapping[str, frozenset[str]] = field(default_factory=dict)
