"""The project manifest (FORMATS.md section 1): project settings and loops.

:func:`read_manifest` reads and validates ``ruleguard.toml`` /
``ruleguard.json``; :func:`loop_spec` turns one ``[[loops]]`` item (with its
loaded controller) into a :class:`LoopSpec`. Cross-references between loops
and registry entries are checked in :mod:`ruleguard.load.project`.

Defaults: ``ruleset = "baseline"``, ``variants = "corners"``,
``delay_samples = 0``, ``delay_s = 0``, no sensor, no inner loop, no tags.
"""

from __future__ import annotations

import re
from collections.abc import Iterator
from contextlib import contextmanager
from pathlib import Path
from typing import Any

from ruleguard.errors import InputError
from ruleguard.frozen import record
from ruleguard.load.sources import Document, KeyPath, read_document
from ruleguard.load.spec import ControllerEntry, LoopSpec, VariantPolicy
from ruleguard.load.validation import validate
from ruleguard.location import Location

DEFAULT_RULESET = "baseline"


@record
class Manifest:
    """The validated manifest before its references are followed."""

    document: Document
    name: str
    ruleset: str
    ruleset_location: Location
    ruleset_is_path: bool
    plant_files: tuple[tuple[str, Location], ...]
    variants: VariantPolicy


def ruleset_is_path(ref: str) -> bool:
    """A ruleset reference that names a file rather than a built-in ruleset."""
    lowered = ref.lower()
    return "/" in ref or "\\" in ref or lowered.endswith((".toml", ".json"))


_LOOP_KEY = re.compile(r"^loops\.(\d+)(?:\.|$)")


def loop_label(document: Document, index: int) -> str:
    """How a message names ``[[loops]]`` item ``index``: ``loop 'NAME'``, or its
    position when it has no usable name (``loop 3 (no name)``, 1-based)."""
    loops = document.data.get("loops") if isinstance(document.data, dict) else None
    item = loops[index] if isinstance(loops, list) and 0 <= index < len(loops) else None
    name = item.get("name") if isinstance(item, dict) else None
    if isinstance(name, str) and name:
        return f"loop '{name}'"
    return f"loop {index + 1} (no name)"


@contextmanager
def naming_loops(document: Document) -> Iterator[None]:
    """Say which loop an input error under ``loops.N`` of the manifest is about.

    A key such as ``loops.3.plant`` makes the reader count ``[[loops]]``
    tables; every error located there (schema, manifest, cross-file checks)
    gets the loop's name in front of its message, keeping file, line, column
    and key. Messages that already name the loop are left as they are.
    """
    try:
        yield
    except InputError as error:
        match = _LOOP_KEY.match(error.key or "")
        if error.file != document.file or match is None:
            raise
        label = loop_label(document, int(match.group(1)))
        if label in error.message:
            raise
        raise InputError(
            error.file, error.line, error.column, error.key, f"{label}: {error.message}"
        ) from None


def read_manifest(root: str | Path, rel_path: str) -> Manifest:
    """Read and validate the manifest at ``root/rel_path``."""
    document = read_document(root, rel_path)
    with naming_loops(document):
        validate(document, "manifest")
    project = document.data["project"]
    ruleset = project.get("ruleset", DEFAULT_RULESET)
    ruleset_location = document.locate(("project", "ruleset") if "ruleset" in project
                                       else ("project",))
    plants = project.get("plants", [])
    if isinstance(plants, str):
        plant_files = ((plants, document.locate(("project", "plants"))),)
    else:
        plant_files = tuple(
            (item, document.locate(("project", "plants", index)))
            for index, item in enumerate(plants)
        )
    seen: dict[str, Location] = {}
    for file, location in plant_files:
        if file in seen:
            raise InputError.at(
                location,
                f"registry file '{file}' is listed twice (first at line {seen[file].line})",
            )
        seen[file] = location
    variants = project.get("variants", "corners")
    if isinstance(variants, dict):
        policy = VariantPolicy("samples", int(variants["samples"]), int(variants.get("seed", 0)))
    else:
        policy = VariantPolicy("corners")
    return Manifest(
        document=document,
        name=project["name"],
        ruleset=ruleset,
        ruleset_location=ruleset_location,
        ruleset_is_path=ruleset_is_path(ruleset),
        plant_files=plant_files,
        variants=policy,
    )


def loop_spec(document: Document, index: int, controller: ControllerEntry) -> LoopSpec:
    """One validated ``[[loops]]`` item -> :class:`LoopSpec`."""
    raw: dict[str, Any] = document.data["loops"][index]
    base: KeyPath = ("loops", index)
    field_locations: dict[str, Location] = {}
    for key, value in raw.items():
        field_locations[key] = document.locate(base + (key,))
        if isinstance(value, dict):
            for sub in value:
                field_locations[f"{key}.{sub}"] = document.locate(base + (key, sub))
    sample_rate = raw.get("sample_rate_hz")
    bounds = {
        name: (float(pair[0]), float(pair[1])) for name, pair in raw.get("bounds", {}).items()
    }
    return LoopSpec(
        name=raw["name"],
        plant=raw["plant"],
        controller=controller,
        sample_rate_hz=None if sample_rate is None else float(sample_rate),
        delay_samples=float(raw.get("delay_samples", 0.0)),
        delay_s=float(raw.get("delay_s", 0.0)),
        sensor=raw.get("sensor"),
        inner=raw.get("inner"),
        tags=tuple(raw.get("tags", ())),
        required_ccw=raw.get("required_ccw"),
        bounds=bounds,
        location=document.locate(base),
        field_locations=field_locations,
    )
