"""The public Python API: script ruleguard in your own tests.

Two ways in:

* From a manifest, exactly as the command does::

      from ruleguard import api
      report = api.check("ruleguard.toml", as_of="2026-12-01")
      assert not report.failed, [f.rule for f in report.findings]

* A loop built in code, for a quick stability and margin verdict::

      plant = api.transfer_function([1.0], [1.0, 3.0, 2.0, 0.0])   # 1/(s(s+1)(s+2))
      result = api.analyse(api.open_loop(plant, gain=2.0))
      result.stability.stable, result.margins.gain_margin_db       # True, 9.54...

Everything returned is a frozen dataclass (:mod:`ruleguard.analysis.results`,
:mod:`ruleguard.report.model`, :class:`ruleguard.rules.base.Finding`).
"""

from __future__ import annotations

import datetime as _dt
from collections.abc import Sequence
from pathlib import Path

from ruleguard.errors import InputError, LoopNotAnalysable

__all__ = [
    "InputError",
    "LoopNotAnalysable",
    "analyse",
    "check",
    "open_loop",
    "report_as_dict",
    "transfer_function",
    "zero_pole_gain",
]


def check(
    manifest: str | Path,
    *,
    only: Sequence[str] = (),
    skip: Sequence[str] = (),
    fail_at: str = "error",
    as_of: str | _dt.date | None = None,
    changed_files: Sequence[str] = (),
):
    """Run ``ruleguard check`` on a manifest and return the :class:`~ruleguard.report.model.Report`.

    Raises :class:`~ruleguard.errors.InputError` for unreadable or invalid input.
    """
    from ruleguard.pipeline import CheckOptions, check_project
    from ruleguard.rules.base import Severity

    if isinstance(as_of, str):
        as_of = _dt.date.fromisoformat(as_of)
    options = CheckOptions(
        only=tuple(only),
        skip=tuple(skip),
        fail_at=Severity(fail_at),
        today=as_of,
        changed_files=tuple(changed_files),
        cwd=str(Path.cwd()),
    )
    return check_project(Path(manifest), options)


def report_as_dict(report) -> dict:
    """The report as the JSON document of FORMATS.md section 5 (a dict)."""
    import json

    from ruleguard.report import json_report

    return json.loads(json_report.render(report))


def transfer_function(
    numerator: Sequence[float],
    denominator: Sequence[float],
    *,
    delay_s: float = 0.0,
    sample_rate_hz: float | None = None,
):
    """A block from polynomial coefficients in descending powers of s (or z).

    The roots of the user's own polynomials are found once with
    ``numpy.roots`` (companion-matrix eigenvalues); from then on the block is
    kept in factored form.
    """
    import numpy as np

    from ruleguard.models.lti import Factored

    num = np.trim_zeros(np.asarray(numerator, dtype=float), "f")
    den = np.trim_zeros(np.asarray(denominator, dtype=float), "f")
    if den.size == 0:
        raise ValueError("the denominator is all zeros")
    if num.size == 0:
        return Factored([], np.roots(den), 0.0, delay_s, _sample_time(sample_rate_hz))
    return Factored(
        np.roots(num), np.roots(den), num[0] / den[0], delay_s, _sample_time(sample_rate_hz)
    )


def zero_pole_gain(
    zeros: Sequence[complex],
    poles: Sequence[complex],
    gain: float,
    *,
    delay_s: float = 0.0,
    sample_rate_hz: float | None = None,
):
    """A block ``gain * prod(x - zeros) / prod(x - poles)`` (leading-coefficient gain)."""
    from ruleguard.models.lti import Factored

    return Factored(zeros, poles, gain, delay_s, _sample_time(sample_rate_hz))


def open_loop(*blocks, gain: float = 1.0):
    """The open loop ``gain * blocks[0] * blocks[1] * ...`` (negative feedback)."""
    from ruleguard.analysis.openloop import OpenLoop
    from ruleguard.models.lti import Factored

    rational = None
    factors = []
    for block in blocks:
        if isinstance(block, Factored):
            rational = block if rational is None else rational * block
        else:
            factors.append(block)
    if rational is None:
        raise ValueError("open_loop() needs at least one rational block")
    return OpenLoop(rational.scaled(gain), tuple(factors))


def analyse(loop):
    """Nyquist verdict and every margin of an open loop (or of a single block as L)."""
    from ruleguard.analysis.margins import analyse_open_loop
    from ruleguard.analysis.openloop import OpenLoop
    from ruleguard.models.lti import Factored

    if isinstance(loop, Factored):
        loop = OpenLoop(loop)
    return analyse_open_loop(loop)


def _sample_time(sample_rate_hz: float | None) -> float | None:
    if sample_rate_hz is None:
        return None
    if not sample_rate_hz > 0:
        raise ValueError("sample_rate_hz must be positive")
    return 1.0 / float(sample_rate_hz)
