"""ruleguard.analysis.scalar evaluates the same points as the reference copy of Brent's routines.

The reference is tests/scalar_reference.py, the routines as they were before
their loop constants were hoisted (R. P. Brent, Algorithms for Minimization
without Derivatives, 1973, chapters 4 and 5; Forsythe, Malcolm & Moler 1977,
ZEROIN and FMIN). Same sequence of evaluation points and same result, bit for
bit: the analysis' crossings and peaks do not move.
"""

from __future__ import annotations

import math

import numpy as np
import pytest

from ruleguard.analysis.scalar import brent_minimize, brent_root
from tests import scalar_reference as ref


def _recording(fun):
    seen = []

    def wrapped(x):
        seen.append(x)
        return fun(x)

    return wrapped, seen


def _random_functions(seed: int):
    rng = np.random.default_rng(seed)
    for _ in range(60):
        c = rng.normal(size=int(rng.integers(2, 8)))
        shift = float(rng.normal())
        yield (lambda x, c=c, shift=shift: float(np.polyval(c, x - shift)))
        w0, zeta = float(rng.uniform(0.5, 2.0)), float(rng.uniform(0.002, 0.2))
        yield (lambda x, w0=w0, zeta=zeta: math.log(abs(1.0 - (x / w0) ** 2 + 2j * zeta * x / w0))
               - 0.1)


@pytest.mark.parametrize("seed", range(5))
def test_root_iterates_are_the_reference_ones(seed):
    checked = 0
    for fun in _random_functions(seed):
        grid = np.linspace(-3.0, 3.0, 61)
        vals = [fun(float(x)) for x in grid]
        for i in range(grid.size - 1):
            if (vals[i] > 0) == (vals[i + 1] > 0):
                continue
            a, b = float(grid[i]), float(grid[i + 1])
            for kwargs in ({}, {"xtol": 1e-15 * max(abs(a), abs(b)), "rtol": 1e-15}):
                f1, s1 = _recording(fun)
                f2, s2 = _recording(fun)
                assert brent_root(f1, a, b, **kwargs) == ref.brent_root(f2, a, b, **kwargs)
                assert s1 == s2
                checked += 1
    assert checked > 20


@pytest.mark.parametrize("seed", range(5))
def test_minimizer_iterates_are_the_reference_ones(seed):
    rng = np.random.default_rng(100 + seed)
    for fun in _random_functions(seed):
        lo = float(rng.uniform(-3.0, 1.0))
        hi = lo + float(rng.uniform(1e-6, 3.0))
        for xatol in (1e-10, 1e-10 * abs(hi)):
            f1, s1 = _recording(fun)
            f2, s2 = _recording(fun)
            assert brent_minimize(f1, lo, hi, xatol=xatol) == ref.brent_minimize(
                f2, lo, hi, xatol=xatol)
            assert s1 == s2
