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

Chunks that run in worker processes (``--jobs``, ``--executor dask``) are
timed there by :func:`run_timed` when the run is recording: each task's
stage seconds and its own length come back with its outcomes and are added
up in :class:`WorkerTimes`, beside the worker time the pool had (workers
times its wall-clock span), so the table can say how the workers spent it.
In this process the wait for their results is the stage ``waiting``.
"""

from __future__ import annotations

import contextlib
import time
from collections.abc import Callable, Iterator
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
    "waiting",
)

_ACTIVE: ContextVar[StageClock | None] = ContextVar("ruleguard_stage_clock", default=None)


class WorkerTimes:
    """Seconds of the worker processes of a run, added up over their tasks.

    ``available_s``: what the pools had, workers times each pool's
    wall-clock span (start to shutdown); ``busy_s``: the tasks' own lengths
    in the workers; ``seconds``: the stages inside those tasks. (A plain
    class: ``@dataclass`` would add about 1 ms to every check's start-up.)
    """

    def __init__(self) -> None:
        self.workers = 0
        self.available_s = 0.0
        self.busy_s = 0.0
        self.tasks = 0
        self.seconds: dict[str, float] = {}


class StageClock:
    """Seconds per stage (exclusive of the stages nested inside), and counters."""

    def __init__(self) -> None:
        self.seconds: dict[str, float] = {}
        self.counters: dict[str, int] = {}
        #: the worker processes' time, when chunks ran in some (else None)
        self.workers: WorkerTimes | None = None
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

    def _worker_times(self) -> WorkerTimes:
        if self.workers is None:
            self.workers = WorkerTimes()
        return self.workers

    def add_worker_task(self, seconds: dict[str, float], busy_s: float) -> None:
        """One task that ran in a worker: its stage ``seconds`` and its length."""
        times = self._worker_times()
        times.tasks += 1
        times.busy_s += busy_s
        for name, value in seconds.items():
            times.seconds[name] = times.seconds.get(name, 0.0) + value

    def add_worker_pool(self, workers: int, span_s: float) -> None:
        """A pool of ``workers`` processes that was there for ``span_s`` seconds."""
        times = self._worker_times()
        times.workers = max(times.workers, workers)
        times.available_s += workers * span_s


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


def active_clock() -> StageClock | None:
    """The clock recording in this context, if any (executors ask before timing workers)."""
    return _ACTIVE.get()


class TimedValue:
    """What a timed task hands back: its value, its stage seconds, its length
    (pickled by its slots)."""

    __slots__ = ("value", "seconds", "busy_s")

    def __init__(self, value, seconds: dict[str, float], busy_s: float) -> None:
        self.value = value
        self.seconds = seconds
        self.busy_s = busy_s


def run_timed(fn: Callable, *args) -> TimedValue:
    """``fn(*args)`` under a clock of its own (in a worker process), with its timings."""
    clock = StageClock()
    with recording(clock):
        value = fn(*args)
    return TimedValue(value, dict(clock.seconds), clock.elapsed())


def received(timed: TimedValue):
    """The value of a timed task, its timings added to the recording clock."""
    clock = _ACTIVE.get()
    if clock is not None:
        clock.add_worker_task(timed.seconds, timed.busy_s)
    return timed.value


def count(name: str, amount: int = 1) -> None:
    """Add to a counter of the recording clock, if any."""
    clock = _ACTIVE.get()
    if clock is not None:
        clock.count(name, amount)


def render_table(clock: StageClock, total_s: float | None = None) -> str:
    """The ``--timings`` table: stage, seconds, share of the total.

    ``total_s`` defaults to the clock's elapsed time; the time in no stage
    (argument parsing, start-up imports after the clock started) is the row
    ``other``. When chunks ran in worker processes, a second table follows
    with the workers' time: their stages, ``other`` (in a task, outside any
    stage), ``idle`` (the rest of the time the pools had: start, pickling
    and pipes, no work queued) and ``total`` (workers times the pools'
    spans). Counters follow, one per line.
    """
    total = clock.elapsed() if total_s is None else total_s
    rows = _in_order(clock.seconds)
    other = total - sum(seconds for _, seconds in rows)
    rows.append(("other", max(other, 0.0)))
    lines = ["ruleguard timings", *_rows(rows, total)]
    times = clock.workers
    if times is not None:
        worker_rows = _in_order(times.seconds)
        in_stages = sum(seconds for _, seconds in worker_rows)
        worker_rows.append(("other", max(times.busy_s - in_stages, 0.0)))
        worker_total = max(times.available_s, times.busy_s, in_stages)
        worker_rows.append(("idle", worker_total - max(times.busy_s, in_stages)))
        plural = "process" if times.workers == 1 else "processes"
        lines.append(f"ruleguard timings of the {times.workers} worker {plural} "
                     f"(seconds of worker time, {times.tasks} tasks)")
        lines += _rows(worker_rows, worker_total)
    for name, value in clock.counters.items():
        lines.append(f"  {name}: {value}")
    return "\n".join(lines) + "\n"


def _in_order(seconds: dict[str, float]) -> list[tuple[str, float]]:
    """``(stage, seconds)`` in the order of :data:`STAGES`, other stages after, in order of use."""
    names = [s for s in STAGES if s in seconds]
    names += [s for s in seconds if s not in names]
    return [(name, seconds[name]) for name in names]


def _rows(rows: list[tuple[str, float]], total: float) -> list[str]:
    """The heading, a line per ``(stage, seconds)`` with its share of ``total``, the total."""
    lines = [f"  {'stage':<12}{'seconds':>9}{'share':>8}"]
    for name, seconds in rows:
        share = seconds / total if total > 0 else 0.0
        lines.append(f"  {name:<12}{seconds:9.3f}{share:8.1%}")
    lines.append(f"  {'total':<12}{total:9.3f}{1.0:8.1%}")
    return lines
