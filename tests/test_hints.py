"""Fix hints: each one applied to the inputs and re-checked.

A hint is tested the way an engineer would use it: scale kp and ki in the
firmware file (or change the loop delay in the manifest), write the project
again, re-run the check; the finding must be gone and no new finding appear.
The ends of the hinted ranges are also checked against closed forms.
"""

from __future__ import annotations

import math
from pathlib import Path

import pytest

from ruleguard import api
from ruleguard.report.json_report import report_data

RULES_ALL = """[ruleset]
name = "hints"

[rules."margin.disk"]
min_alpha = 0.7

[rules."margin.delay"]
min_s = 0.001
"""

# Sensitivity peaks and gain margins made loose, to isolate the rule under test
RULES_PHASE_ONLY = """[ruleset]
name = "phase-only"

[rules."margin.gain"]
min_db = 0.0
min_lower_db = 0.0

[rules."margin.phase"]
min_deg = {min_deg}

[rules."margin.delay"]
{delay}

[rules."sensitivity.peak"]
max_db = 60.0

[rules."sensitivity.complementary-peak"]
max_db = 60.0
"""


def _project(root: Path, *, kp: float, ki: float, delay_s: float, rules: str,
             poles="[0.0, -20.0]", zeros="[]", gain=400.0, vary=True) -> Path:
    (root / "models").mkdir(parents=True, exist_ok=True)
    (root / "firmware").mkdir(exist_ok=True)
    (root / "ruleguard.toml").write_text(f"""[project]
name = "hints"
ruleset = "rules.toml"
plants = ["models/plants.toml"]

[[loops]]
name = "axis.velocity"
plant = "mechanics"
controller = {{ file = "firmware/axis.toml", path = "velocity" }}
delay_s = {delay_s!r}
""")
    varied = "vary = { gain = { min = 300.0, max = 500.0 } }\n" if vary else ""
    (root / "models" / "plants.toml").write_text(f"""[plants.mechanics]
kind = "zero_pole_gain"
zeros = {zeros}
poles = {poles}
gain = {gain!r}
{varied}""")
    (root / "firmware" / "axis.toml").write_text(
        f"[velocity]\nkind = \"pid\"\nkp = {kp!r}\nki = {ki!r}\n")
    (root / "rules.toml").write_text(rules)
    return root / "ruleguard.toml"


def _failing(report) -> dict[str, dict]:
    data = report_data(report)
    return {f["rule"]: f for f in data["findings"] if f["severity"] != "note"}


BASE = {"kp": 2.0, "ki": 4.0, "delay_s": 0.002}


@pytest.fixture()
def failing_project(tmp_path):
    manifest = _project(tmp_path / "before", rules=RULES_ALL, **BASE)
    return manifest, _failing(api.check(manifest))


class TestGainFactorRange:
    def test_every_failing_margin_finding_has_the_loop_hint(self, failing_project):
        _, before = failing_project
        assert {"margin.phase", "margin.disk", "sensitivity.peak"} <= set(before)
        hints = [before[r]["hint"] for r in before]
        assert all(h is not None for h in hints)
        assert all(h["gain_factor_range"] == hints[0]["gain_factor_range"] for h in hints)
        assert hints[0]["confirmed"] is True

    @pytest.mark.parametrize("where", ["suggested", "middle"])
    def test_applying_the_factor_removes_every_finding(self, failing_project, tmp_path, where):
        _, before = failing_project
        hint = before["margin.phase"]["hint"]
        low, high = hint["gain_factor_range"]
        factor = hint["suggested_gain_factor"] if where == "suggested" else math.sqrt(low * high)
        after = _failing(api.check(_project(
            tmp_path / "after", rules=RULES_ALL, kp=BASE["kp"] * factor,
            ki=BASE["ki"] * factor, delay_s=BASE["delay_s"])))
        assert not set(after) & set(before)  # the findings are gone
        assert not set(after) - set(before)  # and no new one appeared
        # the JSON hint's dB range is the factor range in dB
        db = hint["gain_change_db_range"]
        assert db == pytest.approx([20 * math.log10(low), 20 * math.log10(high)], rel=1e-12)

    @pytest.mark.parametrize("end", [0, 1])
    def test_the_range_ends_are_tight(self, failing_project, tmp_path, end):
        # 1 % beyond either end a hinted rule fails again: the range is the
        # set that passes, not a conservative part of it
        _, before = failing_project
        low, high = before["margin.phase"]["hint"]["gain_factor_range"]
        factor = low * 0.99 if end == 0 else high * 1.01
        after = _failing(api.check(_project(
            tmp_path / "out", rules=RULES_ALL, kp=BASE["kp"] * factor,
            ki=BASE["ki"] * factor, delay_s=BASE["delay_s"])))
        assert set(after) & set(before["margin.phase"]["hint"]["rules"])


class TestDelayAndCrossover:
    def test_removing_the_hinted_delay_passes_margin_phase(self, failing_project, tmp_path):
        _, before = failing_project
        extra = before["margin.phase"]["hint"]["max_extra_delay_s"]
        assert extra is not None and -BASE["delay_s"] < extra < 0
        passes = _failing(api.check(_project(
            tmp_path / "less", rules=RULES_ALL, kp=BASE["kp"], ki=BASE["ki"],
            delay_s=BASE["delay_s"] + extra - 1e-5)))
        assert "margin.phase" not in passes
        assert not set(passes) - set(before)
        still = _failing(api.check(_project(
            tmp_path / "not-enough", rules=RULES_ALL, kp=BASE["kp"], ki=BASE["ki"],
            delay_s=BASE["delay_s"] + extra + 1e-4)))
        assert "margin.phase" in still

    def test_integrator_with_delay_closed_forms(self, tmp_path):
        # L = k e^{-s tau}/s: the crossover is at w = k, PM = 90 deg - k tau
        # (rad -> deg), so |PM| >= 45 deg exactly when k <= pi/(4 tau); the
        # delay margin is (pi/2 - k tau)/k, >= d exactly when
        # k <= pi/(2 (tau + d)). Extra delay at which PM is 45 deg:
        # (pi/4 - k tau)/k. (Astrom & Murray, Feedback Systems, sec. 10.3:
        # definitions; the closed forms derived here.)
        tau, d, k0 = 0.01, 0.02, 100.0
        rules = RULES_PHASE_ONLY.format(min_deg=45.0, delay=f"min_s = {d}")
        report = api.check(_project(tmp_path, rules=rules, kp=k0, ki=0.0, delay_s=tau,
                                    poles="[0.0]", gain=1.0, vary=False))
        found = _failing(report)
        assert {"margin.phase", "margin.delay"} <= set(found)
        hint = found["margin.phase"]["hint"]
        low, high = hint["gain_factor_range"]
        k_max = min(math.pi / (4 * tau), math.pi / (2 * (tau + d)))
        assert low == 0.0
        assert high * k0 == pytest.approx(k_max, rel=1e-7)
        assert hint["max_extra_delay_s"] == pytest.approx(
            (math.pi / 4 - k0 * tau) / k0, rel=1e-7)
        # the crossover must fall below the frequency where PM = 45 deg at
        # this loop's phase: 90 - w tau = 45 deg, w = pi/(4 tau)
        assert hint["crossover_hz_at_most"] == pytest.approx(
            math.pi / (4 * tau) / (2 * math.pi), rel=1e-7)
        delay_hint = found["margin.delay"]["hint"]
        dm = (math.pi / 2 - k0 * tau) / k0
        assert delay_hint["max_extra_delay_s"] == pytest.approx(dm - d, rel=1e-7)


class TestNoGainFix:
    def test_phase_lead_too_small_for_any_gain(self, tmp_path):
        # L = k (s + 1)/(s^2 (s + 10)) is closed-loop stable for every k > 0
        # (s^3 + 10 s^2 + k s + k: Routh 10 k > k) and its phase is at most
        # -180 + atan(sqrt 10) - atan(1/sqrt 10) = -125.1 deg (at w = sqrt 10),
        # so no gain gives PM >= 60 deg: the hint says no gain change alone.
        rules = RULES_PHASE_ONLY.format(min_deg=60.0, delay="")
        report = api.check(_project(tmp_path, rules=rules, kp=1.0, ki=0.0, delay_s=0.0,
                                    poles="[0.0, 0.0, -10.0]", zeros="[-1.0]", gain=10.0,
                                    vary=False))
        found = _failing(report)
        hint = found["margin.phase"]["hint"]
        assert hint["gain_factor_range"] is None
        assert hint["suggested_gain_factor"] is None
        best = math.degrees(math.atan(math.sqrt(10)) - math.atan(1 / math.sqrt(10)))
        assert best < 60.0
        # and at the best gain the phase margin is that maximum: with the plant
        # 10 (s + 1)/(s^2 (s + 10)), |G(j sqrt 10)| = 10 sqrt 11/(10 sqrt 110)
        # = 1/sqrt 10, so kp = sqrt 10 puts the crossover at w = sqrt 10
        peak = _failing(api.check(_project(
            tmp_path / "best", rules=rules, kp=math.sqrt(10.0), ki=0.0, delay_s=0.0,
            poles="[0.0, 0.0, -10.0]", zeros="[-1.0]", gain=10.0, vary=False)))
        assert peak["margin.phase"]["measured"] == pytest.approx(best, rel=1e-6)


def test_text_and_sarif_carry_the_hint(failing_project):
    from ruleguard.report import sarif, text

    manifest, _ = failing_project
    report = api.check(manifest)
    out = text.render(report, color=False)
    assert "fix hint: scale the controller gain" in out
    doc = sarif.render(report)
    assert "Fix hint:" in doc and '"fixes"' not in doc


def test_html_markdown_and_cache_records(failing_project):
    from ruleguard.report import html, markdown
    from ruleguard.report.records import finding_from_dict, finding_to_dict

    manifest, _ = failing_project
    report = api.check(manifest)
    assert "fix hint:" in html.render(report)
    assert "fix hint:" in markdown.render(report)
    hinted = [f for f in report.findings if f.hint is not None]
    assert hinted
    for f in hinted:  # the cache stores findings as these dicts and reads them back
        assert finding_from_dict(finding_to_dict(f, finite_only=False)) == f
