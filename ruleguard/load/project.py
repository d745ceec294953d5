"""Load a whole project: manifest, plant registries, controller tables, CSV data.

:func:`load_project` is the loading stage of the pipeline. It reads only
files inside the manifest's folder (:mod:`ruleguard.load.sources`), never
writes, and raises one located :class:`~ruleguard.errors.InputError` for the
first problem it meets, after these checks across files:

* loop names are unique; ``plant``, ``sensor`` and ``inner`` name existing
  registry entries / loops (with a did-you-mean); inner loops form no cycle;
* ``delay_samples`` needs ``sample_rate_hz``; already-discrete blocks
  (biquads, ``domain = "z"``) need a sample rate;
* ``bounds`` name numeric fields of the loop's controller, with min <= max;
* with ``variants = "corners"``, a loop varies at most 10 parameters
  (2**10 corners) over its plant, sensor and inner loops;
* plant names are unique across registry files.
"""

from __future__ import annotations

from pathlib import Path

from ruleguard.errors import InputError
from ruleguard.load.controllers import CONTROLLER_FIELDS, load_controller, uses_z_domain
from ruleguard.load.manifest import Manifest, loop_spec, naming_loops, read_manifest
from ruleguard.load.plants import load_registry
from ruleguard.load.sources import Document
from ruleguard.load.spec import LoopSpec, PlantEntry, Project
from ruleguard.load.validation import suggestion
from ruleguard.location import Location

MANIFEST_NAMES = ("ruleguard.toml", "ruleguard.json")
#: Most varied parameters per loop with ``variants = "corners"`` (2**10 corners).
MAX_CORNER_PARAMETERS = 10

_NUMERIC_CONTROLLER_FIELDS = {
    kind: tuple(f for f in fields if f not in ("form", "domain", "numerator", "denominator"))
    for kind, fields in CONTROLLER_FIELDS.items()
}


def find_manifest(start_dir: str | Path) -> Path:
    """The manifest in ``start_dir`` or its nearest parent that has one.

    Raises
    ------
    InputError
        None found, or both ``ruleguard.toml`` and ``ruleguard.json`` in one folder.
    """
    start = Path(start_dir).resolve()
    for folder in (start, *start.parents):
        found = [folder / name for name in MANIFEST_NAMES if (folder / name).is_file()]
        if len(found) == 2:
            raise InputError(
                str(found[0]),
                None,
                None,
                "",
                f"both ruleguard.toml and ruleguard.json are in {folder}; keep one "
                "or choose with --manifest",
            )
        if found:
            return found[0]
    raise InputError(
        "ruleguard.toml",
        None,
        None,
        "",
        f"no ruleguard.toml or ruleguard.json in {start} or any folder above it; "
        "give one with --manifest PATH (or create one with `ruleguard init`)",
    )


def load_project(manifest_path: str | Path) -> Project:
    """Read, validate and cross-check every file the manifest names.

    Parameters
    ----------
    manifest_path:
        The manifest file (``ruleguard.toml`` or ``ruleguard.json``); its
        folder is the project root, outside which nothing is read.

    Raises
    ------
    InputError
        The first problem found, with file, line, column and key.
    """
    given = Path(manifest_path)
    if not given.exists():
        raise InputError(str(manifest_path), None, None, "", "manifest file not found")
    if not given.is_file():
        raise InputError(str(manifest_path), None, None, "", "the manifest is not a regular file")
    root = given.absolute().parent.resolve()
    manifest = read_manifest(root, given.name)
    with naming_loops(manifest.document):
        return _load(root, manifest)


def _load(root: Path, manifest: Manifest) -> Project:
    document = manifest.document
    texts: dict[str, str] = {document.file: document.text}

    # plant registries
    plants: dict[str, PlantEntry] = {}
    plant_files: list[str] = []
    for rel_path, origin in manifest.plant_files:
        registry, entries = load_registry(root, rel_path, origin, texts)
        plant_files.append(registry.file)
        for name, entry in entries.items():
            if name in plants:
                first = plants[name]
                raise InputError.at(
                    entry.location,
                    f"plant '{name}' is defined twice: also in {first.file} line "
                    f"{first.location.line}",
                )
            plants[name] = entry

    # loops
    firmware: dict[str, Document] = {}
    loops: list[LoopSpec] = []
    names: dict[str, Location] = {}
    for index, raw in enumerate(document.data["loops"]):
        name = raw["name"]
        name_location = document.locate(("loops", index, "name"))
        if name in names:
            raise InputError.at(
                name_location,
                f"loop name '{name}' is used twice (first at line {names[name].line}); "
                "loop names must be unique",
            )
        names[name] = name_location
        controller = load_controller(
            root, raw["controller"], ("loops", index, "controller"), document, firmware, texts
        )
        loops.append(loop_spec(document, index, controller))

    by_name = {spec.name: spec for spec in loops}
    for spec in loops:
        _check_loop(spec, plants, by_name)
    _check_cycles(loops, by_name)
    for spec in loops:
        _check_schedule(spec, plants, by_name)
    if manifest.variants.mode == "corners":
        for spec in loops:
            _check_corners(spec, plants, by_name)

    inputs = _inputs(loops, plants, by_name, document.file, manifest)
    return Project(
        root=str(root),
        manifest_file=document.file,
        name=manifest.name,
        ruleset=manifest.ruleset,
        ruleset_location=manifest.ruleset_location,
        plant_files=tuple(plant_files),
        plants=plants,
        loops=tuple(loops),
        variants=manifest.variants,
        texts=texts,
        inputs=inputs,
    )


def _check_loop(spec: LoopSpec, plants: dict, by_name: dict) -> None:
    where = spec.field_locations
    for key in ("plant", "sensor"):
        ref = getattr(spec, key)
        if ref is not None and ref not in plants:
            listed = ", ".join(sorted(plants)) or "none: list registry files in project.plants"
            hint = suggestion(ref, plants)
            raise InputError.at(
                where[key],
                f"no plant registry entry named '{ref}'{hint}"
                + ("" if hint else f" (entries: {listed})"),
            )
    if spec.inner is not None and spec.inner not in by_name:
        hint = suggestion(spec.inner, [n for n in by_name if n != spec.name])
        raise InputError.at(where["inner"], f"no loop named '{spec.inner}'{hint}")
    if spec.sample_rate_hz is None and "delay_samples" in where:
        raise InputError.at(
            where["delay_samples"],
            "delay_samples needs sample_rate_hz: a delay in samples means nothing in a "
            "continuous-time loop (use delay_s there)",
        )
    if spec.sample_rate_hz is None:
        discrete = uses_z_domain(spec.controller)
        if discrete:
            what, location = discrete[0]
            raise InputError.at(
                location,
                f"{what} is already discrete, but loop '{spec.name}' has no sample_rate_hz; "
                "add the loop's sample rate to the manifest",
            )
    numeric = _NUMERIC_CONTROLLER_FIELDS.get(spec.controller.kind, ())
    for field_name, (low, high) in spec.bounds.items():
        location = where.get(f"bounds.{field_name}", where.get("bounds", spec.location))
        if field_name not in numeric:
            raise InputError.at(
                location,
                f"bounds names '{field_name}', which is not a numeric field of a "
                f"{spec.controller.kind} controller{suggestion(field_name, numeric)} "
                f"(fields: {', '.join(numeric) or 'none'})",
            )
        if low > high:
            raise InputError.at(
                location, f"bounds for '{field_name}': min ({low:g}) is above max ({high:g})"
            )


def _check_schedule(spec: LoopSpec, plants: dict, by_name: dict) -> None:
    """A schedule's variable is a parameter of the loop's plant, not varied; no
    scheduled loop is the inner loop of a cascade."""
    if spec.inner is not None and by_name[spec.inner].controller.schedule is not None:
        raise InputError.at(
            spec.field_locations["inner"],
            f"inner loop '{spec.inner}' has a gain schedule; a scheduled loop cannot be the "
            "inner loop of a cascade yet (check it on its own)",
        )
    schedule = spec.controller.schedule
    if schedule is None:
        return
    entry = plants[spec.plant]
    where = schedule.parameter_location
    name = schedule.plant_parameter
    if name not in entry.parameters:
        known = sorted(entry.parameters)
        hint = suggestion(name, known)
        raise InputError.at(
            where,
            f"unknown scheduling variable '{name}': plant '{entry.name}' ({entry.file} line "
            f"{entry.location.line}) has no parameter of that name{hint} (parameters: "
            f"{', '.join(known) or 'none'}); declare it in the plant's parameters with its "
            "nominal value and use it in the plant's expressions",
        )
    if name in entry.vary:
        raise InputError.at(
            entry.vary[name].location,
            f"'{name}' is the scheduling variable of loop '{spec.name}' and cannot also be "
            "varied; the schedule sets it at each breakpoint",
        )


def _check_cycles(loops: list[LoopSpec], by_name: dict) -> None:
    for spec in loops:
        trail = [spec.name]
        current = spec
        while current.inner is not None:
            if current.inner in trail:
                cycle = " -> ".join(trail[trail.index(current.inner):] + [current.inner])
                raise InputError.at(
                    current.field_locations["inner"],
                    f"inner loops form a cycle: {cycle}",
                )
            trail.append(current.inner)
            current = by_name[current.inner]


def _loop_entries(spec: LoopSpec, plants: dict, by_name: dict) -> list[PlantEntry]:
    entries: list[PlantEntry] = []
    current: LoopSpec | None = spec
    while current is not None:
        entries.append(plants[current.plant])
        if current.sensor is not None:
            entries.append(plants[current.sensor])
        current = by_name[current.inner] if current.inner is not None else None
    return entries


def _check_corners(spec: LoopSpec, plants: dict, by_name: dict) -> None:
    varied = sorted(
        {f"{entry.name}.{v}" for entry in _loop_entries(spec, plants, by_name) for v in entry.vary}
    )
    if len(varied) > MAX_CORNER_PARAMETERS:
        raise InputError.at(
            spec.location,
            f"loop '{spec.name}' varies {len(varied)} parameters ({', '.join(varied)}): "
            f"2**{len(varied)} corners exceed the limit of 2**{MAX_CORNER_PARAMETERS} = "
            f"{2 ** MAX_CORNER_PARAMETERS}; use variants = {{ samples = N, seed = S }} in "
            "[project]",
        )


def _inputs(
    loops: list[LoopSpec], plants: dict, by_name: dict, manifest_file: str, manifest
) -> dict[str, frozenset[str]]:
    result: dict[str, frozenset[str]] = {}
    for spec in loops:
        files = {manifest_file}
        if manifest.ruleset_is_path:
            files.add(_normal(manifest.ruleset))
        current: LoopSpec | None = spec
        while current is not None:
            files.add(current.controller.file)
            entries = [plants[current.plant]]
            if current.sensor is not None:
                entries.append(plants[current.sensor])
            for entry in entries:
                files.add(entry.file)
                if entry.measured is not None:
                    files.add(entry.measured.file)
            current = by_name[current.inner] if current.inner is not None else None
        result[spec.name] = frozenset(files)
    return result


def _normal(rel_path: str) -> str:
    from pathlib import PurePosixPath

    parts: list[str] = []
    for part in PurePosixPath(rel_path.replace("\\", "/")).parts:
        if part == "..":
            if parts:
                parts.pop()
        elif part != ".":
            parts.append(part)
    return "/".join(parts)
