"""Ruleset files: built-ins, based_on chains, validation against the rules table."""

from __future__ import annotations

import datetime
import json
import textwrap

import pytest
from rule_cases import analysis, context, loop_spec, project

from ruleguard.errors import InputError
from ruleguard.load.rulesets import builtin_names, load_ruleset
from ruleguard.location import Location
from ruleguard.rules.base import Severity
from ruleguard.rules.catalog import RULES
from ruleguard.rules.engine import effective_rules, evaluate

ORIGIN = Location("ruleguard.toml", 3, 1, "project.ruleset")
BUILTINS = ("baseline", "motion", "process", "power", "flight")


def write(tmp_path, name: str, text: str) -> None:
    path = tmp_path / name
    path.parent.mkdir(parents=True, exist_ok=True)
    path.write_text(textwrap.dedent(text).lstrip("\n"), encoding="utf-8")


def load(tmp_path, ref: str):
    return load_ruleset(str(tmp_path), ref, ORIGIN)


def error_of(tmp_path, ref: str) -> InputError:
    with pytest.raises(InputError) as err:
        load(tmp_path, ref)
    return err.value


class TestBuiltins:
    def test_every_builtin_is_shipped(self):
        assert set(BUILTINS) <= set(builtin_names())

    @pytest.mark.parametrize("name", BUILTINS)
    def test_loads_based_on_baseline(self, tmp_path, name):
        rs = load(tmp_path, name)
        assert rs.name == name
        assert rs.file == f"<builtin>/{name}.toml"
        assert rs.files[0] == "<builtin>/baseline.toml"
        assert rs.files[-1] == rs.file

    def test_baseline_states_the_catalog_defaults(self, tmp_path):
        # RULES.md: the baseline ruleset holds the catalog's default thresholds
        rs = load(tmp_path, "baseline")
        for rule_id, rule in RULES.items():
            setting = rs.rules.get(rule_id)
            assert setting is not None, f"baseline does not mention {rule_id}"
            assert setting.severity is rule.default_severity, rule_id
            for name, value in setting.parameters.items():
                assert value == rule.defaults()[name], (rule_id, name)
            for p in rule.parameters:
                if p.default is not None:
                    assert p.name in setting.parameters, (rule_id, p.name)

    def test_every_builtin_threshold_has_a_source_comment(self):
        from ruleguard.load.rulesets import builtin_text

        for name in BUILTINS:
            text = builtin_text(name)
            for number, line in enumerate(text.splitlines(), 1):
                code = line.split("#", 1)[0]
                if "=" in code and not code.strip().startswith(("name", "based_on",
                                                                "description", "severity",
                                                                "tags", "loops")):
                    assert "#" in line, f"{name}.toml line {number} has no source comment"

    def test_flight_schedules_by_mode_frequency(self, tmp_path):
        rs = load(tmp_path, "flight")
        mid = effective_rules(rs, "pitch.rate", crossover_hz=1.0)
        low = effective_rules(rs, "pitch.attitude", crossover_hz=0.03)
        structural = effective_rules(rs, "wing.bending", ("structural",), crossover_hz=8.0)
        assert (mid["margin.gain"].parameters["min_db"],
                mid["margin.phase"].parameters["min_deg"]) == (6.0, 45.0)
        assert (low["margin.gain"].parameters["min_db"],
                low["margin.phase"].parameters["min_deg"]) == (4.5, 30.0)
        assert (structural["margin.gain"].parameters["min_db"],
                structural["margin.phase"].parameters["min_deg"]) == (8.0, 60.0)

    def test_motion_sets_delay_in_samples(self, tmp_path):
        rs = load(tmp_path, "motion")
        assert rs.rules["margin.delay"].parameters["min_samples"] == 1.0
        assert rs.rules["margin.delay"].locations["min_samples"].file == "<builtin>/motion.toml"


class TestUserFiles:
    def test_toml_and_json_agree(self, tmp_path):
        write(tmp_path, "a.toml", """
            [ruleset]
            name = "house"
            based_on = "motion"
            [rules."margin.phase"]
            min_deg = 45.0
            [[waivers]]
            rule = "margin.gain"
            loops = ["pan.position"]
            reason = "reviewed"
            expires = 2027-03-01
        """)
        (tmp_path / "a.json").write_text(json.dumps({
            "$schema": "ruleset.schema.json",  # editors' schema hint, ignored
            "ruleset": {"name": "house", "based_on": "motion"},
            "rules": {"margin.phase": {"min_deg": 45.0}},
            "waivers": [{"rule": "margin.gain", "loops": ["pan.position"],
                         "reason": "reviewed", "expires": "2027-03-01"}],
        }, indent=2))
        a, b = load(tmp_path, "a.toml"), load(tmp_path, "a.json")
        assert a.rules["margin.phase"].parameters == b.rules["margin.phase"].parameters
        assert a.waivers[0].expires == b.waivers[0].expires == datetime.date(2027, 3, 1)
        assert b.rules["margin.phase"].locations["min_deg"].file == "a.json"
        assert b.rules["margin.phase"].locations["min_deg"].line is not None

    def test_based_on_chain_by_path_later_wins(self, tmp_path):
        write(tmp_path, "policy/company.toml", """
            [ruleset]
            based_on = "baseline"
            [rules."margin.phase"]
            min_deg = 40.0
            severity = "warning"
            [rules."margin.gain"]
            min_db = 9.0
        """)
        write(tmp_path, "policy/team.toml", """
            [ruleset]
            based_on = "company.toml"
            [rules."margin.phase"]
            min_deg = 50.0
        """)
        rs = load(tmp_path, "policy/team.toml")
        assert rs.files == ("<builtin>/baseline.toml", "policy/company.toml",
                            "policy/team.toml")
        phase = rs.rules["margin.phase"]
        assert phase.parameters["min_deg"] == 50.0
        assert phase.severity is Severity.WARNING  # kept from company.toml
        assert phase.locations["min_deg"].file == "policy/team.toml"
        assert phase.locations["severity"].file == "policy/company.toml"
        assert rs.rules["margin.gain"].parameters == {"min_db": 9.0, "min_lower_db": 6.0}

    def test_based_on_cycle(self, tmp_path):
        write(tmp_path, "a.toml", '[ruleset]\nbased_on = "b.toml"\n')
        write(tmp_path, "b.toml", '[ruleset]\nbased_on = "a.toml"\n')
        err = error_of(tmp_path, "a.toml")
        assert "cycle" in err.message and "a.toml -> b.toml -> a.toml" in err.message
        assert (err.file, err.line, err.key) == ("b.toml", 2, "ruleset.based_on")

    def test_self_extension_is_a_cycle(self, tmp_path):
        write(tmp_path, "a.toml", '[ruleset]\nbased_on = "a.toml"\n')
        err = error_of(tmp_path, "a.toml")
        assert "cycle" in err.message and err.file == "a.toml"

    def test_unknown_builtin(self, tmp_path):
        err = error_of(tmp_path, "motoin")
        assert "motion" in err.message and err.location == ORIGIN

    def test_path_outside_the_project(self, tmp_path):
        inside = tmp_path / "proj"
        inside.mkdir()
        write(tmp_path, "evil.toml", '[ruleset]\nname = "x"\n')
        with pytest.raises(InputError):
            load_ruleset(str(inside), "../evil.toml", ORIGIN)

    def test_unknown_rule_with_suggestion(self, tmp_path):
        write(tmp_path, "r.toml", '[rules."margin.phse"]\nmin_deg = 45.0\n')
        err = error_of(tmp_path, "r.toml")
        assert "margin.phase" in err.message
        assert (err.file, err.line) == ("r.toml", 1)

    def test_unknown_parameter_with_suggestion(self, tmp_path):
        write(tmp_path, "r.toml", '[rules."margin.phase"]\nmin_degs = 45.0\n')
        err = error_of(tmp_path, "r.toml")
        assert "min_deg" in err.message and "min_degs" in err.message
        assert (err.line, err.key) == (2, 'rules."margin.phase".min_degs')

    def test_parameter_type_and_range(self, tmp_path):
        write(tmp_path, "r.toml", '[rules."margin.phase"]\nmin_deg = "45"\n')
        assert "must be a number" in error_of(tmp_path, "r.toml").message
        write(tmp_path, "r.toml", '[rules."margin.phase"]\nmin_deg = -5.0\n')
        assert ">= 0" in error_of(tmp_path, "r.toml").message
        write(tmp_path, "r.toml", '[rules."steady-state.type"]\nmin_integrators = 1.5\n')
        assert "integer" in error_of(tmp_path, "r.toml").message

    def test_override_parameters_validated(self, tmp_path):
        write(tmp_path, "r.toml", """
            [[adjustments]]
            loops = ["pan.*"]
            rules = { "margin.gain" = { min_dB = 3.0 } }
        """)
        err = error_of(tmp_path, "r.toml")
        assert "min_db" in err.message and err.line == 3

    def test_bad_severity(self, tmp_path):
        write(tmp_path, "r.toml", '[rules."margin.phase"]\nseverity = "fatal"\n')
        err = error_of(tmp_path, "r.toml")
        assert "error" in err.message and err.line == 2

    def test_closed_loop_disabled_in_an_adjustment(self, tmp_path):
        write(tmp_path, "r.toml", """
            [[adjustments]]
            loops = ["*"]
            rules = { "stability.closed-loop" = { severity = "disabled" } }
        """)
        assert "cannot be disabled" in error_of(tmp_path, "r.toml").message

    @pytest.mark.parametrize(
        "waiver, words",
        [
            ('rule = "margin.gain"\nloops = ["a"]\nexpires = 2027-01-01', "reason"),
            ('rule = "margin.gain"\nloops = ["a"]\nreason = "  "\nexpires = 2027-01-01',
             "reason"),
            ('rule = "margin.gain"\nloops = ["a"]\nreason = "ok"\nexpires = 2027-01-01T10:00:00',
             "date"),
            ('rule = "margin.gian"\nloops = ["a"]\nreason = "ok"\nexpires = 2027-01-01',
             "margin.gain"),
            ('rule = "margin.gain"\nloops = ["a"]\nreason = "ok"\nexpires = "2027-02-30"',
             "calendar date"),
            ('rule = "margin.gain"\nloops = []\nreason = "ok"\nexpires = 2027-01-01', "1"),
        ],
    )
    def test_bad_waivers(self, tmp_path, waiver, words):
        write(tmp_path, "r.toml", "[[waivers]]\n" + waiver + "\n")
        err = error_of(tmp_path, "r.toml")
        assert words in err.message
        assert err.file == "r.toml" and err.line is not None

    def test_unknown_top_level_key(self, tmp_path):
        write(tmp_path, "r.toml", '[waiver]\nrule = "margin.gain"\n')
        err = error_of(tmp_path, "r.toml")
        assert "waivers" in err.message

    def test_builtin_cannot_extend_a_path(self, tmp_path):
        # only reachable through the loader's own guard: a built-in names a path
        from ruleguard.load.rulesets import _Loader

        with pytest.raises(InputError):
            _Loader(str(tmp_path))._document(
                "x.toml", Location("<builtin>/motion.toml", 9, 1, "ruleset.based_on"), ""
            )

    def test_fingerprint_follows_content(self, tmp_path):
        write(tmp_path, "r.toml", '[rules."margin.phase"]\nmin_deg = 45.0\n')
        first = load(tmp_path, "r.toml").fingerprint()
        assert first == load(tmp_path, "r.toml").fingerprint()
        write(tmp_path, "r.toml", '[rules."margin.phase"]\nmin_deg = 46.0\n')
        assert load(tmp_path, "r.toml").fingerprint() != first
        assert load(tmp_path, "r.toml").severity_of("margin.phase") is Severity.ERROR

    def test_fingerprint_follows_where_settings_stand_without_placing_them(self, tmp_path):
        """The fingerprint covers the places of the settings (a finding names the
        ruleset line of its threshold) through the digest of the chain's texts,
        yet does not work them out; loaded twice, pickled or placed, the same
        file gives the same fingerprint, and a ruleset made in code hashes its
        repr (the reference: two equal reprs, equal fingerprints)."""
        import pickle

        from ruleguard.rules.spec import Ruleset

        body = ('[ruleset]\nbased_on = "motion"\n[rules."margin.phase"]\nmin_deg = 45.0\n'
                '[[waivers]]\nrule = "margin.gain"\nloops = ["a.*"]\nreason = "r"\n'
                'expires = 2027-01-31\n')
        write(tmp_path, "r.toml", body)
        fresh = load(tmp_path, "r.toml")
        first = fresh.fingerprint()
        deferred = [loc for loc in (fresh.location, *fresh.rules["margin.phase"].locations.values(),
                                    *(w.location for w in fresh.waivers))
                    if "_at" in loc.__dict__]
        assert deferred and all("_at" in loc.__dict__ for loc in deferred)  # none placed
        placed = load(tmp_path, "r.toml")
        text = repr(placed)  # places every location
        assert placed.fingerprint() == first
        assert pickle.loads(pickle.dumps(fresh)).fingerprint() == first
        write(tmp_path, "r.toml", "# a comment moves every setting one line down\n" + body)
        moved = load(tmp_path, "r.toml")
        assert moved.fingerprint() != first and repr(moved) != text
        write(tmp_path, "base.toml", '[rules."margin.gain"]\nmin_db = 6.0\n')
        write(tmp_path, "top.toml", '[ruleset]\nbased_on = "base.toml"\n')
        chained = load(tmp_path, "top.toml").fingerprint()
        parent = '[rules."margin.gain"]\nmin_db = 6.0\n'
        write(tmp_path, "base.toml", "# the parent moves\n" + parent)
        assert load(tmp_path, "top.toml").fingerprint() != chained
        made = Ruleset(name="x", file="x.toml", files=("x.toml",))
        assert made.sources_digest == ""
        again = Ruleset(name="x", file="x.toml", files=("x.toml",))
        assert made.fingerprint() == again.fingerprint()
        assert made.fingerprint() != Ruleset(name="y", file="x.toml").fingerprint()


def test_one_short_file_expresses_a_team_policy(tmp_path):
    """Issue "full rule catalog": "45 deg everywhere, 35 deg on process loops, one
    reviewed exception until March" is one short ruleset file that works."""
    write(tmp_path, "policy.toml", """
        [ruleset]
        based_on = "baseline"

        [rules."margin.phase"]
        min_deg = 45.0

        [[adjustments]]
        tags = ["process"]
        rules = { "margin.phase" = { min_deg = 35.0 } }

        [[waivers]]
        rule = "margin.phase"
        loops = ["pan.position"]
        reason = "fixture-limited travel; accepted at the November design review"
        expires = 2027-03-31
    """)
    assert len((tmp_path / "policy.toml").read_text().splitlines()) <= 16
    rs = load(tmp_path, "policy.toml")
    servo = loop_spec("tilt.velocity", tags=("motion",), path="tv")
    oven = loop_spec("oven.zone", tags=("process",), path="oz")
    pan = loop_spec("pan.position", tags=("motion",), path="pp")
    proj = project(servo, oven, pan)
    pm40 = analysis(phase_margin_deg=40.0)
    contexts = [context(pm40, spec=s, proj=proj) for s in (servo, oven, pan)]
    only = ("margin.phase", "waiver")

    march = evaluate(contexts, rs, only=only, today=datetime.date(2027, 3, 31))
    assert [(f.loop, f.rule, f.waived) for f in march] == [
        ("tilt.velocity", "margin.phase", False),  # 40 < 45
        ("pan.position", "margin.phase", True),  # the reviewed exception
    ]
    assert march[0].limit == 45.0
    assert any(loc.file == "policy.toml" and loc.line == 5 for loc in march[0].related)

    april = evaluate(contexts, rs, only=only, today=datetime.date(2027, 4, 1))
    assert [(f.loop, f.rule, f.waived) for f in april] == [
        ("tilt.velocity", "margin.phase", False),
        ("pan.position", "margin.phase", False),
        (None, "waiver.expired", False),
    ]


DEMO = __import__("pathlib").Path(__file__).resolve().parents[1] / "fixtures" / "gimbal_demo"


@pytest.fixture(scope="module")
def demo_analysed():
    """The demo project analysed once (pipeline stages up to the rules)."""
    from ruleguard.load.project import load_project
    from ruleguard.pipeline import analyse_loop

    proj = load_project(DEMO / "ruleguard.toml")
    return proj, [analyse_loop(proj, spec) for spec in proj.loops]


@pytest.mark.slow
@pytest.mark.parametrize("name", BUILTINS)
def test_builtin_rulesets_on_the_demo_project(demo_analysed, name):
    # Each built-in ruleset judges the demo: a margin finding is present exactly
    # when the worst stable variant's margin is below the limit the ruleset
    # (with its adjustments, e.g. flight's scheduling by crossover) sets for that loop.
    from ruleguard.rules.engine import nominal_crossover_hz

    proj, analysed = demo_analysed
    rs = load_ruleset(proj.root, name, ORIGIN)
    contexts = [a.context for a in analysed]
    findings = evaluate(contexts, rs, today=datetime.date(2027, 1, 1))
    assert all(f.rule in RULES for f in findings)
    judged = 0
    for ctx in contexts:
        if not ctx.evaluations:
            continue
        eff = effective_rules(rs, ctx.spec.name, ctx.spec.tags, nominal_crossover_hz(ctx))
        stable_margins = [e.analysis.margins for e in ctx.evaluations
                          if e.analysis.stability.stable]
        pms = [m.phase_margin_deg for m in stable_margins if m.phase_margin_deg is not None]
        gms = [m.gain_margin_db for m in stable_margins if m.gain_margin_db is not None]
        mine = {(f.rule, f.key_path.rsplit("#", 1)[-1]) for f in findings
                if f.loop == ctx.spec.name}
        if pms:
            limit = eff["margin.phase"].parameters["min_deg"]
            assert (("margin.phase", ctx.spec.controller.file + ":" + ctx.spec.controller.path)
                    in mine) == (min(pms) < limit), (ctx.spec.name, min(pms), limit)
            judged += 1
        if gms:
            limit = eff["margin.gain"].parameters["min_db"]
            assert (("margin.gain", "upper") in mine) == (min(gms) < limit), ctx.spec.name
        if name == "flight":
            # scheduling by mode frequency: below 0.06 Hz 30 deg, else 45 deg
            low = nominal_crossover_hz(ctx) is not None and nominal_crossover_hz(ctx) < 0.06
            assert eff["margin.phase"].parameters["min_deg"] == (30.0 if low else 45.0)
    assert judged >= 3


def test_ruleset_and_parameters_pickle(tmp_path):
    # rulesets and effective parameters travel to worker processes
    import pickle

    rs = load(tmp_path, "flight")
    again = pickle.loads(pickle.dumps(rs))
    assert again == rs and again.fingerprint() == rs.fingerprint()
    params = effective_rules(rs, "pitch.rate")["margin.gain"].parameters
    copy = pickle.loads(pickle.dumps(params))
    assert dict(copy) == dict(params)
    assert copy.location_of("min_db") == params.location_of("min_db")


def test_masks_in_a_ruleset(tmp_path):
    write(tmp_path, "r.toml", """
        [[adjustments]]
        tags = ["structural"]
        rules = { "response.mask" = { signal = "loop", upper = [[150.0, -20.0], [400.0, -20.0]] } }
    """)
    rs = load(tmp_path, "r.toml")
    eff = effective_rules(rs, "wing.bending", ("structural",))["response.mask"]
    assert eff.parameters["upper"] == ((150.0, -20.0), (400.0, -20.0))
    assert eff.parameters["signal"] == "loop"
    write(tmp_path, "r.toml", """
        [rules."response.mask"]
        upper = [[150.0, -20.0], [100.0, -20.0]]
    """)
    err = error_of(tmp_path, "r.toml")
    assert "increasing" in err.message and err.key == 'rules."response.mask".upper.1'
    write(tmp_path, "r.toml", '[rules."response.mask"]\nsignal = "lop"\n')
    assert "did you mean 'loop'" in error_of(tmp_path, "r.toml").message


class TestEarlierLayout:
    """Keys of the earlier ruleset layout are located errors naming the new key
    (FORMATS.md section 4 reads based_on, [[adjustments]] and "disabled")."""

    def test_extends_names_based_on(self, tmp_path):
        write(tmp_path, "a.toml", '[ruleset]\nname = "a"\nextends = "baseline"\n')
        err = error_of(tmp_path, "a.toml")
        assert (err.file, err.line, err.column, err.key) == ("a.toml", 3, 1, "ruleset.extends")
        assert "based_on" in err.message

    def test_overrides_names_adjustments(self, tmp_path):
        write(tmp_path, "a.toml", '[[overrides]]\nloops = ["x"]\nrules = {}\n')
        err = error_of(tmp_path, "a.toml")
        assert (err.file, err.line, err.key) == ("a.toml", 1, "overrides")
        assert "[[adjustments]]" in err.message

    def test_severity_off_names_disabled(self, tmp_path):
        write(tmp_path, "a.toml", '[[adjustments]]\nloops = ["x"]\n'
                                  'rules = { "margin.gain" = { severity = "off" } }\n')
        err = error_of(tmp_path, "a.toml")
        assert (err.file, err.line, err.key) == (
            "a.toml", 3, 'adjustments.0.rules."margin.gain".severity')
        assert '"disabled"' in err.message

    def test_disabled_turns_a_rule_off(self, tmp_path):
        write(tmp_path, "a.toml", '[rules."margin.gain"]\nseverity = "disabled"\n')
        rs = load(tmp_path, "a.toml")
        assert rs.rules["margin.gain"].severity is Severity.DISABLED
