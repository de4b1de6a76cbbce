"""The report's overview (one row per gain set, note value or direction) and its detailed
statistics (one table, folded in a ``<details>`` element: the page needs no script)."""

from __future__ import annotations

from collections.abc import Sequence

from livestep.judge.profile import Profile
from livestep.judge.quantities import QUANTITIES
from livestep.judge.statistics import (
    CPK_MIN_COUNT,
    NOTE_LIMITS_DIFFER,
    NOTE_NO_LIMIT,
    GroupStats,
    MetricStats,
)
from livestep.judge.verdict import FAIL, PASS, SYMBOLS, WARN, StepVerdict
from livestep.reports.html_parts import (
    e,
    label,
    limits_text,
    num,
    value,
    verdict_class,
    verdict_counts,
)
from livestep.reports.summary import cp, overview_groups
from livestep.steps.analysis import StepResult

__all__ = ["OVERVIEW_QUANTITIES", "overview_section", "statistics_section"]

#: The most quantities the overview shows (the report's first ones: the profile's limits
#: first), so it fits a screen's width.
OVERVIEW_QUANTITIES = 6


def _anchor(index: int) -> str:
    return f"step-{int(index)}"


def _worst(checks: Sequence[str]) -> str | None:
    for v in (FAIL, WARN, PASS):
        if v in checks:
            return v
    return None


def _limit_cell(profile: Profile, quantity: str) -> str:
    """The ``[limits]`` limit on a quantity, starred when a ``[[when]]`` section sets
    another for some steps."""
    base = next((lim for lim in profile.all_limits() if lim.quantity == quantity), None)
    varied = any(lim.quantity == quantity for rule in profile.rules for lim in rule.limits)
    text = limits_text(quantity, base.low, base.high) if base is not None else "-"
    if varied:
        text = "per step" if base is None else text
        return f'{e(text)} <abbr title="a [[when]] section sets other limits">*</abbr>'
    return e(text)


def overview_section(results: Sequence[StepResult], verdicts: Sequence[StepVerdict] | None,
                     quantities: Sequence[str], profile: Profile | None) -> str:
    """One row per group of steps (see :func:`livestep.reports.summary.overview_groups`):
    the steps, their verdicts and the mean of the first quantities, each mean marked with
    the worst verdict of the group's steps on that quantity."""
    if not results:
        return ""
    how, groups = overview_groups(results)
    shown = list(quantities[:OVERVIEW_QUANTITIES])
    verdict_of = ({r.index: v for r, v in zip(results, verdicts, strict=True)}
                  if verdicts is not None else {})
    head = ("<tr><th>group</th><th>steps</th>" + ("<th>verdicts</th>" if verdicts else "")
            + "".join(f"<th>{e(label(q))}</th>" for q in shown) + "</tr>")
    if profile is not None:
        head += ('<tr class="limits"><th>limit</th><td></td>' + ("<td></td>" if verdicts else "")
                 + "".join(f'<td class="n">{_limit_cell(profile, q)}</td>' for q in shown)
                 + "</tr>")
    body = []
    for g in groups:
        tags = " ".join(f"{k}={v}" for k, v in g.shared)
        name = f"<code>{e(g.key)}</code>" + (f'<br><span class="muted">{e(tags)}</span>'
                                             if tags else "")
        links = ", ".join(f'<a href="#{_anchor(r.index)}">{int(r.index)}</a>' for r in g.steps)
        cells = [f"<td>{name}</td>", f"<td>{links}</td>"]
        group_verdicts = [verdict_of[r.index] for r in g.steps if r.index in verdict_of]
        if verdicts is not None:
            cells.append(f"<td>{verdict_counts([v.verdict for v in group_verdicts])}</td>")
        for q in shown:
            xs = [x for x in (QUANTITIES[q].get(r) for r in g.steps) if x is not None]
            mean = sum(xs) / len(xs) if xs else None
            worst = _worst([c.verdict for v in group_verdicts for c in v.checks
                            if c.quantity == q])
            mark = f"{SYMBOLS[worst]} " if worst in (FAIL, WARN) else ""
            cls = f"n {verdict_class(worst)}" if worst in (FAIL, WARN) else "n"
            cells.append(f'<td class="{cls}">{e(mark + value(q, mean))}</td>')
        body.append("<tr>" + "".join(cells) + "</tr>")
    note = (f"Steps grouped by {e(how)}, in the order the session met them; each figure is"
            " the group's mean")
    if verdicts is not None:
        note += (", marked \u2718 when a step of the group failed on it and \u25b2 when one"
                 " warned")
    return (f'<section id="overview"><h2>Overview by {e(how)}</h2><table class="overview">'
            f"{head}{''.join(body)}</table><p class=\"muted\">{note}. Every quantity per"
            " group: Statistics below.</p></section>")


_CPK_TEXT = {NOTE_LIMITS_DIFFER: "not computed: limits differ between steps ([[when]])",
             NOTE_NO_LIMIT: "-"}


def _cpk_cell(s: MetricStats) -> str:
    if s.cpk is not None:
        return e(num(s.cpk, ".3g"))
    text = _CPK_TEXT.get(s.cpk_note, f"not computed: {s.cpk_note}" if s.cpk_note else "-")
    return f'<span class="muted">{e(text)}</span>' if text != "-" else "-"


def _group_name(g: GroupStats) -> str:
    return "all steps" if g.by == "all" else f"{g.by} {g.key}"


def statistics_section(stats: Sequence[GroupStats], quantities: Sequence[str]) -> str:
    """Every quantity over all steps and per group, as one table inside a ``<details>``
    element (folded; opened by a click, no script)."""
    body = []
    for q in quantities:
        rows = [(g, g.get(q)) for g in stats]
        rows = [(g, s) for g, s in rows if s is not None and s.count > 0]
        for k, (g, s) in enumerate(rows):
            limits = ("per step ([[when]])" if s.limits_differ
                      else limits_text(q, s.low, s.high))
            cells = [value(q, s.mean), value(q, s.std), value(q, s.min), value(q, s.max)]
            head = (f'<th rowspan="{len(rows)}">{e(label(q))}</th>' if k == 0 else "")
            tr = '<tr class="first">' if k == 0 else "<tr>"
            body.append(f"{tr}{head}"
                        f"<td>{e(_group_name(g))}</td><td class=\"n\">{s.count}</td>"
                        + "".join(f'<td class="n">{e(x)}</td>' for x in cells)
                        + f'<td class="n">{e(limits)}</td><td class="n">{e(num(cp(s), ".3g"))}'
                        f'</td><td class="n">{_cpk_cell(s)}</td></tr>')
    if not body:
        return ""
    groups = ", ".join(dict.fromkeys(g.by for g in stats if g.by != "all"))
    return (
        '<section id="statistics"><h2>Statistics</h2><details><summary>Count, mean, standard'
        f" deviation, range, limits, Cp and Cpk of {len(quantities)} quantities over all steps"
        f" and per {e(groups or 'group')} ({len(body)} rows)</summary>"
        '<table class="stats"><tr><th>quantity</th><th>group</th><th>n</th><th>mean</th>'
        "<th>s</th><th>min</th><th>max</th><th>limits</th><th>Cp</th><th>Cpk</th></tr>"
        + "".join(body) + "</table>"
        '<p class="muted">s: sample standard deviation (n - 1). Cp = (max limit - min limit)'
        " / (6 s); Cpk = min(max limit - mean, mean - min limit) / (3 s), one side alone with"
        " one limit (NIST/SEMATECH e-Handbook of Statistical Methods, 6.1.6). Over individual"
        " steps without subgroups they describe these steps only (SPC manuals call this Pp"
        f" and Ppk). They are not computed from fewer than {CPK_MIN_COUNT} values (a rule of"
        " thumb: from fewer the index is mostly noise), with s = 0, or where the group's"
        " steps have different limits (per step: [[when]] sections give some steps other"
        " limits, so no one limit covers the group).</p></details></section>")
