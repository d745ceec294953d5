"""Frequency responses the rules look at, on grids that do not miss narrow peaks.

The signals are those of RULES.md ``response.mask``: the open loop ``L``,
the sensitivity ``S = 1/(1 + L)``, the complementary sensitivity
``T = L/(1 + L)`` and the controller path ``C F1..Fn``. Grids are
logarithmic, with the open loop's corner frequencies added and extra points
across every lightly damped root (width about zeta * wn, METHODS.md
"Margins"), so a resonance with damping 0.001 is not stepped over. Peaks are
refined on the exact response with Brent's localmin (golden section with
parabolic steps; R. P. Brent, Algorithms for Minimization without
Derivatives, 1973).
"""

from __future__ import annotations

from collections.abc import Callable

from ruleguard.deferred import arrays
from ruleguard.deferred import numpy as np

SIGNALS = ("loop", "sensitivity", "complementary", "controller")


def signal_response(model, signal: str, w) -> np.ndarray:
    """The complex response of ``signal`` of a :class:`LoopModel` at ``w`` rad/s.

    Parameters
    ----------
    model:
        A :class:`~ruleguard.analysis.loop.LoopModel`.
    signal:
        ``"loop"`` (L), ``"sensitivity"`` (S), ``"complementary"`` (T) or
        ``"controller"`` (C F1..Fn).
    w:
        Frequencies in rad/s.
    """
    w = np.asarray(w, dtype=float)
    if signal == "controller":
        return model.controller_path.response(w)
    loop = model.open_loop.response(w)
    with np.errstate(divide="ignore", invalid="ignore"):
        if signal == "loop":
            return loop
        if signal == "sensitivity":
            return 1.0 / (1.0 + loop)
        if signal == "complementary":
            return loop / (1.0 + loop)
    raise ValueError(f"unknown signal {signal!r}; expected one of {', '.join(SIGNALS)}")


def _equivalent_s_roots(block) -> np.ndarray:
    """Roots of a block as s-plane equivalents (``log(z)/h`` for a z-plane block)."""
    roots = np.concatenate([block.zeros, block.poles])
    if block.sample_time_s is None:
        return roots
    roots = roots[np.abs(roots) > 1e-300]
    return np.log(roots.astype(complex)) / block.sample_time_s


def dense_grid(
    w_lo: float, w_hi: float, blocks=(), points_per_decade: int = 200
) -> np.ndarray:
    """A logarithmic grid on ``[w_lo, w_hi]`` rad/s that resolves every root of ``blocks``.

    Each root with natural frequency wn in range adds wn itself and, when it
    is lightly damped (zeta < 0.3), 41 points across wn (1 +- 4 zeta).
    """
    if not (w_hi > w_lo > 0):
        raise ValueError(f"need 0 < w_lo < w_hi, got {w_lo}, {w_hi}")
    decades = np.log10(w_hi / w_lo)
    n = max(int(np.ceil(decades * points_per_decade)) + 1, 32)
    parts = [np.logspace(np.log10(w_lo), np.log10(w_hi), n)]
    for block in blocks:
        if block is None:
            continue
        for r in _equivalent_s_roots(block):
            wn = abs(r)
            if not np.isfinite(wn) or wn <= 0:
                continue
            parts.append(np.array([wn, abs(r.imag)]))
            zeta = -r.real / wn
            if abs(zeta) < 0.3:
                half = max(4.0 * abs(zeta), 1e-5)
                parts.append(wn * (1.0 + np.linspace(-half, half, 41)))
    w = np.concatenate(parts)
    w = w[np.isfinite(w) & (w >= w_lo) & (w <= w_hi)]
    return arrays.sorted_unique(w)


def refine_maximum(
    values: Callable[[np.ndarray], np.ndarray],
    w: np.ndarray,
    y: np.ndarray,
    index: int,
    iterations: int = 60,
) -> tuple[float, float]:
    """Refine a grid maximum of a real function of frequency.

    ``values(w)`` gives the function at an array of frequencies; ``w, y`` are
    the grid and its values, ``index`` the grid maximum. Brent's localmin
    (:func:`ruleguard.analysis.scalar.brent_minimize`) runs on ``-values`` in
    log-frequency between the neighbours of the maximum. Returns
    ``(w_peak, y_peak)``, never below the grid value.
    """
    from ruleguard.analysis.scalar import brent_minimize

    lo = w[max(index - 1, 0)]
    hi = w[min(index + 1, w.size - 1)]
    best_w, best_y = float(w[index]), float(y[index])
    if not (hi > lo > 0):
        return best_w, best_y

    def negated(log_w: float) -> float:
        v = float(values(np.array([np.exp(log_w)]))[0])
        return -v if np.isfinite(v) else np.inf

    log_peak, neg = brent_minimize(
        negated, float(np.log(lo)), float(np.log(hi)), xatol=1e-12, maxiter=iterations
    )
    if np.isfinite(neg) and -neg > best_y:
        best_w, best_y = float(np.exp(log_peak)), float(-neg)
    return best_w, best_y


def refine_maxima(
    values: Callable[[np.ndarray], np.ndarray],
    lo: np.ndarray,
    hi: np.ndarray,
    w_best: np.ndarray,
    y_best: np.ndarray,
    points: int = 33,
    log_tol: float = 1e-12,
) -> tuple[np.ndarray, np.ndarray]:
    """Refine several bracketed grid maxima at once (vectorized zoom in log-frequency).

    Each bracket ``[lo_k, hi_k]`` (rad/s, > 0) is sampled at ``points``
    log-spaced points, narrowed to the neighbours of the best sample and
    sampled again, until it is narrower than ``log_tol`` in ``log w``: one
    call of ``values`` per step for all brackets, where a scalar search per
    maximum would call it many times. For a maximum that is smooth and
    unimodal in its bracket this converges like a golden-section search
    (Kiefer, "Sequential minimax search for a maximum", Proc. AMS 4, 1953),
    ``(points - 1) / 2`` times narrower per step. Returns ``(w, y)`` per
    bracket, never below the given ``y_best``.
    """
    a = np.log(np.asarray(lo, dtype=float))
    b = np.log(np.asarray(hi, dtype=float))
    best_w = np.array(w_best, dtype=float)
    best_y = np.array(y_best, dtype=float)
    if a.size == 0:
        return best_w, best_y
    t = np.linspace(0.0, 1.0, points)
    rows = np.arange(a.size)
    for _ in range(40):
        width = b - a
        if (width <= log_tol).all():
            break
        x = a[:, None] + width[:, None] * t
        v = np.asarray(values(np.exp(x).ravel()), dtype=float).reshape(x.shape)
        if not np.isfinite(v).all():
            v = np.where(np.isfinite(v), v, -np.inf)
        j = v.argmax(axis=1)
        top = v[rows, j]
        better = top > best_y
        if better.any():
            best_y = np.where(better, top, best_y)
            best_w = np.where(better, np.exp(x[rows, j]), best_w)
        a = x[rows, np.maximum(j - 1, 0)]
        b = x[rows, np.minimum(j + 1, points - 1)]
    return best_w, best_y
