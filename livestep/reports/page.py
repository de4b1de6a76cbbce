"""The report as one self-contained HTML page.

Top to bottom: the file and profile (named once), the verdicts, the overview (one row
per gain set, note value or direction: :mod:`livestep.reports.overview`), the trends,
the steps (failed first), then the detailed statistics (one table, folded), the profile
and the session's facts. Text from outside (file names, metadata, tags, profile names,
reasons, warnings) goes through :func:`~livestep.reports.html_parts.e` wherever it is
written; the plots come in as inline SVG. The page loads nothing and runs nothing: no
scripts, no fonts, no images from elsewhere (a Content Security Policy forbids them), and
a print stylesheet keeps it legible on paper in black and white (verdicts carry a
symbol, a word and a border style, not colour alone).
"""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass

from livestep.judge.profile import Limit, Profile, Rule
from livestep.judge.quantities import QUANTITIES
from livestep.judge.statistics import GroupStats
from livestep.judge.verdict import FAIL, Check, StepVerdict, format_difference
from livestep.reports.html_parts import (
    e,
    label,
    rows,
    value,
    verdict_badge,
    verdict_counts,
)
from livestep.reports.overview import overview_section, statistics_section
from livestep.reports.session_info import SessionInfo
from livestep.steps.analysis import StepResult
from livestep.steps.measure import MeasureSettings

__all__ = ["ReportContent", "render_page"]


@dataclass(frozen=True)
class ReportContent:
    """Everything the page shows. ``step_svgs``: inline SVG by step index;
    ``trend_svgs``: (quantity, SVG) in display order; ``measure``: the settings the
    steps were measured with; ``verdicts`` line up with ``results`` (``None``: no
    profile)."""

    results: Sequence[StepResult]
    session: SessionInfo
    measure: MeasureSettings
    quantities: Sequence[str]
    stats: Sequence[GroupStats]
    step_svgs: dict[int, str]
    trend_svgs: Sequence[tuple[str, str]]
    generated: str
    version: str
    profile: Profile | None = None
    verdicts: Sequence[StepVerdict] | None = None
    overlay: str = ""  # the overlay section's HTML (several gain sets), or nothing


_CSS = """
body{font-family:system-ui,"DejaVu Sans",Arial,sans-serif;color:#111;max-width:1100px;
 margin:1em auto;padding:0 1em;line-height:1.35}
h1{font-size:1.45em;margin:0 0 .15em}h2{border-bottom:2px solid #333;margin:1.3em 0 .4em;
 font-size:1.25em}
header p{margin:.15em 0}h3{margin:.3em 0}
table{border-collapse:collapse;margin:.4em 0 .8em}
th,td{border:1px solid #aaa;padding:.15em .5em;text-align:left;vertical-align:top}
th{background:#eee}td.n{text-align:right;font-variant-numeric:tabular-nums;white-space:nowrap}
tr.limits td,tr.limits th{font-size:.9em;background:#f6f6f6}
table.stats tr.first td,table.stats tr.first th{border-top:2px solid #555}
.verdict{font-weight:bold;white-space:nowrap;padding:0 .35em;border:1px solid #000;
 border-radius:3px}
.v-pass{background:#e2f3e2}.v-warn{background:#fff0c2;border-style:dashed}
.v-fail{background:#fbd5d5;border-width:2px;text-transform:uppercase}
td.v-fail{text-transform:none;font-weight:bold;border:2px solid #000}
td.v-warn{border:1px dashed #000}
.v-none{color:#444;border-style:dotted}
p.counts{font-size:1.15em;margin:.3em 0}
article.step{border:1px solid #888;padding:.4em 1em .6em;margin:1.2em 0}
article.step.failed{border:4px double #000}
figure{margin:.4em 0}figure svg{display:block;width:100%;height:auto}
figcaption{font-size:.9em;color:#333}
.trends{display:grid;grid-template-columns:repeat(auto-fill,minmax(480px,1fr));gap:.8em}
.muted{color:#555}code{font-size:.95em}
details summary{cursor:pointer;margin:.3em 0}
ul.steps{columns:4 14em}
@media print{
 body{max-width:none;margin:0;padding:0;font-size:9.5pt;color:#000}
 a{color:inherit;text-decoration:none}
 h2{break-after:avoid}article.step,figure,tr{break-inside:avoid}
 .v-pass,.v-warn,.v-fail,th{background:none}
}
"""


_META_LABELS = {"start": "recording started (UTC)", "livestep": "recorded with livestep",
                "source": "recorded from", "decoder": "decoder"}


def _session(c: ReportContent) -> str:
    """The session's facts (the file itself is named in the header)."""
    s = c.session
    facts = [(e(_META_LABELS.get(k, k)), e(v)) for k, v in s.metadata]
    if s.start is None and s.modified is not None:
        facts.append(("file last modified (UTC)", e(s.modified)))
    facts += [
        ("samples", e(f"{s.samples:,}")),
        ("duration", "-" if s.duration is None else e(f"{s.duration:.3f} s")),
        ("sample rate", "-" if s.sample_rate is None else e(f"{s.sample_rate:.4g} Hz")),
        ("device restarts (segments)", e(s.segments)),
        ("settling band", e(f"\u00b1{c.measure.settling_band:g} % of the amplitude")),
        ("rise levels", e("{:g} % to {:g} % of the amplitude".format(*c.measure.rise_levels)))]
    if s.counters is not None:
        k = s.counters
        reasons = k.get("bad")
        bad = ", ".join(f"{name}: {n}" for name, n in sorted(reasons.items())) \
            if isinstance(reasons, dict) else ""
        facts += [
            ("link: bytes, samples", e(f"{k.get('bytes', '-')}, {k.get('samples', '-')}")),
            ("link: bad lines or frames", e(f"{k.get('bad_total', 0)}"
                                            + (f" ({bad})" if bad else ""))),
            ("link: gaps, lost, resyncs", e(f"{k.get('gaps', '-')}, {k.get('lost', '-')},"
                                            f" {k.get('resyncs', '-')}")),
            ("link: reconnects, log lines, restarts",
             e(f"{k.get('reconnects', '-')}, {k.get('log_lines', '-')},"
               f" {k.get('restarts', '-')}"))]
    else:
        facts.append(("link counters", '<span class="muted">none in this recording</span>'))
    if s.states:
        facts.append(("link states", e(", ".join(s.states))))
    facts += [("note", e(n)) for n in s.notes]
    return f'<section id="session"><h2>Session</h2><table>{rows(facts)}</table></section>'


def _conditions(rule: Rule) -> str:
    parts = []
    if rule.direction:
        parts.append(f"direction {rule.direction}")
    if rule.size_min is not None:
        parts.append(f"|setpoint change| \u2265 {rule.size_min:g}")
    if rule.size_max is not None:
        parts.append(f"|setpoint change| \u2264 {rule.size_max:g}")
    if rule.tag:
        parts.append(f"tag {rule.tag[0]}={rule.tag[1]}")
    return ", ".join(parts) or "every step"


def _limit_row(lim: Limit, scope: str) -> str:
    q = QUANTITIES[lim.quantity]
    # in the label's unit (ms for times), and percentage points for a quantity in %
    warn = "-" if not lim.warn else (format_difference(q, lim.warn) if q.unit == "%"
                                     else value(lim.quantity, lim.warn))
    return (f"<tr><td>{e(label(lim.quantity))}</td><td>{scope}</td>"
            f'<td class="n">{e(value(lim.quantity, lim.low))}</td>'
            f'<td class="n">{e(value(lim.quantity, lim.high))}</td>'
            f'<td class="n">{e(warn)}</td></tr>')


def _profile(c: ReportContent) -> str:
    p = c.profile
    if p is None:
        return ('<section id="profile"><h2>Profile</h2><p class="muted">No tolerance profile:'
                " the steps are measured, not judged.</p></section>")
    limit_rows = [_limit_row(lim, "every step") for lim in p.all_limits()]
    for rule in p.rules:
        scope = f"<em>{e(rule.name)}</em>: {e(_conditions(rule))}"
        limit_rows += [_limit_row(lim, scope) for lim in rule.limits]
    return (f'<section id="profile"><h2>Profile: {e(p.name)}</h2>'
            f"<p>From <code>{e(p.source)}</code>. A value inside its limits but closer to one"
            " than the warning margin warns; a later section replaces an earlier one's limit"
            " for the steps it matches.</p>"
            "<table><tr><th>quantity</th><th>applies to</th><th>min</th><th>max</th>"
            f"<th>warning margin</th></tr>{''.join(limit_rows)}</table></section>")


def _anchor(r: StepResult) -> str:
    return f"step-{int(r.index)}"


def _summary(c: ReportContent) -> str:
    """The verdicts: how many steps passed, warned and failed, and links to the failed."""
    n = len(c.results)
    out = ['<section id="summary"><h2>Verdicts</h2>']
    if not c.results:
        out.append("<p>No step was found in the recording.</p>")
    elif c.verdicts is None:
        out.append(f"<p>{n} steps, measured and not judged (no profile).</p>")
    else:
        counts = verdict_counts([v.verdict for v in c.verdicts], all_three=True)
        out.append(f'<p class="counts">{n} steps: {counts}.</p>')
        failed = [r for r, v in zip(c.results, c.verdicts, strict=True) if v.verdict == FAIL]
        if failed:
            links = ", ".join(f'<a href="#{_anchor(r)}">step {int(r.index)}</a>' for r in failed)
            out.append(f"<p>Failed: {links}. Failed steps come first below.</p>")
    return "".join(out) + "</section>"


def _trends(c: ReportContent) -> str:
    if not c.trend_svgs:
        return ""
    figs = "".join(f'<figure aria-label="{e(label(q))} by step">{svg}</figure>'
                   for q, svg in c.trend_svgs)
    return ('<section id="trends"><h2>Trends over the session</h2><p>Each quantity against'
            " the step index. A limit the same for every step is a line (dashed: min,"
            " dash-dot: max); one that a [[when]] section changes is a mark at each step it"
            " applies to. A failed step is a large cross, a warning a triangle.</p>"
            f'<div class="trends">{figs}</div></section>')


def _check_row(quantity: str, r: StepResult, check: Check | None) -> str:
    if check is None:
        x = QUANTITIES[quantity].get(r)
        cells = [value(quantity, x), "-", "-"]
        verdict, note = '<span class="muted">no limit</span>', ""
    else:
        cells = [value(quantity, check.value), value(quantity, check.low),
                 value(quantity, check.high)]
        verdict = verdict_badge(check.verdict)
        note = check.reason + (f" (limits of {check.rule!r})" if check.rule else "")
    return (f"<tr><td>{e(label(quantity))}</td>"
            + "".join(f'<td class="n">{e(x)}</td>' for x in cells)
            + f"<td>{verdict}</td><td>{e(note)}</td></tr>")


def _step(c: ReportContent, r: StepResult, v: StepVerdict | None) -> str:
    m = r.metrics
    failed = v is not None and v.verdict == FAIL
    badge = verdict_badge(v.verdict) if v is not None else ""
    sp = ""
    if m.setpoint_before is not None and m.setpoint_after is not None:
        sp = f", setpoint {m.setpoint_before:.6g} \u2192 {m.setpoint_after:.6g}"
    head = (f"<h3>{badge} Step {int(r.index)}</h3><p>t = {m.t_step:.4f} s, {e(m.direction)}"
            f"{e(sp)}, amplitude {m.amplitude:+.4g}, window ended: {e(r.end_reason)}.</p>")
    svg = c.step_svgs.get(r.index)
    fig = (f"<figure>{svg}<figcaption>Setpoint (dashed) and feedback (solid black) from the"
           " step instant; shaded: the settling band; dotted: the rise reference levels and"
           " 50 %; circles: the rise-level crossings; triangle: the peak; dotted vertical:"
           " settled; wide pale band under the feedback: the fitted model.</figcaption>"
           "</figure>" if svg else
           '<p class="muted">No plot: the step\'s samples were not kept.</p>')
    checks = {ch.quantity: ch for ch in v.checks} if v is not None else {}
    names = list(checks) + [q for q in c.quantities if q not in checks]
    table = ("<table><tr><th>quantity</th><th>value</th><th>min</th><th>max</th>"
             "<th>verdict</th><th>note</th></tr>"
             + "".join(_check_row(q, r, checks.get(q)) for q in names) + "</table>")
    tags = ("<p>Tags: " + ", ".join(f"<code>{e(k)}={e(val)}</code>" for k, val in r.tags)
            + "</p>") if r.tags else '<p class="muted">Tags: none.</p>'
    warnings = ("<ul>" + "".join(f"<li>{e(w)}</li>" for w in r.warnings) + "</ul>"
                if r.warnings else "")
    cls = "step failed" if failed else "step"
    return (f'<article class="{cls}" id="{_anchor(r)}">{head}{fig}{table}{tags}{warnings}'
            "</article>")


def _steps(c: ReportContent) -> str:
    vs: Sequence[StepVerdict | None] = c.verdicts if c.verdicts is not None \
        else [None] * len(c.results)
    pairs = list(zip(c.results, vs, strict=True))
    failed = [p[1] is not None and p[1].verdict == FAIL for p in pairs]
    order = [p for p, f in zip(pairs, failed, strict=True) if f]
    order += [p for p, f in zip(pairs, failed, strict=True) if not f]
    index = "".join(f'<li><a href="#{_anchor(r)}">step {int(r.index)}</a>'
                    f" {verdict_badge(v.verdict) if v is not None else ''}</li>" for r, v in pairs)
    return ('<section id="steps"><h2>Steps</h2>'
            + (f'<ul class="steps">{index}</ul>' if pairs else "")
            + "".join(_step(c, r, v) for r, v in order) + "</section>")


def render_page(c: ReportContent) -> str:
    """The whole HTML document."""
    title = f"livestep report: {c.session.source}"
    csp = "default-src 'none'; style-src 'unsafe-inline'; img-src data:"
    judged = (f" judged against <strong>{e(c.profile.name)}</strong>" if c.profile
              else " measured, not judged")
    return (
        "<!DOCTYPE html>\n<html lang=\"en\"><head><meta charset=\"utf-8\">"
        f'<meta http-equiv="Content-Security-Policy" content="{csp}">'
        '<meta name="viewport" content="width=device-width, initial-scale=1">'
        f"<title>{e(title)}</title><style>{_CSS}</style></head><body>"
        f'<header><h1>Step test report</h1><p id="file"><code>{e(c.session.source)}</code>'
        f'{judged}</p><p class="muted">Made {e(c.generated)} by livestep {e(c.version)}.'
        "</p></header>"
        + _summary(c)
        + overview_section(c.results, c.verdicts, c.quantities, c.profile)
        + c.overlay + _trends(c) + _steps(c) + statistics_section(c.stats, c.quantities)
        + _profile(c) + _session(c)
        + "</body></html>\n")
