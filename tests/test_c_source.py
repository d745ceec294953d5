"""The C reader (ruleguard.load.c_source): values, key paths and positions.

Outside references: the C language's own rules for numeric constants and
constant arithmetic (ISO/IEC 9899:2011 6.4.4.1 integer constants, 6.4.4.2
floating constants, 6.5.5 integer division truncating toward zero, 6.7.9
designated initialisers), checked where a C compiler is installed by
compiling the same header with it and printing each value; elsewhere by
Python's own readers of the same literal text (float(), float.fromhex,
int(text, base)).
"""

from __future__ import annotations

import shutil
import subprocess

import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from ruleguard.errors import InputError
from ruleguard.load.c_source import parse_c, read_number_literal
from ruleguard.load.sources import Unreadable

HEADER = """\
/* gains of the pitch axis */
#ifndef PITCH_H
#define PITCH_H
#define PITCH_KP 0.35f            // proportional
#define PITCH_KI (2.0f * 3.14159f)
#define PITCH_MASK 0x1F
#define PITCH_OCTAL 010
#define PITCH_NEG -3
#define PITCH_HALF (7 / 2)
#define PITCH_NEG_HALF (-7 / 2)
#define PITCH_HEX_FLOAT 0x1.8p1
static const float pitch_kp = 0.35f;
typedef struct { float kp; float ki; float kd; } pid_gains_t;
const pid_gains_t pitch = { .kp = 0.35f, .ki = 2.0f };
const pid_gains_t roll = { 0.5f, 1.0f, 0.01f };
struct notch { float center_hz; float width_hz; };
const struct notch notches[2] = { { 180.0f, 60.0f }, { .width_hz = 20.0f, .center_hz = 90.0f } };
const float pitch_gains[3] = { 0.35f, 2.0f, 0.0f };
const float table[2][2] = { { 1, 2 }, { 3, 4 } };
const double scaled = (double)1.5e-3;
const float positional_unknown[2] = { 1.0f, 2.0f };
#endif
"""


@pytest.fixture(scope="module")
def header():
    return parse_c("firmware/pitch.h", HEADER)


def test_values_by_path(header):
    data = header.data
    # ISO C 6.4.4.2: the f suffix makes the type float; the value read is the
    # decimal as written (single-precision rounding is numeric_format's job)
    assert data["PITCH_KP"] == 0.35
    assert data["PITCH_KI"] == 2.0 * 3.14159
    assert data["PITCH_MASK"] == int("1F", 16)
    assert data["PITCH_OCTAL"] == int("10", 8)  # ISO C 6.4.4.1: a leading 0 is octal
    assert data["PITCH_NEG"] == -3
    assert data["PITCH_HALF"] == 3  # ISO C 6.5.5: integer division truncates
    assert data["PITCH_NEG_HALF"] == -3  # ... toward zero
    assert data["PITCH_HEX_FLOAT"] == float.fromhex("0x1.8p1")
    assert data["pitch_kp"] == 0.35
    assert data["pitch"] == {"kp": 0.35, "ki": 2.0}
    assert data["roll"] == {"kp": 0.5, "ki": 1.0, "kd": 0.01}  # names from the typedef
    assert data["notches"] == [
        {"center_hz": 180.0, "width_hz": 60.0},
        {"center_hz": 90.0, "width_hz": 20.0},  # designated in another order
    ]
    assert data["pitch_gains"] == [0.35, 2.0, 0.0]
    assert data["table"] == [[1, 2], [3, 4]]
    assert data["scaled"] == 1.5e-3
    assert isinstance(data["PITCH_H"], Unreadable)  # the include guard has no value


def test_positions_are_those_of_the_literals(header):
    lines = HEADER.split("\n")

    def at(path, token, occurrence=0):
        line, column = header.source_map[path]
        found = lines[line - 1]
        index = -1
        for _ in range(occurrence + 1):
            index = found.index(token, index + 1)
        return column == index + 1

    assert header.source_map[("PITCH_KP",)] == (4, 18)
    assert at(("PITCH_KP",), "0.35f")
    assert at(("pitch", "kp"), "0.35f")
    assert at(("pitch", "ki"), "2.0f")
    assert at(("roll", "kd"), "0.01f")
    assert at(("notches", 1, "center_hz"), "90.0f")
    assert at(("pitch_gains", 1), "2.0f")
    assert at(("table", 1, 0), "3")
    assert at(("pitch",), "pitch")  # a struct maps to its name
    assert header.locate(("pitch", "kp")).key == "pitch.kp"


@pytest.mark.skipif(shutil.which("cc") is None, reason="no C compiler installed")
def test_values_agree_with_a_c_compiler(tmp_path):
    # the compiler is the reference: each constant printed as a double
    names = {
        "A": "0x1F", "B": "010", "C": "(7 / 2)", "D": "(-7 / 2)", "E": "(2.0 * 3.14159)",
        "F": "1.5e-3", "G": "0x1.8p1", "H": "-(1.0 / 3.0)", "I": "(1 + 2 * 3 - 4 / 3)",
        "J": "((double)7 / 2)", "K": "3UL", "L": ".5", "M": "5.", "N": "(10 - -2)",
    }
    header = "".join(f"#define {name} {text}\n" for name, text in names.items())
    main = "#include <stdio.h>\n#include \"values.h\"\nint main(void) {\n" + "".join(
        f'  printf("%.17g\\n", (double)({name}));\n' for name in names) + "  return 0;\n}\n"
    (tmp_path / "values.h").write_text(header)
    (tmp_path / "main.c").write_text(main)
    subprocess.run(["cc", "-o", str(tmp_path / "main"), str(tmp_path / "main.c")], check=True,
                   cwd=tmp_path, capture_output=True)
    printed = subprocess.run([str(tmp_path / "main")], check=True, capture_output=True,
                             text=True).stdout.split()
    data = parse_c("values.h", header).data
    for name, value in zip(names, printed, strict=True):
        assert float(data[name]) == float(value), (name, names[name])


@given(st.floats(allow_nan=False, allow_infinity=False), st.sampled_from(["", "f", "F", "L"]))
@settings(max_examples=200, deadline=None)
def test_float_literals_read_as_written(value, suffix):
    text = repr(abs(value))
    if "e" not in text and "." not in text:
        text += ".0"
    assert read_number_literal(text + suffix) == float(text)  # reference: Python's float()


@given(st.integers(min_value=0, max_value=2**64), st.sampled_from(["", "u", "U", "l", "UL", "ll"]))
@settings(max_examples=100, deadline=None)
def test_integer_literals_in_every_base(value, suffix):
    for text in (str(value), hex(value), "0" + oct(value)[2:] if value else "0"):
        assert read_number_literal(text + suffix) == value  # reference: int(text, base)


@pytest.mark.parametrize("text", ["1f", "08", "1.5ff", "0x", "1e", "abc", "1.2.3", "0b2"])
def test_not_literals(text):
    assert read_number_literal(text) is None


def test_branch_chosen_by_the_binding():
    text = ("#define CUR_KP 1.5f\n#if BOARD_REV >= 3 && defined(USE_FAST_LOOP)\n"
            "#define CUR_KI 3000.0f\n#elif BOARD_REV == 2\n#define CUR_KI 2500.0f\n#else\n"
            "#define CUR_KI 2000.0f\n#endif\n#ifdef USE_FAST_LOOP\n#define CUR_KD 0.1f\n#endif\n")
    assert isinstance(parse_c("f.h", text).data["CUR_KI"], Unreadable)  # no choice
    assert parse_c("f.h", text, {"BOARD_REV": 3, "USE_FAST_LOOP": 1}).data["CUR_KI"] == 3000.0
    assert parse_c("f.h", text, {"BOARD_REV": 3}).data["CUR_KI"] == 2000.0
    chosen = parse_c("f.h", text, {"BOARD_REV": 2})
    assert chosen.data["CUR_KI"] == 2500.0
    assert chosen.source_map[("CUR_KI",)] == (5, 16)
    assert "CUR_KD" not in chosen.data
    assert parse_c("f.h", text, {"USE_FAST_LOOP": 1}).data["CUR_KD"] == 0.1


def test_a_name_also_defined_in_an_undecided_block_stays_unreadable():
    for text in ("#if X\n#define A 1\n#endif\n#define A 2\n",
                 "#define A 2\n#if X\n#define A 1\n#endif\n"):
        value = parse_c("a.h", text).data["A"]
        assert isinstance(value, Unreadable) and "defined inside '#if X'" in value.message
    assert parse_c("a.h", "#if X\n#define A 1\n#endif\n#define B 2\n", {"X": 0}).data == {
        "B": 2}


def test_comments_and_cplusplus_wrapper_are_read_through():
    text = ('#ifndef G_H\n#define G_H\n#ifdef __cplusplus\nextern "C" {\n#endif\n'
            "/* #define CUR_KP 9.0f */\n// #define CUR_KI 9.0f\n#define CUR_KP 1.5f /* x */\n"
            '#ifdef __cplusplus\n}\n#endif\n#endif\n')
    data = parse_c("g.h", text).data
    assert data["CUR_KP"] == 1.5
    assert "CUR_KI" not in data


@pytest.mark.parametrize(
    ("text", "name", "words"),
    [
        ("#define A B\n", "A", "takes its value from 'B'"),
        ("#define A (1 ? 2 : 3)\n", "A", "is not a numeric literal"),
        ('#define A "0.35"\n', "A", "is not a numeric literal"),
        ("#define A sizeof(int)\n", "A", "is not a numeric literal"),
        ("const float a = (int)1.5;\n", "a", "the cast to 'int'"),
        ("const float a = f(1);\n", "a", "calls 'f()'"),
        ("const float a[2] = { [0] = 1, 2, [0] = 3 };\n", "a", "initialised twice"),
        ("#define A (1.0 / 0)\n", "A", "division by zero"),
    ],
)
def test_unreadable_symbols_name_themselves(text, name, words):
    value = parse_c("x.h", text).data[name]
    assert isinstance(value, Unreadable)
    assert words in value.message and value.location.key.startswith(name)
    assert value.location.line == 1


@pytest.mark.parametrize(
    ("text", "line", "words"),
    [
        ("#define A 1\n#define A 2\n", 2, "defined twice (line 1 and line 2)"),
        ("const float a = 1.0f\nconst float b = 2.0f;\n", 1, "C syntax error"),
        ("const float a = { 1, 2 ;\n", 1, "C syntax error"),
    ],
)
def test_file_errors(text, line, words):
    with pytest.raises(InputError) as caught:
        parse_c("x.h", text)
    assert caught.value.line == line and words in caught.value.message


def test_deep_nesting_is_an_error_not_a_crash():
    value = parse_c("x.h", "#define A " + "(" * 500 + "1" + ")" * 500 + "\n").data["A"]
    assert isinstance(value, Unreadable) and "nested too deeply" in value.message
    value = parse_c("x.h", "const float a" + "[1]" * 80 + " = " + "{" * 80 + "1" + "}" * 80
                    + ";\n").data["a"]
    depth = 0
    while isinstance(value, list):
        value, depth = value[0], depth + 1
    assert isinstance(value, Unreadable) and "nested too deeply" in value.message
    assert depth == 64


C_CHARACTERS = list("#define if else endif  {}()[];,=.*/+-0123456789xXeEfFuUlL_abAB\"'\\\n\t")


@given(st.text(alphabet=st.sampled_from(C_CHARACTERS), max_size=300))
@settings(max_examples=300, deadline=None)
def test_any_text_gives_values_or_an_input_error(text):
    try:
        document = parse_c("x.h", text)
    except InputError as exc:
        assert exc.message and (exc.line is None or exc.line >= 1)
        return
    assert isinstance(document.data, dict)
    for path, (line, column) in document.source_map.items():
        assert line >= 1 and column >= 1, path
