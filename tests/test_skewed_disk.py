"""Skewed disk margins (margin.disk ``skew``): closed forms and an independent computation.

Definitions (Seiler, Packard & Gahinet, "An Introduction to Disk Margins",
IEEE Control Systems Magazine 40(5), 2020; METHODS.md): the disk
D(alpha, sigma) holds the factors f = (1 + (1 - s) d/2) / (1 - (1 + s) d/2),
|d| <= alpha, and the loop's disk margin is alpha = 1/||S + (sigma - 1)/2||inf.

With that formula sigma = 1 gives 1/||S||inf and sigma = -1 gives
1/||S - 1||inf = 1/||T||inf (S - 1 = -T). The issue text said the reverse
("sigma = 1 is the margin on T, sigma = -1 on S"); the formula of METHODS.md
and of the paper is followed here, and checked below against Ms and Mt.
"""

from __future__ import annotations

import math

import numpy as np
import pytest

from ruleguard.analysis.margins import (
    analyse_open_loop,
    skewed_disk_margin,
    skewed_disk_phase_deg,
    skewed_disk_range,
)
from ruleguard.analysis.openloop import OpenLoop
from ruleguard.models.lti import Factored
from ruleguard.rules.margins import alpha_for_gain_db, alpha_for_phase_deg


def _loop(zeros, poles, gain, delay_s=0.0) -> OpenLoop:
    return OpenLoop(Factored(np.asarray(zeros, complex), np.asarray(poles, complex), gain,
                             delay_s))


def _disk_factor(delta: complex, skew: float) -> complex:
    """The disk's map d -> f (Seiler, Packard & Gahinet 2020)."""
    return (1 + (1 - skew) * delta / 2) / (1 - (1 + skew) * delta / 2)


class TestIntegratorClosedForm:
    # L = k/s: S(jw) = jw/(jw + k) = 1/(1 - jk/w) runs on the circle
    # |S - 1/2| = 1/2 from S = 0 (w -> 0) to S = 1 (w -> inf). The largest
    # |S + c| over that circle is |1/2 + c| + 1/2, so with c = (sigma - 1)/2:
    # ||S + c||inf = (1 + |sigma|)/2 and alpha = 2/(1 + |sigma|).
    # sigma = 0: alpha = 2 (METHODS.md's check value); sigma = 1: ||S||inf = 1,
    # alpha = 1; sigma = -1: ||T||inf = ||k/(s + k)||inf = 1, alpha = 1.
    @pytest.mark.parametrize("skew", [-1.0, -0.5, -0.2, 0.0, 0.3, 0.5, 1.0])
    @pytest.mark.parametrize("k", [0.5, 40.0])
    def test_alpha(self, skew, k):
        disk = skewed_disk_margin(_loop([], [0.0], k), skew)
        assert disk.alpha == pytest.approx(2.0 / (1.0 + abs(skew)), rel=1e-9)
        assert disk.skew == skew

    def test_sigma_plus_one_range_and_phase(self):
        # sigma = 1, alpha = 1: f = 1/(1 - d), |d| <= 1, is the half plane
        # Re f >= 1/2: gain range [1/2, inf) = [-6.0206 dB, unbounded]; it meets
        # the unit circle where cos(theta) = 1/2, theta = 60 deg.
        disk = skewed_disk_margin(_loop([], [0.0], 3.0), 1.0)
        low, high = disk.gain_range_db
        assert low == pytest.approx(20 * math.log10(0.5), rel=1e-9)
        assert high is None
        assert disk.phase_deg == pytest.approx(60.0, rel=1e-9)

    def test_sigma_minus_one_range_and_phase(self):
        # sigma = -1, alpha = 1: f = 1 + d, |d| <= 1: the disk of centre 1,
        # radius 1: gains (0, 2] (lower end unbounded, upper +6.0206 dB); it
        # meets the unit circle where |e^{j theta} - 1| = 1, theta = 60 deg.
        disk = skewed_disk_margin(_loop([], [0.0], 3.0), -1.0)
        low, high = disk.gain_range_db
        assert low is None
        assert high == pytest.approx(20 * math.log10(2.0), rel=1e-9)
        assert disk.phase_deg == pytest.approx(60.0, rel=1e-9)


class TestDiskGeometry:
    """The gain range and phase formulas against the disk's own map."""

    @pytest.mark.parametrize("seed", range(5))
    def test_range_ends_are_the_map_at_plus_minus_alpha(self, seed):
        rng = np.random.default_rng(seed)
        for _ in range(20):
            skew = rng.uniform(-1.5, 1.5)
            alpha = rng.uniform(0.05, 1.9) / max(1.0, abs(skew))
            low, high = skewed_disk_range(alpha, skew)
            f_low = _disk_factor(-alpha, skew).real
            f_high = _disk_factor(alpha, skew).real
            if f_low > 0:
                assert low == pytest.approx(20 * math.log10(f_low), rel=1e-12, abs=1e-12)
            else:
                assert low is None
            if 2 - alpha * (1 + skew) > 0:
                assert high == pytest.approx(20 * math.log10(f_high), rel=1e-12, abs=1e-12)
            else:
                assert high is None

    @pytest.mark.parametrize("seed", range(5))
    def test_phase_is_where_the_unit_circle_leaves_the_disk(self, seed):
        # inverse map d = (f - 1)/((1 - s)/2 + (1 + s)/2 f): at f = e^{j theta}
        # with theta the reported phase, |d| must equal alpha (the boundary).
        rng = np.random.default_rng(100 + seed)
        for _ in range(20):
            skew = rng.uniform(-1.0, 1.0)
            alpha = rng.uniform(0.05, 1.5)
            theta = math.radians(skewed_disk_phase_deg(alpha, skew))
            f = complex(math.cos(theta), math.sin(theta))
            d = (f - 1) / ((1 - skew) / 2 + (1 + skew) / 2 * f)
            assert abs(d) == pytest.approx(alpha, rel=1e-10)

    def test_balanced_case_is_methods_check_values(self):
        # METHODS.md: alpha = 0.5 -> +-4.44 dB, +-28.07 deg (derived there)
        low, high = skewed_disk_range(0.5, 0.0)
        assert high == pytest.approx(4.437, abs=5e-3) and low == pytest.approx(-high)
        assert skewed_disk_phase_deg(0.5, 0.0) == pytest.approx(28.07, abs=5e-3)

    @pytest.mark.parametrize("skew", [-0.8, 0.0, 0.4, 1.0])
    def test_required_alpha_inverts_the_formulas(self, skew):
        a = alpha_for_gain_db(6.0, skew)
        low, high = skewed_disk_range(a, skew)
        ends = [abs(v) for v in (low, high) if v is not None]
        assert min(ends) == pytest.approx(6.0, rel=1e-10)
        b = alpha_for_phase_deg(40.0, skew)
        assert skewed_disk_phase_deg(b, skew) == pytest.approx(40.0, rel=1e-10)


def _random_stable_loop(rng):
    """A random stable loop: gain times (s + z) over three real/complex poles."""
    while True:
        poles = list(-rng.uniform(0.2, 30.0, size=1))
        wn, zeta = rng.uniform(1.0, 40.0), rng.uniform(0.1, 0.9)
        poles += [complex(-zeta * wn, wn * math.sqrt(1 - zeta**2)),
                  complex(-zeta * wn, -wn * math.sqrt(1 - zeta**2))]
        zeros = [-rng.uniform(0.5, 20.0)]
        k = float(np.abs(np.prod(poles))) * rng.uniform(0.3, 3.0) / abs(zeros[0])
        num = k * np.poly(zeros).real
        den = np.poly(poles).real
        char = np.polyadd(den, num)
        if np.all(np.roots(char).real < -1e-6):
            return zeros, poles, k, num, den


@pytest.mark.parametrize("seed", range(6))
def test_random_loops_against_scipy(seed):
    """Independent: scipy.signal.freqresp on a dense grid, scipy.optimize refinement."""
    signal = pytest.importorskip("scipy.signal")
    optimize = pytest.importorskip("scipy.optimize")
    rng = np.random.default_rng(seed)
    zeros, poles, k, num, den = _random_stable_loop(rng)
    system = signal.lti(num, den)
    w = np.logspace(-4, 5, 200_001)
    _, L = signal.freqresp(system, w)
    for skew in (-1.0, -0.4, 0.0, 0.6, 1.0):
        c = (skew - 1) / 2
        values = np.abs(1 / (1 + L) + c)
        j = int(np.argmax(values))
        peak = values[j]
        if 0 < j < w.size - 1:
            res = optimize.minimize_scalar(
                lambda x, c=c: -abs(1 / (1 + signal.freqresp(system, [x])[1][0]) + c),
                bounds=(w[j - 1], w[j + 1]), method="bounded",
                options={"xatol": 1e-12 * w[j]})
            peak = max(peak, -res.fun)
        # the limits w -> 0 (S(0) = 1/(1 + L(0))) and w -> inf (S -> 1) bound it too
        peak = max(peak, abs(1 + c))
        ours = skewed_disk_margin(_loop(zeros, poles, k), skew)
        assert ours.alpha == pytest.approx(1 / peak, rel=1e-7), skew


def test_sigma_one_is_ms_and_sigma_minus_one_is_mt():
    # alpha(1) = 1/Ms and alpha(-1) = 1/Mt (the formula of METHODS.md), both
    # against the analysis's separately computed and refined peaks.
    loop = _loop([-2.0], [0.0, -1.0, -8.0], 30.0, delay_s=0.02)
    margins = analyse_open_loop(loop).margins
    ms = 10 ** (margins.sensitivity_peak_db / 20)
    mt = 10 ** (margins.complementary_peak_db / 20)
    assert skewed_disk_margin(loop, 1.0).alpha == pytest.approx(1 / ms, rel=1e-8)
    assert skewed_disk_margin(loop, -1.0).alpha == pytest.approx(1 / mt, rel=1e-8)
    balanced = skewed_disk_margin(loop, 0.0)
    assert balanced.alpha == pytest.approx(margins.disk_margin.alpha, rel=1e-9)


def test_rule_judges_the_skewed_margin(tmp_path):
    # margin.disk with skew = 1 judges alpha = 1/Ms (formula above); the
    # finding's measured alpha must equal 1/Ms from the report's separately
    # computed sensitivity peak of the worst variant.
    from ruleguard import api
    from ruleguard.report.json_report import report_data

    (tmp_path / "ruleguard.toml").write_text("""[project]
name = "skew"
ruleset = "rules.toml"
plants = ["plants.toml"]

[[loops]]
name = "axis.velocity"
plant = "mechanics"
controller = { file = "axis.toml", path = "velocity" }
delay_s = 0.002
""")
    (tmp_path / "plants.toml").write_text(
        '[plants.mechanics]\nkind = "zero_pole_gain"\nzeros = []\npoles = [0.0, -20.0]\n'
        'gain = 400.0\n')
    (tmp_path / "axis.toml").write_text('[velocity]\nkind = "pid"\nkp = 2.0\nki = 4.0\n')
    (tmp_path / "rules.toml").write_text(
        '[ruleset]\nname = "s"\n\n[rules."margin.disk"]\nmin_alpha = 0.9\nskew = 1.0\n')
    data = report_data(api.check(tmp_path / "ruleguard.toml"))
    finding = next(f for f in data["findings"] if f["rule"] == "margin.disk")
    margins = data["loops"][0]["variants"][0]["margins"]
    ms = 10 ** (margins["sensitivity_peak_db"] / 20)
    assert finding["measured"] == pytest.approx(1 / ms, rel=1e-8)
    assert finding["limit"] == 0.9
    # the report's balanced disk_margin is unchanged by the rule's skew
    assert margins["disk_margin"]["alpha"] != pytest.approx(1 / ms, rel=1e-3)
