"""`ruleguard init`'s starter files: complete, valid, passing, never overwriting."""

from __future__ import annotations

import os
from pathlib import Path

import numpy as np
import pytest

try:
    import tomllib
except ModuleNotFoundError:  # Python 3.10
    import tomli as tomllib

from ruleguard.starter import (
    CONTROLLER,
    MANIFEST,
    PLANTS,
    RULESET,
    STARTER_FILES,
    StarterExists,
    write_starter,
)


def _read(folder: Path, rel: str) -> dict:
    return tomllib.loads((folder / rel).read_text(encoding="utf-8"))


class TestWriting:
    def test_writes_every_file_once(self, tmp_path):
        written = write_starter(tmp_path / "fresh")
        assert written == [str(tmp_path / "fresh" / rel) for rel in STARTER_FILES]
        for rel in STARTER_FILES:
            assert (tmp_path / "fresh" / rel).is_file()
            _read(tmp_path / "fresh", rel)  # valid TOML

    def test_never_overwrites_and_writes_nothing_then(self, tmp_path):
        (tmp_path / "control").mkdir()
        (tmp_path / PLANTS).write_text("# my own registry\n")
        with pytest.raises(StarterExists) as raised:
            write_starter(tmp_path)
        assert PLANTS in str(raised.value) and "never overwrites" in str(raised.value)
        assert raised.value.existing == [PLANTS]
        assert (tmp_path / PLANTS).read_text() == "# my own registry\n"
        assert not (tmp_path / MANIFEST).exists()
        assert not (tmp_path / CONTROLLER).exists()

    def test_second_init_refuses(self, tmp_path):
        write_starter(tmp_path)
        before = {rel: (tmp_path / rel).read_text() for rel in STARTER_FILES}
        with pytest.raises(StarterExists) as raised:
            write_starter(tmp_path)
        assert raised.value.existing == list(STARTER_FILES)
        assert {rel: (tmp_path / rel).read_text() for rel in STARTER_FILES} == before

    def test_a_dangling_symlink_counts_as_existing(self, tmp_path):
        os.symlink(tmp_path / "nowhere", tmp_path / MANIFEST)
        with pytest.raises(StarterExists):
            write_starter(tmp_path)
        assert not (tmp_path / "nowhere").exists()

    def test_folder_that_is_a_file(self, tmp_path):
        (tmp_path / "file").write_text("x")
        with pytest.raises(NotADirectoryError):
            write_starter(tmp_path / "file")

    def test_project_name_from_the_folder(self, tmp_path):
        write_starter(tmp_path / "drive firmware")
        assert _read(tmp_path / "drive firmware", MANIFEST)["project"]["name"] == "drive-firmware"


class TestContent:
    @pytest.fixture
    def folder(self, tmp_path):
        write_starter(tmp_path)
        return tmp_path

    def test_manifest_references_resolve(self, folder):
        manifest = _read(folder, MANIFEST)
        assert manifest["project"]["ruleset"] == RULESET
        assert manifest["project"]["plants"] == [PLANTS]
        plants = _read(folder, PLANTS)["plants"]
        ruleset = _read(folder, RULESET)
        assert ruleset["ruleset"]["based_on"] == "baseline"
        for loop in manifest["loops"]:
            assert loop["plant"] in plants
            table = _read(folder, loop["controller"]["file"])
            assert loop["controller"]["path"] in table

    def test_example_loop_meets_the_baseline_margins(self, folder):
        """Independent check of the example loop with numpy.

        Exact zero-order-hold equivalent of 1/(L s + R) at period h:
        G(z) = (1/R)(1 - a)/(z - a), a = exp(-R h / L) (Franklin, Powell &
        Workman, Digital Control of Dynamic Systems, 3rd ed., 1998, ZOH
        equivalent of a first-order lag; from memory). Tustin PI:
        C(z) = kp + ki (h/2)(z + 1)/(z - 1). One sample of computation delay:
        z^-1. Baseline thresholds (RULES.md): phase margin >= 30 deg, gain
        margin >= 6 dB, Ms <= 6 dB, crossover <= 0.08 of the sample rate.
        """
        manifest = _read(folder, MANIFEST)
        loop = manifest["loops"][0]
        plant = _read(folder, PLANTS)["plants"][loop["plant"]]
        pid = _read(folder, loop["controller"]["file"])[loop["controller"]["path"]]
        h = 1.0 / loop["sample_rate_hz"]
        assert loop["delay_samples"] == 1.0
        inductance = plant["parameters"]["L"]
        kp, ki = pid["kp"], pid["ki"]
        resistances = [plant["parameters"]["R"], plant["vary"]["R"]["min"],
                       plant["vary"]["R"]["max"]]
        w = np.linspace(1e-2, np.pi / h, 200_001)
        z = np.exp(1j * w * h)
        for resistance in resistances:
            a = np.exp(-resistance * h / inductance)
            open_loop = (kp + ki * h / 2 * (z + 1) / (z - 1)) * (1 - a) / resistance / (z - a) / z
            # closed-loop poles: 2(z-1)(z-a)z + ((2kp + ki h) z + (ki h - 2kp))(1-a)/R
            char = np.polyadd(
                np.polymul(np.polymul([2.0, -2.0], [1.0, -a]), [1.0, 0.0]),
                np.polymul([2 * kp + ki * h, ki * h - 2 * kp], [(1 - a) / resistance]),
            )
            assert np.max(np.abs(np.roots(char))) < 1.0
            mag = np.abs(open_loop)
            phase = np.unwrap(np.angle(open_loop))
            crossings = np.nonzero(np.diff(np.sign(mag - 1.0)))[0]
            assert len(crossings) == 1
            k = crossings[0]
            assert 180.0 + np.degrees(phase[k]) >= 30.0
            assert w[k] / (2 * np.pi) <= 0.08 * loop["sample_rate_hz"]
            phase_crossings = np.nonzero(np.diff(np.sign(phase + np.pi)))[0]
            assert all(-20 * np.log10(mag[j]) >= 6.0 for j in phase_crossings)
            assert 20 * np.log10(np.max(1.0 / np.abs(1.0 + open_loop))) <= 6.0

    def test_loads_with_the_project_loader(self, folder):
        project_module = pytest.importorskip("ruleguard.load.project")
        project = project_module.load_project(folder / MANIFEST)
        assert [spec.name for spec in project.loops] == ["axis.current"]
