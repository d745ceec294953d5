"""Vectorized refinement of several response peaks (ruleguard.rules.responses).

Reference: the resonance peak of wn^2 / (s^2 + 2 zeta wn s + wn^2) lies at
wr = wn sqrt(1 - 2 zeta^2) with |H| = 1 / (2 zeta sqrt(1 - zeta^2)) (closed
form: set d|H|^2/dw = 0; K. Ogata, Modern Control Engineering, 5th ed.,
2010, section 7-2, resonant peak and frequency).
"""

from __future__ import annotations

import math

import numpy as np

from ruleguard.rules.responses import refine_maxima, refine_maximum


def test_several_resonance_peaks_at_once_against_closed_form():
    cases = [(2 * math.pi * 50.0, 0.01), (2 * math.pi * 700.0, 0.05), (2 * math.pi * 3e3, 0.2)]

    def values_for(k):
        wn, zeta = cases[k]
        return lambda w: np.abs(wn**2 / (wn**2 - w**2 + 2j * zeta * wn * w))

    # one callable for all brackets: the bracket is known from the frequency band
    def values(w):
        out = np.empty(w.shape)
        for k, (wn, _) in enumerate(cases):
            sel = (w > 0.5 * wn) & (w < 1.5 * wn)
            out[sel] = values_for(k)(w[sel])
        return out

    lo, hi, w0, y0 = [], [], [], []
    for k, (wn, zeta) in enumerate(cases):
        grid = np.linspace(wn * (1 - 4 * zeta), wn * (1 + 4 * zeta), 41)
        y = values_for(k)(grid)
        i = int(np.argmax(y))
        lo.append(grid[i - 1])
        hi.append(grid[i + 1])
        w0.append(grid[i])
        y0.append(y[i])
    w, y = refine_maxima(values, np.array(lo), np.array(hi), np.array(w0), np.array(y0))
    for (wn, zeta), wk, yk, yg in zip(cases, w, y, y0, strict=True):
        assert yk >= yg
        np.testing.assert_allclose(yk, 1 / (2 * zeta * math.sqrt(1 - zeta**2)), rtol=1e-12)
        # the peak is flat: its location is known to about sqrt(eps) relative
        np.testing.assert_allclose(wk, wn * math.sqrt(1 - 2 * zeta**2), rtol=1e-6)


def test_agrees_with_the_scalar_refinement():
    wn, zeta = 2 * math.pi * 120.0, 0.02

    def values(w):
        return np.abs(wn**2 / (wn**2 - w**2 + 2j * zeta * wn * w))

    grid = np.linspace(wn * 0.9, wn * 1.1, 31)
    y = values(grid)
    i = int(np.argmax(y))
    ws, ys = refine_maximum(values, grid, y, i)
    wv, yv = refine_maxima(values, grid[[i - 1]], grid[[i + 1]], grid[[i]], y[[i]])
    # Brent's localmin stops at its tolerance; the zoom goes a little further
    assert yv[0] >= ys * (1 - 1e-15)
    np.testing.assert_allclose(yv[0], ys, rtol=1e-11)
    np.testing.assert_allclose(wv[0], ws, rtol=1e-6)
