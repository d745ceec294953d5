"""Where a run's time went: wall-clock seconds per stage (``check --timings``).

A :class:`StageClock` adds up the time spent inside each named stage. Stages
nest: the time of an inner stage (schema validation inside loading, say) is
counted for the inner stage only, so the stages add up to the measured time
without counting any second twice. Code anywhere in the package marks a
stage with ``with stage("validation"):``; it costs nothing measurable when no
clock is recording (the usual case), because the active clock lives in a
:class:`contextvars.ContextVar` that is ``None`` then.

Imports are counted in the stage that first needs them (a cold run's numpy
import is part of "build", for example): that is where the time goes.
"""

from __future__ import annotations

import contextlib
import time
from collections.abc import Iterator
from contextvars import ContextVar

#: Stages of a check, in the order of the table (others follow in order of use).
STAGES: tuple[str, ...] = (
    "load",
    "validation",
    "cache",
    "build",
    "analysis",
    "rules",
    "report",
)

_ACTIVE: ContextVar[StageClock | None] = ContextVar("ruleguard_stage_clock", default=None)


class StageClock:
    """Seconds per stage (exclusive of the stages nested inside), and counters."""

    def __init__(self) -> None:
        self.seconds: dict[str, float] = {}
        self.counters: dict[str, int] = {}
        self._open: list[list[float]] = []  # [start, seconds of nested stages]
        self._started = time.perf_counter()

    @contextlib.contextmanager
    def stage(self, name: str) -> Iterator[None]:
        """Count the time inside the ``with`` block for ``name``."""
        frame = [time.perf_counter(), 0.0]
        self._open.append(frame)
        try:
            yield
        finally:
            self._open.pop()
            elapsed = time.perf_counter() - frame[0]
            self.seconds[name] = self.seconds.get(name, 0.0) + elapsed - frame[1]
            if self._open:
                self._open[-1][1] += elapsed

    def count(self, name: str, amount: int = 1) -> None:
        """Add ``amount`` to the counter ``name`` (cache hits, validated documents)."""
        self.counters[name] = self.counters.get(name, 0) + amount

    def elapsed(self) -> float:
        """Seconds since the clock was made."""
        return time.perf_counter() - self._started


@contextlib.contextmanager
def recording(clock: StageClock | None) -> Iterator[StageClock | None]:
    """Make ``clock`` the one :func:`stage` reports to inside the block."""
    token = _ACTIVE.set(clock)
    try:
        yield clock
    finally:
        _ACTIVE.reset(token)


def stage(name: str) -> contextlib.AbstractContextManager:
    """``with stage("build"):`` counts the block for the recording clock, if any."""
    clock = _ACTIVE.get()
    if clock is None:
        return contextlib.nullcontext()
    return clock.stage(name)


def count(name: str, amount: int = 1) -> None:
    """Add to a counter of the recording clock, if any."""
    clock = _ACTIVE.get()
    if clock is not None:
        clock.count(name, amount)


def render_table(clock: StageClock, total_s: float | None = None) -> str:
    """The ``--timings`` table: stage, seconds, share of the total.

    ``total_s`` defaults to the clock's elapsed time; the time in no stage
    (argument parsing, start-up imports after the clock started) is the row
    ``other``. Counters follow the table, one per line.
    """
    total = clock.elapsed() if total_s is None else total_s
    names = [s for s in STAGES if s in clock.seconds]
    names += [s for s in clock.seconds if s not in names]
    rows = [(name, clock.seconds[name]) for name in names]
    other = total - sum(seconds for _, seconds in rows)
    rows.append(("other", max(other, 0.0)))
    lines = ["ruleguard timings", f"  {'stage':<12}{'seconds':>9}{'share':>8}"]
    for name, seconds in rows:
        share = seconds / total if total > 0 else 0.0
        lines.append(f"  {name:<12}{seconds:9.3f}{share:8.1%}")
    lines.append(f"  {'total':<12}{total:9.3f}{1.0:8.1%}")
    for name, value in clock.counters.items():
        lines.append(f"  {name}: {value}")
    return "\n".join(lines) + "\n"
