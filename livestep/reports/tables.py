"""Step results as JSON documents and rich tables (CSV rows: :mod:`.csv_rows`)."""

from __future__ import annotations

import json
import math
from collections.abc import Sequence
from typing import IO, Any

from rich import box
from rich.console import Console
from rich.markup import escape
from rich.table import Table

from livestep.judge.compare import Comparison
from livestep.judge.profile import Profile
from livestep.judge.quantities import QUANTITIES, display_unit
from livestep.judge.statistics import (
    CPK_MIN_COUNT,
    NOTE_LIMITS_DIFFER,
    NOTE_NO_LIMIT,
    GroupStats,
    MetricStats,
)
from livestep.judge.verdict import SYMBOLS, StepVerdict, describe_check
from livestep.steps.analysis import StepResult

__all__ = ["STEP_FIELDS", "add_guidance", "analysis_document", "comparison_document",
           "render_comparison", "render_guidance", "render_statistics", "render_table",
           "statistics_records", "step_record", "write_json"]

#: Keys of each step in the JSON document, in order (a stable contract).
STEP_FIELDS = (
    "index", "t_step", "direction", "setpoint_before", "setpoint_after", "initial", "final",
    "amplitude", "rise_time", "delay_time", "peak_time", "peak", "overshoot_pct",
    "undershoot_pct", "settling_time", "settled", "steady_state_error",
    "steady_state_error_pct", "iae", "ise", "itae", "noise_sigma",
)
MODEL_FIELDS = ("zeta", "wn", "gain", "dead_time", "fit_r2", "fit_nrmse", "bandwidth",
                "phase_margin_deg", "settling_time_estimate")
ESTIMATE_FIELDS = ("zeta", "wn", "settling_time")


def _clean(x: Any) -> Any:
    if isinstance(x, float) and not math.isfinite(x):
        return None
    return x


def check_records(v: StepVerdict) -> list[dict[str, Any]]:
    """A verdict's checks as JSON-ready dicts, one per limit."""
    return [{"quantity": c.quantity, "value": _clean(c.value), "min": c.low, "max": c.high,
             "limit": c.limit, "margin": _clean(c.margin), "verdict": c.verdict,
             "reason": c.reason, "rule": c.rule} for c in v.checks]


def step_record(r: StepResult, verdict: StepVerdict | None = None) -> dict[str, Any]:
    """One step as the JSON contract's dict (``None`` where undefined); with a verdict
    (given, or the step's own), ``verdict`` and ``checks`` too."""
    m = r.metrics
    rec: dict[str, Any] = {"index": r.index}
    rec.update({k: _clean(getattr(m, k)) for k in STEP_FIELDS[1:]})
    rec["model"] = (None if r.model is None else
                    {k: _clean(getattr(r.model, k)) for k in MODEL_FIELDS})
    rec["closed_form"] = {k: _clean(getattr(r.estimate, k)) for k in ESTIMATE_FIELDS}
    rec["sample_period"] = m.sample_period
    rec["window_end"] = r.end_reason
    rec["warnings"] = list(r.warnings)
    rec["output_limit"] = (None if r.limit is None else
                           {"channel": r.limit.channel, "value": _clean(r.limit.value),
                            "start": r.limit.start, "duration": r.limit.duration})
    rec["tags"] = dict(r.tags)
    if verdict is not None:
        rec["verdict"] = verdict.verdict
        rec["checks"] = check_records(verdict)
    return rec


def analysis_document(source: str, samples: int, results: Sequence[StepResult],
                      warnings: Sequence[str] = (), *,
                      verdicts: Sequence[StepVerdict] | None = None,
                      profile: Profile | None = None) -> dict[str, Any]:
    """The whole analysis as one JSON-ready dict; with a profile, its name and source
    and each step's verdict and checks."""
    doc: dict[str, Any] = {"source": source, "samples": samples}
    if profile is not None:
        doc["profile"] = {"name": profile.name, "source": profile.source}
    vs: Sequence[StepVerdict | None] = verdicts if verdicts is not None else [None] * len(results)
    doc["steps"] = [step_record(r, v) for r, v in zip(results, vs, strict=True)]
    doc["warnings"] = list(warnings)
    return doc


def write_json(doc: dict[str, Any], out: IO[str]) -> None:
    """The document, indented, with each item of a list on one line of its own. Every item
    is encoded in one call (the C encoder: ``json.dump`` with an indent encodes in Python,
    about a second per thousand steps)."""
    enc = json.JSONEncoder(allow_nan=False)
    parts = []
    for key, value in doc.items():
        if isinstance(value, list) and value:
            text = "[\n" + ",\n".join("    " + enc.encode(x) for x in value) + "\n  ]"
        else:
            text = json.dumps(value, indent=2, allow_nan=False).replace("\n", "\n  ")
        parts.append(f"  {enc.encode(key)}: {text}")
    out.write("{\n" + ",\n".join(parts) + "\n}\n")


def _no_negative_zero(text: str) -> str:
    """"-0.00" (a tiny negative number rounded) as "0.00"."""
    if text.startswith("-") and not any(ch in "123456789" for ch in text.split("e")[0]):
        return text[1:]
    return text


def _ms(x: float | None, fmt: str = ".1f") -> str:
    return "-" if x is None else _no_negative_zero(format(1e3 * x, fmt))


def _num(x: float | None, fmt: str = ".4g") -> str:
    return "-" if x is None else _no_negative_zero(format(x, fmt))


def _compact_table(title: str, caption: str) -> Table:
    """The terminal tables' common look: a rule under the header, no outer edge."""
    return Table(title=title, caption=caption, box=box.SIMPLE_HEAD, pad_edge=False,
                 header_style="bold", padding=(0, 1), collapse_padding=True, show_edge=False)


#: Verdict styles; the symbol and word always go with the colour.
VERDICT_STYLES = {"pass": "green", "warn": "yellow", "fail": "bold red",
                  "not measured": "dim"}


def verdict_text(verdict: str) -> str:
    """Rich markup: symbol and word, coloured ("✘ fail")."""
    return f"[{VERDICT_STYLES[verdict]}]{SYMBOLS[verdict]} {verdict}[/]"


def render_table(results: Sequence[StepResult], console: Console, title: str,
                 verdicts: Sequence[StepVerdict] | None = None) -> None:
    """A rich table, one row per step, times in milliseconds (all figures: ``--json``);
    with verdicts, a verdict column and one line per check that did not pass."""
    table = _compact_table(title, "t_step in s; rise, settle, dead (time) in ms; OS (overshoot)"
                           " and SSE (steady-state error) in %; wn in rad/s")
    names = ["#", "t_step", "dir", "amp", "rise", "OS", "settle", "SSE", "zeta", "wn", "dead"]
    # The verdict takes the place of R^2 (still in --json), so 80 columns hold the table.
    for name in names + (["R^2"] if verdicts is None else []):
        table.add_column(name, justify="right", no_wrap=True)
    if verdicts is not None:
        table.add_column("verdict", no_wrap=True)
    for i, r in enumerate(results):
        m, f = r.metrics, r.model
        cells = (
            str(r.index), f"{m.t_step:.3f}", m.direction, _num(m.amplitude, "+.4g"),
            _ms(m.rise_time), f"{m.overshoot_pct:.1f}",
            _ms(m.settling_time, ".0f") if m.settled else "no",
            _num(m.steady_state_error_pct, ".2f"), _num(f.zeta if f else None, ".3f"),
            _num(f.wn if f else None, ".1f"), _ms(f.dead_time if f else None),
            _num(f.fit_r2 if f else None, ".3f"))
        if verdicts is not None:
            cells = (*cells[:-1], verdict_text(verdicts[i].verdict))
        table.add_row(*cells)
    console.print(table)
    for i, r in enumerate(results):
        if verdicts is not None:
            for c in verdicts[i].checks:
                if c.verdict != "pass":
                    console.print(f"step {r.index}: {verdict_text(c.verdict)}"
                                  f" {escape(describe_check(c))}", highlight=False)
        for w in r.warnings:
            console.print(f"[yellow]step {r.index}:[/] {escape(w)}")


# -- statistics, design guidance and comparisons (see livestep.judge.statistics, .design, .compare)

_SHORT_UNITS = {"feedback units": "fb", "feedback units x s": "fb s",
                "feedback units^2 x s": "fb^2 s", "feedback units x s^2": "fb s^2"}


def _scaled(name: str) -> tuple[float, str]:
    """Display factor and short unit: seconds shown in ms, feedback units as fb."""
    factor, unit = display_unit(name)
    return factor, _SHORT_UNITS.get(unit, unit)


def _shown(name: str, x: float | None, fmt: str = ".4g") -> str:
    return "-" if x is None else _no_negative_zero(format(_scaled(name)[0] * x, fmt))


_UNIT_CAPTION = "times in ms; fb: feedback units"


def _limits_text(name: str, low: float | None, high: float | None) -> str:
    if low is not None and high is not None:
        return f"{_shown(name, low, 'g')}..{_shown(name, high, 'g')}"
    if high is not None:
        return f"<= {_shown(name, high, 'g')}"
    if low is not None:
        return f">= {_shown(name, low, 'g')}"
    return ""


def _stats_record(s: MetricStats) -> dict[str, Any]:
    return {"count": s.count, "missing": s.missing, "mean": _clean(s.mean),
            "std": _clean(s.std), "min": _clean(s.min), "max": _clean(s.max),
            "low": s.low, "high": s.high, "cpk": _clean(s.cpk), "cpk_note": s.cpk_note,
            "limits_differ": s.limits_differ}


#: A limits cell of the statistics table where a group's steps have different limits.
LIMITS_DIFFER_TEXT = "per step"
#: Cpk cells that say why it is not computed ("n < 30", "s = 0" are shown as they are).
_CPK_NOTE_TEXT = {NOTE_LIMITS_DIFFER: "limits vary", NOTE_NO_LIMIT: "-"}


def _cpk_cell(s: MetricStats) -> str:
    """Cpk, or why it is not computed."""
    if s.cpk is not None:
        return _no_negative_zero(f"{s.cpk:.3g}")
    return _CPK_NOTE_TEXT.get(s.cpk_note, s.cpk_note or "-")


def statistics_records(groups: Sequence[GroupStats]) -> list[dict[str, Any]]:
    """:func:`livestep.judge.statistics.session_statistics` as JSON-ready dicts: per group
    ``by``, ``key``, ``steps`` (indices) and ``metrics`` by quantity (its unit: seconds,
    percent...): ``count``, ``missing``, ``mean``, ``std`` (sample, n - 1), ``min``,
    ``max``, ``low``, ``high`` (the limits Cpk is against), ``cpk``, ``cpk_note`` (why
    it is null: "no limit", "limits differ between steps", "n < 30", "s = 0"; empty when
    computed) and ``limits_differ`` (the group's steps have different limits)."""
    return [{"by": g.by, "key": g.key, "steps": list(g.steps),
             "metrics": {m.quantity: _stats_record(m) for m in g.metrics}} for g in groups]


#: Quantities of the statistics table and their short names there (all of them: --json).
STATISTICS_ROWS = {"rise_time": "rise", "delay_time": "delay", "peak_time": "peak",
                   "overshoot_pct": "OS", "undershoot_pct": "US", "settling_time": "settle",
                   "steady_state_error_pct": "SSE", "iae": "IAE", "zeta": "zeta", "wn": "wn",
                   "dead_time": "dead", "fit_r2": "R^2"}
#: Quantities of the by-group table (all of them: --json).
GROUP_COLUMNS = ("rise_time", "overshoot_pct", "settling_time", "steady_state_error_pct",
                 "zeta", "wn")


def render_statistics(groups: Sequence[GroupStats], console: Console) -> None:
    """Summary tables: every quantity over all steps (with Cpk where a profile limits it),
    then the mean of the main quantities per group."""
    if not groups or not groups[0].metrics:
        return
    every = groups[0]
    limited = any(m.low is not None or m.high is not None or m.limits_differ
                  for m in every.metrics)
    caption = ("delay: to 50 %; OS, US: overshoot, undershoot; SSE: |steady-state error|;"
               f" {_UNIT_CAPTION}; s: sample standard deviation (n - 1); all quantities and"
               " groups: --json")
    if limited:
        caption += ("; Cpk = min(USL - mean, mean - LSL) / 3s, one-sided with one limit,"
                    f" computed from n >= {CPK_MIN_COUNT} steps (a rule of thumb: fewer give"
                    " an index that is mostly noise)")
        if any(m.limits_differ for m in every.metrics):
            caption += (f"; limits {LIMITS_DIFFER_TEXT}: {escape('[[when]]')} sections give"
                        " some steps other limits, so no one limit or Cpk covers all steps"
                        " (per group: --json)")
    table = _compact_table(f"statistics over {len(every.steps)} steps", caption)
    table.add_column("", no_wrap=True)
    table.add_column("unit", no_wrap=True)
    for name in ("n", "mean", "s", "min", "max", *(("limits", "Cpk") if limited else ())):
        table.add_column(name, justify="right", no_wrap=True)
    for m in every.metrics:
        q = m.quantity
        if q not in STATISTICS_ROWS:
            continue
        cells = [STATISTICS_ROWS[q], _scaled(q)[1], str(m.count), _shown(q, m.mean, ".3g"),
                 _shown(q, m.std, ".3g"), _shown(q, m.min, ".3g"), _shown(q, m.max, ".3g")]
        if limited:
            limits = LIMITS_DIFFER_TEXT if m.limits_differ else _limits_text(q, m.low, m.high)
            cells += [limits, _cpk_cell(m)]
        table.add_row(*cells)
    console.print(table)
    if len(groups) < 2:
        return
    cols = [q for q in GROUP_COLUMNS if every.get(q) is not None]
    by_group = _compact_table("mean per group", "rise, settle in ms; OS, SSE in %; wn in"
                              " rad/s; size: decade of |setpoint change|")
    by_group.add_column("group")
    by_group.add_column("steps", justify="right")
    for q in cols:
        by_group.add_column(STATISTICS_ROWS[q], justify="right", no_wrap=True)
    for g in groups[1:]:
        by_group.add_row(escape(f"{g.by} {g.key}"), str(len(g.steps)),  # tags: literal
                         *(_shown(q, g.get(q).mean, ".3g") for q in cols))
    console.print(by_group)


def add_guidance(doc: dict[str, Any], results: Sequence[StepResult], profile: Profile,
                 band_pct: float) -> None:
    """Put the profile's pole region in ``doc["design"]`` and each modelled step's
    sentences in its ``guidance`` list (empty without a model)."""
    from livestep.judge.design import ASSUMPTION, assess, design_region

    region = design_region(profile.all_limits(), band_pct)
    doc["design"] = {"zeta_min": region.zeta_min, "sigma_min": region.sigma_min,
                     "wd_min": region.wd_min, "band_pct": band_pct, "assumes": ASSUMPTION}
    for rec, r in zip(doc["steps"], results, strict=True):
        step_region = design_region(profile.limits_for(r), band_pct)
        rec["guidance"] = ([] if r.model is None or step_region.empty
                           else list(assess(r.model, step_region)))


def render_guidance(results: Sequence[StepResult], profile: Profile, band_pct: float,
                    console: Console) -> None:
    """The missed pole requirements of each modelled step, one line each."""
    from livestep.judge.design import SHORT_ASSUMPTION, design_checks, design_region

    lines = []
    for r in results:
        region = design_region(profile.limits_for(r), band_pct)
        if r.model is None or region.empty:
            continue
        lines += [f"step {r.index}: {c.text}" for c in design_checks(r.model, region)
                  if c.met is False]
    if lines:
        console.print(f"[bold]design guidance[/], missed pole requirements ({SHORT_ASSUMPTION}):")
        for line in lines:
            console.print(f"  {line}", highlight=False)


_JUDGEMENT_TEXT = {"better": "✔ better", "worse": "✘ worse", "same": "= same"}


def _judgement_cell(judgement: str | None, significant: bool | None) -> str:
    """Symbol and word (never colour alone); a change inside the scatter says so."""
    if judgement is None:
        return ""
    if significant is False and judgement != "same":
        return f"~ {judgement}?"  # the direction, but inside the scatter
    style = {"better": "green", "worse": "red"}.get(judgement)
    text = _JUDGEMENT_TEXT[judgement]
    return f"[{style}]{text}[/]" if style else text


def comparison_document(cmp: Comparison) -> dict[str, Any]:
    """A :class:`livestep.judge.compare.Comparison` as a JSON-ready dict."""
    return {"a": {"label": cmp.a_label, "steps": cmp.a_steps},
            "b": {"label": cmp.b_label, "steps": cmp.b_steps},
            "quantities": [{
                "quantity": c.quantity, "label": QUANTITIES[c.quantity].label,
                "unit": QUANTITIES[c.quantity].unit, "better": QUANTITIES[c.quantity].better,
                "a": _stats_record(c.a), "b": _stats_record(c.b), "change": _clean(c.change),
                "change_pct": _clean(c.change_pct), "judgement": c.judgement,
                "p_value": _clean(c.p_value), "significant": c.significant}
                for c in cmp.changes]}


def render_comparison(cmp: Comparison, console: Console) -> None:
    """One row per quantity: mean A, mean B, the change and whether it is better."""
    table = _compact_table(escape(f"A: {cmp.a_label} ({cmp.a_steps} steps)  vs  B:"
                                  f" {cmp.b_label} ({cmp.b_steps} steps)"),
                           f"{_UNIT_CAPTION}; change = B - A (of a quantity in %: percentage"
                           " points); p: Welch's t-test of the two"
                           " means; ~ better? / ~ worse?: p >= 0.05, the change may be"
                           " step-to-step scatter")
    table.add_column("quantity", no_wrap=True, min_width=22)
    table.add_column("unit", no_wrap=True)
    for name in ("A mean", "B mean", "change", "p", "B is"):
        table.add_column(name, justify="right", no_wrap=True)
    for c in cmp.changes:
        change = "-" if c.change is None else (
            ("+" if c.change > 0 else "") + _shown(c.quantity, c.change, ".3g"))
        table.add_row(c.quantity, _scaled(c.quantity)[1], _shown(c.quantity, c.a.mean, ".3g"),
                      _shown(c.quantity, c.b.mean, ".3g"), change,
                      "-" if c.p_value is None else f"{c.p_value:.1g}",
                      _judgement_cell(c.judgement, c.significant))
    console.print(table)
