"""Black-box acceptance tests of the public contract (FORMATS.md).

Only the command line is driven (``ruleguard.cli.run`` with string streams,
plus a few real subprocess calls of the installed ``ruleguard``), and only
its outputs are read: the JSON report, the exit status and stderr. Every
numerical expectation is derived in closed form in a comment, or computed
independently here with numpy / scipy; the source is named beside each check.
Section numbers refer to FORMATS.md.
"""

from __future__ import annotations

import cmath
import itertools
import json
import math
import re
import shutil
import subprocess
import sys
from io import StringIO
from pathlib import Path

import numpy as np
import pytest

try:
    import tomllib
except ModuleNotFoundError:  # Python 3.10
    import tomli as tomllib

from ruleguard.cli import run

DATA = Path(__file__).parent / "data" / "contract"  # small projects of these tests

# ------------------------------------------------------------------ helpers

# Plants used throughout (poles and zeros in rad/s, section "Units").
PLANTS = """\
[plants.third]          # 1/(s (s+1) (s+2))
kind = "zero_pole_gain"
gain = 1.0
zeros = []
poles = [0.0, -1.0, -2.0]

[plants.unit]           # a static gain of 1
kind = "transfer_function"
numerator = [1.0]
denominator = [1.0]

[plants.unstable1]      # 1/(s - 1)
kind = "transfer_function"
numerator = [1.0]
denominator = [1.0, -1.0]

[plants.int_dead]       # exp(-0.5 s)/s
kind = "integrator_dead_time"
gain = 1.0
delay_s = 0.5
"""


def manifest(loops: str, *, ruleset: str = "baseline", variants: str = '"corners"',
             plants: str = '["plants.toml"]') -> str:
    return (
        "[project]\n"
        'name = "contract"\n'
        f'ruleset = "{ruleset}"\n'
        f"plants = {plants}\n"
        f"variants = {variants}\n\n" + loops
    )


def loop(name: str, plant: str, table: str, *, extra: str = "", file: str = "ctl.toml") -> str:
    return (
        "[[loops]]\n"
        f'name = "{name}"\n'
        f'plant = "{plant}"\n'
        f'controller = {{ file = "{file}", path = "{table}" }}\n' + extra + "\n"
    )


def p_table(name: str, kp: float) -> str:
    return f'[{name}]\nkind = "pid"\nkp = {kp!r}\nki = 0.0\n\n'


def write(folder: Path, files: dict[str, str]) -> Path:
    for rel, text in files.items():
        path = folder / rel
        path.parent.mkdir(parents=True, exist_ok=True)
        path.write_text(text, encoding="utf-8")
    return folder


def cli(args: list[str]) -> tuple[int, str, str]:
    out, err = StringIO(), StringIO()
    code = run(args, stdout=out, stderr=err)
    return code, out.getvalue(), err.getvalue()


_REPORT_SCHEMA: list[dict] = []


def report_validator():
    """The report schema as the command prints it (`ruleguard schema report`)."""
    import jsonschema

    if not _REPORT_SCHEMA:
        code, out, _ = cli(["schema", "report"])
        assert code == 0
        _REPORT_SCHEMA.append(json.loads(out))
    schema = _REPORT_SCHEMA[0]
    return jsonschema.validators.validator_for(schema)(schema)


def check(folder: Path, *extra: str, name: str = "ruleguard.toml") -> tuple[int, dict, str]:
    """Run ``check --format json`` on a project; validate the contract of the report."""
    code, out, err = cli(["check", "--manifest", str(folder / name), "--format", "json",
                          "--no-cache", *extra])
    assert code in (0, 1), (code, err)
    assert "Traceback" not in err
    report = json.loads(out)
    assert_contract(report, code)
    report_validator().validate(report)  # and the shipped report schema
    return code, report, err


def bad(folder: Path, name: str = "ruleguard.toml") -> str:
    """Run a check that must fail on input (section 6: exit 2, no traceback)."""
    code, out, err = cli(["check", "--manifest", str(folder / name), "--format", "json",
                          "--no-cache"])
    assert code == 2, (code, out, err)
    assert "Traceback" not in err
    return err


def only_variant(report: dict, loop_name: str | None = None) -> dict:
    loops = report["loops"] if loop_name is None else [
        lp for lp in report["loops"] if lp["name"] == loop_name]
    assert len(loops) == 1
    return loops[0]["variants"][0]


def db(x: float) -> float:
    return 20.0 * math.log10(x)


def hz(w: float) -> float:
    return w / (2.0 * math.pi)


NUM = (int, float)
MARGIN_NUMBERS = (
    "gain_margin_db", "gain_margin_hz", "lower_gain_margin_db", "lower_gain_margin_hz",
    "phase_margin_deg", "crossover_hz", "delay_margin_s", "delay_margin_samples",
    "sensitivity_peak_db", "sensitivity_peak_hz", "complementary_peak_db",
    "complementary_peak_hz", "bandwidth_hz",
)


def _num_or_null(value: object) -> bool:
    return value is None or (isinstance(value, NUM) and not isinstance(value, bool))


def assert_contract(report: dict, code: int) -> None:
    """Every key of section 5 with its type, and the relations stated there."""
    assert report["tool"]["name"] == "ruleguard"
    assert isinstance(report["tool"]["version"], str)
    summary = report["summary"]
    for key in ("loops", "evaluations", "errors", "warnings", "notes", "waived"):
        assert isinstance(summary[key], int) and not isinstance(summary[key], bool), key
    assert isinstance(summary["result"], str)
    assert (summary["result"] == "fail") == (code == 1)
    assert summary["loops"] == len(report["loops"])
    # summary.evaluations counts (loop, variant) analyses
    assert summary["evaluations"] == sum(len(lp["variants"]) for lp in report["loops"])
    findings = report["findings"]
    for severity, key in (("error", "errors"), ("warning", "warnings"), ("note", "notes")):
        assert summary[key] == sum(1 for f in findings
                                   if f["severity"] == severity and not f["waived"]), key
    assert summary["waived"] == sum(1 for f in findings if f["waived"])
    for lp in report["loops"]:
        assert isinstance(lp["name"], str)
        assert lp["domain"] in ("continuous", "discrete")
        if lp["domain"] == "continuous":
            assert lp["sample_rate_hz"] is None
        else:
            assert isinstance(lp["sample_rate_hz"], NUM)
        assert isinstance(lp["analysed"], bool)
        analysis = lp["analysis"]
        for key in ("discretization", "total_delay_s", "notes"):
            assert key in analysis, key
        assert isinstance(analysis["notes"], list)
        if not lp["analysed"]:
            # a loop that cannot be analysed: empty variants and a finding saying why
            assert lp["variants"] == []
            assert any(f["loop"] == lp["name"] for f in findings)
            continue
        assert lp["variants"][0]["id"] == "nominal"
        assert len({v["id"] for v in lp["variants"]}) == len(lp["variants"])
        for variant in lp["variants"]:
            assert_variant(variant, lp)
    for f in findings:
        for key in ("rule", "severity", "loop", "variant", "message", "measured", "limit",
                    "unit", "frequency_hz", "location", "waived"):
            assert key in f, key
        assert f["severity"] in ("error", "warning", "note")
        assert isinstance(f["rule"], str) and isinstance(f["message"], str) and f["message"]
        assert isinstance(f["waived"], bool)
        assert _num_or_null(f["measured"]) and _num_or_null(f["limit"])
        assert _num_or_null(f["frequency_hz"])
        loc = f["location"]
        for key in ("file", "line", "column", "key"):
            assert key in loc, key
        if loc["file"] is not None and not loc["file"].startswith("<"):
            # relative to the manifest's folder, with '/'
            assert "\\" not in loc["file"] and not Path(loc["file"]).is_absolute()
            assert not loc["file"].startswith("..")


def assert_variant(variant: dict, lp: dict) -> None:
    assert isinstance(variant["id"], str)
    assert isinstance(variant["parameters"], dict)
    assert all(isinstance(v, NUM) for v in variant["parameters"].values())
    st = variant["stability"]
    for key in ("stable", "open_loop_unstable_poles", "ccw_encirclements",
                "closed_loop_unstable_poles"):
        assert key in st, key
    assert isinstance(st["stable"], bool)
    p, ccw, z = st["open_loop_unstable_poles"], st["ccw_encirclements"], \
        st["closed_loop_unstable_poles"]
    assert isinstance(p, int)
    if z is not None:
        # Z = N + P with N the clockwise count: closed = P - ccw
        assert z == p - ccw
    # stable exactly when closed_loop_unstable_poles is 0
    assert st["stable"] == (z == 0)
    m = variant["margins"]
    for key in MARGIN_NUMBERS:
        assert key in m and _num_or_null(m[key]), key
    for key in ("stable_gain_ranges_db", "crossovers", "disk_margin"):
        assert key in m, key
    ranges = m["stable_gain_ranges_db"]
    assert isinstance(ranges, list)
    flat: list[float] = []
    for i, (lo, hi) in enumerate(ranges):
        assert lo is not None or i == 0  # only the first interval is unbounded below
        if lo is not None:
            flat.append(lo)
        if hi is not None:
            flat.append(hi)
        if hi is None:
            assert i == len(ranges) - 1
    assert flat == sorted(flat) and len(set(flat)) == len(flat)  # increasing order
    for c in m["crossovers"]:
        assert isinstance(c["hz"], NUM) and isinstance(c["phase_margin_deg"], NUM)
    if m["crossovers"]:
        assert m["phase_margin_deg"] is not None and m["crossover_hz"] is not None
        assert any(math.isclose(c["phase_margin_deg"], m["phase_margin_deg"], rel_tol=1e-9)
                   and math.isclose(c["hz"], m["crossover_hz"], rel_tol=1e-9)
                   for c in m["crossovers"])
        # the crossover closest to -1 in angle: the smallest |PM|, sign kept
        assert abs(m["phase_margin_deg"]) == pytest.approx(
            min(abs(c["phase_margin_deg"]) for c in m["crossovers"]), rel=1e-9)
    else:
        # null when |L| never crosses 1
        assert m["phase_margin_deg"] is None and m["crossover_hz"] is None
    if not st["stable"]:
        # unstable: these are "not applicable"
        for key in ("gain_margin_db", "lower_gain_margin_db", "delay_margin_s",
                    "delay_margin_samples", "disk_margin"):
            assert m[key] is None, key
        return
    # stable: the interval containing 0 dB gives the gain margins
    around = [(lo, hi) for lo, hi in ranges
              if (lo is None or lo < 0.0) and (hi is None or hi > 0.0)]
    assert len(around) == 1, ranges
    lo, hi = around[0]
    assert _same(m["gain_margin_db"], hi) and _same(m["lower_gain_margin_db"], lo)
    if m["lower_gain_margin_db"] is not None:
        assert m["lower_gain_margin_db"] < 0.0
    # delay margin: min over crossovers of ((PM mod 360) in rad)/w_c
    if m["crossovers"]:
        expected = min(math.radians(c["phase_margin_deg"] % 360.0) / (2 * math.pi * c["hz"])
                       for c in m["crossovers"])
        assert m["delay_margin_s"] == pytest.approx(expected, rel=1e-6)
    else:
        assert m["delay_margin_s"] is None  # no crossover: unbounded
    if lp["domain"] == "continuous":
        assert m["delay_margin_samples"] is None
    elif m["delay_margin_s"] is not None:
        assert m["delay_margin_samples"] == pytest.approx(
            m["delay_margin_s"] * lp["sample_rate_hz"], rel=1e-9)
    disk = m["disk_margin"]
    if disk is not None:
        for key in ("alpha", "gain_range_db", "phase_deg", "hz"):
            assert key in disk, key
        alpha = disk["alpha"]
        lo_db, hi_db = disk["gain_range_db"]
        if alpha >= 2.0:
            assert lo_db is None and hi_db is None
        else:
            assert lo_db == pytest.approx(db((2 - alpha) / (2 + alpha)), rel=1e-9, abs=1e-12)
            assert hi_db == pytest.approx(db((2 + alpha) / (2 - alpha)), rel=1e-9, abs=1e-12)
        assert disk["phase_deg"] == pytest.approx(math.degrees(2 * math.atan(alpha / 2)),
                                                  rel=1e-9)


def _same(a: float | None, b: float | None) -> bool:
    if a is None or b is None:
        return a is None and b is None
    return math.isclose(a, b, rel_tol=1e-9, abs_tol=1e-12)


def simple_project(tmp_path: Path, kp: float, plant: str = "third", *, extra: str = "",
                   ruleset: str = "baseline", files: dict[str, str] | None = None) -> Path:
    contents = {
        "ruleguard.toml": manifest(loop("a.loop", plant, "c", extra=extra), ruleset=ruleset),
        "plants.toml": PLANTS,
        "ctl.toml": p_table("c", kp),
    }
    contents.update(files or {})
    return write(tmp_path, contents)


# --------------------------------------------- K/(s(s+1)(s+2)), continuous

def _third_crossover(k: float) -> float:
    # |L(jw)| = 1  <=>  w^2 (w^2+1)(w^2+4) = k^2, a cubic in x = w^2 (numpy.roots)
    roots = np.roots([1.0, 5.0, 4.0, -k * k])
    x = max(r.real for r in roots if abs(r.imag) < 1e-9 and r.real > 0)
    return math.sqrt(x)


def test_third_order_stable_margins_closed_form(tmp_path):
    # L = 3/(s(s+1)(s+2)). Routh-Hurwitz on s^3 + 3 s^2 + 2 s + K: stable iff
    # 0 < K < 6; at K = 6 the poles are +-j sqrt(2) (closed form), so the
    # gain margin is 6/3 = 2 (6.02 dB) at sqrt(2) rad/s, no lower limit.
    _, report, _ = check(simple_project(tmp_path, 3.0))
    v = only_variant(report)
    st, m = v["stability"], v["margins"]
    assert st == {**st, "stable": True, "open_loop_unstable_poles": 0,
                  "ccw_encirclements": 0, "closed_loop_unstable_poles": 0}
    assert m["gain_margin_db"] == pytest.approx(db(2.0), abs=1e-6)
    assert m["gain_margin_hz"] == pytest.approx(hz(math.sqrt(2.0)), rel=1e-6)
    assert m["lower_gain_margin_db"] is None and m["lower_gain_margin_hz"] is None
    assert m["stable_gain_ranges_db"] == [[None, pytest.approx(db(2.0), abs=1e-6)]]
    # crossover from the cubic above; PM = 180 - 90 - atan(w) - atan(w/2) deg
    wc = _third_crossover(3.0)
    pm = 90.0 - math.degrees(math.atan(wc) + math.atan(wc / 2))
    assert len(m["crossovers"]) == 1
    assert m["crossover_hz"] == pytest.approx(hz(wc), rel=1e-6)
    assert m["phase_margin_deg"] == pytest.approx(pm, abs=1e-5)
    assert m["delay_margin_s"] == pytest.approx(math.radians(pm) / wc, rel=1e-5)
    assert m["delay_margin_samples"] is None  # continuous loop
    # peaks and the balanced disk margin, against a dense numpy evaluation of
    # L(jw): Ms = max |1/(1+L)|, Mt = max |L/(1+L)|, and (Seiler, Packard &
    # Gahinet, "An introduction to disk margins", IEEE CSM 40(5), 2020, sigma = 0)
    # alpha = 1/max |S - 1/2| = 2/max |(1-L)/(1+L)|.
    w = np.logspace(-2, 2, 400001)
    s = 1j * w
    lw = 3.0 / (s * (s + 1) * (s + 2))
    assert m["sensitivity_peak_db"] == pytest.approx(db(np.max(np.abs(1 / (1 + lw)))), abs=1e-3)
    assert m["complementary_peak_db"] == pytest.approx(db(np.max(np.abs(lw / (1 + lw)))),
                                                       abs=1e-3)
    alpha = 2.0 / np.max(np.abs((1 - lw) / (1 + lw)))
    assert m["disk_margin"]["alpha"] == pytest.approx(alpha, rel=1e-4)
    # closed-loop -3 dB bandwidth: |T(jw)| = 1/sqrt(2) (T(0) = 1), numpy grid
    t = np.abs(lw / (1 + lw))
    assert m["bandwidth_hz"] == pytest.approx(hz(w[np.argmax(t < 1 / math.sqrt(2))]), rel=1e-3)


def test_third_order_unstable_nulls_and_encirclements(tmp_path):
    # K = 12 > 6: Routh's first column 1, 3, (6-12)/3 < 0, 12 has two sign
    # changes, so Z = 2 closed-loop poles in the right half plane; P = 0, so
    # ccw = P - Z = -2. The stable gain range is K < 6: [null, 20 log10(6/12)].
    _, report, _ = check(simple_project(tmp_path, 12.0))
    v = only_variant(report)
    st, m = v["stability"], v["margins"]
    assert st["stable"] is False
    assert st["open_loop_unstable_poles"] == 0
    assert st["closed_loop_unstable_poles"] == 2
    assert st["ccw_encirclements"] == -2
    for key in ("gain_margin_db", "lower_gain_margin_db", "delay_margin_s",
                "delay_margin_samples", "disk_margin"):
        assert m[key] is None, key
    assert m["stable_gain_ranges_db"] == [[None, pytest.approx(db(0.5), abs=1e-6)]]
    # crossovers are still given, with their negative phase margins
    wc = _third_crossover(12.0)
    pm = 90.0 - math.degrees(math.atan(wc) + math.atan(wc / 2))
    assert pm < 0
    assert m["crossover_hz"] == pytest.approx(hz(wc), rel=1e-6)
    assert m["phase_margin_deg"] == pytest.approx(pm, abs=1e-5)
    assert m["sensitivity_peak_db"] is not None
    assert any(f["rule"] == "stability.closed-loop" and f["severity"] == "error"
               for f in report["findings"])


def test_curve_through_minus_one_is_not_stable(tmp_path):
    # K = 6: L(j sqrt 2) = 6/(j sqrt2 (1 + j sqrt2)(2 + j sqrt2)) = -1 exactly
    # (Routh-Hurwitz boundary above): not stable, closed-loop count null, a note.
    _, report, _ = check(simple_project(tmp_path, 6.0))
    lp = report["loops"][0]
    v = lp["variants"][0]
    assert v["stability"]["stable"] is False
    assert v["stability"]["closed_loop_unstable_poles"] is None
    notes = list(v.get("notes", [])) + list(lp["analysis"]["notes"])
    notes += [f["message"] for f in report["findings"] if f["severity"] == "note"]
    assert notes, "a curve through -1 must come with a note"


def test_unstable_open_loop_lower_gain_margin(tmp_path):
    # L = 4/(s - 1): closed-loop pole s = 1 - K, stable iff K > 1 (closed
    # form). P = 1, so one ccw encirclement is needed and made. Lower gain
    # margin 20 log10(1/4) at w = 0; no upper limit. Crossover |4/(jw-1)| = 1
    # at w = sqrt(15), PM = 180 + arg L = atan(sqrt 15) deg.
    _, report, _ = check(simple_project(tmp_path, 4.0, "unstable1"))
    v = only_variant(report)
    st, m = v["stability"], v["margins"]
    assert (st["stable"], st["open_loop_unstable_poles"], st["ccw_encirclements"],
            st["closed_loop_unstable_poles"]) == (True, 1, 1, 0)
    assert m["gain_margin_db"] is None and m["gain_margin_hz"] is None
    assert m["lower_gain_margin_db"] == pytest.approx(db(0.25), abs=1e-6)
    assert m["lower_gain_margin_hz"] == pytest.approx(0.0, abs=1e-9)
    assert m["stable_gain_ranges_db"] == [[pytest.approx(db(0.25), abs=1e-6), None]]
    assert m["crossover_hz"] == pytest.approx(hz(math.sqrt(15.0)), rel=1e-6)
    assert m["phase_margin_deg"] == pytest.approx(math.degrees(math.atan(math.sqrt(15))),
                                                  abs=1e-5)


def test_conditionally_stable_range_against_numpy_roots(tmp_path):
    # L = K (s+1)^3 / (s^3 (s/10+1)^3): unstable at low and at high gain.
    # Each reported interval is checked against closed-loop poles from
    # numpy.roots of den + c*num (independent computation): stable at the
    # interval's inner points, unstable just outside its ends.
    plants = PLANTS + """
[plants.cond]
kind = "zero_pole_gain"
gain = 1000.0
zeros = [-1.0, -1.0, -1.0]
poles = [0.0, 0.0, 0.0, -10.0, -10.0, -10.0]
"""
    _, report, _ = check(simple_project(tmp_path, 1.0, "cond", files={"plants.toml": plants}))
    m = only_variant(report)["margins"]
    num = np.poly([-1.0, -1.0, -1.0]) * 1000.0
    den = np.poly([0.0, 0.0, 0.0, -10.0, -10.0, -10.0])

    def stable(c: float) -> bool:
        return bool(np.all(np.roots(np.polyadd(den, c * num)).real < 0))

    assert stable(1.0)
    assert m["gain_margin_db"] is not None and m["lower_gain_margin_db"] is not None
    for lo, hi in m["stable_gain_ranges_db"]:
        inner = [x for x in (lo, hi) if x is not None]
        step = 1.0 if lo is not None else -1.0
        mid = sum(inner) / len(inner) if len(inner) == 2 else inner[0] + step
        assert stable(10 ** (mid / 20))
        if lo is not None:
            assert stable(10 ** ((lo + 0.01) / 20)) and not stable(10 ** ((lo - 0.01) / 20))
        if hi is not None:
            assert stable(10 ** ((hi - 0.01) / 20)) and not stable(10 ** ((hi + 0.01) / 20))


def test_required_ccw_does_not_change_stable(tmp_path):
    # The stable K = 3 loop (above) with required_ccw = 1: still stable,
    # stability.encirclements reports the mismatch.
    _, report, _ = check(simple_project(tmp_path, 3.0, extra="required_ccw = 1\n"))
    assert only_variant(report)["stability"]["stable"] is True
    assert any(f["rule"] == "stability.encirclements" for f in report["findings"])
    assert not any(f["rule"] == "stability.closed-loop" for f in report["findings"])


# -------------------------------------------------- dead time, integrator

def test_integrator_dead_time_closed_form(tmp_path):
    # L = K e^{-s tau}/s, K = 1, tau = 0.5: w_c = K = 1 rad/s, PM = 90 deg -
    # w_c tau (rad -> deg); phase -180 where pi/2 + w tau = pi, w = pi/(2 tau),
    # GM = w/K = pi (closed form); stable iff K tau < pi/2.
    _, report, _ = check(simple_project(tmp_path, 1.0, "int_dead"))
    lp = report["loops"][0]
    m = lp["variants"][0]["margins"]
    assert lp["variants"][0]["stability"]["stable"] is True
    assert m["crossover_hz"] == pytest.approx(hz(1.0), rel=1e-6)
    assert m["phase_margin_deg"] == pytest.approx(90.0 - math.degrees(0.5), abs=1e-5)
    assert m["delay_margin_s"] == pytest.approx(math.pi / 2 - 0.5, rel=1e-6)
    assert m["gain_margin_db"] == pytest.approx(db(math.pi), abs=1e-5)
    assert m["gain_margin_hz"] == pytest.approx(hz(math.pi), rel=1e-6)
    assert lp["analysis"]["total_delay_s"] == pytest.approx(0.5)


def test_corners_of_a_dead_time_family(tmp_path):
    # vary delay_s in [0.2, 2.0] with K = 1: stable iff tau < pi/2 (above), so
    # corner-1 (min) is stable with PM = 90 - deg(0.2) and corner-2 (max) not.
    plants = PLANTS + """
[plants.fam]
kind = "integrator_dead_time"
gain = 1.0
delay_s = 0.5
vary = { delay_s = { min = 0.2, max = 2.0 } }
"""
    code, report, _ = check(simple_project(tmp_path, 1.0, "fam", files={"plants.toml": plants}))
    variants = report["loops"][0]["variants"]
    assert [v["id"] for v in variants] == ["nominal", "corner-1", "corner-2"]
    assert [v["parameters"] for v in variants] == [
        {"fam.delay_s": 0.5}, {"fam.delay_s": 0.2}, {"fam.delay_s": 2.0}]
    assert [v["stability"]["stable"] for v in variants] == [True, True, False]
    assert variants[1]["margins"]["phase_margin_deg"] == pytest.approx(
        90.0 - math.degrees(0.2), abs=1e-5)
    assert report["summary"]["evaluations"] == 3
    assert code == 1
    bad_finding = [f for f in report["findings"] if f["rule"] == "stability.closed-loop"]
    assert bad_finding and bad_finding[0]["variant"] == "corner-2"


# ------------------------------------------------------ K/(z-1), discrete

DISCRETE_PLANTS = PLANTS + """
[plants.ramp50]          # 50/s: its ZOH equivalent at h = 0.01 s is 0.5/(z - 1)
kind = "integrator_dead_time"
gain = 50.0
delay_s = 0.0
"""


def _k_over_z_minus_1(m: dict, k: float, fs: float) -> None:
    # L = K/(z-1), 0 < K < 2: closed-loop pole z = 1 - K (closed form), so
    # stable for 0 < K < 2. At z = -1 (the Nyquist frequency) L = -K/2: the
    # gain margin is 2/K at fs/2. |e^{jt} - 1| = 2 sin(t/2) = K gives the
    # crossover t_c = 2 asin(K/2); arg(e^{jt}-1) = 90 deg + t/2, so PM = 90 deg
    # - t_c/2 and the delay margin is PM/t_c samples.
    theta = 2 * math.asin(k / 2)
    pm = 90.0 - math.degrees(theta) / 2
    assert m["gain_margin_db"] == pytest.approx(db(2 / k), abs=1e-6)
    assert m["gain_margin_hz"] == pytest.approx(fs / 2, rel=1e-6)
    assert m["lower_gain_margin_db"] is None
    assert m["stable_gain_ranges_db"] == [[None, pytest.approx(db(2 / k), abs=1e-6)]]
    assert m["crossover_hz"] == pytest.approx(theta * fs / (2 * math.pi), rel=1e-6)
    assert m["phase_margin_deg"] == pytest.approx(pm, abs=1e-5)
    assert m["delay_margin_samples"] == pytest.approx(math.radians(pm) / theta, rel=1e-5)
    assert m["delay_margin_s"] == pytest.approx(math.radians(pm) / theta / fs, rel=1e-5)


def test_k_over_z_minus_1_from_a_z_domain_controller(tmp_path):
    # controller 0.5/(z - 1) ([0.5]/[1, -0.5] style of section 3), plant 1.
    ctl = '[c]\nkind = "transfer_function"\ndomain = "z"\nnumerator = [0.5]\n' \
          'denominator = [1.0, -1.0]\n'
    folder = simple_project(tmp_path, 1.0, "unit", extra="sample_rate_hz = 100.0\n",
                            files={"ctl.toml": ctl})
    _, report, _ = check(folder)
    lp = report["loops"][0]
    assert lp["domain"] == "discrete" and lp["sample_rate_hz"] == 100.0
    v = lp["variants"][0]
    assert v["stability"]["stable"] is True
    assert v["stability"]["closed_loop_unstable_poles"] == 0
    _k_over_z_minus_1(v["margins"], 0.5, 100.0)


def test_zoh_integrator_is_k_over_z_minus_1(tmp_path):
    # ZOH equivalent of g/s at h: g h/(z - 1) (Franklin, Powell & Workman,
    # Digital Control of Dynamic Systems, 3rd ed. 1998, table of ZOH
    # equivalents; from memory). g = 50, h = 0.01 s, kp = 1: K = 0.5.
    folder = simple_project(tmp_path, 1.0, "ramp50", extra="sample_rate_hz = 100.0\n",
                            files={"plants.toml": DISCRETE_PLANTS})
    _, report, _ = check(folder)
    _k_over_z_minus_1(only_variant(report)["margins"], 0.5, 100.0)


def test_k_over_z_minus_1_unstable(tmp_path):
    # K = 3: closed-loop pole z = 1 - 3 = -2, outside the unit circle: Z = 1,
    # P = 0 (the pole at z = 1 is on the boundary), ccw = -1; the gain may be
    # lowered to 2: stable_gain_ranges_db = [[null, 20 log10(2/3)]].
    folder = simple_project(tmp_path, 6.0, "ramp50", extra="sample_rate_hz = 100.0\n",
                            files={"plants.toml": DISCRETE_PLANTS})
    _, report, _ = check(folder)
    v = only_variant(report)
    assert (v["stability"]["stable"], v["stability"]["closed_loop_unstable_poles"],
            v["stability"]["ccw_encirclements"]) == (False, 1, -1)
    assert v["margins"]["stable_gain_ranges_db"] == [[None, pytest.approx(db(2 / 3),
                                                                          abs=1e-6)]]
    assert v["margins"]["delay_margin_samples"] is None


def test_total_delay_of_a_discrete_loop(tmp_path):
    # plant delay_s + sensor delay_s + delay_samples/sample_rate_hz (section 1)
    plants = PLANTS + """
[plants.slow]
kind = "integrator_dead_time"
gain = 10.0
delay_s = 0.002

[plants.sense]
kind = "first_order_dead_time"
gain = 1.0
time_constant_s = 0.0001
delay_s = 0.001
"""
    folder = simple_project(
        tmp_path, 1.0, "slow",
        extra='sample_rate_hz = 1000.0\ndelay_samples = 1.5\nsensor = "sense"\n',
        files={"plants.toml": plants})
    _, report, _ = check(folder)
    lp = report["loops"][0]
    assert lp["analysis"]["total_delay_s"] == pytest.approx(0.002 + 0.001 + 1.5 / 1000.0)
    assert lp["analysed"] is True


# ------------------------------------------------------ variants (section 2)

VARIANT_PLANTS = """\
[plants.zeta]            # outer plant g/s, varied gain
kind = "zero_pole_gain"
gain = 2.0
zeros = []
poles = [0.0]
vary = { gain = { min = 1.0, max = 3.0 } }

[plants.alpha]           # sensor: a static gain k
kind = "transfer_function"
numerator = ["k"]
denominator = [1.0]
parameters = { k = 1.0 }
vary = { k = { min = 0.9, max = 1.1 } }

[plants.mid]             # inner plant 1/(s + a)
kind = "transfer_function"
numerator = [1.0]
denominator = [1.0, "a"]
parameters = { a = 1.5 }
vary = { a = { min = 1.0, max = 2.0 } }
"""


def test_corner_order_and_qualified_names(tmp_path):
    # Outer loop: plant zeta, sensor alpha, inner loop with plant mid. Its
    # variants cover alpha.k, mid.a and zeta.gain (sorted alphabetically,
    # although declared zeta, alpha, mid), corners in itertools.product order.
    loops = (loop("in.loop", "mid", "inner") +
             loop("out.loop", "zeta", "outer", extra='sensor = "alpha"\ninner = "in.loop"\n'))
    folder = write(tmp_path, {
        "ruleguard.toml": manifest(loops),
        "plants.toml": VARIANT_PLANTS,
        "ctl.toml": p_table("inner", 10.0) + p_table("outer", 1.0),
    })
    _, report, _ = check(folder)
    by_name = {lp["name"]: lp for lp in report["loops"]}
    outer = by_name["out.loop"]["variants"]
    names = ["alpha.k", "mid.a", "zeta.gain"]
    bounds = {"alpha.k": (0.9, 1.1), "mid.a": (1.0, 2.0), "zeta.gain": (1.0, 3.0)}
    assert outer[0]["id"] == "nominal"
    assert outer[0]["parameters"] == {"alpha.k": 1.0, "mid.a": 1.5, "zeta.gain": 2.0}
    expected = [dict(zip(names, combo, strict=True))
                for combo in itertools.product(*[bounds[n] for n in names])]
    assert [v["id"] for v in outer[1:]] == [f"corner-{i}" for i in range(1, 9)]
    assert [v["parameters"] for v in outer[1:]] == expected
    assert outer[1]["parameters"] == {n: bounds[n][0] for n in names}  # corner-1 all minima
    inner = by_name["in.loop"]["variants"]
    assert [v["parameters"] for v in inner] == [{"mid.a": 1.5}, {"mid.a": 1.0}, {"mid.a": 2.0}]
    assert report["summary"]["evaluations"] == 9 + 3
    # the variant parameters reach the model: the loop gain 10 g k a-free at
    # low frequency, L ~ 10 g k / (s (s + a + 10)) * ... -> crossover changes
    wc = {v["id"]: v["margins"]["crossover_hz"] for v in outer}
    assert wc["corner-1"] < wc["nominal"] < wc["corner-8"]


def test_latin_hypercube_strata_and_reproducibility(tmp_path):
    plants = PLANTS + """
[plants.lhs]
kind = "transfer_function"
numerator = ["b"]
denominator = [1.0, "a"]
parameters = { a = 2.0, b = 1.0 }
vary = { a = { min = 1.0, max = 4.0 }, b = { min = 0.01, max = 100.0, scale = "log" } }
"""
    n = 8

    def run_with(seed: int, sub: str) -> list[dict]:
        folder = write(tmp_path / sub, {
            "ruleguard.toml": manifest(loop("a.loop", "lhs", "c"),
                                       variants=f"{{ samples = {n}, seed = {seed} }}"),
            "plants.toml": plants, "ctl.toml": p_table("c", 1.0)})
        _, report, _ = check(folder)
        return report["loops"][0]["variants"]

    first, again, other = run_with(7, "a"), run_with(7, "b"), run_with(8, "c")
    assert [v["id"] for v in first] == ["nominal"] + [f"sample-{i}" for i in range(1, n + 1)]
    assert first[0]["parameters"] == {"lhs.a": 2.0, "lhs.b": 1.0}
    assert [v["parameters"] for v in first] == [v["parameters"] for v in again]
    assert [v["parameters"] for v in first] != [v["parameters"] for v in other]
    for variants in (first, other):
        a = np.array([v["parameters"]["lhs.a"] for v in variants[1:]])
        b = np.array([v["parameters"]["lhs.b"] for v in variants[1:]])
        # one sample per stratum: linear strata of [1, 4], log strata of [0.01, 100]
        assert sorted(np.floor((a - 1.0) / 3.0 * n).astype(int)) == list(range(n))
        assert sorted(np.floor((np.log10(b) + 2.0) / 4.0 * n).astype(int)) == list(range(n))


# ------------------------------------------- every kind (sections 2 and 3)

RESONANT = """\
[plants.tf]              # 25/(s^2 + 0.4 s + 25): w = 5 rad/s, zeta = 0.04
kind = "transfer_function"
numerator = [25.0]
denominator = [1.0, 0.4, 25.0]

[plants.so]
kind = "second_order"
gain = 1.0
freq_hz = "5/(2*pi)"
damping = 0.04

[plants.factored_pair]
kind = "zero_pole_gain"
gain = 25.0
zeros = []
poles = [{ re = -0.2, im = "sqrt(25 - 0.04)" }]

[plants.factored_fd]
kind = "zero_pole_gain"
gain = 25.0
zeros = []
poles = [{ freq_hz = "5/(2*pi)", damping = 0.04 }]

[plants.ss]
kind = "state_space"
a = [[0.0, 1.0], [-25.0, -0.4]]
b = [[0.0], [1.0]]
c = [[25.0, 0.0]]
d = [[0.0]]
"""


def test_plant_kinds_of_one_resonance_agree_with_closed_form(tmp_path):
    # L = 2 * 25/(s^2 + 0.4 s + 25). |L| = 1: (25 - w^2)^2 + 0.16 w^2 = 2500,
    # x = w^2: x^2 - 49.84 x - 1875 = 0 (closed form); PM = 180 - atan2(0.4 w,
    # 25 - w^2); phase never reaches -180: no gain margin (null = unbounded).
    kinds = ["tf", "so", "factored_pair", "factored_fd", "ss"]
    loops = "".join(loop(f"k.{k}", k, "c") for k in kinds)
    folder = write(tmp_path, {"ruleguard.toml": manifest(loops), "plants.toml": RESONANT,
                              "ctl.toml": p_table("c", 2.0)})
    _, report, _ = check(folder)
    x = (49.84 + math.sqrt(49.84 ** 2 + 4 * 1875)) / 2
    wc = math.sqrt(x)
    pm = 180.0 - math.degrees(math.atan2(0.4 * wc, 25 - x))
    for k in kinds:
        m = only_variant(report, f"k.{k}")["margins"]
        assert m["crossover_hz"] == pytest.approx(hz(wc), rel=1e-6), k
        assert m["phase_margin_deg"] == pytest.approx(pm, abs=1e-4), k
        assert m["gain_margin_db"] is None and m["lower_gain_margin_db"] is None, k
        assert m["stable_gain_ranges_db"] == [[None, None]], k


def _margins_equal(a: dict, b: dict, label: str) -> None:
    for key in ("gain_margin_db", "gain_margin_hz", "phase_margin_deg", "crossover_hz",
                "sensitivity_peak_db", "complementary_peak_db"):
        if a[key] is None or b[key] is None:
            assert a[key] is None and b[key] is None, (label, key)
        else:
            assert a[key] == pytest.approx(b[key], rel=1e-6, abs=1e-9), (label, key)


def test_physical_plant_kinds_match_their_formulas(tmp_path):
    # dc_motor, speed: Kt/((L s + R)(J s + b) + Kt^2); current: (J s + b)/(...)
    # (armature circuit + rigid rotor; Franklin, Powell & Emami-Naeini,
    # Feedback Control of Dynamic Systems, DC motor model; from memory).
    # two_mass, torque in: motor speed (J_l s^2 + c s + k)/(s (J_m J_l s^2 +
    # (J_m + J_l)(c s + k))), load speed (c s + k)/(same) (Newton's law on
    # both inertias, common practice). first_order_dead_time gain e^{-Ts}/(tau s+1).
    # Each is compared with a transfer_function written from these formulas.
    plants = """\
[plants.motor_w]
kind = "dc_motor"
resistance_ohm = 1.2
inductance_h = 0.005
torque_constant_nm_per_a = 0.08
inertia_kg_m2 = 0.0002
friction_nm_s_per_rad = 0.0001
output = "speed"

[plants.motor_w_tf]
kind = "transfer_function"
numerator = ["Kt"]
denominator = ["L*J", "L*b + R*J", "R*b + Kt**2"]
parameters = { R = 1.2, L = 0.005, Kt = 0.08, J = 0.0002, b = 0.0001 }

[plants.motor_i]
kind = "dc_motor"
resistance_ohm = 1.2
inductance_h = 0.005
torque_constant_nm_per_a = 0.08
inertia_kg_m2 = 0.0002
friction_nm_s_per_rad = 0.0001
output = "current"

[plants.motor_i_tf]
kind = "transfer_function"
numerator = ["J", "b"]
denominator = ["L*J", "L*b + R*J", "R*b + Kt**2"]
parameters = { R = 1.2, L = 0.005, Kt = 0.08, J = 0.0002, b = 0.0001 }

[plants.shaft_m]
kind = "two_mass"
inertia_motor_kg_m2 = 0.001
inertia_load_kg_m2 = 0.004
stiffness_nm_per_rad = 50.0
damping_nm_s_per_rad = 0.01
output = "motor_speed"

[plants.shaft_m_tf]
kind = "transfer_function"
numerator = ["Jl", "c", "k"]
denominator = ["Jm*Jl", "(Jm + Jl)*c", "(Jm + Jl)*k", 0.0]
parameters = { Jm = 0.001, Jl = 0.004, k = 50.0, c = 0.01 }

[plants.shaft_l]
kind = "two_mass"
inertia_motor_kg_m2 = 0.001
inertia_load_kg_m2 = 0.004
stiffness_nm_per_rad = 50.0
damping_nm_s_per_rad = 0.01
output = "load_speed"

[plants.shaft_l_tf]
kind = "transfer_function"
numerator = ["c", "k"]
denominator = ["Jm*Jl", "(Jm + Jl)*c", "(Jm + Jl)*k", 0.0]
parameters = { Jm = 0.001, Jl = 0.004, k = 50.0, c = 0.01 }

[plants.fodt]
kind = "first_order_dead_time"
gain = 2.0
time_constant_s = 1.0
delay_s = 0.5

[plants.fodt_tf]
kind = "transfer_function"
numerator = [2.0]
denominator = [1.0, 1.0]
delay_s = 0.5
"""
    pairs = {"motor_w": 2.0, "motor_i": 20.0, "shaft_m": 0.05, "shaft_l": 0.05, "fodt": 1.0}
    loops, ctl = "", ""
    for name, kp in pairs.items():
        ctl += p_table(f"c_{name}", kp)
        loops += loop(f"{name}.a", name, f"c_{name}") + loop(f"{name}.b", f"{name}_tf",
                                                            f"c_{name}")
    folder = write(tmp_path, {"ruleguard.toml": manifest(loops), "plants.toml": plants,
                              "ctl.toml": ctl})
    _, report, _ = check(folder)
    for name in pairs:
        a = only_variant(report, f"{name}.a")
        b = only_variant(report, f"{name}.b")
        assert a["stability"] == b["stability"], name
        _margins_equal(a["margins"], b["margins"], name)
    # first_order_dead_time: phase -180 where atan(w) + 0.5 w = pi (scipy
    # brentq, independent); GM = sqrt(1 + w^2)/2.
    from scipy.optimize import brentq

    w180 = brentq(lambda w: math.atan(w) + 0.5 * w - math.pi, 0.1, 10.0)
    m = only_variant(report, "fodt.a")["margins"]
    assert m["gain_margin_db"] == pytest.approx(db(math.sqrt(1 + w180 ** 2) / 2), abs=1e-5)
    assert m["gain_margin_hz"] == pytest.approx(hz(w180), rel=1e-6)


def _csv_of(f_hz: np.ndarray, g: np.ndarray, *, linear: bool = False) -> str:
    """A measured-response CSV of the values ``g`` at ``f_hz`` (dB, or linear)."""
    rows = ["freq_hz,magnitude_db,phase_deg"]
    # phase given wrapped to (-180, 180]: the reader unwraps it
    rows += [
        f"{float(f)!r},{float(abs(x) if linear else 20 * np.log10(abs(x)))!r},"
        f"{math.degrees(cmath.phase(x))!r}"
        for f, x in zip(f_hz, g, strict=True)
    ]
    return "\n".join(rows) + "\n"


def _sweep_csv(f_hz: np.ndarray, k: float = 1.0) -> str:
    s = 2j * np.pi * f_hz
    return _csv_of(f_hz, k / (s * (s + 1) * (s + 2)))


def test_measured_response_kind(tmp_path):
    # Data of 1/(s(s+1)(s+2)) from 0.001 to 100 Hz, integrators = 1, kp = 3:
    # GM 6.02 dB at sqrt(2) rad/s (Routh-Hurwitz, above), within the
    # log-frequency interpolation error of 2000 points.
    plants = PLANTS + """
[plants.swept]
kind = "measured_response"
file = "sweep.csv"
unstable_poles = 0
integrators = 1

[plants.swept_short]
kind = "measured_response"
file = "short.csv"
unstable_poles = 0
integrators = 1
"""
    loops = loop("m.full", "swept", "c") + loop("m.short", "swept_short", "c")
    folder = write(tmp_path, {
        "ruleguard.toml": manifest(loops), "plants.toml": plants,
        "ctl.toml": p_table("c", 3.0),
        "sweep.csv": _sweep_csv(np.logspace(-3, 2, 2000)),
        # ends at 0.3 Hz, where |L| = 3/(1.885 * 2.134 * 2.75) ~ -11 dB: not below -20 dB
        "short.csv": _sweep_csv(np.logspace(-3, math.log10(0.3), 600)),
    })
    _, report, _ = check(folder)
    v = only_variant(report, "m.full")
    assert v["stability"]["stable"] is True
    assert v["stability"]["open_loop_unstable_poles"] == 0
    assert v["margins"]["gain_margin_db"] == pytest.approx(db(2.0), abs=0.02)
    assert v["margins"]["gain_margin_hz"] == pytest.approx(hz(math.sqrt(2)), rel=1e-3)
    short = [lp for lp in report["loops"] if lp["name"] == "m.short"][0]
    full = [lp for lp in report["loops"] if lp["name"] == "m.full"][0]
    warned_short = [f for f in report["findings"]
                    if f["loop"] == "m.short" and f["severity"] == "warning"]
    warned_full = [f for f in report["findings"]
                   if f["loop"] == "m.full" and f["severity"] == "warning"]
    # the report warns when |L| at the highest measured frequency is not below -20 dB
    assert len(warned_short) > len(warned_full) or (
        len(short["analysis"]["notes"]) > len(full["analysis"]["notes"]))


CONTROLLERS = """\
[par]
kind = "pid"
form = "parallel"
kp = 2.0
ki = 1.0
kd = 0.5
derivative_filter_hz = 6.366197723675814  # 40/(2 pi)

[std]
kind = "pid"
form = "standard"
gain = 2.0
ti_s = 2.0
td_s = 0.25
n = 10.0

[ser]
kind = "pid"
form = "series"
gain = 2.0
ti_s = 2.0
td_s = 0.25
n = 10.0

[ser_tf]                 # 2 (2 s + 1)(0.25 s + 1) / (2 s (0.025 s + 1))
kind = "transfer_function"
numerator = [1.0, 4.5, 2.0]
denominator = [0.05, 2.0, 0.0]

[ll]
kind = "lead_lag"
gain = 1.5
zero_hz = 0.15915494309189535  # 1/(2 pi)
pole_hz = 1.5915494309189535  # 10/(2 pi)

[ll_tf]                  # 1.5 (s + 1)/(s/10 + 1)
kind = "transfer_function"
numerator = [1.5, 1.5]
denominator = [0.1, 1.0]

[filt]
kind = "pid"
kp = 1.0
ki = 0.0

[[filt.filters]]
kind = "lowpass1"
cutoff_hz = 3.183098861837907  # 20/(2 pi)

[[filt.filters]]
kind = "lowpass2"
cutoff_hz = 4.7746482927568605  # 30/(2 pi)
damping = 0.5

[[filt.filters]]
kind = "notch"
center_hz = 0.7957747154594768  # 5/(2 pi)
width_hz = 0.15915494309189535  # 1/(2 pi)
depth_db = 20.0

[filt_tf]                # product of the three filter formulas of section 3
kind = "transfer_function"
numerator = NUM
denominator = DEN
"""


def test_controller_and_filter_kinds_match_their_formulas(tmp_path):
    # Section 3 formulas. standard(gain 2, ti 2, td 0.25, n 10) equals parallel
    # kp = 2, ki = gain/ti = 1, kd = gain td = 0.5, filter pole n/td = 40
    # rad/s. Series and lead-lag expanded by hand (comments in the table);
    # the filters' product built with numpy.polymul: lowpass1 20/(s + 20),
    # lowpass2 900/(s^2 + 30 s + 900), notch with zeta_p = 1/(2*5) = 0.1,
    # zeta_z = 0.1 * 10^(-20/20) = 0.01: (s^2 + 0.1 s + 25)/(s^2 + s + 25).
    num = np.polymul([20.0], np.polymul([900.0], [1.0, 0.1, 25.0]))
    den = np.polymul([1.0, 20.0], np.polymul([1.0, 30.0, 900.0], [1.0, 1.0, 25.0]))
    ctl = CONTROLLERS.replace("NUM", json.dumps(list(num))).replace("DEN",
                                                                      json.dumps(list(den)))
    plants = PLANTS + """
[plants.plant]           # 1/((s + 1)(s + 3))
kind = "zero_pole_gain"
gain = 1.0
zeros = []
poles = [-1.0, -3.0]
"""
    # the parallel PID against the plain 1/(s(s+1)(s+2)): same for standard
    names = ["par", "std", "ser", "ser_tf", "ll", "ll_tf", "filt", "filt_tf"]
    loops = "".join(loop(f"c.{n}", "plant", n) for n in names)
    folder = write(tmp_path, {"ruleguard.toml": manifest(loops), "plants.toml": plants,
                              "ctl.toml": ctl})
    _, report, _ = check(folder)
    for a, b in (("par", "std"), ("ser", "ser_tf"), ("ll", "ll_tf"), ("filt", "filt_tf")):
        va, vb = only_variant(report, f"c.{a}"), only_variant(report, f"c.{b}")
        assert report["loops"][names.index(a)]["analysed"], a
        assert va["stability"] == vb["stability"], a
        _margins_equal(va["margins"], vb["margins"], a)
    # the parallel PID by direct evaluation: |C G| = 1 and PM with numpy on a grid
    w = np.logspace(-2, 3, 200001)
    s = 1j * w
    lw = (2.0 + 1.0 / s + 0.5 * s / (s / 40 + 1)) / ((s + 1) * (s + 3))
    i = np.argmin(np.abs(np.abs(lw) - 1))
    m = only_variant(report, "c.par")["margins"]
    assert m["crossover_hz"] == pytest.approx(hz(w[i]), rel=1e-3)
    assert m["phase_margin_deg"] == pytest.approx(180 + math.degrees(np.angle(lw[i])), abs=0.05)


def test_discrete_blocks_biquad_and_discretizations(tmp_path):
    # biquad (b0 + b1 z^-1 + b2 z^-2)/(1 + a1 z^-1 + a2 z^-2) = (b0 z^2 + b1 z +
    # b2)/(z^2 + a1 z + a2): the same as a z transfer function (section 3);
    # a[0] = 2 is normalised to 1.
    ctl = """\
[bq]
kind = "pid"
kp = 1.0
ki = 0.0

[[bq.filters]]
kind = "biquad"
b = [0.4, 0.8, 0.4]
a = [2.0, -0.6, 0.2]

[bq_tf]
kind = "transfer_function"
domain = "z"
numerator = [0.2, 0.4, 0.2]
denominator = [1.0, -0.3, 0.1]
"""
    methods = ["tustin", "tustin_prewarp", "backward_euler", "forward_euler"]
    for method in methods:
        ctl += (f'\n[d_{method}]\nkind = "pid"\nkp = 1.0\nki = 20.0\n'
                f'discretization = "{method}"\nnumeric_format = "float32"\n'
                f'[[d_{method}.filters]]\nkind = "lowpass2"\ncutoff_hz = 20.0\n'
                f'damping = 0.7\n')
    ctl += '\n[fx]\nkind = "pid"\nkp = 0.5\nki = 0.0\nnumeric_format = "q2.14"\n'
    plants = PLANTS + '\n[plants.lag]\nkind = "zero_pole_gain"\ngain = 5.0\nzeros = []\n' \
                      'poles = [-5.0]\n'
    rate = "sample_rate_hz = 1000.0\n"
    loops = (loop("z.bq", "lag", "bq", extra=rate) + loop("z.tf", "lag", "bq_tf", extra=rate)
             + "".join(loop(f"z.{m}", "lag", f"d_{m}", extra=rate) for m in methods)
             + loop("z.fx", "lag", "fx", extra=rate))
    folder = write(tmp_path, {"ruleguard.toml": manifest(loops), "plants.toml": plants,
                              "ctl.toml": ctl})
    _, report, _ = check(folder)
    a, b = only_variant(report, "z.bq"), only_variant(report, "z.tf")
    assert a["stability"] == b["stability"]
    _margins_equal(a["margins"], b["margins"], "biquad")
    by_name = {lp["name"]: lp for lp in report["loops"]}
    for method in methods:
        lp = by_name[f"z.{method}"]
        assert lp["analysed"], method
        disc = lp["analysis"]["discretization"]
        # the method used is reported for every block; a PID without
        # prewarp_hz gets plain Tustin, the low-pass is prewarped at its cutoff
        assert disc["controller"] == ("tustin" if method == "tustin_prewarp" else method)
        assert disc["filters"] == [method]
    assert by_name["z.fx"]["analysed"]


def test_unfiltered_derivative_is_not_analysed(tmp_path):
    # section 3: an unfiltered derivative in a continuous loop is improper:
    # analysed false, empty variants, controller.derivative-filter says why.
    ctl = '[c]\nkind = "pid"\nkp = 1.0\nki = 0.0\nkd = 0.1\n'
    _, report, _ = check(simple_project(tmp_path, 1.0, files={"ctl.toml": ctl}))
    lp = report["loops"][0]
    assert lp["analysed"] is False and lp["variants"] == []
    assert any(f["rule"] == "controller.derivative-filter" for f in report["findings"])


def test_unstable_inner_loop_makes_the_outer_loop_not_analysed(tmp_path):
    # inner loop 12/(s(s+1)(s+2)) is unstable (Routh-Hurwitz, K > 6)
    loops = loop("in.loop", "third", "inner") + loop("out.loop", "int_dead", "outer",
                                                     extra='inner = "in.loop"\n')
    folder = write(tmp_path, {"ruleguard.toml": manifest(loops), "plants.toml": PLANTS,
                              "ctl.toml": p_table("inner", 12.0) + p_table("outer", 0.1)})
    _, report, _ = check(folder)
    outer = [lp for lp in report["loops"] if lp["name"] == "out.loop"][0]
    assert outer["analysed"] is False and outer["variants"] == []
    assert any(f["loop"] == "out.loop" for f in report["findings"])


# ------------------------------------------------- manifest (section 1)

def test_map_and_scale_of_a_firmware_file(tmp_path):
    # field = raw value * scale: kp = 12 * 0.25 = 3 gives the K = 3 loop of
    # 1/(s(s+1)(s+2)): GM = 6/3 (Routh-Hurwitz, above). Unused keys ignored.
    firmware = json.dumps({"axes": [{"speed": {"P": 12.0, "Iraw": 0.0, "comment": "x",
                                                "Dx": 0.0}}]})
    man = manifest(
        '[[loops]]\nname = "legacy.speed"\nplant = "third"\n'
        'controller = { file = "fw/params.json", path = "axes.0.speed", kind = "pid", '
        'map = { kp = { key = "P", scale = 0.25 }, ki = "Iraw" } }\n')
    folder = write(tmp_path, {"ruleguard.toml": man, "plants.toml": PLANTS,
                              "fw/params.json": firmware})
    _, report, _ = check(folder)
    m = only_variant(report)["margins"]
    assert m["gain_margin_db"] == pytest.approx(db(2.0), abs=1e-6)
    for f in report["findings"]:
        if f["location"]["file"] not in (None, "ruleguard.toml", "plants.toml") and \
                not f["location"]["file"].startswith("<"):
            assert f["location"]["file"] == "fw/params.json"  # relative, with '/'


def test_location_file_is_relative_with_slash(tmp_path):
    # the K = 3 loop fails margin.phase (PM ~ 20 deg < 30, formula above):
    # the finding points to the controller file in a subfolder.
    man = manifest(loop("a.loop", "third", "c", file="firmware/axis/ctl.toml"))
    folder = write(tmp_path, {"ruleguard.toml": man, "plants.toml": PLANTS,
                              "firmware/axis/ctl.toml": p_table("c", 3.0)})
    _, report, _ = check(folder)
    phase = [f for f in report["findings"] if f["rule"] == "margin.phase"]
    assert phase and phase[0]["location"]["file"] == "firmware/axis/ctl.toml"
    assert phase[0]["measured"] == pytest.approx(
        90.0 - math.degrees(math.atan(_third_crossover(3)) + math.atan(_third_crossover(3) / 2)),
        abs=1e-5)
    assert phase[0]["limit"] == 30.0 and phase[0]["unit"] == "deg"


def test_delay_samples_without_sample_rate_is_an_input_error(tmp_path):
    man = manifest(loop("a.loop", "third", "c", extra="delay_samples = 1.0\n"))
    folder = write(tmp_path, {"ruleguard.toml": man, "plants.toml": PLANTS,
                              "ctl.toml": p_table("c", 1.0)})
    err = bad(folder)
    line = 1 + man.splitlines().index("delay_samples = 1.0")
    assert re.search(rf"ruleguard\.toml:{line}:\d+", err), err
    assert "delay_samples" in err


@pytest.mark.parametrize("text", ["-2**2 + 7", "exp(log(3))", "10**log10(3)", "e/e*3",
                                  "sqrt(9)", "(1 + 2) * (pi/pi)", "2**-1*6"])
def test_expressions_follow_python_precedence(tmp_path, text):
    # each expression is 3: "-2**2 + 7" = -4 + 7 (Python precedence; (-2)**2 + 7
    # = 11 would give 20 log10(6/11)), the functions and constants of section
    # 2. The K = 3 loop of 1/(s(s+1)(s+2)): GM 6.02 dB (Routh-Hurwitz).
    plants = PLANTS + f"""
[plants.expr]
kind = "transfer_function"
numerator = ["{text}"]
denominator = [1.0, 3.0, 2.0, 0.0]
"""
    _, report, _ = check(simple_project(tmp_path, 1.0, "expr", files={"plants.toml": plants}))
    assert only_variant(report)["margins"]["gain_margin_db"] == pytest.approx(db(2.0), abs=1e-6)


@pytest.mark.parametrize("text", ['"__import__(\'os\').getcwd()"', '"R.__class__"',
                                  '"[1][0]"', '"lambda: 1"'])
def test_expressions_outside_the_grammar_are_input_errors(tmp_path, text):
    plants = PLANTS + f"""
[plants.expr]
kind = "transfer_function"
numerator = [{text}]
denominator = [1.0, 1.0]
parameters = {{ R = 1.0 }}
"""
    err = bad(simple_project(tmp_path, 1.0, "expr", files={"plants.toml": plants}))
    assert re.search(r"plants\.toml:\d+:\d+", err), err


def test_no_file_outside_the_manifest_folder(tmp_path):
    write(tmp_path, {"outside.toml": PLANTS})
    inner = tmp_path / "proj"
    write(inner, {"ruleguard.toml": manifest(loop("a.loop", "third", "c"),
                                             plants='["../outside.toml"]'),
                  "ctl.toml": p_table("c", 1.0)})
    err = bad(inner)
    assert "ruleguard.toml" in err


def test_toml_and_json_give_the_same_report(tmp_path):
    # the same project in both formats (section "every input may be TOML or
    # JSON"): identical analyses, summaries and findings (locations aside,
    # whose files and lines differ by construction).
    ruleset = """\
[ruleset]
name = "house"
based_on = "baseline"

[rules."margin.phase"]
min_deg = 25.0

[[adjustments]]
loops = ["b.*"]
rules = { "margin.gain" = { min_db = 10.0 } }

[[waivers]]
rule = "sensitivity.peak"
loops = ["a.loop"]
reason = "accepted at review"
expires = 2027-03-01
"""
    plants = PLANTS + """
[plants.fam]
kind = "integrator_dead_time"
gain = 1.0
delay_s = 0.5
vary = { delay_s = { min = 0.3, max = 0.9 } }
"""
    loops = (loop("a.loop", "third", "c3") + loop("b.loop", "fam", "c1", extra='tags = ["x"]\n'))
    toml_files = {"ruleguard.toml": manifest(loops, ruleset="house.toml"),
                  "plants.toml": plants, "house.toml": ruleset,
                  "ctl.toml": p_table("c3", 3.0) + p_table("c1", 1.0)}
    write(tmp_path / "t", toml_files)
    json_files = {}
    for rel, text in toml_files.items():
        data = tomllib.loads(text.replace(".toml", ".json"))
        json_files[rel.replace(".toml", ".json")] = json.dumps(data, default=str, indent=1)
    write(tmp_path / "j", json_files)
    _, rt, _ = check(tmp_path / "t", "--as-of", "2027-01-01")
    _, rj, _ = check(tmp_path / "j", "--as-of", "2027-01-01", name="ruleguard.json")
    assert rt["loops"] == rj["loops"]
    assert rt["summary"] == rj["summary"]

    def essential(report: dict) -> list[tuple]:
        return [(f["rule"], f["severity"], f["loop"], f["variant"], f["message"], f["measured"],
                 f["limit"], f["unit"], f["frequency_hz"], f["waived"], f["location"]["key"],
                 Path(f["location"]["file"] or "").stem)
                for f in report["findings"]]

    assert essential(rt) == essential(rj)
    assert rt["summary"]["waived"] >= 1


# ----------------------------------------------------- ruleset (section 4)

def test_based_on_parameters_and_severity_disabled(tmp_path):
    # K = 3 loop: GM 6.02 dB, PM ~ 20 deg (closed forms above).
    ruleset = """\
[ruleset]
name = "house"
based_on = "baseline"

[rules."margin.phase"]
min_deg = 10.0

[rules."margin.gain"]
min_db = 8.0

[rules."sensitivity.peak"]
severity = "disabled"
"""
    folder = simple_project(tmp_path, 3.0, ruleset="house.toml", files={"house.toml": ruleset})
    code, report, _ = check(folder)
    rules = {f["rule"]: f for f in report["findings"]}
    assert "margin.phase" not in rules        # 20 deg >= 10 deg
    assert "sensitivity.peak" not in rules     # off
    assert "sensitivity.complementary-peak" in rules  # still from baseline (based_on)
    gain = rules["margin.gain"]
    assert gain["limit"] == 8.0 and gain["unit"] == "dB"
    assert gain["measured"] == pytest.approx(db(2.0), abs=1e-6)
    assert gain["frequency_hz"] == pytest.approx(hz(math.sqrt(2)), rel=1e-6)
    assert code == 1


def test_closed_loop_stability_cannot_be_off(tmp_path):
    ruleset = '[ruleset]\nname = "x"\nbased_on = "baseline"\n\n' \
              '[rules."stability.closed-loop"]\nseverity = "disabled"\n'
    folder = simple_project(tmp_path, 3.0, ruleset="house.toml", files={"house.toml": ruleset})
    err = bad(folder)
    assert re.search(r"house\.toml:6:\d+", err), err  # the severity line
    assert "stability.closed-loop" in err


def test_adjustments_by_glob_and_tags_in_order(tmp_path):
    # Four copies of the K = 3 loop (PM ~ 20.04 deg, closed form above).
    # adjustment 1 (glob "a.*"): min_deg 10; adjustment 2 (tag "late"): min_deg 25.
    # a.one: only adjustment 1 -> passes; a.two: both, the later wins -> fails
    # at 25; b.one: only adjustment 2 -> fails at 25.
    ruleset = """\
[ruleset]
name = "house"
based_on = "baseline"

[[adjustments]]
loops = ["a.*"]
rules = { "margin.phase" = { min_deg = 10.0 } }

[[adjustments]]
tags = ["late"]
rules = { "margin.phase" = { min_deg = 25.0 } }

[[adjustments]]
loops = ["c.*"]
tags = ["never-used"]
rules = { "margin.phase" = { min_deg = 21.0 } }
"""
    loops = (loop("a.one", "third", "c") + loop("a.two", "third", "c", extra='tags = ["late"]\n')
             + loop("b.one", "third", "c", extra='tags = ["late"]\n') + loop("c.one", "third", "c"))
    folder = write(tmp_path, {"ruleguard.toml": manifest(loops, ruleset="house.toml"),
                              "plants.toml": PLANTS, "ctl.toml": p_table("c", 3.0),
                              "house.toml": ruleset})
    _, report, _ = check(folder)
    limits = {f["loop"]: f["limit"] for f in report["findings"] if f["rule"] == "margin.phase"}
    # adjustment 3 has loops and tags: c.one matches by its glob alone -> 21
    assert limits == {"a.two": 25.0, "b.one": 25.0, "c.one": 21.0}


WAIVER_RULESET = """\
[ruleset]
name = "house"
based_on = "baseline"

[[waivers]]
rule = "margin.gain"
loops = ["a.*"]
reason = "fixture-limited travel; accepted at design review"
expires = 2027-03-01

[[waivers]]
rule = "margin.delay"
loops = ["nothing.*"]
reason = "never matches"

[[waivers]]
rule = "sensitivity.peak"
loops = ["a.loop"]
reason = "no expires key: section 4 requires only a reason"
"""


def test_waivers_through_expiry_day_and_unused(tmp_path):
    # The K = 5 loop: GM = 6/5 = 1.58 dB < 6 (Routh-Hurwitz): margin.gain fires.
    folder = simple_project(tmp_path, 5.0, ruleset="house.toml",
                            files={"house.toml": WAIVER_RULESET})
    _, on_day, _ = check(folder, "--as-of", "2027-03-01")
    gain = [f for f in on_day["findings"] if f["rule"] == "margin.gain"]
    assert gain and all(f["waived"] for f in gain)
    assert gain[0]["measured"] == pytest.approx(db(1.2), abs=1e-6)
    assert not any(f["rule"] == "waiver.expired" for f in on_day["findings"])
    unused = [f for f in on_day["findings"] if f["rule"] == "waiver.unused"]
    assert len(unused) == 1 and unused[0]["severity"] == "note"
    assert unused[0]["location"]["file"] == "house.toml"

    peak = [f for f in on_day["findings"] if f["rule"] == "sensitivity.peak"]
    assert peak and all(f["waived"] for f in peak)

    _, after, _ = check(folder, "--as-of", "2027-03-02")
    peak = [f for f in after["findings"] if f["rule"] == "sensitivity.peak"]
    assert peak and all(f["waived"] for f in peak)  # a waiver without expiry never expires
    gain = [f for f in after["findings"] if f["rule"] == "margin.gain"]
    assert gain and not any(f["waived"] for f in gain)
    expired = [f for f in after["findings"] if f["rule"] == "waiver.expired"]
    assert len(expired) == 1 and expired[0]["severity"] == "warning"
    assert "margin.gain" in expired[0]["message"]
    assert expired[0]["location"]["file"] == "house.toml"
    assert after["summary"]["waived"] == on_day["summary"]["waived"] - len(gain)


def test_only_and_skip_by_id_and_family(tmp_path):
    # K = 3 loop: margin.phase, sensitivity.peak and sensitivity.complementary-peak fail.
    folder = simple_project(tmp_path, 3.0)
    _, full, _ = check(folder)
    rules = {f["rule"] for f in full["findings"]}
    assert {"margin.phase", "sensitivity.peak", "sensitivity.complementary-peak"} <= rules
    _, fam, _ = check(folder, "--only", "sensitivity")
    assert {f["rule"] for f in fam["findings"]} == {"sensitivity.peak",
                                                    "sensitivity.complementary-peak"}
    _, one, _ = check(folder, "--only", "margin.phase")
    assert {f["rule"] for f in one["findings"]} == {"margin.phase"}
    _, two, _ = check(folder, "--only", "margin.phase", "--only", "sensitivity.peak")
    assert {f["rule"] for f in two["findings"]} == {"margin.phase", "sensitivity.peak"}
    _, skip_fam, _ = check(folder, "--skip", "sensitivity")
    assert {f["rule"] for f in skip_fam["findings"]} == rules - {
        "sensitivity.peak", "sensitivity.complementary-peak"}
    _, skip_id, _ = check(folder, "--skip", "margin.phase")
    assert {f["rule"] for f in skip_id["findings"]} == rules - {"margin.phase"}


# ---------------------------------------------------- exit status (section 6)

def test_exit_status_and_fail_at(tmp_path):
    # K = 1: GM 20 log10(6) = 15.6 dB, PM 53.4 deg (cubic above), Ms < 6 dB:
    # baseline passes, exit 0. A house rule at warning/note severity with a
    # limit above the PM gives exactly one finding of that severity.
    assert check(simple_project(tmp_path / "clean", 1.0))[0] == 0
    for severity, levels in (("warning", {"error": 0, "warning": 1, "note": 1}),
                             ("note", {"error": 0, "warning": 0, "note": 1})):
        ruleset = (f'[ruleset]\nname = "x"\nbased_on = "baseline"\n\n[rules."margin.phase"]\n'
                   f'min_deg = 80.0\nseverity = "{severity}"\n')
        folder = simple_project(tmp_path / severity, 1.0, ruleset="house.toml",
                                files={"house.toml": ruleset})
        for level, expected in levels.items():
            code, report, _ = check(folder, "--fail-at", level)
            assert code == expected, (severity, level)
            assert [f["severity"] for f in report["findings"]] == [severity]
    assert check(simple_project(tmp_path / "bad", 12.0))[0] == 1


def test_invalid_inputs_exit_2_naming_the_place(tmp_path):
    plants = PLANTS + '\n[plants.odd]\nkind = "no_such_kind"\n'
    folder = simple_project(tmp_path, 1.0, "odd", files={"plants.toml": plants})
    err = bad(folder)
    assert re.search(r"plants\.toml:\d+:\d+", err), err
    # a biquad with a[0] = 0 is an input error (section 3)
    ctl = '[c]\nkind = "pid"\nkp = 1.0\nki = 0.0\n[[c.filters]]\nkind = "biquad"\n' \
          'b = [1.0, 0.0, 0.0]\na = [0.0, 1.0, 0.0]\n'
    folder = simple_project(tmp_path / "bq", 1.0, extra="sample_rate_hz = 100.0\n",
                            files={"ctl.toml": ctl})
    err = bad(folder)
    assert re.search(r"ctl\.toml:\d+:\d+", err), err
    # a required key that is missing (kp of a parallel PID)
    folder = simple_project(tmp_path / "miss", 1.0, files={"ctl.toml": '[c]\nkind = "pid"\n'})
    err = bad(folder)
    assert "ctl.toml" in err
    # a measured plant must state its unstable poles (section 2)
    plants = PLANTS + '\n[plants.swept]\nkind = "measured_response"\nfile = "s.csv"\n' \
                      'integrators = 1\n'
    folder = simple_project(tmp_path / "meas", 1.0, "swept", files={
        "plants.toml": plants, "s.csv": _sweep_csv(np.logspace(-3, 2, 50))})
    err = bad(folder)
    assert re.search(r"plants\.toml:\d+:\d+", err) and "unstable_poles" in err, err


@pytest.mark.skipif(shutil.which("ruleguard") is None, reason="console script not installed")
def test_installed_command_exit_statuses(tmp_path):
    # the real console script, as a CI job would call it
    ok = simple_project(tmp_path / "ok", 1.0)
    fail = simple_project(tmp_path / "fail", 12.0)
    broken = simple_project(tmp_path / "broken", 1.0, extra="delay_samples = 1.0\n")
    results = {}
    for name, folder in (("ok", ok), ("fail", fail), ("broken", broken)):
        proc = subprocess.run([shutil.which("ruleguard"), "check", "--format", "json",
                               "--no-cache"], cwd=folder, capture_output=True, text=True,
                              timeout=60)
        results[name] = proc
    assert results["ok"].returncode == 0
    assert results["fail"].returncode == 1
    assert json.loads(results["fail"].stdout)["summary"]["result"] == "fail"
    assert results["broken"].returncode == 2
    assert "Traceback" not in results["broken"].stderr
    assert "delay_samples" in results["broken"].stderr


def test_module_entry_point(tmp_path):
    folder = simple_project(tmp_path, 3.0)
    proc = subprocess.run([sys.executable, "-m", "ruleguard", "check", "--manifest",
                           str(folder / "ruleguard.toml"), "--format", "json", "--no-cache"],
                          capture_output=True, text=True, timeout=60)
    assert proc.returncode == 1
    report = json.loads(proc.stdout)
    assert_contract(report, proc.returncode)
    assert report["loops"][0]["variants"][0]["margins"]["gain_margin_db"] == pytest.approx(
        db(2.0), abs=1e-6)


# ------------------------------------------------------- further statements

def test_whole_and_fractional_sample_delays_closed_form(tmp_path):
    # g/s with g = 50 at h = 0.01 s. One whole sample: L = 0.5/(z (z - 1)),
    # z^2 - z + c 0.5 = 0 by Jury's test (Astrom & Wittenmark, Computer-
    # Controlled Systems, 1997, from memory): stable iff c 0.5 < 1, so GM = 2,
    # and at c = 2 the roots are e^{+-j pi/3}: f = fs/6. z^-1 has unit
    # magnitude, so the crossover stays and the delay margin drops by exactly
    # one sample. Half a sample (ZOH derivation: over one period the held
    # input u_{k-1} acts for f h and u_k for (1 - f) h, so G = g h ((1-f) z +
    # f)/(z (z-1))): L = 0.25 (z + 1)/(z (z - 1)); z^2 + (0.25c - 1) z + 0.25c:
    # stable iff c < 4 (Jury), at c = 4 z = +-j: GM 4 at fs/4. The same half
    # sample given as plant delay_s = 0.005 s is the same loop (section 1).
    plants = DISCRETE_PLANTS + """
[plants.ramp50_late]
kind = "integrator_dead_time"
gain = 50.0
delay_s = 0.005
"""
    rate = "sample_rate_hz = 100.0\n"
    loops = (loop("d.zero", "ramp50", "c", extra=rate)
             + loop("d.one", "ramp50", "c", extra=rate + "delay_samples = 1.0\n")
             + loop("d.half", "ramp50", "c", extra=rate + "delay_samples = 0.5\n")
             + loop("d.plant_half", "ramp50_late", "c", extra=rate))
    folder = write(tmp_path, {"ruleguard.toml": manifest(loops), "plants.toml": plants,
                              "ctl.toml": p_table("c", 1.0)})
    _, report, _ = check(folder)
    zero, one = only_variant(report, "d.zero")["margins"], only_variant(report, "d.one")["margins"]
    assert one["gain_margin_db"] == pytest.approx(db(2.0), abs=1e-6)
    assert one["gain_margin_hz"] == pytest.approx(100.0 / 6, rel=1e-6)
    assert one["crossover_hz"] == pytest.approx(zero["crossover_hz"], rel=1e-6)
    assert one["delay_margin_samples"] == pytest.approx(zero["delay_margin_samples"] - 1.0,
                                                        abs=1e-6)
    half = only_variant(report, "d.half")["margins"]
    assert half["gain_margin_db"] == pytest.approx(db(4.0), abs=1e-6)
    assert half["gain_margin_hz"] == pytest.approx(25.0, rel=1e-6)
    _margins_equal(half, only_variant(report, "d.plant_half")["margins"], "plant delay")
    totals = {lp["name"]: lp["analysis"]["total_delay_s"] for lp in report["loops"]}
    assert totals == pytest.approx({"d.zero": 0.0, "d.one": 0.01, "d.half": 0.005,
                                    "d.plant_half": 0.005})


def test_continuous_loop_delay_s(tmp_path):
    # a continuous loop's own delay_s (section 1): 1/s with loop delay 0.5 s is
    # the integrator with dead time above: PM = 90 deg - deg(0.5), GM = pi.
    plants = PLANTS + '\n[plants.integ]\nkind = "integrator_dead_time"\ngain = 1.0\n' \
                      'delay_s = 0.0\n'
    folder = simple_project(tmp_path, 1.0, "integ", extra="delay_s = 0.5\n",
                            files={"plants.toml": plants})
    _, report, _ = check(folder)
    m = only_variant(report)["margins"]
    assert m["phase_margin_deg"] == pytest.approx(90.0 - math.degrees(0.5), abs=1e-5)
    assert m["gain_margin_db"] == pytest.approx(db(math.pi), abs=1e-5)
    assert report["loops"][0]["analysis"]["total_delay_s"] == pytest.approx(0.5)


def test_cascade_uses_the_inner_plant_output(tmp_path):
    # inner: C = 9, G = 1/(s + 1), sensor H = 2: T = C G/(1 + C G H) = 9/(s + 19)
    # (section 1; the sensed output would give 18/(s + 19)). Outer: C = 10,
    # G = 1/s: L = 90/(s (s + 19)); |L| = 1: x^2 + 361 x - 8100 = 0, x = w^2.
    plants = PLANTS + """
[plants.lag1]
kind = "zero_pole_gain"
gain = 1.0
zeros = []
poles = [-1.0]

[plants.two]
kind = "transfer_function"
numerator = [2.0]
denominator = [1.0]

[plants.integ]
kind = "integrator_dead_time"
gain = 1.0
delay_s = 0.0
"""
    loops = (loop("in.loop", "lag1", "inner", extra='sensor = "two"\n')
             + loop("out.loop", "integ", "outer", extra='inner = "in.loop"\n'))
    folder = write(tmp_path, {"ruleguard.toml": manifest(loops), "plants.toml": plants,
                              "ctl.toml": p_table("inner", 9.0) + p_table("outer", 10.0)})
    _, report, _ = check(folder)
    x = (-361 + math.sqrt(361 ** 2 + 4 * 8100)) / 2
    wc = math.sqrt(x)
    m = only_variant(report, "out.loop")["margins"]
    assert m["crossover_hz"] == pytest.approx(hz(wc), rel=1e-6)
    assert m["phase_margin_deg"] == pytest.approx(90 - math.degrees(math.atan(wc / 19)),
                                                  abs=1e-5)
    # the inner loop itself: L = 18/(s + 1): crossover sqrt(18^2 - 1)
    inner = only_variant(report, "in.loop")["margins"]
    assert inner["crossover_hz"] == pytest.approx(hz(math.sqrt(323)), rel=1e-6)


def test_static_loop_unbounded_margins_and_disk_closed_form(tmp_path):
    # L = 0.5 (static): |L| < 1, no crossover: PM, crossover, delay margin null
    # (unbounded); no phase crossing: GM null; S = 1/1.5 (-3.52 dB); disk
    # margin alpha = 2/|(1 - L)/(1 + L)| = 2/(1/3) = 6 >= 2: gain range
    # unbounded (null, null), phase 2 atan(3) (Seiler, Packard & Gahinet 2020).
    _, report, _ = check(simple_project(tmp_path, 0.5, "unit"))
    v = only_variant(report)
    m = v["margins"]
    assert v["stability"]["stable"] is True
    for key in ("phase_margin_deg", "crossover_hz", "delay_margin_s", "gain_margin_db",
                "lower_gain_margin_db"):
        assert m[key] is None, key
    assert m["crossovers"] == []
    assert m["stable_gain_ranges_db"] == [[None, None]]
    assert m["sensitivity_peak_db"] == pytest.approx(db(1 / 1.5), abs=1e-6)
    disk = m["disk_margin"]
    assert disk["alpha"] == pytest.approx(6.0, rel=1e-6)
    assert disk["gain_range_db"] == [None, None]
    assert disk["phase_deg"] == pytest.approx(math.degrees(2 * math.atan(3.0)), rel=1e-6)


def test_measured_linear_magnitude(tmp_path):
    # magnitude_unit = "abs": the same data as linear magnitudes give the
    # same GM 6.02 dB (Routh-Hurwitz, K = 3).
    f = np.logspace(-3, 2, 2000)
    s = 2j * np.pi * f
    g = 1 / (s * (s + 1) * (s + 2))
    plants = PLANTS + """
[plants.swept]
kind = "measured_response"
file = "data/sweep_abs.csv"
magnitude_unit = "abs"
unstable_poles = 0
integrators = 1
"""
    folder = simple_project(tmp_path, 3.0, "swept", files={
        "plants.toml": plants, "data/sweep_abs.csv": _csv_of(f, g, linear=True)})
    _, report, _ = check(folder)
    assert only_variant(report)["margins"]["gain_margin_db"] == pytest.approx(db(2.0), abs=0.02)


def test_pid_variants_defaults_and_discrete_derivative(tmp_path):
    # standard form: n defaults to 10 (section 3), so n = 10 and no n agree;
    # no ti_s means no integral action: gain 3 without ti_s is the K = 3 loop
    # of 1/(s(s+1)(s+2)) with a filtered derivative td = 0 -> GM 6.02 dB.
    ctl = """\
[std10]
kind = "pid"
form = "standard"
gain = 0.5
ti_s = 4.0
td_s = 0.5
n = 10.0

[stdn]
kind = "pid"
form = "standard"
gain = 0.5
ti_s = 4.0
td_s = 0.5

[pure]
kind = "pid"
form = "standard"
gain = 3.0
td_s = 0.0

[raw_tustin]
kind = "pid"
kp = 1.0
ki = 0.0
kd = 0.001
discretization = "tustin"

[raw_euler]
kind = "pid"
kp = 1.0
ki = 0.0
kd = 0.001
discretization = "backward_euler"

[plain]
kind = "pid"
kp = 1.0
ki = 0.0
"""
    plants = PLANTS + '\n[plants.lag]\nkind = "zero_pole_gain"\ngain = 5.0\nzeros = []\n' \
                      'poles = [-5.0]\n'
    rate = "sample_rate_hz = 1000.0\n"
    loops = (loop("s.n10", "third", "std10") + loop("s.ndef", "third", "stdn")
             + loop("s.pure", "third", "pure")
             + loop("d.tustin", "lag", "raw_tustin", extra=rate)
             + loop("d.euler", "lag", "raw_euler", extra=rate)
             + loop("d.plain", "lag", "plain", extra=rate))
    folder = write(tmp_path, {"ruleguard.toml": manifest(loops), "plants.toml": plants,
                              "ctl.toml": ctl})
    _, report, _ = check(folder)
    _margins_equal(only_variant(report, "s.n10")["margins"],
                   only_variant(report, "s.ndef")["margins"], "n default")
    assert only_variant(report, "s.pure")["margins"]["gain_margin_db"] == pytest.approx(
        db(2.0), abs=1e-6)
    deriv = {f["loop"] for f in report["findings"] if f["rule"] == "controller.derivative-filter"}
    # Tustin puts a pole at z = -1: reported; backward Euler is allowed (the
    # loop is analysed; whether the rule may still flag the missing filter is
    # left to RULES.md: "a derivative term has a filter")
    assert "d.tustin" in deriv
    by_name = {lp["name"]: lp for lp in report["loops"]}
    assert by_name["d.euler"]["analysed"]
    # default discretization: documented, and the method used is reported
    assert isinstance(by_name["d.plain"]["analysis"]["discretization"]["controller"], str)


def test_notch_prewarp(tmp_path):
    # A notch at 200 Hz sampled at 1 kHz: plain Tustin maps it to (fs/pi)
    # atan(pi f/fs) = 178.6 Hz (frequency warping; Oppenheim & Schafer,
    # Discrete-Time Signal Processing, 3rd ed. 2010), a 10.7 % shift that
    # filter.below-nyquist reports (limit 2 %); tustin_prewarp prewarps at the
    # notch centre (section 3), so no shift.
    ctl = ""
    for method in ("tustin", "tustin_prewarp"):
        ctl += (f'[n_{method}]\nkind = "pid"\nkp = 1.0\nki = 0.0\n'
                f'discretization = "{method}"\n[[n_{method}.filters]]\nkind = "notch"\n'
                'center_hz = 200.0\nwidth_hz = 40.0\ndepth_db = 20.0\n\n')
    plants = PLANTS + '\n[plants.lag]\nkind = "zero_pole_gain"\ngain = 5.0\nzeros = []\n' \
                      'poles = [-5.0]\n'
    rate = "sample_rate_hz = 1000.0\n"
    loops = loop("n.plain", "lag", "n_tustin", extra=rate) + loop("n.warp", "lag",
                                                                  "n_tustin_prewarp", extra=rate)
    folder = write(tmp_path, {"ruleguard.toml": manifest(loops), "plants.toml": plants,
                              "ctl.toml": ctl})
    _, report, _ = check(folder)
    loops_flagged = {f["loop"] for f in report["findings"] if f["rule"] == "filter.below-nyquist"}
    assert loops_flagged == {"n.plain"}
    by_name = {lp["name"]: lp for lp in report["loops"]}
    assert by_name["n.warp"]["analysis"]["discretization"]["filters"] == ["tustin_prewarp"]


def test_bounds_of_controller_fields(tmp_path):
    # manifest bounds = { kp = [0.5, 4.0] } and kp = 5: config.bounds fires
    # (section 1); kp = 3 passes it.
    folder = simple_project(tmp_path / "out", 5.0, extra="bounds = { kp = [0.5, 4.0] }\n")
    _, report, _ = check(folder)
    hits = [f for f in report["findings"] if f["rule"] == "config.bounds"]
    assert len(hits) == 1 and hits[0]["measured"] == 5.0
    assert hits[0]["location"]["file"] == "ctl.toml"
    folder = simple_project(tmp_path / "in", 3.0, extra="bounds = { kp = [0.5, 4.0] }\n")
    _, report, _ = check(folder)
    assert not any(f["rule"] == "config.bounds" for f in report["findings"])


def test_required_ccw_default_is_p_and_lower_gain_rule(tmp_path):
    # 4/(s - 1): P = 1 and one ccw encirclement (closed form above): by default
    # required_ccw = P, so no stability.encirclements finding; the lower gain
    # margin is -12.04 dB, inside the baseline -6 dB limit, so margin.gain only
    # fires with min_lower_db = 15.
    _, report, _ = check(simple_project(tmp_path / "a", 4.0, "unstable1"))
    assert not any(f["rule"] in ("stability.encirclements", "margin.gain")
                   for f in report["findings"])
    ruleset = '[ruleset]\nname = "x"\nbased_on = "baseline"\n\n[rules."margin.gain"]\n' \
              'min_lower_db = 15.0\n'
    _, report, _ = check(simple_project(tmp_path / "b", 4.0, "unstable1", ruleset="house.toml",
                                        files={"house.toml": ruleset}))
    hits = [f for f in report["findings"] if f["rule"] == "margin.gain"]
    assert hits and abs(hits[0]["measured"]) == pytest.approx(12.0412, abs=1e-3)


def test_based_on_chain_by_path_later_wins(tmp_path):
    # house.toml is based on baseline (margin.gain min 8 dB, phase 10 deg);
    # team.toml is based on house.toml by path and sets margin.gain min 5 dB:
    # the K = 3 loop's GM 6.02 dB then passes (Routh-Hurwitz), phase still 10.
    house = ('[ruleset]\nname = "house"\nbased_on = "baseline"\n\n[rules."margin.phase"]\n'
             'min_deg = 10.0\n\n[rules."margin.gain"]\nmin_db = 8.0\n')
    team = ('[ruleset]\nname = "team"\nbased_on = "house.toml"  # relative to this file\n\n'
            '[rules."margin.gain"]\nmin_db = 5.0\n')
    folder = simple_project(tmp_path, 3.0, ruleset="policy/team.toml",
                            files={"policy/house.toml": house, "policy/team.toml": team})
    _, report, _ = check(folder)
    rules = {f["rule"] for f in report["findings"]}
    assert "margin.gain" not in rules and "margin.phase" not in rules


def test_all_errors_waived_exit_zero(tmp_path):
    # --only margin.phase on the K = 3 loop (PM 20 deg < 30): one error; a
    # waiver makes it waived: exit 0, errors 0, waived 1 (sections 5 and 6).
    ruleset = ('[ruleset]\nname = "x"\nbased_on = "baseline"\n\n[[waivers]]\n'
               'rule = "margin.phase"\nloops = ["a.*"]\nreason = "reviewed"\n'
               'expires = 2027-03-01\n')
    folder = simple_project(tmp_path, 3.0, ruleset="house.toml", files={"house.toml": ruleset})
    code, report, _ = check(folder, "--only", "margin.phase", "--as-of", "2027-01-01")
    assert code == 0
    assert (report["summary"]["errors"], report["summary"]["waived"]) == (0, 1)
    code, report, _ = check(folder, "--only", "margin.phase", "--as-of", "2027-03-02")
    assert code == 1 and report["summary"]["errors"] == 1


def test_parameters_may_not_shadow_constants(tmp_path):
    plants = PLANTS + """
[plants.shadow]
kind = "transfer_function"
numerator = ["pi"]
denominator = [1.0, 1.0]
parameters = { pi = 3.0 }
"""
    err = bad(simple_project(tmp_path, 1.0, "shadow", files={"plants.toml": plants}))
    assert re.search(r"plants\.toml:\d+:\d+", err), err


@pytest.mark.skipif(shutil.which("ruleguard") is None, reason="console script not installed")
def test_installed_command_finds_the_manifest_above_and_writes_no_input(tmp_path):
    # section 1: `ruleguard check` finds the manifest in the current folder or
    # its parents; section 6: it never writes to an input file. The project:
    # K = 3 and K = 12 on 1/(s(s+1)(s+2)) (Routh-Hurwitz: stable iff K < 6).
    project = tmp_path / "third_order"
    shutil.copytree(DATA / "third_order", project)
    inputs = {p: p.read_bytes() for p in project.rglob("*") if p.is_file()}
    proc = subprocess.run([shutil.which("ruleguard"), "check", "--format", "json"],
                          cwd=project / "firmware", capture_output=True, text=True, timeout=60)
    assert proc.returncode == 1, proc.stderr
    report = json.loads(proc.stdout)
    assert_contract(report, 1)
    stable = only_variant(report, "third.stable")
    unstable = only_variant(report, "third.unstable")
    assert stable["margins"]["gain_margin_db"] == pytest.approx(db(2.0), abs=1e-6)
    assert unstable["stability"]["closed_loop_unstable_poles"] == 2
    assert {f["location"]["file"] for f in report["findings"]
            if f["rule"] == "stability.closed-loop"} == {"firmware/gains.toml"}
    assert {p: p.read_bytes() for p in inputs} == inputs


def test_z_transfer_function_convention_and_rate(tmp_path):
    # [1.2]/[1, -0.5] in z is 1.2/(z - 0.5) (section 3: descending powers of
    # z). With plant 1: closed-loop pole z = 0.5 - 1.2 c, which leaves the
    # unit circle at c = 1.25 (z = -1, the Nyquist frequency): GM 1.94 dB at
    # fs/2. (Read in powers of z^-1, 1.2 z/(z - 0.5) is +0.8 at z = -1: no GM there.)
    ctl = '[c]\nkind = "transfer_function"\ndomain = "z"\nnumerator = [1.2]\n' \
          'denominator = [1.0, -0.5]\n'
    folder = simple_project(tmp_path / "a", 1.0, "unit", extra="sample_rate_hz = 50.0\n",
                            files={"ctl.toml": ctl})
    _, report, _ = check(folder)
    m = only_variant(report)["margins"]
    assert m["gain_margin_db"] == pytest.approx(db(1.25), abs=1e-6)
    assert m["gain_margin_hz"] == pytest.approx(25.0, rel=1e-6)
    # a z block needs the loop's sample rate: input error naming the place
    err = bad(simple_project(tmp_path / "b", 1.0, "unit", files={"ctl.toml": ctl}))
    assert re.search(r"ctl\.toml:\d+:\d+", err), err


def test_corner_limit(tmp_path):
    # "every min/max corner (at most 2^10)": 11 varied parameters cannot be
    # expanded into corners.
    params = ", ".join(f"p{i} = 1.0" for i in range(11))
    vary = ", ".join(f"p{i} = {{ min = 0.9, max = 1.1 }}" for i in range(11))
    num = " * ".join(f"p{i}" for i in range(11))
    plants = PLANTS + (f'\n[plants.big]\nkind = "transfer_function"\nnumerator = ["{num}"]\n'
                       f'denominator = [1.0, 1.0]\nparameters = {{ {params} }}\n'
                       f'vary = {{ {vary} }}\n')
    folder = simple_project(tmp_path, 1.0, "big", files={"plants.toml": plants})
    code, out, err = cli(["check", "--manifest", str(folder / "ruleguard.toml"), "--format",
                          "json", "--no-cache"])
    if code == 2:
        assert "Traceback" not in err and "ruleguard.toml" in err
    else:
        assert len(json.loads(out)["loops"][0]["variants"]) <= 1 + 2 ** 10


def test_measured_plant_with_declared_unstable_pole(tmp_path):
    # Data of 1/(s - 1) with unstable_poles = 1 (the data cannot show it): P
    # is as declared; kp = 4 closes it stably with one ccw encirclement, lower
    # gain margin 20 log10(1/4) (closed-loop pole s = 1 - K, stable iff K > 1).
    f = np.logspace(-4, 3, 3000)
    g = 1 / (2j * np.pi * f - 1)
    plants = PLANTS + """
[plants.swept]
kind = "measured_response"
file = "sweep.csv"
unstable_poles = 1
integrators = 0
"""
    folder = simple_project(tmp_path, 4.0, "swept", files={
        "plants.toml": plants, "sweep.csv": _csv_of(f, g)})
    _, report, _ = check(folder)
    v = only_variant(report)
    assert (v["stability"]["open_loop_unstable_poles"], v["stability"]["ccw_encirclements"],
            v["stability"]["stable"]) == (1, 1, True)
    assert v["margins"]["lower_gain_margin_db"] == pytest.approx(db(0.25), abs=0.02)


@pytest.mark.parametrize("name", ["baseline", "motion", "process", "power", "flight"])
def test_built_in_rulesets_load(tmp_path, name):
    # section 4: built-in rulesets ship in the package; the unstable K = 12
    # loop (Routh-Hurwitz) fails stability.closed-loop, always an error.
    code, report, _ = check(simple_project(tmp_path, 12.0, ruleset=name))
    assert code == 1
    assert any(f["rule"] == "stability.closed-loop" and f["severity"] == "error"
               for f in report["findings"])


def test_other_formats_keep_the_exit_status(tmp_path):
    # section 5 "Other formats": text (default), sarif (SARIF 2.1.0), junit, markdown
    import xml.etree.ElementTree as ET

    folder = simple_project(tmp_path, 12.0)
    base = ["check", "--manifest", str(folder / "ruleguard.toml"), "--no-cache"]
    code, out, _ = cli(base)
    assert code == 1 and "a.loop" in out
    code, out, _ = cli([*base, "--format", "sarif"])
    assert code == 1 and json.loads(out)["version"] == "2.1.0"
    code, out, _ = cli([*base, "--format", "junit"])
    assert code == 1 and ET.fromstring(out) is not None
    code, out, _ = cli([*base, "--format", "markdown"])
    assert code == 1 and "a.loop" in out


def test_delay_samples_error_in_a_json_manifest(tmp_path):
    # the same input error located in a JSON manifest (file, line, column, key)
    data = tomllib.loads(manifest(loop("a.loop", "third", "c", extra="delay_samples = 1.0\n")))
    text = json.dumps(data, indent=2)
    write(tmp_path, {"ruleguard.json": text, "plants.toml": PLANTS,
                     "ctl.toml": p_table("c", 1.0)})
    err = bad(tmp_path, "ruleguard.json")
    line = 1 + [i for i, row in enumerate(text.splitlines()) if "delay_samples" in row][0]
    assert re.search(rf"ruleguard\.json:{line}:\d+", err), err
    assert "delay_samples" in err


def test_two_stable_gain_windows_in_increasing_order(tmp_path):
    # L = K (s^2 + 0.4 s + 5.3)/(s (s^2 + 0.65 s + 2)(s/6 + 1)^2): the closed
    # loop is stable for small K, unstable, stable again in a window around
    # K = 12, then unstable (numpy.roots of den + K num; boundaries by scipy
    # brentq on the largest real part, an independent computation). At K = 12
    # the report must list both windows in increasing order (dB relative to
    # K = 12), and the one containing 0 dB gives both gain margins.
    from scipy.optimize import brentq

    num = np.array([1.0, 0.4, 5.3])
    den = np.polymul(np.polymul([1.0, 0.0], [1.0, 0.65, 2.0]),
                     np.polymul([1 / 6, 1.0], [1 / 6, 1.0]))

    def growth(k: float) -> float:
        return float(np.max(np.roots(np.polyadd(den, k * num)).real))

    edges = [brentq(growth, a, b, xtol=1e-12) for a, b in ((0.2, 0.5), (9.0, 12.0),
                                                             (12.0, 16.0))]
    k = 12.0
    plants = PLANTS + (f'\n[plants.windows]\nkind = "transfer_function"\n'
                       f"numerator = {json.dumps(list(num))}\n"
                       f"denominator = {json.dumps([float(x) for x in den])}\n")
    _, report, _ = check(simple_project(tmp_path, k, "windows", files={"plants.toml": plants}))
    v = only_variant(report)
    assert v["stability"]["stable"] is True
    ranges = v["margins"]["stable_gain_ranges_db"]
    expected = [[None, db(edges[0] / k)], [db(edges[1] / k), db(edges[2] / k)]]
    assert len(ranges) == 2
    for got, want in zip(ranges, expected, strict=True):
        assert got[0] == (None if want[0] is None else pytest.approx(want[0], abs=1e-4))
        assert got[1] == pytest.approx(want[1], abs=1e-4)
    assert v["margins"]["gain_margin_db"] == pytest.approx(db(edges[2] / k), abs=1e-4)
    assert v["margins"]["lower_gain_margin_db"] == pytest.approx(db(edges[1] / k), abs=1e-4)


def test_measured_interpolation_log_frequency_db_and_unwrapped_phase(tmp_path):
    # Four points; between them linear in log10 f on dB and unwrapped phase
    # (section 2). The phase is written wrapped (100 deg = -260 deg). kp = 1.
    # |L| = 0 dB between 1 Hz (+6 dB) and 10 Hz (-14 dB) at log10 f = 0.3;
    # phase there -90 - 170 * 0.3 = -141 deg: PM 38.8 deg. Phase -180 at
    # log10 f = 90/170, where the magnitude is 6 - 20 * 90/170 dB: GM = minus that.
    csv = ("freq_hz,magnitude_db,phase_deg\n0.1,26.0,-90.0\n1.0,6.0,-90.0\n"
           "10.0,-14.0,100.0\n100.0,-34.0,100.0\n")
    plants = PLANTS + """
[plants.swept]
kind = "measured_response"
file = "pts.csv"
unstable_poles = 0
integrators = 1
"""
    folder = simple_project(tmp_path, 1.0, "swept", files={"plants.toml": plants,
                                                           "pts.csv": csv})
    _, report, _ = check(folder)
    v = only_variant(report)
    m = v["margins"]
    x_c = 0.3
    x_180 = 90.0 / 170.0
    assert v["stability"]["stable"] is True
    assert m["crossover_hz"] == pytest.approx(10 ** x_c, rel=1e-6)
    assert m["phase_margin_deg"] == pytest.approx(180.0 - 90.0 - 170.0 * x_c, abs=1e-4)
    assert m["gain_margin_hz"] == pytest.approx(10 ** x_180, rel=1e-6)
    assert m["gain_margin_db"] == pytest.approx(-(6.0 - 20.0 * x_180), abs=1e-4)


def test_more_invalid_manifests(tmp_path):
    # duplicate loop names, a wrong type, a file reached through a symlink
    # leading outside the folder, a bad --as-of date: exit 2 with the place.
    dup = manifest(loop("a.loop", "third", "c") + loop("a.loop", "third", "c"))
    err = bad(write(tmp_path / "dup", {"ruleguard.toml": dup, "plants.toml": PLANTS,
                                       "ctl.toml": p_table("c", 1.0)}))
    assert re.search(r"ruleguard\.toml:\d+:\d+", err), err
    wrong = manifest(loop("a.loop", "third", "c", extra='sample_rate_hz = "fast"\n'))
    err = bad(write(tmp_path / "type", {"ruleguard.toml": wrong, "plants.toml": PLANTS,
                                        "ctl.toml": p_table("c", 1.0)}))
    assert re.search(r"ruleguard\.toml:\d+:\d+", err) and "sample_rate_hz" in err, err
    write(tmp_path, {"elsewhere.toml": PLANTS})
    link = write(tmp_path / "link", {"ruleguard.toml": manifest(loop("a.loop", "third", "c")),
                                     "ctl.toml": p_table("c", 1.0)})
    (link / "plants.toml").symlink_to(tmp_path / "elsewhere.toml")
    err = bad(link)
    assert "plants.toml" in err
    folder = simple_project(tmp_path / "date", 1.0)
    code, _, err = cli(["check", "--manifest", str(folder / "ruleguard.toml"), "--as-of",
                        "2027-13-45"])
    assert code == 2 and "--as-of" in err and "Traceback" not in err
    code, _, err = cli(["check", "--manifest", str(tmp_path / "none" / "ruleguard.toml")])
    assert code == 2 and "Traceback" not in err


def test_no_stabilising_gain_and_peaks_of_an_unstable_loop(tmp_path):
    # L = c/((s - 1)(s - 2)): closed loop s^2 - 3 s + 2 + c keeps the -3 s
    # term, never Hurwitz (closed form): Z = 2 = P, ccw = 0, no stable gain
    # interval at all. |L| <= 1/2: no crossover. The peaks are still given:
    # Mt = max 1/|(jw)^2 - 3 jw + 3| = 1/3 at w = 0 (the denominator's
    # modulus squared (3 - w^2)^2 + 9 w^2 = 9 + 3 w^2 + w^4 grows), and Ms on a
    # numpy grid.
    plants = PLANTS + '\n[plants.uu]\nkind = "zero_pole_gain"\ngain = 1.0\nzeros = []\n' \
                      'poles = [1.0, 2.0]\n'
    _, report, _ = check(simple_project(tmp_path, 1.0, "uu", files={"plants.toml": plants}))
    v = only_variant(report)
    st, m = v["stability"], v["margins"]
    assert (st["stable"], st["open_loop_unstable_poles"], st["ccw_encirclements"],
            st["closed_loop_unstable_poles"]) == (False, 2, 0, 2)
    assert m["stable_gain_ranges_db"] == []
    assert m["crossovers"] == [] and m["phase_margin_deg"] is None
    assert m["complementary_peak_db"] == pytest.approx(db(1 / 3), abs=1e-6)
    w = np.logspace(-3, 3, 200001)
    s = 1j * w
    ms = np.max(np.abs((s - 1) * (s - 2) / (s * s - 3 * s + 3)))
    assert m["sensitivity_peak_db"] == pytest.approx(db(ms), abs=1e-4)


@pytest.mark.parametrize(("fmt", "a", "flagged"), [
    # q2.4 has steps of 1/16. a1 = 1.40625 is 22.5 steps, a tie: to even ->
    # 22 steps = 1.375, z^2 + 1.375 z + 0.4375 stays stable (|a1| < 1 + a2,
    # the stability triangle of a second-order polynomial; Jury's test, from
    # memory); rounding away would give 1.4375 = 1 + a2, a pole at z = -1.
    ("q2.4", [1.0, 1.40625, 0.4375], False),
    # a1 = 1.42 = 22.72 steps rounds to nearest, 23 steps = 1.4375: the pole
    # at z = -1 (marginal), which quantization.robust reports.
    ("q2.4", [1.0, 1.42, 0.4375], True),
    # q1.3 spans [-1, 0.875]: a2 = 0.95 rounds to 1.0 and saturates at
    # 0.875: z^2 + 0.875 is stable (without saturation 1.0 -> wrapped -1.0
    # would put poles at +-1).
    ("q1.3", [1.0, 0.0, 0.95], False),
])
def test_fixed_point_rounding_ties_to_even_and_saturation(tmp_path, fmt, a, flagged):
    # section 3: coefficients of the second-order sections rounded to nearest,
    # ties to even, and saturated. The same filter in float64 is never flagged.
    plants = PLANTS + '\n[plants.lag]\nkind = "zero_pole_gain"\ngain = 5.0\nzeros = []\n' \
                      'poles = [-5.0]\n'
    found = {}
    for numeric in (fmt, "float64"):
        ctl = (f'[c]\nkind = "pid"\nkp = 0.25\nki = 0.0\nnumeric_format = "{numeric}"\n'
               f'[[c.filters]]\nkind = "biquad"\nb = [0.125, 0.0, 0.0]\na = {json.dumps(a)}\n')
        folder = simple_project(tmp_path / numeric, 1.0, "lag", extra="sample_rate_hz = 1000.0\n",
                                files={"plants.toml": plants, "ctl.toml": ctl})
        _, report, _ = check(folder)
        assert only_variant(report)["stability"]["stable"] is True
        found[numeric] = any(f["rule"] == "quantization.robust" for f in report["findings"])
    assert found == {fmt: flagged, "float64": False}


def test_discretization_methods_closed_form(tmp_path):
    # An integral-only PID, ki = 50, plant 1 (its ZOH equivalent is 1), fs =
    # 100 Hz (h = 0.01). Maps of 1/s (Astrom & Wittenmark, Computer-Controlled
    # Systems, 3rd ed. 1997, sec. 8.2; from memory):
    #  tustin:         ki h/2 (z+1)/(z-1) = 0.25 (z+1)/(z-1) = -0.25 j cot(t/2)
    #                  on the circle: |L| = 1 at tan(t/2) = 0.25, phase -90: PM 90
    #  backward_euler: ki h z/(z-1) = 0.5 z/(z-1) = 0.5 e^{jt/2}/(2j sin(t/2)):
    #                  crossover sin(t/2) = 0.25, PM = 90 + t/2 deg
    #  forward_euler:  ki h/(z-1) = 0.5/(z-1): sin(t/2) = 0.25, PM = 90 - t/2
    #  tustin_prewarp at prewarp_hz = 10: s -> (w0/tan(w0 h/2))(z-1)/(z+1), so
    #                  the factor is ki tan(w0 h/2)/w0: tan(t/2) = that, PM 90.
    w0 = 2 * math.pi * 10.0
    warp = 50.0 * math.tan(w0 * 0.005) / w0
    cases = {
        "tustin": (2 * math.atan(0.25), 90.0),
        "backward_euler": (2 * math.asin(0.25), 90.0 + math.degrees(math.asin(0.25))),
        "forward_euler": (2 * math.asin(0.25), 90.0 - math.degrees(math.asin(0.25))),
        "tustin_prewarp": (2 * math.atan(warp), 90.0),
    }
    ctl = ""
    for method in cases:
        extra = "prewarp_hz = 10.0\n" if method == "tustin_prewarp" else ""
        ctl += (f'[i_{method}]\nkind = "pid"\nkp = 0.0\nki = 50.0\n'
                f'discretization = "{method}"\n{extra}\n')
    rate = "sample_rate_hz = 100.0\n"
    loops = "".join(loop(f"i.{m}", "unit", f"i_{m}", extra=rate) for m in cases)
    folder = write(tmp_path, {"ruleguard.toml": manifest(loops), "plants.toml": PLANTS,
                              "ctl.toml": ctl})
    _, report, _ = check(folder)
    for method, (theta, pm) in cases.items():
        v = only_variant(report, f"i.{method}")
        assert v["stability"]["stable"] is True, method
        m = v["margins"]
        assert m["crossover_hz"] == pytest.approx(theta * 100.0 / (2 * math.pi), rel=1e-6), method
        assert m["phase_margin_deg"] == pytest.approx(pm, abs=1e-5), method
        assert m["delay_margin_samples"] == pytest.approx(math.radians(pm) / theta, rel=1e-6)
    # Tustin's L is purely imaginary on the unit circle (above), so |1 - L| =
    # |1 + L| and |S - 1/2| = |1 - L|/(2 |1 + L|) = 1/2: alpha = 2 exactly
    # (Seiler, Packard & Gahinet 2020): gain range unbounded, phase 90 deg.
    disk = only_variant(report, "i.tustin")["margins"]["disk_margin"]
    assert disk["alpha"] == pytest.approx(2.0, rel=1e-9)
    assert disk["gain_range_db"] == [None, None]
    assert disk["phase_deg"] == pytest.approx(90.0, rel=1e-9)
    by_name = {lp["name"]: lp for lp in report["loops"]}
    assert by_name["i.tustin_prewarp"]["analysis"]["discretization"]["controller"] == \
        "tustin_prewarp"


DEMO = Path(__file__).parent.parent / "fixtures" / "gimbal_demo"


@pytest.mark.skipif(not DEMO.is_dir(), reason="demo project not present")
@pytest.mark.parametrize("variants", [None, "{ samples = 5, seed = 11 }"])
def test_demo_project_report_keeps_the_contract(tmp_path, variants):
    # the demo (cascades, measured data, dead time, waivers, map/scale) through
    # every check of assert_contract, with corners and with a Latin hypercube
    project = tmp_path / "demo"
    shutil.copytree(DEMO, project)
    if variants is not None:
        path = project / "ruleguard.toml"
        text = path.read_text(encoding="utf-8")
        assert 'variants = "corners"' in text
        path.write_text(text.replace('variants = "corners"', f"variants = {variants}"),
                        encoding="utf-8")
    _, report, _ = check(project, "--as-of", "2026-12-01")
    assert report["summary"]["loops"] == len(report["loops"]) > 0
    if variants is not None:
        for lp in report["loops"]:
            if not (lp["analysed"] and len(lp["variants"]) > 1):
                continue
            ids = [v["id"] for v in lp["variants"]]
            if any(i.startswith("schedule-") for i in ids):
                # a scheduled loop (docs/formats-additions.md): the nominal, then each
                # operating point crossed with the samples
                members = [i.partition("/")[2] for i in ids if i.split("/")[0] == "schedule-1"]
                assert ids[0] == "nominal"
                assert members == [""] + [f"sample-{i}" for i in range(1, 6)]
            else:
                assert ids == ["nominal"] + [f"sample-{i}" for i in range(1, 6)]


def test_random_rational_loops_against_numpy_roots(tmp_path):
    # 24 random loops K N(s)/D(s) (seeded): the closed-loop poles are the roots
    # of D + K N (numpy.roots, independent). Checked: the count of right
    # half-plane roots is closed_loop_unstable_poles, P the count of D's,
    # and every stable_gain_ranges_db interval by roots just inside and
    # outside its ends.
    rng = np.random.default_rng(20261201)
    plants, ctl, loops, cases = PLANTS, "", "", {}
    while len(cases) < 24:
        i = len(cases)
        poles = list(rng.uniform(-6, 1.5, size=rng.integers(1, 4)))
        if rng.random() < 0.6:
            poles.append(complex(rng.uniform(-2, 0.5), rng.uniform(0.5, 6)))
        zeros = list(rng.uniform(-8, -0.2, size=rng.integers(0, 2)))
        k = float(10 ** rng.uniform(-0.5, 1.5))
        real = [p for p in poles if not isinstance(p, complex)]
        pairs = [p for p in poles if isinstance(p, complex)]
        den = np.real(np.poly(real + [q for p in pairs for q in (p, p.conjugate())]))
        num = np.real(np.poly(zeros)) if zeros else np.array([1.0])
        closed = np.roots(np.polyadd(den, k * num))
        if np.min(np.abs(closed.real)) < 1e-2 or np.min(np.abs(np.roots(den).real)) < 1e-2:
            continue  # keep clear of the boundary
        pole_items = [repr(float(p)) for p in real] + [
            f"{{ re = {p.real!r}, im = {p.imag!r} }}" for p in pairs]
        plants += (f'\n[plants.r{i}]\nkind = "zero_pole_gain"\ngain = 1.0\n'
                   f"zeros = [{', '.join(repr(float(z)) for z in zeros)}]\n"
                   f"poles = [{', '.join(pole_items)}]\n")
        ctl += p_table(f"c{i}", k)
        loops += loop(f"r.{i}", f"r{i}", f"c{i}")
        cases[f"r.{i}"] = (num, den, k)
    folder = write(tmp_path, {"ruleguard.toml": manifest(loops), "plants.toml": plants,
                              "ctl.toml": ctl})
    _, report, _ = check(folder)
    seen = {True: 0, False: 0}
    for name, (num, den, k) in cases.items():
        v = only_variant(report, name)
        st = v["stability"]

        def rhp(c: float, num=num, den=den) -> int:
            return int(np.sum(np.roots(np.polyadd(den, c * num)).real > 0))

        assert st["open_loop_unstable_poles"] == int(np.sum(np.roots(den).real > 0)), name
        assert st["closed_loop_unstable_poles"] == rhp(k), name
        seen[st["stable"]] += 1
        for lo, hi in v["margins"]["stable_gain_ranges_db"]:
            for end, inside in ((lo, 0.02), (hi, -0.02)):
                if end is None:
                    continue
                assert rhp(k * 10 ** ((end + inside) / 20)) == 0, (name, end)
                assert rhp(k * 10 ** ((end - inside) / 20)) > 0, (name, end)
    assert seen[True] and seen[False]  # both kinds occur


def test_random_discrete_loops_against_numpy_roots(tmp_path):
    # 20 random z-domain loops K N(z)/D(z) (controller transfer_function,
    # domain z, plant 1): closed-loop poles = roots of D + K N, unstable when
    # |z| > 1 (numpy.roots, independent); same checks as the continuous case.
    rng = np.random.default_rng(7)
    ctl, loops, cases = "", "", {}
    rate = "sample_rate_hz = 200.0\n"
    while len(cases) < 20:
        i = len(cases)
        poles = list(rng.uniform(-0.9, 1.3, size=rng.integers(1, 3)))
        if rng.random() < 0.5:
            r, a = rng.uniform(0.3, 1.2), rng.uniform(0.2, 2.8)
            poles += [r * cmath.exp(1j * a), r * cmath.exp(-1j * a)]
        zeros = list(rng.uniform(-0.9, 0.9, size=rng.integers(0, len(poles))))
        k = float(10 ** rng.uniform(-1.5, 0.3))
        den = np.real(np.poly(poles))
        num = k * (np.real(np.poly(zeros)) if zeros else np.array([1.0]))
        closed = np.abs(np.roots(np.polyadd(den, num)))
        if np.min(np.abs(closed - 1)) < 1e-2 or np.min(np.abs(np.abs(np.roots(den)) - 1)) < 1e-2:
            continue
        ctl += (f'[c{i}]\nkind = "transfer_function"\ndomain = "z"\n'
                f"numerator = {json.dumps([float(x) for x in num])}\n"
                f"denominator = {json.dumps([float(x) for x in den])}\n\n")
        loops += loop(f"z.{i}", "unit", f"c{i}", extra=rate)
        cases[f"z.{i}"] = (num, den)
    folder = write(tmp_path, {"ruleguard.toml": manifest(loops), "plants.toml": PLANTS,
                              "ctl.toml": ctl})
    _, report, _ = check(folder)
    seen = {True: 0, False: 0}
    for name, (num, den) in cases.items():
        v = only_variant(report, name)
        st = v["stability"]

        def outside(c: float, num=num, den=den) -> int:
            return int(np.sum(np.abs(np.roots(np.polyadd(den, c * num))) > 1))

        assert st["open_loop_unstable_poles"] == int(np.sum(np.abs(np.roots(den)) > 1)), name
        assert st["closed_loop_unstable_poles"] == outside(1.0), name
        seen[st["stable"]] += 1
        for lo, hi in v["margins"]["stable_gain_ranges_db"]:
            for end, inside in ((lo, 0.02), (hi, -0.02)):
                if end is None:
                    continue
                assert outside(10 ** ((end + inside) / 20)) == 0, (name, end)
                assert outside(10 ** ((end - inside) / 20)) > 0, (name, end)
    assert seen[True] and seen[False]


def test_delay_margin_is_the_destabilising_delay(tmp_path):
    # "delay_margin_s: the smallest extra delay that destabilises the loop".
    # K = 3 on 1/(s(s+1)(s+2)): DM = PM/w_c from the cubic above; with a loop
    # delay_s of 0.98 DM the loop stays stable, with 1.02 DM it is not.
    wc = _third_crossover(3.0)
    dm = math.radians(90.0 - math.degrees(math.atan(wc) + math.atan(wc / 2))) / wc
    loops = (loop("d.below", "third", "c", extra=f"delay_s = {0.98 * dm!r}\n")
             + loop("d.above", "third", "c", extra=f"delay_s = {1.02 * dm!r}\n"))
    folder = write(tmp_path, {"ruleguard.toml": manifest(loops), "plants.toml": PLANTS,
                              "ctl.toml": p_table("c", 3.0)})
    _, report, _ = check(folder)
    below, above = only_variant(report, "d.below"), only_variant(report, "d.above")
    assert below["stability"]["stable"] is True
    assert above["stability"]["stable"] is False
    assert below["margins"]["delay_margin_s"] == pytest.approx(0.02 * dm, rel=1e-3)


def test_finding_names_the_worst_variant(tmp_path):
    # RULES.md: a finding names the worst variant. g/(s(s+1)(s+2)) with g in
    # [2, 5], nominal 3: PM falls and GM = 6/g (Routh-Hurwitz) shrinks as g
    # grows, so corner-2 (g = 5) is the worst: PM from the cubic with K = 5.
    plants = PLANTS + """
[plants.fam]
kind = "zero_pole_gain"
gain = 3.0
zeros = []
poles = [0.0, -1.0, -2.0]
vary = { gain = { min = 2.0, max = 5.0 } }
"""
    _, report, _ = check(simple_project(tmp_path, 1.0, "fam", files={"plants.toml": plants}))
    by_rule = {f["rule"]: f for f in report["findings"]}
    wc = _third_crossover(5.0)
    assert by_rule["margin.phase"]["variant"] == "corner-2"
    assert by_rule["margin.phase"]["measured"] == pytest.approx(
        90.0 - math.degrees(math.atan(wc) + math.atan(wc / 2)), abs=1e-5)
    assert by_rule["margin.gain"]["variant"] == "corner-2"
    assert by_rule["margin.gain"]["measured"] == pytest.approx(db(6 / 5), abs=1e-6)


def test_every_gain_crossover_is_listed(tmp_path):
    # L = 2/s * 100/(s^2 + 0.2 s + 100): |L| = 1 near w = 2 and twice more
    # around the resonance at 10 rad/s, where |L| = 2/10 * 100/2 = 10. Each
    # crossing found by scipy brentq on log|L| over a dense numpy grid, its PM
    # = 180 + arg L wrapped to (-180, 180] (independent computation).
    from scipy.optimize import brentq

    plants = PLANTS + """
[plants.res]
kind = "zero_pole_gain"
gain = 200.0
zeros = []
poles = [0.0, { re = -0.1, im = 9.9994999875 }]
"""

    def ell(w: float) -> complex:
        s = 1j * w
        return 200.0 / (s * (s * s + 0.2 * s + 100.0))

    grid = np.logspace(-1, 3, 200001)
    mag = np.log(np.abs([ell(w) for w in grid]))
    idx = np.flatnonzero(np.sign(mag[:-1]) != np.sign(mag[1:]))
    roots = [brentq(lambda w: math.log(abs(ell(w))), grid[i], grid[i + 1], xtol=1e-14)
             for i in idx]
    assert len(roots) == 3

    def pm(w: float) -> float:
        return (180.0 + math.degrees(cmath.phase(ell(w))) + 180.0) % 360.0 - 180.0

    _, report, _ = check(simple_project(tmp_path, 1.0, "res", files={"plants.toml": plants}))
    crossings = only_variant(report)["margins"]["crossovers"]
    assert [c["hz"] for c in crossings] == pytest.approx([hz(w) for w in roots], rel=1e-6)
    for c, w in zip(crossings, roots, strict=True):
        got = (c["phase_margin_deg"] + 180.0) % 360.0 - 180.0  # same wrap
        assert got == pytest.approx(pm(w), abs=1e-4)


def test_internal_error_exit_3(tmp_path, monkeypatch):
    # section 6: exit 3 for a bug; the message says so and asks for a report.
    # The bug is injected (the only way to cause one from outside).
    import ruleguard.pipeline

    def broken(*args, **kwargs):
        raise ZeroDivisionError("injected")

    monkeypatch.setattr(ruleguard.pipeline, "check_project", broken)
    folder = simple_project(tmp_path, 1.0)
    code, _, err = cli(["check", "--manifest", str(folder / "ruleguard.toml"), "--no-cache"])
    assert code == 3
    assert "internal error" in err and "report" in err.lower()
    assert "Traceback" not in err


def test_prewarp_frequencies_of_lead_lag_and_lowpass(tmp_path):
    # Tustin with prewarping at w0 matches the continuous response exactly at
    # w0 (Astrom & Wittenmark 1997, sec. 8.2; from memory). Section 3: a
    # lead-lag is prewarped at sqrt(zero_hz pole_hz), a low-pass at its cutoff.
    # Lead-lag gain 0.5, zero 10 Hz, pole 40 Hz: |C| at 20 Hz = 0.5 sqrt(1 + 4)/
    # sqrt(1 + 1/4) = 1, and |C| rises monotonically: the crossover is exactly
    # 20 Hz. kp = sqrt(2) with lowpass1 at 50 Hz: |L| = 1 exactly at 50 Hz.
    # Plain Tustin warps both away (w_d = (2/h) atan(w h/2) != w).
    ctl = ""
    for method in ("tustin", "tustin_prewarp"):
        ctl += (f'[ll_{method}]\nkind = "lead_lag"\ngain = 0.5\nzero_hz = 10.0\n'
                f'pole_hz = 40.0\ndiscretization = "{method}"\n\n'
                f'[lp_{method}]\nkind = "pid"\nkp = {math.sqrt(2)!r}\nki = 0.0\n'
                f'discretization = "{method}"\n[[lp_{method}.filters]]\nkind = "lowpass1"\n'
                'cutoff_hz = 50.0\n\n')
    rate = "sample_rate_hz = 500.0\n"
    loops = "".join(loop(f"{b}.{m}", "unit", f"{b}_{m}", extra=rate)
                    for b in ("ll", "lp") for m in ("tustin", "tustin_prewarp"))
    folder = write(tmp_path, {"ruleguard.toml": manifest(loops), "plants.toml": PLANTS,
                              "ctl.toml": ctl})
    _, report, _ = check(folder)
    fc = {lp["name"]: lp["variants"][0]["margins"]["crossover_hz"] for lp in report["loops"]}
    assert fc["ll.tustin_prewarp"] == pytest.approx(20.0, rel=1e-7)
    assert fc["lp.tustin_prewarp"] == pytest.approx(50.0, rel=1e-7)
    assert abs(fc["ll.tustin"] / 20.0 - 1) > 1e-3
    assert abs(fc["lp.tustin"] / 50.0 - 1) > 1e-3


def test_waiver_expiry_defaults_to_today(tmp_path):
    # without --as-of the date is today's (UTC): a waiver that expired in 2000
    # no longer applies and is named by waiver.expired; one until 2999 applies.
    ruleset = ('[ruleset]\nname = "x"\nbased_on = "baseline"\n\n'
               '[[waivers]]\nrule = "margin.phase"\nloops = ["a.*"]\nreason = "old"\n'
               'expires = 2000-01-01\n\n'
               '[[waivers]]\nrule = "sensitivity.peak"\nloops = ["a.*"]\nreason = "long"\n'
               'expires = 2999-12-31\n')
    folder = simple_project(tmp_path, 3.0, ruleset="house.toml", files={"house.toml": ruleset})
    _, report, _ = check(folder)
    by_rule = {f["rule"]: f for f in report["findings"]}
    assert by_rule["margin.phase"]["waived"] is False
    assert by_rule["sensitivity.peak"]["waived"] is True
    assert by_rule["waiver.expired"]["severity"] == "warning"
    assert "margin.phase" in by_rule["waiver.expired"]["message"]


@pytest.mark.parametrize("where", ["controller", "ruleset", "measured", "absolute", "based_on"])
def test_no_reference_outside_the_manifest_folder(tmp_path, where):
    # section 1: no referenced file may resolve outside the manifest's folder
    outside = write(tmp_path, {"x/ctl.toml": p_table("c", 1.0),
                               "x/rules.toml": '[ruleset]\nname = "o"\nbased_on = "baseline"\n',
                               "x/s.csv": _sweep_csv(np.logspace(-3, 2, 50))}) / "x"
    files = {"ruleguard.toml": manifest(loop("a.loop", "third", "c")), "plants.toml": PLANTS,
             "ctl.toml": p_table("c", 1.0)}
    if where == "controller":
        files["ruleguard.toml"] = manifest(loop("a.loop", "third", "c", file="../x/ctl.toml"))
    elif where == "ruleset":
        files["ruleguard.toml"] = manifest(loop("a.loop", "third", "c"), ruleset="../x/rules.toml")
    elif where == "measured":
        files["plants.toml"] = PLANTS + ('\n[plants.swept]\nkind = "measured_response"\n'
                                         'file = "../x/s.csv"\nunstable_poles = 0\n'
                                         'integrators = 1\n')
        files["ruleguard.toml"] = manifest(loop("a.loop", "swept", "c"))
    elif where == "absolute":
        files["ruleguard.toml"] = manifest(loop("a.loop", "third", "c",
                                                file=str(outside / "ctl.toml")))
    else:
        files["house.toml"] = '[ruleset]\nname = "h"\nbased_on = "../x/rules.toml"\n'
        files["ruleguard.toml"] = manifest(loop("a.loop", "third", "c"), ruleset="house.toml")
    err = bad(write(tmp_path / "proj", files))
    assert re.search(r"\.toml:\d+:\d+", err), err


def test_report_never_overwrites_an_input(tmp_path):
    # section 6: never writes to any input file, even when asked to
    folder = simple_project(tmp_path, 3.0)
    before = (folder / "ctl.toml").read_bytes()
    code, _, err = cli(["check", "--manifest", str(folder / "ruleguard.toml"), "--no-cache",
                        "--format", "json", "--output", str(folder / "ctl.toml")])
    assert code == 2 and "Traceback" not in err
    assert (folder / "ctl.toml").read_bytes() == before
