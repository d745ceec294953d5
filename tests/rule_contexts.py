"""Hand-built loop contexts for the rule-family tests (H4b's families).

Builds :class:`LoopContext` records from factored blocks the way
:mod:`ruleguard.models.assemble` lays them out (controller and filters as
BlockModels, the plant path as one block; in a sampled loop the plant's
``discrete`` is the ZOH equivalent of plant x sensor x delay), so each test
states its loop in a few lines. Analysis results are given explicitly
(numbers derived in the test) unless a test computes them.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from pathlib import Path

import numpy as np

from ruleguard.analysis.loop import BlockModel, LoopModel
from ruleguard.analysis.openloop import OpenLoop
from ruleguard.analysis.results import Crossover, LoopAnalysis, Margins, Stability
from ruleguard.load.spec import ControllerEntry, FilterEntry, LoopSpec, PlantEntry, Project
from ruleguard.location import Location
from ruleguard.models.lti import Factored
from ruleguard.rules.base import Evaluation, LoopContext

FIRMWARE = "firmware/axis.toml"
MANIFEST = "ruleguard.toml"
PLANTS = "models/plants.toml"
#: the registry entry of the default plant, ``mechanics``
PLANT_LOCATION = Location(PLANTS, 1, 1, "plants.mechanics")


@dataclass(frozen=True)
class Variant:
    """A variant as the families module makes them: an id and parameter values."""

    id: str
    parameters: dict = field(default_factory=dict)


def controller_entry(kind="pid", fields=None, filters=(), path="velocity") -> ControllerEntry:
    fields = dict(fields or {})
    locs = {name: Location(FIRMWARE, 3 + i, 1, f"{path}.{name}") for i, name in enumerate(fields)}
    entries = []
    line = 20
    for i, (fkind, ffields) in enumerate(filters):
        ffields = dict(ffields)
        flocs = {
            name: Location(FIRMWARE, line + 1 + j, 1, f"{path}.filters.{i}.{name}")
            for j, name in enumerate(ffields)
        }
        entries.append(
            FilterEntry(
                kind=fkind,
                fields=ffields,
                location=Location(FIRMWARE, line, 1, f"{path}.filters.{i}"),
                field_locations=flocs,
                index=i,
            )
        )
        line += 10
    return ControllerEntry(
        kind=kind,
        fields=fields,
        filters=tuple(entries),
        location=Location(FIRMWARE, 2, 1, path),
        field_locations=locs,
        file=FIRMWARE,
        path=path,
    )


def loop_spec(
    controller: ControllerEntry,
    *,
    name="axis.velocity",
    sample_rate_hz=None,
    inner=None,
    bounds=None,
    plant="mechanics",
) -> LoopSpec:
    bounds = dict(bounds or {})
    floc = {
        "sample_rate_hz": Location(MANIFEST, 12, 1, "loops.0.sample_rate_hz"),
        "inner": Location(MANIFEST, 13, 1, "loops.0.inner"),
        "bounds": Location(MANIFEST, 14, 1, "loops.0.bounds"),
    }
    for name_ in bounds:
        floc[f"bounds.{name_}"] = Location(MANIFEST, 14, 12, f"loops.0.bounds.{name_}")
    return LoopSpec(
        name=name,
        plant=plant,
        controller=controller,
        sample_rate_hz=sample_rate_hz,
        delay_samples=0.0,
        delay_s=0.0,
        sensor=None,
        inner=inner,
        tags=(),
        required_ccw=None,
        bounds=bounds,
        location=Location(MANIFEST, 10, 1, "loops.0"),
        field_locations=floc,
    )


def project(plant="mechanics") -> Project:
    entry = PlantEntry(
        name=plant,
        kind="zero_pole_gain",
        fields={},
        parameters={},
        vary={},
        location=Location(PLANTS, 1, 1, f"plants.{plant}"),
        field_locations={},
        file=PLANTS,
    )
    return Project(
        root="/nonexistent",
        manifest_file=MANIFEST,
        name="test",
        ruleset="baseline",
        ruleset_location=Location(MANIFEST, 2, 1, "project.ruleset"),
        plant_files=(PLANTS,),
        plants={plant: entry},
        loops=(),
        variants=None,
    )


def block(role, label, kind, continuous=None, discrete=None, method=None, location=None):
    return BlockModel(
        role=role,
        label=label,
        kind=kind,
        continuous=continuous,
        discrete=discrete,
        method=method,
        location=location or Location(""),
    )


def controller_block(spec: LoopSpec, continuous=None, discrete=None, method=None) -> BlockModel:
    """The loop's controller as a block, labelled and located as the assembler does."""
    controller = spec.controller
    return block(
        "controller",
        f"{controller.path} ({controller.kind})",
        controller.kind,
        continuous,
        discrete,
        method,
        controller.location,
    )


def model(
    spec: LoopSpec,
    controller: BlockModel,
    plant: BlockModel,
    filters=(),
    *,
    factors=(),
    inner=None,
) -> LoopModel:
    """L = C F1..Fn G in the loop's domain (no cancellation, factors appended)."""
    discrete = spec.sample_rate_hz is not None
    pick = (lambda b: b.discrete) if discrete else (lambda b: b.continuous)
    path = pick(controller)
    for f in filters:
        path = path * pick(f)
    plant_factored = pick(plant)
    rational = path if plant_factored is None else path * plant_factored
    return LoopModel(
        name=spec.name,
        sample_rate_hz=spec.sample_rate_hz,
        open_loop=OpenLoop(rational, tuple(factors)),
        controller=controller,
        filters=tuple(filters),
        plant=plant,
        sensor=None,
        controller_path=path,
        total_delay_s=0.0,
        discretization={},
        inner=inner,
    )


def analysis(
    *,
    stable=True,
    crossovers_hz=(),
    bandwidth_hz=None,
    phase_margins_deg=None,
    gain_margin_db=None,
    delay_margin_s=None,
) -> LoopAnalysis:
    pms = list(phase_margins_deg or [60.0] * len(crossovers_hz))
    crossings = tuple(Crossover(hz, pm) for hz, pm in zip(crossovers_hz, pms, strict=True))
    # FORMATS.md section 5: the crossover closest to -1 (smallest |PM|), sign kept
    worst = min(crossings, key=lambda c: abs(c.phase_margin_deg)) if crossings else None
    return LoopAnalysis(
        stability=Stability(stable, 0, 0, 0 if stable else 1),
        margins=Margins(
            gain_margin_db=gain_margin_db,
            gain_margin_hz=None,
            lower_gain_margin_db=None,
            lower_gain_margin_hz=None,
            stable_gain_ranges_db=((None, gain_margin_db),),
            phase_margin_deg=worst.phase_margin_deg if worst else None,
            crossover_hz=worst.hz if worst else None,
            crossovers=crossings,
            delay_margin_s=delay_margin_s,
            delay_margin_samples=None,
            sensitivity_peak_db=None,
            sensitivity_peak_hz=None,
            complementary_peak_db=None,
            complementary_peak_hz=None,
            disk_margin=None,
            bandwidth_hz=bandwidth_hz,
        ),
    )


def context(spec, evaluations, *, inner=None, not_analysed_reason=None, proj=None) -> LoopContext:
    return LoopContext(
        spec=spec,
        project=proj or project(spec.plant),
        evaluations=tuple(evaluations),
        not_analysed_reason=not_analysed_reason,
        inner=inner,
    )


def evaluation(variant_id, loop_model, loop_analysis) -> Evaluation:
    return Evaluation(Variant(variant_id), loop_model, loop_analysis)


def factored(zeros=(), poles=(), gain=1.0, h=None, delay_s=0.0) -> Factored:
    return Factored(np.asarray(zeros, complex), np.asarray(poles, complex), gain, delay_s, h)


def pair(freq_hz, damping):
    """Roots of s^2 + 2 zeta w s + w^2, w = 2 pi freq_hz (FORMATS.md {freq_hz, damping})."""
    w = 2 * np.pi * freq_hz
    re = -damping * w
    im = w * np.sqrt(1 - damping**2)
    return [complex(re, im), complex(re, -im)]


def loop_evaluation(
    spec, loop_factored: Factored, loop_analysis, variant_id="nominal"
) -> Evaluation:
    """An evaluation whose whole open loop sits in the controller block (plant = 1)."""
    discrete = loop_factored.sample_time_s is not None
    ctrl = controller_block(
        spec,
        continuous=None if discrete else loop_factored,
        discrete=loop_factored if discrete else None,
        method="given" if discrete else None,
    )
    unity = Factored.unity(loop_factored.sample_time_s)
    plant = block(
        "plant",
        "mechanics (zero_pole_gain)",
        "zero_pole_gain",
        continuous=None if discrete else unity,
        discrete=unity if discrete else None,
        location=PLANT_LOCATION,
    )
    return evaluation(variant_id, model(spec, ctrl, plant), loop_analysis)


def velocity_manifest(name: str = "e2e", ruleset: str = "baseline", loop_lines: str = "") -> str:
    """A manifest with the one loop ``axis.velocity`` (plant ``mechanics``, controller
    ``firmware/axis.toml`` table ``velocity``); ``loop_lines`` end the loop entry."""
    return f"""[project]
name = "{name}"
ruleset = "{ruleset}"
plants = ["models/plants.toml"]

[[loops]]
name = "axis.velocity"
plant = "mechanics"
controller = {{ file = "firmware/axis.toml", path = "velocity" }}
{loop_lines}"""


def write_files(root: Path, files: dict[str, str]) -> Path:
    """Write ``files`` (relative path -> text) below ``root``; returns the manifest path."""
    for rel, text in files.items():
        (root / rel).parent.mkdir(parents=True, exist_ok=True)
        (root / rel).write_text(text)
    return root / MANIFEST
