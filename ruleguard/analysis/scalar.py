"""Scalar root finding and minimisation on a bracket (no scipy import).

The analysis refines every crossing and every peak on the exact response.
These two classic routines do it without importing ``scipy.optimize``, whose
import alone costs 0.3-0.6 s of a pre-commit hook's start-up (measured here,
benchmarks/bench_startup.py).

References
----------
R. P. Brent, *Algorithms for Minimization without Derivatives*,
Prentice-Hall, 1973, chapters 4 (zero) and 5 (localmin).
G. E. Forsythe, M. A. Malcolm and C. B. Moler, *Computer Methods for
Mathematical Computations*, Prentice-Hall, 1977, routines ZEROIN and FMIN.
"""

from __future__ import annotations

import math
from collections.abc import Callable

_EPS = 2.220446049250313e-16


def brent_root(
    fun: Callable[[float], float],
    a: float,
    b: float,
    *,
    xtol: float = 2e-12,
    rtol: float = 4 * _EPS,
    maxiter: int = 200,
) -> float:
    """A root of ``fun`` in ``[a, b]``, where ``fun(a)`` and ``fun(b)`` differ in sign.

    Brent's method: inverse quadratic interpolation or secant steps, falling
    back to bisection whenever they would not shrink the bracket fast enough,
    so convergence is never slower than bisection. Stops when the bracket is
    narrower than ``2 * (2 * rtol * |x| + xtol / 2)``.

    Raises
    ------
    ValueError
        When the end values do not bracket a root.
    """
    fa, fb = float(fun(a)), float(fun(b))
    if fa == 0.0:
        return float(a)
    if fb == 0.0:
        return float(b)
    if (fa > 0) == (fb > 0):
        raise ValueError("brent_root: f(a) and f(b) must have opposite signs")
    c, fc = a, fa
    d = e = b - a
    # the products below are evaluated left to right, so ``2.0 * rtol * |b|``
    # is ``(2.0 * rtol) * |b|``: the constants are formed once
    two_rtol = 2.0 * rtol
    half_xtol = 0.5 * xtol
    for _ in range(maxiter):
        if (fb > 0) == (fc > 0):
            c, fc = a, fa
            d = e = b - a
        if abs(fc) < abs(fb):
            a, b, c = b, c, b
            fa, fb, fc = fb, fc, fb
        tol = two_rtol * abs(b) + half_xtol
        m = 0.5 * (c - b)
        if abs(m) <= tol or fb == 0.0:
            return float(b)
        if abs(e) < tol or abs(fa) <= abs(fb):
            d = e = m
        else:
            s = fb / fa
            if a == c:
                p = 2.0 * m * s
                q = 1.0 - s
            else:
                q = fa / fc
                r = fb / fc
                p = s * (2.0 * m * q * (q - r) - (b - a) * (r - 1.0))
                q = (q - 1.0) * (r - 1.0) * (s - 1.0)
            if p > 0:
                q = -q
            else:
                p = -p
            bound = 3.0 * m * q - abs(tol * q)
            eq = abs(e * q)
            if 2.0 * p < (eq if eq < bound else bound):  # min(bound, eq), exactly
                e = d
                d = p / q
            else:
                d = e = m
        a, fa = b, fb
        b = b + d if abs(d) > tol else b + (tol if m > 0 else -tol)
        fb = float(fun(b))
    return float(b)


def brent_minimize(
    fun: Callable[[float], float],
    lo: float,
    hi: float,
    *,
    xatol: float = 1e-10,
    maxiter: int = 500,
) -> tuple[float, float]:
    """The minimiser of ``fun`` on ``[lo, hi]`` and its value: ``(x, fun(x))``.

    Brent's localmin: golden-section search accelerated by parabolic
    interpolation through the three best points. Tolerance at ``x`` is
    ``sqrt(eps) * |x| + xatol / 3``; the end points themselves are not
    evaluated (as in the reference routine).
    """
    golden = 0.5 * (3.0 - math.sqrt(5.0))
    sqrt_eps = math.sqrt(_EPS)
    a, b = float(min(lo, hi)), float(max(lo, hi))
    x = w = v = a + golden * (b - a)
    fx = fw = fv = float(fun(x))
    d = e = 0.0
    third_xatol = xatol / 3.0
    for _ in range(maxiter):
        xm = 0.5 * (a + b)
        tol1 = sqrt_eps * abs(x) + third_xatol
        tol2 = 2.0 * tol1
        if abs(x - xm) <= tol2 - 0.5 * (b - a):
            break
        parabolic = False
        if abs(e) > tol1:
            r = (x - w) * (fx - fv)
            q = (x - v) * (fx - fw)
            p = (x - v) * q - (x - w) * r
            q = 2.0 * (q - r)
            if q > 0:
                p = -p
            q = abs(q)
            r, e = e, d
            if abs(p) < abs(0.5 * q * r) and q * (a - x) < p < q * (b - x):
                d = p / q
                u = x + d
                if (u - a) < tol2 or (b - u) < tol2:
                    d = tol1 if xm >= x else -tol1
                parabolic = True
        if not parabolic:
            e = (a - x) if x >= xm else (b - x)
            d = golden * e
        u = x + d if abs(d) >= tol1 else x + (tol1 if d > 0 else -tol1)
        fu = float(fun(u))
        if fu <= fx:
            if u >= x:
                a = x
            else:
                b = x
            v, fv, w, fw, x, fx = w, fw, x, fx, u, fu
        else:
            if u < x:
                a = u
            else:
                b = u
            if fu <= fw or w == x:
                v, fv, w, fw = w, fw, u, fu
            elif fu <= fv or v == x or v == w:
                v, fv = u, fu
    return x, fx
