"""Rule ``sampling.rate``: the sample rate against the closed-loop bandwidth.

A sampled loop should sample its closed-loop bandwidth many times over: the
common rule of thumb is 10 to 30 samples per period of the bandwidth
frequency (Franklin, Powell & Workman; Åström & Wittenmark), 10 being the
usual minimum. Below that the hold and the computation delay eat the
margins the continuous design had, and the step response looks staircase.

References
----------
G. F. Franklin, J. D. Powell and M. L. Workman, *Digital Control of Dynamic
Systems*, 3rd ed., Addison-Wesley, 1998 (sample rate 20 to 40 times the
bandwidth for smooth response; from memory).
K. J. Åström and B. Wittenmark, *Computer-Controlled Systems*, 3rd ed., 1997
(about 4 to 10 samples per rise time; from memory).
"""

from __future__ import annotations

import math
from collections.abc import Iterable, Mapping
from operator import itemgetter
from typing import Any

from ruleguard.rules.base import LoopContext, Severity, Violation
from ruleguard.rules.evidence import (
    format_number,
    note,
    param,
    split_stable,
    unanalysed_notes,
    unstable_note,
    variant_id,
)
from ruleguard.rules.limits import beyond_limit
from ruleguard.rules.locations import controller_location, key, loop_location
from ruleguard.rules.spec import Parameter, RuleSpec


def sampling_rate(ctx: LoopContext, params: Mapping[str, Any]) -> Iterable[Violation]:
    """``sample_rate_hz >= min_ratio * bandwidth_hz`` in every stable variant."""
    rate = ctx.spec.sample_rate_hz
    if rate is None:
        return []  # a continuous loop: nothing is sampled
    rate = float(rate)
    min_ratio = float(param(params, "min_ratio", 10.0))
    where = loop_location(ctx, "sample_rate_hz")
    base = key(ctx.spec.location.key, "sample_rate_hz")
    if not ctx.evaluations:
        return unanalysed_notes(ctx, "sample rate against bandwidth", key_path=base)
    stable, unstable = split_stable(ctx)
    out = unstable_note(unstable, "sample rate against bandwidth", where, key_path=base)
    readings = []  # (ratio, evaluation, bandwidth_hz, is_lower_bound)
    undetermined = []
    for ev in stable:
        bw = ev.analysis.margins.bandwidth_hz
        lower_bound = False
        if bw is None:
            # |T| stays within 3 dB of |T(0)| over the whole analysed range: the
            # bandwidth is at least the top of that range (Nyquist or end of data).
            top = ev.model.open_loop.w_max
            if not math.isfinite(top):
                undetermined.append(ev)
                continue
            bw = top / (2.0 * math.pi)
            lower_bound = True
        if bw <= 0:
            undetermined.append(ev)
            continue
        ratio = rate / bw
        if lower_bound and ratio >= min_ratio:
            undetermined.append(ev)  # an upper bound on the ratio that passes proves nothing
            continue
        readings.append((ratio, ev, bw, lower_bound))
    if undetermined:
        out.append(
            note(
                "sample rate not compared with the bandwidth in variant "
                f"{variant_id(undetermined[0])}: the closed-loop bandwidth was not determined",
                where,
                key_path=key(base, "unknown"),
                variant=variant_id(undetermined[0]),
            )
        )
    _, worst = beyond_limit(readings, itemgetter(0), min_ratio, side="below")
    if worst is not None:
        ratio, ev, bw, lower_bound = worst
        at_least = "at least " if lower_bound else ""
        out.append(
            Violation(
                variant=variant_id(ev),
                message=(
                    f"sample rate {format_number(rate)} Hz is {'at most ' if lower_bound else ''}"
                    f"{ratio:.3g} times the closed-loop bandwidth "
                    f"({at_least}{format_number(bw)} Hz); "
                    f"at least {format_number(min_ratio)} times is required "
                    f"({format_number(min_ratio * bw)} Hz)"
                ),
                measured=ratio,
                limit=min_ratio,
                unit="ratio",
                frequency_hz=bw,
                location=where,
                related=(controller_location(ctx),),
                key_path=base,
            )
        )
    return out


RULES: tuple[RuleSpec, ...] = (
    RuleSpec(
        id="sampling.rate",
        default_severity=Severity.WARNING,
        summary="Sample rate at least min_ratio times the closed-loop bandwidth.",
        explanation=(
            "For every closed-loop stable variant of a sampled loop, divides the loop's "
            "`sample_rate_hz` by the closed-loop -3 dB bandwidth and requires at least "
            "`min_ratio` (10 by default). When |T| never falls 3 dB within the analysed "
            "range the bandwidth is at least the top of that range (the Nyquist "
            "frequency), which already fails any ratio above 2. Continuous loops are not "
            "checked.\n\n"
            "Why it matters: a loop sampled only a few times per bandwidth period loses "
            "phase to the hold (w*h/2) and to the computation delay (w*h per sample), "
            "responds in visible steps and is sensitive to the timing jitter of the "
            "firmware.\n\n"
            "How to fix it: run the loop faster (raise `sample_rate_hz` in the manifest "
            "and the firmware's task rate), or lower the loop's bandwidth."
        ),
        source=(
            "min_ratio 10: common practice (10 to 30 samples per bandwidth period; "
            "Franklin, Powell & Workman, Digital Control of Dynamic Systems, 3rd ed., "
            "1998, and Åström & Wittenmark, Computer-Controlled Systems, 3rd ed., 1997, "
            "from memory)"
        ),
        parameters=(
            Parameter(
                "min_ratio", "number", None, 10.0, "sample rate / closed-loop bandwidth, at least"
            ),
        ),
        function=sampling_rate,
    ),
)
