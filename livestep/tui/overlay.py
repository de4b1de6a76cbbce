"""Steps compared at a glance: several steps on one plot, and one row per gain set.

Pure functions of the watch's step entries (no textual). Steps are put on common axes by
time from their step instant and by their response normalised to the step, ``(feedback -
initial) / amplitude``: 0 before, 1 at the final level, whatever the step's size and
direction. A session's steps are grouped by the ``gains`` note when they carry one (the
plan runner and the virtual bench tag every step with it), else by the first other note
whose value changes between steps; the plan's own bookkeeping notes (entry, setpoint,
repeat) never group.
"""

from __future__ import annotations

from collections.abc import Sequence

import numpy as np
from rich.table import Table
from rich.text import Text

from livestep.judge.verdict import FAIL, NOT_MEASURED, PASS, SYMBOLS, WARN
from livestep.live.watch import StepEntry
from livestep.steps.measure import MeasureSettings
from livestep.tui.plot import HLine, Plot, Trace

__all__ = ["BOOKKEEPING", "OVERLAY_MODES", "gain_summary", "group_tag", "groups",
           "overlay_plot", "representative"]

#: Notes the plan runner adds to every step: never a grouping, hidden in the history.
BOOKKEEPING = frozenset({"plan_entry", "setpoint", "repeat"})
#: The overlay's modes, in the order its key cycles through them.
OVERLAY_MODES = ("groups", "last")
#: How many recent steps the ``last`` mode overlays.
LAST_N = 6
#: Series styles: colour and pattern, none a verdict colour.
SERIES = (("bright_cyan", "solid"), ("orchid", "dashed"), ("bright_white", "dotted"),
          ("dodger_blue1", "solid"), ("magenta", "dashed"), ("grey70", "dotted"))
_PATTERN_MARK = {"solid": "━", "dashed": "╍", "dotted": "┈"}


def group_tag(entries: Sequence[StepEntry]) -> str | None:
    """The note that names the steps' groups: ``gains`` when any step carries it, else the
    first other note (not bookkeeping) with two values or more; ``None`` when none does."""
    values: dict[str, set[str]] = {}
    for e in entries:
        for name, value in e.result.tags:
            values.setdefault(name, set()).add(value)
    if "gains" in values:
        return "gains"
    for name, vals in values.items():
        if name not in BOOKKEEPING and len(vals) > 1:
            return name
    return None


def groups(entries: Sequence[StepEntry], tag: str | None) -> dict[str, list[StepEntry]]:
    """The entries by the value of ``tag`` (``-`` for steps without it), in order of first
    appearance; one group ``all steps`` without a tag."""
    if tag is None:
        return {"all steps": list(entries)} if entries else {}
    out: dict[str, list[StepEntry]] = {}
    for e in entries:
        out.setdefault(dict(e.result.tags).get(tag, "-"), []).append(e)
    return out


def _plottable(e: StepEntry) -> bool:
    w, m = e.result.window, e.result.metrics
    return w is not None and w.t.size > 2 and np.isfinite(m.amplitude) and m.amplitude != 0


def representative(entries: Sequence[StepEntry]) -> StepEntry | None:
    """The group's median step by overshoot (the lower middle one for an even count), among
    those whose samples are still in memory and, when there are such, whose drive was not at
    its limit (a limited response says little about the gains); ``None`` when none is."""
    kept = sorted((e for e in entries if _plottable(e)),
                  key=lambda e: (np.nan_to_num(e.result.metrics.overshoot_pct, nan=0.0),
                                 e.result.index))
    linear = [e for e in kept if e.result.limit is None] or kept  # a limited step: atypical
    return linear[(len(linear) - 1) // 2] if kept else None


def _series(entries: Sequence[StepEntry], mode: str) -> tuple[list[tuple[str, StepEntry]], str]:
    """The (label, entry) pairs to overlay and the plot's title."""
    if mode == "groups":
        tag = group_tag(entries)
        if tag is not None:
            picked = [(value, rep) for value, members in groups(entries, tag).items()
                      if (rep := representative(members)) is not None]
            if len(picked) > 1:
                return picked, f"median of each {tag}"
    recent = [e for e in entries if _plottable(e)][-LAST_N:]
    tag = group_tag(entries)
    return ([(f"#{e.result.index}" + (f" {tag}={dict(e.result.tags).get(tag, '-')}"
                                       if tag else ""), e) for e in recent],
            f"last {len(recent)}")


def overlay_plot(entries: Sequence[StepEntry], measure: MeasureSettings, *,
                 mode: str = "groups") -> Plot:
    """The overlay: ``mode`` ``groups`` (one representative per gain set or tag value, when
    there are two or more) or ``last`` (the last steps); normalised responses against time
    from each step instant, with the settling band around 1."""
    picked, title = _series(entries, mode)
    if not picked:
        return Plot([], empty="overlay: no step with its samples in memory yet")
    traces, legend = [], [(f"{title}: ", "bold")]
    span = 0.0
    for k, (label, e) in enumerate(picked):
        m, w = e.result.metrics, e.result.window
        assert w is not None
        colour, pattern = SERIES[k % len(SERIES)]
        t = w.t - m.t_step
        y = (w.feedback - m.initial) / m.amplitude
        traces.append(Trace(t, y, colour, label, pattern))
        legend.append((f"{_PATTERN_MARK[pattern]} {label} ", colour))
        end = m.settling_time * 1.6 if m.settled and m.settling_time else float(t[-1])
        span = max(span, min(end, float(t[-1])))
    band = measure.settling_band / 100
    lines = [HLine(1 - band, "dodger_blue1", "dashed"), HLine(1 + band, "dodger_blue1", "dashed"),
             HLine(0.0, "grey50", "dotted")]
    legend.append((f"╍ ±{measure.settling_band:g} % band ", "dodger_blue1"))
    span = span or 1.0
    return Plot(traces, hlines=lines, x_range=(-0.1 * span, span), legend=legend,
                empty="overlay: nothing to show")


def _mean(values: list[float | None]) -> float | None:
    v = np.array([x for x in values if x is not None and np.isfinite(x)], dtype=float)
    return float(v.mean()) if v.size else None


def _fmt(x: float | None, scale: float = 1.0, digits: int = 1) -> str:
    return "–" if x is None else f"{x * scale:.{digits}f}"


def gain_summary(entries: Sequence[StepEntry]) -> Table:
    """One row per gain set (or tag value): steps, mean rise time, overshoot, settling time
    (settled steps only) and damping ratio, and the verdict counts, like ``compare --tags``
    in one table."""
    tag = group_tag(entries)
    table = Table(box=None, pad_edge=False, padding=(0, 1), show_edge=False,
                  header_style="bold", title_justify="left",
                  title=Text(f"by {tag}" if tag else "all steps (no gain set tag yet)",
                             style="bold"))
    for name, just in ((tag or "steps", "left"), ("n", "right"), ("rise ms", "right"),
                       ("OS %", "right"), ("settle ms", "right"), ("ζ", "right"),
                       ("verdicts", "left")):
        table.add_column(name, justify=just, no_wrap=True)  # type: ignore[arg-type]
    for value, members in groups(entries, tag).items():
        ms = [e.result.metrics for e in members]
        counts = {v: 0 for v in (PASS, WARN, FAIL, NOT_MEASURED)}
        for e in members:
            if e.verdict is not None:
                counts[e.verdict.verdict] += 1
        verdicts = " ".join(f"{SYMBOLS[v]}{n}" for v, n in counts.items() if n) or "–"
        table.add_row(Text(value), str(len(members)),
                      _fmt(_mean([m.rise_time for m in ms]), 1e3),
                      _fmt(_mean([m.overshoot_pct for m in ms])),
                      _fmt(_mean([m.settling_time if m.settled else None for m in ms]), 1e3),
                      _fmt(_mean([e.result.model.zeta if e.result.model else None
                                  for e in members]), digits=3),
                      verdicts)
    return table
