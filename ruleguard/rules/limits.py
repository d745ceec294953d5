"""Measured values against a rule's limits: the failing ones and the worst.

A rule reports one finding per limit and loop, for the worst variant, and
says how many variants fail (RULES.md). :func:`beyond_limit` picks those out
of any readings; :func:`frequency_range` is the minimum/maximum check of a
frequency (crossover, bandwidth) on the loop's controller table.
"""

from __future__ import annotations

from collections.abc import Callable, Iterable, Sequence
from operator import itemgetter
from typing import Literal, TypeVar

from ruleguard.rules.base import Evaluation, LoopContext, Violation
from ruleguard.rules.evidence import format_number, variant_id
from ruleguard.rules.locations import controller_location, key

T = TypeVar("T")


def beyond_limit(
    items: Iterable[T],
    value_of: Callable[[T], float | None],
    limit: float,
    *,
    side: Literal["below", "above"],
) -> tuple[list[T], T | None]:
    """The items whose value lies beyond ``limit``, and the worst of them.

    Parameters
    ----------
    items:
        Readings in report order (evaluations, or tuples built from them).
    value_of:
        The value of an item; items without one (``None``) are not judged.
    limit:
        The bound.
    side:
        ``"below"``: a value under ``limit`` fails and the smallest is the
        worst; ``"above"``: a value over ``limit`` fails, the largest is the
        worst. Ties go to the first item.

    Returns
    -------
    (failing, worst)
        ``worst`` is ``None`` when nothing fails.
    """
    if side == "below":
        failing = [it for it in items if (v := value_of(it)) is not None and v < limit]
        return failing, (min(failing, key=value_of) if failing else None)
    failing = [it for it in items if (v := value_of(it)) is not None and v > limit]
    return failing, (max(failing, key=value_of) if failing else None)


def frequency_range(
    ctx: LoopContext,
    spans: Sequence[tuple[Evaluation, float, float]],
    *,
    what: str,
    min_hz: float | None,
    max_hz: float | None,
    key_path: str,
) -> list[Violation]:
    """Lowest frequency at least ``min_hz``, highest at most ``max_hz``, over all variants.

    Parameters
    ----------
    ctx:
        The loop; violations point at its controller table.
    spans:
        ``(evaluation, lowest_hz, highest_hz)`` of every judged variant.
    what:
        The quantity as messages name it (``"gain crossover"``).
    min_hz, max_hz:
        The limits; ``None`` is not checked.
    key_path:
        The rule's key; the violations get ``.min`` and ``.max`` appended.
    """
    out: list[Violation] = []
    checks = (
        (min_hz, "below", 1, "below the minimum", "min"),
        (max_hz, "above", 2, "above the maximum", "max"),
    )
    for bound, side, index, relation, aspect in checks:
        if bound is None:
            continue
        _, worst = beyond_limit(spans, itemgetter(index), float(bound), side=side)
        if worst is None:
            continue
        value = worst[index]
        out.append(
            Violation(
                variant=variant_id(worst[0]),
                message=f"{what} {format_number(value)} Hz is {relation} "
                f"{format_number(bound)} Hz",
                measured=value,
                limit=float(bound),
                unit="Hz",
                frequency_hz=value,
                location=controller_location(ctx),
                key_path=key(key_path, aspect),
            )
        )
    return out
