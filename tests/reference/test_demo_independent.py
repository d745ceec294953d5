"""The demo's sampled loops recomputed independently with scipy.signal.

Each loop is rebuilt here from its published formulas with general-purpose
tools only (scipy.signal.cont2discrete for the zero-order hold, polynomial
evaluation on the unit circle, scipy.optimize.brentq for crossings) and
compared with what `ruleguard check --format json` reports. Sources:
zero-order-hold equivalent and Tustin map (Franklin, Powell & Workman,
Digital Control of Dynamic Systems, 3rd ed., 1998, ch. 6); margins on
L(exp(j w h)) up to the Nyquist frequency (Astrom & Wittenmark,
Computer-Controlled Systems, 3rd ed., 1997, section 3.3 / Defs. 3.4-3.5).
"""

import io
import json
from pathlib import Path

import numpy as np
import pytest
import scipy.optimize
import scipy.signal

from ruleguard.cli import run

DEMO = Path(__file__).resolve().parents[2] / "fixtures" / "gimbal_demo" / "ruleguard.toml"


@pytest.fixture(scope="module")
def demo_report():
    out, err = io.StringIO(), io.StringIO()
    code = run(
        [
            "check",
            "--manifest",
            str(DEMO),
            "--format",
            "json",
            "--no-cache",
            "--as-of",
            "2026-12-01",
        ],
        stdout=out,
        stderr=err,
    )
    assert code in (0, 1), err.getvalue()
    return json.loads(out.getvalue())


def _nominal(report, name):
    loop = next(lp for lp in report["loops"] if lp["name"] == name)
    assert loop["variants"][0]["id"] == "nominal"
    return loop["variants"][0]


def _tustin_pi(kp, ki, h):
    # C(s) = kp + ki/s with s -> (2/h)(z-1)/(z+1):  C(z) = kp + ki*h/2 * (z+1)/(z-1)
    num = np.polyadd(kp * np.array([1.0, -1.0]), ki * h / 2 * np.array([1.0, 1.0]))
    return num, np.array([1.0, -1.0])


def _margins(num, den, h):
    """Phase margin (deg) and crossover (Hz), gain margin (dB) of L(z) = num/den."""

    def L(w):
        z = np.exp(1j * w * h)
        return np.polyval(num, z) / np.polyval(den, z)

    w = np.linspace(1e-3, np.pi / h, 200001)
    mag = np.abs(L(w))
    i = np.flatnonzero(np.diff(np.sign(mag - 1.0)))[0]
    wc = scipy.optimize.brentq(lambda x: abs(L(x)) - 1.0, w[i], w[i + 1], xtol=1e-12)
    pm = 180.0 + np.rad2deg(np.angle(L(wc)))
    ph = np.unwrap(np.angle(L(w)))
    j = np.flatnonzero(np.diff(np.sign(ph + np.pi)))[0]
    w180 = scipy.optimize.brentq(lambda x: np.interp(x, w, ph) + np.pi, w[j], w[j + 1], xtol=1e-12)
    # refine on the exact response: imaginary part of L vanishes at the phase crossover
    w180 = scipy.optimize.brentq(lambda x: L(x).imag, w180 * 0.999, w180 * 1.001, xtol=1e-12)
    gm_db = -20 * np.log10(abs(L(w180)))
    return pm, wc / (2 * np.pi), gm_db, w180 / (2 * np.pi)


def _pi_loop(plant_num, plant_den, kp, ki, h, delay_samples):
    """num/den of L(z) = C(z) ZOH[G](z) z^-d with C a Tustin PI (polynomials in z)."""
    numd, dend, _ = scipy.signal.cont2discrete((plant_num, plant_den), h, method="zoh")
    cn, cd = _tustin_pi(kp, ki, h)
    num = np.polymul(cn, np.trim_zeros(numd.ravel(), "f"))
    den = np.polymul(np.polymul(cd, dend), np.r_[1.0, np.zeros(delay_samples)])
    return num, den


def _assert_margins(report, name, num, den, h):
    pm, fc, gm, f180 = _margins(num, den, h)
    got = _nominal(report, name)["margins"]
    assert got["phase_margin_deg"] == pytest.approx(pm, abs=1e-4)
    assert got["crossover_hz"] == pytest.approx(fc, rel=1e-6)
    assert got["gain_margin_db"] == pytest.approx(gm, abs=1e-5)
    assert got["gain_margin_hz"] == pytest.approx(f180, rel=1e-6)


# Tilt current: plant 1/(L s + R), sensor 1/(s/(2 pi 8000) + 1), ZOH at 20 kHz,
# one sample of computation delay, PI by Tustin (values from fixtures/gimbal_demo).
TILT_CURRENT = dict(
    plant_num=[1.0], plant_den=np.polymul([4.2e-4, 1.3], [1 / (2 * np.pi * 8000.0), 1.0]),
    kp=2.1, ki=6200.0, h=1 / 20000.0, delay_samples=1,
)


def test_tilt_current_loop(demo_report):
    num, den = _pi_loop(**TILT_CURRENT)
    _assert_margins(demo_report, "tilt.current", num, den, TILT_CURRENT["h"])


# Heater: plant 0.24 exp(-12 s)/(95 s + 1) sampled at 2 Hz with one sample of
# computation delay: total 12.5 s = 25 whole samples, so the ZOH equivalent is
# z^-25 times the ZOH of 0.24/(95 s + 1). PI gains mapped from the PLC file:
# kp = P = 16.5, ki = I_per_scan * 2 = 0.174 per second.
HEATER = dict(plant_num=[0.24], plant_den=[95.0, 1.0], kp=16.5, ki=0.174, h=0.5, delay_samples=25)


def test_housing_heater_loop(demo_report):
    num, den = _pi_loop(**HEATER)
    _assert_margins(demo_report, "housing.heater", num, den, HEATER["h"])


def test_demo_verdicts_match_closed_loop_roots(demo_report):
    # Independent verdict for the heater: roots of den + num (characteristic
    # polynomial of the unity-feedback loop), all inside the unit circle.
    num, den = _pi_loop(**HEATER)
    roots = np.roots(np.polyadd(den, num))
    stable = bool(np.all(np.abs(roots) < 1.0))
    assert _nominal(demo_report, "housing.heater")["stability"]["stable"] is stable
