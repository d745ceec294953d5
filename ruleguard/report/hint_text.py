"""How a finding's fix hint reads for people (text, Markdown, HTML, SARIF message).

The hint itself (:class:`ruleguard.rules.hints.FixHint`) is data; the JSON
report carries its numbers. ruleguard never edits an input: every sentence
here is a suggestion for the engineer.
"""

from __future__ import annotations

from typing import TYPE_CHECKING

from ruleguard.report.units import hertz, number, seconds

if TYPE_CHECKING:
    from ruleguard.rules.hints import FixHint

#: What a gain factor scales, in words.
GAIN_WORDS = "the controller gain (kp, ki and kd together)"


def _db(value: float | None) -> str:
    return "-∞" if value is None else f"{'+' if value > 0 else ''}{number(value)}"


def hint_sentences(hint: FixHint | None) -> list[str]:
    """The hint as short sentences (empty without a hint)."""
    if hint is None:
        return []
    out = []
    rules = ", ".join(hint.rules) if hint.rules else "the closed-loop stability check"
    if hint.gain_factor_range is None:
        out.append(f"no change of {GAIN_WORDS} alone makes every variant stable and pass "
                   f"{rules}")
    else:
        low, high = hint.gain_factor_range
        db_low, db_high = hint.gain_change_db_range
        if high is None:
            span = f"by at least {number(low)} ({_db(db_low)} dB)"
        elif low <= 0:
            span = f"by at most {number(high)} ({_db(db_high)} dB)"
        else:
            span = f"by {number(low)} to {number(high)} ({_db(db_low)} to {_db(db_high)} dB)"
        check = ("confirmed by re-analysis" if hint.confirmed
                 else "not confirmed by re-analysis: check before use")
        out.append(f"scale {GAIN_WORDS} {span}, e.g. x{number(hint.suggested_gain_factor)}: "
                   f"then every variant is stable and passes {rules} ({check})")
    if hint.max_extra_delay_s is not None:
        if hint.max_extra_delay_s >= 0:
            out.append(f"this rule alone tolerates {seconds(hint.max_extra_delay_s)} "
                       "more loop delay")
        else:
            out.append(f"or remove at least {seconds(-hint.max_extra_delay_s)} of loop delay "
                       "(computation latency, sensor filtering)")
    if hint.crossover_hz_at_most is not None:
        out.append(f"or bring the gain crossover below {hertz(hint.crossover_hz_at_most)}")
    return out


def hint_line(hint: FixHint | None) -> str:
    """The hint in one line (``""`` without a hint)."""
    return "; ".join(hint_sentences(hint))
