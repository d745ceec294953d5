"""Where the chunks of variants run: this process, a local process pool, a Dask cluster.

Every executor runs :func:`ruleguard.workunits.analyse_chunk` and hands the
outcomes back **in the order the chunks were given**, so the report is the
same byte for byte whichever executor and however many workers ran it
(docs/scaling.md).

* ``local`` with one job (or too little work, see
  :data:`PARALLEL_MIN_VARIANTS`): :class:`InlineExecutor`, in this process.
* ``local`` with ``jobs > 1``: :class:`ProcessExecutor`, a
  :class:`concurrent.futures.ProcessPoolExecutor` of ``jobs`` worker
  processes (forked where the platform allows it, so the workers start with
  the modules and the project already loaded).
* ``dask``: :class:`DaskExecutor` on Dask distributed (the optional
  ``cluster`` extra, imported only when chosen): a running scheduler at
  ``cluster_address``, else a local cluster of ``jobs`` worker processes.

At most :attr:`ChunkStream.window` chunks are in flight at once, so memory
stays bounded however many variants a loop has, and a loop that stops early
(an unstable inner loop in its nominal variant, say) submits none of its
remaining chunks.
"""

from __future__ import annotations

import dataclasses
import os
import time
from collections import deque
from collections.abc import Iterable, Iterator
from typing import Protocol

from ruleguard.errors import InputError
from ruleguard.location import Location
from ruleguard.timings import StageClock, active_clock, received, run_timed, stage
from ruleguard.workunits import VariantChunk, VariantOutcome, analyse_chunk

#: Executor names accepted by ``--executor``.
EXECUTORS = ("local", "dask")

#: A local process pool is started only when the run has at least this many
#: variants to analyse: below it the pool's start (about 0.1 s to fork, plus
#: each worker's first imports) costs more than the second core saves
#: (one variant of a cascade costs some 10-60 ms here).
PARALLEL_MIN_VARIANTS = 48

#: Chunks in flight per worker (outcomes are read in chunk order: a worker
#: that finishes ahead of a slower chunk before it still finds work queued).
WINDOW_PER_WORKER = 3


#: Batches: at least this many tasks per worker are kept (so the last ones
#: end close together), and no task holds more than ``MAX_BATCH`` variants.
TASKS_PER_WORKER, MAX_BATCH = 16, 8


def batch_size(chunk_count: int, workers: int) -> int:
    """Variants per task (at most) for a run of ``chunk_count`` chunks on ``workers``
    workers (see :class:`ChunkStream`)."""
    return max(1, min(MAX_BATCH, chunk_count // (max(workers, 1) * TASKS_PER_WORKER)))


def default_jobs() -> int:
    """The number of cores this process may run on."""
    try:
        return max(1, len(os.sched_getaffinity(0)))
    except (AttributeError, OSError):
        return max(1, os.cpu_count() or 1)


class Pending(Protocol):
    """A submitted chunk (a future)."""

    def result(self): ...

    def cancel(self): ...


class Executor(Protocol):
    """Runs chunks; ``workers`` is how many run at once."""

    workers: int

    def submit(self, chunk: VariantChunk) -> Pending: ...

    def close(self) -> None: ...


class _Done:
    """An already computed result, for :class:`InlineExecutor`."""

    def __init__(self, value) -> None:
        self._value = value

    def result(self):
        return self._value

    def cancel(self) -> bool:
        return False


class _Deferred:
    """A chunk run in this process when its result is asked for (so a loop
    that stops early costs nothing for the chunks after the stop)."""

    def __init__(self, project, chunk: VariantChunk) -> None:
        self._project = project
        self._chunk = chunk

    def result(self):
        return analyse_chunk(self._project, self._chunk)

    def cancel(self) -> bool:
        return True


class InlineExecutor:
    """Chunks run in this process, one after the other."""

    workers = 1

    def __init__(self, project) -> None:
        self._project = project

    def submit(self, chunk: VariantChunk) -> Pending:
        return _Deferred(self._project, chunk)

    def close(self) -> None:
        return None


# ------------------------------------------------------------ local process pool
_WORKER_PROJECT = None
_WORKER_JUDGING = None

#: What a chunk carries instead of the run's judging request when every
#: worker already holds it (installed with the project): the request (the
#: whole ruleset, some 7 KB pickled) then crosses to each worker once, not
#: with every chunk.
INSTALLED_JUDGING = "judging installed in the worker"


def _install_project(project, judging=None) -> None:
    """Worker initializer: keep the project (and the judging request) for
    every chunk this worker runs."""
    global _WORKER_PROJECT, _WORKER_JUDGING
    _WORKER_PROJECT = project
    _WORKER_JUDGING = judging
    _single_threaded_linear_algebra()
    from ruleguard.allocator import keep_freed_memory

    keep_freed_memory()  # a worker's allocator reuses its pages (ruleguard.allocator)


def _single_threaded_linear_algebra() -> None:
    for name in ("OPENBLAS_NUM_THREADS", "OMP_NUM_THREADS", "MKL_NUM_THREADS"):
        os.environ.setdefault(name, "1")


def _run_installed(chunk: VariantChunk) -> tuple[VariantOutcome, ...]:
    if chunk.judge == INSTALLED_JUDGING:
        chunk = dataclasses.replace(chunk, judge=_WORKER_JUDGING)
    return analyse_chunk(_WORKER_PROJECT, chunk)


class _Raised:
    """An exception a chunk of a batch raised in the worker."""

    def __init__(self, exc: BaseException) -> None:
        self.exc = exc


def _run_installed_batch(chunks: tuple[VariantChunk, ...]) -> tuple:
    """Each chunk's outcomes, or the exception it raised (``_Raised``), in order."""
    out: list = []
    for chunk in chunks:
        try:
            out.append(_run_installed(chunk))
        except Exception as exc:  # handed back, raised at this chunk's turn
            out.append(_Raised(exc))
    return tuple(out)


class _TimedPending:
    """A future of a timed task: waiting for it is the stage ``waiting``, and
    the task's timings go to the recording clock when it is read."""

    def __init__(self, future) -> None:
        self._future = future

    def result(self):
        with stage("waiting"):
            timed = self._future.result()
        return received(timed)

    def cancel(self) -> bool:
        return self._future.cancel()


def _submit_maybe_timed(submit, timing, fn, *args, **kwargs) -> Pending:
    """``submit(fn, *args, **kwargs)`` of a pool or a cluster client; when the run
    records its timings (``timing``, see :func:`_pool_timing`), the task is
    :func:`ruleguard.timings.run_timed` of ``fn`` and its future a :class:`_TimedPending`."""
    if timing is None:
        return submit(fn, *args, **kwargs)
    return _TimedPending(submit(run_timed, fn, *args, **kwargs))


def _pool_timing() -> tuple[StageClock, float] | None:
    """``(recording clock, perf_counter())`` when the run records its timings
    (a pool then times its tasks, see :func:`ruleguard.timings.run_timed`), else None."""
    clock = active_clock()
    return None if clock is None else (clock, time.perf_counter())


def _pool_closed(workers: int, timing: tuple[StageClock, float] | None) -> None:
    """Count ``workers`` processes from the pool's start until now as the pools' time."""
    if timing is not None:
        clock, started = timing
        clock.add_worker_pool(workers, time.perf_counter() - started)


def _pool_context():
    """Fork where it exists (workers inherit the loaded modules and project);
    the platform's default elsewhere."""
    import multiprocessing

    if "fork" in multiprocessing.get_all_start_methods():
        return multiprocessing.get_context("fork")
    return multiprocessing.get_context()


class ProcessExecutor:
    """A pool of ``jobs`` local worker processes.

    ``judging`` (the run's :class:`ruleguard.pipeline.LoopJudging`, if any) is
    installed in every worker with the project; a chunk that carries that
    very request is sent with :data:`INSTALLED_JUDGING` in its place. When
    the run records its timings (``check --timings``), every task is timed
    in its worker (:func:`ruleguard.timings.run_timed`).
    """

    def __init__(self, project, jobs: int, judging=None) -> None:
        from concurrent.futures import ProcessPoolExecutor

        self.workers = jobs
        self._judging = judging
        self._timing = _pool_timing()
        self._pool = ProcessPoolExecutor(
            max_workers=jobs,
            mp_context=_pool_context(),
            initializer=_install_project,
            initargs=(project, judging),
        )

    def _installed(self, chunk: VariantChunk) -> VariantChunk:
        if chunk.judge is not None and chunk.judge is self._judging:
            return dataclasses.replace(chunk, judge=INSTALLED_JUDGING)
        return chunk

    def submit(self, chunk: VariantChunk) -> Pending:
        return _submit_maybe_timed(self._pool.submit, self._timing, _run_installed,
                                   self._installed(chunk))

    def submit_batch(self, chunks: tuple[VariantChunk, ...]) -> Pending:
        """Several chunks as one task: a tuple of their outcomes (or ``_Raised``)."""
        return _submit_maybe_timed(self._pool.submit, self._timing, _run_installed_batch,
                                   tuple(map(self._installed, chunks)))

    def close(self) -> None:
        self._pool.shutdown(wait=True, cancel_futures=True)
        _pool_closed(self.workers, self._timing)


# ------------------------------------------------------------ Dask distributed
CLUSTER_EXTRA_HINT = "pip install 'ruleguard[cluster]'"


class DaskExecutor:
    """Chunks as tasks of a Dask distributed cluster.

    Parameters
    ----------
    project:
        Sent once to every worker (``Client.scatter(..., broadcast=True)``).
    jobs:
        Worker processes of the local cluster started when no address is given.
    address:
        A running scheduler (``tcp://host:8786``); ``None``: the scheduler
        named by Dask's configuration (``DASK_SCHEDULER_ADDRESS``), else a
        local cluster started here and closed after the run.
    """

    def __init__(self, project, jobs: int, address: str | None = None) -> None:
        try:
            import dask
            from distributed import Client, LocalCluster
        except ImportError as exc:
            raise InputError.at(
                Location("<command line>", None, None, "--executor"),
                f"the dask executor needs Dask distributed, which is not installed "
                f"({exc}); install the cluster extra: {CLUSTER_EXTRA_HINT}",
            ) from exc
        self._cluster = None
        self._timing = _pool_timing()
        address = address or dask.config.get("scheduler-address", None)
        if address:
            self._client = Client(address)
            self.workers = max(1, len(self._client.scheduler_info().get("workers", {})))
        else:
            self._cluster = LocalCluster(
                n_workers=jobs,
                threads_per_worker=1,  # warnings are captured per process
                processes=True,
                dashboard_address=None,
            )
            self._client = Client(self._cluster)
            self.workers = jobs
        self._project = self._client.scatter(project, broadcast=True)

    def submit(self, chunk: VariantChunk) -> Pending:
        return _submit_maybe_timed(self._client.submit, self._timing, analyse_chunk,
                                   self._project, chunk, pure=False)

    def close(self) -> None:
        self._client.close()
        if self._cluster is not None:
            self._cluster.close()
        _pool_closed(self.workers, self._timing)


def make_executor(
    project, name: str, jobs: int, variant_count: int, address: str | None = None,
    judging=None,
) -> Executor:
    """The executor for a run with ``variant_count`` variants to analyse
    (``judging``: the request the run's chunks may carry, see
    :class:`ProcessExecutor`)."""
    if name == "dask":
        return DaskExecutor(project, jobs, address)
    if name != "local":
        raise InputError.at(
            Location("<command line>", None, None, "--executor"),
            f"unknown executor {name!r}; choose one of {', '.join(EXECUTORS)}",
        )
    if variant_count >= PARALLEL_MIN_VARIANTS:
        if jobs > 1:
            return ProcessExecutor(project, jobs, judging)
        from ruleguard.allocator import tune_if_owned

        tune_if_owned()  # many variants analysed here (ruleguard.allocator)
    return InlineExecutor(project)


class ChunkStream:
    """Chunks submitted a window at a time, their outcomes read back in order.

    ``stop_loop(name)`` drops the chunks of a loop not yet handed out (and
    cancels those in flight) once the caller knows the loop has stopped.

    With ``batch`` > 1 and an executor that has ``submit_batch``,
    consecutive chunks of at most ``batch`` variants in all go to a worker
    as one task (a larger chunk goes alone): a task's round
    trip (pickling, the pipes, the pool's threads) costs about 0.4 ms of a
    worker's time here, a tenth of a one-variant loop of order 10. The
    outcomes come back in the same order, so the result is unchanged. A
    batch is cancelled only when every loop in it has stopped; the chunks
    of a stopped loop in a batch still running are dropped when they arrive.
    """

    def __init__(self, executor: Executor, chunks: Iterable[VariantChunk],
                 batch: int = 1) -> None:
        self._executor = executor
        self._chunks = iter(chunks)
        self._pending: deque = deque()
        self._stopped: set[str] = set()
        self.window = max(1, executor.workers * WINDOW_PER_WORKER)
        self.batch = max(1, batch) if hasattr(executor, "submit_batch") else 1
        self._held: VariantChunk | None = None  # read ahead, not yet submitted

    def _next_chunk(self) -> VariantChunk | None:
        if self._held is not None:
            chunk, self._held = self._held, None
            if chunk.loop not in self._stopped:
                return chunk
        for chunk in self._chunks:
            if chunk.loop not in self._stopped:
                return chunk
        return None

    def _group(self, first: VariantChunk) -> tuple[VariantChunk, ...]:
        """``first`` and the chunks after it, up to ``batch`` variants in all."""
        group, size = [first], len(first.variants)
        while size < self.batch:
            chunk = self._next_chunk()
            if chunk is None:
                break
            if size + len(chunk.variants) > self.batch:
                self._held = chunk  # starts the next task
                break
            group.append(chunk)
            size += len(chunk.variants)
        return tuple(group)

    def _fill(self) -> None:
        while len(self._pending) < self.window:
            chunk = self._next_chunk()
            if chunk is None:
                return
            if self.batch == 1:
                self._pending.append(((chunk,), self._executor.submit(chunk)))
            else:
                group = self._group(chunk)
                self._pending.append((group, self._executor.submit_batch(group)))

    def __iter__(self) -> Iterator[tuple[VariantChunk, tuple[VariantOutcome, ...]]]:
        self._fill()
        while self._pending:
            group, pending = self._pending.popleft()
            if all(chunk.loop in self._stopped for chunk in group):
                pending.cancel()
                self._fill()
                continue
            found = pending.result()
            self._fill()
            for chunk, outcomes in zip(group, found if self.batch > 1 else (found,),
                                       strict=True):
                if chunk.loop in self._stopped:
                    continue
                if isinstance(outcomes, _Raised):
                    raise outcomes.exc
                yield chunk, outcomes

    def stop_loop(self, name: str) -> None:
        self._stopped.add(name)
