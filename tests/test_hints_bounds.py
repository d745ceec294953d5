"""The bounds that let the hint refinement skip searches that cannot change a result.

``ruleguard.rules.hints`` skips a Brent search next to a run edge when a
bound shows that its values cannot move the run's forbidden interval: the
contour's step bound on ``log L`` (``_step_reach_db``) and, for the peak
limits, where the two roots of the quadratic lie around ``-20 log10 |L|``
(``_root_bounds_db``). Checked here:

* the step bound against ``|L|`` evaluated independently with numpy from the
  zeros, poles and gain, densely inside every step of sampled loops;
* the root bounds on a step against the roots numpy.roots finds of
  ``A k^2 + B k + C`` at points of the step;
* the forbidden intervals with the skips and with every search run (the
  skips disabled) are the same floats, on loops of the benchmark's kind,
  for the shifts and radii of the disk and sensitivity rules and for the
  phase and delay tests.
"""

from __future__ import annotations

import cmath
import math

import numpy as np
import pytest

from ruleguard.analysis.contour import sample_contour
from ruleguard.analysis.openloop import OpenLoop
from ruleguard.models.lti import Factored
from ruleguard.rules import hints

H = 1e-4  # 10 kHz


def _discrete_loop(seed: int, gain_scale: float = 1.0) -> OpenLoop:
    """A sampled loop of the benchmark's kind: resonances, an integrator, one delay sample."""
    rng = np.random.default_rng(seed)
    zeros, poles = [], [1.0, 0.0, math.exp(-rng.uniform(2.0, 20.0) * H)]
    for _ in range(3):
        f = 10 ** rng.uniform(math.log10(800.0), math.log10(4000.0))
        z = 10 ** rng.uniform(-1.7, -1.0)
        for target, damping, freq in ((poles, z, f), (zeros, z * 0.7, f * 0.9)):
            s = complex(-damping * 2 * math.pi * freq,
                        2 * math.pi * freq * math.sqrt(1 - damping * damping))
            target += [cmath.exp(s * H), cmath.exp(s.conjugate() * H)]
    zeros.append(math.exp(-rng.uniform(300.0, 600.0) * H))  # the PI's zero
    block = Factored(np.array(zeros, dtype=complex), np.array(poles, dtype=complex), 1.0, 0.0, H)
    # gain for |L| = 1 near 100 Hz
    x = cmath.exp(1j * 2 * math.pi * 100.0 * H)
    mag = abs(np.prod(x - block.zeros) / np.prod(x - block.poles))
    return OpenLoop(Factored(block.zeros, block.poles, gain_scale / mag, 0.0, H))


def _contour(open_loop: OpenLoop):
    contour = sample_contour(open_loop)
    contour.refine_for_point(-1.0)
    return contour


def _numpy_db_of_inverse(block: Factored, w: np.ndarray) -> np.ndarray:
    """-20 log10 |L(exp(j w h))| straight from the zeros, poles and gain (independent)."""
    x = np.exp(1j * w * block.sample_time_s)
    num = np.prod(x[:, None] - block.zeros[None, :], axis=1)
    den = np.prod(x[:, None] - block.poles[None, :], axis=1)
    return -20.0 * np.log10(np.abs(block.gain * num / den))


@pytest.mark.parametrize("seed", range(4))
def test_step_reach_covers_the_response_inside_every_step(seed):
    open_loop = _discrete_loop(seed)
    contour = _contour(open_loop)
    reach = hints._step_reach_db(contour)
    assert reach is not None
    for br in contour.branches:
        steps = reach(br)
        assert steps.shape == (br.w.size - 1,)
        t = np.linspace(0.0, 1.0, 17)[1:-1]
        inside = br.w[:-1, None] + (br.w[1:] - br.w[:-1])[:, None] * t
        ends = _numpy_db_of_inverse(open_loop.rational, br.w)
        values = _numpy_db_of_inverse(open_loop.rational, inside.ravel()).reshape(inside.shape)
        ok = np.isfinite(ends[:-1]) & np.isfinite(ends[1:])
        for end in (ends[:-1], ends[1:]):
            moved = np.abs(values - end[:, None]).max(axis=1)
            assert np.all(moved[ok] <= steps[ok])


def test_step_reach_is_not_used_with_a_zero_on_the_contour():
    # a Tustin low-pass puts a zero at z = -1 (on the unit circle): the contour
    # leaves it out of its step bound, so the bound does not cover |L| there
    base = _discrete_loop(0).rational
    block = Factored(np.append(base.zeros, -1.0), np.append(base.poles, 0.5), base.gain,
                     0.0, H)
    assert hints._step_reach_db(_contour(OpenLoop(block))) is None


@pytest.mark.parametrize("shift, radius", [
    (0.0, 2.0),                       # sensitivity peak 6 dB
    (-1.0, 10 ** (4.0 / 20.0)),       # complementary peak 4 dB
    (0.0, 10 ** (3.0 / 20.0)),
    (0.0, 1.0 / 0.7),                 # balanced disk (sigma = 0: c = 0), alpha 0.7
    (-0.25, 1.0 / 0.6),               # a skewed disk
])
def test_root_bounds_hold_the_roots_on_the_step(shift, radius):
    rng = np.random.default_rng(3)
    p = radius * radius - shift * shift
    c = radius * radius - (1.0 + shift) ** 2
    checked = 0
    for _ in range(400):
        L0 = 10 ** rng.uniform(-2, 2) * cmath.exp(1j * rng.uniform(-math.pi, math.pi))
        beta = 10 ** rng.uniform(-4, math.log10(0.5))
        low, high = hints._root_bounds_db(L0, beta, shift, radius)
        # points of the step: log L within beta of log L0 (a disk in the log plane)
        radii = np.concatenate([np.sqrt(rng.uniform(0, 1, 30)), np.ones(20)])  # and its rim
        delta = beta * radii * np.exp(1j * rng.uniform(0, 2 * np.pi, radii.size))
        for L in L0 * np.exp(delta):
            roots = np.roots([p * abs(L) ** 2, 2.0 * L.real * (p - shift), c])  # numpy
            if np.any(np.abs(roots.imag) > 0) or roots.real.max() <= 0:
                continue
            k1, k2 = sorted(roots.real)
            assert 20.0 * math.log10(k1) >= low
            assert 20.0 * math.log10(k2) <= high
            checked += 1
    assert checked > 500


def test_root_bounds_decline_roots_of_opposite_signs():
    # C = R^2 - (1 + c)^2 <= 0: the lower root is negative (or zero)
    assert hints._root_bounds_db(-0.5 + 0.1j, 0.01, 0.0, 1.0) is None
    assert hints._root_bounds_db(-0.5 + 0.1j, 0.01, 0.0, 0.9) is None
    assert hints._root_bounds_db(0j, 0.01, 0.0, 2.0) is None


def _forbidden(contour, shift_radius=None, test=None):
    hints._memo(contour).clear()
    if test is not None:
        return hints.frequency_test_forbidden(contour, test)
    return hints.peak_limit_forbidden(contour, *shift_radius)


@pytest.mark.parametrize("seed", range(6))
def test_skipped_searches_leave_the_same_intervals(seed, monkeypatch):
    checks = [("peak", (0.0, 2.0)), ("peak", (-1.0, 10 ** (4.0 / 20.0))),
              ("peak", (0.0, 1.0 / 0.7)), ("peak", (-0.25, 1.0 / 0.6)),
              ("test", hints.phase_test(45.0)), ("test", hints.phase_test(60.0)),
              ("test", hints.delay_test(2e-4)), ("test", hints.delay_test(1e-3))]
    skipped = []
    decide = hints._cannot_lower
    monkeypatch.setattr(hints, "_cannot_lower",
                        lambda floor, lo: skipped.append(decide(floor, lo)) or skipped[-1])
    for scale in (0.5, 1.0, 3.0):
        contour = _contour(_discrete_loop(seed, scale))
        with_skips = []
        for kind, arg in checks:
            with_skips.append(_forbidden(contour, arg if kind == "peak" else None,
                                         arg if kind == "test" else None))
        with monkeypatch.context() as m:
            m.setattr(hints, "_step_reach_db", lambda contour: None)
            every_search = []
            for kind, arg in checks:
                every_search.append(_forbidden(contour, arg if kind == "peak" else None,
                                               arg if kind == "test" else None))
        assert repr(with_skips) == repr(every_search)
    assert any(skipped)  # some searches were skipped
