"""Families of loops: the variants a loop is checked over.

``vary = { R = { min, max, scale } }`` in a plant or sensor entry makes the
loop a family (FORMATS.md section 2). :func:`loop_variants` lists the
variants of one loop: the nominal first, then

* **corners** (``variants = "corners"``, the default): every min/max corner,
  in the order of ``itertools.product([min, max], ...)`` over the qualified
  names (``entry.param``) sorted alphabetically, so ``corner-1`` is all
  minima and the last corner all maxima; at most ``2**10`` corners;
* **Latin hypercube samples** (``variants = { samples = N, seed = S }``):
  ``sample-1`` ... ``sample-N``, one stratum per sample in each parameter,
  uniform within it (McKay, Beckman & Conover, "A comparison of three
  methods for selecting values of input variables in the analysis of output
  from a computer code", Technometrics 21(2), 1979).

Draw order of the samples (fixed, so results are the same on every machine
with the same numpy bit generator, PCG64 behind
``numpy.random.default_rng(seed)``): one generator per loop, created from
the seed; then for each qualified name in alphabetical order, first
``u = rng.random(N)`` (the positions within the strata), then
``perm = rng.permutation(N)`` (which stratum each sample takes). Sample
``i`` (0-based) of that parameter sits at ``t = (perm[i] + u[i]) / N`` in
[0, 1): ``min + t (max - min)`` in linear scale, ``exp(log min + t (log max -
log min))`` in log scale.

A loop's variants cover every varied name of every entry it uses: its plant,
its sensor and, recursively, the entries of its inner loop. The nominal
value of a varied name is the entry's parameter (or field) of that name;
when the entry gives neither, the middle of the range (the geometric middle
in log scale).
"""

from __future__ import annotations

import itertools
import math
from collections.abc import Mapping
from dataclasses import field

from ruleguard.deferred import numpy as np
from ruleguard.errors import InputError
from ruleguard.frozen import record
from ruleguard.load.spec import LoopSpec, PlantEntry, Project, VaryRange
from ruleguard.models.fieldvalues import resolve_parameters, to_float
from ruleguard.models.schedules import OperatingPoint, nominal_point, operating_points

#: Largest number of corners (FORMATS.md section 2).
MAX_CORNER_PARAMETERS = 10

NOMINAL_ID = "nominal"


@record
class Variant:
    """One member of a loop family.

    Attributes
    ----------
    id:
        ``"nominal"``, ``"corner-<k>"`` or ``"sample-<k>"`` (1-based); for a
        scheduled loop also ``"schedule-<k>"``, ``"schedule-<k>.5"`` and
        those crossed with the plant family (``"schedule-2/corner-3"``).
    parameters:
        Qualified name (``"entry.param"``) -> value, sorted by name; every
        varied name of the loop's entries (the nominal values for the
        nominal variant).
    """

    id: str
    parameters: Mapping[str, float] = field(default_factory=dict)
    #: The schedule point of a scheduled loop's variant (``None`` otherwise).
    operating_point: OperatingPoint | None = None

    def values_for(self, entry_name: str) -> dict[str, float]:
        """This variant's values of one entry, by unqualified name."""
        prefix = entry_name + "."
        return {k[len(prefix):]: v for k, v in self.parameters.items() if k.startswith(prefix)
                and "." not in k[len(prefix):]}


@record
class VariedParameter:
    """A varied name of an entry, with its nominal value and range."""

    qualified_name: str
    nominal: float
    range: VaryRange


def loop_entries(project: Project, spec: LoopSpec) -> tuple[PlantEntry, ...]:
    """The registry entries a loop uses: plant, sensor, then its inner loop's (recursively).

    Each entry appears once, in that order of first use.
    """
    seen: dict[str, PlantEntry] = {}
    visited: set[str] = set()
    current: LoopSpec | None = spec
    while current is not None:
        if current.name in visited:
            raise InputError.at(current.field_locations.get("inner", current.location),
                                f"cascade cycle through loop {current.name!r}")
        visited.add(current.name)
        for name, key in ((current.plant, "plant"), (current.sensor, "sensor")):
            if name is None:
                continue
            entry = project.plants.get(name)
            if entry is None:
                raise InputError.at(current.field_locations.get(key, current.location),
                                    f"no plant registry entry named {name!r}")
            seen.setdefault(name, entry)
        current = find_loop(project, current.inner, current) if current.inner else None
    return tuple(seen.values())


def find_loop(project: Project, name: str, referrer: LoopSpec) -> LoopSpec:
    """The loop named ``name`` (the inner loop of ``referrer``)."""
    for loop in project.loops:
        if loop.name == name:
            return loop
    raise InputError.at(referrer.field_locations.get("inner", referrer.location),
                        f"no loop named {name!r} (inner loop of {referrer.name!r})")


def varied_parameters(project: Project, spec: LoopSpec) -> tuple[VariedParameter, ...]:
    """Every varied name of the loop's entries, sorted by qualified name."""
    found: dict[str, VariedParameter] = {}
    for entry in loop_entries(project, spec):
        if not entry.vary:
            continue
        env = resolve_parameters(entry.parameters, {}, entry.location)
        for name, rng in entry.vary.items():
            qualified = f"{entry.name}.{name}"
            _check_range(rng)
            found[qualified] = VariedParameter(qualified, _nominal(entry, name, rng, env), rng)
    return tuple(found[k] for k in sorted(found))


def _check_range(rng: VaryRange) -> None:
    if not (math.isfinite(rng.min) and math.isfinite(rng.max)) or rng.min > rng.max:
        raise InputError.at(rng.location, f"vary {rng.name!r}: need finite min <= max")
    if rng.scale == "log" and not rng.min > 0:
        raise InputError.at(rng.location, f"vary {rng.name!r}: scale = 'log' needs min > 0")
    if rng.scale not in ("linear", "log"):
        raise InputError.at(rng.location, f"vary {rng.name!r}: scale must be 'linear' or 'log'")


def _nominal(entry: PlantEntry, name: str, rng: VaryRange, env: Mapping[str, float]) -> float:
    if name in env:
        return env[name]
    raw = entry.fields.get(name)
    if raw is not None:
        loc = entry.field_locations.get(name, entry.location)
        return to_float(raw, env, loc, name)
    if rng.scale == "log":
        return math.sqrt(rng.min * rng.max)
    return 0.5 * (rng.min + rng.max)


def loop_variants(project: Project, spec: LoopSpec) -> tuple[Variant, ...]:
    """The variants of one loop, nominal first (see the module documentation).

    A scheduled loop's variants are :func:`scheduled_variants` of its plant
    family's.

    Raises
    ------
    InputError
        More than ``2**10`` corners, a bad range, or an unknown entry.
    """
    family = family_variants(project, spec)
    if spec.controller.schedule is not None:
        return scheduled_variants(project, spec, family)
    return family


def scheduled_variants(
    project: Project, spec: LoopSpec, family: tuple[Variant, ...]
) -> tuple[Variant, ...]:
    """A scheduled loop's variants: its operating points crossed with the plant family.

    First ``nominal``: the plant's nominal parameters at the nominal value of
    the scheduled parameter, with the gains interpolated there
    (:func:`ruleguard.models.schedules.nominal_point`). Then, in increasing
    scheduling value, every breakpoint ``k`` and midpoint ``k.5``, each
    crossed with the family (nominal first): ``schedule-k`` at the nominal
    plant, ``schedule-k/corner-j`` (or ``/sample-j``) at the family's other
    members. Every variant's ``parameters`` include the scheduled parameter
    qualified by the plant entry (``pitch_plant.speed_mps``).
    """
    schedule = spec.controller.schedule
    entry = project.plants[spec.plant]
    qualified = f"{entry.name}.{schedule.plant_parameter}"
    env = resolve_parameters(entry.parameters, {}, entry.location)
    nominal_value = env[schedule.plant_parameter]

    def with_value(parameters: Mapping[str, float], value: float) -> dict[str, float]:
        merged = {**parameters, qualified: float(value)}
        return {k: merged[k] for k in sorted(merged)}

    variants = [Variant(NOMINAL_ID, with_value(family[0].parameters, nominal_value),
                        nominal_point(schedule, nominal_value))]
    for point in operating_points(schedule):
        for member in family:
            suffix = "" if member.id == NOMINAL_ID else f"/{member.id}"
            variants.append(Variant(f"schedule-{point.label}{suffix}",
                                    with_value(member.parameters, point.value), point))
    return tuple(variants)


def family_variants(project: Project, spec: LoopSpec) -> tuple[Variant, ...]:
    """The plant family's variants of one loop (nominal, corners or samples)."""
    params = varied_parameters(project, spec)
    nominal = Variant(NOMINAL_ID, {p.qualified_name: p.nominal for p in params})
    if not params:
        return (nominal,)
    policy = project.variants
    names = [p.qualified_name for p in params]
    if policy.mode == "samples":
        table = latin_hypercube([p.range for p in params], policy.samples, policy.seed)
        samples = tuple(
            Variant(f"sample-{i + 1}", dict(zip(names, map(float, row), strict=True)))
            for i, row in enumerate(table)
        )
        return (nominal, *samples)
    if len(params) > MAX_CORNER_PARAMETERS:
        raise InputError.at(
            spec.location,
            f"loop {spec.name!r} varies {len(params)} parameters: 2**{len(params)} corners "
            f"exceed the limit of 2**{MAX_CORNER_PARAMETERS}; use variants = {{ samples, seed }}",
        )
    corners = tuple(
        Variant(f"corner-{i + 1}", dict(zip(names, values, strict=True)))
        for i, values in enumerate(
            itertools.product(*[(float(p.range.min), float(p.range.max)) for p in params])
        )
    )
    return (nominal, *corners)


def latin_hypercube(ranges, samples: int, seed: int) -> np.ndarray:
    """Latin hypercube samples, shape ``(samples, len(ranges))``, in the documented draw order.

    References
    ----------
    McKay, Beckman & Conover, "A comparison of three methods for selecting
    values of input variables in the analysis of output from a computer
    code", Technometrics 21(2), 1979.
    """
    n = int(samples)
    if n < 0:
        raise ValueError("samples must be >= 0")
    rng = np.random.default_rng(seed)
    out = np.empty((n, len(ranges)))
    for j, r in enumerate(ranges):
        u = rng.random(n)
        perm = rng.permutation(n)
        t = (perm + u) / n if n else u
        if r.scale == "log":
            lo, hi = math.log(r.min), math.log(r.max)
            col = np.exp(lo + t * (hi - lo))
        else:
            col = r.min + t * (r.max - r.min)
        out[:, j] = np.clip(col, r.min, r.max)
    return out
