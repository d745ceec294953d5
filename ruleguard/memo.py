"""Per-process memos of pure computations, keyed by exact content.

A cascade builds and analyses its inner loops again in every variant of every
outer loop, and the variants of a family share most of their blocks: the same
zero-order-hold equivalent or open-loop analysis is asked for many times in
one process. :func:`remembered` computes such a value once per key and hands
the same (frozen) object to every later caller.

The key must say everything the value depends on (the callers build it from
the exact bytes of the inputs: equal keys, equal results bit for bit). The
warnings the first computation raised are raised again at every use, so a
variant's numerical notes are what they would be without the memo; a
computation that fails is not kept (it fails again, with its warnings, on the
next use). The table keeps at most ``limit`` entries, dropping the least
recently used.
"""

from __future__ import annotations

import warnings
from collections.abc import Callable, Hashable
from typing import Any, TypeVar

__all__ = ["remembered"]

V = TypeVar("V")


def remembered(table: dict, limit: int, key: Hashable, compute: Callable[..., V],
               *args: Any) -> V:
    """``compute(*args)``, done once per ``key`` while ``table`` remembers it.

    Parameters
    ----------
    table:
        The memo (a plain dict, most recently used last); module-level in the
        caller, so it lives as long as the process.
    limit:
        Most entries kept.
    key:
        Exact content key of the arguments.
    compute, args:
        The pure computation.
    """
    done = table.pop(key, None)
    if done is None:
        failure = None
        with warnings.catch_warnings(record=True) as raised:
            warnings.simplefilter("always")
            try:
                value = compute(*args)
            except Exception as exc:  # raised again after its warnings
                failure = exc
        said = tuple((w.message, w.category) for w in raised)
        if failure is not None:
            _warn_again(said)
            raise failure
        done = (value, said)
        while len(table) >= limit > 0:
            del table[next(iter(table))]
    table[key] = done
    _warn_again(done[1])
    return done[0]


def _warn_again(said: tuple) -> None:
    for message, category in said:
        warnings.warn(message, category, stacklevel=3)
