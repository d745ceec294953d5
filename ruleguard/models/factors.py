"""Open-loop factors known through their frequency response.

Each class here satisfies :class:`~ruleguard.analysis.openloop.ResponseFactor`
(``unstable_poles``, ``integrators``, ``w_min``, ``w_max``, ``response(w)``,
``grid()``). They carry what the rational part of an open loop cannot:

* :class:`BlockResponse`: a factored block evaluated in its own domain
  inside a loop of another domain or rate (a continuous sensor beside a
  measured plant in a sampled loop, a closed inner loop at another rate).
* :class:`ClosedLoopResponse`: the closed inner loop of a cascade,
  ``T = forward / (1 + L)``, evaluated exactly from its parts.
"""

from __future__ import annotations

import numpy as np

from ruleguard.analysis.openloop import OpenLoop
from ruleguard.frozen import record
from ruleguard.models.lti import Factored


def _integrator_count(block: Factored) -> int:
    """Boundary poles at zero frequency (s = 0, or z = 1)."""
    for w0, m in block.boundary_pole_frequencies():
        if w0 == 0.0 or abs(w0) <= 1e-12:
            return m
    return 0


@record(eq=False)
class BlockResponse:
    """A factored block seen only through its frequency response.

    ``response(w)`` is ``block.response(w)``: ``block(j w)`` for an s-plane
    block, ``block(exp(j w h))`` for a z-plane one. A z-plane block is known
    up to its own Nyquist frequency (``w_max = pi / h``).
    """

    block: Factored

    @property
    def unstable_poles(self) -> int:
        return self.block.unstable_pole_count()

    @property
    def integrators(self) -> int:
        return _integrator_count(self.block)

    @property
    def w_min(self) -> float:
        return 0.0

    @property
    def w_max(self) -> float:
        h = self.block.sample_time_s
        return float(np.inf) if h is None else float(np.pi / h)

    def response(self, w) -> np.ndarray:
        return self.block.response(w)

    def grid(self) -> np.ndarray:
        return self.block.corner_frequencies()

    def nonzero_boundary_poles(self) -> list[tuple[float, int]]:
        """Boundary poles away from zero frequency (a factor cannot declare them)."""
        return [(w0, m) for w0, m in self.block.boundary_pole_frequencies() if w0 > 1e-12]


@record(eq=False)
class ClosedLoopResponse:
    """The closed inner loop of a cascade: ``T = forward / (1 + loop)``.

    Parameters
    ----------
    forward:
        C F G of the inner loop (reference to the inner plant's output).
    loop:
        The inner open loop L = C F G H (with delays).

    The inner loop must be stable (the pipeline checks it), so ``T`` adds no
    unstable poles and no integrators. It is known up to the inner loop's
    own frequency limit (its Nyquist frequency, or the end of measured
    data).
    """

    forward: OpenLoop
    loop: OpenLoop
    unstable_poles: int = 0
    integrators: int = 0

    @property
    def w_min(self) -> float:
        return float(max([0.0] + [f.w_min for f in self.loop.factors]))

    @property
    def w_max(self) -> float:
        return self.loop.w_max

    def response(self, w) -> np.ndarray:
        w = np.asarray(w, dtype=float)
        out = np.asarray(self._ratio(w))
        bad = ~np.isfinite(out)
        if np.any(bad):
            # At a pole of L shared by the forward path (an inner integrator
            # at w = 0) the ratio is inf/inf; T is continuous there, so take
            # the limit from a point a relative 1e-9 beside it.
            wb = np.broadcast_to(w, out.shape)[bad]
            out = out.copy()
            out[bad] = self._ratio(wb + 1e-9 * np.maximum(np.abs(wb), 1.0))
        return out

    def _ratio(self, w) -> np.ndarray:
        with np.errstate(divide="ignore", invalid="ignore", over="ignore"):
            fwd = self.forward.response(w)
            lw = self.loop.response(w)
            return fwd / (1.0 + lw)

    def grid(self) -> np.ndarray:
        return self.loop.corner_frequencies()
