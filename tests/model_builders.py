"""Hand-built loaded records for the models tests (what the loader would produce)."""

from __future__ import annotations

from ruleguard.load.spec import (
    ControllerEntry,
    FilterEntry,
    LoopSpec,
    MeasuredData,
    PlantEntry,
    Project,
    VariantPolicy,
    VaryRange,
)
from ruleguard.location import Location

HERE = Location("models/plants.toml", 1, 1, "plants")


def vary(name: str, lo: float, hi: float, scale: str = "linear") -> VaryRange:
    return VaryRange(name, lo, hi, scale, Location("models/plants.toml", 3, 1, f"vary.{name}"))


def plant(name: str, kind: str, parameters=None, varied=(), measured: MeasuredData | None = None,
          **fields) -> PlantEntry:
    return PlantEntry(
        name=name, kind=kind, fields=fields, parameters=dict(parameters or {}),
        vary={v.name: v for v in varied},
        location=Location("models/plants.toml", 1, 1, f"plants.{name}"),
        field_locations={k: Location("models/plants.toml", 2, 1, f"plants.{name}.{k}")
                         for k in fields},
        file="models/plants.toml", measured=measured,
    )


def filt(kind: str, index: int = 0, **fields) -> FilterEntry:
    return FilterEntry(kind, fields, Location("fw.toml", 10 + index, 1, f"c.filters.{index}"),
                       {k: Location("fw.toml", 10 + index, 3, f"c.filters.{index}.{k}")
                        for k in fields}, index)


def controller(kind: str, filters=(), path: str = "c", **fields) -> ControllerEntry:
    return ControllerEntry(kind, fields, tuple(filters), Location("fw.toml", 1, 1, path),
                           {k: Location("fw.toml", 2, 1, f"{path}.{k}") for k in fields},
                           "fw.toml", path)


def loop(name: str, plant_name: str, ctrl: ControllerEntry, *, rate: float | None = None,
         delay_samples: float = 0.0, delay_s: float = 0.0, sensor: str | None = None,
         inner: str | None = None) -> LoopSpec:
    return LoopSpec(
        name=name, plant=plant_name, controller=ctrl, sample_rate_hz=rate,
        delay_samples=delay_samples, delay_s=delay_s, sensor=sensor, inner=inner, tags=(),
        required_ccw=None, bounds={}, location=Location("ruleguard.toml", 5, 1, "loops.0"),
        field_locations={"inner": Location("ruleguard.toml", 7, 1, "loops.0.inner")},
    )


def project(plants, loops, policy: VariantPolicy | None = None) -> Project:
    return Project(
        root="/nonexistent", manifest_file="ruleguard.toml", name="test", ruleset="baseline",
        ruleset_location=Location("ruleguard.toml", 2, 1, "project.ruleset"),
        plant_files=("models/plants.toml",), plants={p.name: p for p in plants},
        loops=tuple(loops), variants=policy or VariantPolicy("corners"),
    )
