"""Deferred locations (ruleguard.location.deferred_location) equal eager ones.

Reference: the eager placement the loader used before locations were
deferred, written out here (a fresh source map of the document's text, the
nearest placed ancestor of the key path, the dotted key of
:func:`ruleguard.load.positions.format_key`). Checked for every location a
loaded project holds (the demo, the test projects), for every key path of
every TOML and JSON file under fixtures/ (the bad-input catalog included),
and for the class's behaviour (equality, hashing, repr, pickling, frozen).
"""

from __future__ import annotations

import copy
import dataclasses
import pickle
from pathlib import Path

import pytest

from ruleguard.errors import InputError
from ruleguard.load.positions import build_source_map, format_key
from ruleguard.load.project import load_project
from ruleguard.load.sources import Document, parse_text
from ruleguard.location import Location, deferred_location

REPO = Path(__file__).resolve().parent.parent
PROJECTS = [
    REPO / "fixtures" / "gimbal_demo",
    REPO / "tests" / "data" / "contract" / "third_order",
    REPO / "tests" / "data" / "fuzz_project",
]


def _eager(document: Document, path: tuple) -> Location:
    """The placement of the loader before deferral (sources.Document.locate then)."""
    if document.fmt in ("toml", "json"):
        try:
            source_map = build_source_map(document.text, document.fmt)
        except Exception:
            source_map = {}
    else:  # firmware readers place their values while parsing
        source_map = document.source_map
    line, column = (None, None)
    probe = tuple(path)
    while probe:
        hit = source_map.get(probe)
        if hit is not None:
            line, column = hit
            break
        probe = probe[:-1]
    else:
        line, column = source_map.get((), (1, 1)) if document.text else (None, None)
    return Location(document.file, line, column, format_key(path))


def _locations(value, seen: set) -> list[Location]:
    if id(value) in seen:
        return []
    seen.add(id(value))
    if isinstance(value, Location):
        return [value]
    found: list[Location] = []
    if dataclasses.is_dataclass(value) and not isinstance(value, type):
        for item in dataclasses.fields(value):
            found += _locations(getattr(value, item.name), seen)
    elif isinstance(value, dict):
        for key, item in value.items():
            found += _locations(key, seen) + _locations(item, seen)
    elif isinstance(value, (list, tuple, set, frozenset)):
        for item in value:
            found += _locations(item, seen)
    else:
        for name in getattr(value, "__slots__", ()):
            found += _locations(getattr(value, name, None), seen)
    return found


@pytest.mark.parametrize("folder", PROJECTS, ids=lambda p: p.name)
def test_every_location_of_a_loaded_project_equals_the_eager_one(folder):
    project = load_project(folder / (
        "ruleguard.toml" if (folder / "ruleguard.toml").is_file() else "ruleguard.json"
    ))
    locations = _locations(project, set())
    deferred = [loc for loc in locations if "_at" in vars(loc)]
    assert len(deferred) > 20
    for location in deferred:
        placer, path = vars(location)["_at"]
        expected = _eager(placer, path)
        assert (location.file, location.line, location.column, location.key) == (
            expected.file, expected.line, expected.column, expected.key)
        assert location == expected
        assert hash(location) == hash(expected)
        assert repr(location) == repr(expected)
        assert "_at" not in vars(location)  # placed once, then kept


def _paths(value, path: tuple = ()):
    yield path
    if isinstance(value, dict):
        for key, item in value.items():
            yield from _paths(item, path + (key,))
    elif isinstance(value, list):
        for index, item in enumerate(value):
            yield from _paths(item, path + (index,))


def _documents():
    for path in sorted((REPO / "fixtures").rglob("*")):
        if path.suffix not in (".toml", ".json") or not path.is_file() or path.is_symlink():
            continue
        if path.name == "expected.json":
            continue
        try:
            text = path.read_text(encoding="utf-8")
            document = parse_text(path.name, text, path.suffix[1:])
        except (UnicodeDecodeError, InputError):
            continue
        yield path, document


def test_every_key_path_of_every_fixture_file():
    files = 0
    for _path, document in _documents():
        files += 1
        paths = list(_paths(document.data))[:400]
        paths += [("no", "such", "key"), (0,), ()]
        for path in paths:
            assert document.locate(path) == _eager(document, path), (document.file, path)
    assert files > 100


def test_a_deferred_location_behaves_as_a_location():
    document = parse_text("x.toml", 'a = 1\n[b]\nc = [1, 2]\n', "toml")
    made = document.locate(("b", "c", 1))
    assert isinstance(made, Location)
    copied = pickle.loads(pickle.dumps(document.locate(("b", "c", 1))))
    assert type(copied) is Location and "_at" not in vars(copied)
    assert copied == made == Location("x.toml", 3, 9, "b.c.1")
    assert copy.deepcopy(document.locate(("b",))) == Location("x.toml", 2, 1, "b")
    assert dataclasses.asdict(document.locate(("a",))) == {
        "file": "x.toml", "line": 1, "column": 1, "key": "a"}
    assert document.locate(("a",)).as_dict() == Location("x.toml", 1, 1, "a").as_dict()
    assert dataclasses.replace(document.locate(("a",)), key="z") == Location("x.toml", 1, 1, "z")
    with pytest.raises(dataclasses.FrozenInstanceError):
        made.line = 4  # type: ignore[misc]
    assert Location.line is None and Location.key == ""  # class defaults unchanged
    assert Location("f") == Location("f", None, None, "")


def test_placement_waits_for_the_first_reading():
    calls = []

    class Placer:
        def position(self, path):
            calls.append(path)
            return (7, 3)

        def key_text(self, path):
            return "k"

    location = deferred_location("f.toml", Placer(), ("k",))
    assert calls == []
    assert location.file == "f.toml" and calls == []
    assert location.column == 3 and location.line == 7 and location.key == "k"
    assert calls == [("k",)]
