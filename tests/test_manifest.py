"""The manifest and the whole project (ruleguard.load.manifest / project; FORMATS.md section 1)."""

from __future__ import annotations

import json
from pathlib import Path

import pytest

from ruleguard.errors import InputError
from ruleguard.load.project import find_manifest, load_project
from ruleguard.load.schemas import load_schema, schema_names, schema_text
from ruleguard.load.sources import tomllib
from tests.project_files import FIRMWARE, MANIFEST, PLANTS, write_project

DEMO = Path(__file__).resolve().parent.parent / "fixtures" / "gimbal_demo" / "ruleguard.toml"

FULL = """\
[project]
name = "pan-tilt"
ruleset = "policy/house.toml"
plants = ["plants.toml", "sensors.toml"]
variants = { samples = 20, seed = 7 }

[[loops]]
name = "tilt.current"
plant = "winding"
controller = { file = "firmware.toml", path = "current" }
sample_rate_hz = 20000.0
delay_samples = 1.5
sensor = "shunt"
tags = ["motion", "tilt"]
required_ccw = 0
bounds = { kp = [0.5, 4.0] }

[[loops]]
name = "tilt.velocity"
plant = "winding"
inner = "tilt.current"
controller = { file = "firmware.toml", path = "current" }
delay_s = 0.001
"""

SENSORS = '[plants.shunt]\nkind = "first_order_dead_time"\ngain = 1.0\ntime_constant_s = 2e-5\n'


@pytest.fixture()
def full(tmp_path):
    return load_project(write_project(tmp_path, {"ruleguard.toml": FULL, "sensors.toml": SENSORS}))


def test_every_manifest_key(full, tmp_path):
    assert full.root == str(tmp_path.resolve())
    assert full.manifest_file == "ruleguard.toml"
    assert full.name == "pan-tilt"
    assert full.ruleset == "policy/house.toml"
    assert (full.ruleset_location.line, full.ruleset_location.key) == (3, "project.ruleset")
    assert full.plant_files == ("plants.toml", "sensors.toml")
    assert (full.variants.mode, full.variants.samples, full.variants.seed) == ("samples", 20, 7)
    current, velocity = full.loops
    assert current.name == "tilt.current" and current.plant == "winding"
    assert current.sample_rate_hz == 20000.0 and current.delay_samples == 1.5
    assert current.sensor == "shunt" and current.tags == ("motion", "tilt")
    assert current.required_ccw == 0 and current.bounds == {"kp": (0.5, 4.0)}
    assert current.inner is None and current.delay_s == 0.0
    assert current.location.line == 7 and current.location.key == "loops.0"
    assert current.field_locations["sensor"].line == 13
    assert current.field_locations["bounds.kp"].key == "loops.0.bounds.kp"
    assert velocity.inner == "tilt.current" and velocity.sample_rate_hz is None
    assert velocity.delay_s == 0.001 and velocity.delay_samples == 0.0
    assert velocity.sensor is None and velocity.tags == () and velocity.required_ccw is None


def test_inputs_and_texts(full):
    own = {"ruleguard.toml", "policy/house.toml", "plants.toml", "firmware.toml"}
    assert full.inputs["tilt.current"] == own | {"sensors.toml"}
    # the inner loop's inputs are the outer loop's too
    assert full.inputs["tilt.velocity"] == own | {"sensors.toml"}
    assert set(full.texts) == {"ruleguard.toml", "plants.toml", "sensors.toml", "firmware.toml"}
    assert full.texts["sensors.toml"] == SENSORS


def test_defaults(tmp_path):
    project = load_project(write_project(tmp_path))
    assert project.ruleset == "baseline"
    assert project.ruleset_location.key == "project"
    assert project.variants.mode == "corners"
    assert project.inputs["axis.current"] == {"ruleguard.toml", "plants.toml", "firmware.toml"}


def test_plants_may_be_one_string(tmp_path):
    manifest = MANIFEST.replace('plants = ["plants.toml"]', 'plants = "plants.toml"')
    project = load_project(write_project(tmp_path, {"ruleguard.toml": manifest}))
    assert project.plant_files == ("plants.toml",)


def test_json_project_equals_toml_project(tmp_path):
    (tmp_path / "t").mkdir()
    (tmp_path / "j").mkdir()
    from_toml = load_project(write_project(tmp_path / "t"))
    files = {
        "ruleguard.json": json.dumps(
            _renamed(tomllib.loads(MANIFEST)), indent=2
        ),
        "plants.json": json.dumps(tomllib.loads(PLANTS)),
        "firmware.json": json.dumps(tomllib.loads(FIRMWARE)),
    }
    from_json = load_project(write_project(tmp_path / "j", files))
    assert from_json.manifest_file == "ruleguard.json"
    assert from_json.plant_files == ("plants.json",)
    a, b = from_toml.loops[0], from_json.loops[0]
    assert (a.name, a.plant, a.sample_rate_hz, a.delay_samples) == (
        b.name, b.plant, b.sample_rate_hz, b.delay_samples)
    assert a.controller.fields == b.controller.fields
    assert b.controller.file == "firmware.json"
    # JSON positions: "loops" array item 0 opens on line 8 of json.dumps(indent=2)
    assert b.location.line == 9 and b.location.key == "loops.0"


def _renamed(data: dict) -> dict:
    data["project"]["plants"] = ["plants.json"]
    data["loops"][0]["controller"]["file"] = "firmware.json"
    return data


def test_demo_project_loads():
    project = load_project(DEMO)
    assert len(project.loops) == len({spec.name for spec in project.loops})
    for spec in project.loops:
        assert spec.plant in project.plants
        assert project.manifest_file in project.inputs[spec.name]
    heater = next(spec for spec in project.loops if spec.name == "housing.heater")
    # the PLC stores an integral gain per 0.5 s scan: the binding scales it by 2
    assert heater.controller.fields["ki"] == pytest.approx(0.087 * 2.0)


@pytest.mark.parametrize(
    "tail, key, word",
    [
        ('\n[[loops]]\nname = "axis.current"\nplant = "winding"\n'
         'controller = { file = "firmware.toml", path = "current" }\n', "loops.1.name", "twice"),
        ('sensor = "windng"\n', "loops.0.sensor", "did you mean 'winding'"),
        ('inner = "axis.curent"\n', "loops.0.inner", "no loop named 'axis.curent'"),
        ("bounds = { kp = [4.0, 0.5] }\n", "loops.0.bounds.kp", "above max"),
        ("bounds = { kp = [1.0] }\n", "loops.0.bounds.kp", "at least 2"),
        ("required_ccw = 0.5\n", "loops.0.required_ccw", "whole number"),
        ("delay_samples = -1.0\n", "loops.0.delay_samples", ">= 0"),
        ("sample_rate_hz = -1.0\n", "loops.0.sample_rate_hz", "> 0"),
        ('name2 = "x"\n', "loops.0.name2", "unknown key"),
        ('controller = { file = "firmware.toml", path = "current", extra = 1 }\n',
         "loops.0.controller", "Cannot overwrite"),
    ],
)
def test_loop_errors(tmp_path, tail, key, word):
    manifest = MANIFEST.replace("delay_samples = 1.0\n", "") + tail
    if tail.startswith("delay_samples") or tail.startswith("sample_rate"):
        manifest = MANIFEST.replace(tail.split(" ")[0] + " = ", "# ") + tail
    with pytest.raises(InputError) as info:
        load_project(write_project(tmp_path, {"ruleguard.toml": manifest}))
    error = info.value
    assert error.file == "ruleguard.toml"
    assert error.key.startswith(key), (error.key, error.message)
    assert word in error.message
    assert error.line is not None
    # every message located under loops.N says which loop (a TOML syntax error comes
    # before any table is read, so it has no loop to name)
    if "syntax error" not in error.message:
        assert "loop 'axis.current'" in error.message, error.message


def test_unknown_plant_names_the_loop(tmp_path):
    # the message of the issue: the loop by name, the entries, the location kept
    manifest = MANIFEST.replace('name = "axis.current"', 'name = "axis.speed"').replace(
        'plant = "winding"', 'plant = "nosuch"')
    plants = PLANTS.replace("[plants.winding]", "[plants.p1]")
    with pytest.raises(InputError) as info:
        load_project(write_project(tmp_path, {"ruleguard.toml": manifest,
                                              "plants.toml": plants}))
    error = info.value
    assert error.message == "loop 'axis.speed': no plant registry entry named 'nosuch' " \
        "(entries: p1)"
    assert (error.file, error.line, error.column, error.key) == (
        "ruleguard.toml", 7, 1, "loops.0.plant")


def test_second_loop_is_named_not_counted(tmp_path):
    manifest = MANIFEST + ('\n[[loops]]\nname = "axis.speed"\nplant = "winding"\n'
                           'controller = { file = "firmware.toml", path = "current" }\n'
                           "delay_samples = 2.0\n")
    with pytest.raises(InputError) as info:
        load_project(write_project(tmp_path, {"ruleguard.toml": manifest}))
    assert info.value.key == "loops.1.delay_samples"
    assert info.value.message.startswith("loop 'axis.speed': delay_samples needs sample_rate_hz")


def test_loop_without_a_name_is_numbered(tmp_path):
    manifest = MANIFEST.replace('name = "axis.current"\n', "")
    with pytest.raises(InputError) as info:
        load_project(write_project(tmp_path, {"ruleguard.toml": manifest}))
    assert info.value.key.startswith("loops.0")
    assert info.value.message.startswith("loop 1 (no name): ")


def test_variants_samples_range(tmp_path):
    manifest = MANIFEST.replace('plants = ["plants.toml"]',
                                'plants = ["plants.toml"]\nvariants = { samples = 0 }')
    with pytest.raises(InputError, match=">= 1") as info:
        load_project(write_project(tmp_path, {"ruleguard.toml": manifest}))
    assert info.value.key == "project.variants.samples"


def test_registry_listed_twice(tmp_path):
    manifest = MANIFEST.replace('["plants.toml"]', '["plants.toml", "plants.toml"]')
    with pytest.raises(InputError, match="listed twice") as info:
        load_project(write_project(tmp_path, {"ruleguard.toml": manifest}))
    assert info.value.key == "project.plants.1"


def test_missing_manifest(tmp_path):
    with pytest.raises(InputError, match="not found"):
        load_project(tmp_path / "ruleguard.toml")


def test_find_manifest_walks_up(tmp_path):
    write_project(tmp_path)
    deep = tmp_path / "a" / "b"
    deep.mkdir(parents=True)
    assert find_manifest(deep) == (tmp_path / "ruleguard.toml").resolve()
    (tmp_path / "ruleguard.json").write_text("{}", encoding="utf-8")
    with pytest.raises(InputError, match="both"):
        find_manifest(deep)


def test_find_manifest_none(tmp_path):
    lonely = tmp_path / "x"
    lonely.mkdir()
    if any((parent / "ruleguard.toml").exists() for parent in lonely.resolve().parents):
        pytest.skip("a manifest above the temporary folder")
    with pytest.raises(InputError, match="--manifest"):
        find_manifest(lonely)


def test_schemas_are_shipped_and_valid():
    from jsonschema import Draft202012Validator

    assert {"manifest", "plants", "controller"} <= set(schema_names())
    for name in schema_names():
        Draft202012Validator.check_schema(load_schema(name))
        assert json.loads(schema_text(name)) == load_schema(name)
    with pytest.raises(KeyError, match="known"):
        schema_text("nope")


def test_manifest_schema_accepts_the_contract_example():
    # FORMATS.md section 1, the example manifest as written there
    example = """
[project]
name = "pan-tilt-gimbal"
ruleset = "motion"
plants = ["models/plants.toml"]
variants = "corners"

[[loops]]
name = "tilt.current"
plant = "tilt_winding"
controller = { file = "firmware/tilt.toml", path = "current" }
sample_rate_hz = 20000.0
delay_samples = 1.0
sensor = "current_sense"
tags = ["motion", "tilt"]
required_ccw = 0
bounds = { kp = [0.5, 4.0] }

[[loops]]
name = "legacy.speed"
plant = "conveyor"
controller = { file = "firmware/params.json", path = "axes.speed", kind = "pid", map = { kp = "P", ki = { key = "I_per_tick", scale = 1000.0 } } }
sample_rate_hz = 1000.0
"""  # noqa: E501
    from jsonschema import Draft202012Validator

    errors = list(Draft202012Validator(load_schema("manifest")).iter_errors(tomllib.loads(example)))
    assert errors == []


def test_inner_did_you_mean_among_other_loops(tmp_path):
    tail = ('\n[[loops]]\nname = "axis.velocity"\nplant = "winding"\ninner = "axis.curent"\n'
            'controller = { file = "firmware.toml", path = "current" }\n'
            "sample_rate_hz = 1000.0\n")
    with pytest.raises(InputError, match="did you mean 'axis.current'") as info:
        load_project(write_project(tmp_path, {"ruleguard.toml": MANIFEST + tail}))
    assert (info.value.key, info.value.line) == ("loops.1.inner", 15)


# ------------------------------------------------------------------ validate() messages


def _validate(text: str, schema: str = "manifest"):
    from ruleguard.load.sources import parse_text
    from ruleguard.load.validation import validate

    document = parse_text("m.toml", text, "toml")
    with pytest.raises(InputError) as info:
        validate(document, schema)
    return info.value


def test_validate_unknown_key_names_the_first_in_the_file():
    error = _validate(MANIFEST.replace("[project]\n", "[project]\nzzz = 1\naaa = 2\n"))
    assert (error.key, error.line) == ("project.zzz", 2)


def test_validate_enum_and_type_messages():
    error = _validate(MANIFEST.replace('path = "current" }', 'path = "current", kind = "PID" }'))
    assert error.key == "loops.0.controller.kind"
    assert "expected one of 'pid', 'lead_lag', 'transfer_function'" in error.message
    assert "did you mean 'pid'" in error.message
    error = _validate(MANIFEST.replace('name = "unit"', "name = 5"))
    assert error.message == "expected a string for name, found integer 5"


def test_validate_subtree_with_custom_locations():
    from ruleguard.load.sources import parse_text
    from ruleguard.load.validation import validate
    from ruleguard.location import Location

    document = parse_text("fw.toml", "[a]\nP = 1.0\n", "toml")
    where = Location("fw.toml", 2, 1, "a.P")
    with pytest.raises(InputError) as info:
        validate(document, "controller", instance={"kind": "pid", "kp": "x"},
                 locate=lambda path: where)
    assert info.value.location == where and "a number" in info.value.message
    validate(document, "controller", instance={"kind": "pid", "kp": 1.0, "unused": object()})
