"""Gain schedules: every breakpoint and midpoint against the same loop written by hand.

The scheduled loop (one loop, a schedule of rows or of parallel arrays, a
plant whose gain depends on the scheduling variable through an expression)
must give, at every breakpoint ``schedule-k`` and midpoint ``schedule-k.5``
and at every corner of the plant family, exactly the margins of a project in
which each of those operating points is written out by hand as a loop of its
own: a plant entry with the gain factor computed here in Python (a plain
number, no scheduling expression), and a controller table with the row's
gains (the midpoint's gains averaged here). That independent construction is
the reference; closed forms check the numbers themselves.
"""

from __future__ import annotations

import json
import math
import re
from pathlib import Path

import pytest

from ruleguard.pipeline import CheckOptions, check_project
from ruleguard.report.json_report import report_data

#: Breakpoints of the test schedule: (speed_mps, kp, ki).
ROWS = [(0.0, 2.0, 4.0), (10.0, 1.4, 3.0), (20.0, 1.0, 2.5), (30.0, 0.8, 2.0)]
K0 = 2.0
K0_RANGE = (1.5, 2.5)
SAMPLE_RATE_HZ = 200.0


def factor(speed: float) -> float:
    """The plant gain factor (1 + speed/20) the registry expression encodes."""
    return 1.0 + speed / 20.0


def plant_text(gain: str, extra: str = "", name: str = "wing") -> str:
    return (
        f"[plants.{name}]\n"
        'kind = "first_order_dead_time"\n'
        f'gain = "{gain}"\n'
        "time_constant_s = 0.5\n"
        "delay_s = 0.01\n"
        f"{extra}"
        f"vary = {{ k0 = {{ min = {K0_RANGE[0]}, max = {K0_RANGE[1]} }} }}\n"
    )


def scheduled_files(form: str) -> dict[str, str]:
    binding = ('schedule = { variable = "speed_mps", rows = "schedule" }' if form == "rows"
               else 'schedule = { variable = "speed_mps", breakpoints = "speed_mps" }')
    manifest = (
        '[project]\nname = "scheduled"\nplants = ["plants.toml"]\n\n'
        '[[loops]]\nname = "pitch"\nplant = "wing"\n'
        f'controller = {{ file = "fw.toml", path = "pitch", {binding} }}\n'
        f"sample_rate_hz = {SAMPLE_RATE_HZ}\ndelay_samples = 1.0\n"
    )
    plants = plant_text(
        "k0 * (1 + speed_mps / 20)",
        f"parameters = {{ k0 = {K0}, speed_mps = 10.0 }}\n"
        "operating_range = { speed_mps = [0.0, 30.0] }\n",
    )
    if form == "rows":
        firmware = '[pitch]\nkind = "pid"\ndiscretization = "tustin"\n'
        for speed, kp, ki in ROWS:
            firmware += f"\n[[pitch.schedule]]\nspeed_mps = {speed}\nkp = {kp}\nki = {ki}\n"
    else:
        firmware = (
            '[pitch]\nkind = "pid"\ndiscretization = "tustin"\n'
            f"speed_mps = {[r[0] for r in ROWS]}\n"
            f"kp = {[r[1] for r in ROWS]}\n"
            f"ki = {[r[2] for r in ROWS]}\n"
        )
    return {"ruleguard.toml": manifest, "plants.toml": plants, "fw.toml": firmware}


def operating_points() -> list[tuple[str, float, float, float]]:
    """(label, speed, kp, ki) of every breakpoint and midpoint, interpolated by hand."""
    points = []
    for i, (speed, kp, ki) in enumerate(ROWS):
        points.append((str(i + 1), speed, kp, ki))
        if i + 1 < len(ROWS):
            s2, kp2, ki2 = ROWS[i + 1]
            points.append((f"{i + 1}.5", (speed + s2) / 2, (kp + kp2) / 2, (ki + ki2) / 2))
    return points


def hand_files() -> dict[str, str]:
    """One loop per operating point, plant gain factor and gains written as numbers."""
    manifest = '[project]\nname = "by-hand"\nplants = ["plants.toml"]\n'
    plants = ""
    firmware = ""
    for label, speed, kp, ki in operating_points():
        tag = label.replace(".", "_")
        manifest += (
            f'\n[[loops]]\nname = "point{tag}"\nplant = "wing{tag}"\n'
            f'controller = {{ file = "fw.toml", path = "p{tag}" }}\n'
            f"sample_rate_hz = {SAMPLE_RATE_HZ}\ndelay_samples = 1.0\n"
        )
        plants += plant_text(f"k0 * {factor(speed)!r}", f"parameters = {{ k0 = {K0} }}\n",
                             name=f"wing{tag}") + "\n"
        firmware += (f'[p{tag}]\nkind = "pid"\ndiscretization = "tustin"\n'
                     f"kp = {kp!r}\nki = {ki!r}\n\n")
    return {"ruleguard.toml": manifest, "plants.toml": plants, "fw.toml": firmware}


def write(folder: Path, files: dict[str, str]) -> Path:
    folder.mkdir(parents=True, exist_ok=True)
    for name, text in files.items():
        (folder / name).write_text(text, encoding="utf-8")
    return folder / "ruleguard.toml"


def run(manifest: Path) -> dict:
    report = check_project(manifest, CheckOptions(time_budget_s=None))
    return json.loads(json.dumps(report_data(report)))


MARGIN_KEYS = (
    "gain_margin_db", "gain_margin_hz", "phase_margin_deg", "crossover_hz",
    "delay_margin_s", "sensitivity_peak_db", "complementary_peak_db", "bandwidth_hz",
)


def assert_same_margins(got: dict, want: dict, what: str) -> None:
    assert got["stability"] == want["stability"], what
    for name in MARGIN_KEYS:
        a, b = got["margins"][name], want["margins"][name]
        if b is None:
            assert a is None, (what, name)
        else:
            assert a == pytest.approx(b, rel=1e-9, abs=1e-12), (what, name)
    assert got["margins"]["disk_margin"]["alpha"] == pytest.approx(
        want["margins"]["disk_margin"]["alpha"], rel=1e-9), what


@pytest.fixture(scope="module")
def reports(tmp_path_factory):
    base = tmp_path_factory.mktemp("schedules")
    return {
        "rows": run(write(base / "rows", scheduled_files("rows"))),
        "arrays": run(write(base / "arrays", scheduled_files("arrays"))),
        "hand": run(write(base / "hand", hand_files())),
    }


def test_variant_ids_nominal_first_then_points_crossed_with_corners(reports):
    loop = reports["rows"]["loops"][0]
    ids = [v["id"] for v in loop["variants"]]
    assert ids[0] == "nominal"  # FORMATS.md section 5: variants[0] is the nominal
    expected = []
    for label, *_ in operating_points():
        expected += [f"schedule-{label}", f"schedule-{label}/corner-1",
                     f"schedule-{label}/corner-2"]
    assert ids[1:] == expected
    by_id = {v["id"]: v for v in loop["variants"]}
    # the scheduling value appears in the variant's parameters, qualified by the plant
    for label, speed, *_ in operating_points():
        assert by_id[f"schedule-{label}"]["parameters"] == {"wing.k0": K0, "wing.speed_mps": speed}
        assert by_id[f"schedule-{label}/corner-1"]["parameters"]["wing.k0"] == K0_RANGE[0]
        assert by_id[f"schedule-{label}/corner-2"]["parameters"]["wing.k0"] == K0_RANGE[1]
    assert by_id["nominal"]["parameters"] == {"wing.k0": K0, "wing.speed_mps": 10.0}


@pytest.mark.parametrize("form", ["rows", "arrays"])
def test_every_point_matches_the_loop_written_by_hand(reports, form):
    # reference: the same operating point as a separate, unscheduled loop (module doc)
    scheduled = {v["id"]: v for v in reports[form]["loops"][0]["variants"]}
    hand = {loop["name"]: {v["id"]: v for v in loop["variants"]}
            for loop in reports["hand"]["loops"]}
    compared = 0
    for label, *_ in operating_points():
        by_hand = hand[f"point{label.replace('.', '_')}"]
        for member in ("nominal", "corner-1", "corner-2"):
            vid = f"schedule-{label}" + ("" if member == "nominal" else f"/{member}")
            assert_same_margins(scheduled[vid], by_hand[member], vid)
            compared += 1
    assert compared == 3 * (2 * len(ROWS) - 1)


def test_nominal_is_the_interpolated_nominal_operating_point(reports):
    # nominal speed 10 m/s is breakpoint 2: the nominal variant is that loop at k0 nominal
    variants = {v["id"]: v for v in reports["rows"]["loops"][0]["variants"]}
    assert_same_margins(variants["nominal"], variants["schedule-2"], "nominal")


def test_crossover_of_an_integrating_schedule_is_closed_form(tmp_path):
    # L = kp * k0 (1 + v/20) / s (continuous, no delay): |L(jw)| = 1 at w = kp k0 (1 + v/20)
    # rad/s (closed form), for breakpoints and for the interpolated midpoints alike.
    rows = [(0.0, 1.0), (20.0, 3.0)]
    report = run(write(tmp_path, integrating_files(rows, (0.0, 20.0))))
    variants = {v["id"]: v for v in report["loops"][0]["variants"]}
    points = {"1": (0.0, 1.0), "1.5": (10.0, 2.0), "2": (20.0, 3.0)}
    for label, (speed, kp) in points.items():
        w = kp * 2.0 * factor(speed)
        assert variants[f"schedule-{label}"]["margins"]["crossover_hz"] == pytest.approx(
            w / (2 * math.pi), rel=1e-9)
        # PM of k/s is 90 deg (closed form)
        assert variants[f"schedule-{label}"]["margins"]["phase_margin_deg"] == pytest.approx(90.0)


def integrating_files(rows, operating_range, delay_s: float = 0.0, extra_ruleset: str = ""):
    manifest = (
        '[project]\nname = "integrating"\nplants = ["plants.toml"]\nruleset = "rules.toml"\n\n'
        '[[loops]]\nname = "yaw"\nplant = "body"\n'
        'controller = { file = "fw.toml", path = "yaw", '
        'schedule = { variable = "speed_mps", rows = "schedule" } }\n'
    )
    plants = (
        '[plants.body]\nkind = "integrator_dead_time"\ngain = "k0 * (1 + speed_mps / 20)"\n'
        f"delay_s = {delay_s}\nparameters = {{ k0 = 2.0, speed_mps = {rows[0][0]} }}\n"
        f"operating_range = {{ speed_mps = [{operating_range[0]}, {operating_range[1]}] }}\n"
    )
    firmware = '[yaw]\nkind = "pid"\n'
    for speed, kp in rows:
        firmware += f"\n[[yaw.schedule]]\nspeed_mps = {speed}\nkp = {kp}\n"
    ruleset = '[ruleset]\nname = "test"\n' + extra_ruleset
    return {"ruleguard.toml": manifest, "plants.toml": plants, "fw.toml": firmware,
            "rules.toml": ruleset}


def row_header_lines(text: str) -> list[int]:
    """1-based lines of the ``[[...schedule]]`` headers, found by scanning the text."""
    return [i + 1 for i, line in enumerate(text.splitlines()) if re.match(r"\[\[", line)]


def test_failing_breakpoint_points_at_its_row(tmp_path):
    # L = kp g e^{-s tau}/s: crossover w_c = kp g, PM = 90 deg - w_c tau (closed form).
    # tau = 0.1 s: breakpoint 1 (kp 1, g 2): w_c = 2, PM = 90 - 11.46 = 78.5 deg;
    # breakpoint 3 (kp 3, g 4): w_c = 12, PM = 90 - 68.75 = 21.25 deg < 30 (baseline).
    rows = [(0.0, 1.0), (10.0, 1.4), (20.0, 3.0)]
    files = integrating_files(rows, (0.0, 20.0), delay_s=0.1,
                              extra_ruleset='[rules."margin.phase"]\nmin_deg = 30.0\n')
    report = run(write(tmp_path, files))
    variants = {v["id"]: v for v in report["loops"][0]["variants"]}
    for label, (speed, kp) in {"1": rows[0][:2], "3": rows[2][:2]}.items():
        w = kp * 2.0 * factor(speed)
        assert variants[f"schedule-{label}"]["margins"]["phase_margin_deg"] == pytest.approx(
            90.0 - math.degrees(w * 0.1), rel=1e-6)
    phase = [f for f in report["findings"] if f["rule"] == "margin.phase"]
    assert len(phase) == 1
    assert phase[0]["variant"] == "schedule-3"
    assert phase[0]["measured"] == pytest.approx(90.0 - math.degrees(1.2), rel=1e-6)
    header = row_header_lines(files["fw.toml"])[2]
    assert phase[0]["location"]["file"] == "fw.toml"
    assert phase[0]["location"]["line"] == header
    assert phase[0]["location"]["key"] == "yaw.schedule.2"
    # the controller table follows as a related location
    assert any(r["key"] == "yaw" for r in phase[0]["related"])


def test_failing_array_element_is_located(tmp_path):
    # same loop with parallel arrays: the finding points at breakpoint 3's element
    files = integrating_files([(0.0, 1.0), (10.0, 1.4), (20.0, 3.0)], (0.0, 20.0),
                              delay_s=0.1)
    files["ruleguard.toml"] = files["ruleguard.toml"].replace(
        'rows = "schedule"', 'breakpoints = "speeds"')
    files["fw.toml"] = '[yaw]\nkind = "pid"\nspeeds = [0.0, 10.0, 20.0]\nkp = [1.0, 1.4, 3.0]\n'
    report = run(write(tmp_path, files))
    phase = [f for f in report["findings"] if f["rule"] == "margin.phase"]
    assert phase[0]["variant"] == "schedule-3"
    # the breakpoint element "20.0": line 3, its column found by scanning the text
    line = files["fw.toml"].splitlines()[2]
    assert phase[0]["location"]["line"] == 3
    assert phase[0]["location"]["column"] == line.index("20.0") + 1
    assert phase[0]["location"]["key"] == "yaw.speeds.2"


class TestCoverage:
    def findings(self, tmp_path, rows, operating_range):
        report = run(write(tmp_path, integrating_files(rows, operating_range)))
        return [f for f in report["findings"] if f["rule"] == "schedule.coverage"]

    def test_covering_schedule_passes(self, tmp_path):
        assert self.findings(tmp_path, [(0.0, 1.0), (30.0, 0.6)], (0.0, 30.0)) == []

    def test_range_beyond_last_breakpoint_fails_at_that_row(self, tmp_path):
        found = self.findings(tmp_path, [(0.0, 1.0), (20.0, 0.7)], (0.0, 30.0))
        assert [(f["severity"], f["measured"], f["limit"]) for f in found] == [
            ("error", 20.0, 30.0)]
        assert found[0]["location"]["key"] == "yaw.schedule.1.speed_mps"

    def test_range_below_first_breakpoint_fails(self, tmp_path):
        found = self.findings(tmp_path, [(5.0, 1.0), (30.0, 0.6)], (0.0, 30.0))
        assert [(f["measured"], f["limit"]) for f in found] == [(5.0, 0.0)]
        assert found[0]["location"]["key"] == "yaw.schedule.0.speed_mps"

    def test_undeclared_range_is_a_note(self, tmp_path):
        files = integrating_files([(0.0, 1.0), (30.0, 0.6)], (0.0, 30.0))
        files["plants.toml"] = "\n".join(
            line for line in files["plants.toml"].splitlines()
            if not line.startswith("operating_range")) + "\n"
        report = run(write(tmp_path, files))
        found = [f for f in report["findings"] if f["rule"] == "schedule.coverage"]
        assert [f["severity"] for f in found] == ["note"]


class TestSmoothness:
    def test_step_in_crossover_is_a_warning_with_the_closed_form_ratio(self, tmp_path):
        # w_c = kp k0 (1 + v/20) (closed form for k/s): breakpoint 1: 1*2*1 = 2 rad/s,
        # breakpoint 2: 3*2*2 = 12 rad/s -> ratio 6 > 2 (default max_ratio).
        report = run(write(tmp_path, integrating_files([(0.0, 1.0), (20.0, 3.0)], (0.0, 20.0))))
        found = [f for f in report["findings"] if f["rule"] == "schedule.smoothness"]
        assert len(found) == 1
        assert found[0]["severity"] == "warning"
        assert found[0]["measured"] == pytest.approx(6.0, rel=1e-9)
        assert found[0]["limit"] == 2.0
        assert found[0]["location"]["key"] == "yaw.schedule.1"

    def test_constant_crossover_passes(self, tmp_path):
        # kp = 1/(1 + v/20): w_c = 2 rad/s at every breakpoint (ratio 1)
        rows = [(0.0, 1.0), (10.0, 1.0 / 1.5), (20.0, 0.5)]
        report = run(write(tmp_path, integrating_files(rows, (0.0, 20.0))))
        assert [f for f in report["findings"] if f["rule"] == "schedule.smoothness"] == []

    def test_ratio_is_configurable(self, tmp_path):
        # ratio 1.5 (kp 1 -> 0.75 * 2 at v = 20: w 2 -> 3): passes at 2, fails at 1.2
        rows = [(0.0, 1.0), (20.0, 0.75)]
        strict = '[rules."schedule.smoothness"]\nmax_ratio = 1.2\n'
        report = run(write(tmp_path, integrating_files(rows, (0.0, 20.0), extra_ruleset=strict)))
        found = [f for f in report["findings"] if f["rule"] == "schedule.smoothness"]
        assert [f["measured"] for f in found] == [pytest.approx(1.5, rel=1e-9)]


def test_midpoints_can_be_turned_off(tmp_path):
    files = integrating_files([(0.0, 1.0), (10.0, 1.0), (20.0, 1.0)], (0.0, 20.0),
                              extra_ruleset='[rules."schedule.coverage"]\nmidpoints = false\n')
    report = run(write(tmp_path, files))
    ids = [v["id"] for v in report["loops"][0]["variants"]]
    assert ids == ["nominal", "schedule-1", "schedule-2", "schedule-3"]
    assert report["summary"]["evaluations"] == 4


# ------------------------------------------------------------------ the demo's scheduled loop
DEMO = Path(__file__).resolve().parents[1] / "fixtures" / "gimbal_demo"


def demo_hand_files() -> dict[str, str]:
    """The demo's window heater, one loop per breakpoint and midpoint, written out by hand.

    The window plant's law k0/(1 + wind/8), tau0/(1 + wind/8) and the PLC's
    per-scan integral gain (x 2 to per second) are applied here in Python
    from the demo files' numbers; the loops carry plain numbers only.
    """
    table = json.loads((DEMO / "plc" / "window_heater.json").read_text())["pi"]["wind_table"]
    rows = [(r["wind_mps"], r["P"], 2.0 * r["I_per_scan"]) for r in table]
    points = []
    for i, (wind, kp, ki) in enumerate(rows):
        points.append((str(i + 1), wind, kp, ki))
        if i + 1 < len(rows):
            w2, kp2, ki2 = rows[i + 1]
            points.append((f"{i + 1}.5", (wind + w2) / 2, (kp + kp2) / 2, (ki + ki2) / 2))
    manifest = '[project]\nname = "window-by-hand"\nplants = ["plants.toml"]\n'
    plants, firmware = "", ""
    for label, wind, kp, ki in points:
        tag = label.replace(".", "_")
        slow = 1.0 + wind / 8.0
        manifest += (
            f'\n[[loops]]\nname = "w{tag}"\nplant = "window{tag}"\n'
            f'controller = {{ file = "fw.toml", path = "p{tag}" }}\n'
            "sample_rate_hz = 2.0\ndelay_samples = 1.0\n"
        )
        plants += (
            f'[plants.window{tag}]\nkind = "first_order_dead_time"\n'
            f'gain = "k0 / {slow!r}"\ntime_constant_s = {40.0 / slow!r}\ndelay_s = 3.0\n'
            "parameters = { k0 = 0.5 }\nvary = { k0 = { min = 0.4, max = 0.6 } }\n\n"
        )
        firmware += f'[p{tag}]\nkind = "pid"\nkp = {kp!r}\nki = {ki!r}\n\n'
    return {"ruleguard.toml": manifest, "plants.toml": plants, "fw.toml": firmware}, points


def test_demo_window_heater_matches_the_loops_written_by_hand(tmp_path):
    demo = run(DEMO / "ruleguard.toml")
    window = next(loop for loop in demo["loops"] if loop["name"] == "window.heater")
    scheduled = {v["id"]: v for v in window["variants"]}
    files, points = demo_hand_files()
    hand = {loop["name"]: {v["id"]: v for v in loop["variants"]}
            for loop in run(write(tmp_path, files))["loops"]}
    assert len(points) == 7  # 4 rows, 3 midpoints
    for label, wind, _, _ in points:
        by_hand = hand[f"w{label.replace('.', '_')}"]
        for member in ("nominal", "corner-1", "corner-2"):
            vid = f"schedule-{label}" + ("" if member == "nominal" else f"/{member}")
            assert scheduled[vid]["parameters"]["window_thermal.wind_mps"] == wind
            assert_same_margins(scheduled[vid], by_hand[member], vid)
    # the demo's window heater passes every rule at every point (deliberately)
    assert not [f for f in demo["findings"] if f["loop"] == "window.heater"]


def test_bounds_are_checked_at_every_breakpoint(tmp_path):
    # bounds kp in [0.5, 2.5]: breakpoint 3 (kp 3.0) is the one outside, by 0.5
    files = integrating_files([(0.0, 1.0), (10.0, 0.4), (20.0, 3.0)], (0.0, 20.0))
    files["ruleguard.toml"] += "bounds = { kp = [0.5, 2.5] }\n"
    report = run(write(tmp_path, files))
    found = [f for f in report["findings"] if f["rule"] == "config.bounds"]
    assert [(f["measured"], f["limit"]) for f in found] == [(3.0, 2.5)]
    assert found[0]["location"]["key"] == "yaw.schedule.2.kp"


def test_interpolation_is_linear_between_rows_and_held_outside():
    # linear interpolation (closed form): kp(v) = kp1 + (v - v1)/(v2 - v1) (kp2 - kp1);
    # outside the table the end row's value (what firmware clamping its index does)
    from ruleguard.load.spec import Schedule, SchedulePoint
    from ruleguard.location import Location
    from ruleguard.models.schedules import interpolate, nominal_point

    here = Location("fw.toml", 1, 1, "x")
    points = tuple(
        SchedulePoint(i + 1, v, {"kp": kp}, Location("fw.toml", 10 * (i + 1), 1, f"r{i}"),
                      here, {"kp": here})
        for i, (v, kp) in enumerate([(0.0, 2.0), (10.0, 1.0), (30.0, 3.0)]))
    schedule = Schedule("speed_mps", "speed_mps", "rows", ("kp",), points, here, here, here)
    assert interpolate(schedule, 2.5)[0]["kp"] == pytest.approx(2.0 - 0.25)
    assert interpolate(schedule, 25.0)[0]["kp"] == pytest.approx(1.0 + 0.75 * 2.0)
    assert interpolate(schedule, -5.0)[0]["kp"] == 2.0
    assert interpolate(schedule, 40.0)[0]["kp"] == 3.0
    nominal = nominal_point(schedule, 25.0)
    assert nominal.location.line == 20  # the lower row of its interval
    assert [r.line for r in nominal.related] == [30]
