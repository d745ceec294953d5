"""Rule ``response.mask``: a frequency response stays inside a mask.

A mask bounds the magnitude of one signal of the loop (RULES.md):
``loop`` (L), ``sensitivity`` (S = 1/(1 + L)), ``complementary``
(T = L/(1 + L)) or ``controller`` (C F1..Fn), from above (``upper``) and/or
below (``lower``). Each bound is a list of ``[freq_hz, db]`` points joined by
straight lines in log-frequency (dB linear in log10 f) and applies between
its first and last point. The response is evaluated on a dense logarithmic
grid that includes every breakpoint and resolves lightly damped roots
(:mod:`ruleguard.rules.responses`), and the worst point is refined by
Brent's localmin.
"""

from __future__ import annotations

import math
from collections.abc import Iterable, Mapping
from typing import Any

from ruleguard.deferred import arrays
from ruleguard.deferred import numpy as np
from ruleguard.rules.base import LoopContext, Severity, Violation
from ruleguard.rules.evidence import db, format_number, note, unanalysed_notes, variant_id
from ruleguard.rules.locations import controller_location, key
from ruleguard.rules.responses import SIGNALS, dense_grid, refine_maximum, signal_response
from ruleguard.rules.spec import Parameter, RuleSpec, threshold_location

_SYMBOL = {"loop": "|L|", "sensitivity": "|S|", "complementary": "|T|", "controller": "|C F|"}


def parse_points(points: Any) -> tuple[np.ndarray, np.ndarray] | str:
    """``(freq_hz, db)`` arrays of a mask bound, or a message saying what is wrong."""
    try:
        arr = np.asarray(points, dtype=float)
    except (TypeError, ValueError):
        return "points must be [[freq_hz, db], ...] numbers"
    if arr.ndim != 2 or arr.shape[1] != 2 or arr.shape[0] < 1:
        return f"points must be [[freq_hz, db], ...], got shape {arr.shape}"
    f, level = arr[:, 0], arr[:, 1]
    if not (np.all(np.isfinite(arr)) and np.all(f > 0)):
        return "frequencies must be positive and levels finite"
    if np.any(np.diff(f) <= 0):
        return "frequencies must increase from point to point"
    return f, level


def mask_level(f_hz: np.ndarray, bound_f: np.ndarray, bound_db: np.ndarray) -> np.ndarray:
    """The bound at ``f_hz``: linear in log10 f between points (the ends held at the span)."""
    return np.interp(np.log10(f_hz), np.log10(bound_f), bound_db)


def _top_rad_s(model, signal: str) -> float:
    if signal == "controller":
        h = model.controller_path.sample_time_s
        return math.inf if h is None else math.pi / h
    return float(model.open_loop.w_max)


def _worst_excess(model, signal, bound_f, bound_db, sign, top):
    """``(excess_db, f_hz, value_db, limit_db)`` of the worst point, or ``None`` if out of range.

    ``sign`` = +1 for an upper bound (value - limit), -1 for a lower one.
    """
    w_lo = 2.0 * math.pi * bound_f[0]
    w_hi = min(2.0 * math.pi * bound_f[-1], top)
    if w_lo > top:
        return None
    blocks = [model.controller_path]
    if signal != "controller":
        blocks.append(model.open_loop.rational)
    if w_hi > w_lo:
        w = dense_grid(w_lo, w_hi, blocks)
        breaks = 2.0 * math.pi * bound_f
        w = arrays.sorted_unique(np.concatenate([w, breaks[(breaks >= w_lo) & (breaks <= w_hi)]]))
    else:
        w = np.array([w_lo])

    def excess(x):
        x = np.asarray(x, dtype=float)
        value = db(signal_response(model, signal, x))
        limit = mask_level(x / (2.0 * math.pi), bound_f, bound_db)
        return np.nan_to_num(sign * (value - limit), nan=-np.inf, posinf=np.inf)

    y = excess(w)
    i = int(np.argmax(y))
    w_at, e = (float(w[i]), float(y[i])) if w.size < 3 else refine_maximum(excess, w, y, i)
    w_at = min(max(w_at, w_lo), w_hi)
    value = float(db(signal_response(model, signal, np.array([w_at]))[0]))
    limit = float(mask_level(np.array([w_at / (2.0 * math.pi)]), bound_f, bound_db)[0])
    return e, w_at / (2.0 * math.pi), value, limit


def response_mask(ctx: LoopContext, params: Mapping[str, Any]) -> Iterable[Violation]:
    """The chosen signal stays below ``upper`` and above ``lower`` in every variant."""
    upper, lower = params.get("upper"), params.get("lower")
    if upper is None and lower is None:
        return []
    signal = str(params.get("signal") or "loop")
    base = key(ctx.spec.controller.location.key, "mask", signal)
    mask_loc = threshold_location(params, "upper") or threshold_location(params, "lower")
    where = mask_loc or controller_location(ctx)
    if signal not in SIGNALS:
        return [
            note(
                f"response mask not checked: unknown signal {signal!r} "
                f"(expected one of {', '.join(SIGNALS)})",
                where,
                key_path=base,
            )
        ]
    bounds = []
    for name, sign, raw in (("upper", 1.0, upper), ("lower", -1.0, lower)):
        if raw is None:
            continue
        parsed = parse_points(raw)
        if isinstance(parsed, str):
            return [note(f"response mask `{name}` not checked: {parsed}", where, key_path=base)]
        bounds.append((name, sign, parsed[0], parsed[1]))
    if not ctx.evaluations:
        return unanalysed_notes(ctx, "response mask", key_path=base)
    closed = signal in ("sensitivity", "complementary")
    out: list[Violation] = []
    worst: dict[str, tuple] = {}
    unjudged = []
    clipped = None
    for ev in ctx.evaluations:
        if closed and not ev.analysis.stability.stable:
            unjudged.append(ev)
            continue
        top = _top_rad_s(ev.model, signal)
        for name, sign, bf, bl in bounds:
            if 2.0 * math.pi * bf[-1] > top * (1 + 1e-12):
                clipped = clipped or (name, top / (2.0 * math.pi))
            result = _worst_excess(ev.model, signal, bf, bl, sign, top)
            if result is None:
                continue
            best = worst.get(name)
            if best is None or result[0] > best[0][0]:
                worst[name] = (result, ev)
    if unjudged:
        out.append(
            note(
                f"{signal} mask not checked for closed-loop unstable variant(s) "
                f"{', '.join(variant_id(ev) for ev in unjudged[:5])} (see stability.closed-loop)",
                controller_location(ctx),
                key_path=key(base, "unstable"),
                variant=variant_id(unjudged[0]),
            )
        )
    if clipped is not None:
        out.append(
            note(
                f"response mask `{clipped[0]}` reaches above {format_number(clipped[1])} Hz, "
                "the top of "
                "the analysed frequency range (Nyquist frequency or end of measured data): "
                "that part is not checked",
                where,
                key_path=key(base, "clipped"),
            )
        )
    symbol = _SYMBOL[signal]
    for name, sign, _, _ in bounds:
        if name not in worst:
            continue
        (excess, f_hz, value, limit), ev = worst[name]
        if not excess > 1e-9:
            continue
        relation = "above the upper" if sign > 0 else "below the lower"
        out.append(
            Violation(
                variant=variant_id(ev),
                message=(
                    f"{symbol} = {format_number(value)} dB at {format_number(f_hz)} Hz is "
                    f"{relation} mask "
                    f"({format_number(limit)} dB) by {format_number(excess, 3)} dB"
                ),
                measured=value if math.isfinite(value) else None,
                limit=limit,
                unit="dB",
                frequency_hz=f_hz,
                location=controller_location(ctx),
                related=tuple(loc for loc in (mask_loc,) if loc is not None),
                key_path=key(base, name),
            )
        )
    return out


RULES: tuple[RuleSpec, ...] = (
    RuleSpec(
        id="response.mask",
        default_severity=Severity.ERROR,
        summary="A frequency response (L, S, T or C F) stays inside an upper/lower mask.",
        explanation=(
            "Evaluates the magnitude of `signal` (`loop` = L, `sensitivity` = S = 1/(1+L), "
            "`complementary` = T = L/(1+L), `controller` = C*F1*...*Fn) in every variant "
            "and requires it to stay at or below `upper` and at or above `lower`, each a list "
            "`[[freq_hz, db], ...]` of points joined by straight lines in log-frequency and "
            "applying between its first and last point. The response is evaluated densely "
            "(every breakpoint, lightly damped roots resolved) and the worst point is "
            "refined; the finding gives its frequency, the level and the mask there. S and T "
            "masks are judged on closed-loop stable variants only. No mask is set by "
            "default: rulesets and adjustments add them.\n\n"
            "Why it matters: many requirements are frequency-wise: loop gain below -20 dB "
            "above a structural mode, controller gain limited at the PWM frequency, "
            "disturbance rejection (|S| small) at low frequency, noise rejection (|T| "
            "small) at high frequency. A single margin cannot express them.\n\n"
            "How to fix it: reshape the loop where the finding says: a notch or low-pass "
            "filter against an upper mask at high frequency, more integral gain or "
            "bandwidth against a sensitivity mask at low frequency."
        ),
        source="the ruleset's own masks (no default)",
        parameters=(
            Parameter(
                "signal",
                "string",
                None,
                "loop",
                "which response the mask bounds",
                choices=SIGNALS,
            ),
            Parameter(
                "upper", "points", "dB", None, "[[freq_hz, max_db], ...] upper bound"
            ),
            Parameter(
                "lower", "points", "dB", None, "[[freq_hz, min_db], ...] lower bound"
            ),
        ),
        function=response_mask,
    ),
)
