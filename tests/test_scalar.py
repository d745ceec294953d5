"""Brent's root finder and minimiser against closed forms and scipy.optimize."""

import math

import numpy as np
import pytest
import scipy.optimize

from ruleguard.analysis.scalar import brent_minimize, brent_root


@pytest.mark.parametrize(
    "fun, a, b, root",
    [
        (lambda x: x * x - 2.0, 0.0, 2.0, math.sqrt(2.0)),  # closed form sqrt(2)
        (lambda x: math.cos(x) - x, 0.0, 1.0, None),  # Dottie number, scipy reference
        (lambda x: (x - 1.0) ** 3, 0.0, 3.0, 1.0),  # triple root: bisection safeguard
        (lambda x: math.exp(x) - 1e6, 0.0, 20.0, math.log(1e6)),
        (lambda x: math.atan(x - 0.3), -50.0, 1e3, 0.3),
    ],
)
def test_roots(fun, a, b, root):
    got = brent_root(fun, a, b, xtol=1e-15, rtol=1e-15)
    expected = root if root is not None else scipy.optimize.brentq(fun, a, b, xtol=1e-15)
    assert got == pytest.approx(expected, rel=1e-12, abs=1e-12)


def test_root_needs_a_bracket():
    with pytest.raises(ValueError):
        brent_root(lambda x: x * x + 1.0, -1.0, 1.0)


@pytest.mark.parametrize("seed", range(20))
def test_roots_of_random_polynomials_match_scipy(seed):
    # Independent computation: scipy.optimize.brentq on the same bracket.
    rng = np.random.default_rng(seed)
    coeffs = rng.normal(size=6)
    grid = np.linspace(-3, 3, 2001)
    vals = np.polyval(coeffs, grid)
    i = np.flatnonzero(np.diff(np.sign(vals)))
    if i.size == 0:
        pytest.skip("no sign change for this seed")
    a, b = grid[i[0]], grid[i[0] + 1]

    def fun(x):
        return float(np.polyval(coeffs, x))

    assert brent_root(fun, a, b, xtol=1e-14) == pytest.approx(
        scipy.optimize.brentq(fun, a, b, xtol=1e-14), abs=1e-12
    )


@pytest.mark.parametrize(
    "fun, lo, hi, xmin",
    [
        (lambda x: (x - 0.7) ** 2 + 3.0, 0.0, 2.0, 0.7),  # closed form
        (lambda x: -math.sin(x), 0.0, 3.0, math.pi / 2),  # closed form
        (lambda x: 1.0 / abs(1.0 + 2j * 0.05 * x - x * x), 0.5, 1.5, None),  # resonance
        (lambda x: x * math.log(x), 0.05, 2.0, 1.0 / math.e),  # closed form 1/e
    ],
)
def test_minimisation(fun, lo, hi, xmin):
    x, fx = brent_minimize(fun, lo, hi, xatol=1e-12)
    if xmin is None:  # scipy.optimize.minimize_scalar(method="bounded") as reference
        ref = scipy.optimize.minimize_scalar(
            fun, bounds=(lo, hi), method="bounded", options={"xatol": 1e-12}
        )
        xmin = ref.x
    assert x == pytest.approx(xmin, rel=1e-6)
    assert fx == pytest.approx(fun(xmin), rel=1e-10)
