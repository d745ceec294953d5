"""Source maps and contained reading (ruleguard.load.sources).

Positions are checked against the line and column where each construct is
written in the test text (counted by hand: 1-based, columns in characters).
Values come from tomllib / json and are compared with what those parsers
return on their own.
"""

from __future__ import annotations

import json
import os

import pytest

from ruleguard.errors import InputError
from ruleguard.load.sources import (
    MAX_FILE_BYTES,
    format_key,
    parse_text,
    read_document,
    tomllib,
)

TOML_TEXT = """\
# comment line
title = "top"
[project]
name = "x"
a.b.c = 1
"quoted.key".x = 2
inline = { p = 1, q = { r = [10, 20] } }
multi = [
  1,
  [2, 3],
  { s = 4 },
]

[[loops]]
name = "first"
[loops.sub]
k = 1

[[loops]]
name = "second"

[[loops.filters]]
kind = "notch"
"\u00e9t\u00e9" = { "\u00fc" = 3 }

[[loops.filters]]
kind = "lowpass1"
"""


@pytest.fixture(scope="module")
def toml_doc():
    return parse_text("m.toml", TOML_TEXT, "toml")


@pytest.mark.parametrize(
    "path, line, column",
    [
        (("title",), 2, 1),
        (("project",), 3, 1),  # a table: its header
        (("project", "name"), 4, 1),
        (("project", "a"), 5, 1),  # dotted key: each part where it is written
        (("project", "a", "b"), 5, 3),
        (("project", "a", "b", "c"), 5, 5),
        (("project", "quoted.key"), 6, 1),
        (("project", "quoted.key", "x"), 6, 14),
        (("project", "inline"), 7, 1),  # inline tables, nested
        (("project", "inline", "p"), 7, 12),
        (("project", "inline", "q"), 7, 19),
        (("project", "inline", "q", "r"), 7, 25),
        (("project", "inline", "q", "r", 0), 7, 30),
        (("project", "inline", "q", "r", 1), 7, 34),
        (("project", "multi"), 8, 1),  # multi-line arrays, items on their own lines
        (("project", "multi", 0), 9, 3),
        (("project", "multi", 1), 10, 3),
        (("project", "multi", 1, 1), 10, 7),
        (("project", "multi", 2, "s"), 11, 5),
        (("loops", 0), 14, 1),  # arrays of tables: the n-th header
        (("loops", 0, "name"), 15, 1),
        (("loops", 0, "sub"), 16, 1),  # a sub-table of the last array item
        (("loops", 0, "sub", "k"), 17, 1),
        (("loops", 1), 19, 1),
        (("loops", 1, "name"), 20, 1),
        (("loops", 1, "filters", 0), 22, 1),  # nested arrays of tables
        (("loops", 1, "filters", 0, "kind"), 23, 1),
        (("loops", 1, "filters", 0, "\u00e9t\u00e9"), 24, 1),
        (("loops", 1, "filters", 0, "\u00e9t\u00e9", "\u00fc"), 24, 11),  # chars, not bytes
        (("loops", 1, "filters", 1, "kind"), 27, 1),
    ],
)
def test_toml_positions(toml_doc, path, line, column):
    location = toml_doc.locate(path)
    assert (location.line, location.column) == (line, column)
    assert location.key == format_key(path)
    assert location.file == "m.toml"


def test_toml_values_are_tomllib_values(toml_doc):
    assert toml_doc.data == tomllib.loads(TOML_TEXT)


def test_locate_falls_back_to_nearest_ancestor(toml_doc):
    location = toml_doc.locate(("loops", 1, "filters", 0, "missing", 3))
    assert (location.line, location.column) == (22, 1)
    assert location.key == "loops.1.filters.0.missing.3"


def test_format_key_quotes_keys_that_are_not_bare():
    assert format_key(("rules", "margin.phase", "min_deg")) == 'rules."margin.phase".min_deg'
    assert format_key(("loops", 0, "name")) == "loops.0.name"
    assert format_key(()) == ""


JSON_TEXT = """{
  "project": {"name": "x", "deep": {"deeper": {"deepest": [1, {"k": 2}]}}},
  "loops": [
    {"name": "a"},
    {
      "name": "b",
      "pi": {"P": 1.5}
    }
  ]
}
"""


@pytest.mark.parametrize(
    "path, line, column",
    [
        (("project",), 2, 3),
        (("project", "name"), 2, 15),
        (("project", "deep", "deeper", "deepest"), 2, 48),
        (("project", "deep", "deeper", "deepest", 0), 2, 60),
        (("project", "deep", "deeper", "deepest", 1, "k"), 2, 64),
        (("loops", 0), 4, 5),
        (("loops", 0, "name"), 4, 6),
        (("loops", 1, "name"), 6, 7),
        (("loops", 1, "pi", "P"), 7, 14),
    ],
)
def test_json_positions(path, line, column):
    document = parse_text("f.json", JSON_TEXT, "json")
    assert document.data == json.loads(JSON_TEXT)
    assert (document.locate(path).line, document.locate(path).column) == (line, column)


@pytest.mark.parametrize(
    "text, line, column, key",
    [
        ('a = 1\nb = [1,\n', 3, 1, "b"),
        ('[x]\ny = \n', 2, 5, "x.y"),
        ('[x]\ny = 1\ny = 2\n', 3, 6, "x.y"),
    ],
)
def test_toml_syntax_errors_are_located(text, line, column, key):
    with pytest.raises(InputError) as info:
        parse_text("s.toml", text, "toml")
    error = info.value
    assert (error.file, error.line, error.column, error.key) == ("s.toml", line, column, key)
    assert "TOML syntax error" in error.message


@pytest.mark.parametrize(
    "text, line, column, key, word",
    [
        ('{"a": {"b": 1,}}', 1, 15, "a.b", "syntax"),
        ('{"a": 1, "a": 2}', 1, 10, "a", "duplicate"),
        ('{"a": {"b": NaN}}', 1, 13, "a.b", "finite"),
        ('{"a": [1, -Infinity]}', 1, 11, "a.1", "finite"),
    ],
)
def test_json_errors_are_located(text, line, column, key, word):
    with pytest.raises(InputError) as info:
        parse_text("s.json", text, "json")
    error = info.value
    assert (error.line, error.column, error.key) == (line, column, key)
    assert word in error.message


def test_read_document_contained_and_relative(tmp_path):
    (tmp_path / "sub").mkdir()
    (tmp_path / "sub" / "a.toml").write_text("x = 1\n", encoding="utf-8")
    document = read_document(tmp_path, "sub/./a.toml")
    assert document.file == "sub/a.toml" and document.data == {"x": 1}


@pytest.mark.parametrize("rel", ["../outside.toml", "sub/../../outside.toml"])
def test_read_document_refuses_traversal(tmp_path, rel):
    root = tmp_path / "root"
    (root / "sub").mkdir(parents=True)
    (tmp_path / "outside.toml").write_text("x = 1\n", encoding="utf-8")
    with pytest.raises(InputError, match="outside the project folder"):
        read_document(root, rel)


def test_read_document_refuses_absolute_and_symlinks(tmp_path):
    root = tmp_path / "root"
    root.mkdir()
    outside = tmp_path / "outside.toml"
    outside.write_text("x = 1\n", encoding="utf-8")
    with pytest.raises(InputError, match="absolute path"):
        read_document(root, str(outside))
    os.symlink(outside, root / "link.toml")
    with pytest.raises(InputError, match="outside the project folder"):
        read_document(root, "link.toml")
    os.symlink(tmp_path, root / "up")
    with pytest.raises(InputError, match="outside the project folder"):
        read_document(root, "up/outside.toml")


def test_symlink_inside_the_folder_is_fine(tmp_path):
    (tmp_path / "real.toml").write_text("x = 2\n", encoding="utf-8")
    os.symlink("real.toml", tmp_path / "alias.toml")
    assert read_document(tmp_path, "alias.toml").data == {"x": 2}


@pytest.mark.parametrize(
    "content, word",
    [
        (b"", "empty"),
        (b"  \n\n", "empty"),
        (b"x = 1\x00\n", "binary"),
        (b"x = '\xff\xfe'\n", "UTF-8"),
    ],
)
def test_unreadable_contents(tmp_path, content, word):
    (tmp_path / "f.toml").write_bytes(content)
    with pytest.raises(InputError, match=word) as info:
        read_document(tmp_path, "f.toml")
    assert info.value.file == "f.toml"


def test_size_cap(tmp_path):
    (tmp_path / "big.toml").write_text("#" * (MAX_FILE_BYTES + 10), encoding="utf-8")
    with pytest.raises(InputError, match="limited"):
        read_document(tmp_path, "big.toml")
    (tmp_path / "small.toml").write_text("x = 1\n", encoding="utf-8")
    with pytest.raises(InputError, match="limited"):
        read_document(tmp_path, "small.toml", max_bytes=3)


def test_unknown_extension_and_missing_file(tmp_path):
    (tmp_path / "f.yaml").write_text("x: 1\n", encoding="utf-8")
    with pytest.raises(InputError, match=".toml or .json"):
        read_document(tmp_path, "f.yaml")
    with pytest.raises(InputError, match="does not exist"):
        read_document(tmp_path, "nope.toml")


def test_byte_order_mark_is_accepted(tmp_path):
    (tmp_path / "bom.json").write_bytes(b'\xef\xbb\xbf{"a": 1}')
    assert read_document(tmp_path, "bom.json").data == {"a": 1}


def test_source_map_is_built_lazily():
    document = parse_text("lazy.toml", "a = 1\n", "toml")
    assert "map" not in document._cache
    location = document.locate(("a",))
    assert "map" not in document._cache  # a location is placed when read
    assert (location.line, location.column, location.key) == (1, 1, "a")
    assert "map" in document._cache


def test_windows_line_endings_keep_positions():
    text = '[a]\r\nx = 1\r\ny = [\r\n  2,\r\n]\r\n'
    document = parse_text("crlf.toml", text, "toml")
    assert document.data == {"a": {"x": 1, "y": [2]}}
    assert (document.locate(("a", "y", 0)).line, document.locate(("a", "y", 0)).column) == (4, 3)
