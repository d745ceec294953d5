"""Per-loop figures for people: each margin at the nominal and its worst variant.

The text and Markdown reports show, for every loop, the nominal value of
each stability figure and the worst value over all variants with the variant
that gives it. "Worst" follows the meaning of each figure (FORMATS.md
section 5): the smallest gain, delay and disk margins, the phase margin of
smallest size (closest to -1), the lower gain
margin closest to 0 dB, the largest sensitivity peaks. For a stable variant
``None`` in a margin means unbounded; for an unstable one the gain, delay and
disk margins do not apply and are left out of the worst case.
"""

from __future__ import annotations

from collections.abc import Callable

from ruleguard.frozen import record
from ruleguard.report.model import LoopResult, Report, VariantResult
from ruleguard.rules.base import Severity

UNBOUNDED = "unbounded"
NOT_APPLICABLE = "n/a"
#: |L| never crosses 1: no phase margin to speak of (stable or not).
NO_CROSSOVER = "no crossover"
VALUE = "value"


@record
class Figure:
    """One figure of one variant (or the worst over variants).

    ``state`` is ``"value"`` (``value`` holds it), ``"unbounded"`` or
    ``"n/a"``; ``hz`` is where it happens, ``variant`` which variant it is.
    """

    state: str
    value: float | None = None
    hz: float | None = None
    variant: str | None = None


@record
class FigureRow:
    """A row of the per-loop table: nominal and worst over the variants."""

    label: str
    unit: str | None
    nominal: Figure
    worst: Figure


@record
class LoopSummary:
    name: str
    analysed: bool
    variants: int
    unstable_variants: tuple[str, ...]
    rows: tuple[FigureRow, ...]


def _figure(
    variant: VariantResult,
    value: float | None,
    hz: float | None,
    *,
    needs_stable: bool,
    none_means: str = UNBOUNDED,
) -> Figure:
    if needs_stable and not variant.analysis.stability.stable:
        return Figure(NOT_APPLICABLE, variant=variant.id)
    if value is None:
        return Figure(none_means, variant=variant.id)
    return Figure(VALUE, float(value), hz, variant.id)


def _worst(
    figures: list[Figure], *, lower_is_worse: bool, unbounded_is: float, by_size: bool = False
) -> Figure:
    """The worst figure: the lowest (or highest) value, or with ``by_size`` the
    lowest ``|value|`` (the phase margin: closeness to -1 in angle); ``unbounded``
    ranks as ``unbounded_is``; ``n/a`` figures are skipped."""
    candidates = [f for f in figures if f.state != NOT_APPLICABLE]
    if not candidates:
        return Figure(NOT_APPLICABLE)

    def rank(f: Figure) -> float:
        v = unbounded_is if f.state in (UNBOUNDED, NO_CROSSOVER) else f.value
        if by_size:
            v = abs(v)
        return v if lower_is_worse else -v

    return min(candidates, key=rank)  # first of equals: nominal wins ties


def _row(
    label: str,
    unit: str | None,
    variants: tuple[VariantResult, ...],
    pick: Callable[[VariantResult], tuple[float | None, float | None]],
    *,
    needs_stable: bool,
    lower_is_worse: bool,
    unbounded_is: float,
    none_means: str = UNBOUNDED,
    by_size: bool = False,
) -> FigureRow:
    figures = [
        _figure(v, *pick(v), needs_stable=needs_stable, none_means=none_means) for v in variants
    ]
    worst = _worst(figures, lower_is_worse=lower_is_worse, unbounded_is=unbounded_is,
                   by_size=by_size)
    return FigureRow(label, unit, figures[0], worst)


INF = float("inf")


def loop_summary(loop: LoopResult) -> LoopSummary:
    """The figures of one loop (no rows when it was not analysed)."""
    variants = loop.variants
    if not loop.analysed or not variants:
        return LoopSummary(loop.name, False, 0, (), ())
    unstable = tuple(v.id for v in variants if not v.analysis.stability.stable)
    m = lambda v: v.analysis.margins  # noqa: E731
    rows = [
        _row("gain margin", "dB", variants,
             lambda v: (m(v).gain_margin_db, m(v).gain_margin_hz),
             needs_stable=True, lower_is_worse=True, unbounded_is=INF),
        _row("lower gain margin", "dB", variants,
             lambda v: (m(v).lower_gain_margin_db, m(v).lower_gain_margin_hz),
             needs_stable=True, lower_is_worse=False, unbounded_is=-INF),
        _row("phase margin", "deg", variants,
             lambda v: (m(v).phase_margin_deg, m(v).crossover_hz),
             needs_stable=False, lower_is_worse=True, unbounded_is=INF,
             none_means=NO_CROSSOVER, by_size=True),
        _row("delay margin", "s", variants,
             lambda v: (m(v).delay_margin_s, None),
             needs_stable=True, lower_is_worse=True, unbounded_is=INF),
    ]
    if loop.sample_rate_hz:
        rows.append(
            _row("delay margin", "samples", variants,
                 lambda v: (m(v).delay_margin_samples, None),
                 needs_stable=True, lower_is_worse=True, unbounded_is=INF)
        )
    rows += [
        _row("sensitivity peak Ms", "dB", variants,
             lambda v: (m(v).sensitivity_peak_db, m(v).sensitivity_peak_hz),
             needs_stable=False, lower_is_worse=False, unbounded_is=INF,
             none_means=NOT_APPLICABLE),
        _row("complementary peak Mt", "dB", variants,
             lambda v: (m(v).complementary_peak_db, m(v).complementary_peak_hz),
             needs_stable=False, lower_is_worse=False, unbounded_is=INF,
             none_means=NOT_APPLICABLE),
        _row("disk margin alpha", None, variants,
             lambda v: (None if m(v).disk_margin is None else m(v).disk_margin.alpha,
                        None if m(v).disk_margin is None else m(v).disk_margin.hz),
             needs_stable=True, lower_is_worse=True, unbounded_is=INF,
             none_means=NOT_APPLICABLE),
        _row("bandwidth", "Hz", variants,
             lambda v: (m(v).bandwidth_hz, None),
             needs_stable=True, lower_is_worse=True, unbounded_is=INF,
             none_means=NOT_APPLICABLE),
    ]
    return LoopSummary(loop.name, True, len(variants), unstable, tuple(rows))


def loop_verdict(report: Report, loop: LoopResult) -> str:
    """``"fail"`` (an unwaived finding at or above ``fail_at``), ``"warn"``
    (unwaived findings below it), ``"pass"``; ``"not analysed"`` overrides
    ``"pass"`` and ``"warn"``."""
    found = [f for f in report.findings if f.loop == loop.name and not f.waived]
    if any(Severity(f.severity).rank >= report.fail_at.rank for f in found):
        return "fail"
    if not loop.analysed:
        return "not analysed"
    return "warn" if found else "pass"
