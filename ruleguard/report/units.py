"""How numbers with units read in the reports for people (text, Markdown).

Four significant figures, no exponent between 0.001 and 10^6, seconds scaled
to ms or µs. Machine formats (JSON, SARIF, JUnit properties) keep full floats.
"""

from __future__ import annotations

import math
from typing import TYPE_CHECKING

if TYPE_CHECKING:
    from ruleguard.rules.base import Finding


def number(value: float | None, digits: int = 4) -> str:
    """``value`` to ``digits`` significant figures, trailing zeros dropped."""
    if value is None:
        return "-"
    if isinstance(value, bool):
        return str(value).lower()
    if isinstance(value, int):
        return str(value)
    if math.isnan(value):
        return "nan"
    if math.isinf(value):
        return "∞" if value > 0 else "-∞"
    if value == 0:
        return "0"
    magnitude = abs(value)
    if 1e-3 <= magnitude < 1e6:
        decimals = max(0, digits - 1 - math.floor(math.log10(magnitude)))
        text = f"{value:.{decimals}f}"
        if "." in text:
            text = text.rstrip("0").rstrip(".")
        return text
    return f"{value:.{digits - 1}e}"


def seconds(value: float | None) -> str:
    """A duration in s, ms or µs."""
    if value is None:
        return "-"
    magnitude = abs(value)
    if magnitude == 0 or magnitude >= 1 or not math.isfinite(value):
        return f"{number(value)} s"
    if magnitude >= 1e-3:
        return f"{number(value * 1e3)} ms"
    return f"{number(value * 1e6)} µs"


def quantity(value: float | None, unit: str | None) -> str:
    """``value`` followed by its unit (``s`` scaled, ``deg`` and ``dB`` as written)."""
    if value is None:
        return "-"
    if unit == "s":
        return seconds(value)
    if not unit:
        return number(value)
    if unit == "ratio":
        return f"{number(value)}×"
    return f"{number(value)} {unit}"


def hertz(value: float | None) -> str:
    return quantity(value, "Hz")


def finding_figures(finding: Finding) -> list[str]:
    """``["measured 3.52 dB", "limit 6 dB", "at 0.2251 Hz"]``: the figures a finding has."""
    figures = []
    if finding.measured is not None:
        figures.append(f"measured {quantity(finding.measured, finding.unit)}")
    if finding.limit is not None:
        figures.append(f"limit {quantity(finding.limit, finding.unit)}")
    if finding.frequency_hz is not None:
        figures.append(f"at {hertz(finding.frequency_hz)}")
    return figures
