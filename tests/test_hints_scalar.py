"""The scalar twins of the hint expressions give the very floats of the array ones.

The root finders and minimisers of ruleguard.rules.hints evaluate one
frequency at a time through plain-float twins of the array expressions; the
hints (and so the reports) stay the same only if the twins agree with the
array expressions on a one-element array bit for bit. Checked on random
complex values over many decades and on the special values (zero, inf, nan),
for the shifts and radii of the disk and sensitivity rules.
"""

import math

import numpy as np

from ruleguard.rules.hints import (
    _db_of_inverse,
    _db_of_inverse_scalar,
    _quadratic_roots,
    _quadratic_roots_scalar,
    _to_db,
    _to_db_scalar,
)


def _same(a: float, b: float) -> bool:
    if math.isnan(a) or math.isnan(b):
        return math.isnan(a) and math.isnan(b)
    return a == b and math.copysign(1, a) == math.copysign(1, b)


def _values(rng, n=20000):
    mag = 10 ** rng.uniform(-8, 8, n)
    phase = rng.uniform(-math.pi, math.pi, n)
    L = mag * np.exp(1j * phase)
    special = [0j, complex(math.inf, 0), complex(math.nan, 0), complex(-1, 0), complex(-1, 1e-17),
               complex(0, 1), complex(1e-300, 0), complex(1e300, 1e300)]
    return [complex(v) for v in L] + special


def test_quadratic_roots_twin_is_bitwise_equal():
    rng = np.random.default_rng(11)
    values = _values(rng)
    # disk (sigma 0, alpha 0.75 / sigma 0.5 skew), sensitivity peak, complementary peak, R < |c|
    for shift, radius in ((-0.5, 1 / 0.75), (-0.25, 1.5), (0.0, 10 ** 0.3), (-1.0, 10 ** 0.1),
                          (-1.0, 0.5)):
        for L in values:
            with np.errstate(over="ignore"):  # the array expression on the special values
                r1, r2, d = _quadratic_roots(np.array([L]), shift, radius)
                s1, s2, sd = _quadratic_roots_scalar(L, shift, radius)
            assert _same(float(r1[0]), s1) and _same(float(r2[0]), s2) and _same(float(d[0]), sd), (
                L, shift, radius)


def test_db_twins_are_bitwise_equal():
    rng = np.random.default_rng(12)
    for L in _values(rng):
        assert _same(float(_db_of_inverse(np.array([L]))[0]), _db_of_inverse_scalar(L)), L
    ks = list(10 ** rng.uniform(-12, 12, 20000)) + [0.0, -0.0, -1.0, math.inf, math.nan]
    with np.errstate(invalid="ignore"):
        for k in ks:
            assert _same(float(_to_db(np.array([k]))[0]), _to_db_scalar(float(k))), k


def test_phase_and_delay_test_twins_are_bitwise_equal():
    from ruleguard.rules.hints import delay_test, phase_test

    rng = np.random.default_rng(13)
    values = _values(rng)
    ws = [float(w) for w in 10 ** rng.uniform(-3, 6, len(values))]
    for test in (phase_test(30.0), phase_test(45.0), delay_test(1e-4), delay_test(2.5e-3)):
        for w, L in zip(ws + [0.0, -1.0, math.inf], values + [1j, 1j, 1j], strict=True):
            with np.errstate(invalid="ignore"):
                want = float(test(np.array([w]), np.array([L]))[0])
                got = test.scalar(w, L)
            assert _same(want, got), (w, L)


def test_quadratic_roots_function_is_the_scalar_twin_bit_for_bit():
    # the closure with its constants formed once against the scalar twin above
    from ruleguard.rules.hints import _quadratic_roots_function

    rng = np.random.default_rng(11)
    values = _values(rng)
    for shift, radius in ((0.0, 2.0), (-1.0, 1.5), (-0.25, 1.0 / 0.6), (0.0, 1.0), (0.3, 0.2)):
        roots = _quadratic_roots_function(shift, radius)
        for L in values:
            with np.errstate(all="ignore"):  # the special values overflow in both
                got = roots(L)
                want = _quadratic_roots_scalar(L, shift, radius)
            assert all(_same(g, w) for g, w in zip(got, want, strict=True)), (L, shift, radius)
