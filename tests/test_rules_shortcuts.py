"""The shortcuts of the rules stage give what the long way gives, exactly.

* ``effective_rules`` resolves a loop's configuration once per ruleset and
  set of matching adjustments: compared here with a fresh resolution
  (catalog defaults, rule tables, matching adjustments in order; the
  engine's documented order) for random loop names, tags and crossovers
  (hypothesis), severities, parameters and locations alike;
* the crossover ceiling of a ``margin.phase`` / ``margin.delay`` hint
  computes only the run edges that decide it: compared with the lower edge
  taken from every refined run of ``frequency_test_forbidden`` (the earlier
  code) on resonant sampled loops like those of the benchmark, for targets
  at every sample, between samples and at the refined edges themselves.
"""

from __future__ import annotations

import math
import textwrap
from pathlib import Path

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from ruleguard.load.rulesets import load_ruleset
from ruleguard.location import Location
from ruleguard.rules import engine, hints
from ruleguard.rules.base import Severity
from ruleguard.rules.catalog import RULES
from ruleguard.rules.spec import ParameterValues

ORIGIN = Location("ruleguard.toml", 3, 1, "project.ruleset")

RULESET = """
[rules."margin.phase"]
min_deg = 45.0
[rules."sensitivity.peak"]
severity = "disabled"
[[adjustments]]
tags = ["process"]
rules = { "margin.phase" = { min_deg = 35.0 }, "sensitivity.peak" = { severity = "warning" } }
[[adjustments]]
loops = ["heater.*", "pan.?"]
rules = { "margin.phase" = { min_deg = 40.0, severity = "note" } }
[[adjustments]]
crossover_hz = { min = 1.0, max = 20.0 }
rules = { "margin.gain" = { min_db = 8.0 }, "margin.phase" = { severity = "warning" } }
[[adjustments]]
loops = ["pan.*"]
tags = ["slow"]
crossover_hz = { max = 5.0 }
rules = { "margin.gain" = { min_db = 4.0, severity = "disabled" } }
"""


def _reference(ruleset, loop_name, tags, crossover_hz):
    """The configuration resolved the long way (the engine's documented order)."""
    matching = (
        [a for a in ruleset.adjustments
         if engine.adjustment_applies(a, loop_name, tuple(tags), crossover_hz)]
        if loop_name is not None else []
    )
    out = {}
    for rule_id, rule in RULES.items():
        severity, values, locations, where = rule.default_severity, rule.defaults(), {}, None
        for setting in [ruleset.rules.get(rule_id)] + [a.rules.get(rule_id) for a in matching]:
            if setting is None:
                continue
            if setting.severity is not None:
                severity = setting.severity
            for name, value in setting.parameters.items():
                values[name] = value
                if setting.locations.get(name) is not None:
                    locations[name] = setting.locations[name]
                else:
                    locations.pop(name, None)
            where = setting.location
        if rule.always_on and severity is Severity.DISABLED:
            severity = rule.default_severity
        out[rule_id] = (severity, dict(values), dict(locations), where)
    return out


def _as_tuples(config):
    return {r: (e.severity, dict(e.parameters), e.parameters.locations, e.location)
            for r, e in config.items()}


@pytest.fixture(scope="module")
def ruleset(tmp_path_factory):
    root = tmp_path_factory.mktemp("rs")
    (root / "house.toml").write_text(textwrap.dedent(RULESET), encoding="utf-8")
    return load_ruleset(str(root), "house.toml", ORIGIN)


NAMES = st.sampled_from(["heater.main", "pan.a", "pan.velocity", "oven.zone1", "tilt.x", "pan.b"])
TAGS = st.lists(st.sampled_from(["process", "slow", "motion"]), max_size=3)
CROSSOVERS = st.one_of(st.none(), st.sampled_from([0.5, 1.0, 5.0, 19.99, 20.0]),
                       st.floats(0.01, 100.0))


@settings(max_examples=300, deadline=None)
@given(name=st.one_of(st.none(), NAMES), tags=TAGS, crossover=CROSSOVERS)
def test_remembered_configuration_is_the_fresh_one(ruleset, name, tags, crossover):
    got = engine.effective_rules(ruleset, name, tags, crossover)
    assert _as_tuples(got) == _reference(ruleset, name, tags, crossover)
    assert all(isinstance(e.parameters, ParameterValues) for e in got.values())


def test_configuration_is_shared_only_between_loops_alike(ruleset):
    a = engine.effective_rules(ruleset, "heater.main", ("process",))
    b = engine.effective_rules(ruleset, "heater.main", ("process",))
    assert a is not b  # each caller gets its own mapping
    assert a["margin.phase"] is b["margin.phase"]
    c = engine.effective_rules(ruleset, "oven.zone1", ("process",))
    assert c["margin.phase"].parameters["min_deg"] == 35.0
    assert a["margin.phase"].parameters["min_deg"] == 40.0


def test_a_changed_catalog_is_resolved_again(ruleset, monkeypatch):
    from dataclasses import replace

    before = engine.effective_rules(ruleset, "tilt.x")["margin.delay"]
    spec = RULES["margin.delay"]
    monkeypatch.setitem(RULES, "margin.delay", replace(spec, default_severity=Severity.NOTE))
    after = engine.effective_rules(ruleset, "tilt.x")["margin.delay"]
    assert before.severity is spec.default_severity
    assert after.severity is Severity.NOTE


# ------------------------------------------------------------------ the crossover ceiling
def _reference_ceiling(ev, test, failing_hz, contour):
    """The earlier code: the lower edge of the last refined run holding the target."""
    if not failing_hz:
        return None
    target = 2.0 * math.pi * min(failing_hz)
    _, edges = hints.frequency_test_forbidden(contour, test)
    best = None
    for w_lo, w_hi in edges:
        if w_lo <= target * (1 + 1e-9) and target <= w_hi * (1 + 1e-9):
            best = w_lo
    if best is None or best <= 0:
        return None
    return best / (2.0 * math.pi)


def _project(root: Path, n: int, seed: int) -> Path:
    """Sampled loops with four light resonances each and a PI (the benchmark's kind)."""
    rng = np.random.default_rng(seed)
    (root / "models").mkdir(parents=True, exist_ok=True)
    (root / "firmware").mkdir(exist_ok=True)
    lines = ['[project]', 'name = "ceiling"', 'ruleset = "motion"',
             'plants = ["models/plants.toml"]', '']
    plants = []
    for i in range(n):
        res = np.sort(10 ** rng.uniform(math.log10(300.0), math.log10(4000.0), 4)).tolist()
        damp = (10 ** rng.uniform(-1.7, -1.0, 4)).tolist()
        anti = (np.array(res) * rng.uniform(0.85, 0.97, 4)).tolist()
        zeros = ", ".join(f"{{ freq_hz = {f!r}, damping = {z!r} }}"
                          for f, z in zip(anti, [0.7 * d for d in damp], strict=True))
        poles = ", ".join(f"{{ freq_hz = {f!r}, damping = {z!r} }}"
                          for f, z in zip(res, damp, strict=True))
        gain = float(10 ** rng.uniform(6.5, 7.8))
        lines += ['[[loops]]', f'name = "axis{i}.speed"', f'plant = "p{i}"',
                  f'controller = {{ file = "firmware/p{i}.toml", path = "speed" }}',
                  'sample_rate_hz = 10000.0', f'delay_samples = {float(rng.uniform(0.5, 3.0))!r}',
                  '']
        plants += [f'[plants.p{i}]', 'kind = "zero_pole_gain"', f'gain = {gain!r}',
                   f'zeros = [{zeros}]', f'poles = [-8.0, -6000.0, {poles}]', '']
        (root / "firmware" / f"p{i}.toml").write_text(
            '[speed]\nkind = "pid"\nform = "parallel"\n'
            f'kp = 1.0\nki = {float(rng.uniform(60.0, 200.0))!r}\nkd = 0.0\n'
            'discretization = "tustin"\n')
    (root / "models" / "plants.toml").write_text("\n".join(plants))
    (root / "ruleguard.toml").write_text("\n".join(lines))
    return root / "ruleguard.toml"


@pytest.fixture(scope="module")
def evaluations(tmp_path_factory):
    from ruleguard.load.project import load_project
    from ruleguard.pipeline import analyse_loop

    project = load_project(_project(tmp_path_factory.mktemp("ceiling"), 8, 21))
    return [ev for spec in project.loops for ev in analyse_loop(project, spec).context.evaluations]


def _targets(contour, test):
    """Targets (Hz) at every run sample, between samples, and at the refined edges."""
    out = []
    for br in contour.branches:
        w = br.w
        for i0, i1 in hints._runs(test(w, br.L) < 0):
            lo, hi = max(i0 - 1, 0), min(i1 + 1, w.size - 1)
            out += [float(x) for x in w[lo:hi + 1]]
            out += [0.5 * float(w[lo] + w[lo + 1]) if hi > lo else float(w[lo])]
            out += [0.5 * float(w[hi - 1] + w[hi]) if hi > lo else float(w[hi])]
    _, edges = hints.frequency_test_forbidden(contour, test)
    for w_lo, w_hi in edges:
        out += [w_lo, w_hi, w_lo * (1 + 1e-9), w_hi * (1 + 1e-9), w_hi * (1 + 2e-9)]
    return [x / (2.0 * math.pi) for x in out if x > 0]


@pytest.mark.parametrize("make_test", [
    lambda: hints.phase_test(30.0), lambda: hints.phase_test(60.0),
    lambda: hints.delay_test(1e-4), lambda: hints.delay_test(8e-4),
])
def test_ceiling_from_deciding_edges_is_the_full_one(evaluations, make_test):
    checked = found = 0
    for ev in evaluations:
        test = make_test()
        targets = _targets(hints._contour(ev), test)
        for target in targets[::3] + targets[-5:]:
            # fresh contours: nothing remembered from the other computation
            want = _reference_ceiling(ev, test, [target], hints._contour(ev))
            got = hints._crossover_ceiling_hz(ev, test, [target], hints._contour(ev))
            assert got == want, (target, got, want)
            checked += 1
            found += want is not None
    assert checked > 50 and found > 10


# ------------------------------------------------------------------ the peak refinement
def _reference_refine_maxima(values, lo, hi, w_best, y_best, points=33, log_tol=1e-12):
    """The earlier refine_maxima, statement for statement."""
    a = np.log(np.asarray(lo, dtype=float))
    b = np.log(np.asarray(hi, dtype=float))
    best_w = np.array(w_best, dtype=float)
    best_y = np.array(y_best, dtype=float)
    if a.size == 0:
        return best_w, best_y
    t = np.linspace(0.0, 1.0, points)
    rows = np.arange(a.size)
    for _ in range(40):
        width = b - a
        if np.all(width <= log_tol):
            break
        x = a[:, None] + width[:, None] * t[None, :]
        v = np.asarray(values(np.exp(x).ravel()), dtype=float).reshape(x.shape)
        v = np.where(np.isfinite(v), v, -np.inf)
        j = np.argmax(v, axis=1)
        better = v[rows, j] > best_y
        best_y = np.where(better, v[rows, j], best_y)
        best_w = np.where(better, np.exp(x[rows, j]), best_w)
        a = x[rows, np.maximum(j - 1, 0)]
        b = x[rows, np.minimum(j + 1, points - 1)]
    return best_w, best_y


@settings(max_examples=200, deadline=None)
@given(seed=st.integers(0, 2**32 - 1), n=st.integers(1, 6), holes=st.booleans(),
       width=st.sampled_from([1e-9, 1e-4, 1e-2, 0.3]))
def test_peak_refinement_gives_the_earlier_floats(seed, n, holes, width):
    from ruleguard.models.lti import Factored
    from ruleguard.rules.evidence import db
    from ruleguard.rules.responses import refine_maxima

    rng = np.random.default_rng(seed)
    wn = 10 ** rng.uniform(1, 4, 3)
    zeta = 10 ** rng.uniform(-3, -0.5, 3)
    r = -zeta * wn + 1j * wn * np.sqrt(1 - zeta * zeta)
    block = Factored(np.array([-3.0 * wn[0]]), np.concatenate([r, r.conj()]),
                     float(wn.prod() ** 2))

    def values(x):
        y = db(block.response(x))
        if holes:  # undefined values in the brackets (nan, inf) count as -inf
            y = np.where(np.abs(np.sin(x * 7.3)) < 0.05, np.nan, y)
            y = np.where(np.abs(np.sin(x * 3.1)) < 0.02, np.inf, y)
        return y

    centre = wn[rng.integers(0, 3, n)] * rng.uniform(0.8, 1.2, n)
    lo, hi = centre * (1 - width), centre * (1 + width)
    w0 = centre.copy()
    y0 = np.nan_to_num(values(w0), nan=-np.inf) - rng.uniform(0.0, 3.0, n)
    want = _reference_refine_maxima(values, lo, hi, w0, y0)
    got = refine_maxima(values, lo, hi, w0, y0)
    for a, b in zip(want, got, strict=True):
        assert a.tobytes() == b.tobytes()
