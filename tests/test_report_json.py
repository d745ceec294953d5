"""The JSON report against FORMATS.md section 5 and the report schema."""

from __future__ import annotations

import copy
import json
import re
from pathlib import Path

import jsonschema
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st
from sample_reports import (
    PHASE_FINDING,
    WAIVED_FINDING,
    clean_report,
    sample_report,
)

from ruleguard.report import json_report
from ruleguard.rules.base import Severity

REPO = Path(__file__).resolve().parents[1]
SCHEMA_PATH = REPO / "ruleguard" / "load" / "schemas" / "report.schema.json"
FORMATS_MD = REPO.parent / "shared" / "design" / "FORMATS.md"


def _schema() -> dict:
    return json.loads(SCHEMA_PATH.read_text(encoding="utf-8"))


def _validator() -> jsonschema.Draft202012Validator:
    schema = _schema()
    jsonschema.Draft202012Validator.check_schema(schema)
    return jsonschema.Draft202012Validator(schema)


def _strict_loads(text: str) -> dict:
    def refuse(name: str):
        raise AssertionError(f"non-standard JSON constant {name} in the report")

    return json.loads(text, parse_constant=refuse)


def _contract_example() -> dict:
    """The example document of FORMATS.md section 5 (the contract itself)."""
    if not FORMATS_MD.is_file():
        pytest.skip(f"the design contract is not beside the repository ({FORMATS_MD})")
    text = FORMATS_MD.read_text(encoding="utf-8")
    section = text.split("## 5.", 1)[1]
    block = re.search(r"```json\n(.*?)```", section, re.S)
    assert block, "FORMATS.md section 5 has no json example"
    return json.loads(block.group(1))


def _key_paths(data, prefix: str = "") -> set[str]:
    """Every key path of a JSON document; list items collapse to ``[]``."""
    paths: set[str] = set()
    if isinstance(data, dict):
        for key, value in data.items():
            path = f"{prefix}.{key}" if prefix else key
            paths.add(path)
            paths |= _key_paths(value, path)
    elif isinstance(data, list):
        for item in data:
            paths |= _key_paths(item, prefix + "[]")
    return paths


class TestContract:
    def test_every_key_of_the_contract_example_is_present(self):
        example = _contract_example()
        rendered = _strict_loads(json_report.render(sample_report()))
        missing = _key_paths(example) - _key_paths(rendered)
        assert not missing, f"keys of FORMATS.md section 5 missing: {sorted(missing)}"

    def test_the_contract_example_validates_against_our_schema(self):
        # The schema is written from the contract; the contract's own example
        # must pass it (an outside check of the schema).
        _validator().validate(_contract_example())

    def test_rendered_reports_validate(self):
        validator = _validator()
        for report in (sample_report(), clean_report()):
            validator.validate(_strict_loads(json_report.render(report)))

    def test_schema_rejects_a_missing_required_key(self):
        validator = _validator()
        data = _strict_loads(json_report.render(sample_report()))
        broken = copy.deepcopy(data)
        del broken["loops"][0]["variants"][0]["margins"]["delay_margin_s"]
        assert not validator.is_valid(broken)
        broken = copy.deepcopy(data)
        broken["findings"][0]["severity"] = "fatal"
        assert not validator.is_valid(broken)
        broken = copy.deepcopy(data)
        broken["loops"][0]["variants"][0]["id"] = "corner-1"  # variants[0] must be nominal
        assert not validator.is_valid(broken)

    def test_shipped_schema_is_reachable_through_the_loader(self):
        schemas = pytest.importorskip("ruleguard.load.schemas")
        if not hasattr(schemas, "schema_text"):
            pytest.skip("ruleguard.load.schemas.schema_text is not written yet")
        assert json.loads(schemas.schema_text("report")) == _schema()


class TestValues:
    def setup_method(self):
        self.data = _strict_loads(json_report.render(sample_report()))

    def test_summary_counts_unwaived_and_waived(self):
        s = self.data["summary"]
        # the sample holds 2 unwaived errors, 2 unwaived notes, 1 waived warning
        assert (s["errors"], s["warnings"], s["notes"], s["waived"]) == (2, 0, 2, 1)
        assert s["loops"] == 3
        assert s["evaluations"] == 4  # 3 variants + 1 + 0 (not analysed)
        assert s["result"] == "fail"

    def test_clean_report_passes(self):
        data = _strict_loads(json_report.render(clean_report()))
        assert data["summary"]["result"] == "pass"
        assert data["findings"] == []

    def test_fail_at_changes_the_result(self):
        # only notes and a waived warning: passes at error, fails at note
        findings = (WAIVED_FINDING,) + sample_report().findings[3:]
        at_error = _strict_loads(json_report.render(sample_report(findings=findings)))
        at_note = _strict_loads(
            json_report.render(sample_report(findings=findings, fail_at=Severity.NOTE))
        )
        assert at_error["summary"]["result"] == "pass"
        assert at_note["summary"]["result"] == "fail"

    def test_nominal_first_and_null_meanings(self):
        loop = self.data["loops"][0]
        assert loop["variants"][0]["id"] == "nominal"
        unstable = loop["variants"][2]
        assert unstable["stability"]["stable"] is False
        margins = unstable["margins"]
        # not applicable on an unstable loop (FORMATS.md section 5)
        for key in ("gain_margin_db", "lower_gain_margin_db", "delay_margin_s",
                    "delay_margin_samples", "disk_margin"):
            assert margins[key] is None
        # still given: crossovers with negative phase margin, stable gain ranges
        assert margins["crossovers"] == [{"hz": 61.0, "phase_margin_deg": -12.0}]
        assert margins["stable_gain_ranges_db"] == [[None, -2.0]]

    def test_non_finite_floats_become_null(self):
        text = json_report.render(sample_report())
        assert "Infinity" not in text and "NaN" not in text
        assert self.data["loops"][0]["variants"][2]["margins"]["sensitivity_peak_db"] is None

    def test_finding_fields(self):
        f = self.data["findings"][0]
        assert f == {
            "rule": PHASE_FINDING.rule,
            "severity": "error",
            "loop": "tilt.velocity",
            "variant": "corner-1",
            "message": PHASE_FINDING.message,
            "measured": 38.2,
            "limit": 45.0,
            "unit": "deg",
            "frequency_hz": 61.0,
            "location": {"file": "firmware/tilt.toml", "line": 7, "column": 1,
                         "key": "velocity"},
            "waived": False,
            "waiver_reason": None,
            "key_path": "velocity",
            "related": [
                {"file": "models/plants.toml", "line": 1, "column": 1,
                 "key": "plants.tilt_mechanics"},
                {"file": "house.toml", "line": 6, "column": 1,
                 "key": "rules.margin.phase.min_deg"},
            ],
            "hint": None,  # docs/formats-additions.md: null when the finding has none
        }
        waived = self.data["findings"][2]
        assert waived["waived"] is True
        assert waived["waiver_reason"] == WAIVED_FINDING.waiver_reason

    def test_not_analysed_loop(self):
        loop = self.data["loops"][2]
        assert loop["analysed"] is False
        assert loop["variants"] == []
        assert loop["not_analysed_reason"].startswith("the derivative term")
        assert loop["analysis"] == {"discretization": None, "total_delay_s": None,
                                    "notes": ["derivative without filter"]}

    def test_continuous_loop_has_null_sample_rate_and_samples(self):
        loop = self.data["loops"][1]
        assert loop["domain"] == "continuous"
        assert loop["sample_rate_hz"] is None
        margins = loop["variants"][0]["margins"]
        assert margins["delay_margin_samples"] is None
        assert margins["delay_margin_s"] == pytest.approx(
            # (PM in rad) / omega_c, FORMATS.md section 5
            63.0 / 180.0 * 3.141592653589793 / (2 * 3.141592653589793 * 0.004)
        )
        assert margins["gain_margin_db"] is None  # stable: null means unbounded


# ------------------------------------------------------------ the fast encoder
# Reference: the standard library's json.dumps with the options the report
# always used (indent 2, ensure_ascii=False, allow_nan=False): same text, or
# the same exception, for any value.

_LEAVES = (
    st.none() | st.booleans() | st.integers() | st.floats(allow_nan=True, allow_infinity=True)
    | st.text()
)
_KEYS = st.text() | st.integers() | st.booleans() | st.none() | st.floats(allow_nan=False)
_VALUES = st.recursive(
    _LEAVES,
    lambda inner: st.lists(inner, max_size=4) | st.tuples(inner, inner)
    | st.dictionaries(_KEYS, inner, max_size=4),
    max_leaves=25,
)


def _outcome(fn, value, indent):
    try:
        return "text", fn(value, indent)
    except (ValueError, TypeError) as exc:
        return "error", type(exc)


def _library(value, indent):
    return json.dumps(value, indent=indent, ensure_ascii=False, allow_nan=False)


@settings(max_examples=400, deadline=None)
@given(_VALUES, st.sampled_from([None, 0, 2, 4]))
def test_fast_encoder_writes_what_the_library_writes(value, indent):
    assert _outcome(json_report.dumps, value, indent) == _outcome(_library, value, indent)


def test_fast_encoder_on_reports_and_odd_values():
    for report in (sample_report(), clean_report()):
        data = json_report.report_data(report)
        assert json_report.dumps(data) == _library(data, 2)
    import enum

    class Colour(str, enum.Enum):
        RED = "red"

    odd = {"sub": Colour.RED, "big": 10**30, "neg": -0.0, "tiny": 5e-324, "u": "é\u2028\x00"}
    assert json_report.dumps(odd) == _library(odd, 2)
    with pytest.raises(ValueError):
        json_report.dumps({"x": [1.0, float("nan")]})
