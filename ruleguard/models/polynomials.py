"""Roots of the short polynomials users write, and factored blocks built from them.

Coefficient lists arrive in descending powers (of s or of z). Every block of
ruleguard is kept in factored form (METHODS.md "Representation"), so a
polynomial is turned into its roots once, here:

* degree <= 2 by closed form (the quadratic formula in the cancellation-free
  arrangement ``q = -(b + sign(b) sqrt(b^2 - 4ac)) / 2``, roots ``q/a`` and
  ``c/q``; Press, Teukolsky, Vetterling & Flannery, "Numerical Recipes",
  3rd ed., 2007, section 5.6), so conjugate pairs come out exactly conjugate;
* degree > 2 by :func:`numpy.roots` (eigenvalues of the companion matrix) on
  the user's own coefficients. Those are the numbers the user wrote, so no
  accuracy is lost by multiplying factors out; a user who knows the roots
  should write a ``zero_pole_gain`` entry instead.

Physical second-order factors ``s^2 + 2 zeta w s + w^2`` are solved from
``(w, zeta)`` directly (:func:`second_order_roots`).
"""

from __future__ import annotations

import math
from collections.abc import Sequence

import numpy as np

from ruleguard.models.lti import Factored


def strip_leading_zeros(coefficients: Sequence[float]) -> np.ndarray:
    """Drop exactly-zero leading coefficients (descending powers)."""
    if type(coefficients) is list and all(type(v) is float for v in coefficients):
        for i, v in enumerate(coefficients):  # a short list of floats: no numpy calls
            if v != 0.0:
                return np.array(coefficients[i:], dtype=float)
        return np.zeros(0)
    c = np.asarray(coefficients, dtype=float).reshape(-1)
    nonzero = np.flatnonzero(c != 0.0)
    if nonzero.size == 0:
        return np.zeros(0)
    return c[nonzero[0] :]


def polynomial_roots(coefficients: Sequence[float]) -> np.ndarray:
    """Roots of a polynomial given in descending powers.

    Parameters
    ----------
    coefficients:
        Real coefficients, highest power first; leading zeros are ignored.

    Returns
    -------
    numpy.ndarray
        Complex roots (empty for a constant). Conjugate pairs of a quadratic
        are exact conjugates.

    Raises
    ------
    ValueError
        When every coefficient is zero.

    References
    ----------
    Press, Teukolsky, Vetterling & Flannery, "Numerical Recipes", 3rd ed.,
    2007, section 5.6 (quadratic without cancellation); for degree > 2,
    eigenvalues of the companion matrix (:func:`numpy.roots`).
    """
    c = strip_leading_zeros(coefficients)
    if c.size == 0:
        raise ValueError("every coefficient is zero")
    degree = c.size - 1
    if degree == 0:
        return np.zeros(0, dtype=complex)
    if degree == 1:
        return np.array([-c[1] / c[0]], dtype=complex)
    if degree == 2:
        return _quadratic_roots(c[0], c[1], c[2])
    return np.asarray(np.roots(c), dtype=complex)


def _quadratic_roots(a: float, b: float, c: float) -> np.ndarray:
    disc = b * b - 4.0 * a * c
    if disc >= 0.0:
        q = -0.5 * (b + math.copysign(math.sqrt(disc), b))
        if q == 0.0:  # b == 0 and c == 0: a double root at the origin
            return np.zeros(2, dtype=complex)
        return np.array([q / a, c / q], dtype=complex)
    re = -b / (2.0 * a)
    im = math.sqrt(-disc) / (2.0 * abs(a))
    return np.array([complex(re, im), complex(re, -im)])


def second_order_roots(w: float, zeta: float) -> np.ndarray:
    """Roots of ``s^2 + 2 zeta w s + w^2`` from the natural frequency and damping.

    ``|zeta| < 1`` gives the pair ``-zeta w +- j w sqrt(1 - zeta^2)``;
    ``|zeta| >= 1`` two real roots ``-w (zeta + sign(zeta) sqrt(zeta^2 - 1))``
    and ``w^2`` divided by it (no cancellation). Negative damping gives
    right-half-plane roots, as the formula says.
    """
    return np.array(second_order_pair(w, zeta), dtype=complex)


def second_order_pair(w: float, zeta: float) -> tuple[complex, complex]:
    """:func:`second_order_roots` as two Python complex numbers (the same values)."""
    w = float(w)
    zeta = float(zeta)
    if w == 0.0:
        return 0j, 0j
    if abs(zeta) < 1.0:
        im = abs(w) * math.sqrt(1.0 - zeta * zeta)
        re = -zeta * abs(w)
        return complex(re, im), complex(re, -im)
    r1 = -abs(w) * (zeta + math.copysign(math.sqrt(zeta * zeta - 1.0), zeta))
    return complex(r1), complex(w * w / r1)


def trim_common_trailing_zeros(
    numerator: Sequence[float], denominator: Sequence[float]
) -> tuple[np.ndarray, np.ndarray]:
    """Remove trailing zero coefficients present in both (an exact ``x^k / x^k``)."""
    num = np.asarray(numerator, dtype=float).reshape(-1)
    den = np.asarray(denominator, dtype=float).reshape(-1)
    while num.size > 1 and den.size > 1 and num[-1] == 0.0 and den[-1] == 0.0:
        num = num[:-1]
        den = den[:-1]
    return num, den


def factored_from_coefficients(
    numerator: Sequence[float],
    denominator: Sequence[float],
    *,
    sample_time_s: float | None = None,
    delay_s: float = 0.0,
) -> Factored:
    """A factored block from numerator and denominator in descending powers.

    The gain is the leading-coefficient ratio (Factored convention). A numerator
    that is all zero gives the zero block (gain 0, no zeros).

    Raises
    ------
    ValueError
        When the denominator is all zero.
    """
    den = strip_leading_zeros(denominator)
    if den.size == 0:
        raise ValueError("the denominator is zero")
    num = strip_leading_zeros(numerator)
    poles = polynomial_roots(den)
    if num.size == 0:
        return Factored([], poles, 0.0, delay_s, sample_time_s)
    zeros = polynomial_roots(num)
    return Factored(zeros, poles, num[0] / den[0], delay_s, sample_time_s)
