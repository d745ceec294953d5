"""The rules table: every rule of RULES.md, complete rows, explain, selection."""

from __future__ import annotations

import re

import pytest

from ruleguard.rules.base import Severity
from ruleguard.rules.catalog import (
    FAMILY_MODULES,
    RULES,
    UnknownRule,
    check_patterns,
    explain,
    families,
    family_of,
    is_selected,
    matches,
    selected_rules,
)

#: The catalog of RULES.md (the design contract), in its order.
RULES_MD = (
    "stability.closed-loop",
    "stability.encirclements",
    "margin.gain",
    "margin.phase",
    "margin.delay",
    "margin.disk",
    "sensitivity.peak",
    "sensitivity.complementary-peak",
    "crossover.range",
    "bandwidth.range",
    "cascade.separation",
    "controller.stable",
    "controller.derivative-filter",
    "controller.noise-gain",
    "loop.hidden-cancellation",
    "filter.below-nyquist",
    "filter.resonance-coverage",
    "sampling.rate",
    "quantization.robust",
    "steady-state.type",
    "config.bounds",
    "response.mask",
)

UNIT_SUFFIX = {"dB": "_db", "deg": "_deg", "s": "_s", "Hz": "_hz", "samples": "_samples",
               "%": "_percent"}
TYPES = {"number", "integer", "boolean", "string", "points", "strings"}


def test_every_rule_of_the_design_is_in_the_table():
    missing = [r for r in RULES_MD if r not in RULES]
    assert missing == []


def test_family_modules_are_all_present():
    import importlib

    for name in FAMILY_MODULES:
        module = importlib.import_module(f"ruleguard.rules.{name}")
        assert module.RULES, name


@pytest.mark.parametrize("rule_id", sorted(RULES))
def test_row_is_complete(rule_id):
    rule = RULES[rule_id]
    assert rule.id == rule_id
    assert re.fullmatch(r"[a-z][a-z-]*\.[a-z][a-z-]*", rule_id)
    assert rule.family == family_of(rule_id) == rule_id.split(".")[0]
    assert isinstance(rule.default_severity, Severity)
    assert rule.default_severity is not Severity.DISABLED
    assert rule.summary and "\n" not in rule.summary and len(rule.summary) <= 100
    text = rule.explanation.lower()
    assert len(text) > 300 and "why" in text and "fix" in text
    # the source of the default: a publication (a year), or says it has none
    assert re.search(
        r"\b(19|20)\d\d\b|common practice|from memory|no default|no threshold", rule.source
    ), rule.source
    assert callable(rule.function)
    for p in rule.parameters:
        assert p.type in TYPES
        assert p.description
        if p.unit in UNIT_SUFFIX and p.type != "points":
            assert p.name.endswith(UNIT_SUFFIX[p.unit]), (rule_id, p.name)
        if p.default is not None:
            expected = {"number": (int, float), "integer": int, "boolean": bool,
                        "string": str}.get(p.type, object)
            assert isinstance(p.default, expected), (rule_id, p.name)
            if p.minimum is not None:
                assert p.default >= p.minimum
            if p.choices:
                assert p.default in p.choices


def test_only_closed_loop_is_always_on():
    assert [r for r, spec in RULES.items() if spec.always_on] == ["stability.closed-loop"]
    assert RULES["stability.closed-loop"].default_severity is Severity.ERROR


@pytest.mark.parametrize("rule_id", sorted(RULES))
def test_explain_every_rule(rule_id):
    rule = RULES[rule_id]
    text = explain(rule_id)
    assert text.startswith(f"{rule_id}: {rule.summary}")
    assert f"default severity: {rule.default_severity.value}" in text
    assert " ".join(rule.source.split()) in " ".join(text.split())
    assert " ".join(rule.explanation.split()) in " ".join(text.split())
    assert max(len(line) for line in text.splitlines()[1:]) <= 88
    for p in rule.parameters:
        lines = text.splitlines()
        at = next(i for i, line in enumerate(lines) if line.startswith(f"  {p.name} ("))
        line = " ".join(lines[at:at + 3])
        if p.unit:
            assert f"unit {p.unit}" in line
        if p.default is None:
            assert "not set" in line
        else:
            assert "default" in line


def test_explain_defaults_and_units_of_margin_gain():
    text = explain("margin.gain")
    assert "  min_db (number, unit dB, >= 0); default 6: smallest allowed" in text
    assert "Skogestad" in text


def test_explain_unknown_rule_suggests():
    with pytest.raises(UnknownRule) as err:
        explain("margin.phse")
    assert err.value.suggestion == "margin.phase"
    assert "did you mean 'margin.phase'" in str(err.value)


def test_selection():
    assert matches("margin.phase", "margin")
    assert matches("margin.phase", "margin.phase")
    assert not matches("margin.phase", "margin.ph")
    assert not matches("marginal.x", "margin")
    assert is_selected("margin.gain", only=["margin"], skip=["margin.phase"])
    assert not is_selected("margin.phase", only=["margin"], skip=["margin.phase"])
    assert not is_selected("sensitivity.peak", only=["margin"])
    assert selected_rules(only=["sensitivity"]) == (
        "sensitivity.complementary-peak",
        "sensitivity.peak",
    )
    assert "margin.phase" not in selected_rules(skip=["margin"])
    with pytest.raises(UnknownRule) as err:
        check_patterns(["stabilty"])
    assert err.value.suggestion == "stability"


def test_families_in_catalog_order():
    fams = families()
    assert fams[:3] == ("stability", "margin", "sensitivity")
    assert "waiver" in fams
