"""The firmware-parse memo (``parsed.json`` in the cache folder).

The reference is the reader itself: a file taken from the memo must be the
Document the C, YAML or key-value reader makes of the same text (data, type
for type, unreadable C symbols included, and the source map), and a check
with the memo must print what a check without it prints, on the demo and on
every firmware file of the bad-input catalog.
"""

from __future__ import annotations

import io
import json
import shutil
import subprocess
import sys
from pathlib import Path

import pytest

from ruleguard import cli
from ruleguard.cache import CACHE_FOLDER, PARSED_FILE, LoopCache, ParsedDocuments
from ruleguard.errors import InputError
from ruleguard.load import sources

REPO = Path(__file__).resolve().parents[1]
DEMO = REPO / "fixtures" / "gimbal_demo"
BAD = REPO / "fixtures" / "bad_inputs"
AS_OF = "2026-12-02"
READERS = (".h", ".c", ".yaml", ".yml", ".params", ".cfg", ".ini")


def _firmware_files() -> list[Path]:
    return sorted(p for folder in (DEMO, BAD) for p in folder.rglob("*")
                  if p.suffix in READERS and ".ruleguard-cache" not in p.parts)


def _typed(value):
    """``value`` with the type of every element spelt out (1 and 1.0 and True differ)."""
    if isinstance(value, dict):
        return {k: _typed(v) for k, v in value.items()}
    if isinstance(value, list):
        return [_typed(v) for v in value]
    return (type(value).__name__, value)


@pytest.mark.parametrize("path", _firmware_files(), ids=lambda p: str(p.relative_to(REPO)))
def test_remembered_parse_is_the_readers_document(tmp_path, path):
    root = path.parent
    memo = ParsedDocuments(LoopCache(tmp_path, enabled=True))
    try:
        fresh = sources.read_firmware(root, path.name)
    except InputError:
        with sources.remembering_parses(memo):  # an error is never remembered
            with pytest.raises(InputError):
                sources.read_firmware(root, path.name)
        assert not memo._known
        return
    with sources.remembering_parses(memo):
        first = sources.read_firmware(root, path.name)
    memo.save()
    again = ParsedDocuments(LoopCache(tmp_path, enabled=True))  # read back from the file
    with sources.remembering_parses(again):
        second = sources.read_firmware(root, path.name)
    for doc in (first, second):
        assert (doc.file, doc.text, doc.fmt) == (fresh.file, fresh.text, fresh.fmt)
        assert _typed(doc.data) == _typed(fresh.data)
        assert dict(doc.source_map) == dict(fresh.source_map)
        assert list(doc.source_map) == list(fresh.source_map)


def test_digest_names_format_macros_and_text():
    one = sources.parse_digest("c", "#define K 1\n", None)
    assert one == sources.parse_digest("c", "#define K 1\n", {})
    assert one != sources.parse_digest("c", "#define K 1\n", {"REV": 2})
    assert one != sources.parse_digest("keyvalue", "#define K 1\n", None)
    assert one != sources.parse_digest("c", "#define K 2\n", None)


@pytest.fixture
def demo(tmp_path):
    target = tmp_path / "demo"
    shutil.copytree(DEMO, target, ignore=shutil.ignore_patterns(CACHE_FOLDER))
    return target


def _run(args):
    out, err = io.StringIO(), io.StringIO()
    return cli.run(args, out, err), out.getvalue(), err.getvalue()


def test_memo_filled_and_used_with_the_same_report(demo):
    base = ["check", "--manifest", str(demo / "ruleguard.toml"), "--format", "json",
            "--as-of", AS_OF]
    cold = _run([*base, "--no-cache"])
    assert not (demo / CACHE_FOLDER).exists()
    first = _run(base)
    memo = json.loads((demo / CACHE_FOLDER / PARSED_FILE).read_text(encoding="utf-8"))
    assert len(memo["files"]) == 2  # the YAML and the C firmware files of the demo
    assert sum(len(e["unreadable"]) for e in memo["files"].values()) >= 1  # the include guard
    (demo / "firmware" / "tilt.toml").write_text(
        (demo / "firmware" / "tilt.toml").read_text(encoding="utf-8") + "# edited\n",
        encoding="utf-8")
    probe = ("import io, sys\nfrom ruleguard.cli import run\n"
             "code = run(sys.argv[1:], io.StringIO(), sys.stderr)\n"
             "print(code, 'yaml' in sys.modules, 'tree_sitter_c' in sys.modules)\n")
    warm = subprocess.run([sys.executable, "-c", probe, *base], capture_output=True, text=True)
    assert warm.stdout.split() == ["1", "False", "False"], warm.stderr  # neither reader ran
    again = _run(base)
    assert cold == first == again


@pytest.mark.parametrize("damage", ["garbage", "version", "entry"])
def test_damaged_memo_is_ignored(demo, damage):
    base = ["check", "--manifest", str(demo / "ruleguard.toml"), "--format", "json",
            "--as-of", AS_OF]
    first = _run(base)
    path = demo / CACHE_FOLDER / PARSED_FILE
    data = json.loads(path.read_text(encoding="utf-8"))
    if damage == "garbage":
        path.write_text("{not json", encoding="utf-8")
    elif damage == "version":
        data["tool_version"] = "0.0.0-other"
        path.write_text(json.dumps(data), encoding="utf-8")
    else:
        for entry in data["files"].values():
            entry["data"] = "{broken"
            entry["map"] = [[["x"], "not a line", None]]
        path.write_text(json.dumps(data), encoding="utf-8")
    assert _run(base) == first
    if damage != "version":  # this version's memo is written anew, whole
        memo = json.loads(path.read_text(encoding="utf-8"))
        assert all(json.loads(e["data"]) for e in memo["files"].values())
