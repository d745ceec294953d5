"""Plant registry loading (ruleguard.load.plants, ruleguard.load.measured; FORMATS.md section 2)."""

from __future__ import annotations

import json
import math

import pytest

from ruleguard.errors import InputError
from ruleguard.load.expressions import Expression
from ruleguard.load.measured import parse_measured, unwrap_deg
from ruleguard.load.project import load_project
from ruleguard.load.sources import tomllib
from tests.project_files import MANIFEST, write_project

REGISTRY = """\
[plants.winding]
kind = "transfer_function"
numerator = [1.0]
denominator = ["L", "R"]
parameters = { L = 4.2e-4, R = 1.3, tau = "L/R" }
vary = { R = { min = 1.1, max = 1.8 } }
delay_s = 0.0

[plants.mechanics]
kind = "zero_pole_gain"
gain = 1724.0
zeros = [{ freq_hz = 150.0, damping = 0.04 }]
poles = [-3.5, { freq_hz = 180.0, damping = 0.03 }, { re = -3.0, im = 40.0 }]
vary = { gain = { min = 1400.0, max = 2100.0, scale = "log" } }

[plants.arm]
kind = "state_space"
a = [[0.0, 1.0], [-25.0, -0.4]]
b = [[0.0], [1.0]]
c = [[25.0, 0.0]]

[plants.heater]
kind = "first_order_dead_time"
gain = 2.4
time_constant_s = 95.0
delay_s = 12.0
vary = { delay_s = { min = 9.0, max = 16.0 } }

[plants.spring]
kind = "second_order"
gain = 1.0
freq_hz = 12.0
damping = 0.2

[plants.angle]
kind = "integrator_dead_time"
gain = "2*pi"

[plants.motor]
kind = "dc_motor"
resistance_ohm = 1.2
inductance_h = 1.0e-3
torque_constant_nm_per_a = 0.05
inertia_kg_m2 = 2.0e-5
friction_nm_s_per_rad = 1.0e-6
output = "speed"

[plants.shaft]
kind = "two_mass"
inertia_motor_kg_m2 = 1.0e-4
inertia_load_kg_m2 = 4.0e-4
stiffness_nm_per_rad = 50.0
damping_nm_s_per_rad = 0.01
output = "load_speed"

[plants.swept]
kind = "measured_response"
file = "sweep.csv"
unstable_poles = 0
integrators = 1
"""

SWEEP = (
    "freq_hz,magnitude_db,phase_deg\n# a comment\n1.0,20.0,-170.0\n\n2.0,14.0,170.0\n"
    "4.0,8.0,100.0\n"
)


@pytest.fixture()
def project(tmp_path):
    manifest = write_project(tmp_path, {"plants.toml": REGISTRY, "sweep.csv": SWEEP})
    return load_project(manifest)


def test_every_kind_loads(project):
    assert {name: entry.kind for name, entry in project.plants.items()} == {
        "winding": "transfer_function",
        "mechanics": "zero_pole_gain",
        "arm": "state_space",
        "heater": "first_order_dead_time",
        "spring": "second_order",
        "angle": "integrator_dead_time",
        "motor": "dc_motor",
        "shaft": "two_mass",
        "swept": "measured_response",
    }
    for entry in project.plants.values():
        assert entry.file == "plants.toml"
        assert entry.location.key == f"plants.{entry.name}"


def test_numbers_are_floats_and_strings_are_expressions(project):
    winding = project.plants["winding"]
    assert winding.fields["numerator"] == [1.0]
    assert isinstance(winding.fields["numerator"][0], float)
    den = winding.fields["denominator"]
    assert all(isinstance(item, Expression) for item in den)
    assert den[0].names == {"L"} and den[0].location.line == 4
    assert isinstance(winding.parameters["tau"], Expression)
    assert winding.parameters["R"] == 1.3
    assert "parameters" not in winding.fields and "vary" not in winding.fields
    angle = project.plants["angle"]
    assert angle.fields["gain"].evaluate({}) == pytest.approx(2 * math.pi)


def test_roots_keep_their_forms(project):
    mechanics = project.plants["mechanics"]
    assert mechanics.fields["zeros"] == [{"freq_hz": 150.0, "damping": 0.04}]
    assert mechanics.fields["poles"] == [
        -3.5,
        {"freq_hz": 180.0, "damping": 0.03},
        {"re": -3.0, "im": 40.0},
    ]
    assert mechanics.field_locations["poles.2"].line == 13


def test_defaults_are_filled(project):
    assert project.plants["mechanics"].fields["delay_s"] == 0.0
    assert project.plants["arm"].fields["d"] == [[0.0]]
    swept = project.plants["swept"]
    assert swept.fields["magnitude_unit"] == "db" and swept.fields["integrators"] == 1


def test_vary_ranges(project):
    rng = project.plants["winding"].vary["R"]
    assert (rng.name, rng.min, rng.max, rng.scale) == ("R", 1.1, 1.8, "linear")
    assert rng.location.key == "plants.winding.vary.R" and rng.location.line == 6
    assert project.plants["mechanics"].vary["gain"].scale == "log"
    assert project.plants["heater"].vary["delay_s"].max == 16.0  # a field may be varied


def test_measured_data_are_read_and_unwrapped(project):
    data = project.plants["swept"].measured
    assert data.file == "sweep.csv"
    assert data.freq_hz == (1.0, 2.0, 4.0)
    assert data.magnitude_db == (20.0, 14.0, 8.0)
    # -170 -> 170 is a step of -20 degrees through -180 (a lag growing), then -70
    assert data.phase_deg == pytest.approx((-170.0, -190.0, -260.0))
    assert "sweep.csv" in project.texts


def test_json_registry_equals_toml(tmp_path):
    data = tomllib.loads(REGISTRY)
    (tmp_path / "json").mkdir()
    (tmp_path / "toml").mkdir()
    manifest_json = write_project(
        tmp_path / "json",
        {
            "plants.json": json.dumps(data, indent=2),
            "sweep.csv": SWEEP,
            "ruleguard.toml": MANIFEST.replace("plants.toml", "plants.json"),
        },
    )
    manifest_toml = write_project(tmp_path / "toml", {"plants.toml": REGISTRY, "sweep.csv": SWEEP})
    from_json, from_toml = load_project(manifest_json), load_project(manifest_toml)
    for name, entry in from_toml.plants.items():
        other = from_json.plants[name]
        assert other.kind == entry.kind
        assert repr(_plain(other.fields)) == repr(_plain(entry.fields))
        assert other.file == "plants.json"
    # json.dumps(indent=2): "plants" line 2, "winding" line 3, kind 4, numerator 5-7, denominator 8
    assert from_json.plants["winding"].field_locations["denominator"].line == 8


def _plain(value):
    if isinstance(value, Expression):
        return ("expr", value.text)
    if isinstance(value, dict):
        return {k: _plain(v) for k, v in value.items()}
    if isinstance(value, list):
        return [_plain(v) for v in value]
    return value


@pytest.mark.parametrize(
    "entry, key, word",
    [
        ('kind = "transfer_function"\nnumerator = [1.0, 2.0, 3.0]\ndenominator = [1.0, 1.0]',
         "plants.p.numerator", "improper"),
        ('kind = "transfer_function"\nnumerator = [1.0]\ndenominator = [0.0, "a-a"]\n'
         "parameters = { a = 1.0 }", "plants.p.denominator", "all zeros"),
        ('kind = "transfer_function"\nnumerator = [0.0]\ndenominator = [1.0, 1.0]',
         "plants.p.numerator", "all zeros"),
        ('kind = "transfer_function"\nnumerator = ["k"]\ndenominator = [1.0, 1.0]',
         "plants.p.numerator.0", "not a parameter"),
        ('kind = "zero_pole_gain"\ngain = 0.0\npoles = [-1.0]', "plants.p.gain", "0"),
        ('kind = "zero_pole_gain"\ngain = 1.0\npoles = [{ freq_hz = -1.0, damping = 0.1 }]',
         "plants.p.poles.0", "freq_hz must be > 0"),
        ('kind = "state_space"\na = [[1.0, 0.0]]\nb = [[1.0]]\nc = [[1.0]]', "plants.p.a",
         "must be 1x1"),
        ('kind = "state_space"\na = [[1.0]]\nb = [[1.0]]\nc = [[1.0]]\nd = [[0.0, 1.0]]',
         "plants.p.d", "must be 1x1"),
        ('kind = "second_order"\ngain = 1.0\nfreq_hz = 0.0\ndamping = 0.1', "plants.p.freq_hz",
         "> 0"),
        ('kind = "second_order"\ngain = 1.0\nfreq_hz = 3.0\ndamping = -0.1', "plants.p.damping",
         ">= 0"),
        ('kind = "integrator_dead_time"\ngain = 1.0\ndelay_s = -1.0', "plants.p.delay_s", ">= 0"),
        ('kind = "dc_motor"\nresistance_ohm = 0.0\ninductance_h = 1e-3\n'
         'torque_constant_nm_per_a = 0.1\ninertia_kg_m2 = 1e-4\nfriction_nm_s_per_rad = 0.0\n'
         'output = "speed"', "plants.p.resistance_ohm", "> 0"),
        ('kind = "dc_motor"\nresistance_ohm = 1.0\ninductance_h = 1e-3\n'
         'torque_constant_nm_per_a = 0.1\ninertia_kg_m2 = 1e-4\nfriction_nm_s_per_rad = 0.0\n'
         'output = "torque"', "plants.p.output", "expected one of"),
        ('kind = "two_mass"\ninertia_motor_kg_m2 = 1e-4\ninertia_load_kg_m2 = 1e-4\n'
         'stiffness_nm_per_rad = 10.0\noutput = "load_speed"', "plants.p", "damping_nm_s_per_rad"),
        ('kind = "first_order_dead_time"\ngain = 1.0\ntime_constant_s = "T"\n'
         "parameters = { T = 2.0 }\nvary = { T = { min = -1.0, max = 3.0 } }", "plants.p.vary.T",
         "must be > 0"),
        ('kind = "first_order_dead_time"\ngain = 1.0\ntime_constant_s = 1.0\n'
         "parameters = { exp = 2.0 }", "plants.p.parameters.exp", "function"),
        ('kind = "first_order_dead_time"\ngain = 1.0\ntime_constant_s = 1.0\n'
         "parameters = { gain = 2.0 }", "plants.p.parameters.gain", "key of this entry"),
        ('kind = "first_order_dead_time"\ngain = 1.0\ntime_constant_s = 1.0\n'
         'vary = { output = { min = 1.0, max = 2.0 } }', "plants.p.vary.output", "neither"),
        ('kind = "measured_response"\nfile = "s.csv"', "plants.p", "unstable_poles"),
        ('kind = "measured_response"\nfile = "s.txt"\nunstable_poles = 0', "plants.p.file", ".csv"),
    ],
)
def test_entry_errors(tmp_path, entry, key, word):
    manifest = write_project(
        tmp_path, {"plants.toml": "[plants.winding]\n" + REGISTRY.split("\n", 1)[1].split(
            "\n\n")[0] + "\n\n[plants.p]\n" + entry + "\n"}
    )
    with pytest.raises(InputError) as info:
        load_project(manifest)
    error = info.value
    assert error.file == "plants.toml"
    assert error.key == key, error.message
    assert word in error.message
    assert error.line is not None


def test_order_cap(tmp_path):
    poles = ", ".join(["-1.0"] * 201)
    manifest = write_project(
        tmp_path,
        {"plants.toml": REGISTRY.split("\n\n")[0]
         + f'\n\n[plants.big]\nkind = "zero_pole_gain"\ngain = 1.0\npoles = [{poles}]\n'},
    )
    with pytest.raises(InputError, match="at most 200"):
        load_project(manifest)


def test_order_cap_with_pairs(tmp_path):
    pairs = ", ".join(["{ re = -1.0, im = 2.0 }"] * 101)  # 202 poles
    manifest = write_project(
        tmp_path,
        {"plants.toml": REGISTRY.split("\n\n")[0]
         + f'\n\n[plants.big]\nkind = "zero_pole_gain"\ngain = 1.0\npoles = [{pairs}]\n'},
    )
    with pytest.raises(InputError, match="limit of 200"):
        load_project(manifest)


# ------------------------------------------------------------------ CSV unit tests


def test_unwrap_deg_against_numpy():
    import numpy as np

    wrapped = [170.0, -175.0, 160.0, -150.0, 10.0, 179.0, -179.0]
    # numpy.unwrap with period 360 is the independent reference
    assert unwrap_deg(wrapped) == pytest.approx(list(np.unwrap(wrapped, period=360.0)))


def test_linear_magnitude_is_converted_to_db():
    data = parse_measured("s.csv", "freq_hz,magnitude_abs,phase_deg\n1,10,0\n2,0.1,-10\n")
    assert data.magnitude_db == pytest.approx((20.0, -20.0))
    data = parse_measured("s.csv", "freq_hz,magnitude_db,phase_deg\n1,100,0\n2,1,-10\n", "abs")
    assert data.magnitude_db == pytest.approx((40.0, 0.0))


@pytest.mark.parametrize(
    "text, line, column, key, word",
    [
        ("freq_hz,magnitude_db\n1,2\n", 1, 1, "", "header"),
        ("freq_hz,magnitude_db,phase_deg\n1,2,3\n", 1, 1, "", "at least 2"),
        ("freq_hz,magnitude_db,phase_deg\n1,2,3\n2, x ,3\n", 3, 4, "magnitude_db", "not a number"),
        ("freq_hz,magnitude_db,phase_deg\n1,2,3\n0.5,2,3\n", 3, 1, "freq_hz", "increase"),
        ("freq_hz,magnitude_db,phase_deg\n0,2,3\n1,2,3\n", 2, 1, "freq_hz", "> 0"),
        ("freq_hz,magnitude_db,phase_deg\n1,2,inf\n2,2,3\n", 2, 5, "phase_deg", "finite"),
        ("freq_hz,magnitude_db,phase_deg\n1,2,3,4\n2,2,3\n", 2, 1, "", "4 cell"),
        ("freq_hz,magnitude_abs,phase_deg\n1,-2,3\n2,2,3\n", 2, 3, "magnitude_abs", "> 0"),
    ],
)
def test_csv_errors_name_row_and_column(text, line, column, key, word):
    with pytest.raises(InputError) as info:
        parse_measured("s.csv", text)
    error = info.value
    assert (error.file, error.line, error.column, error.key) == ("s.csv", line, column, key)
    assert word in error.message


def test_csv_row_cap():
    rows = "".join(f"{i + 1},0,0\n" for i in range(10001))
    with pytest.raises(InputError, match="10000"):
        parse_measured("s.csv", "freq_hz,magnitude_db,phase_deg\n" + rows)
