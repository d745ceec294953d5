"""Controller and filter blocks as designed: factored s-plane or z-plane blocks.

Each controller table and filter item (FORMATS.md section 3) becomes a
:class:`DesignedBlock`: a :class:`~ruleguard.models.lti.Factored` in the s-plane
(``pid``, ``lead_lag``, ``lowpass1``, ``lowpass2``, ``notch``,
``transfer_function`` with ``domain = "s"``) or in the z-plane as given
(``biquad``, ``transfer_function`` with ``domain = "z"``), with the
frequencies that characterise it and the frequency at which Tustin with
prewarping matches it. Discretization is not done here
(:mod:`ruleguard.models.assemble` calls :mod:`ruleguard.models.discretize`).

Formulas (omega_x = 2 pi x_hz):

* ``pid`` parallel: ``kp + ki/s + kd s/(s/omega_d + 1)``; without
  ``derivative_filter_hz`` (or with 0) the derivative ``kd s`` is unfiltered.
* ``pid`` standard: ``gain (1 + 1/(ti_s s) + td_s s/(td_s s/n + 1))``, ``n``
  default 10; no ``ti_s`` (or 0) means no integral action, no ``td_s`` (or 0)
  no derivative.
* ``pid`` series: ``gain (1 + 1/(ti_s s)) (1 + td_s s)/(1 + td_s s/n)``.
* ``lead_lag``: ``gain (s/omega_z + 1)/(s/omega_p + 1)``.
* ``lowpass1``: ``1/(s/omega_c + 1)``; ``lowpass2``:
  ``omega^2/(s^2 + 2 zeta omega s + omega^2)``, omega the natural frequency.
* ``notch``: ``(s^2 + 2 zeta_z omega s + omega^2)/(s^2 + 2 zeta_p omega s +
  omega^2)``, ``zeta_p = width_hz/(2 center_hz)``, ``zeta_z = zeta_p
  10^(-depth_db/20)``.
* ``biquad``: ``(b0 + b1 z^-1 + b2 z^-2)/(1 + a1 z^-1 + a2 z^-2)``, ``a[0]``
  normalised to 1 (the leading-coefficient gain absorbs it).
* ``transfer_function``: descending powers of s or z; ``[0.5]/[1, -0.5]``
  in z is ``0.5/(z - 0.5)``.

Roots of polynomials of degree <= 2 are taken in closed form, higher degrees
by :func:`numpy.roots` on the user's own coefficients
(:mod:`ruleguard.models.polynomials`).
"""

from __future__ import annotations

import math
from collections.abc import Mapping
from dataclasses import field
from typing import Any

import numpy as np

from ruleguard.errors import InputError
from ruleguard.frozen import record
from ruleguard.load.spec import ControllerEntry, FilterEntry
from ruleguard.location import Location
from ruleguard.models.fieldvalues import FieldReader
from ruleguard.models.lti import Factored
from ruleguard.models.polynomials import (
    factored_from_coefficients,
    second_order_roots,
    trim_common_trailing_zeros,
)

TWO_PI = 2.0 * math.pi

#: Default ratio ``n`` of the derivative filter of the standard and series PID forms.
DEFAULT_DERIVATIVE_RATIO = 10.0


@record(eq=False)
class DesignedBlock:
    """A controller or filter block as the user designed it.

    Attributes
    ----------
    kind:
        Input kind (``"pid"``, ``"notch"``, ...).
    model:
        The block: s-plane (``sample_time_s is None``) or z-plane as given.
    given_in_z:
        True for ``biquad`` and ``transfer_function`` with ``domain = "z"``.
    characteristic_hz:
        The frequencies that define the block, by name (``center_hz``,
        ``cutoff_hz``, ``zero_hz``, ``pole_hz``, ``geometric_mean_hz``,
        ``derivative_filter_hz``, ``integral_corner_hz``, ...).
    prewarp_hz:
        Where ``tustin_prewarp`` matches the block: ``prewarp_hz`` when given,
        else the notch centre, the low-pass cutoff, or sqrt(zero_hz pole_hz)
        of a lead-lag; ``None`` (plain Tustin) for a PID or transfer function
        without ``prewarp_hz``.
    unfiltered_derivative:
        A PID derivative term without a filter (an improper block).
    location:
        The table the block comes from.
    """

    kind: str
    model: Factored
    given_in_z: bool
    characteristic_hz: Mapping[str, float] = field(default_factory=dict)
    prewarp_hz: float | None = None
    unfiltered_derivative: bool = False
    location: Location = Location("")

    @property
    def is_proper(self) -> bool:
        return self.model.is_proper


# --------------------------------------------------------------- rationals
# Tiny exact arithmetic on (numerator, denominator) coefficient pairs for the
# PID forms (degree <= 2 in the end), in descending powers of s, on Python
# floats: the same operations as numpy's polyadd and polymul (leading zeros
# trimmed, an all-zero polynomial kept as [0.0]) without their per-call cost.

_Rational = tuple[list[float], list[float]]


def _rat(num, den) -> _Rational:
    return [float(v) for v in num], [float(v) for v in den]


def _trimmed(p: list[float]) -> list[float]:
    """``p`` without leading zeros; ``[0.0]`` when nothing is left (as numpy's poly1d)."""
    for i, v in enumerate(p):
        if v != 0.0:
            return p[i:]
    return [0.0]


def _polyadd(a: list[float], b: list[float]) -> list[float]:
    """Sum of two polynomials, the shorter padded with leading zeros (no trimming)."""
    if len(a) < len(b):
        a = [0.0] * (len(b) - len(a)) + a
    elif len(b) < len(a):
        b = [0.0] * (len(a) - len(b)) + b
    return [x + y for x, y in zip(a, b, strict=True)]


def _polymul(a: list[float], b: list[float]) -> list[float]:
    """Product of two polynomials (the full convolution of the trimmed coefficients).

    Each coefficient of a product of factors of degree <= 1 is a sum of at
    most two products, whose floating-point value does not depend on the
    order of summation (tests/test_blocks.py compares with :func:`numpy.polymul`
    bit for bit); longer factors go to :func:`numpy.polymul`.
    """
    a, b = _trimmed(a), _trimmed(b)
    if min(len(a), len(b)) > 2:
        return [float(v) for v in np.polymul(a, b)]
    out = [0.0] * (len(a) + len(b) - 1)  # sums start at +0.0, as numpy's dot does
    for i, x in enumerate(a):
        for j, y in enumerate(b):
            out[i + j] += x * y
    return out


def _same(a: list[float], b: list[float]) -> bool:
    return len(a) == len(b) and all(x == y for x, y in zip(a, b, strict=True))


def _add(x: _Rational, y: _Rational) -> _Rational:
    if _same(x[1], y[1]):
        return _polyadd(x[0], y[0]), x[1]
    return (_polyadd(_polymul(x[0], y[1]), _polymul(y[0], x[1])),
            _polymul(x[1], y[1]))


def _mul(x: _Rational, y: _Rational) -> _Rational:
    return _polymul(x[0], y[0]), _polymul(x[1], y[1])


def _scale(x: _Rational, k: float) -> _Rational:
    return [v * k for v in x[0]], x[1]


# ---------------------------------------------------------------- builders
def controller_block(entry: ControllerEntry, sample_time_s: float | None) -> DesignedBlock:
    """The controller of a loop as a :class:`DesignedBlock`.

    Parameters
    ----------
    entry:
        The controller table (canonical field names).
    sample_time_s:
        The loop's sample period, ``None`` for a continuous loop (needed by
        blocks given in z).
    """
    reader = FieldReader(entry.fields, entry.field_locations, entry.location)
    return _build(entry.kind, reader, entry.location, sample_time_s, allow_pid=True)


def filter_block(entry: FilterEntry, sample_time_s: float | None) -> DesignedBlock:
    """One filter item of a controller as a :class:`DesignedBlock`."""
    reader = FieldReader(entry.fields, entry.field_locations, entry.location)
    return _build(entry.kind, reader, entry.location, sample_time_s, allow_pid=False)


def _build(
    kind: str,
    reader: FieldReader,
    location: Location,
    sample_time_s: float | None,
    *,
    allow_pid: bool,
) -> DesignedBlock:
    builder = _BUILDERS.get(kind)
    if builder is None or (kind == "pid" and not allow_pid):
        known = sorted(k for k in _BUILDERS if allow_pid or k != "pid")
        raise InputError.at(location, f"unknown block kind {kind!r}; expected one of {known}")
    block = builder(reader, sample_time_s)
    explicit = reader.optional("prewarp_hz")
    if explicit is not None:
        if not explicit > 0:
            raise InputError.at(reader.where("prewarp_hz"), "prewarp_hz must be positive")
        block = DesignedBlock(block.kind, block.model, block.given_in_z,
                              block.characteristic_hz, explicit,
                              block.unfiltered_derivative, block.location)
    return DesignedBlock(block.kind, block.model, block.given_in_z, block.characteristic_hz,
                         block.prewarp_hz, block.unfiltered_derivative, location)


def _positive(reader: FieldReader, key: str, default: Any = None) -> float:
    value = reader.number(key) if default is None else reader.number(key, default)
    if not (value > 0 and math.isfinite(value)):
        raise InputError.at(reader.where(key), f"{key} must be positive, got {value}")
    return value


def _pid(reader: FieldReader, sample_time_s: float | None) -> DesignedBlock:
    form = reader.text("form", "parallel")
    chars: dict[str, float] = {}
    unfiltered = False
    if form == "parallel":
        kp = reader.number("kp", 0.0)
        ki = reader.number("ki", 0.0)
        kd = reader.number("kd", 0.0)
        fd = reader.number("derivative_filter_hz", 0.0)
        if fd < 0:
            raise InputError.at(reader.where("derivative_filter_hz"),
                                "derivative_filter_hz must not be negative")
        total = _rat([kp], [1.0])
        if ki != 0.0:
            total = _add(total, _rat([ki], [1.0, 0.0]))
        if kd != 0.0:
            if fd > 0:
                wd = TWO_PI * fd
                total = _add(total, _rat([kd, 0.0], [1.0 / wd, 1.0]))
                chars["derivative_filter_hz"] = fd
            else:
                total = _add(total, _rat([kd, 0.0], [1.0]))
                unfiltered = True
        if ki != 0.0 and kp != 0.0:
            chars["integral_corner_hz"] = abs(ki / kp) / TWO_PI
    elif form in ("standard", "series"):
        gain = reader.number("gain")
        ti = reader.number("ti_s", 0.0)
        td = reader.number("td_s", 0.0)
        n = _positive(reader, "n", DEFAULT_DERIVATIVE_RATIO)
        if ti < 0 or td < 0:
            key = "ti_s" if ti < 0 else "td_s"
            raise InputError.at(reader.where(key), f"{key} must not be negative")
        if form == "standard":
            total = _rat([1.0], [1.0])
            if ti > 0:
                total = _add(total, _rat([1.0], [ti, 0.0]))
            if td > 0:
                total = _add(total, _rat([td, 0.0], [td / n, 1.0]))
        else:
            total = _rat([1.0], [1.0])
            if ti > 0:
                total = _mul(total, _rat([ti, 1.0], [ti, 0.0]))
            if td > 0:
                total = _mul(total, _rat([td, 1.0], [td / n, 1.0]))
        total = _scale(total, gain)
        if ti > 0:
            chars["integral_corner_hz"] = 1.0 / (TWO_PI * ti)
        if td > 0:
            chars["derivative_filter_hz"] = n / (TWO_PI * td)
            if form == "series":
                chars["derivative_corner_hz"] = 1.0 / (TWO_PI * td)
    else:
        raise InputError.at(reader.where("form"),
                            f"unknown pid form {form!r}; expected parallel, standard or series")
    model = factored_from_coefficients(total[0], total[1])
    return DesignedBlock("pid", model, False, chars, None, unfiltered)


def _lead_lag(reader: FieldReader, sample_time_s: float | None) -> DesignedBlock:
    gain = reader.number("gain", 1.0)
    fz = _positive(reader, "zero_hz")
    fp = _positive(reader, "pole_hz")
    wz, wp = TWO_PI * fz, TWO_PI * fp
    model = Factored([-wz], [-wp], gain * wp / wz)
    mean = math.sqrt(fz * fp)
    chars = {"zero_hz": fz, "pole_hz": fp, "geometric_mean_hz": mean}
    return DesignedBlock("lead_lag", model, False, chars, mean)


def _lowpass1(reader: FieldReader, sample_time_s: float | None) -> DesignedBlock:
    fc = _positive(reader, "cutoff_hz")
    wc = TWO_PI * fc
    return DesignedBlock("lowpass1", Factored([], [-wc], wc), False, {"cutoff_hz": fc}, fc)


def _lowpass2(reader: FieldReader, sample_time_s: float | None) -> DesignedBlock:
    fc = _positive(reader, "cutoff_hz")
    zeta = _positive(reader, "damping")
    w = TWO_PI * fc
    model = Factored([], second_order_roots(w, zeta), w * w)
    return DesignedBlock("lowpass2", model, False, {"cutoff_hz": fc}, fc)


def _notch(reader: FieldReader, sample_time_s: float | None) -> DesignedBlock:
    fc = _positive(reader, "center_hz")
    width = _positive(reader, "width_hz")
    depth = reader.number("depth_db")
    if depth < 0:
        raise InputError.at(reader.where("depth_db"), "depth_db must not be negative")
    w = TWO_PI * fc
    zeta_p = width / (2.0 * fc)
    zeta_z = zeta_p * 10.0 ** (-depth / 20.0)
    model = Factored(second_order_roots(w, zeta_z), second_order_roots(w, zeta_p), 1.0)
    return DesignedBlock("notch", model, False, {"center_hz": fc, "width_hz": width}, fc)


def _coefficients(reader: FieldReader, key: str) -> list[float]:
    raw = reader.raw(key)
    if not isinstance(raw, (list, tuple)) or not raw:
        raise InputError.at(reader.where(key) if key in reader.fields else reader.location,
                            f"{key}: expected a non-empty list of coefficients")
    return [reader.item(v, f"{key}") for v in raw]


def _needs_rate(reader: FieldReader, sample_time_s: float | None, kind: str) -> float:
    if sample_time_s is None:
        raise InputError.at(reader.location,
                            f"a {kind} block is given in z and needs the loop's sample_rate_hz")
    return sample_time_s


def _biquad(reader: FieldReader, sample_time_s: float | None) -> DesignedBlock:
    h = _needs_rate(reader, sample_time_s, "biquad")
    b = _coefficients(reader, "b")
    a = _coefficients(reader, "a")
    if len(b) > 3 or len(a) > 3:
        raise InputError.at(reader.where("b" if len(b) > 3 else "a"),
                            "a biquad has at most three coefficients in b and in a")
    if a[0] == 0.0:
        raise InputError.at(reader.where("a"), "a[0] must not be zero (it is normalised to 1)")
    # Powers of z^-1: pad at the end, then read as descending powers of z
    # (multiply through by z^2), dropping a common z^k / z^k exactly.
    b = b + [0.0] * (3 - len(b))
    a = a + [0.0] * (3 - len(a))
    num, den = trim_common_trailing_zeros(b, a)
    model = factored_from_coefficients(num, den, sample_time_s=h)
    return DesignedBlock("biquad", model, True, {}, None)


def _transfer_function(reader: FieldReader, sample_time_s: float | None) -> DesignedBlock:
    domain = reader.text("domain", "s")
    num = _coefficients(reader, "numerator")
    den = _coefficients(reader, "denominator")
    if all(c == 0.0 for c in den):
        raise InputError.at(reader.where("denominator"), "the denominator is zero")
    if domain == "s":
        model = factored_from_coefficients(num, den)
        return DesignedBlock("transfer_function", model, False, {}, None)
    if domain == "z":
        h = _needs_rate(reader, sample_time_s, "transfer_function (domain z)")
        model = factored_from_coefficients(num, den, sample_time_s=h)
        return DesignedBlock("transfer_function", model, True, {}, None)
    raise InputError.at(reader.where("domain"), f"domain must be 's' or 'z', got {domain!r}")


_BUILDERS = {
    "pid": _pid,
    "lead_lag": _lead_lag,
    "lowpass1": _lowpass1,
    "lowpass2": _lowpass2,
    "notch": _notch,
    "biquad": _biquad,
    "transfer_function": _transfer_function,
}

#: Block kinds a controller table or filter item may have.
BLOCK_KINDS = tuple(sorted(_BUILDERS))
