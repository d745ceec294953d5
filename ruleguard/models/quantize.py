"""Coefficient quantization: the controller and filters as the firmware stores them.

Each discretized controller or filter block of a sampled loop is realised as
a cascade of second-order sections

``H(z) = g * z^k * prod_i (b0 + b1 z^-1 + b2 z^-2) / (1 + a1 z^-1 + a2 z^-2)``

(first-order sections have ``b2 = a2 = 0``), the coefficients are rounded to
the loop's ``numeric_format`` (FORMATS.md section 3), and the blocks and the
open loop are rebuilt from the rounded coefficients so that every margin can
be computed again (rule ``quantization.robust``).

Realization conventions
-----------------------
* **Pairing**: :func:`ruleguard.models.discretize.section_groups` (poles
  nearest the unit circle first, each with its nearest zeros; real poles on
  the unit circle, such as the integrator at ``z = 1``, in first-order
  sections of their own). Section 1 holds the poles nearest the unit circle.
* **Numerators**: each section's numerator is the monic polynomial of its
  zeros. For a ``q<m>.<n>`` format it is scaled by a power of two,
  ``2^-e`` with the smallest ``e >= 0`` that brings every ``|b|`` inside the
  format's range (a shift in fixed point, exact); the ``2^e`` goes into the
  block's scale ``g``. The scale ``g`` is stored as a float32 number for
  float32, and as an ``n``-bit mantissa with a power-of-two exponent for
  ``q<m>.<n>`` (the usual "gain and shift" pair of fixed-point firmware).
* **Denominators** are never scaled (``a0 = 1``): a section whose ``a1``
  lies outside the range saturates. A low-frequency biquad has
  ``a1 = -2 r cos(theta)`` close to -2, which q1.15 (range
  ``[-1, 1 - 2^-15]``) cannot hold: the realistic fixed-point hazard the
  rule must catch (q2.14 holds it).
* **Improper blocks** (forward Euler of an unfiltered derivative) are
  realised as ``z^k`` times a proper block; ``z^k`` is exact.
* ``float64`` leaves every coefficient as it is (the analysis format).

Rounding: float32 rounds to nearest (IEEE 754); ``q<m>.<n>`` is two's
complement with ``m`` integer bits including the sign and ``n`` fraction
bits, range ``[-2^(m-1), 2^(m-1) - 2^-n]``, rounded to nearest with ties to
even, then saturated to the range.

References
----------
L. B. Jackson, Digital Filters and Signal Processing, 3rd ed., Kluwer, 1996,
chapter 11 (quantization effects, pairing and ordering of sections).
A. V. Oppenheim, R. W. Schafer, Discrete-Time Signal Processing, 3rd ed.,
Pearson, 2010, sections 6.7-6.9 (coefficient quantization, pole sensitivity
of cascade forms).
IEEE Std 754-2019, IEEE Standard for Floating-Point Arithmetic.
"""

from __future__ import annotations

import math
import re
from dataclasses import replace

import numpy as np

from ruleguard.analysis.loop import BlockModel, LoopModel
from ruleguard.analysis.openloop import OpenLoop
from ruleguard.frozen import record
from ruleguard.models.discretize import section_groups
from ruleguard.models.lti import Factored

_Q_FORMAT = re.compile(r"^q(\d+)\.(\d+)$")


# --------------------------------------------------------------------------
# Number formats
# --------------------------------------------------------------------------
@record
class NumericFormat:
    """A coefficient format: ``float64``, ``float32`` or ``q<m>.<n>``.

    Attributes
    ----------
    name:
        The format as written (``"q1.15"``).
    integer_bits, fraction_bits:
        ``m`` (including the sign) and ``n`` of a fixed-point format,
        ``None`` for the floating-point ones.
    """

    name: str
    integer_bits: int | None = None
    fraction_bits: int | None = None

    @property
    def is_fixed_point(self) -> bool:
        return self.integer_bits is not None

    @property
    def is_exact(self) -> bool:
        """float64: the analysis format, nothing is rounded."""
        return self.name == "float64"

    @property
    def step(self) -> float:
        """Grid spacing ``2^-n`` of a fixed-point format (0 for floats)."""
        return 0.0 if self.fraction_bits is None else 2.0 ** (-self.fraction_bits)

    @property
    def max_value(self) -> float:
        if self.integer_bits is None:
            return float(np.finfo(np.float32 if self.name == "float32" else np.float64).max)
        return 2.0 ** (self.integer_bits - 1) - self.step

    @property
    def min_value(self) -> float:
        if self.integer_bits is None:
            return -self.max_value
        return -(2.0 ** (self.integer_bits - 1))

    def round(self, values) -> tuple[np.ndarray, np.ndarray]:
        """Round values to the format.

        Returns
        -------
        (rounded, saturated)
            The representable values and a boolean mask of the values that
            lay outside the range (and were saturated to its ends).
        """
        x = np.asarray(values, dtype=float)
        if self.is_exact:
            return x.copy(), np.zeros(x.shape, dtype=bool)
        if not self.is_fixed_point:
            with np.errstate(over="ignore"):
                r = x.astype(np.float32)
            saturated = ~np.isfinite(r) & np.isfinite(x)
            top = np.float32(np.finfo(np.float32).max)
            r = np.where(saturated, np.sign(x) * top, r).astype(np.float32)
            return r.astype(float), saturated
        n = self.fraction_bits
        m = self.integer_bits
        scaled = np.ldexp(x, n)
        ticks = np.rint(scaled)  # round half to even (IEEE 754 default)
        lo = -(2.0 ** (m + n - 1))
        hi = 2.0 ** (m + n - 1) - 1.0
        saturated = (ticks < lo) | (ticks > hi)
        ticks = np.clip(ticks, lo, hi)
        return np.ldexp(ticks, -n), saturated

    def round_scale(self, value: float) -> float:
        """Store a block's output scale: float32, or an n-bit mantissa and a shift."""
        v = float(value)
        if self.is_exact or v == 0.0 or not math.isfinite(v):
            return v
        if not self.is_fixed_point:
            return float(np.float32(v))
        mant, expo = math.frexp(v)  # v = mant 2^expo, 0.5 <= |mant| < 1
        ticks = round(math.ldexp(mant, self.fraction_bits))  # Python round: ties to even
        return math.ldexp(ticks, expo - self.fraction_bits)


def parse_numeric_format(text: str) -> NumericFormat:
    """The :class:`NumericFormat` named by ``text`` (``float64``, ``float32``, ``q<m>.<n>``).

    Raises
    ------
    ValueError
        For any other text, or a ``q`` format with ``m < 1`` or ``m + n > 64``.
    """
    name = str(text).strip()
    if name in ("float64", "float32"):
        return NumericFormat(name)
    match = _Q_FORMAT.match(name)
    if not match:
        raise ValueError(
            f"numeric_format must be float64, float32 or q<m>.<n> (e.g. q1.15); got {text!r}"
        )
    m, n = int(match.group(1)), int(match.group(2))
    if m < 1 or m + n > 64:
        raise ValueError(
            f"numeric_format {name!r}: need at least 1 integer bit (the sign) and at most "
            "64 bits in all"
        )
    return NumericFormat(name, m, n)


# --------------------------------------------------------------------------
# Second-order sections
# --------------------------------------------------------------------------
@record
class Section:
    """One section ``(b0 + b1 z^-1 + b2 z^-2) / (1 + a1 z^-1 + a2 z^-2)``.

    ``order`` 1 sections have ``b2 = a2 = 0`` (not stored coefficients).
    """

    b0: float
    b1: float
    b2: float
    a1: float
    a2: float
    order: int = 2

    def coefficients(self) -> tuple[tuple[str, float], ...]:
        """The stored coefficients by name (``b0 b1 b2 a1 a2``; first order: ``b0 b1 a1``)."""
        if self.order == 1:
            return (("b0", self.b0), ("b1", self.b1), ("a1", self.a1))
        return (("b0", self.b0), ("b1", self.b1), ("b2", self.b2), ("a1", self.a1),
                ("a2", self.a2))

    def zeros_and_lead(self) -> tuple[np.ndarray, float]:
        """Roots of the numerator (as a polynomial in z) and its leading coefficient."""
        coeffs = [self.b0, self.b1] if self.order == 1 else [self.b0, self.b1, self.b2]
        return _poly_roots_and_lead(coeffs)

    def poles(self) -> np.ndarray:
        if self.order == 1:
            return np.array([-self.a1], dtype=complex)
        return _quadratic_roots(self.a1, self.a2)


@record
class SectionCascade:
    """A z-plane block as ``scale * z^advance * prod(sections)``."""

    sections: tuple[Section, ...]
    scale: float
    advance: int
    sample_time_s: float

    def to_factored(self) -> Factored:
        """The block in factored form, from the stored coefficients."""
        zeros: list[np.ndarray] = []
        poles: list[np.ndarray] = []
        gain = self.scale
        for sec in self.sections:
            z, lead = sec.zeros_and_lead()
            zeros.append(z)
            poles.append(sec.poles())
            gain *= lead
        zs = np.concatenate(zeros) if zeros else np.zeros(0, complex)
        ps = np.concatenate(poles) if poles else np.zeros(0, complex)
        if self.advance:
            # z^k cancels the k poles at z = 0 added to make the block proper
            ps = list(ps)
            for _ in range(self.advance):
                k = int(np.argmin(np.abs(ps)))
                ps.pop(k)
            ps = np.array(ps, dtype=complex)
        if gain == 0.0:
            zs = np.zeros(0, complex)
        return Factored(zs, ps, gain, 0.0, self.sample_time_s)


def second_order_sections(block: Factored, numeric_format: NumericFormat | str = "float64"
                          ) -> SectionCascade:
    """Realise a z-plane block as a cascade of second-order sections.

    Pairing and scaling follow the module's conventions: sections from
    :func:`~ruleguard.models.discretize.section_groups` (most sensitive
    first), monic numerators, for ``q<m>.<n>`` formats each numerator
    shifted by ``2^-e`` into the range with ``2^e`` moved into the scale.

    Parameters
    ----------
    block:
        A z-plane block.
    numeric_format:
        The format the numerators are scaled for (no rounding happens here).

    References
    ----------
    Jackson, Digital Filters and Signal Processing, 3rd ed., 1996, section
    11.5; Oppenheim & Schafer, Discrete-Time Signal Processing, 3rd ed.,
    2010, section 6.3.2 (cascade form).
    """
    fmt = _as_format(numeric_format)
    if not block.is_discrete:
        raise ValueError("second_order_sections needs a z-plane block")
    zeros = block.zeros
    poles = block.poles
    advance = max(zeros.size - poles.size, 0)
    if advance:
        poles = np.concatenate([poles, np.zeros(advance, complex)])
    sections: list[Section] = []
    scale = block.gain
    for zg, pg in section_groups(zeros, poles, discrete=True):
        order = len(pg)
        num = _real_poly(np.array(zg, dtype=complex))  # monic, degree len(zg)
        b = np.concatenate([np.zeros(order - (num.size - 1)), num])
        den = _real_poly(np.array(pg, dtype=complex))
        if fmt.is_fixed_point:
            top = float(np.max(np.abs(b)))
            e = 0
            while top * 2.0 ** (-e) > fmt.max_value:
                e += 1
            b = b * 2.0 ** (-e)
            scale *= 2.0**e
        if order == 1:
            sections.append(Section(b[0], b[1], 0.0, den[1], 0.0, order=1))
        else:
            sections.append(Section(b[0], b[1], b[2], den[1], den[2], order=2))
    return SectionCascade(tuple(sections), float(scale), advance, block.sample_time_s)


# --------------------------------------------------------------------------
# The report
# --------------------------------------------------------------------------
@record
class CoefficientChange:
    """One stored coefficient before and after rounding.

    Attributes
    ----------
    block:
        Label of the block (``BlockModel.label``).
    coefficient:
        ``"section 1 a1"``, ..., or ``"scale"`` (the block's output scale).
    original, quantized:
        The value as designed and as stored.
    relative_move:
        ``|quantized - original| / |original|`` (``original`` is never 0:
        coefficients that are exactly 0 stay 0 in every format).
    saturated:
        Whether the value lay outside the format's range.
    """

    block: str
    coefficient: str
    original: float
    quantized: float
    relative_move: float
    saturated: bool


@record
class BlockQuantization:
    """What rounding did to one block.

    Attributes
    ----------
    label, role, kind:
        As in :class:`~ruleguard.analysis.loop.BlockModel`.
    sections:
        Number of sections of the realization.
    coefficients:
        Every stored coefficient (nonzero), section by section, then the scale.
    unstable_poles_before, unstable_poles_after:
        Poles strictly outside the unit circle (beyond the boundary
        tolerance of :mod:`ruleguard.models.lti`) before and after rounding.
    boundary_poles_before, boundary_poles_after:
        Poles on the unit circle (within that tolerance): an integrator of
        the design, or a pole that rounding put on the circle (rounding to a
        grid that holds 1 can move a pole onto the circle but, for a single
        section, not beyond it: the stability triangle ``|a2| < 1``,
        ``|a1| < 1 + a2`` has its edges on the grid).
    max_pole_shift:
        Largest distance in the z-plane between a designed pole and its
        rounded counterpart (same section).
    """

    label: str
    role: str
    kind: str
    sections: int
    coefficients: tuple[CoefficientChange, ...]
    unstable_poles_before: int
    unstable_poles_after: int
    boundary_poles_before: int
    boundary_poles_after: int
    max_pole_shift: float

    @property
    def stable_before(self) -> bool:
        """No pole outside the unit circle as designed."""
        return self.unstable_poles_before == 0

    @property
    def stable_after(self) -> bool:
        """No pole outside the unit circle after rounding, and none newly on it."""
        return self.unstable_poles_after == 0 and (
            self.boundary_poles_after <= self.boundary_poles_before
        )

    @property
    def destabilised(self) -> bool:
        """Rounding moved poles onto or outside the unit circle."""
        before = self.unstable_poles_before + self.boundary_poles_before
        after = self.unstable_poles_after + self.boundary_poles_after
        return after > before or self.unstable_poles_after > self.unstable_poles_before

    @property
    def saturated(self) -> tuple[CoefficientChange, ...]:
        return tuple(c for c in self.coefficients if c.saturated)

    @property
    def largest_move(self) -> CoefficientChange | None:
        return _largest(self.coefficients)


@record
class QuantizationReport:
    """The coefficient rounding of one loop variant.

    Attributes
    ----------
    numeric_format:
        The format (``"q1.15"``).
    blocks:
        One entry per quantized block (controller first, then filters).
    notes:
        Caveats (continuous loop, cascade inner loop, ...).
    """

    numeric_format: str
    blocks: tuple[BlockQuantization, ...]
    notes: tuple[str, ...] = ()

    @property
    def coefficients(self) -> tuple[CoefficientChange, ...]:
        return tuple(c for b in self.blocks for c in b.coefficients)

    @property
    def largest_move(self) -> CoefficientChange | None:
        """The block and coefficient that moved most (saturated ones first)."""
        return _largest(self.coefficients)

    @property
    def saturated(self) -> tuple[CoefficientChange, ...]:
        return tuple(c for c in self.coefficients if c.saturated)

    @property
    def destabilised_blocks(self) -> tuple[BlockQuantization, ...]:
        return tuple(b for b in self.blocks if b.destabilised)


def _largest(changes) -> CoefficientChange | None:
    best = None
    for c in changes:
        key = (c.saturated, c.relative_move)
        if best is None or key > (best.saturated, best.relative_move):
            best = c
    return best


# --------------------------------------------------------------------------
# Quantizing blocks and loops
# --------------------------------------------------------------------------
#: Blocks rounded already in this process (content key -> result). The
#: variants of a loop share their controller and filters, so a family of
#: 10,000 variants rounds the same few blocks 10,000 times without it.
_ROUNDED_BLOCKS: dict = {}
_ROUNDED_BLOCKS_MAX = 256


def _block_key(block: Factored, fmt: NumericFormat, label: str, role: str, kind: str):
    """Exact content key of a rounding: the block's content (:meth:`Factored.content_key`),
    the format and the labels (equal keys give equal results, bit for bit)."""
    return (*block.content_key(), repr(fmt), label, role, kind)


def quantize_block(block: Factored, numeric_format: NumericFormat | str, label: str = "",
                   role: str = "", kind: str = "") -> tuple[Factored, BlockQuantization]:
    """Round one z-plane block's section coefficients and rebuild it.

    Parameters
    ----------
    block:
        The discretized block.
    numeric_format:
        ``float64``, ``float32`` or ``q<m>.<n>`` (or a :class:`NumericFormat`).
    label, role, kind:
        Carried into the report.

    Returns
    -------
    (Factored, BlockQuantization)
        The block rebuilt from the rounded coefficients, and what changed.
    """
    fmt = _as_format(numeric_format)
    key = _block_key(block, fmt, label, role, kind)
    done = _ROUNDED_BLOCKS.get(key)
    if done is None:
        done = _quantize_block(block, fmt, label, role, kind)
        if len(_ROUNDED_BLOCKS) >= _ROUNDED_BLOCKS_MAX:
            _ROUNDED_BLOCKS.clear()
        _ROUNDED_BLOCKS[key] = done
    return done


def _quantize_block(block: Factored, fmt: NumericFormat, label: str, role: str,
                    kind: str) -> tuple[Factored, BlockQuantization]:
    cascade = second_order_sections(block, fmt)
    changes: list[CoefficientChange] = []
    new_sections: list[Section] = []
    shift = 0.0
    for i, sec in enumerate(cascade.sections, start=1):
        names, values = zip(*sec.coefficients(), strict=True)
        rounded, saturated = fmt.round(np.array(values))
        fields = dict(zip(names, rounded.tolist(), strict=True))
        new = Section(fields.get("b0", 0.0), fields.get("b1", 0.0), fields.get("b2", 0.0),
                      fields.get("a1", 0.0), fields.get("a2", 0.0), sec.order)
        new_sections.append(new)
        for name, x, q, sat in zip(names, values, rounded, saturated, strict=True):
            if x != 0.0:
                changes.append(_change(label, f"section {i} {name}", x, float(q), bool(sat)))
        shift = max(shift, _root_shift(sec.poles(), new.poles()))
    scale_q = fmt.round_scale(cascade.scale)
    if cascade.scale != 0.0:
        changes.append(_change(label, "scale", cascade.scale, scale_q, False))
    rounded_cascade = SectionCascade(tuple(new_sections), scale_q, cascade.advance,
                                     cascade.sample_time_s)
    rebuilt = rounded_cascade.to_factored()
    report = BlockQuantization(
        label=label, role=role, kind=kind, sections=len(new_sections),
        coefficients=tuple(changes),
        unstable_poles_before=block.unstable_pole_count(),
        unstable_poles_after=rebuilt.unstable_pole_count(),
        boundary_poles_before=int(block.boundary_poles().size),
        boundary_poles_after=int(rebuilt.boundary_poles().size),
        max_pole_shift=float(shift),
    )
    return rebuilt, report


def quantized_model(model: LoopModel, numeric_format: str) -> tuple[LoopModel, QuantizationReport]:
    """The loop variant with its controller and filter coefficients rounded.

    Every block of ``model.controller`` and ``model.filters`` that the loop
    runs in z (``BlockModel.discrete``, biquads and z transfer functions
    included) is realised as second-order sections, rounded to
    ``numeric_format`` and rebuilt (:func:`quantize_block`); the controller
    path and the open loop are rebuilt with the rounded blocks in place of
    the designed ones (plant, sensor, delays and response factors are kept).

    A continuous loop has no stored coefficients: it is returned unchanged
    with a note. The inner loop of a cascade is kept as built (it is checked
    with its own format as a loop of its own); a note says so.

    Parameters
    ----------
    model:
        A built loop variant (:func:`ruleguard.models.assemble.build_loop`).
    numeric_format:
        ``float64``, ``float32`` or ``q<m>.<n>``.

    Returns
    -------
    (LoopModel, QuantizationReport)

    Raises
    ------
    ValueError
        For an unknown format, or an open loop that does not contain the
        controller path (not built by :func:`build_loop`).
    """
    fmt = parse_numeric_format(numeric_format)
    notes: list[str] = []
    if model.sample_rate_hz is None or not model.open_loop.is_discrete:
        notes.append("continuous loop: no stored coefficients to round")
        return model, QuantizationReport(fmt.name, (), tuple(notes))
    old_blocks = (model.controller, *model.filters)
    new_blocks: list[BlockModel] = []
    reports: list[BlockQuantization] = []
    for blk in old_blocks:
        if blk.discrete is None:
            new_blocks.append(blk)
            continue
        rebuilt, rep = quantize_block(blk.discrete, fmt, blk.label, blk.role, blk.kind)
        new_blocks.append(replace(blk, discrete=rebuilt))
        reports.append(rep)
    old_path = model.controller_path
    new_path = _product([b.discrete for b in new_blocks if b.discrete is not None], old_path)
    rest = _divide(model.open_loop.rational, old_path)
    rational = new_path * rest
    open_loop = OpenLoop(rational, model.open_loop.factors)
    if model.inner is not None:
        notes.append("the inner loop of the cascade is kept as built; its coefficients are "
                     "checked where it is analysed as a loop of its own")
    note = f"controller and filter coefficients rounded to {fmt.name} (second-order sections)"
    quantized = replace(
        model,
        open_loop=open_loop,
        controller=new_blocks[0],
        filters=tuple(new_blocks[1:]),
        controller_path=new_path,
        notes=(*model.notes, note),
    )
    return quantized, QuantizationReport(fmt.name, tuple(reports), tuple(notes))


# --------------------------------------------------------------------------
# helpers
# --------------------------------------------------------------------------
def _as_format(numeric_format: NumericFormat | str) -> NumericFormat:
    if isinstance(numeric_format, NumericFormat):
        return numeric_format
    return parse_numeric_format(numeric_format)


def _change(label: str, name: str, x: float, q: float, saturated: bool) -> CoefficientChange:
    return CoefficientChange(label, name, float(x), float(q), float(abs(q - x) / abs(x)),
                             bool(saturated))


def _real_poly(roots: np.ndarray) -> np.ndarray:
    """Monic real polynomial (descending powers) of at most two conjugate-closed roots."""
    roots = np.asarray(roots, dtype=complex)
    if roots.size == 0:
        return np.array([1.0])
    if roots.size == 1:
        return np.array([1.0, -roots[0].real])
    r1, r2 = roots
    if abs(r1.imag) > 0 or abs(r2.imag) > 0:
        return np.array([1.0, -2.0 * r1.real, abs(r1) ** 2])
    return np.array([1.0, -(r1.real + r2.real), r1.real * r2.real])


def _quadratic_roots(a1: float, a2: float) -> np.ndarray:
    """Roots of ``z^2 + a1 z + a2`` (stable formulas, exact zero root when a2 = 0)."""
    if a2 == 0.0:
        return np.array([0.0, -a1], dtype=complex)
    disc = a1 * a1 - 4.0 * a2
    if disc >= 0.0:
        q = -0.5 * (a1 + math.copysign(math.sqrt(disc), a1 if a1 != 0.0 else 1.0))
        return np.array([q, a2 / q], dtype=complex)
    re = -0.5 * a1
    im = 0.5 * math.sqrt(-disc)
    return np.array([complex(re, im), complex(re, -im)])


def _poly_roots_and_lead(coeffs: list[float]) -> tuple[np.ndarray, float]:
    """Roots and leading coefficient of a real polynomial of degree <= 2 (leading zeros dropped)."""
    c = list(coeffs)
    while c and c[0] == 0.0:
        c.pop(0)
    if not c:
        return np.zeros(0, complex), 0.0
    lead = c[0]
    if len(c) == 1:
        return np.zeros(0, complex), lead
    if len(c) == 2:
        return np.array([-c[1] / lead], dtype=complex), lead
    return _quadratic_roots(c[1] / lead, c[2] / lead), lead


def _root_shift(before: np.ndarray, after: np.ndarray) -> float:
    if before.size != after.size or before.size == 0:
        return 0.0
    if before.size == 1:
        return float(abs(before[0] - after[0]))
    straight = max(abs(before[0] - after[0]), abs(before[1] - after[1]))
    crossed = max(abs(before[0] - after[1]), abs(before[1] - after[0]))
    return float(min(straight, crossed))


def _product(blocks: list[Factored], like: Factored) -> Factored:
    out = Factored.unity(like.sample_time_s)
    for b in blocks:
        out = out * b
    return out


def _divide(total: Factored, part: Factored) -> Factored:
    """``total / part`` where ``part``'s roots are among ``total``'s (a product built with it)."""
    zeros = _remove_roots(total.zeros, part.zeros, "zeros")
    poles = _remove_roots(total.poles, part.poles, "poles")
    if part.gain == 0.0:
        raise ValueError("the controller path has zero gain: the open loop cannot be rebuilt")
    return Factored(zeros, poles, total.gain / part.gain, total.delay_s, total.sample_time_s)


def _remove_roots(roots: np.ndarray, remove: np.ndarray, what: str) -> np.ndarray:
    roots = np.asarray(roots, dtype=complex)
    remove = np.asarray(remove, dtype=complex)
    k = remove.size
    if k <= roots.size and np.array_equal(roots[:k], remove):
        return roots[k:]  # the product was built controller path first
    left = list(roots)
    for r in remove:
        if not left:
            raise ValueError(f"the open loop lacks {what} of the controller path")
        dist = np.abs(np.array(left) - r)
        i = int(np.argmin(dist))
        if dist[i] > 1e-9 * max(1.0, abs(r)):
            raise ValueError(f"the open loop lacks {what} of the controller path")
        left.pop(i)
    return np.array(left, dtype=complex)
