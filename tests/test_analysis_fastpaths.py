"""The analysis' fast paths give the very numbers of the general routines they replace.

Each helper below stands in for a numpy routine (or a one-element-array
computation) in a hot loop of ruleguard.analysis; the references are numpy
itself (``np.geomspace``, ``np.unique``, ``np.insert``, ``np.abs``/``np.log`` on
arrays) and the plain-arithmetic product of the zero/pole ratios, compared
bit for bit (``==``, ``np.array_equal``), never within a tolerance.
"""

from __future__ import annotations

import cmath
import math

import numpy as np
import pytest

from ruleguard.analysis import contour as C
from ruleguard.analysis import crossings as X
from ruleguard.analysis import margins as M
from ruleguard.analysis.openloop import OpenLoop
from ruleguard.models.lti import Factored


def _resonant_discrete(seed: int) -> OpenLoop:
    """A 10th-order discrete loop with lightly damped pairs, an integrator and a delay."""
    rng = np.random.default_rng(seed)
    h = 1e-4
    wn = 2 * np.pi * rng.uniform(500, 4000, 4)
    zeta = rng.uniform(0.01, 0.1, 4)
    p = -zeta * wn + 1j * wn * np.sqrt(1 - zeta**2)
    z = p * rng.uniform(0.85, 0.97, 4)
    poles = np.exp(np.concatenate([p, p.conj(), [-10.0, -5000.0]]) * h)
    zeros = np.exp(np.concatenate([z, z.conj()]) * h)
    block = Factored(zeros, poles, 1.0, sample_time_s=h)
    block = block * Factored([0.9], [1.0, 0.0], 1.0, sample_time_s=h)
    g = 1.0 / abs(block.response(np.array([2 * np.pi * 100.0]))[0])
    return OpenLoop(block.scaled(g))


def test_geometric_is_numpy_geomspace():
    # reference: numpy.geomspace itself, same inputs, bit for bit
    rng = np.random.default_rng(0)
    for _ in range(3000):
        lo = float(np.exp(rng.uniform(-30, 10)))
        hi = lo * float(np.exp(rng.uniform(1e-12, 40)))
        n = int(rng.integers(2, 300))
        assert np.array_equal(C._geometric(lo, hi, n), np.geomspace(lo, hi, n))


def test_insert_after_is_numpy_insert():
    # reference: numpy.insert(a, idx + 1, new)
    rng = np.random.default_rng(2)
    for n in (2, 3, 10, 181):
        a = rng.normal(size=n) + 1j * rng.normal(size=n)
        for k in (0, 1, n - 1):
            idx = np.sort(rng.choice(n - 1, size=min(k, n - 1), replace=False))
            new = rng.normal(size=idx.size) + 1j * rng.normal(size=idx.size)
            assert np.array_equal(C._insert_after(a, idx, new), np.insert(a, idx + 1, new))


def test_local_minima_match_the_padded_definition():
    # reference: v <= both neighbours with +inf beyond the ends, finite, smallest first
    rng = np.random.default_rng(3)
    for n in (2, 3, 7, 100):
        v = rng.integers(0, 5, n).astype(float)
        v[rng.integers(0, n)] = np.nan
        left = np.concatenate([[np.inf], v[:-1]])
        right = np.concatenate([v[1:], [np.inf]])
        idx = np.nonzero((v <= left) & (v <= right) & np.isfinite(v))[0]
        expected = idx[np.argsort(v[idx])]
        assert np.array_equal(C._local_minima(v), expected)


def test_scalar_response_is_the_plain_product():
    # reference: gain * prod (x - z_k)/(x - p_k) / prod (x - p_rest), left to right,
    # in Python complex arithmetic, x = exp(j w h)
    ol = _resonant_discrete(4)
    r = C.RationalResponse(ol.rational)
    zeros, poles, h = ol.rational.zeros, ol.rational.poles, ol.rational.sample_time_s
    for w in np.geomspace(1.0, math.pi / h, 50).tolist():
        x = cmath.exp(1j * w * h)
        out = complex(ol.rational.gain)
        for z, p in zip(zeros.tolist(), poles.tolist(), strict=False):
            out *= (x - z) / (x - p)
        for p in poles.tolist()[zeros.size:]:
            out /= x - p
        assert r.value(w) == out
    # a frequency exactly on a pole (z = 1 at w = 0) gives infinity
    assert r.value(0.0) == complex(math.inf, 0.0)


@pytest.mark.parametrize("kind", ["unit", "axis"])
def test_scalar_crossing_function_is_the_array_one(kind):
    # reference: _gvalues on a one-element array (numpy abs and log)
    contour = C.sample_contour(_resonant_discrete(5))
    g = X._gscalar(contour, kind)
    for w in np.geomspace(1.0, contour.top_w, 200).tolist():
        L = contour.evaluate_scalar(w)
        expected = float(X._gvalues(np.array([L]), kind)[0])
        got = g(w)
        assert got == expected or (math.isnan(got) and math.isnan(expected))


def test_scalar_crossing_function_special_values():
    # log 0 = -inf, 0/0 = nan, as numpy gives them on arrays
    class Fixed:
        def __init__(self, value):
            self.open_loop = OpenLoop(Factored([], [-1.0], 1.0))
            self.value = value

        def scalar_evaluator(self):
            return lambda w: self.value

    with np.errstate(divide="ignore", invalid="ignore"):
        for value in (0j, complex(math.inf, 0.0), complex(math.nan, 0.0)):
            for kind in ("unit", "axis"):
                expected = float(X._gvalues(np.array([value]), kind)[0])
                got = X._gscalar(Fixed(value), kind)(1.0)
                assert got == expected or (math.isnan(got) and math.isnan(expected))


def test_complementary_sensitivity_on_a_numpy_scalar():
    # reference: margins._abs_t on a one-element array
    rng = np.random.default_rng(6)
    values = list(rng.normal(size=300) + 1j * rng.normal(size=300))
    values += [-1 + 0j, 0j, complex(math.inf, 0.0), complex(math.nan, 0.0)]
    for L in values:
        expected = float(M._abs_t(np.array([L]))[0])
        got = float(M._abs_t_np_scalar(np.complex128(L)))
        assert got == expected or (math.isnan(got) and math.isnan(expected))


def test_scale_hint_is_that_of_the_corner_frequencies():
    # reference: OpenLoop.corner_frequencies() (sorted, unique) and the boundary poles
    for seed in range(5):
        ol = _resonant_discrete(seed)
        r = C.RationalResponse(ol.rational)
        boundary = ol.boundary_pole_frequencies()
        pool = np.concatenate([ol.corner_frequencies(),
                               np.asarray([w for w, _ in boundary if w > 0], dtype=float)])
        pool = pool[np.isfinite(pool) & (pool > 0)]
        assert C._scale_hint(r, ol, boundary) == (float(pool.min()), float(pool.max()))
