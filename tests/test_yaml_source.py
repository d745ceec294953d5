"""The YAML reader (ruleguard.load.yaml_source): safe, located, strict.

Outside reference for values: the YAML 1.2.2 specification's core schema
(section 10.3.2: which plain scalars are null, bool, int, float) and its
anchors/aliases (section 3.2.2.2); merge keys as in the YAML 1.1 merge-key
type (yaml.org/type/merge.html).
"""

from __future__ import annotations

import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from ruleguard.errors import InputError
from ruleguard.load.yaml_source import parse_yaml

TEXT = """\
# motion supervisor parameters
defaults: &pid_defaults
  kind: pid
  form: parallel
  kd: 0.0
pan:
  velocity:
    <<: *pid_defaults
    kp: 0.35
    ki: 1.4e1
    filters:
      - {kind: lowpass1, cutoff_hz: 250.0}
      - kind: notch
        center_hz: 180
  gains_table:
    - [0.35, 14.0]
    - [0.30, 12.0]
words: [yes, on, "1.5", ~, true, 0x1F, 0o17, 1e3, .inf]
"""


@pytest.fixture(scope="module")
def document():
    return parse_yaml("firmware/pan.yaml", TEXT)


def test_values(document):
    velocity = document.data["pan"]["velocity"]
    assert velocity == {"kind": "pid", "form": "parallel", "kd": 0.0, "kp": 0.35, "ki": 14.0,
                        "filters": [{"kind": "lowpass1", "cutoff_hz": 250.0},
                                    {"kind": "notch", "center_hz": 180}]}
    assert document.data["pan"]["gains_table"] == [[0.35, 14.0], [0.30, 12.0]]
    # YAML 1.2 core schema: yes/on are strings, a quoted number is a string,
    # ~ is null, 0x/0o are integers, 1e3 is a float
    assert document.data["words"][:8] == ["yes", "on", "1.5", None, True, 31, 15, 1000.0]
    assert document.data["words"][8] == float("inf")


def test_positions_are_those_of_the_literals(document):
    lines = TEXT.split("\n")

    def token_at(path):
        line, column = document.source_map[path]
        return lines[line - 1][column - 1:]

    assert token_at(("pan", "velocity", "kp")).startswith("0.35")
    assert token_at(("pan", "velocity", "filters", 0, "cutoff_hz")).startswith("250.0")
    assert token_at(("pan", "velocity", "filters", 1, "center_hz")).startswith("180")
    assert token_at(("pan", "gains_table", 1, 0)).startswith("0.30")
    # a value merged from an anchor is located at its literal under the anchor
    assert token_at(("pan", "velocity", "kd")).startswith("0.0")
    assert document.source_map[("pan", "velocity", "kd")][0] == 5
    assert token_at(("pan", "velocity")).startswith("velocity")


@pytest.mark.parametrize(
    ("text", "line", "column", "words"),
    [
        ("a: 1\na: 2\n", 2, 1, "duplicate key 'a'"),
        ("a: !!python/object/apply:os.system ['ls']\n", 1, 4, "'!!python/object/apply"),
        ("a: !!python/name:os.system\n", 1, 4, "is not read"),
        ("a: !local 1\n", 1, 4, "'!local'"),
        ("a:\n\tb: 1\n", 2, 1, "tab"),
        ("a: &x\n  b: *x\n", 1, 4, "refers to the map or list it is in"),
        ("a: [1, 2\nb: 3\n", 2, 2, "the list opened at line 1"),
        ("a: 1\n---\nb: 2\n", 2, 1, "more than one YAML document"),
        ("# only a comment\n", 1, 1, "holds no YAML document"),
    ],
)
def test_errors_are_located(text, line, column, words):
    with pytest.raises(InputError) as caught:
        parse_yaml("x.yaml", text)
    assert (caught.value.line, caught.value.column) == (line, column)
    assert words in caught.value.message


def test_alias_expansion_is_bounded():
    text = "a: &a [1, 1, 1, 1, 1, 1, 1, 1, 1, 1]\n" + "".join(
        f"{chr(98 + i)}: &{chr(98 + i)} [" + ", ".join([f"*{chr(97 + i)}"] * 10) + "]\n"
        for i in range(8))
    with pytest.raises(InputError) as caught:
        parse_yaml("x.yaml", text)
    assert "expand to more than 100000 values" in caught.value.message


def test_nothing_is_constructed(tmp_path, monkeypatch):
    # the object tag would run os.system under an unsafe loader; here it never runs
    monkeypatch.chdir(tmp_path)
    with pytest.raises(InputError):
        parse_yaml("x.yaml", "a: !!python/object/apply:os.system ['touch pwned']\n")
    assert not (tmp_path / "pwned").exists()


YAML_CHARACTERS = list("ab: -[]{},&*!<>|'\"#~\n\t 0123.e%?@`")


@given(st.text(alphabet=st.sampled_from(YAML_CHARACTERS), max_size=200))
@settings(max_examples=300, deadline=None)
def test_any_text_gives_values_or_an_input_error(text):
    try:
        document = parse_yaml("x.yaml", text)
    except InputError as exc:
        assert exc.message and (exc.line is None or exc.line >= 1)
        return
    for path, (line, column) in document.source_map.items():
        assert line >= 1 and column >= 1, path
