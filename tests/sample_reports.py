"""Report objects built by hand for the reporter tests (invented data, no pipeline).

The project is an invented pan-tilt gimbal: a discrete velocity loop with three
variants (one fails the phase-margin rule, one is unstable), a continuous
heater loop, and a position loop that could not be analysed.
"""

from __future__ import annotations

import math

from ruleguard.analysis.results import Crossover, DiskMargin, LoopAnalysis, Margins, Stability
from ruleguard.location import Location
from ruleguard.report.model import LoopResult, Report, RuleInfo, VariantResult
from ruleguard.rules.base import Finding, Severity

TILT_TOML = """\
# tilt axis firmware parameters
[current]
kind = "pid"
kp = 2.1
ki = 6200.0

[velocity]
kind = "pid"
kp = 0.35
ki = 12.0
"""

MANIFEST = """\
[project]
name = "pan-tilt-gimbal"
ruleset = "house.toml"
plants = ["models/plants.toml"]

[[loops]]
name = "tilt.velocity"
plant = "tilt_mechanics"
controller = { file = "firmware/tilt.toml", path = "velocity" }
sample_rate_hz = 2000.0
"""

PLANTS = """\
[plants.tilt_mechanics]
kind = "zero_pole_gain"
gain = 1724.0
"""

RULESET = """\
[ruleset]
name = "gimbal-house"
based_on = "motion"

[rules."margin.phase"]
min_deg = 45.0

[[waivers]]
rule = "margin.gain"
loops = ["tilt.velocity"]
reason = "fixture-limited travel; accepted at design review"
"""


def margins(
    *,
    gm_db: float | None = 11.2,
    pm_deg: float | None = 52.0,
    crossover_hz: float | None = 61.0,
    ms_db: float | None = 4.1,
    stable: bool = True,
    sample_rate_hz: float | None = 2000.0,
) -> Margins:
    delay_s = None
    if stable and pm_deg is not None and crossover_hz is not None:
        delay_s = math.radians(pm_deg % 360.0) / (2 * math.pi * crossover_hz)
    delay_samples = None if delay_s is None or sample_rate_hz is None else delay_s * sample_rate_hz
    return Margins(
        gain_margin_db=gm_db if stable else None,
        gain_margin_hz=310.0 if stable and gm_db is not None else None,
        lower_gain_margin_db=None,
        lower_gain_margin_hz=None,
        stable_gain_ranges_db=((None, gm_db),) if gm_db is not None else ((None, None),),
        phase_margin_deg=pm_deg,
        crossover_hz=crossover_hz,
        crossovers=()
        if crossover_hz is None
        else (Crossover(crossover_hz, pm_deg),),
        delay_margin_s=delay_s,
        delay_margin_samples=delay_samples,
        sensitivity_peak_db=ms_db,
        sensitivity_peak_hz=120.0,
        complementary_peak_db=1.9,
        complementary_peak_hz=75.0,
        disk_margin=DiskMargin(0.71, (-6.45, 6.45), 39.1, 118.0) if stable else None,
        bandwidth_hz=95.0,
    )


def stability(stable: bool = True, p: int = 0) -> Stability:
    if stable:
        return Stability(True, p, p, 0)
    return Stability(False, p, p - 2, 2)


def velocity_loop() -> LoopResult:
    return LoopResult(
        name="tilt.velocity",
        domain="discrete",
        sample_rate_hz=2000.0,
        analysed=True,
        discretization={"controller": "tustin", "filters": ["tustin_prewarp"]},
        total_delay_s=0.0005,
        notes=("aliasing of the measured response is ignored",),
        variants=(
            VariantResult(
                "nominal",
                {"tilt_mechanics.gain": 1724.0},
                LoopAnalysis(stability(), margins()),
            ),
            VariantResult(
                "corner-1",
                {"tilt_mechanics.gain": 1400.0},
                LoopAnalysis(stability(), margins(gm_db=13.0, pm_deg=38.2, ms_db=5.5)),
            ),
            VariantResult(
                "corner-2",
                {"tilt_mechanics.gain": 2100.0},
                # an unstable variant: margins not applicable; an infinite value
                # in a peak must never reach the JSON text
                LoopAnalysis(
                    stability(False),
                    margins(gm_db=-2.0, pm_deg=-12.0, ms_db=math.inf, stable=False),
                    notes=("peak of |S| is unbounded on this variant",),
                ),
            ),
        ),
        tags=("motion", "tilt"),
    )


def heater_loop() -> LoopResult:
    return LoopResult(
        name="heater.temp",
        domain="continuous",
        sample_rate_hz=None,
        analysed=True,
        discretization=None,
        total_delay_s=12.0,
        notes=(),
        variants=(
            VariantResult(
                "nominal",
                {},
                LoopAnalysis(
                    stability(),
                    margins(gm_db=None, pm_deg=63.0, crossover_hz=0.004, sample_rate_hz=None),
                ),
            ),
        ),
    )


def position_loop() -> LoopResult:
    return LoopResult(
        name="pan.position",
        domain="continuous",
        sample_rate_hz=None,
        analysed=False,
        discretization=None,
        total_delay_s=None,
        notes=("derivative without filter",),
        variants=(),
        not_analysed_reason="the derivative term has no filter: the controller is improper",
    )


PHASE_FINDING = Finding(
    rule="margin.phase",
    severity=Severity.ERROR,
    loop="tilt.velocity",
    variant="corner-1",
    message="phase margin 38.2 deg is below 45 deg",
    measured=38.2,
    limit=45.0,
    unit="deg",
    frequency_hz=61.0,
    location=Location("firmware/tilt.toml", 7, 1, "velocity"),
    related=(
        Location("models/plants.toml", 1, 1, "plants.tilt_mechanics"),
        Location("house.toml", 6, 1, "rules.margin.phase.min_deg"),
    ),
    key_path="velocity",
)

STABILITY_FINDING = Finding(
    rule="stability.closed-loop",
    severity=Severity.ERROR,
    loop="tilt.velocity",
    variant="corner-2",
    message="closed loop unstable: 2 poles outside the unit circle",
    measured=2.0,
    limit=0.0,
    unit=None,
    frequency_hz=None,
    location=Location("firmware/tilt.toml", 9, 1, "velocity.kp"),
    key_path="velocity.kp",
)

WAIVED_FINDING = Finding(
    rule="margin.gain",
    severity=Severity.WARNING,
    loop="tilt.velocity",
    variant="nominal",
    message="gain margin 5.1 dB is below 6 dB",
    measured=5.1,
    limit=6.0,
    unit="dB",
    frequency_hz=310.0,
    location=Location("firmware/tilt.toml", 9, 1, "velocity.kp"),
    waived=True,
    waiver_reason="fixture-limited travel; accepted at design review",
    key_path="velocity.kp",
)

NOTE_FINDING = Finding(
    rule="controller.derivative-filter",
    severity=Severity.NOTE,
    loop="pan.position",
    variant=None,
    message="the derivative term has no filter: the controller is improper",
    measured=None,
    limit=None,
    unit=None,
    frequency_hz=None,
    location=Location("firmware/pan.toml", None, None, ""),
)

PROJECT_FINDING = Finding(
    rule="ruleset.unused-waiver",
    severity=Severity.NOTE,
    loop=None,
    variant=None,
    message="waiver for margin.delay matches no finding",
    measured=None,
    limit=None,
    unit=None,
    frequency_hz=None,
    location=Location("house.toml", 8, 1, "waivers.0"),
    key_path="waivers.0",
)

RULES = (
    RuleInfo("stability.closed-loop", "the closed loop is stable (Nyquist)",
             "Counts the encirclements of -1 and requires Z = N + P = 0.", "error"),
    RuleInfo("margin.phase", "phase margin at least min_deg",
             "The smallest phase margin over every gain crossover.\n\nCommon practice: 30-60 deg.",
             "error"),
    RuleInfo("margin.gain", "gain margin at least min_db",
             "The upper (and lower) gain margins from the stable gain interval.", "error"),
    RuleInfo("controller.derivative-filter", "a derivative term has a filter",
             "A derivative without a filter is improper in a continuous loop.", "error"),
)


def sample_report(**changes) -> Report:
    fields = dict(
        tool_version="0.1.0",
        project_name="pan-tilt-gimbal",
        manifest_file="ruleguard.toml",
        root="/tmp/gimbal",
        loops=(velocity_loop(), heater_loop(), position_loop()),
        findings=(PHASE_FINDING, STABILITY_FINDING, WAIVED_FINDING, NOTE_FINDING,
                  PROJECT_FINDING),
        rules=RULES,
        ruleset_name="gimbal-house",
        texts={
            "ruleguard.toml": MANIFEST,
            "firmware/tilt.toml": TILT_TOML,
            "models/plants.toml": PLANTS,
            "house.toml": RULESET,
        },
        fail_at=Severity.ERROR,
    )
    fields.update(changes)
    return Report(**fields)


def clean_report() -> Report:
    """Every loop passes: no findings."""
    return sample_report(loops=(heater_loop(),), findings=())
