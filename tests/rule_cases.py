"""Loop contexts built by hand for the rule and engine tests (no pipeline).

Analyses are :class:`~ruleguard.analysis.results.LoopAnalysis` records filled
with the numbers a test states (often computed in the test from a closed form
or with numpy), so each rule is checked on exactly the figures it judges.
"""

from __future__ import annotations

import math

from rule_contexts import Variant

from ruleguard.analysis.results import Crossover, DiskMargin, LoopAnalysis, Margins, Stability
from ruleguard.load.spec import ControllerEntry, LoopSpec, PlantEntry, Project, VariantPolicy
from ruleguard.location import Location
from ruleguard.rules.base import Evaluation, LoopContext

CONTROLLER_FILE = "firmware/axis.toml"
PLANT_FILE = "models/plants.toml"


def margins(
    *,
    gain_margin_db: float | None = 12.0,
    gain_margin_hz: float | None = 300.0,
    lower_gain_margin_db: float | None = None,
    lower_gain_margin_hz: float | None = None,
    phase_margin_deg: float | None = 55.0,
    crossover_hz: float | None = 60.0,
    crossovers: tuple[tuple[float, float], ...] | None = None,
    delay_margin_s: float | None = None,
    delay_margin_samples: float | None = None,
    sensitivity_peak_db: float | None = 3.0,
    sensitivity_peak_hz: float | None = 110.0,
    complementary_peak_db: float | None = 1.0,
    complementary_peak_hz: float | None = 70.0,
    disk_alpha: float | None = 0.8,
    disk_hz: float | None = 100.0,
    sample_rate_hz: float | None = None,
) -> Margins:
    """A Margins record; delay margin and crossovers follow from PM and crossover
    by the definitions of FORMATS.md section 5 unless given."""
    if crossovers is None:
        crossovers = (
            ((crossover_hz, phase_margin_deg),)
            if crossover_hz is not None and phase_margin_deg is not None
            else ()
        )
    if delay_margin_s is None and crossovers:
        delay_margin_s = min(
            math.radians(pm % 360.0) / (2 * math.pi * hz) for hz, pm in crossovers
        )
    if delay_margin_samples is None and delay_margin_s is not None and sample_rate_hz:
        delay_margin_samples = delay_margin_s * sample_rate_hz
    disk = None
    if disk_alpha is not None:
        a = disk_alpha
        gain = (
            (20 * math.log10((2 - a) / (2 + a)), 20 * math.log10((2 + a) / (2 - a)))
            if a < 2
            else (None, None)
        )
        disk = DiskMargin(a, gain, math.degrees(2 * math.atan(a / 2)), disk_hz)
    return Margins(
        gain_margin_db=gain_margin_db,
        gain_margin_hz=gain_margin_hz,
        lower_gain_margin_db=lower_gain_margin_db,
        lower_gain_margin_hz=lower_gain_margin_hz,
        stable_gain_ranges_db=((lower_gain_margin_db, gain_margin_db),),
        phase_margin_deg=phase_margin_deg,
        crossover_hz=crossover_hz,
        crossovers=tuple(Crossover(hz, pm) for hz, pm in crossovers),
        delay_margin_s=delay_margin_s,
        delay_margin_samples=delay_margin_samples,
        sensitivity_peak_db=sensitivity_peak_db,
        sensitivity_peak_hz=sensitivity_peak_hz,
        complementary_peak_db=complementary_peak_db,
        complementary_peak_hz=complementary_peak_hz,
        disk_margin=disk,
        bandwidth_hz=90.0,
    )


def stable(open_loop_unstable_poles: int = 0) -> Stability:
    p = open_loop_unstable_poles
    return Stability(True, p, p, 0)


def unstable(open_loop_unstable_poles: int = 0, ccw: int = -2) -> Stability:
    p = open_loop_unstable_poles
    return Stability(False, p, ccw, p - ccw)


def through_minus_one(open_loop_unstable_poles: int = 0) -> Stability:
    return Stability(False, open_loop_unstable_poles, None, None, through_critical_point=True)


def analysis(stability: Stability | None = None, **margin_values) -> LoopAnalysis:
    stability = stability or stable()
    m = margins(**margin_values)
    if not stability.stable:
        # FORMATS.md section 5: not applicable for an unstable loop
        m = Margins(
            **{
                **m.__dict__,
                "gain_margin_db": None,
                "lower_gain_margin_db": None,
                "delay_margin_s": None,
                "delay_margin_samples": None,
                "disk_margin": None,
            }
        )
    return LoopAnalysis(stability, m)


def loop_spec(
    name: str = "tilt.velocity",
    *,
    tags: tuple[str, ...] = (),
    sample_rate_hz: float | None = None,
    required_ccw: int | None = None,
    path: str | None = None,
    line: int = 10,
) -> LoopSpec:
    path = path or name.replace(".", "_")
    controller = ControllerEntry(
        kind="pid",
        fields={"kp": 1.0},
        filters=(),
        location=Location(CONTROLLER_FILE, line, 1, path),
        field_locations={"kp": Location(CONTROLLER_FILE, line + 2, 1, f"{path}.kp")},
        file=CONTROLLER_FILE,
        path=path,
    )
    field_locations = {"name": Location("ruleguard.toml", 5, 1, "loops.0.name")}
    if required_ccw is not None:
        field_locations["required_ccw"] = Location("ruleguard.toml", 9, 1, "loops.0.required_ccw")
    return LoopSpec(
        name=name,
        plant="axis_plant",
        controller=controller,
        sample_rate_hz=sample_rate_hz,
        delay_samples=0.0,
        delay_s=0.0,
        sensor=None,
        inner=None,
        tags=tuple(tags),
        required_ccw=required_ccw,
        bounds={},
        location=Location("ruleguard.toml", 4, 1, "loops.0"),
        field_locations=field_locations,
    )


PLANT = PlantEntry(
    name="axis_plant",
    kind="transfer_function",
    fields={},
    parameters={},
    vary={},
    location=Location(PLANT_FILE, 3, 1, "plants.axis_plant"),
    field_locations={},
    file=PLANT_FILE,
)


def project(*specs: LoopSpec) -> Project:
    return Project(
        root="/nonexistent/project",
        manifest_file="ruleguard.toml",
        name="test-project",
        ruleset="baseline",
        ruleset_location=Location("ruleguard.toml", 3, 1, "project.ruleset"),
        plant_files=(PLANT_FILE,),
        plants={"axis_plant": PLANT},
        loops=tuple(specs),
        variants=VariantPolicy("corners"),
    )


def context(
    *analyses: LoopAnalysis,
    spec: LoopSpec | None = None,
    proj: Project | None = None,
    variant_ids: tuple[str, ...] | None = None,
    not_analysed_reason: str | None = None,
    extras: dict | None = None,
) -> LoopContext:
    """A loop context; the first analysis is the nominal, the others corner-1, ..."""
    spec = spec or loop_spec()
    proj = proj or project(spec)
    ids = variant_ids or tuple(
        "nominal" if i == 0 else f"corner-{i}" for i in range(len(analyses))
    )
    evaluations = tuple(
        Evaluation(Variant(vid), None, a) for vid, a in zip(ids, analyses, strict=True)
    )
    return LoopContext(
        spec=spec,
        project=proj,
        evaluations=evaluations,
        not_analysed_reason=not_analysed_reason,
        extras=extras or {},
    )


def run(rule_id: str, ctx: LoopContext, **params):
    """Violations of one rule with its catalog defaults overridden by ``params``."""
    from ruleguard.rules.catalog import RULES

    rule = RULES[rule_id]
    values = {**rule.defaults(), **params}
    return list(rule.function(ctx, values))


def analysed(zeros, poles, gain, delay_s: float = 0.0, sample_time_s: float | None = None):
    """A real analysis of L = gain prod(s - z)/prod(s - p) e^{-s delay} (H1's analysis)."""
    from ruleguard.analysis.margins import analyse_open_loop
    from ruleguard.analysis.openloop import OpenLoop
    from ruleguard.models.lti import Factored

    block = Factored(zeros, poles, gain, delay_s=delay_s, sample_time_s=sample_time_s)
    return analyse_open_loop(OpenLoop(block))
