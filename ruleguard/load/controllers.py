"""Controller tables in firmware files (FORMATS.md section 3) -> :class:`ControllerEntry`.

A binding ``controller = { file, path, kind, map }`` names a firmware file,
the dotted key path of the controller table inside it (array items as
``.0``; an empty or absent path means the whole file), optionally the
controller kind, and a ``map`` from ruleguard's canonical field names to the
firmware's own keys: ``kp = "P"`` or ``ki = { key = "I_per_tick", scale =
1000.0 }`` (field = raw value x scale). A mapped key may itself be a dotted
path inside the table (``kp = "gains.P"``).

The canonical table (mapped fields, plus the table's keys that carry
canonical names) is validated against the ``controller`` schema. Keys
ruleguard does not use are ignored, a required key that is missing is an
error, and every error points at the firmware's own key (or at the
manifest's binding when the binding is what is wrong).
"""

from __future__ import annotations

import math
import re
from collections.abc import Mapping
from pathlib import Path
from typing import Any

from ruleguard.errors import InputError
from ruleguard.load.schedules import (
    SCHEDULABLE_FIELDS,
    key_and_scale,
    make_schedule,
    read_arrays,
    read_rows,
    row_fields,
)
from ruleguard.load.sources import Document, KeyPath, Unreadable, format_key, read_firmware
from ruleguard.load.spec import ControllerEntry, FilterEntry
from ruleguard.load.validation import number_problem, show_value, suggestion, validate
from ruleguard.location import Location

#: Canonical fields of each controller kind.
CONTROLLER_FIELDS: Mapping[str, tuple[str, ...]] = {
    "pid": (
        "form",
        "kp",
        "ki",
        "kd",
        "derivative_filter_hz",
        "gain",
        "ti_s",
        "td_s",
        "n",
    ),
    "lead_lag": ("gain", "zero_hz", "pole_hz"),
    "transfer_function": ("numerator", "denominator", "domain"),
}
#: Fields every controller and filter may carry.
COMMON_FIELDS = ("discretization", "prewarp_hz")
#: Canonical fields of each filter kind.
FILTER_FIELDS: Mapping[str, tuple[str, ...]] = {
    "lowpass1": ("cutoff_hz",),
    "lowpass2": ("cutoff_hz", "damping"),
    "notch": ("center_hz", "width_hz", "depth_db"),
    "lead_lag": ("gain", "zero_hz", "pole_hz"),
    "biquad": ("b", "a"),
    "transfer_function": ("numerator", "denominator", "domain"),
}
_STRING_FIELDS = {"form", "domain", "discretization", "numeric_format", "kind"}
_NUMERIC_FORMAT = re.compile(r"^q(\d+)\.(\d+)$")


def resolve_path(
    data: Any,
    path: str,
    document: Document,
    origin: Location,
    what: str,
    base: KeyPath = (),
) -> tuple[Any, KeyPath]:
    """The value at a dotted ``path`` (array items as ``.0``) and its key path.

    ``data`` stands at ``base`` in ``document``; the returned key path is
    relative to ``data``. Errors are raised at ``origin`` (the manifest key
    that named the path) and say where in the document the walk stopped.
    """
    node = data
    walked: KeyPath = base
    if path.strip() == "":
        return node, walked
    for part in path.split("."):
        if isinstance(node, Unreadable):
            raise node.error()
        if isinstance(node, dict):
            if part not in node:
                keys = [k for k in node if isinstance(k, str)]
                hint = suggestion(part, keys)
                place = f"table '{format_key(walked)}'" if walked else "the top level"
                line = document.locate(walked).line if walked else None
                at_line = f" (line {line})" if line else ""
                raise InputError.at(
                    origin,
                    f"{what}: {document.file} has no key '{part}' in {place}{at_line}{hint}",
                )
            node = node[part]
            walked = walked + (part,)
        elif isinstance(node, list):
            if not part.isdigit() or int(part) >= len(node):
                raise InputError.at(
                    origin,
                    f"{what}: '{format_key(walked)}' in {document.file} is an array of "
                    f"{len(node)} item(s); '{part}' is not an index in it (use .0, .1, ...)",
                )
            node = node[int(part)]
            walked = walked + (int(part),)
        else:
            raise InputError.at(
                origin,
                f"{what}: '{format_key(walked)}' in {document.file} is a value, not a table; "
                f"cannot go on to '{part}'",
            )
    if isinstance(node, Unreadable):
        raise node.error()
    return node, walked[len(base):]


def _document_key(binding: Mapping[str, Any]) -> str:
    """Cache key of a firmware document: its file, and how the binding reads it."""
    file = binding["file"]
    if binding.get("format") is None and binding.get("macros") is None:
        return file
    macros = sorted((binding.get("macros") or {}).items())
    return f"{file}\x00{binding.get('format')}\x00{macros}"


#: Firmware formats whose input errors carry a source excerpt.
EXCERPT_FORMATS = ("c", "yaml", "keyvalue")


def load_controller(
    root: str | Path,
    binding: Mapping[str, Any],
    binding_path: KeyPath,
    manifest: Document,
    documents: dict[str, Document],
    texts: dict[str, str],
) -> ControllerEntry:
    """Read and check the controller a manifest binding names.

    Parameters
    ----------
    root:
        Project folder.
    binding:
        The validated ``controller = {...}`` table of a loop.
    binding_path:
        Its key path in the manifest (``("loops", 0, "controller")``).
    manifest:
        The manifest document (for locations of binding errors).
    documents:
        Cache of firmware documents already read, by the name as written.
    texts:
        Collects the text of each file read.

    Errors located in a C, YAML or key-value file carry an excerpt of the
    offending line (:attr:`InputError.excerpt`).
    """
    try:
        return _load_controller(root, binding, binding_path, manifest, documents, texts)
    except InputError as exc:
        document = documents.get(_document_key(binding))
        if document is not None and document.fmt in EXCERPT_FORMATS and exc.file == document.file:
            exc.with_excerpt(document.text)
        raise


def _load_controller(
    root: str | Path,
    binding: Mapping[str, Any],
    binding_path: KeyPath,
    manifest: Document,
    documents: dict[str, Document],
    texts: dict[str, str],
) -> ControllerEntry:
    def manifest_at(*keys: str | int) -> Location:
        return manifest.locate(binding_path + keys)

    file = binding["file"]
    cache_key = _document_key(binding)
    document = documents.get(cache_key)
    if document is None:
        document = read_firmware(
            root, file, manifest_at("file"), binding.get("format"), binding.get("macros")
        )
        documents[cache_key] = document
        texts[document.file] = document.text
    path = binding.get("path", "")
    table, table_path = resolve_path(
        document.data, path, document, manifest_at("path"), "controller path"
    )
    if not isinstance(table, dict):
        raise InputError.at(
            manifest_at("path"),
            f"controller path '{path}' in {document.file} holds a "
            f"{'list' if isinstance(table, list) else 'value'}, not a table",
        )

    # kind: in the table or in the binding
    kind_path: KeyPath | None = None
    table_kind = table.get("kind")
    kind = binding.get("kind")
    if kind is not None and table_kind is not None and table_kind != kind:
        raise InputError.at(
            manifest_at("kind"),
            f"the binding says kind = '{kind}' but {document.file} says kind = "
            f"'{table_kind}' (line {document.locate(table_path + ('kind',)).line}); "
            "give it in one place or make them agree",
        )
    if kind is None:
        if table_kind is None:
            raise InputError.at(
                document.locate(table_path),
                f"the controller table '{path}' has no 'kind' and the manifest binding gives "
                "none; add kind = \"pid\" (or lead_lag, transfer_function) to either",
            )
        kind = table_kind
        kind_path = table_path + ("kind",)
        if not isinstance(kind, str) or kind not in CONTROLLER_FIELDS:
            hint = suggestion(kind, CONTROLLER_FIELDS) if isinstance(kind, str) else ""
            raise document.error(
                kind_path,
                f"{show_value(kind)} is not a controller kind; expected one of "
                f"{', '.join(repr(k) for k in CONTROLLER_FIELDS)}{hint}",
            )

    # canonical table
    canonical: dict[str, Any] = {"kind": kind}
    sources: dict[str, KeyPath] = {}
    known = CONTROLLER_FIELDS.get(kind, ()) + COMMON_FIELDS + ("numeric_format", "filters")
    mapping = binding.get("map", {})
    schedule_spec = binding.get("schedule")
    row_scheduled: tuple[str, ...] = ()
    rows_value: Any = None
    rows_path: KeyPath = ()
    if schedule_spec is not None:
        if not SCHEDULABLE_FIELDS.get(kind):
            raise InputError.at(
                manifest_at("schedule"),
                f"a {kind} controller cannot be scheduled: only the numeric fields of pid and "
                "lead_lag controllers can be tabulated",
            )
        if "rows" in schedule_spec:
            rows_value, rel = resolve_path(table, schedule_spec["rows"], document,
                                           manifest_at("schedule", "rows"), "schedule rows",
                                           base=table_path)
            rows_path = table_path + rel
            first = rows_value[0] if isinstance(rows_value, list) and rows_value else None
            row_scheduled = row_fields(kind, first, mapping)
            if isinstance(first, dict) and not row_scheduled:
                raise document.error(
                    rows_path + (0,),
                    f"the first schedule row gives none of the fields a {kind} controller can "
                    f"schedule ({', '.join(SCHEDULABLE_FIELDS[kind])})",
                )
    for field_name, spec in mapping.items():
        where = manifest_at("map", field_name)
        if field_name not in known:
            raise InputError.at(
                where,
                f"map names '{field_name}', which is not a field of a {kind} controller"
                f"{suggestion(field_name, known)} (fields: {', '.join(known)})",
            )
        if field_name in row_scheduled:
            continue  # the rows give it (read with the same map below)
        key, scale = (spec, None) if isinstance(spec, str) else (spec["key"], spec.get("scale"))
        value, rel = resolve_path(
            table, key, document, where, f"map {field_name}", base=table_path
        )
        full = table_path + rel
        if (scale is not None and schedule_spec is not None and "breakpoints" in schedule_spec
                and isinstance(value, list)):
            canonical[field_name] = value  # a scheduled array: scaled element by element
            sources[field_name] = full
            continue
        if scale is not None:
            if field_name in _STRING_FIELDS or field_name == "filters":
                raise InputError.at(where, f"'{field_name}' is not a number; it cannot be scaled")
            if isinstance(value, bool) or not isinstance(value, (int, float)):
                raise document.error(
                    full,
                    f"expected a number at '{format_key(full)}' (mapped to {field_name}), found "
                    f"{value!r}",
                )
            _check_finite(document, value, full)
            value = float(value) * float(scale)
            if not math.isfinite(value):
                raise document.error(
                    full, f"{format_key(full)} x scale {scale:g} is not a finite number"
                )
        canonical[field_name] = value
        sources[field_name] = full
    for field_name in known:
        if field_name in row_scheduled:
            continue
        if field_name not in canonical and field_name in table:
            canonical[field_name] = table[field_name]
            sources[field_name] = table_path + (field_name,)
    for field_name, full in sources.items():
        _check_finite(document, canonical[field_name], full)
    schedule = None
    if schedule_spec is not None:
        schedule = _read_schedule(schedule_spec, manifest_at, document, kind, table, table_path,
                                  canonical, sources, mapping, row_scheduled, rows_value,
                                  rows_path)

    def locate(error_path: KeyPath) -> Location:
        if not error_path:
            return document.locate(table_path)
        head, rest = error_path[0], tuple(error_path[1:])
        if head == "kind":
            return document.locate(kind_path) if kind_path else manifest_at("kind")
        if head in sources:
            location = document.locate(sources[head] + rest)
            return location
        return document.locate(table_path)

    validate(document, "controller", instance=canonical, locate=locate)
    if schedule is not None:  # every breakpoint must make a valid controller
        for point in schedule.points[1:]:
            def point_locate(error_path: KeyPath, point=point) -> Location:
                if error_path and error_path[0] in point.field_locations:
                    return point.field_locations[error_path[0]]
                return locate(error_path)

            validate(document, "controller", instance={**canonical, **point.fields},
                     locate=point_locate)

    fields: dict[str, Any] = {}
    field_locations: dict[str, Location] = {
        "kind": locate(("kind",)),
    }
    for field_name, value in canonical.items():
        if field_name in ("kind", "filters"):
            continue
        fields[field_name] = _canonical_value(value)
        field_locations[field_name] = document.locate(sources[field_name])
    _defaults(kind, fields)
    filters = tuple(
        _filter(document, sources["filters"] + (index,), item, index)
        for index, item in enumerate(canonical.get("filters", []))
    )
    entry = ControllerEntry(
        kind=kind,
        fields=fields,
        filters=filters,
        location=document.locate(table_path),
        field_locations=field_locations,
        file=document.file,
        path=path,
        schedule=schedule,
    )
    _check_controller(entry)
    return entry


def _read_schedule(spec, manifest_at, document, kind, table, table_path, canonical, sources,
                   mapping, row_scheduled, rows_value, rows_path):
    """The binding's schedule; puts breakpoint 1's values into ``canonical``."""
    if "rows" in spec:
        points = read_rows(document, rows_value, rows_path, spec["variable"], row_scheduled,
                           mapping, manifest_at("schedule", "rows"))
        fields = row_scheduled
        location = document.locate(rows_path)
        form = "rows"
    else:
        where = manifest_at("schedule", "breakpoints")
        breakpoints, rel = resolve_path(table, spec["breakpoints"], document, where,
                                        "schedule breakpoints", base=table_path)
        breakpoints_path = table_path + rel
        arrays = {}
        for field_name in SCHEDULABLE_FIELDS[kind]:
            value = canonical.get(field_name)
            if isinstance(value, list):
                scale = key_and_scale(field_name, mapping)[1] if field_name in mapping else None
                arrays[field_name] = (value, sources[field_name], scale)
        points = read_arrays(document, breakpoints, breakpoints_path, arrays,
                             spec["variable"], where)
        fields = tuple(arrays)
        location = document.locate(breakpoints_path)
        form = "arrays"
    parameter_key = "plant_parameter" if "plant_parameter" in spec else "variable"
    schedule = make_schedule(spec, form, fields, points, location, manifest_at("schedule"),
                             manifest_at("schedule", parameter_key))
    first = schedule.points[0]
    for field_name in fields:
        canonical[field_name] = first.fields[field_name]
        if form == "rows":
            key = key_and_scale(field_name, mapping)[0]
            sources[field_name] = rows_path + (0,) + tuple(
                int(p) if p.isdigit() else p for p in key.split("."))
        else:
            sources[field_name] = sources[field_name] + (0,)
    return schedule


def _check_finite(document: Document, value: Any, path: KeyPath) -> None:
    if isinstance(value, Unreadable):
        raise value.error()
    problem = number_problem(value)
    if problem:
        raise document.error(path, problem)
    if isinstance(value, dict):
        for key, item in value.items():
            _check_finite(document, item, path + (key,))
    elif isinstance(value, list):
        for index, item in enumerate(value):
            _check_finite(document, item, path + (index,))


def _canonical_value(value: Any) -> Any:
    if isinstance(value, bool):
        return value
    if isinstance(value, (int, float)):
        return float(value)
    if isinstance(value, list):
        return [_canonical_value(v) for v in value]
    return value


def _defaults(kind: str, fields: dict[str, Any]) -> None:
    if kind == "pid":
        fields.setdefault("form", "parallel")
        if fields["form"] == "parallel":
            fields.setdefault("ki", 0.0)
            fields.setdefault("kd", 0.0)
        else:
            fields.setdefault("n", 10.0)
    elif kind == "transfer_function":
        fields.setdefault("domain", "s")


def _filter(document: Document, path: KeyPath, raw: Mapping[str, Any], index: int) -> FilterEntry:
    kind = raw["kind"]
    fields: dict[str, Any] = {}
    field_locations: dict[str, Location] = {"kind": document.locate(path + ("kind",))}
    for key in FILTER_FIELDS[kind] + COMMON_FIELDS:
        if key in raw:
            fields[key] = _canonical_value(raw[key])
            field_locations[key] = document.locate(path + (key,))
            if isinstance(raw[key], list):
                for i in range(len(raw[key])):
                    field_locations[f"{key}.{i}"] = document.locate(path + (key, i))
    if kind == "lead_lag":
        fields.setdefault("gain", 1.0)
    if kind == "transfer_function":
        fields.setdefault("domain", "s")
    if kind == "biquad":
        a0 = fields["a"][0]
        if a0 == 0:
            raise InputError.at(
                field_locations["a.0"],
                "a[0] of a biquad is 0; it must be non-zero (it is normalised to 1)",
            )
        fields["b"] = [v / a0 for v in fields["b"]]
        fields["a"] = [v / a0 for v in fields["a"]]
    entry = FilterEntry(
        kind=kind,
        fields=fields,
        location=document.locate(path),
        field_locations=field_locations,
        index=index,
    )
    if kind == "transfer_function":
        _check_polynomials(fields, field_locations, entry.location)
    return entry


def _strip(coefficients: list[float]) -> list[float]:
    for index, value in enumerate(coefficients):
        if value != 0:
            return coefficients[index:]
    return []


def _check_polynomials(
    fields: Mapping[str, Any], locations: Mapping[str, Location], fallback: Location
) -> None:
    num = _strip(list(fields["numerator"]))
    den = _strip(list(fields["denominator"]))
    if not den:
        raise InputError.at(locations.get("denominator", fallback), "the denominator is all zeros")
    if fields.get("domain", "s") == "z" and len(num) > len(den):
        raise InputError.at(
            locations.get("numerator", fallback),
            f"a z-domain block with numerator degree {len(num) - 1} above denominator degree "
            f"{len(den) - 1} is not causal (it would need future samples)",
        )


def _check_controller(entry: ControllerEntry) -> None:
    fmt = entry.fields.get("numeric_format")
    if isinstance(fmt, str):
        hit = _NUMERIC_FORMAT.match(fmt)
        if hit:
            integer_bits, fraction_bits = int(hit.group(1)), int(hit.group(2))
            if integer_bits < 1 or integer_bits + fraction_bits > 64:
                raise InputError.at(
                    entry.field_locations["numeric_format"],
                    f"numeric_format '{fmt}': q<m>.<n> needs m >= 1 integer bits (sign included)"
                    f" and m + n <= 64, found m = {integer_bits}, n = {fraction_bits}",
                )
    if entry.kind == "transfer_function":
        _check_polynomials(entry.fields, entry.field_locations, entry.location)


def uses_z_domain(entry: ControllerEntry) -> list[tuple[str, Location]]:
    """Blocks of the controller that are already discrete (need a sample rate)."""
    found: list[tuple[str, Location]] = []
    if entry.kind == "transfer_function" and entry.fields.get("domain") == "z":
        found.append(("the controller (domain = \"z\")", entry.field_locations.get(
            "domain", entry.location)))
    for item in entry.filters:
        if item.kind == "biquad":
            found.append((f"filter {item.index} (biquad)", item.location))
        elif item.kind == "transfer_function" and item.fields.get("domain") == "z":
            found.append((f"filter {item.index} (domain = \"z\")",
                          item.field_locations.get("domain", item.location)))
    return found
