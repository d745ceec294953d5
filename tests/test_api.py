"""The public Python API (ruleguard.api)."""

import math
from pathlib import Path

import pytest

from ruleguard import api

DEMO = Path(__file__).resolve().parents[1] / "fixtures" / "gimbal_demo" / "ruleguard.toml"


def test_analyse_third_order_loop_closed_form():
    # L = K / (s (s+1)(s+2)), K = 2. Routh-Hurwitz on s^3 + 3 s^2 + 2 s + K:
    # stable iff 0 < K < 6, the boundary at s = j sqrt(2). So the gain margin is
    # 20 log10(6/2) dB at sqrt(2)/(2 pi) Hz (closed form).
    plant = api.transfer_function([1.0], [1.0, 3.0, 2.0, 0.0])
    result = api.analyse(api.open_loop(plant, gain=2.0))
    assert result.stability.stable
    assert result.margins.gain_margin_db == pytest.approx(20 * math.log10(3.0), rel=1e-6)
    assert result.margins.gain_margin_hz == pytest.approx(math.sqrt(2) / (2 * math.pi), rel=1e-6)
    assert result.margins.stable_gain_ranges_db[0][0] is None


def test_analyse_sampled_integrator_closed_form():
    # L = K/(z - 1): the closed-loop pole is z = 1 - K, stable iff 0 < K < 2; the
    # gain margin point is the Nyquist frequency, where L = -K/2 (closed form).
    block = api.zero_pole_gain([], [1.0], 0.5, sample_rate_hz=100.0)
    result = api.analyse(block)
    assert result.stability.stable
    assert result.margins.gain_margin_db == pytest.approx(20 * math.log10(4.0), rel=1e-6)
    assert result.margins.gain_margin_hz == pytest.approx(50.0, rel=1e-9)


def test_check_returns_frozen_report_and_json_document():
    report = api.check(DEMO, as_of="2026-12-01", only=["margin.gain"])
    assert report.failed
    assert {f.rule for f in report.findings} == {"margin.gain"}
    doc = api.report_as_dict(report)
    assert doc["summary"]["result"] == "fail"
    assert doc["summary"]["loops"] == len(report.loops)
    with pytest.raises(AttributeError):
        report.findings[0].rule = "other"  # frozen


def test_check_bad_input_raises_input_error(tmp_path):
    (tmp_path / "ruleguard.toml").write_text("[project\nname = 1\n")
    with pytest.raises(api.InputError) as info:
        api.check(tmp_path / "ruleguard.toml")
    assert info.value.file == "ruleguard.toml"
    assert info.value.line == 1
