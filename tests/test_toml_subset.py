"""The quick reader of plain TOML gives tomllib's value or declines (None).

Reference: ``tomllib.loads`` (the standard library), compared by ``repr`` so
that types (int, float, bool) and key order count, on every TOML file of the
repository's fixtures, rulesets and test data, on hand-written edge cases and
on generated documents (hypothesis), valid and invalid.
"""

from __future__ import annotations

from pathlib import Path

import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from ruleguard.load.sources import parse_text, tomllib
from ruleguard.load.toml_subset import read_plain_toml

REPO = Path(__file__).resolve().parent.parent


def _agrees(text: str) -> bool:
    """True when the quick reader read ``text``; fails when it differs from tomllib."""
    quick = read_plain_toml(text)
    if quick is None:
        return False
    reference = tomllib.loads(text)  # the quick reader never accepts what tomllib refuses
    assert repr(quick) == repr(reference)
    assert quick == reference
    return True


def _toml_files() -> list[Path]:
    found = []
    for folder in ("fixtures", "rulesets", "tests"):
        found += [p for p in (REPO / folder).rglob("*.toml") if p.is_file()]
    return sorted(found)


def test_every_toml_file_of_the_repository():
    read = 0
    files = _toml_files()
    assert len(files) > 100
    for path in files:
        text = path.read_bytes().decode("utf-8", "replace")
        if text.startswith("\ufeff"):
            text = text[1:]
        read += _agrees(text)
    assert read > 50  # most inputs are plain


GENERATED = """\
[project]
name = "grid-comparison"
ruleset = "motion"
plants = ["models/plants.toml"]

[[loops]]
name = "axis000.speed"
plant = "stage000"
controller = { file = "firmware/stage000.toml", path = "speed" }
sample_rate_hz = 10000.0
delay_samples = 1.0

[plants.stage000]
kind = "zero_pole_gain"
gain = 12996857.842929833
zeros = [{ freq_hz = 1082.96, damping = 0.0318 }, { freq_hz = 1905.92, damping = 7e-2 }]
poles = [-7.68, -7526.6, { freq_hz = 1269.3, damping = 0.063 }, 0, -0, 1E+3]

[speed]  # a comment with 'quotes', "quotes", = and #
kind = "pid"   # trailing
kp = 1
ki = -2.5e-3
flag = true
off = false
text = "a # b = c, {d} [e] : f"
nested = [[1, 2], [], {}, { a = [true, false], b = { c = "x" } }]
"""


def test_generated_project_shapes_are_read_plain():
    assert _agrees(GENERATED)


PLAIN = [
    "a = 1\n",
    "a = 1",
    "\n\n# only a comment\n",
    "[a]\n[a.b]\nx = 1\n[a.c]\n",
    "[[a]]\nx = 1\n[[a]]\nx = 2\n[a.b]\ny = 3\n[[a.c]]\n",
    "[ a . b ]\nx = 1\n",
    "t = \"tab\there\"\n",
    "k = \"é ü 日本\"\n",
    "1 = 2\n-a_b = 3\n",
    "big = 123456789012345678901234567890\n",
    "f = 1e400\n",
    "i = { 1 = 2, x-y = 3 }\n",
    '[rules."margin.phase"]\nmin_deg = 30.0\n[rules."a b"]\n[rules.c."d.e"]\n[""]\n',
    '[[w."x.y"]]\na = 1\n[[w."x.y"]]\n[w."x.y".z]\n',
]

DECLINED_OR_EQUAL = [
    "a = 1\na = 2\n",
    "[a]\n[a]\n",
    "[a.b]\n[a]\n",
    "[a]\n[[a]]\n",
    "[[a]]\n[a]\n",
    "a = [1]\n[[a]]\n",
    "a = { b = 1 }\n[a.c]\n",
    "a = { b = 1 }\n[a]\n",
    "x = 1\n[x.y]\n",
    "i = { a = 1, a = 2 }\n",
    "i = { a.b = 1 }\n",
    "i = { \"q\" = 1 }\n",
    "a.b = 1\n",
    "\"a\" = 1\n",
    "a = null\n",
    "a = [null]\n",
    "a = nan\n",
    "a = inf\n",
    "a = [NaN]\n",
    "a = [Infinity]\n",
    "a = 1_000\n",
    "a = +1\n",
    "a = 0x10\n",
    "a = 01\n",
    "a = .5\n",
    "a = 5.\n",
    "a = 1979-05-27\n",
    "a = 1979-05-27T07:32:00Z\n",
    "a = 07:32:00\n",
    "a = [1, 2,]\n",
    "a = [\n  1,\n]\n",
    "a = { b = 1, }\n",
    "a = [\"x = y\"]\n",
    "a = [\"x\", \"y\" = 1]\n",
    "a = {\"b\": 1}\n",
    "a = [1: 2]\n",
    "a = 'literal'\n",
    "a = \"\"\"multi\"\"\"\n",
    "a = \"esc\\n\"\n",
    "a = \"unclosed\n",
    "a = [\"unclosed]\n",
    "a = \"tab\tin\" \n",
    "a = [\"tab\tin\"]\n",
    "a = 1\r\nb = 2\r\n",
    "a = 1 2\n",
    "a =\n",
    "= 1\n",
    "[]\n",
    "[a\n",
    "[[a]\n",
    "[ [a] ]\n",
    "a = [truefalse]\n",
    "a = [1true]\n",
    "a = { b = 1 } c\n",
    "a = 1 # ok\nb = [1] # ok\n",
    "a = \"x\" \"y\"\n",
    "a = \x7f\n",
    "a = \"\x01\"\n",
    "# \x01 in a comment\n",
    "[a]\nb = 1\n[a.b]\n",
    "[a]\nb = 1\n[[a.b]]\n",
    "[[a.b]]\n[a]\n",
    "a = [[1], [2]]\n[[a]]\n",
    "a = [" * 40 + "]" * 40 + "\n",
    '[a."b"]\n[a.b]\n',
    '[a."b\\nc"]\n',
    '[a."b\tc"]\n',
    '[a."b]\n',
    '[a.""b""]\n',
    '[a."b".]\n',
    "[a.'b']\n",
]


@pytest.mark.parametrize("text", PLAIN)
def test_plain_documents_are_read(text):
    assert _agrees(text)


@pytest.mark.parametrize("text", DECLINED_OR_EQUAL)
def test_edge_cases_are_declined_or_equal(text):
    quick = read_plain_toml(text)
    try:
        reference = tomllib.loads(text)
    except (tomllib.TOMLDecodeError, RecursionError, ValueError):
        assert quick is None
        return
    if quick is not None:
        assert repr(quick) == repr(reference)


_WORDS = st.sampled_from(["a", "b", "c", "a.b", "b.c", "1", "x-y", '"a"', "a b", "",
                          '"a.b"', 'a."b"', '"a".b', '""', '"a" . b', '"x\tc"', "'a'"])
_SCALARS = st.sampled_from([
    "1", "-0", "0.5", "1e3", "1E-2", "-7.25", "12345678901234567890", "true", "false",
    '"s"', '""', '"a,b"', '"a=b"', '"{x}"', '"#"', "'lit'", "nan", "inf", "+1", "1_0",
    "null", "NaN", "1979-05-27", "0x1", ".5", "01",
])


@st.composite
def _values(draw, depth: int = 0):
    kind = draw(st.integers(0, 3 if depth < 3 else 0))
    if kind <= 1:
        return draw(_SCALARS)
    if kind == 2:
        items = draw(st.lists(_values(depth + 1), max_size=4))
        tail = draw(st.sampled_from(["", ",", " "]))
        return "[" + ", ".join(items) + tail + "]"
    pairs = draw(st.lists(st.tuples(_WORDS, _values(depth + 1)), max_size=3))
    sep = draw(st.sampled_from([" = ", "=", ": ", " = "]))
    return "{ " + ", ".join(f"{k}{sep}{v}" for k, v in pairs) + " }"


@st.composite
def _documents(draw):
    lines = []
    for _ in range(draw(st.integers(0, 12))):
        kind = draw(st.integers(0, 5))
        if kind == 0:
            lines.append(f"[{draw(_WORDS)}]")
        elif kind == 1:
            lines.append(f"[[{draw(_WORDS)}]]")
        elif kind == 2:
            lines.append(draw(st.sampled_from(["", "# note", "  # x = 'y'", "\t"])))
        elif kind == 3:
            lines.append(draw(st.text(alphabet="ab=[]{}\"'#,.:01 \t\r", max_size=12)))
        else:
            comment = draw(st.sampled_from(["", "  # c", "#c"]))
            lines.append(f"{draw(_WORDS)} = {draw(_values())}{comment}")
    return "\n".join(lines) + draw(st.sampled_from(["", "\n"]))


@settings(max_examples=1500, deadline=None)
@given(_documents())
def test_generated_documents_are_declined_or_equal(text):
    quick = read_plain_toml(text)
    try:
        reference = tomllib.loads(text)
    except (tomllib.TOMLDecodeError, RecursionError, ValueError):
        assert quick is None
        return
    if quick is not None:
        assert repr(quick) == repr(reference)


def test_syntax_errors_keep_tomllib_messages():
    # the quick reader declines, so the located message is tomllib's
    with pytest.raises(Exception) as caught:
        parse_text("x.toml", "a = 1\na = 2\n", "toml")
    assert caught.value.line == 2


def test_header_positions_equal_the_source_map():
    # reference: ruleguard.load.positions.build_source_map (tree-sitter), which
    # places every key; the header index must give the same for table paths
    from ruleguard.load.positions import build_source_map
    from ruleguard.load.toml_subset import header_positions

    checked = 0
    texts = [GENERATED, *PLAIN, "  [a]\n\t[[b]]\n[[b]]\n[b.c]\n[[b.d]]\n[[b.d]]\n[\"é\".x]\n"]
    for path in _toml_files():
        text = path.read_bytes().decode("utf-8", "replace")
        texts.append(text[1:] if text.startswith("\ufeff") else text)
    for text in texts:
        if read_plain_toml(text) is None:
            continue
        source_map = build_source_map(text, "toml")
        for key_path, place in header_positions(text).items():
            assert source_map[key_path] == place, (key_path, text[:200])
            checked += 1
    assert checked > 300
