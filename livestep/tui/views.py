"""What the terminal UI shows, built from a watch snapshot as rich renderables and text.

No textual here: every function takes plain data (a :class:`~livestep.live.watch.Snapshot`,
a :class:`~livestep.live.watch.StepEntry`) and returns rich objects, so the screens' content
is tested without an app.
"""

from __future__ import annotations

from pathlib import Path

import numpy as np
from rich.columns import Columns
from rich.console import Group, RenderableType
from rich.table import Table
from rich.text import Text

from livestep.judge.design import SHORT_ASSUMPTION, assess, design_region
from livestep.judge.profile import Profile
from livestep.judge.quantities import QUANTITIES, Quantity, value_of
from livestep.judge.verdict import (
    FAIL,
    NOT_MEASURED,
    PASS,
    SYMBOLS,
    WARN,
    format_difference,
    format_seconds,
    format_value,
)
from livestep.live.watch import (
    DISCONNECTED,
    FINISHED,
    PAUSED,
    STOPPED,
    STREAMING,
    WAITING,
    Samples,
    Snapshot,
    StepEntry,
)
from livestep.steps.analysis import StepResult
from livestep.steps.measure import MeasureSettings
from livestep.steps.progress import StepProgress
from livestep.steps.second_order import step_response
from livestep.tui.overlay import BOOKKEEPING
from livestep.tui.plot import HLine, Marker, Plot, Trace

__all__ = ["STATE_SYMBOLS", "design_sentence", "history_row", "link_text", "step_panel",
           "step_plot", "verdict_text"]

#: A symbol beside each link state, so the state reads without colour.
STATE_SYMBOLS = {STREAMING: "▶", WAITING: "◌", DISCONNECTED: "✖", PAUSED: "⏸",
                 FINISHED: "■", STOPPED: "■"}
_STATE_STYLE = {STREAMING: "bold green", WAITING: "yellow", DISCONNECTED: "bold red",
                PAUSED: "bold yellow", FINISHED: "bold", STOPPED: "bold"}
_VERDICT_STYLE = {PASS: "bold green", WARN: "bold yellow", FAIL: "bold red",
                  NOT_MEASURED: "dim"}
#: The plot's own colours: none of them is a verdict colour (green, yellow, red), and
#: lines that share a plot also differ by pattern (solid, dashed band, dotted levels).
SETPOINT, FEEDBACK, MODEL = "grey70", "bright_cyan", "bold bright_white"
BAND, LEVELS, PEAK = "dodger_blue1", "orchid", "bright_white"
#: What the panel shows for a step without a profile.
DEFAULT_QUANTITIES = ("rise_time", "peak_time", "overshoot_pct", "settling_time",
                      "steady_state_error_pct", "iae")


def verdict_text(verdict: str | None, upper: bool = False) -> Text:
    """``✔ pass`` and friends, symbol and word (colour only on top)."""
    if verdict is None:
        return Text("– no profile", style="dim")
    word = verdict.upper() if upper else verdict
    return Text(f"{SYMBOLS[verdict]} {word}", style=_VERDICT_STYLE[verdict])


def _rate(hz: float | None) -> str:
    if hz is None:
        return "rate –"
    return f"{hz / 1e3:.2f} kHz" if hz >= 1e3 else f"{hz:.0f} Hz"


def link_text(snap: Snapshot, *, narrow: bool = False, width: int | None = None) -> Text:
    """The link at a glance: state, source, sample rate, decode errors, recording.
    ``narrow`` with a ``width``: two lines cut to it, the recording's name first on the
    second so it is never cut away."""
    if narrow and width:
        return _narrow_link(snap, width)
    c = snap.counters
    t = Text()
    t.append(f"{STATE_SYMBOLS.get(snap.state, '?')} {snap.state}",
             _STATE_STYLE.get(snap.state, ""))
    t.append(f"  {snap.source}  ", "bold")
    t.append(_rate(snap.sample_rate))
    if snap.replay:
        t.append("  speed " + ("max" if snap.speed is None else f"×{snap.speed:g}"))
    if snap.profile:
        t.append(f"  profile {snap.profile}")
    t.append("\n")
    bad = c["bad_total"]
    t.append(f"errors {bad}", "bold red" if bad else "")
    if bad and not narrow:
        worst = sorted(c["bad"].items(), key=lambda kv: -kv[1])[:2]
        t.append(" (" + ", ".join(f"{k} {n}" for k, n in worst) + ")")
    t.append(f"  gaps {c['gaps']}  lost {c['lost']}  reconnects {c['reconnects']}"
             f"  samples {c['samples']}")
    if snap.recording is None:
        t.append("  not recording")
    else:
        t.append(f"  rec {snap.recording if not narrow else Path(snap.recording).name}")
    if snap.error:
        t.append(f"\nerror: {snap.error}", "bold red")
    return t


def _narrow_link(snap: Snapshot, width: int) -> Text:
    c = snap.counters
    one = Text()
    one.append(f"{STATE_SYMBOLS.get(snap.state, '?')} {snap.state}",
               _STATE_STYLE.get(snap.state, ""))
    one.append(f"  {_rate(snap.sample_rate)}")
    if snap.replay:
        one.append("  speed " + ("max" if snap.speed is None else f"×{snap.speed:g}"))
    one.append(f"  {snap.source}", "bold")
    if snap.profile:
        one.append(f"  profile {snap.profile}")
    two = Text()
    if snap.recording is None:
        two.append("not recording  ")
    else:
        two.append(f"rec {Path(snap.recording).name}  ")
    bad = c["bad_total"]
    two.append(f"err {bad}", "bold red" if bad else "")
    two.append(f" gaps {c['gaps']} lost {c['lost']} reconn {c['reconnects']}"
               f" samples {c['samples']}")
    for line in (one, two):
        line.truncate(width, overflow="ellipsis")
    t = Text("\n").join([one, two])
    if snap.error:
        err = Text(f"\nerror: {snap.error}", "bold red")
        t.append_text(err)
    return t


def shown_tags(tags: tuple[tuple[str, str], ...], limit: int | None = None) -> str:
    """A step's tags as ``name=value`` words, the plan's bookkeeping notes (entry,
    setpoint, repeat) left out; cut to ``limit`` characters with an ellipsis."""
    text = " ".join(f"{k}={v}" for k, v in tags if k not in BOOKKEEPING)
    return text if limit is None or len(text) <= limit else text[:limit - 1] + "…"


def _ms(x: float | None) -> str:
    return "–" if x is None else f"{1e3 * x:.1f}"


def history_row(e: StepEntry, *, narrow: bool = False) -> tuple[Text | str, ...]:
    """One row of the history table: #, t_step, verdict, rise, overshoot, settling,
    damping ratio, tags (without the plan's bookkeeping; shortened when ``narrow``), and a
    ``▲`` before the verdict of a step whose output sat at its limit."""
    r, m = e.result, e.result.metrics
    return (str(r.index), f"{m.t_step:.3f}",
            _limit_mark(e) + (verdict_text(e.verdict.verdict) if e.verdict else Text("–")),
            _ms(m.rise_time), f"{m.overshoot_pct:.1f}",
            _ms(m.settling_time) if m.settled else "no",
            "–" if r.model is None else f"{r.model.zeta:.3f}",
            Text(shown_tags(r.tags, 18 if narrow else 60)))  # a Text: shown literally


def _limit_mark(e: StepEntry) -> Text:
    return Text("L ", "bold") if e.result.limit is not None else Text()


HISTORY_COLUMNS = ("#", "t step s", "verdict", "rise ms", "OS %", "settle ms", "ζ", "tags")


def _limit_text(q: Quantity, low: float | None, high: float | None) -> str:
    if low is not None and high is not None:
        return f"{format_value(q, low)} … {format_value(q, high)}"
    if high is not None:
        return f"≤ {format_value(q, high)}"
    if low is not None:
        return f"≥ {format_value(q, low)}"
    return "–"


def design_sentence(result: StepResult, profile: Profile | None, band_pct: float) -> str:
    """The design-guidance sentence for a step (:mod:`livestep.judge.design`): where the profile
    wants the dominant poles against the step's fitted model, the requirement missed by
    most first. ``band_pct``: the settling band, +- % of the amplitude."""
    if result.limit is not None:
        return (f"no design guidance: {result.limit.channel} was at its limit during the rise"
                " (the response is limited, not linear)")
    if profile is None:
        return "design guidance needs a profile (--profile)"
    if result.model is None:
        return "no model fitted: no design guidance"
    region = design_region(profile.limits_for(result), band_pct)
    if region.empty:
        return "the profile limits none of overshoot, settling and peak time: no guidance"
    sentences = assess(result.model, region)
    return f"{sentences[0]} ({SHORT_ASSUMPTION})" if sentences else ""


_PHASE_WORDS = {"stepped": "stepped, waiting for the response", "rising": "rising",
                "risen": "risen, waiting for the peak", "settling": "settling"}


def under_way_panel(p: StepProgress) -> RenderableType:
    """The step under way, as far as it is known: instant and size, then the rise time,
    then the peak and overshoot, then "settling" (provisional figures, read against the
    setpoint's target; the verdict comes when the window closes)."""
    head = Text()
    head.append("step under way", "bold")
    size = "" if p.size is None else f" {p.size:+.4g}"
    head.append(f"  {p.direction}{size} at {p.t_step:.3f} s  ({p.elapsed:.1f} s ago)")
    lines = [head, Text(_PHASE_WORDS.get(p.phase, p.phase), style="italic")]
    if p.rise_time is not None:
        lines.append(Text(f"rise        {format_seconds(p.rise_time)}"))
    if p.overshoot_pct is not None:
        peak = ("no overshoot" if p.peak_time is None else
                f"{p.overshoot_pct:.3g} % at {format_seconds(p.peak_time)}")
        lines.append(Text(f"peak        {peak}"))
    lines.append(Text("provisional, against the setpoint; the verdict follows once settled",
                      style="dim"))
    return Group(*lines)


def step_panel(e: StepEntry | None, *, live: bool, narrow: bool = False,
               guidance: str = "") -> RenderableType:
    """The chosen step against its profile: verdict, one row per limit with the value, the
    limit, the margin and the check's verdict; the fitted model; the design sentence."""
    if e is None:
        return Text("no finished step yet: a step's figures appear here as it is measured",
                    style="dim")
    r, m = e.result, e.result.metrics
    head = Text()
    head.append(f"step {r.index} ", "bold")
    head.append_text(verdict_text(e.verdict.verdict if e.verdict else None, upper=True))
    head.append(f"  {m.direction} {m.amplitude:+.4g} at {m.t_step:.3f} s")
    head.append("  (latest)" if live else "  (history)", "dim")
    tags = shown_tags(r.tags, 24 if narrow else None)
    if tags:
        head.append("  " + tags, "italic")
    if narrow:
        head.no_wrap, head.overflow = True, "ellipsis"  # one line: the panel is short
        return _narrow_panel(e, head)
    table = Table(box=None, pad_edge=False, padding=(0, 1), show_edge=False,
                  header_style="bold")
    table.add_column("quantity", no_wrap=True)
    table.add_column("value", justify="right", no_wrap=True)
    if e.verdict is not None:
        table.add_column("limit", justify="right", no_wrap=True)
        table.add_column("margin", justify="right", no_wrap=True)
        table.add_column("check", no_wrap=True)
        for c in e.verdict.checks:
            q = QUANTITIES[c.quantity]
            table.add_row(q.short, format_value(q, c.value), _limit_text(q, c.low, c.high),
                          "–" if c.margin is None else format_difference(q, c.margin),
                          verdict_text(c.verdict))
    else:
        for name in DEFAULT_QUANTITIES:
            q = QUANTITIES[name]
            table.add_row(q.short, format_value(q, value_of(r, name)))
    parts: list[RenderableType] = [head, table, _model_text(r)]
    parts.append(Text(guidance, style="italic"))
    for w in r.warnings[:2]:
        parts.append(Text(f"▲ {w}", style="yellow"))
    return Group(*parts)


def _model_text(r: StepResult) -> Text:
    f = r.model
    if f is None:
        return Text("model: not fitted", "dim")
    return Text(f"ζ {f.zeta:.3f}  ωn {f.wn:.4g} rad/s  dead {1e3 * f.dead_time:.1f} ms"
                f"  R² {f.fit_r2:.3f}")


def _narrow_panel(e: StepEntry, head: Text) -> RenderableType:
    """The step in a few lines (80 x 24): the head, the output-at-limit warning, every
    check (or figure) as ``symbol name value`` on wrapping lines, the model."""
    r = e.result
    parts: list[RenderableType] = [head]
    if r.limit is not None:
        parts.append(Text(f"▲ {r.limit.channel} at its limit {1e3 * r.limit.duration:.0f} ms"
                          " in the rise: limited, not linear; no model guidance",
                          style="yellow"))
    cells: list[Text] = []
    if e.verdict is not None:
        for c in e.verdict.checks:
            q = QUANTITIES[c.quantity]
            cell = verdict_text(c.verdict)[:1]
            cell.append(f" {q.short} {format_value(q, c.value)}")
            cells.append(cell)
    else:
        for name in DEFAULT_QUANTITIES:
            q = QUANTITIES[name]
            cells.append(Text(f"{q.short} {format_value(q, value_of(r, name))}"))
    parts += [Columns(cells, padding=(0, 3)), _model_text(r)]
    return Group(*parts)


def _crossing(t: np.ndarray, y: np.ndarray, level: float, rising: bool) -> float | None:
    hit = np.flatnonzero(y >= level) if rising else np.flatnonzero(y <= level)
    if hit.size == 0:
        return None
    k = int(hit[0])
    if k == 0 or y[k] == y[k - 1]:
        return float(t[k])
    return float(t[k - 1] + (level - y[k - 1]) * (t[k] - t[k - 1]) / (y[k] - y[k - 1]))


def overlays(r: StepResult, measure: MeasureSettings, *,
             feedback: tuple[np.ndarray, np.ndarray] | None = None
             ) -> tuple[list[HLine], list[Marker]]:
    """Settling band and reference levels as lines; the rise (lower and upper level
    crossings), peak and settling instants as markers ``r``, ``p``, ``s``."""
    m = r.metrics
    band = measure.settling_band / 100 * abs(m.amplitude)
    lo, hi = (m.initial + p / 100 * m.amplitude for p in measure.rise_levels)
    lines = [HLine(m.final - band, BAND, "dashed"), HLine(m.final + band, BAND, "dashed"),
             HLine(lo, LEVELS, "dotted"), HLine(hi, LEVELS, "dotted")]
    marks: list[Marker] = []
    if m.rise_time is not None:
        t_lo = None
        if m.rise_start is not None:  # measured
            t_lo = m.t_step + m.rise_start
        elif feedback is not None:  # else the raw samples' first crossing of the low level
            t, y = feedback
            after = t >= m.t_step
            t_lo = _crossing(t[after], y[after], lo, m.amplitude > 0)
        if t_lo is not None:
            marks += [Marker(t_lo, "r", "bold " + LEVELS),
                      Marker(t_lo + m.rise_time, "r", "bold " + LEVELS)]
    if m.peak_time is not None:
        marks.append(Marker(m.t_step + m.peak_time, "p", "bold " + PEAK))
    if m.settled and m.settling_time is not None:
        marks.append(Marker(m.t_step + m.settling_time, "s", "bold " + BAND))
    return lines, marks


LEGEND = (("━ setpoint ", SETPOINT), ("━ feedback ", FEEDBACK), ("╍ settling band ", BAND),
          ("┈ rise levels ", LEVELS), ("r rise ", "bold " + LEVELS), ("p peak ", "bold " + PEAK),
          ("s settled ", "bold " + BAND))
MODEL_LEGEND = (("━ model ", MODEL),)


def step_plot(samples: Samples | None, e: StepEntry | None, measure: MeasureSettings, *,
              x_range: tuple[float, float] | None = None, model: bool = False,
              narrow: bool = False, empty: str = "no samples yet") -> Plot:
    """The plot of some samples (the live stretch or a step's window) with the step's
    band, levels and instants, and the fitted model's response when ``model``."""
    traces: list[Trace] = []
    lines: list[HLine] = []
    marks: list[Marker] = []
    origin = 0.0
    if samples is not None and samples.t.size:
        if samples.setpoint is not None:
            traces.append(Trace(samples.t, samples.setpoint, SETPOINT, "setpoint"))
        traces.append(Trace(samples.t, samples.feedback, FEEDBACK, "feedback"))
    if e is not None:
        r = e.result
        origin = r.metrics.t_step
        fb = (samples.t, samples.feedback) if samples is not None else None
        lines, marks = overlays(r, measure, feedback=fb)
        if model and r.model is not None and samples is not None and samples.t.size:
            f, mt = r.model, r.metrics
            tt = np.linspace(mt.t_step, float(samples.t[-1]), 400)
            y = mt.initial + f.amplitude * step_response(
                np.maximum(tt - mt.t_step - f.dead_time, 0.0), f.zeta, f.wn)
            traces.append(Trace(tt, y, MODEL, "model"))
    legend = (LEGEND[4:] + LEGEND[:4] if narrow else LEGEND) + (MODEL_LEGEND if model else ())
    return Plot(traces, hlines=lines, markers=marks, x_range=x_range, t_origin=origin,
                legend=legend, empty=empty)
