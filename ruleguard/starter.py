"""The starter files ``ruleguard init`` writes into a repository.

A manifest with one example loop (a motor winding's current loop run at
20 kHz), the plant registry entry it uses, the controller table it reads, and
a house ruleset based on the built-in ``baseline`` with commented examples of
thresholds, adjustments and waivers. Every file follows FORMATS.md sections 1-4.

:func:`write_starter` never overwrites anything: when any of the files (or a
symlink of that name) exists it raises :class:`StarterExists` naming them and
writes nothing.

The example loop passes the baseline ruleset: the PI zero cancels the
winding's pole (ki/kp = R/L), so L(s) = (kp/L)/s with a 500 Hz crossover, and
the 1.5 samples of hold and computation delay at 20 kHz cost
1.5 * 2*pi*500/20000 rad = 13.5 deg of its 90 deg phase margin.
"""

from __future__ import annotations

import os
import re
from pathlib import Path

MANIFEST = "ruleguard.toml"
PLANTS = "control/plants.toml"
CONTROLLER = "control/example_controller.toml"
RULESET = "control/house-rules.toml"

_MANIFEST_TEXT = """\
# ruleguard project manifest (written by `ruleguard init`).
# Describe each feedback loop of your firmware: which plant model it
# controls, where its controller parameters live, and how fast it runs.
# Relative paths are relative to this file's folder.

[project]
name = "{name}"
ruleset = "{ruleset}"                 # or a built-in: baseline, motion, process, power, flight
plants = ["{plants}"]
variants = "corners"                  # nominal plus every min/max corner of the `vary` ranges

[[loops]]
name = "axis.current"                 # unique; dots group loops (globs like "axis.*")
plant = "axis_winding"                # an entry of the plant registry
controller = {{ file = "{controller}", path = "current" }}
sample_rate_hz = 20000.0              # omit for an analog (continuous-time) loop
delay_samples = 1.0                   # computation delay, in samples
tags = ["example"]

# A firmware file with its own key names: `map` says where each field lives.
# [[loops]]
# name = "axis.speed"
# plant = "axis_mechanics"
# inner = "axis.current"
# controller = {{ file = "fw/params.json", path = "speed", kind = "pid", map = {{ kp = "P" }} }}
# sample_rate_hz = 2000.0
"""

_PLANTS_TEXT = """\
# Plant registry (written by `ruleguard init`): the models of what each loop
# controls. Poles and zeros are in rad/s; keys ending in _hz are in hertz.

[plants.axis_winding]                 # volts -> amperes: 1/(L s + R)
kind = "transfer_function"
numerator = [1.0]
denominator = ["L", "R"]              # descending powers of s
parameters = {{ L = 1.0e-3, R = 1.0 }}  # henry, ohm
vary = {{ R = {{ min = 0.8, max = 1.3 }} }}  # the winding warms up: check both ends

# Other kinds: zero_pole_gain, state_space, first_order_dead_time,
# second_order, integrator_dead_time, dc_motor, two_mass, measured_response.
"""

_CONTROLLER_TEXT = """\
# Example controller table (written by `ruleguard init`). Point the manifest
# at your firmware's own parameter file instead; keys ruleguard does not use
# are ignored.

[current]
kind = "pid"
form = "parallel"                     # kp + ki/s + kd s/(s/w_d + 1)
kp = 3.14                             # V/A: crossover near 500 Hz with L = 1 mH
ki = 3140.0                           # ki/kp = R/L puts the PI zero on the winding pole
kd = 0.0
discretization = "tustin"
numeric_format = "float32"
"""

_RULESET_TEXT = """\
# House ruleset (written by `ruleguard init`): the built-in baseline plus
# your own thresholds. `ruleguard rules` lists every rule and its parameters.

[ruleset]
name = "house"
based_on = "baseline"

# [rules."margin.phase"]
# min_deg = 45.0
# severity = "error"                  # error | warning | note | disabled

# [[adjustments]]
# loops = ["axis.*"]
# rules = {{ "margin.gain" = {{ min_db = 8.0 }} }}

# [[waivers]]
# rule = "margin.gain"
# loops = ["axis.current"]
# reason = "accepted at design review"   # required
# expires = 2027-06-30
"""

STARTER_FILES = (MANIFEST, PLANTS, CONTROLLER, RULESET)


class StarterExists(FileExistsError):
    """Some starter files exist already; nothing was written."""

    def __init__(self, folder: Path, existing: list[str]) -> None:
        self.folder = folder
        self.existing = existing
        names = ", ".join(existing)
        super().__init__(
            f"not writing the starter files into {folder}: {names} "
            f"{'exists' if len(existing) == 1 else 'exist'} already "
            "(ruleguard init never overwrites; move or remove them first)"
        )

    def __str__(self) -> str:
        return self.args[0]


def _project_name(folder: Path) -> str:
    name = re.sub(r"[^A-Za-z0-9._-]+", "-", folder.resolve().name).strip("-.")
    return name or "my-project"


def starter_texts(folder: Path) -> dict[str, str]:
    """Relative path -> text of every starter file for ``folder``."""
    return {
        MANIFEST: _MANIFEST_TEXT.format(
            name=_project_name(folder), ruleset=RULESET, plants=PLANTS, controller=CONTROLLER
        ),
        PLANTS: _PLANTS_TEXT.format(),
        CONTROLLER: _CONTROLLER_TEXT,
        RULESET: _RULESET_TEXT.format(),
    }


def write_starter(folder: str | os.PathLike) -> list[str]:
    """Write the starter manifest, registry, controller table and ruleset.

    Returns the written paths (``folder`` joined with each relative path).
    Raises :class:`StarterExists` (writing nothing) when any target exists,
    and :class:`NotADirectoryError` when ``folder`` is a file.
    """
    folder = Path(folder)
    if folder.exists() and not folder.is_dir():
        raise NotADirectoryError(f"{folder} is not a folder")
    texts = starter_texts(folder)
    existing = [rel for rel in texts if os.path.lexists(folder / rel)]
    if existing:
        raise StarterExists(folder, existing)
    written: list[str] = []
    for rel, text in texts.items():
        path = folder / rel
        path.parent.mkdir(parents=True, exist_ok=True)
        try:
            with open(path, "x", encoding="utf-8", newline="\n") as handle:
                handle.write(text)
        except FileExistsError as exc:  # appeared meanwhile: never overwrite
            raise StarterExists(folder, [rel]) from exc
        written.append(str(path))
    return written
