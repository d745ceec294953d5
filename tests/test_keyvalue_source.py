"""The flat parameter-file reader (ruleguard.load.keyvalue_source).

The syntax is ruleguard's own (docs/formats-additions.md); the checks are
of values against Python's readers of the same text (float(), int(text, 16))
and of every error's line and column.
"""

from __future__ import annotations

import pytest

from ruleguard.errors import InputError
from ruleguard.load.keyvalue_source import parse_keyvalue

TEXT = """\
# pan axis
; exported by the service tool
PAN_VEL_KP = 0.35      # per (deg/s)
PAN_VEL_KI: 1.4e1
PAN_VEL_KD\t0
PAN_MASK = 0x1F
PAN_MODE = parallel
PAN_NOTE = "two words"
[pan_position]
kp = 95.0 ; tuned 2026-11
"""


def test_values_and_positions():
    document = parse_keyvalue("pan.params", TEXT)
    assert document.data == {
        "PAN_VEL_KP": 0.35, "PAN_VEL_KI": float("1.4e1"), "PAN_VEL_KD": 0,
        "PAN_MASK": int("1F", 16), "PAN_MODE": "parallel", "PAN_NOTE": "two words",
        "pan_position": {"kp": 95.0},
    }
    assert document.source_map[("PAN_VEL_KP",)] == (3, 14)
    assert document.source_map[("PAN_VEL_KI",)] == (4, 13)
    assert document.source_map[("PAN_VEL_KD",)] == (5, 12)
    assert document.source_map[("pan_position", "kp")] == (10, 6)


@pytest.mark.parametrize(
    ("text", "line", "column", "words"),
    [
        ("A = 1\nA = 2\n", 2, 1, "'A' is set twice (line 1 and line 2)"),
        ("[s]\nA = 1\n[s]\n", 3, 1, "section [s] appears twice"),
        ("A = 1 2\n", 1, 7, "one value per line"),
        ("A =\n", 1, 1, "'A' has no value"),
        ("= 1\n", 1, 1, "is not 'NAME = value'"),
        ("1A = 1\n", 1, 1, "is not 'NAME = value'"),
        ("# nothing\n", 1, 1, "sets no parameter"),
    ],
)
def test_errors_are_located(text, line, column, words):
    with pytest.raises(InputError) as caught:
        parse_keyvalue("x.params", text)
    assert (caught.value.line, caught.value.column) == (line, column)
    assert words in caught.value.message
