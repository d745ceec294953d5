"""The screen of filter.resonance-coverage: a variant ruled out without the fine grid.

``_below_floor`` bounds |L| on each resonance window from a coarse grid and
the distance of the zeros and poles to the frequency path (closed form:
``|d log|L|/dw| <= |dx/dw| sum 1/|x - r|``, the derivative of
``log|x - r|``). Checked here against the refined peak of the fine grid
(``_peaks_db`` without a floor) on random resonant loops, continuous and
sampled: whenever the screen rules a variant out, every refined peak lies
below the floor; and a loop whose peak is above the floor is never ruled out.
"""

import math

import numpy as np

from ruleguard.analysis.openloop import OpenLoop
from ruleguard.models.lti import Factored
from ruleguard.rules.filters import _below_floor, _peaks_db, _windows


def _loop(rng, h=None):
    """A collocated plant (four resonances over antiresonances) times a PI, as in the bench."""
    res = np.sort(10 ** rng.uniform(math.log10(800.0), math.log10(4000.0), 4)) * 2 * math.pi
    zeta = 10 ** rng.uniform(-2.5, -1.0, 4)
    anti = res * rng.uniform(0.85, 0.97, 4)
    zeta_a = zeta * rng.uniform(0.5, 1.0, 4)

    def roots(w, z):
        r = -z * w + 1j * w * np.sqrt(1 - z * z)
        return np.concatenate([r, r.conj()])

    zeros = np.concatenate([roots(anti, zeta_a), [-100.0]])
    poles = np.concatenate([roots(res, zeta), [-5.0, -6000.0, 0.0]])
    gain = float(10 ** rng.uniform(4.0, 7.0))
    if h is not None:
        zeros, poles = np.exp(zeros * h), np.exp(poles * h)
        gain = gain * h * h
    rational = Factored(zeros, poles, gain, sample_time_s=h)
    resonances = [(float(w * math.sqrt(1 - z * z)), float(z))
                  for w, z in zip(res, zeta, strict=True)]
    if h is not None:
        resonances = [(w, z) for w, z in resonances if w < math.pi / h]
    return OpenLoop(rational), resonances


def test_screen_never_rules_out_a_peak_above_the_floor():
    rng = np.random.default_rng(3)
    screened = kept = 0
    for trial in range(160):
        h = None if trial % 2 else 1e-4
        loop, resonances = _loop(rng, h)
        if not resonances:
            continue
        peaks = [p for _, p in _peaks_db(loop, resonances)]
        for floor in (-6.0, -12.0, 0.0):
            if _below_floor(loop, _windows(loop, resonances), floor):
                screened += 1
                assert max(peaks) < floor
            elif max(peaks) > floor:
                kept += 1
    # both outcomes occur (the check is not vacuous)
    assert screened > 20 and kept > 20


def test_ruled_out_resonances_are_reported_below_the_floor():
    rng = np.random.default_rng(5)
    for _ in range(40):
        loop, resonances = _loop(rng, 1e-4)
        if not resonances:
            continue
        refined = _peaks_db(loop, resonances)
        floored = _peaks_db(loop, resonances, floor_db=-6.0)
        if max(p for _, p in refined) > -6.0:
            assert floored == refined  # not ruled out: the same refined peaks
        else:
            assert all(p <= -6.0 for _, p in floored)


def test_root_on_the_window_is_never_ruled_out():
    w0 = 2 * math.pi * 1000.0
    loop = OpenLoop(Factored([1j * w0, -1j * w0], [-1.0, -2.0, -3.0], 1e-12))
    assert not _below_floor(loop, [(0.9 * w0, 1.1 * w0)], 0.0)


def test_very_light_resonance_is_ruled_out_only_below_the_floor():
    # k wn^2 / (s^2 + 2 zeta wn s + wn^2) peaks at k / (2 zeta sqrt(1 - zeta^2)) (closed form)
    wn, zeta = 2 * math.pi * 1000.0, 1e-4
    p = -zeta * wn + 1j * wn * math.sqrt(1 - zeta * zeta)
    resonance = [(wn * math.sqrt(1 - zeta * zeta), zeta)]
    for peak_db, ruled_out in ((-20.0, True), (-6.5, True), (-5.5, False), (3.0, False)):
        k = 10 ** (peak_db / 20) * 2 * zeta * math.sqrt(1 - zeta * zeta)
        loop = OpenLoop(Factored([], [p, p.conjugate()], k * wn * wn))
        assert _below_floor(loop, _windows(loop, resonance), -6.0) is ruled_out, peak_db
