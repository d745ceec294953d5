"""The pre-release audit report (``--format html``): one self-contained page.

No script, no network, no external font or style sheet: the style is inline
and the plots are inline SVG drawn by :mod:`ruleguard.report.plots`. Layout
(our own):

* a masthead: project, manifest, ruleset, tool version, the date waivers were
  judged at, the overall PASS/FAIL and the counts;
* the caution, prominently, right under it;
* a table of the loops (result, closed-loop verdict, P, encirclements, the
  worst gain, phase and delay margins and Ms over the variants, the worst
  variant), each row linking to the loop's section;
* project-wide findings;
* one section per loop: its analysis facts, the variants table, its findings
  (file:line:column, measured value, limit, frequency, waiver reason, the
  source line) and three plots of the nominal and the worst variant.

Every piece of text from the inputs is escaped; every number is shown with
its unit (:mod:`ruleguard.report.units`). Printing starts each loop on a new
page and keeps figures whole.
"""

from __future__ import annotations

from collections.abc import Mapping, Sequence
from html import escape

from ruleguard.location import Location
from ruleguard.report.model import LoopResult, Report, VariantResult
from ruleguard.report.summary import VALUE, Figure, loop_summary, loop_verdict
from ruleguard.report.text import CAUTION
from ruleguard.report.units import finding_figures, hertz, number, quantity
from ruleguard.rules.base import Finding, Severity

STYLE = """
:root { --ink: #1f2328; --muted: #5b6470; --rule: #c9ced6; --fail: #9b1c1c;
        --pass: #23613f; --warn: #8a5a00; --note: #2b5a8a; --paper: #ffffff;
        --band: #f3f5f8; }
* { box-sizing: border-box; }
body { margin: 0 auto; max-width: 1080px; padding: 1.5rem 2rem 3rem; color: var(--ink);
       background: var(--paper); font: 15px/1.45 system-ui, sans-serif; }
h1 { font-size: 1.6rem; margin: 0 0 .4rem; }
h2 { font-size: 1.3rem; margin: 2.2rem 0 .6rem; padding-bottom: .2rem;
     border-bottom: 2px solid var(--ink); }
h3 { font-size: 1.05rem; margin: 1.4rem 0 .4rem; }
code, pre { font-family: ui-monospace, monospace; font-size: .88em; }
.masthead { display: grid; grid-template-columns: 1fr auto; gap: 1rem 2rem;
            border: 2px solid var(--ink); padding: 1rem 1.2rem; }
.facts { display: grid; grid-template-columns: max-content 1fr; gap: .1rem 1rem; margin: 0; }
.facts dt { color: var(--muted); }
.facts dd { margin: 0; }
.result { text-align: center; min-width: 11rem; }
.result .word { font-size: 2.4rem; font-weight: 800; letter-spacing: .12em;
                padding: .1rem .8rem; border: 3px solid currentColor; display: inline-block; }
.result.fail .word { color: var(--fail); }
.result.pass .word { color: var(--pass); }
.counts { list-style: none; padding: 0; margin: .6rem 0 0; font-size: .92rem; }
.caution { margin: 1rem 0; padding: .8rem 1rem; border-left: 8px solid var(--warn);
           background: #fff7e6; font-weight: 600; }
table { border-collapse: collapse; width: 100%; margin: .4rem 0 1rem; font-size: .88rem; }
@media screen { table { display: block; overflow-x: auto; } }
th, td { border-bottom: 1px solid var(--rule); padding: .3rem .45rem; text-align: left;
         vertical-align: top; }
th { background: var(--band); font-weight: 650; }
td.num { text-align: right; white-space: nowrap; }
.badge { display: inline-block; padding: 0 .45rem; border-radius: 3px; font-weight: 700;
         font-size: .8rem; text-transform: uppercase; letter-spacing: .04em;
         border: 1.5px solid currentColor; }
.badge.fail, .badge.error, .badge.unstable, .badge.not-analysed { color: var(--fail); }
.badge.pass, .badge.stable { color: var(--pass); }
.badge.warn, .badge.warning { color: var(--warn); }
.badge.note { color: var(--note); }
.badge.waived { color: var(--muted); }
.finding { border: 1px solid var(--rule); border-left: 6px solid var(--muted);
           padding: .5rem .8rem; margin: .5rem 0; break-inside: avoid; }
.finding.error { border-left-color: var(--fail); }
.finding.warning { border-left-color: var(--warn); }
.finding.note { border-left-color: var(--note); }
.finding.is-waived { opacity: .8; border-left-style: dashed; }
.finding .head { display: flex; flex-wrap: wrap; gap: .3rem .8rem; align-items: baseline; }
.finding .message { margin: .3rem 0; font-weight: 600; }
.finding .figures { margin: .2rem 0; color: var(--muted); }
.finding pre { background: var(--band); padding: .3rem .5rem; margin: .3rem 0 0;
               overflow-x: auto; }
.finding .waiver { margin: .3rem 0 0; }
.notes { color: var(--muted); }
figure { margin: 1rem 0; break-inside: avoid; }
figure svg { max-width: 100%; height: auto; border: 1px solid var(--rule); }
figcaption { font-size: .85rem; color: var(--muted); max-width: 46rem; }
.plots { display: grid; grid-template-columns: 1fr; }
footer { margin-top: 3rem; border-top: 1px solid var(--rule); padding-top: .6rem;
         font-size: .85rem; color: var(--muted); }
@media print {
  body { max-width: none; padding: 0; font-size: 10.5pt; }
  section.loop { break-before: page; }
  a { color: inherit; text-decoration: none; }
  .caution { background: none; border: 2px solid var(--ink); }
  table { font-size: 8.5pt; }
}
@page { margin: 16mm 14mm; }
"""


def _e(value) -> str:
    return escape(str(value), quote=True)


def plotted_variants(variants: Sequence[VariantResult]) -> list[tuple[VariantResult, str]]:
    """The variants the plots show, with why: the nominal, and the worst one.

    The worst is the first unstable variant when the nominal is stable,
    otherwise the variant with the largest sensitivity peak (L closest to
    -1), unless that is the nominal itself.
    """
    if not variants:
        return []
    nominal = variants[0]
    chosen = [(nominal, "nominal")]
    others = variants[1:]
    if not others:
        return chosen
    unstable = [v for v in others if not v.analysis.stability.stable]
    if nominal.analysis.stability.stable and unstable:
        return chosen + [(unstable[0], "unstable")]

    def peak(v: VariantResult) -> float:
        value = v.analysis.margins.sensitivity_peak_db
        return float("-inf") if value is None else value

    worst = max(variants, key=peak)  # the nominal first among equals
    if worst is not nominal:
        chosen.append((worst, "closest to -1"))
    return chosen


# ---------------------------------------------------------------- pieces
def _place(location: Location, report: Report) -> str:
    file = location.file or report.manifest_file or "<project>"
    if location.line is None:
        return file
    if location.column is None:
        return f"{file}:{location.line}"
    return f"{file}:{location.line}:{location.column}"


def _figure_cell(figure: Figure | None, unit: str | None, *, with_variant: bool = True) -> str:
    if figure is None:
        return "-"
    if figure.state != VALUE:
        text = figure.state
    else:
        text = number(figure.value) if unit == "samples" else quantity(figure.value, unit)
        if figure.hz is not None:
            text += f" at {hertz(figure.hz)}"
    if with_variant and figure.variant and figure.variant != "nominal":
        text += f" ({figure.variant})"
    return _e(text)


def _stability_words(stability) -> tuple[str, str]:
    if stability.stable:
        return "stable", "stable"
    if stability.closed_loop_unstable_poles is None:
        return "unstable (through -1)", "unstable"
    return f"unstable (Z = {stability.closed_loop_unstable_poles})", "unstable"


def _badge(word: str, css: str) -> str:
    return f'<span class="badge {_e(css)}">{_e(word)}</span>'


def _loop_ids(report: Report) -> dict[str, str]:
    return {loop.name: f"loop-{i + 1}" for i, loop in enumerate(report.loops)}


def _count_word(word: str, n: int) -> str:
    """``errors`` -> ``error`` for one; ``waived`` stays as it is."""
    return word[:-1] if n == 1 and word.endswith("s") else word


def _counts(report: Report) -> list[tuple[str, int]]:
    return [
        ("errors", report.count(Severity.ERROR)),
        ("warnings", report.count(Severity.WARNING)),
        ("notes", report.count(Severity.NOTE)),
        ("waived", report.waived),
        ("loops", len(report.loops)),
        ("evaluations", report.evaluations),
    ]


def _masthead(report: Report) -> list[str]:
    facts = [
        ("project", report.project_name or "-"),
        ("manifest", report.manifest_file or "-"),
        ("ruleset", report.ruleset_name or "-"),
        ("ruleguard", report.tool_version),
        ("waivers judged as of", report.waivers_as_of or "not recorded"),
        ("fails at", Severity(report.fail_at).value),
    ]
    word = "FAIL" if report.failed else "PASS"
    css = "fail" if report.failed else "pass"
    out = [
        '<header class="masthead">',
        "<div>",
        f"<h1>Design-rule audit: {_e(report.project_name or report.manifest_file)}</h1>",
        '<dl class="facts">',
    ]
    out += [f"<dt>{_e(k)}</dt><dd>{_e(v)}</dd>" for k, v in facts]
    out += ["</dl>", "</div>", f'<div class="result {css}" id="result">',
            f'<div class="word">{word}</div>', '<ul class="counts">']
    out += [f'<li data-count="{_e(k)}"><strong>{n}</strong> {_e(_count_word(k, n))}</li>'
            for k, n in _counts(report)]
    out += ["</ul>", "</div>", "</header>"]
    return out


def _caution() -> str:
    return f'<aside class="caution" role="note" id="caution">{_e(CAUTION)}</aside>'


def _row_figures(loop: LoopResult) -> dict[tuple[str, str | None], Figure]:
    return {(r.label, r.unit): r.worst for r in loop_summary(loop).rows}


def _overview(report: Report, ids: Mapping[str, str]) -> list[str]:
    out = [
        '<section id="overview">',
        "<h2>Loops</h2>",
        '<table class="overview">',
        "<thead><tr><th>loop</th><th>result</th><th>closed loop</th><th>P</th>"
        "<th>ccw encirclements of -1</th><th>gain margin</th><th>phase margin</th>"
        "<th>delay margin</th><th>Ms</th><th>worst variant</th></tr></thead>",
        "<tbody>",
    ]
    for loop in report.loops:
        verdict = loop_verdict(report, loop)
        link = f'<a href="#{ids[loop.name]}"><code>{_e(loop.name)}</code></a>'
        badge = _badge(verdict, verdict.replace(" ", "-"))
        if not loop.analysed or not loop.variants:
            reason = loop.not_analysed_reason or "not analysed"
            out.append(f"<tr><td>{link}</td><td>{badge}</td>"
                       f'<td colspan="8">{_e(reason)}</td></tr>')
            continue
        unstable = [v.id for v in loop.variants if not v.analysis.stability.stable]
        if unstable:
            closed = _badge(f"unstable in {len(unstable)} of {len(loop.variants)}", "unstable")
        else:
            closed = _badge(f"stable ({len(loop.variants)})", "stable")
        p_values = _distinct(v.analysis.stability.open_loop_unstable_poles for v in loop.variants)
        n_values = _distinct(v.analysis.stability.ccw_encirclements for v in loop.variants)
        rows = _row_figures(loop)
        worst = plotted_variants(loop.variants)
        worst_text = (f"{worst[-1][0].id} ({worst[-1][1]})" if len(worst) > 1
                      else "nominal" if len(loop.variants) == 1 else "nominal (all alike)")
        out.append(
            f"<tr><td>{link}</td><td>{badge}</td><td>{closed}</td>"
            f'<td class="num">{_e(p_values)}</td><td class="num">{_e(n_values)}</td>'
            f'<td class="num">{_figure_cell(rows.get(("gain margin", "dB")), "dB")}</td>'
            f'<td class="num">{_figure_cell(rows.get(("phase margin", "deg")), "deg")}</td>'
            f'<td class="num">{_figure_cell(rows.get(("delay margin", "s")), "s")}</td>'
            f'<td class="num">{_figure_cell(rows.get(("sensitivity peak Ms", "dB")), "dB")}</td>'
            f"<td>{_e(worst_text)}</td></tr>"
        )
    out += ["</tbody>", "</table>",
            "<p class=\"notes\">Margins are the worst over each loop's variants (the variant "
            "in brackets when it is not the nominal); P and the encirclements list every "
            "value that occurs.</p>",
            "</section>"]
    return out


def _distinct(values) -> str:
    seen: list[str] = []
    for v in values:
        text = "-" if v is None else str(v)
        if text not in seen:
            seen.append(text)
    return ", ".join(seen)


def _discretization(discretization) -> list[tuple[str, str]]:
    if not discretization:
        return []
    if not isinstance(discretization, Mapping):
        return [("discretization", str(discretization))]
    out = []
    for block, method in discretization.items():
        if isinstance(method, (list, tuple)):
            method = ", ".join(str(m) for m in method) or "-"
        out.append((f"discretization: {block}", str(method)))
    return out


def _loop_facts(loop: LoopResult) -> list[str]:
    facts = [("domain", loop.domain)]
    if loop.sample_rate_hz:
        facts.append(("sample rate", hertz(loop.sample_rate_hz)))
        facts.append(("sample time", quantity(1.0 / loop.sample_rate_hz, "s")))
    facts += _discretization(loop.discretization)
    if loop.total_delay_s is not None:
        delay = quantity(loop.total_delay_s, "s")
        if loop.sample_rate_hz:
            samples = number(loop.total_delay_s * loop.sample_rate_hz)
            delay += f" ({samples} sample{'' if samples == '1' else 's'})"
        facts.append(("total loop delay", delay))
    facts.append(("variants analysed", str(len(loop.variants))))
    if loop.tags:
        facts.append(("tags", ", ".join(loop.tags)))
    out = ['<dl class="facts">']
    out += [f"<dt>{_e(k)}</dt><dd>{_e(v)}</dd>" for k, v in facts]
    out.append("</dl>")
    if loop.notes:
        out.append('<ul class="notes">')
        out += [f"<li>note: {_e(n)}</li>" for n in loop.notes]
        out.append("</ul>")
    return out


def _optional(value, unit, hz=None, *, stable: bool = True, needs_stable: bool = False,
              none: str = "unbounded") -> str:
    if needs_stable and not stable:
        return "n/a"
    if value is None:
        return none
    text = number(value) if unit == "samples" else quantity(value, unit)
    if hz is not None:
        text += f" at {hertz(hz)}"
    return text


def _variants_table(loop: LoopResult) -> list[str]:
    heads = ["variant", "parameters", "closed loop", "P", "N (ccw)", "Z", "gain margin",
             "lower gain margin", "phase margin", "delay margin", "Ms", "Mt", "disk margin",
             "bandwidth"]
    out = ['<table class="variants">', "<thead><tr>"]
    out += [f"<th>{_e(h)}</th>" for h in heads]
    out += ["</tr></thead>", "<tbody>"]
    for v in loop.variants:
        s, m = v.analysis.stability, v.analysis.margins
        word, css = _stability_words(s)
        params = "<br>".join(
            f"<code>{_e(k)}</code> = {_e(number(p) if isinstance(p, (int, float)) else p)}"
            for k, p in v.parameters.items()
        ) or "-"
        disk = "n/a" if not s.stable else "-"
        if s.stable and m.disk_margin is not None:
            d = m.disk_margin
            disk = (f"α {number(d.alpha)}, ±{quantity(d.phase_deg, 'deg')}"
                    + (f" at {hertz(d.hz)}" if d.hz is not None else ""))
        cells = [
            f"<code>{_e(v.id)}</code>", params, _badge(word, css),
            _e(s.open_loop_unstable_poles), _e("-" if s.ccw_encirclements is None
                                                else s.ccw_encirclements),
            _e("-" if s.closed_loop_unstable_poles is None else s.closed_loop_unstable_poles),
            _e(_optional(m.gain_margin_db, "dB", m.gain_margin_hz, stable=s.stable,
                         needs_stable=True)),
            _e(_optional(m.lower_gain_margin_db, "dB", m.lower_gain_margin_hz, stable=s.stable,
                         needs_stable=True)),
            _e(_optional(m.phase_margin_deg, "deg", m.crossover_hz, none="no crossover")),
            _e(_optional(m.delay_margin_s, "s", stable=s.stable, needs_stable=True)
               + ("" if m.delay_margin_samples is None or not s.stable
                  else f" ({number(m.delay_margin_samples)} samples)")),
            _e(_optional(m.sensitivity_peak_db, "dB", m.sensitivity_peak_hz, none="-")),
            _e(_optional(m.complementary_peak_db, "dB", m.complementary_peak_hz, none="-")),
            _e(disk),
            _e(_optional(m.bandwidth_hz, "Hz", stable=s.stable, needs_stable=True, none="-")),
        ]
        out.append("<tr>" + "".join(
            f'<td class="num">{c}</td>' if i >= 3 else f"<td>{c}</td>"
            for i, c in enumerate(cells)) + "</tr>")
    out += ["</tbody>", "</table>"]
    return out


def _source_line(report: Report, location: Location) -> str | None:
    text = report.texts.get(location.file)
    if text is None or location.line is None:
        return None
    lines = text.splitlines()
    if not 1 <= location.line <= len(lines):
        return None
    return lines[location.line - 1].rstrip()


def _finding(report: Report, finding: Finding, summaries: Mapping[str, str]) -> list[str]:
    severity = Severity(finding.severity).value
    css = f"finding {severity}" + (" is-waived" if finding.waived else "")
    place = _place(finding.location, report)
    out = [f'<article class="{css}" data-rule="{_e(finding.rule)}" '
           f'data-location="{_e(place)}">', '<div class="head">']
    out.append(_badge(f"waived {severity}" if finding.waived else severity,
                      "waived" if finding.waived else severity))
    out.append(f'<code class="rule">{_e(finding.rule)}</code>')
    if finding.rule in summaries:
        out.append(f'<span class="summary">{_e(summaries[finding.rule])}</span>')
    out.append(f'<code class="place">{_e(place)}</code>')
    if finding.location.key:
        out.append(f'<span class="key">key <code>{_e(finding.location.key)}</code></span>')
    out.append("</div>")
    out.append(f'<p class="message">{_e(finding.message)}</p>')
    figures = [f"variant {finding.variant}"] if finding.variant else []
    figures += finding_figures(finding)
    if figures:
        out.append(f'<p class="figures">{_e(" · ".join(figures))}</p>')
    source = _source_line(report, finding.location)
    if source is not None:
        out.append(f"<pre>{_e(finding.location.line)} │ {_e(source)}</pre>")
    if finding.waived:
        out.append(f'<p class="waiver"><strong>waiver:</strong> '
                   f"{_e(finding.waiver_reason or 'no reason recorded')}</p>")
    if finding.related:
        items = ", ".join(
            f"<code>{_e(_place(r, report))}</code>" + (f" ({_e(r.key)})" if r.key else "")
            for r in finding.related
        )
        out.append(f'<p class="related">see {items}</p>')
    out.append("</article>")
    return out


def _findings_block(report: Report, findings: Sequence[Finding],
                    summaries: Mapping[str, str]) -> list[str]:
    if not findings:
        return ['<p class="notes">No findings.</p>']
    ordered = sorted(findings, key=lambda f: (f.waived, -Severity(f.severity).rank))
    out: list[str] = []
    for f in ordered:
        out += _finding(report, f, summaries)
    return out


def _plots(loop: LoopResult, ident: str) -> list[str]:
    from ruleguard.report import plots

    if not loop.curves:
        return ['<p class="notes">No response samples for plots (they are taken when '
                "the report is made with <code>--format html</code>).</p>"]
    analyses = {v.id: v.analysis for v in loop.variants}
    shown = ", ".join(
        c.variant if c.role == "nominal" else f"{c.variant} ({c.role})" for c in loop.curves
    )
    figures = [
        (plots.nyquist_chart(loop.curves, analyses, ident=f"{ident}-nyquist"),
         "Nyquist plot of L near the critical point -1 (ring with a centre dot) with the "
         "unit circle. "
         "Diamonds: crossings of the negative real axis at the reported gain margins; "
         "circles: gain crossovers; the dotted circle around -1 has radius 1/Ms."),
        (plots.loop_gain_plot(loop.curves, analyses, ident=f"{ident}-loop-gain"),
         "Magnitude and phase of L over frequency. Circles: gain crossovers (|L| = 1), "
         "diamonds: phase crossovers; the bars give the phase margin and gain margin "
         "of the nominal variant."),
        (plots.sensitivity_plot(loop.curves, analyses, ident=f"{ident}-sensitivity"),
         "Sensitivity |S| (solid) and complementary sensitivity |T| (dashed) with the "
         "reported peaks Ms and Mt."),
    ]
    out = ['<div class="plots">']
    for plot, caption in figures:
        out += ["<figure>", plot.svg,
                f"<figcaption>{_e(caption)} Variants shown: {_e(shown)}.</figcaption>",
                "</figure>"]
    out.append("</div>")
    return out


def _loop_section(report: Report, loop: LoopResult, ident: str,
                  findings: Sequence[Finding], summaries: Mapping[str, str]) -> list[str]:
    verdict = loop_verdict(report, loop)
    out = [f'<section class="loop" id="{ident}" data-loop="{_e(loop.name)}">',
           f"<h2>Loop <code>{_e(loop.name)}</code> "
           f"{_badge(verdict, verdict.replace(' ', '-'))}</h2>"]
    out += _loop_facts(loop)
    if not loop.analysed:
        out.append(f'<p class="message"><strong>Not analysed:</strong> '
                   f"{_e(loop.not_analysed_reason or 'no reason given')}</p>")
    else:
        out.append("<h3>Variants</h3>")
        out += _variants_table(loop)
    out.append(f"<h3>Findings ({len(findings)})</h3>")
    out += _findings_block(report, findings, summaries)
    if loop.analysed and loop.variants:
        out.append("<h3>Plots</h3>")
        out += _plots(loop, ident)
    out.append("</section>")
    return out


def render(report: Report, **_options) -> str:
    """The audit report as one HTML document (UTF-8 text)."""
    ids = _loop_ids(report)
    summaries = {r.id: r.summary for r in report.rules}
    by_loop: dict[str, list[Finding]] = {name: [] for name in ids}
    project_wide: list[Finding] = []
    for f in report.findings:
        if f.loop in by_loop:
            by_loop[f.loop].append(f)
        else:
            project_wide.append(f)
    title = f"ruleguard audit: {report.project_name or report.manifest_file}"
    out = [
        "<!DOCTYPE html>",
        '<html lang="en">',
        "<head>",
        '<meta charset="utf-8">',
        '<meta name="viewport" content="width=device-width, initial-scale=1">',
        f"<title>{_e(title)}</title>",
        f"<style>{STYLE}</style>",
        "</head>",
        "<body>",
    ]
    out += _masthead(report)
    out.append(_caution())
    out += _overview(report, ids)
    if project_wide:
        out += ['<section id="project-findings">',
                f"<h2>Project-wide findings ({len(project_wide)})</h2>"]
        out += _findings_block(report, project_wide, summaries)
        out.append("</section>")
    for loop in report.loops:
        out += _loop_section(report, loop, ids[loop.name], by_loop[loop.name], summaries)
    out += [
        "<footer>",
        f"<p>{_e(CAUTION)}</p>",
        f"<p>Made by ruleguard {_e(report.tool_version)} from "
        f"<code>{_e(report.manifest_file)}</code>.</p>",
        "</footer>",
        "</body>",
        "</html>",
        "",
    ]
    return "\n".join(out)
