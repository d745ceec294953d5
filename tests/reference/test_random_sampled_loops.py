"""Sampled-data loops: Nyquist verdict against closed-loop roots, 1,000 seeded cases.

Each case is a loop as firmware runs it: a continuous plant (order 1-3,
stable or not) behind a zero-order hold, a whole-sample computation delay,
and a PI or lead controller discretized by Tustin or backward Euler. The loop
is built with ruleguard's own factored mappings (``zoh_equivalent``,
``discretize_block``) and judged by ``analyse_open_loop``. The reference is
built independently from polynomials with general-purpose tools:
scipy.signal.cont2discrete (ZOH and bilinear / backward-difference
substitutions), z^-d appended, the characteristic polynomial
den + num of the unity-feedback loop, and numpy.roots (trustworthy at these
orders, <= 8). Stable iff every root lies inside the unit circle (Jury's
criterion, stated in Astrom & Wittenmark, Computer-Controlled Systems,
3rd ed., 1997, section 3.2).
"""

import numpy as np
import pytest
import scipy.signal

from ruleguard.analysis.margins import analyse_open_loop
from ruleguard.analysis.openloop import OpenLoop
from ruleguard.models.discretize import discretize_block, zoh_equivalent
from ruleguard.models.lti import Factored

CASES = 1000
BOUNDARY_GAP = 1e-6  # cases with a closed-loop root this close to |z| = 1 are skipped


def _random_case(rng):
    h = float(10 ** rng.uniform(-4, -1))
    order = int(rng.integers(1, 4))
    w0 = 1.0 / h * 10 ** rng.uniform(-2.5, -0.3)  # plant corners below Nyquist
    poles = []
    while len(poles) < order:
        if order - len(poles) >= 2 and rng.random() < 0.4:
            wn, zeta = w0 * 10 ** rng.uniform(-0.5, 0.5), rng.uniform(0.05, 0.9)
            re, im = -zeta * wn, wn * np.sqrt(1 - zeta**2)
            poles += [complex(re, im), complex(re, -im)]
        else:
            sign = -1.0 if rng.random() < 0.8 else 1.0  # some open-loop unstable plants
            poles.append(sign * w0 * 10 ** rng.uniform(-0.5, 0.5))
    poles = np.array(poles, dtype=complex)
    if rng.random() < 0.2 and poles[-1].imag == 0:
        poles[-1] = 0.0  # an integrating plant
    dc_scale = np.prod(np.abs(poles[np.abs(poles) > 0])) if np.any(np.abs(poles) > 0) else 1.0
    gain = float(dc_scale * 10 ** rng.uniform(-1.0, 0.7))
    delay = int(rng.integers(0, 3))
    kind = rng.choice(["pi", "lead"])
    if kind == "pi":
        kp = float(10 ** rng.uniform(-1.5, 0.5))
        ki = float(kp * w0 * 10 ** rng.uniform(-1.5, 0.0))
        controller = Factored([-ki / kp], [0.0], kp)  # kp + ki/s = kp (s + ki/kp)/s
    else:
        wz = w0 * 10 ** rng.uniform(-0.5, 0.5)
        wp = min(wz * 10 ** rng.uniform(0.3, 1.0), 0.8 / h)
        k = float(10 ** rng.uniform(-1.5, 0.5))
        controller = Factored([-wz], [-wp], k * wp / wz)  # k (s/wz + 1)/(s/wp + 1)
    method = rng.choice(["tustin", "backward_euler"])
    return h, Factored([], poles, gain), controller, delay, str(method)


def _reference_polynomials(h, plant, controller, delay, method):
    num_p = np.real(np.poly(plant.zeros)) * plant.gain
    den_p = np.real(np.poly(plant.poles))
    nd, dd, _ = scipy.signal.cont2discrete((num_p, den_p), h, method="zoh")
    nd = np.trim_zeros(np.atleast_1d(np.squeeze(nd)), "f")
    num_c = np.real(np.poly(controller.zeros)) * controller.gain
    den_c = np.real(np.poly(controller.poles))
    ref_method = "bilinear" if method == "tustin" else "backward_diff"
    ncd, dcd, _ = scipy.signal.cont2discrete((num_c, den_c), h, method=ref_method)
    ncd = np.trim_zeros(np.atleast_1d(np.squeeze(ncd)), "f")
    num = np.polymul(nd, ncd)
    den = np.polymul(np.polymul(dd, dcd), np.r_[1.0, np.zeros(delay)])
    return num, den


def test_sampled_verdicts_match_closed_loop_roots():
    rng = np.random.default_rng(20261201)
    compared = skipped = stable_cases = 0
    disagreements = []
    for case in range(CASES):
        h, plant, controller, delay, method = _random_case(rng)
        plant_z = zoh_equivalent(plant, h, delay_s=delay * h)
        controller_z = discretize_block(controller, method, h)
        verdict = analyse_open_loop(OpenLoop(controller_z * plant_z)).stability
        num, den = _reference_polynomials(h, plant, controller, delay, method)
        roots = np.roots(np.polyadd(den, num))
        gap = np.min(np.abs(np.abs(roots) - 1.0))
        if gap < BOUNDARY_GAP or verdict.through_critical_point:
            skipped += 1
            continue
        compared += 1
        expected = bool(np.all(np.abs(roots) < 1.0))
        stable_cases += expected
        unstable = int(np.sum(np.abs(roots) > 1.0))
        if verdict.stable != expected or verdict.closed_loop_unstable_poles != unstable:
            disagreements.append((case, verdict, unstable))
    assert not disagreements, disagreements[:5]
    assert compared >= 0.97 * CASES, (compared, skipped)
    print(f"sampled-data loops: {compared} compared with numpy.roots, {skipped} skipped, "
          f"{compared - stable_cases} unstable, 0 disagreements")
    # both verdicts are well represented, so the comparison means something
    assert 0.2 * compared < stable_cases < 0.8 * compared, stable_cases


@pytest.mark.parametrize("seed", range(5))
def test_zoh_plant_response_matches_cont2discrete(seed):
    # Independent computation: scipy.signal.cont2discrete("zoh") of the same plant,
    # evaluated on the unit circle with numpy.polyval.
    rng = np.random.default_rng(seed)
    h, plant, _, delay, _ = _random_case(rng)
    plant_z = zoh_equivalent(plant, h, delay_s=delay * h)
    num_p = np.real(np.poly(plant.zeros)) * plant.gain
    den_p = np.real(np.poly(plant.poles))
    nd, dd, _ = scipy.signal.cont2discrete((num_p, den_p), h, method="zoh")
    w = np.linspace(0.01, 0.99, 50) * np.pi / h
    z = np.exp(1j * w * h)
    expected = np.polyval(np.squeeze(nd), z) / np.polyval(dd, z) * z ** (-delay)
    np.testing.assert_allclose(plant_z.response(w), expected, rtol=1e-6)
