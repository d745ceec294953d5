"""The code base passes ruff with the project's configuration (pyproject.toml)."""

import shutil
import subprocess
from pathlib import Path

import pytest

ROOT = Path(__file__).resolve().parents[1]


@pytest.mark.skipif(shutil.which("ruff") is None, reason="ruff is not installed (test extra)")
def test_ruff_passes():
    result = subprocess.run(
        ["ruff", "check", "ruleguard", "tests", "benchmarks"],
        cwd=ROOT, capture_output=True, text=True,
    )
    assert result.returncode == 0, result.stdout + result.stderr
