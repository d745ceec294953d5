"""Plots of the open loop as inline SVG, drawn here (no plotting library).

Three plots per loop, from the :class:`~ruleguard.report.model.ResponseCurve`
samples of the nominal and the worst variant:

* :func:`nyquist_chart` - L in the complex plane near the critical point, with
  -1 marked, the unit circle, the circle |1 + L| = 1/Ms of the closest
  approach, and the gain and phase crossings;
* :func:`loop_gain_plot` - |L| in dB and the (unwrapped) phase of L over a
  logarithmic frequency axis, with the gain crossovers, the phase crossovers
  and the gain and phase margins annotated;
* :func:`sensitivity_plot` - |S| and |T| (S = 1/(1 + L), T = L/(1 + L)) in dB
  with the reported Ms and Mt peaks marked.

Each returns a :class:`Plot`: the SVG text and the axis transforms
(:class:`Scale`) it was drawn with, so a test can map a data point to the
pixel where it must appear. All text is escaped; pure Python (a few hundred
points per curve).
"""

from __future__ import annotations

import cmath
import math
from collections.abc import Mapping, Sequence
from html import escape

from ruleguard.analysis.results import LoopAnalysis
from ruleguard.frozen import record
from ruleguard.report.model import ResponseCurve
from ruleguard.report.units import hertz, number, quantity

#: Line colours by curve (nominal, worst); the worst is also dashed, so the
#: plots read in grey print.
COLOURS = ("#1b4f72", "#a84300")
DASHES = ("", "7 4")
INK = "#222222"
GRID = "#d9d9d9"
FONT = 'font-family="sans-serif" font-size="11"'


@record
class Scale:
    """Maps data values along one axis to pixels (linear or base-10 log)."""

    low: float
    high: float
    pixel_low: float
    pixel_high: float
    log: bool = False

    def _t(self, value: float) -> float:
        return math.log10(value) if self.log else value

    def __call__(self, value: float) -> float:
        a, b = self._t(self.low), self._t(self.high)
        return self.pixel_low + (self._t(value) - a) / (b - a) * (self.pixel_high - self.pixel_low)

    def inverse(self, pixel: float) -> float:
        a, b = self._t(self.low), self._t(self.high)
        t = a + (pixel - self.pixel_low) / (self.pixel_high - self.pixel_low) * (b - a)
        return 10.0**t if self.log else t

    def contains(self, value: float) -> bool:
        lo, hi = min(self.low, self.high), max(self.low, self.high)
        return lo <= value <= hi


@record
class Panel:
    """One set of axes of a plot."""

    name: str
    x: Scale
    y: Scale


@record
class Plot:
    """An SVG figure and the axes it was drawn with."""

    svg: str
    panels: tuple[Panel, ...]

    def panel(self, name: str) -> Panel:
        return next(p for p in self.panels if p.name == name)


# ---------------------------------------------------------------- small pieces
def _f(value: float) -> str:
    return f"{value:.2f}"


def _nice_step(span: float, target: int = 6) -> float:
    raw = span / max(target, 1)
    power = 10.0 ** math.floor(math.log10(raw))
    for m in (1.0, 2.0, 5.0, 10.0):
        if m * power >= raw:
            return m * power
    return 10.0 * power


def _linear_ticks(low: float, high: float, target: int = 6) -> list[float]:
    step = _nice_step(high - low, target)
    first = math.ceil(low / step - 1e-9) * step
    ticks = []
    value = first
    while value <= high + 1e-9 * step:
        ticks.append(0.0 if abs(value) < 1e-12 * step else value)
        value += step
    return ticks


def _log_ticks(low: float, high: float) -> list[float]:
    first, last = math.ceil(math.log10(low) - 1e-9), math.floor(math.log10(high) + 1e-9)
    ticks = [10.0**k for k in range(first, last + 1)]
    if len(ticks) < 2:
        ticks = sorted(
            {m * 10.0**k for k in range(first - 1, last + 1) for m in (1, 2, 5)
             if low <= m * 10.0**k <= high}
        )
    return ticks


def _padded(low: float, high: float, fraction: float = 0.06, minimum: float = 1.0):
    if high - low < minimum:
        middle = 0.5 * (low + high)
        low, high = middle - minimum / 2, middle + minimum / 2
    pad = (high - low) * fraction
    return low - pad, high + pad


def _text(x: float, y: float, content: str, *, anchor: str = "start", css: str = "",
          fill: str = INK, extra: str = "") -> str:
    cls = f' class="{css}"' if css else ""
    return (f'<text x="{_f(x)}" y="{_f(y)}" text-anchor="{anchor}" fill="{fill}"{cls}'
            f"{extra}>{escape(content)}</text>")


def _line(x1, y1, x2, y2, *, stroke=INK, width=1.0, dash="", css="") -> str:
    dash_attr = f' stroke-dasharray="{dash}"' if dash else ""
    cls = f' class="{css}"' if css else ""
    return (f'<line x1="{_f(x1)}" y1="{_f(y1)}" x2="{_f(x2)}" y2="{_f(y2)}" '
            f'stroke="{stroke}" stroke-width="{width}"{dash_attr}{cls}/>')


def _marker(x, y, *, css: str, colour: str, hz: float | None = None, shape="circle") -> str:
    data = f' data-hz="{hz!r}"' if hz is not None else ""
    if shape == "diamond":
        d = f"M{_f(x)},{_f(y - 5)} L{_f(x + 5)},{_f(y)} L{_f(x)},{_f(y + 5)} L{_f(x - 5)},{_f(y)} Z"
        return (f'<path d="{d}" fill="white" stroke="{colour}" stroke-width="1.6" '
                f'class="marker {css}"{data}/>')
    return (f'<circle cx="{_f(x)}" cy="{_f(y)}" r="4" fill="white" stroke="{colour}" '
            f'stroke-width="1.6" class="marker {css}"{data}/>')


def _clip_segment(p, q, box):
    """Liang-Barsky: the part of segment p-q inside ``box`` (x0, y0, x1, y1), or None."""
    (x0, y0), (x1, y1) = p, q
    dx, dy = x1 - x0, y1 - y0
    t0, t1 = 0.0, 1.0
    for edge_p, edge_q in ((-dx, x0 - box[0]), (dx, box[2] - x0),
                           (-dy, y0 - box[1]), (dy, box[3] - y0)):
        if edge_p == 0:
            if edge_q < 0:
                return None
            continue
        t = edge_q / edge_p
        if edge_p < 0:
            t0 = max(t0, t)
        else:
            t1 = min(t1, t)
        if t0 > t1:
            return None
    return (x0 + t0 * dx, y0 + t0 * dy), (x0 + t1 * dx, y0 + t1 * dy)


def _polylines(points: Sequence[tuple[float, float] | None], box) -> list[list[tuple]]:
    """Pixel points split into runs inside ``box``; ``None`` (a non-finite sample)
    breaks a run; segments that leave the box are cut at its edge."""
    runs: list[list[tuple]] = []
    current: list[tuple] = []
    for p, q in zip(points, points[1:], strict=False):
        if p is None or q is None:
            if current:
                runs.append(current)
            current = []
            continue
        clipped = _clip_segment(p, q, box)
        if clipped is None:
            if current:
                runs.append(current)
            current = []
            continue
        a, b = clipped
        if current and current[-1] == a:
            current.append(b)
        else:
            if current:
                runs.append(current)
            current = [a, b]
    if current:
        runs.append(current)
    return runs


def _path_elements(runs, *, colour: str, dash: str, width: float, css: str,
                   variant: str, clip: str, opacity: float = 1.0) -> list[str]:
    dash_attr = f' stroke-dasharray="{dash}"' if dash else ""
    opacity_attr = f' stroke-opacity="{opacity}"' if opacity != 1.0 else ""
    return [
        f'<polyline points="{" ".join(f"{_f(x)},{_f(y)}" for x, y in run)}" fill="none" '
        f'stroke="{colour}" stroke-width="{width}"{dash_attr}{opacity_attr} '
        f'stroke-linejoin="round" class="curve {css}" data-variant="{escape(variant)}" '
        f'clip-path="url(#{clip})"/>'
        for run in runs
    ]


def _finite(value: float) -> bool:
    return value is not None and math.isfinite(value)


def _legend(curves: Sequence[ResponseCurve], x: float, y: float, extra=(),
            dashed: bool = True) -> list[str]:
    out = []
    for i, curve in enumerate(curves):
        colour, dash = COLOURS[i % 2], DASHES[i % 2] if dashed else ""
        label = curve.variant if curve.role == "nominal" else f"{curve.variant} ({curve.role})"
        out.append(_line(x, y - 4, x + 22, y - 4, stroke=colour, width=2, dash=dash))
        out.append(_text(x + 28, y, label, css="legend"))
        y += 15
    for sample, label in extra:
        out.append(sample(x, y - 4))
        out.append(_text(x + 28, y, label, css="legend"))
        y += 15
    return out


class _Svg:
    def __init__(self, width: int, height: int, title: str, ident: str) -> None:
        self.parts = [
            f'<svg xmlns="http://www.w3.org/2000/svg" viewBox="0 0 {width} {height}" '
            f'width="{width}" height="{height}" role="img" aria-label="{escape(title)}" '
            f'class="plot" id="{escape(ident)}" {FONT}>',
            f"<title>{escape(title)}</title>",
        ]
        self.ident = ident

    def clip(self, name: str, x0, y0, x1, y1) -> str:
        ident = f"{self.ident}-{name}"
        self.parts.append(
            f'<clipPath id="{escape(ident)}"><rect x="{_f(x0)}" y="{_f(y0)}" '
            f'width="{_f(x1 - x0)}" height="{_f(y1 - y0)}"/></clipPath>'
        )
        return escape(ident)

    def add(self, *parts: str) -> None:
        self.parts.extend(parts)

    def done(self) -> str:
        return "\n".join(self.parts + ["</svg>"])


def _frame(svg: _Svg, x: Scale, y: Scale, *, x_ticks, y_ticks, x_label, y_label,
           x_format, y_format, show_x_labels=True) -> None:
    left, right = x.pixel_low, x.pixel_high
    top, bottom = y.pixel_high, y.pixel_low
    for t in x_ticks:
        px = x(t)
        svg.add(_line(px, top, px, bottom, stroke=GRID))
        if show_x_labels:
            svg.add(_text(px, bottom + 14, x_format(t), anchor="middle", css="tick"))
    for t in y_ticks:
        py = y(t)
        svg.add(_line(left, py, right, py, stroke=GRID))
        svg.add(_text(left - 5, py + 4, y_format(t), anchor="end", css="tick"))
    svg.add(f'<rect x="{_f(left)}" y="{_f(top)}" width="{_f(right - left)}" '
            f'height="{_f(bottom - top)}" fill="none" stroke="{INK}" stroke-width="1"/>')
    if x_label:
        svg.add(_text((left + right) / 2, bottom + 30, x_label, anchor="middle", css="axis-label"))
    svg.add(_text(left - 40, (top + bottom) / 2, y_label, anchor="middle", css="axis-label",
                  extra=f' transform="rotate(-90 {_f(left - 40)} {_f((top + bottom) / 2)})"'))


def _freq_label(value: float) -> str:
    return hertz(value)


# ---------------------------------------------------------------- Nyquist
def _real_axis_crossings(analysis: LoopAnalysis | None) -> list[float]:
    """Where L crosses the negative real axis at the reported gain margins: -10^(-GM/20)."""
    if analysis is None:
        return []
    out = []
    for gm in (analysis.margins.gain_margin_db, analysis.margins.lower_gain_margin_db):
        if _finite(gm):
            out.append(-(10.0 ** (-gm / 20.0)))
    return out


def nyquist_chart(
    curves: Sequence[ResponseCurve],
    analyses: Mapping[str, LoopAnalysis],
    *,
    ident: str = "nyquist",
) -> Plot:
    """L(jw) for w > 0 (solid) and its mirror w < 0 (faint) near -1.

    The window holds -1, the origin and the unit circle, widened (up to -6)
    to hold the reported real-axis crossings; both axes have the same scale.
    """
    width, height = 560, 430
    left, right, top, bottom = 58.0, 548.0, 40.0, 392.0
    need_x = [-2.2, 1.3]
    for curve in curves:
        for c in _real_axis_crossings(analyses.get(curve.variant)):
            if c >= -6.0:
                need_x.append(c * 1.15)
    x_low, x_high = min(need_x), max(need_x)
    half_y = max(1.6, 0.5 * (x_high - x_low) * (bottom - top) / (right - left))
    half_x = half_y * (right - left) / (bottom - top)
    centre_x = 0.5 * (x_low + x_high)
    x = Scale(centre_x - half_x, centre_x + half_x, left, right)
    y = Scale(-half_y, half_y, bottom, top)

    svg = _Svg(width, height, "Nyquist plot of the open loop L near -1", ident)
    clip = svg.clip("area", left, top, right, bottom)
    ticks_x = _linear_ticks(x.low, x.high, 8)
    ticks_y = _linear_ticks(y.low, y.high, 6)
    _frame(svg, x, y, x_ticks=ticks_x, y_ticks=ticks_y, x_label="Re L", y_label="Im L",
           x_format=number, y_format=number)
    svg.add(_line(x(0), top, x(0), bottom, stroke="#9a9a9a"),
            _line(left, y(0), right, y(0), stroke="#9a9a9a"))
    radius = x(1.0) - x(0.0)
    svg.add(f'<circle cx="{_f(x(0))}" cy="{_f(y(0))}" r="{_f(radius)}" fill="none" '
            f'stroke="#7a7a7a" stroke-dasharray="2 3" class="unit-circle" '
            f'clip-path="url(#{clip})"/>')

    span = (x.high - x.low) * 0.5
    box_data = (x.low - span, y.low - span, x.high + span, y.high + span)
    box = (x(box_data[0]), y(box_data[3]), x(box_data[2]), y(box_data[1]))

    for i, curve in enumerate(curves):
        colour, dash = COLOURS[i % 2], DASHES[i % 2]
        analysis = analyses.get(curve.variant)
        if analysis is not None and _finite(analysis.margins.sensitivity_peak_db):
            r = 10.0 ** (-analysis.margins.sensitivity_peak_db / 20.0)  # 1/Ms
            svg.add(f'<circle cx="{_f(x(-1))}" cy="{_f(y(0))}" r="{_f(r * radius)}" fill="none" '
                    f'stroke="{colour}" stroke-opacity="0.55" stroke-dasharray="1 3" '
                    f'class="ms-circle" data-variant="{escape(curve.variant)}" '
                    f'clip-path="url(#{clip})"/>')
        pixels = [
            (x(v.real), y(v.imag)) if _finite(v.real) and _finite(v.imag) else None
            for v in curve.open_loop
        ]
        mirror = [None if p is None else (p[0], 2 * y(0) - p[1]) for p in pixels]
        svg.add(*_path_elements(_polylines(mirror, box), colour=colour, dash="3 3", width=1.0,
                                css="branch-negative", variant=curve.variant, clip=clip,
                                opacity=0.45))
        svg.add(*_path_elements(_polylines(pixels, box), colour=colour, dash=dash, width=1.8,
                                css="branch-positive", variant=curve.variant, clip=clip))
        svg.add(*_direction_arrows(pixels, (left, top, right, bottom), colour))
        if analysis is not None:
            for c in _real_axis_crossings(analysis):
                if x.contains(c):
                    svg.add(_marker(x(c), y(0), css="phase-crossover", colour=colour,
                                    shape="diamond"))
            for crossover in analysis.margins.crossovers:
                v = _sample_at(curve, crossover.hz)
                if v is not None and _finite(v.real):
                    svg.add(_marker(x(v.real), y(v.imag), css="crossover", colour=colour,
                                    hz=crossover.hz))
    # the critical point on top
    cx, cy = x(-1.0), y(0.0)
    # our own mark: an open ring in the page's ink with a dot at its centre
    svg.add(f'<circle cx="{_f(cx)}" cy="{_f(cy)}" r="6" fill="none" stroke="{INK}" '
            f'stroke-width="1.6" class="critical-point"/>',
            f'<circle cx="{_f(cx)}" cy="{_f(cy)}" r="1.8" fill="{INK}" '
            f'class="critical-point-centre"/>',
            _text(cx - 8, cy - 10, "critical point −1", anchor="end", fill=INK,
                  css="critical-label"))
    svg.add(*_legend(curves, left + 8, 20))
    svg.add(_text(right, 20, "faint: ω < 0", anchor="end", css="note"))
    return Plot(svg.done(), (Panel("nyquist", x, y),))


def _direction_arrows(pixels, area, colour: str) -> list[str]:
    """Three small arrowheads along the inside part of the curve (increasing w)."""
    inside = [i for i, p in enumerate(pixels[:-1]) if p is not None and pixels[i + 1] is not None
              and area[0] <= p[0] <= area[2] and area[1] <= p[1] <= area[3]]
    if len(inside) < 8:
        return []
    out = []
    for fraction in (0.25, 0.5, 0.75):
        i = inside[int(fraction * (len(inside) - 1))]
        (x0, y0), (x1, y1) = pixels[i], pixels[i + 1]
        angle = math.atan2(y1 - y0, x1 - x0)
        if x1 == x0 and y1 == y0:
            continue
        tip = (x0, y0)
        back = [(tip[0] - 8 * math.cos(angle + s), tip[1] - 8 * math.sin(angle + s))
                for s in (0.45, -0.45)]
        out.append(f'<path d="M{_f(tip[0])},{_f(tip[1])} L{_f(back[0][0])},{_f(back[0][1])} '
                   f'L{_f(back[1][0])},{_f(back[1][1])} Z" fill="{colour}" class="arrow"/>')
    return out


def _sample_at(curve: ResponseCurve, hz: float | None) -> complex | None:
    """L at ``hz`` by linear interpolation between the samples (None outside)."""
    if hz is None or not curve.frequency_hz:
        return None
    f = curve.frequency_hz
    if hz < f[0] or hz > f[-1]:
        return None
    import bisect

    k = bisect.bisect_left(f, hz)
    if k < len(f) and f[k] == hz:
        return curve.open_loop[k]
    if k == 0:
        return curve.open_loop[0]
    t = (math.log(hz) - math.log(f[k - 1])) / (math.log(f[k]) - math.log(f[k - 1]))
    return curve.open_loop[k - 1] * (1 - t) + curve.open_loop[k] * t


# ---------------------------------------------------------------- loop gain
def _db(value: complex) -> float | None:
    magnitude = abs(value)
    if not math.isfinite(magnitude) or magnitude == 0:
        return None
    return 20.0 * math.log10(magnitude)


def unwrapped_phase_deg(values: Sequence[complex]) -> list[float | None]:
    """Phase of ``values`` in degrees, continuous along the samples, shifted by
    a multiple of 360 so that the first finite value lies in (-315, 45]."""
    out: list[float | None] = []
    previous = None
    for v in values:
        if not (_finite(v.real) and _finite(v.imag)) or v == 0:
            out.append(None)
            continue
        angle = math.degrees(cmath.phase(v))
        if previous is not None:
            angle += 360.0 * round((previous - angle) / 360.0)
        out.append(angle)
        previous = angle
    first = next((a for a in out if a is not None), None)
    if first is None:
        return out
    shift = -360.0 * math.floor((first + 315.0) / 360.0)
    if first + shift <= -315.0:
        shift += 360.0
    return [None if a is None else a + shift for a in out]


def _interp(curve_hz: Sequence[float], values: Sequence[float | None], hz: float) -> float | None:
    import bisect

    k = bisect.bisect_left(curve_hz, hz)
    if k < len(curve_hz) and curve_hz[k] == hz:
        return values[k]
    if k == 0 or k >= len(curve_hz) or values[k - 1] is None or values[k] is None:
        return None
    low, high = math.log(curve_hz[k - 1]), math.log(curve_hz[k])
    t = (math.log(hz) - low) / (high - low)
    return values[k - 1] * (1 - t) + values[k] * t


def _frequency_scale(curves: Sequence[ResponseCurve], left: float, right: float) -> Scale:
    lows = [c.frequency_hz[0] for c in curves if c.frequency_hz]
    highs = [c.frequency_hz[-1] for c in curves if c.frequency_hz]
    low, high = (min(lows), max(highs)) if lows else (0.01, 100.0)
    if not high > low:
        high = low * 10.0
    return Scale(low, high, left, right, log=True)


def _db_range(series: list[list[float | None]], must: Sequence[float], floor: float,
              ceiling: float) -> tuple[float, float]:
    finite = [v for s in series for v in s if v is not None] + list(must)
    low = max(min(finite), floor)
    high = min(max(finite), ceiling)
    return _padded(low, high, minimum=6.0)


def loop_gain_plot(
    curves: Sequence[ResponseCurve],
    analyses: Mapping[str, LoopAnalysis],
    *,
    ident: str = "loop-gain",
) -> Plot:
    """|L| (dB) above, phase of L (deg) below, over a log frequency axis."""
    width, height = 640, 470
    left, right = 64.0, 620.0
    mag_top, mag_bottom = 40.0, 220.0
    ph_top, ph_bottom = 250.0, 420.0
    fx = _frequency_scale(curves, left, right)
    dbs = [[_db(v) for v in c.open_loop] for c in curves]
    phases = [unwrapped_phase_deg(c.open_loop) for c in curves]
    gm_marks = []
    for c in curves:
        a = analyses.get(c.variant)
        if a is not None:
            gm_marks += [-g for g in (a.margins.gain_margin_db, a.margins.lower_gain_margin_db)
                         if _finite(g)]
    db_low, db_high = _db_range(dbs, [0.0] + gm_marks, -100.0, 100.0)
    my = Scale(db_low, db_high, mag_bottom, mag_top)
    # the phase axis covers the samples up to a few times the highest marked
    # frequency (a dead time's phase falls without bound above it; that part
    # runs off the panel)
    marked = [hz for c in curves if (a := analyses.get(c.variant)) is not None
              for hz in [x.hz for x in a.margins.crossovers]
              + [a.margins.gain_margin_hz, a.margins.lower_gain_margin_hz]
              if hz is not None and math.isfinite(hz)]
    top_hz = 4.0 * max(marked) if marked else math.inf
    finite_phase = [p for c, s in zip(curves, phases, strict=True)
                    for hz, p in zip(c.frequency_hz, s, strict=True)
                    if p is not None and hz <= top_hz] or [-180.0]
    ph_low, ph_high = _padded(max(min(finite_phase + [-180.0]), -1080.0),
                              min(max(finite_phase + [-180.0]), 720.0), minimum=90.0)
    py = Scale(ph_low, ph_high, ph_bottom, ph_top)

    svg = _Svg(width, height, "Magnitude and phase of the open loop L over frequency", ident)
    mag_clip = svg.clip("magnitude", left, mag_top, right, mag_bottom)
    ph_clip = svg.clip("phase", left, ph_top, right, ph_bottom)
    f_ticks = _log_ticks(fx.low, fx.high)
    _frame(svg, fx, my, x_ticks=f_ticks, y_ticks=_linear_ticks(db_low, db_high, 5), x_label="",
           y_label="|L| (dB)", x_format=_freq_label, y_format=number, show_x_labels=False)
    ph_step = 45.0 if ph_high - ph_low <= 270 else 90.0 if ph_high - ph_low <= 540 else 180.0
    ph_ticks = [k * ph_step for k in range(math.ceil(ph_low / ph_step),
                                           math.floor(ph_high / ph_step) + 1)]
    _frame(svg, fx, py, x_ticks=f_ticks, y_ticks=ph_ticks, x_label="frequency (Hz, log scale)",
           y_label="phase of L (deg)", x_format=_freq_label, y_format=number)
    svg.add(_line(left, my(0), right, my(0), stroke="#7a7a7a", css="zero-db"))
    references = [-180.0 + 360.0 * k for k in range(-4, 4) if py.contains(-180.0 + 360.0 * k)]
    for ref in references:
        svg.add(_line(left, py(ref), right, py(ref), stroke="#7a7a7a", css="phase-reference"))

    box_mag = (left - 10, mag_top - 400, right + 10, mag_bottom + 400)
    box_ph = (left - 10, ph_top - 400, right + 10, ph_bottom + 400)
    for i, curve in enumerate(curves):
        colour, dash = COLOURS[i % 2], DASHES[i % 2]
        f = curve.frequency_hz
        mag_px = [None if d is None else (fx(hz), my(d)) for hz, d in zip(f, dbs[i], strict=True)]
        ph_px = [None if p is None else (fx(hz), py(p)) for hz, p in zip(f, phases[i], strict=True)]
        svg.add(*_path_elements(_polylines(mag_px, box_mag), colour=colour, dash=dash, width=1.8,
                                css="magnitude", variant=curve.variant, clip=mag_clip))
        svg.add(*_path_elements(_polylines(ph_px, box_ph), colour=colour, dash=dash, width=1.8,
                                css="phase", variant=curve.variant, clip=ph_clip))
        analysis = analyses.get(curve.variant)
        if analysis is None:
            continue
        m = analysis.margins
        annotate = i == 0
        for crossover in m.crossovers:
            if not fx.contains(crossover.hz):
                continue
            px = fx(crossover.hz)
            svg.add(_line(px, mag_top, px, ph_bottom, stroke=colour, dash="2 3", width=0.8))
            svg.add(_marker(px, my(0), css="crossover", colour=colour, hz=crossover.hz))
            phase = _interp(f, phases[i], crossover.hz)
            if phase is None:
                continue
            ref = -180.0 + 360.0 * round((phase + 180.0) / 360.0)
            svg.add(_marker(px, py(phase), css="crossover-phase", colour=colour, hz=crossover.hz))
            if annotate and crossover.hz == m.crossover_hz and py.contains(ref):
                svg.add(_line(px, py(ref), px, py(phase), stroke=colour, width=2.4,
                              css="phase-margin"))
                svg.add(_text(px + 6, (py(ref) + py(phase)) / 2 + 4,
                              f"PM {quantity(m.phase_margin_deg, 'deg')}", css="annotation",
                              fill=colour))
        for gm, hz, name in ((m.gain_margin_db, m.gain_margin_hz, "GM"),
                             (m.lower_gain_margin_db, m.lower_gain_margin_hz, "lower GM")):
            if not (_finite(gm) and hz is not None and fx.contains(hz)):
                continue
            px = fx(hz)
            svg.add(_line(px, mag_top, px, ph_bottom, stroke=colour, dash="1 3", width=0.8))
            phase = _interp(f, phases[i], hz)
            if phase is not None:
                svg.add(_marker(px, py(phase), css="phase-crossover", colour=colour, hz=hz,
                                shape="diamond"))
            svg.add(_marker(px, my(-gm), css="phase-crossover-magnitude", colour=colour, hz=hz,
                            shape="diamond"))
            if annotate:
                svg.add(_line(px, my(0), px, my(-gm), stroke=colour, width=2.4, css="gain-margin"))
                svg.add(_text(px + 6, (my(0) + my(-gm)) / 2 + 4, f"{name} {quantity(gm, 'dB')}",
                              css="annotation", fill=colour))
    svg.add(*_legend(curves, left + 8, 18))
    svg.add(_text(right, 18, "○ gain crossover |L| = 1 · ◇ phase crossover", anchor="end",
                  css="note"))
    return Plot(svg.done(), (Panel("magnitude", fx, my), Panel("phase", fx, py)))


# ---------------------------------------------------------------- S and T
def sensitivity_plot(
    curves: Sequence[ResponseCurve],
    analyses: Mapping[str, LoopAnalysis],
    *,
    ident: str = "sensitivity",
) -> Plot:
    """|S| = |1/(1 + L)| (solid) and |T| = |L/(1 + L)| (dashed) in dB, peaks marked."""
    width, height = 640, 330
    left, right, top, bottom = 64.0, 620.0, 52.0, 280.0
    fx = _frequency_scale(curves, left, right)
    s_db, t_db = [], []
    for c in curves:
        s_row, t_row = [], []
        for v in c.open_loop:
            if _finite(v.real) and _finite(v.imag) and v != -1:
                s_row.append(_db(1.0 / (1.0 + v)))
                t_row.append(_db(v / (1.0 + v)))
            else:
                s_row.append(None)
                t_row.append(None)
        s_db.append(s_row)
        t_db.append(t_row)
    peaks = []
    for c in curves:
        a = analyses.get(c.variant)
        if a is not None:
            peaks += [p for p in (a.margins.sensitivity_peak_db, a.margins.complementary_peak_db)
                      if _finite(p)]
    low, high = _db_range(s_db + t_db, [0.0] + peaks, -60.0, 40.0)
    y = Scale(low, high, bottom, top)
    svg = _Svg(width, height, "Sensitivity |S| and complementary sensitivity |T| over frequency",
               ident)
    clip = svg.clip("area", left, top, right, bottom)
    _frame(svg, fx, y, x_ticks=_log_ticks(fx.low, fx.high), y_ticks=_linear_ticks(low, high, 5),
           x_label="frequency (Hz, log scale)", y_label="dB", x_format=_freq_label,
           y_format=number)
    svg.add(_line(left, y(0), right, y(0), stroke="#7a7a7a", css="zero-db"))
    box = (left - 10, top - 400, right + 10, bottom + 400)
    for i, curve in enumerate(curves):
        colour = COLOURS[i % 2]
        f = curve.frequency_hz
        for rows, css, dash, w in ((s_db, "sensitivity", "", 1.9),
                                   (t_db, "complementary", "6 3", 1.3)):
            pts = [None if d is None else (fx(hz), y(d)) for hz, d in zip(f, rows[i], strict=True)]
            svg.add(*_path_elements(_polylines(pts, box), colour=colour, dash=dash, width=w,
                                    css=css, variant=curve.variant, clip=clip))
        analysis = analyses.get(curve.variant)
        if analysis is None:
            continue
        m = analysis.margins
        for value, hz, css, name, shape in (
            (m.sensitivity_peak_db, m.sensitivity_peak_hz, "ms-peak", "Ms", "circle"),
            (m.complementary_peak_db, m.complementary_peak_hz, "mt-peak", "Mt", "diamond"),
        ):
            if not (_finite(value) and hz is not None and fx.contains(hz) and y.contains(value)):
                continue
            svg.add(_marker(fx(hz), y(value), css=css, colour=colour, hz=hz, shape=shape))
            if i == 0:
                svg.add(_text(fx(hz) + 7, y(value) - 7 if css == "ms-peak" else y(value) + 15,
                              f"{name} {quantity(value, 'dB')} at {hertz(hz)}",
                              css="annotation", fill=colour))
    extra = [
        (lambda x0, y0: _line(x0, y0, x0 + 22, y0, stroke=INK, width=1.9), "|S| (solid)"),
        (lambda x0, y0: _line(x0, y0, x0 + 22, y0, stroke=INK, width=1.3, dash="6 3"),
         "|T| (dashed)"),
    ]
    svg.add(*_legend(curves, left + 8, 16, dashed=False))
    svg.add(*_legend((), right - 120, 16, extra))
    return Plot(svg.done(), (Panel("sensitivity", fx, y),))
