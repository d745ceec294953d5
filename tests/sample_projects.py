"""A Project built by hand on disk (invented data) for the selection and cache tests.

Files (relative to the manifest folder):

    ruleguard.toml           manifest: four loops
    policy/house.toml        user ruleset
    models/plants.toml       tilt_winding, tilt_mechanics
    models/sensors.toml      current_sense (sensor of tilt.current)
    models/measured.toml     pan_swept (measured_response) -> models/pan_sweep.csv
    models/heater.toml       housing_thermal
    firmware/tilt.toml       current, velocity
    firmware/pan.toml        velocity
    plc/heater.json          the heater's PI
    notes/readme.toml        used by no loop

Loops: tilt.current; tilt.velocity (cascade, inner tilt.current); pan.velocity
(measured plant); housing.heater.
"""

from __future__ import annotations

from pathlib import Path

from ruleguard.load.spec import (
    ControllerEntry,
    LoopSpec,
    MeasuredData,
    PlantEntry,
    Project,
    VariantPolicy,
)
from ruleguard.location import Location

FILES = {
    "ruleguard.toml": '[project]\nname = "demo"\nruleset = "policy/house.toml"\n',
    "policy/house.toml": '[ruleset]\nname = "house"\nbased_on = "motion"\n',
    "models/plants.toml": "[plants.tilt_winding]\n[plants.tilt_mechanics]\n",
    "models/sensors.toml": "[plants.current_sense]\n",
    "models/measured.toml": '[plants.pan_swept]\nfile = "models/pan_sweep.csv"\n',
    "models/pan_sweep.csv": "freq_hz,magnitude_db,phase_deg\n1.0,20.0,-90.0\n100.0,-20.0,-180.0\n",
    "models/heater.toml": "[plants.housing_thermal]\n",
    "firmware/tilt.toml": "[current]\nkp = 2.1\n[velocity]\nkp = 0.3\n",
    "firmware/pan.toml": "[velocity]\nkp = 0.5\n",
    "plc/heater.json": '{"loops": [{"pi": {"P": 3.0}}]}\n',
    "notes/readme.toml": "# not an input\n",
}


def _plant(name: str, file: str, measured: MeasuredData | None = None) -> PlantEntry:
    return PlantEntry(
        name=name,
        kind="measured_response" if measured else "transfer_function",
        fields={"file": measured.file} if measured else {},
        parameters={},
        vary={},
        location=Location(file, 1, 1, f"plants.{name}"),
        field_locations={},
        file=file,
        measured=measured,
    )


def _controller(file: str, path: str) -> ControllerEntry:
    return ControllerEntry(
        kind="pid", fields={"kp": 1.0}, filters=(), location=Location(file, 1, 1, path),
        field_locations={}, file=file, path=path,
    )


def _loop(name: str, plant: str, controller: ControllerEntry, *, sensor=None, inner=None,
          index: int = 0) -> LoopSpec:
    return LoopSpec(
        name=name, plant=plant, controller=controller, sample_rate_hz=1000.0,
        delay_samples=1.0, delay_s=0.0, sensor=sensor, inner=inner, tags=(),
        required_ccw=None, bounds={},
        location=Location("ruleguard.toml", 5 + index, 1, f"loops.{index}"),
        field_locations={},
    )


def write_files(root: Path) -> None:
    for rel, text in FILES.items():
        path = root / rel
        path.parent.mkdir(parents=True, exist_ok=True)
        path.write_text(text, encoding="utf-8")


def make_project(root: Path, *, with_inputs: bool = True, write: bool = True) -> Project:
    """The sample project at ``root``; ``with_inputs=False`` leaves
    ``Project.inputs`` empty (the selection then derives inputs from the specs)."""
    if write:
        write_files(root)
    sweep = MeasuredData((1.0, 100.0), (20.0, -20.0), (-90.0, -180.0), "models/pan_sweep.csv")
    plants = {
        "tilt_winding": _plant("tilt_winding", "models/plants.toml"),
        "tilt_mechanics": _plant("tilt_mechanics", "models/plants.toml"),
        "current_sense": _plant("current_sense", "models/sensors.toml"),
        "pan_swept": _plant("pan_swept", "models/measured.toml", sweep),
        "housing_thermal": _plant("housing_thermal", "models/heater.toml"),
    }
    loops = (
        _loop("tilt.current", "tilt_winding", _controller("firmware/tilt.toml", "current"),
              sensor="current_sense", index=0),
        _loop("tilt.velocity", "tilt_mechanics", _controller("firmware/tilt.toml", "velocity"),
              inner="tilt.current", index=1),
        _loop("pan.velocity", "pan_swept", _controller("firmware/pan.toml", "velocity"),
              index=2),
        _loop("housing.heater", "housing_thermal", _controller("plc/heater.json", "loops.0.pi"),
              index=3),
    )
    inputs = {}
    if with_inputs:
        common = {"ruleguard.toml", "policy/house.toml"}
        inputs = {
            "tilt.current": frozenset(common | {"models/plants.toml", "models/sensors.toml",
                                                "firmware/tilt.toml"}),
            "tilt.velocity": frozenset(common | {"models/plants.toml", "firmware/tilt.toml"}),
            "pan.velocity": frozenset(common | {"models/measured.toml", "models/pan_sweep.csv",
                                                "firmware/pan.toml"}),
            "housing.heater": frozenset(common | {"models/heater.toml", "plc/heater.json"}),
        }
    texts = {rel: (root / rel).read_text(encoding="utf-8")
             for rel in FILES if not rel.endswith(".csv") and (root / rel).exists()}
    return Project(
        root=str(root),
        manifest_file="ruleguard.toml",
        name="demo",
        ruleset="policy/house.toml",
        ruleset_location=Location("ruleguard.toml", 3, 1, "project.ruleset"),
        plant_files=("models/plants.toml", "models/sensors.toml", "models/measured.toml",
                     "models/heater.toml"),
        plants=plants,
        loops=loops,
        variants=VariantPolicy("corners"),
        texts=texts,
        inputs=inputs,
    )
