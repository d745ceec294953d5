"""The compiled schema predicate gives jsonschema's verdict (ruleguard.load.schema_predicate).

Reference: the ``jsonschema`` library's ``Draft202012Validator`` (an
independent implementation of JSON Schema draft 2020-12) on the same
schema and value. Values: every value ruleguard validates while checking
the demo project and every case of the bad-input catalog (recorded in
process), every TOML/JSON file of fixtures/ and of the built-in rulesets
(and each of their tables) under every shipped schema, a JSON report of
the demo, and hypothesis mutations of the valid ones (keys dropped or
added, values replaced by other types, 1 / 1.0 / True, out-of-range
numbers, misspelled enum words).
"""

from __future__ import annotations

import copy
import io
import json
import math
import os
import shutil
import subprocess
import sys
from pathlib import Path

import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st
from jsonschema import Draft202012Validator

from ruleguard.cli import run
from ruleguard.load import schema_predicate, validation
from ruleguard.load.rulesets import _jsonable
from ruleguard.load.schema_predicate import Unsupported, compile_schema, passes, predicate
from ruleguard.load.schemas import load_schema, schema_names
from ruleguard.load.sources import tomllib

REPO = Path(__file__).resolve().parent.parent
FIXTURES = REPO / "fixtures"
CATALOG = FIXTURES / "bad_inputs"
DEMO = FIXTURES / "gimbal_demo"
RULESETS = REPO / "rulesets"

_REFERENCE = {name: Draft202012Validator(load_schema(name)) for name in schema_names()}


def reference_valid(name: str, value) -> bool:
    return _REFERENCE[name].is_valid(value)


def agree(name: str, value) -> None:
    assert passes(name, value) == reference_valid(name, value), (name, value)


# ------------------------------------------------------------------ values ruleguard validates


def _record_check(manifest: Path, seen: list) -> None:
    real = validation.passes

    def recording(name, value):
        seen.append((name, copy.deepcopy(value)))
        return real(name, value)

    validation.passes = recording
    try:
        run(["check", "--manifest", str(manifest), "--no-cache"], io.StringIO(), io.StringIO())
    finally:
        validation.passes = real


@pytest.fixture(scope="module")
def recorded(tmp_path_factory) -> list:
    """(schema name, value) of every validation in the demo and the catalog."""
    seen: list = []
    _record_check(DEMO / "ruleguard.toml", seen)
    for case in sorted(p for p in CATALOG.iterdir() if (p / "expected.json").is_file()):
        folder = tmp_path_factory.mktemp(case.name) / "case"
        shutil.copytree(case, folder, symlinks=True)
        expected = json.loads((folder / "expected.json").read_text("utf-8"))
        if expected.get("generate"):
            continue  # oversized files: refused before any validation
        _record_check(folder / expected["manifest"], seen)
    return seen


def test_every_shipped_schema_compiles():
    for name in schema_names():
        assert predicate(name) is not None, name


def test_recorded_validations_agree(recorded):
    verdicts = []
    for name, value in recorded:
        agree(name, value)
        verdicts.append(reference_valid(name, value))
    # the catalog holds schema errors as well as valid files
    assert verdicts.count(True) >= 50 and verdicts.count(False) >= 15, (
        verdicts.count(True), verdicts.count(False))


def _input_files() -> list[Path]:
    files = [p for p in FIXTURES.rglob("*") if p.suffix in (".toml", ".json") and p.is_file()]
    files += sorted(RULESETS.glob("*.toml"))
    return sorted(f for f in files if ".ruleguard-cache" not in f.parts)


def _parsed(path: Path):
    try:
        text = path.read_text("utf-8")
        if path.suffix == ".toml":
            return _jsonable(tomllib.loads(text))
        return json.loads(text)
    except (ValueError, UnicodeDecodeError, RecursionError):
        return None


def _tables(value, depth: int = 0):
    if depth > 6:
        return
    if isinstance(value, dict):
        yield value
        for item in value.values():
            yield from _tables(item, depth + 1)
    elif isinstance(value, list):
        for item in value:
            yield from _tables(item, depth + 1)


def test_fixture_files_and_their_tables_agree_under_every_schema():
    count = 0
    for path in _input_files():
        data = _parsed(path)
        if data is None:
            continue
        for table in _tables(data):
            for name in schema_names():
                agree(name, table)
                count += 1
    assert count > 1000


def test_built_in_rulesets_pass():
    for path in sorted(RULESETS.glob("*.toml")):
        data = _jsonable(tomllib.loads(path.read_text("utf-8")))
        assert reference_valid("ruleset", data), path
        assert passes("ruleset", data) is True, path


@pytest.fixture(scope="module")
def demo_report() -> dict:
    out = io.StringIO()
    run(["check", "--manifest", str(DEMO / "ruleguard.toml"), "--no-cache", "--format", "json"],
        out, io.StringIO())
    return json.loads(out.getvalue())


def test_report_of_the_demo_agrees(demo_report):
    assert reference_valid("report", demo_report)
    agree("report", demo_report)


# ------------------------------------------------------------------ semantics, one by one


@pytest.mark.parametrize(("schema", "value"), [
    ({"type": "integer"}, 1.0),
    ({"type": "integer"}, 1.5),
    ({"type": "integer"}, True),
    ({"type": "number"}, True),
    ({"type": "number"}, float("nan")),
    ({"type": ["string", "null"]}, None),
    ({"const": 1}, True),
    ({"const": 1}, 1.0),
    ({"const": True}, 1),
    ({"const": [1, "a"]}, [True, "a"]),
    ({"const": {"a": 1}}, {"a": 1.0}),
    ({"enum": [1, "x"]}, True),
    ({"enum": [0]}, False),
    ({"enum": ["pid"]}, "PID"),
    ({"enum": []}, "x"),
    ({"pattern": "b"}, "abc"),
    ({"pattern": "^b"}, "abc"),
    ({"pattern": "^b"}, 3),
    ({"minimum": 0}, float("nan")),
    ({"exclusiveMinimum": 0}, 0),
    ({"exclusiveMaximum": 1}, 1.0),
    ({"minimum": 0}, "text"),
    ({"minLength": 2}, "\u00e9\u00e9"),
    ({"maxLength": 1}, "ab"),
    ({"properties": {"a": {"type": "string"}}, "additionalProperties": False}, {"a": "x"}),
    ({"properties": {"a": {}}, "additionalProperties": False}, {"b": 1}),
    ({"patternProperties": {"^x-": {"type": "integer"}}, "additionalProperties": False},
     {"x-a": 1}),
    ({"patternProperties": {"^x-": {"type": "integer"}}, "additionalProperties": False},
     {"x-a": "no"}),
    ({"additionalProperties": {"type": "integer"}}, {"a": 1, "b": "2"}),
    ({"prefixItems": [{"type": "string"}], "items": False}, ["a"]),
    ({"prefixItems": [{"type": "string"}], "items": False}, ["a", 1]),
    ({"prefixItems": [{"type": "string"}], "items": {"type": "integer"}}, ["a", 1, 2.0]),
    ({"prefixItems": [{"type": "string"}]}, [1]),
    ({"minItems": 1}, {}),
    ({"maxProperties": 1}, {"a": 1, "b": 2}),
    ({"minProperties": 1}, {}),
    ({"propertyNames": {"pattern": "^[a-z]+$"}}, {"ab": 1, "Cd": 2}),
    ({"required": ["a"]}, [1]),
    ({"if": {"required": ["a"]}, "then": {"required": ["b"]}}, {"a": 1}),
    ({"if": {"required": ["a"]}, "else": {"required": ["b"]}}, {}),
    ({"then": {"required": ["b"]}}, {}),
    ({"oneOf": [{"type": "number"}, {"type": "integer"}]}, 1),
    ({"oneOf": [{"type": "number"}, {"type": "integer"}]}, 1.5),
    ({"anyOf": [{"type": "string"}, {"type": "integer"}]}, 1.5),
    ({"allOf": [{"minimum": 0}, {"maximum": 1}]}, 2),
    ({"not": {"type": "string"}}, "a"),
    ({"$defs": {"p": {"exclusiveMinimum": 0}}, "$ref": "#/$defs/p", "maximum": 5}, 6),
    ({"$defs": {"p": {"exclusiveMinimum": 0}}, "$ref": "#/$defs/p", "maximum": 5}, 3),
    ({"$defs": {"a~b/c": {"type": "string"}}, "$ref": "#/$defs/a~0b~1c"}, 1),
    ({"$defs": {"node": {"type": "array", "items": {"$ref": "#/$defs/node"}}},
      "$ref": "#/$defs/node"}, [[[]], [1]]),
    ({"properties": {"n": {"$ref": "#"}}, "required": ["v"]}, {"v": 1, "n": {"n": {}}}),
    (True, 1),
    (False, 1),
    ({"x-expected": "words", "description": "d", "title": "t"}, 3),
])
def test_keyword_semantics_agree(schema, value):
    expected = Draft202012Validator(schema).is_valid(value)
    assert compile_schema(schema)(value) == expected


@pytest.mark.parametrize("schema", [
    {"format": "date"},
    {"unevaluatedProperties": False},
    {"uniqueItems": True},
    {"$dynamicRef": "#x"},
    {"$ref": "other.json"},
    {"$ref": "#/$defs/missing"},
    {"properties": {"a": {"$id": "https://example.invalid/a"}}},
    {"type": "whole"},
    {"contains": {}},
])
def test_unknown_keywords_are_refused(schema):
    with pytest.raises(Unsupported):
        compile_schema(schema)


def test_a_refused_schema_falls_back_to_jsonschema(monkeypatch):
    monkeypatch.setattr(validation, "passes", lambda name, value: None)
    from ruleguard.load.project import load_project

    project = load_project(DEMO / "ruleguard.toml")
    assert project.loops


# ------------------------------------------------------------------ mutations (hypothesis)

_ODD_VALUES = [
    True, False, 0, 1, -1, 1.0, 0.0, -0.0, 0.5, -1e-300, 1e308, 2**70, float("nan"),
    "", "x", "pid", "tustin", "PID", "pidd", "q1.15", "float64", "a" * 300, None,
    [], [1], [1.0, 2.0], ["a"], {}, {"kind": "pid"}, {"unknown": 1},
]


def _paths(value, path=()):
    yield path
    if isinstance(value, dict):
        for key, item in value.items():
            yield from _paths(item, path + (key,))
    elif isinstance(value, list):
        for index, item in enumerate(value):
            yield from _paths(item, path + (index,))


def _parent(value, path):
    for item in path[:-1]:
        value = value[item]
    return value


def _mutate(value, data):
    value = copy.deepcopy(value)
    for _ in range(data.draw(st.integers(1, 3))):
        paths = list(_paths(value))
        path = data.draw(st.sampled_from(paths))
        op = data.draw(st.sampled_from(["replace", "drop", "add", "rename", "nudge"]))
        node = _parent(value, path)[path[-1]] if path else value
        if op == "replace" and path:
            _parent(value, path)[path[-1]] = copy.deepcopy(data.draw(st.sampled_from(_ODD_VALUES)))
        elif op == "drop" and path:
            parent = _parent(value, path)
            del parent[path[-1]]
        elif op == "add" and isinstance(node, dict):
            key = data.draw(st.sampled_from(["unknown_key", "kind", "kp", "name", "x-note"]))
            node[key] = copy.deepcopy(data.draw(st.sampled_from(_ODD_VALUES)))
        elif op == "add" and isinstance(node, list):
            node.append(copy.deepcopy(data.draw(st.sampled_from(_ODD_VALUES))))
        elif op == "rename" and path and isinstance(path[-1], str):
            parent = _parent(value, path)
            parent[path[-1] + "_"] = parent.pop(path[-1])
        elif op == "nudge" and path:
            parent = _parent(value, path)
            if isinstance(node, bool):
                parent[path[-1]] = int(node)
            elif isinstance(node, int):
                parent[path[-1]] = data.draw(st.sampled_from(
                    [float(node), -node, node - 1, -(node + 1), True, str(node)]))
            elif isinstance(node, float):
                parent[path[-1]] = data.draw(st.sampled_from(
                    [-node, 0.0, -abs(node) - 1.0, int(node) if math.isfinite(node) else 0,
                     node * 1e6, str(node)]))
            elif isinstance(node, str):
                parent[path[-1]] = data.draw(st.sampled_from(
                    [node.upper(), node + "x", node[:-1], "", " " + node]))
    return value


@pytest.fixture(scope="module")
def valid_seeds(recorded, demo_report) -> list:
    seeds = [(name, value) for name, value in recorded if reference_valid(name, value)]
    seeds.append(("report", demo_report))
    unique: dict = {}
    for name, value in seeds:
        unique.setdefault((name, repr(value)), (name, value))
    return list(unique.values())


@settings(max_examples=600, deadline=None,
          suppress_health_check=[HealthCheck.function_scoped_fixture, HealthCheck.too_slow])
@given(data=st.data())
def test_mutations_of_valid_documents_agree(valid_seeds, data):
    name, value = data.draw(st.sampled_from(valid_seeds))
    mutated = _mutate(value, data)
    agree(name, mutated)


# ------------------------------------------------------------------ no jsonschema import


def test_valid_demo_check_does_not_import_jsonschema(tmp_path):
    shutil.copytree(DEMO, tmp_path / "demo", ignore=shutil.ignore_patterns(".ruleguard-cache"))
    probe = (
        "import sys, io\n"
        "from ruleguard.cli import run\n"
        "code = run(['check', '--no-cache', '--manifest', sys.argv[1]], io.StringIO(), "
        "io.StringIO())\n"
        "print(code, 'jsonschema' in sys.modules)\n"
    )
    result = subprocess.run(
        [sys.executable, "-c", probe, str(tmp_path / "demo" / "ruleguard.toml")],
        capture_output=True, text=True, timeout=300, env={**os.environ, "NO_COLOR": "1"},
    )
    status, imported = result.stdout.split()
    assert status in ("0", "1"), result.stderr
    assert imported == "False"


def test_module_has_no_jsonschema_import():
    source = Path(schema_predicate.__file__).read_text("utf-8")
    assert "import jsonschema" not in source and "from jsonschema" not in source


# ------------------------------------------------------------------ the finite-number scan

_LEAVES = st.one_of(
    st.floats(allow_nan=True, allow_infinity=True), st.integers(), st.booleans(),
    st.text(max_size=3), st.none(),
    st.sampled_from([10**300, -(10**300), 2**1024, -(2**1024), 2**1023, 10**308 * 17]),
)
_NESTED = st.recursive(
    _LEAVES,
    lambda inner: st.lists(inner, max_size=4) | st.dictionaries(st.text(max_size=2), inner,
                                                                max_size=4),
    max_leaves=12,
)


@settings(max_examples=400, deadline=None)
@given(_NESTED)
def test_quick_finite_scan_matches_the_located_one(value):
    # reference: number_problem on every node, as check_finite walks them
    def nodes(node):
        yield node
        if isinstance(node, dict):
            for item in node.values():
                yield from nodes(item)
        elif isinstance(node, list):
            for item in node:
                yield from nodes(item)

    expected = any(validation.number_problem(node) for node in nodes(value))
    assert validation._has_number_problem(value) == expected
