"""ruleguard.timings: stage seconds, the worker processes' time, the ``--timings`` tables.

The checks are sums and counts of seconds the tests themselves hand to the
clock, so every expected figure below is the arithmetic of its inputs.
"""

from __future__ import annotations

import pickle

import pytest

from ruleguard import timings
from ruleguard.timings import StageClock, TimedValue, received, recording, run_timed


def tables(text: str) -> list[dict[str, tuple[float, float]]]:
    """Each table of a ``--timings`` text: stage -> (seconds, share in %)."""
    out: list[dict[str, tuple[float, float]]] = []
    for line in text.splitlines():
        if line.startswith("ruleguard timings"):
            out.append({})
            continue
        parts = line.split()
        if line.startswith("  ") and len(parts) == 3 and parts[2].endswith("%"):
            out[-1][parts[0]] = (float(parts[1]), float(parts[2][:-1]))
    return out


def test_stages_nest_without_counting_twice():
    clock = StageClock()
    with recording(clock):
        with timings.stage("load"):
            with timings.stage("validation"):
                pass
    assert set(clock.seconds) == {"load", "validation"}
    assert clock.workers is None  # no worker ran: no second table
    assert tables(timings.render_table(clock, total_s=1.0))[0].keys() == {
        "load", "validation", "other", "total"}


def test_worker_tasks_add_up_with_the_pools_time():
    clock = StageClock()
    clock.seconds = {"load": 0.25, "waiting": 0.5}
    clock.add_worker_task({"build": 0.25, "analysis": 0.5}, busy_s=1.0)
    clock.add_worker_task({"analysis": 0.25, "rules": 0.5}, busy_s=1.0)
    clock.add_worker_pool(2, span_s=1.5)  # two workers for 1.5 s: 3 s of worker time
    main, workers = tables(timings.render_table(clock, total_s=1.0))
    assert main["load"] == (0.25, 25.0)
    assert main["waiting"] == (0.5, 50.0)
    assert main["other"] == (0.25, 25.0)
    # tasks: 2 s, of which 1.5 s in stages; the pool had 3 s
    assert workers == {
        "build": (0.25, pytest.approx(8.3)),
        "analysis": (0.75, 25.0),
        "rules": (0.5, pytest.approx(16.7)),
        "other": (0.5, pytest.approx(16.7)),
        "idle": (1.0, pytest.approx(33.3)),
        "total": (3.0, 100.0),
    }
    text = timings.render_table(clock, total_s=1.0)
    assert "of the 2 worker processes" in text and "2 tasks" in text


def test_worker_total_never_below_what_the_tasks_took():
    # a scheduler elsewhere may report fewer workers than ran: idle is never negative
    clock = StageClock()
    clock.add_worker_task({"analysis": 2.0}, busy_s=2.5)
    clock.add_worker_pool(1, span_s=1.0)
    _, workers = tables(timings.render_table(clock, total_s=3.0))
    assert workers["idle"][0] == 0.0
    assert workers["total"][0] == 2.5


def test_a_timed_task_carries_its_stages_across_pickle():
    def task(n):
        with timings.stage("analysis"):
            return sum(range(n))

    timed = run_timed(task, 1000)
    assert timed.value == 499500
    assert set(timed.seconds) == {"analysis"}
    assert timed.busy_s >= timed.seconds["analysis"] >= 0.0
    back = pickle.loads(pickle.dumps(timed))
    assert isinstance(back, TimedValue)
    assert (back.value, back.seconds, back.busy_s) == (timed.value, timed.seconds, timed.busy_s)


def test_a_received_task_goes_to_the_recording_clock_only():
    timed = TimedValue("outcomes", {"build": 0.5}, 0.75)
    assert received(timed) == "outcomes"  # nothing records: the value only
    clock = StageClock()
    with recording(clock):
        assert received(timed) == "outcomes"
        assert timings.active_clock() is clock
    assert timings.active_clock() is None
    assert clock.workers.tasks == 1
    assert clock.workers.seconds == {"build": 0.5}
    assert clock.workers.busy_s == 0.75
