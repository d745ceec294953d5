"""How the C allocator of a process that analyses many loops reuses freed memory.

An analysis makes short-lived arrays of 0.1-2 MB: L on the 3,204
frequencies of a resonance grid has a stacked array of 0.5 MB and two
temporaries of that size. glibc serves blocks above its mmap threshold
(128 KB at first) with fresh mappings and hands the memory of the
heap's top back above its trim threshold; every page of the next such
array is then a new page fault, filled with zeros by the kernel. The
threshold adapts: it rises to the size of a freed mapped block
(``mallopt(3)``, "dynamic mmap threshold"). A worker forked from
ruleguard's parent process, which only loads files, starts at the low
settings.

Measured here (2026-12-04, 2 cores) in the two workers of
``benchmarks/bench_vs_grid.py --timings`` (300 loops, three alternating
runs each): the rules stage, whose resonance grids make these
evaluations, took 0.28-0.31 s of worker time, and 0.24-0.26 s with the
settings below; ``ruleguard check --format json --no-cache`` of that
project, 11 alternating fresh runs, medians: 0.831 s against 0.803 s,
reports identical.

:func:`keep_freed_memory` sets the thresholds within the range glibc's
own adaptation uses (up to 32 MB on 64-bit systems): blocks up to
:data:`MMAP_THRESHOLD_BYTES` come from the heap, and up to
:data:`TRIM_THRESHOLD_BYTES` of free memory at its top is kept for reuse.
Only where memory comes from changes, not a bit of any number; a process
may keep up to ``TRIM_THRESHOLD_BYTES`` more resident than it uses.

A single process makes the same arrays when it analyses the loops
itself (``--jobs 1``, or one core): the same check at ``--jobs 1``, 11
alternating fresh runs, medians, took 1.139 s before and 1.118 s with the
settings made once the loops are loaded, as the command now makes them.

So the settings are made in processes that ruleguard owns and that
analyse many loops: the local pool's workers (processes ruleguard starts
and ends), and the ``ruleguard`` command's own process (it calls
:func:`claim_process`) when it analyses at least as many variants itself
as would start a pool (``executors.PARALLEL_MIN_VARIANTS``; a hook run on
a few loops does not pay the 1.7 ms of ``import ctypes`` and the call). A program that
calls :func:`ruleguard.cli.run` keeps its allocator as it is, and so do
Dask's workers. Elsewhere than glibc (macOS, musl) nothing changes.
``RULEGUARD_ALLOCATOR=system`` in the environment leaves the allocator
alone.

References
----------
``mallopt(3)``, Linux man-pages: ``M_MMAP_THRESHOLD``, ``M_TRIM_THRESHOLD``.
The GNU C Library Reference Manual, section "Malloc Tunable Parameters".
"""

from __future__ import annotations

import os

#: Blocks up to this size come from the heap, not from a fresh mapping.
MMAP_THRESHOLD_BYTES = 8 << 20
#: Free memory at the heap's top kept for reuse (not handed back) up to this size.
TRIM_THRESHOLD_BYTES = 32 << 20

#: ``mallopt`` parameter numbers (glibc's ``<malloc.h>``).
_M_TRIM_THRESHOLD, _M_MMAP_THRESHOLD = -1, -3

#: The environment variable that turns the tuning off (value ``system``).
OPT_OUT_VARIABLE = "RULEGUARD_ALLOCATOR"

#: Whether this process's allocator was tuned (``None``: not tried yet).
_TUNED: list[bool | None] = [None]
#: Whether this process is the ``ruleguard`` command's own (:func:`claim_process`).
_OWNED = [False]


def claim_process() -> None:
    """Mark this process as the ``ruleguard`` command's own (``ruleguard.cli.console``):
    :func:`tune_if_owned` may then tune it."""
    _OWNED[0] = True


def tune_if_owned() -> bool:
    """:func:`keep_freed_memory` in the ``ruleguard`` command's own process; elsewhere
    (a program calling :func:`ruleguard.cli.run`) nothing, and ``False``."""
    return keep_freed_memory() if _OWNED[0] else False


def keep_freed_memory() -> bool:
    """Set glibc's mmap and trim thresholds as described above (once per process).

    Returns whether the settings are in effect: ``False`` on another C
    library, when ``mallopt`` refuses a value, or when the user opted out.
    """
    if _TUNED[0] is not None:
        return _TUNED[0]
    _TUNED[0] = False
    if os.environ.get(OPT_OUT_VARIABLE, "").strip().lower() == "system":
        return False
    try:
        if not os.confstr("CS_GNU_LIBC_VERSION"):
            return False
    except (AttributeError, ValueError, OSError):
        return False
    try:
        import ctypes

        mallopt = ctypes.CDLL(None).mallopt
        mallopt.argtypes = (ctypes.c_int, ctypes.c_int)
        mallopt.restype = ctypes.c_int
        ok = (mallopt(_M_MMAP_THRESHOLD, MMAP_THRESHOLD_BYTES) == 1
              and mallopt(_M_TRIM_THRESHOLD, TRIM_THRESHOLD_BYTES) == 1)
    except (OSError, AttributeError, ImportError):
        return False
    _TUNED[0] = ok
    return ok
