"""Frozen results of the analysis (FORMATS.md section 5 defines every field).

Frequencies are in Hz here (the report's unit); the analysis works in rad/s
internally and converts once when it builds these records.
"""

from __future__ import annotations

from dataclasses import field

from ruleguard.frozen import record


@record
class Stability:
    """Nyquist verdict: Z = N + P, with N the clockwise encirclements of -1.

    ``closed_loop_unstable_poles`` = ``open_loop_unstable_poles`` -
    ``ccw_encirclements``; both ``None`` when the curve passes through -1
    (within tolerance), in which case ``stable`` is False.
    """

    stable: bool
    open_loop_unstable_poles: int
    ccw_encirclements: int | None
    closed_loop_unstable_poles: int | None
    through_critical_point: bool = False


@record
class Crossover:
    """A gain crossover |L| = 1 and its phase margin (180 + angle L, in (-180, 180])."""

    hz: float
    phase_margin_deg: float


@record
class DiskMargin:
    """Disk margin (Seiler, Packard & Gahinet, IEEE CSM 40(5), 2020).

    ``skew`` is the skew sigma of the disk: 0 (balanced, the report's
    ``disk_margin``), or the skew ``margin.disk`` was asked to judge.
    """

    alpha: float
    gain_range_db: tuple[float | None, float | None]
    phase_deg: float
    hz: float | None
    skew: float = 0.0


@record
class Margins:
    """Every margin of FORMATS.md section 5 (``None`` as defined there)."""

    gain_margin_db: float | None
    gain_margin_hz: float | None
    lower_gain_margin_db: float | None
    lower_gain_margin_hz: float | None
    stable_gain_ranges_db: tuple[tuple[float | None, float | None], ...]
    phase_margin_deg: float | None
    crossover_hz: float | None
    crossovers: tuple[Crossover, ...]
    delay_margin_s: float | None
    delay_margin_samples: float | None
    sensitivity_peak_db: float | None
    sensitivity_peak_hz: float | None
    complementary_peak_db: float | None
    complementary_peak_hz: float | None
    disk_margin: DiskMargin | None
    bandwidth_hz: float | None


@record
class LoopAnalysis:
    """Stability and margins of one open loop (one variant of one loop)."""

    stability: Stability
    margins: Margins
    notes: tuple[str, ...] = field(default=())
