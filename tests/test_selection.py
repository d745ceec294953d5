"""Changed-files mode selects exactly the loops whose inputs changed."""

from __future__ import annotations

import os

import pytest
from sample_projects import make_project

from ruleguard.selection import loop_input_files, loops_for_files, ruleset_file

ALL = {"tilt.current", "tilt.velocity", "pan.velocity", "housing.heater"}


@pytest.fixture(params=[True, False], ids=["loader-inputs", "spec-derived"])
def project(request, tmp_path):
    return make_project(tmp_path / "repo", with_inputs=request.param)


@pytest.mark.parametrize(
    ("changed", "expected"),
    [
        # a controller file: both tilt loops use it
        (["firmware/tilt.toml"], {"tilt.current", "tilt.velocity"}),
        # the sensor registry: tilt.current, and the cascade above it
        (["models/sensors.toml"], {"tilt.current", "tilt.velocity"}),
        # the measured data CSV and its registry file: only pan.velocity
        (["models/pan_sweep.csv"], {"pan.velocity"}),
        (["models/measured.toml"], {"pan.velocity"}),
        (["plc/heater.json"], {"housing.heater"}),
        (["models/heater.toml", "firmware/pan.toml"], {"housing.heater", "pan.velocity"}),
        # manifest and ruleset: every loop
        (["ruleguard.toml"], ALL),
        (["policy/house.toml"], ALL),
        # files no loop uses, or outside the project
        (["notes/readme.toml"], set()),
        (["../elsewhere/firmware/tilt.toml"], set()),
        ([], set()),
    ],
)
def test_selects_exactly_the_affected_loops(project, changed, expected):
    assert loops_for_files(project, changed, project.root) == expected


def test_paths_relative_to_another_cwd(project, tmp_path):
    # a pre-commit hook runs at the repository root, the manifest may sit below it
    repo_root = os.path.dirname(project.root)
    assert loops_for_files(project, ["repo/firmware/pan.toml"], repo_root) == {"pan.velocity"}
    assert loops_for_files(project, ["./repo/models/../plc/heater.json"], repo_root) == {
        "housing.heater"}
    absolute = os.path.join(project.root, "plc", "heater.json")
    assert loops_for_files(project, [absolute], "/") == {"housing.heater"}


def test_symlinked_manifest_folder(project, tmp_path):
    link = tmp_path / "link"
    link.symlink_to(project.root, target_is_directory=True)
    assert loops_for_files(project, ["link/firmware/pan.toml"], str(tmp_path)) == {
        "pan.velocity"}


def test_extended_ruleset_files_affect_every_loop(project):
    assert loops_for_files(project, ["policy/base.toml"], project.root) == set()
    assert loops_for_files(
        project, ["policy/base.toml"], project.root, ruleset_files=["policy/base.toml"]
    ) == ALL


def test_loop_input_files_include_inner_loops(project):
    outer = loop_input_files(project, "tilt.velocity")
    assert "models/sensors.toml" in outer  # from the inner loop tilt.current
    assert {"ruleguard.toml", "policy/house.toml", "firmware/tilt.toml"} <= outer
    assert "plc/heater.json" not in outer


def test_builtin_ruleset_is_no_file(project):
    import dataclasses

    builtin = dataclasses.replace(project, ruleset="motion")
    assert ruleset_file(builtin) is None
    assert ruleset_file(project) == "policy/house.toml"
