"""Controller bindings and tables (ruleguard.load.controllers; FORMATS.md sections 1 and 3)."""

from __future__ import annotations

import json

import pytest

from ruleguard.errors import InputError
from ruleguard.load.project import load_project
from tests.project_files import MANIFEST, write_project

TILT = """\
board = "rev-c"

[current]
kind = "pid"
form = "parallel"
kp = 2.1
ki = 6200.0
kd = 0.0
derivative_filter_hz = 4000.0
discretization = "tustin"
numeric_format = "float32"
vendor_note = "ignored by ruleguard"

[[current.filters]]
kind = "notch"
center_hz = 1800.0
width_hz = 300.0
depth_db = 25.0
discretization = "tustin_prewarp"
prewarp_hz = 1800.0

[[current.filters]]
kind = "lowpass2"
cutoff_hz = 5000.0
damping = 0.707

[[current.filters]]
kind = "biquad"
b = [0.4, 0.8, 0.4]
a = [2.0, -0.6, 0.2]

[[current.filters]]
kind = "lead_lag"
zero_hz = 10.0
pole_hz = 100.0

[[current.filters]]
kind = "transfer_function"
numerator = [0.5]
denominator = [1.0, -0.5]
domain = "z"

[[current.filters]]
kind = "lowpass1"
cutoff_hz = 900.0
"""


def load(tmp_path, firmware: str, binding: str = '{ file = "firmware.toml", path = "current" }',
         extra: dict | None = None, manifest_tail: str = ""):
    manifest = MANIFEST.replace(
        'controller = { file = "firmware.toml", path = "current" }', f"controller = {binding}"
    ) + manifest_tail
    files = {"ruleguard.toml": manifest, "firmware.toml": firmware}
    files.update(extra or {})
    return load_project(write_project(tmp_path, files))


def test_pid_with_filters(tmp_path):
    controller = load(tmp_path, TILT).loops[0].controller
    assert controller.kind == "pid" and controller.file == "firmware.toml"
    assert controller.path == "current"
    assert controller.fields == {
        "form": "parallel",
        "kp": 2.1,
        "ki": 6200.0,
        "kd": 0.0,
        "derivative_filter_hz": 4000.0,
        "discretization": "tustin",
        "numeric_format": "float32",
    }
    assert "vendor_note" not in controller.fields  # keys ruleguard does not use are ignored
    assert controller.field_locations["ki"].line == 7
    assert controller.field_locations["ki"].key == "current.ki"
    assert [f.kind for f in controller.filters] == [
        "notch", "lowpass2", "biquad", "lead_lag", "transfer_function", "lowpass1"
    ]
    notch, _, biquad, lead_lag, tf, _ = controller.filters
    assert notch.fields == {
        "center_hz": 1800.0, "width_hz": 300.0, "depth_db": 25.0,
        "discretization": "tustin_prewarp", "prewarp_hz": 1800.0,
    }
    assert notch.index == 0 and notch.location.line == 14
    assert notch.field_locations["width_hz"].key == "current.filters.0.width_hz"
    # a[0] is normalised to 1 (FORMATS.md section 3)
    assert biquad.fields["a"] == [1.0, -0.3, 0.1] and biquad.fields["b"] == [0.2, 0.4, 0.2]
    assert lead_lag.fields["gain"] == 1.0
    assert tf.fields["domain"] == "z"


def test_defaults_of_forms(tmp_path):
    spec = load(tmp_path, '[current]\nkind = "pid"\nkp = 1.0\n').loops[0].controller
    assert spec.fields == {"form": "parallel", "kp": 1.0, "ki": 0.0, "kd": 0.0}
    standard = '[current]\nkind = "pid"\nform = "standard"\ngain = 2.0\nti_s = 0.01\n'
    spec = load(tmp_path, standard).loops[0].controller
    assert spec.fields == {"form": "standard", "gain": 2.0, "ti_s": 0.01, "n": 10.0}


def test_json_firmware_with_map_scale_and_array_path(tmp_path):
    firmware = {
        "plc": "cabinet",
        "loops": [
            {"tag": "other", "pi": {"P": 9.0, "I_per_scan": 1.0}},
            {"tag": "TIC-101", "pi": {"P": 16.5, "I_per_scan": 0.087, "gains": {"D": 0.5}}},
        ],
    }
    binding = (
        '{ file = "plc.json", path = "loops.1.pi", kind = "pid", map = { kp = "P", '
        'ki = { key = "I_per_scan", scale = 2.0 }, kd = "gains.D" } }'
    )
    text = json.dumps(firmware, indent=2)
    controller = load(tmp_path, "", binding, {"plc.json": text}).loops[0].controller
    assert controller.fields["kp"] == 16.5
    assert controller.fields["ki"] == pytest.approx(0.174)  # raw value x scale
    assert controller.fields["kd"] == 0.5
    # field_locations point at the firmware's own keys
    assert controller.field_locations["ki"].key == "loops.1.pi.I_per_scan"
    assert controller.field_locations["ki"].file == "plc.json"
    line_of = {n + 1: line for n, line in enumerate(text.splitlines())}
    assert '"I_per_scan": 0.087' in line_of[controller.field_locations["ki"].line]
    assert '"D"' in line_of[controller.field_locations["kd"].line]
    assert controller.field_locations["kind"].key == "loops.0.controller.kind"  # from the manifest


def test_whole_file_as_table_and_transfer_function(tmp_path):
    firmware = 'kind = "transfer_function"\nnumerator = [1.0, 2.0]\ndenominator = [1.0, 3.0]\n'
    controller = load(tmp_path, firmware, '{ file = "firmware.toml" }').loops[0].controller
    assert controller.kind == "transfer_function" and controller.path == ""
    assert controller.fields == {"numerator": [1.0, 2.0], "denominator": [1.0, 3.0], "domain": "s"}


def test_lead_lag_controller(tmp_path):
    firmware = '[current]\nkind = "lead_lag"\ngain = 3.0\nzero_hz = 5.0\npole_hz = 50.0\n'
    controller = load(tmp_path, firmware).loops[0].controller
    assert controller.fields == {"gain": 3.0, "zero_hz": 5.0, "pole_hz": 50.0}


def test_firmware_shared_by_loops_is_read_once(tmp_path):
    tail = ('\n[[loops]]\nname = "axis.velocity"\nplant = "winding"\ninner = "axis.current"\n'
            'controller = { file = "firmware.toml", path = "velocity" }\nsample_rate_hz = 1000.0\n')
    firmware = TILT + '\n[velocity]\nkind = "pid"\nkp = 0.2\nki = 4.0\n'
    project = load(tmp_path, firmware, manifest_tail=tail)
    assert project.loops[1].controller.fields["kp"] == 0.2
    assert project.inputs["axis.velocity"] == {"ruleguard.toml", "plants.toml", "firmware.toml"}


@pytest.mark.parametrize(
    "firmware, binding, file, key, word",
    [
        ('[current]\nkind = "pid"\nki = 1.0\n', None, "firmware.toml", "current",
         "missing required key 'kp'"),
        ('[current]\nkind = "pid"\nform = "series"\nkp = 1.0\n', None, "firmware.toml",
         "current", "'gain'"),
        ('[current]\nkind = "pid"\nkp = "1.0"\n', None, "firmware.toml", "current.kp",
         "a number"),
        ('[current]\nkind = "pid"\nkp = 1.0\nti_s = 0.0\n', None, "firmware.toml", "current.ti_s",
         "> 0"),
        ('[current]\nkind = "pid"\nkp = 1.0\nform = "ideal"\n', None, "firmware.toml",
         "current.form", "expected one of"),
        ('[current]\nkind = "pid"\nkp = 1.0\nnumeric_format = "q1.150"\n', None, "firmware.toml",
         "current.numeric_format", "float64"),
        ('[current]\nkind = "pid"\nkp = 1.0\nnumeric_format = "q40.30"\n', None,
         "firmware.toml", "current.numeric_format", "m + n <= 64"),
        ('[current]\nkind = "pid"\nkp = 1.0\n[[current.filters]]\nkind = "lowpass2"\n'
         "cutoff_hz = 5.0\n", None, "firmware.toml", "current.filters.0", "'damping'"),
        ('[current]\nkind = "pid"\nkp = 1.0\n[[current.filters]]\nkind = "biquad"\n'
         "b = [1.0, 2.0]\na = [1.0, 0.0, 0.0]\n", None, "firmware.toml", "current.filters.0.b",
         "at least 3"),
        ('[current]\nkind = "pid"\nkp = 1.0\n[[current.filters]]\nkind = "transfer_function"\n'
         'numerator = [1.0, 0.0]\ndenominator = [1.0]\ndomain = "z"\n', None, "firmware.toml",
         "current.filters.0.numerator", "not causal"),
        ('[current]\nkind = "transfer_function"\nnumerator = [1.0]\ndenominator = [0.0]\n',
         None, "firmware.toml", "current.denominator", "all zeros"),
        ('[current]\nkind = "pid"\nkp = 1.0\n', '{ file = "firmware.toml", path = "current.kp" }',
         "ruleguard.toml", "loops.0.controller.path", "not a table"),
        ('[current]\nkind = "pid"\nkp = 1.0\n',
         '{ file = "firmware.toml", path = "current", map = { kp = { key = "kp", scale = 2.0 },'
         ' form = { key = "kp", scale = 1.0 } } }',
         "ruleguard.toml", "loops.0.controller.map.form", "cannot be scaled"),
        ('[current]\nkind = "pid"\nkp = 1.0\n', '{ file = "firmware.toml", path = "current", '
         'kind = "pid", map = { ki = "I" } }', "ruleguard.toml", "loops.0.controller.map.ki",
         "no key 'I'"),
        ('[current]\nkp = 1.0\n', '{ file = "firmware.toml", path = "current", kind = "pdi" }',
         "ruleguard.toml", "loops.0.controller.kind", "did you mean 'pid'"),
    ],
)
def test_controller_errors(tmp_path, firmware, binding, file, key, word):
    args = (tmp_path, firmware) if binding is None else (tmp_path, firmware, binding)
    with pytest.raises(InputError) as info:
        load(*args)
    error = info.value
    assert (error.file, error.key) == (file, key), error.message
    assert word in error.message
    assert error.line is not None


def test_discrete_blocks_need_a_sample_rate(tmp_path):
    manifest = MANIFEST.replace("sample_rate_hz = 10000.0\ndelay_samples = 1.0\n", "")
    firmware = ('[current]\nkind = "transfer_function"\nnumerator = [0.5]\n'
                'denominator = [1.0, -0.5]\ndomain = "z"\n')
    with pytest.raises(InputError, match="already discrete") as info:
        load_project(write_project(tmp_path, {"ruleguard.toml": manifest,
                                              "firmware.toml": firmware}))
    assert info.value.key == "current.domain"
