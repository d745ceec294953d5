"""The one Report object every output format reads.

Built once by :mod:`ruleguard.pipeline` from the analysed loops and the
findings; each reporter (:mod:`ruleguard.report.json_report`, ``text``,
``sarif``, ``junit``, ``markdown``, ``html``) renders it and nothing else.
"""

from __future__ import annotations

from dataclasses import field

from ruleguard.analysis.results import LoopAnalysis
from ruleguard.frozen import record
from ruleguard.rules.base import Finding, Severity


@record
class VariantResult:
    id: str
    parameters: dict
    analysis: LoopAnalysis


@record(eq=False)
class ResponseCurve:
    """Samples of the open-loop frequency response L of one variant, for plots.

    Filled only when asked (``CheckOptions.want_curves``, set by
    ``--format html``); never cached and never in the JSON report.

    Attributes
    ----------
    variant:
        The variant id.
    role:
        Why it is plotted: ``"nominal"``, ``"unstable"`` (the first unstable
        variant) or ``"closest to -1"`` (the largest sensitivity peak).
    frequency_hz:
        Increasing frequencies (Hz).
    open_loop:
        L at those frequencies (complex; may hold non-finite values at
        boundary poles).
    """

    variant: str
    role: str
    frequency_hz: tuple[float, ...]
    open_loop: tuple[complex, ...]


@record
class LoopResult:
    """FORMATS.md section 5, ``loops[]``."""

    name: str
    domain: str  # "continuous" | "discrete"
    sample_rate_hz: float | None
    analysed: bool
    discretization: dict | None
    total_delay_s: float | None
    notes: tuple[str, ...]
    variants: tuple[VariantResult, ...]
    not_analysed_reason: str | None = None
    tags: tuple[str, ...] = ()
    #: Frequency-response samples for plots (empty unless asked for).
    curves: tuple[ResponseCurve, ...] = ()


@record
class RuleInfo:
    """What reporters show about a rule (SARIF ``tool.driver.rules``, text legends)."""

    id: str
    summary: str
    explanation: str
    default_severity: str


@record
class Report:
    tool_version: str
    project_name: str
    manifest_file: str
    root: str
    loops: tuple[LoopResult, ...]
    findings: tuple[Finding, ...]
    rules: tuple[RuleInfo, ...] = ()
    ruleset_name: str = ""
    texts: dict = field(default_factory=dict)  # file -> text, for source excerpts
    fail_at: Severity = Severity.ERROR
    #: Ids of the rules evaluated (the ruleset's active rules after
    #: ``--only``/``--skip``); ``None``: every rule of ``rules``. JUnit makes
    #: one test case per loop and active rule.
    active_rules: tuple[str, ...] | None = None
    #: The date waiver expiry was judged at (ISO ``YYYY-MM-DD``), when known.
    waivers_as_of: str | None = None

    @property
    def evaluations(self) -> int:
        return sum(len(lp.variants) for lp in self.loops)

    def count(self, severity: Severity) -> int:
        return sum(1 for f in self.findings if not f.waived and f.severity == severity)

    @property
    def waived(self) -> int:
        return sum(1 for f in self.findings if f.waived)

    @property
    def failed(self) -> bool:
        """True when an unwaived finding is at or above ``fail_at``."""
        return any(
            not f.waived and f.severity.rank >= self.fail_at.rank for f in self.findings
        )
