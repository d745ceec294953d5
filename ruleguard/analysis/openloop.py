"""The open loop handed from the models to the analysis.

``L = rational x product(factors)``, negative feedback. The rational part
holds every block that has a factored form (controller, filters, plant,
sensor, whole-sample delays as poles at z = 0, a continuous transport delay
as ``rational.delay_s``). ``factors`` hold what is only known through its
frequency response: measured plants, a zero-order-hold factor in front of a
measured plant, the closed inner loop of a cascade running at another rate.
"""

from __future__ import annotations

from typing import Protocol, runtime_checkable

import numpy as np

from ruleguard.frozen import record
from ruleguard.models.arrays import sorted_unique
from ruleguard.models.lti import Factored


@runtime_checkable
class ResponseFactor(Protocol):
    """A factor of the open loop known through its frequency response.

    Attributes
    ----------
    unstable_poles:
        Open-loop unstable poles it contributes (declared, not computed).
    integrators:
        Poles at the origin (s = 0, or z = 1 in a discrete loop) it contributes:
        the contour is indented around them.
    w_min, w_max:
        Range (rad/s) where the response is known; outside it the analysis
        must not rely on it (``w_max = inf`` when unbounded). Below ``w_min``
        the factor behaves like ``c / s**integrators``.
    """

    unstable_poles: int
    integrators: int

    @property
    def w_min(self) -> float: ...

    @property
    def w_max(self) -> float: ...

    def response(self, w) -> np.ndarray: ...

    def grid(self) -> np.ndarray:
        """Frequencies (rad/s) where the response has detail (tabulated points)."""
        ...


@record(eq=False)
class OpenLoop:
    """An open loop L ready for Nyquist analysis.

    Parameters
    ----------
    rational:
        Every factored block multiplied together (zeros and poles are kept,
        never cancelled).
    factors:
        Frequency-response factors (see :class:`ResponseFactor`).
    """

    rational: Factored
    factors: tuple = ()

    @property
    def sample_time_s(self) -> float | None:
        return self.rational.sample_time_s

    @property
    def is_discrete(self) -> bool:
        return self.rational.sample_time_s is not None

    @property
    def sample_rate_hz(self) -> float | None:
        h = self.rational.sample_time_s
        return None if h is None else 1.0 / h

    @property
    def nyquist_rad_s(self) -> float | None:
        h = self.rational.sample_time_s
        return None if h is None else np.pi / h

    @property
    def w_max(self) -> float:
        """Top of the frequency range: the Nyquist frequency, the end of the data, or inf."""
        top = np.inf if self.nyquist_rad_s is None else self.nyquist_rad_s
        for f in self.factors:
            top = min(top, f.w_max)
        return float(top)

    @property
    def is_rational(self) -> bool:
        return not self.factors

    def response(self, w) -> np.ndarray:
        """L at ``w`` rad/s (vectorized); NaN where a factor is unknown."""
        out = self.rational.response(w)
        for f in self.factors:
            out = out * f.response(w)
        return out

    def unstable_pole_count(self) -> int:
        """P: rational poles with Re > 0 (|z| > 1) plus the factors' declared ones."""
        return self.rational.unstable_pole_count() + sum(f.unstable_poles for f in self.factors)

    def boundary_pole_frequencies(self) -> list[tuple[float, int]]:
        """Boundary poles at non-negative frequency as ``(w rad/s, multiplicity)``."""
        merged = dict()
        for w0, m in self.rational.boundary_pole_frequencies():
            merged[w0] = merged.get(w0, 0) + m
        k = sum(f.integrators for f in self.factors)
        if k:
            key = next((w0 for w0 in merged if w0 == 0.0), 0.0)
            merged[key] = merged.get(key, 0) + k
        return sorted(merged.items())

    def corner_frequencies(self) -> np.ndarray:
        parts = [self.rational.corner_frequencies()]
        for f in self.factors:
            parts.append(np.asarray(f.grid(), dtype=float))
        w = np.concatenate(parts) if parts else np.zeros(0)
        return sorted_unique(w[np.isfinite(w) & (w > 0)])
