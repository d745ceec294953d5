"""Write small projects into a folder for loading tests (shared by the test_*_load files)."""

from __future__ import annotations

from pathlib import Path

MANIFEST = """\
[project]
name = "unit"
plants = ["plants.toml"]

[[loops]]
name = "axis.current"
plant = "winding"
controller = { file = "firmware.toml", path = "current" }
sample_rate_hz = 10000.0
delay_samples = 1.0
"""

PLANTS = """\
[plants.winding]
kind = "transfer_function"
numerator = [1.0]
denominator = ["L", "R"]
parameters = { L = 1.0e-3, R = 2.0 }
"""

FIRMWARE = """\
[current]
kind = "pid"
kp = 1.5
ki = 3000.0
"""


def write_project(folder: Path, files: dict[str, str | bytes] | None = None) -> Path:
    """Write the base project with ``files`` replacing or adding files; returns the manifest."""
    contents: dict[str, str | bytes] = {
        "ruleguard.toml": MANIFEST,
        "plants.toml": PLANTS,
        "firmware.toml": FIRMWARE,
    }
    contents.update(files or {})
    for rel, text in contents.items():
        path = folder / rel
        path.parent.mkdir(parents=True, exist_ok=True)
        if isinstance(text, bytes):
            path.write_bytes(text)
        else:
            path.write_text(text, encoding="utf-8")
    return folder / ("ruleguard.json" if "ruleguard.json" in contents else "ruleguard.toml")
