"""Report figures: one step's response, and one metric over the session.

Pure functions from results to matplotlib ``Figure`` objects (no pyplot, so no GUI
backend and no global state), then to SVG text or PNG files. Every curve differs by
line style and marker as well as by colour, so the plots read in black and white.
"""

from __future__ import annotations

import io
import re
from collections.abc import Iterator, Sequence
from contextlib import contextmanager
from dataclasses import dataclass
from pathlib import Path

import matplotlib
import numpy as np
from matplotlib.figure import Figure

from livestep.steps.analysis import StepResult
from livestep.steps.second_order import step_response

__all__ = ["TrendPoint", "overlay_figure", "save_png", "step_figure", "svg_text",
           "trend_figure"]

_RC = {"svg.fonttype": "none", "svg.hashsalt": "livestep", "font.size": 8.5,
       "axes.grid": True, "grid.color": "0.88", "grid.linewidth": 0.5,
       "legend.fontsize": 7.5, "legend.framealpha": 0.9}
_STEP_SIZE = (7.2, 3.3)  # inches
#: Trends: two side by side in the page's 1100 px, each drawn at about its natural size
#: (96 px per inch), so its 8.5 pt text is about 11 px high on the screen.
_TREND_SIZE = (5.4, 2.7)
# Fixed margins (fractions of the figure): room for 7-character tick labels and the axis
# labels, and on the right of step plots for the reference-level labels. Measured
# against matplotlib's constrained layout, which takes three quarters of the drawing time.
_STEP_MARGINS = dict(left=0.105, right=0.935, bottom=0.135, top=0.915)
_TREND_MARGINS = dict(left=0.135, right=0.975, bottom=0.15, top=0.9)
#: Drawing order (matplotlib zorder) of the measured trace and of the fitted model under
#: it, the model's line width (points) and opacity.
_TRACE_Z, _MODEL_Z = 3.0, 1.5
_MODEL_WIDTH, _MODEL_ALPHA = 4.5, 0.35
#: marker of a trend point by verdict: small circle, triangle, a big cross
#: Width of a per-step limit mark, points.
_LIMIT_MARK = 13.0
_VERDICT_MARKERS = {"pass": ("o", "black", 4.0), "warn": ("^", "tab:orange", 6.5),
                    "fail": ("X", "tab:red", 8.0)}


@contextmanager
def _style() -> Iterator[None]:
    with matplotlib.rc_context(_RC):
        yield


def _view_end(result: StepResult, span: float) -> float:
    """Seconds after the step to show: twice the settling time, or the whole window."""
    m = result.metrics
    if m.settled and m.settling_time:
        reach = max(2.0 * m.settling_time, 4.0 * ((m.rise_start or 0.0) + (m.rise_time or 0.0)))
        return min(span, reach)
    return span


def _thin(t: np.ndarray, y: np.ndarray, most: int = 4000) -> tuple[np.ndarray, np.ndarray]:
    """At most about ``most`` points of a long trace: the lowest and highest sample of each
    run of samples, in time order, so the drawn envelope (noise, spikes) is unchanged."""
    if t.size <= most:
        return t, y
    k = -(-t.size // (most // 2))
    n = t.size // k * k
    runs = y[:n].reshape(-1, k)
    base = np.arange(0, n, k)[:, None]
    picks = np.sort(np.hstack((base + runs.argmin(axis=1)[:, None],
                               base + runs.argmax(axis=1)[:, None])), axis=1).ravel()
    picks = np.concatenate((picks, np.arange(n, t.size)))
    return t[picks], y[picks]


def step_figure(result: StepResult, *, settling_band: float = 2.0,
                rise_levels: tuple[float, float] = (10.0, 90.0),
                title: str | None = None) -> Figure:
    """Setpoint and feedback of one step (``result.window`` must be set) against time from
    the step instant (seconds), with the settling band (+-``settling_band`` % of
    |amplitude| around the final level), the rise reference levels (% of amplitude),
    the rise, peak and settling instants and the fitted model when there is one."""
    w = result.window
    if w is None:
        raise ValueError("the result has no samples: analyse with keep_windows=True")
    m = result.metrics
    with _style():
        fig = Figure(figsize=_STEP_SIZE)
        fig.subplots_adjust(**_STEP_MARGINS)
        ax = fig.add_subplot()
        t = w.t - m.t_step
        end = _view_end(result, float(t[-1]))
        start = max(float(t[0]), -0.1 * end)
        shown = (t >= start) & (t <= end)
        if w.setpoint is not None:
            ax.plot(*_thin(t[shown], w.setpoint[shown]), color="0.45", linestyle=(0, (5, 2)),
                    linewidth=1.3, drawstyle="steps-post", label="setpoint")
        # The measured trace on top of everything else it shares the plot with.
        ax.plot(*_thin(t[shown], w.feedback[shown]), color="black", linewidth=0.8,
                label="feedback", zorder=_TRACE_Z)
        amp = m.amplitude
        half = abs(amp) * settling_band / 100.0
        ax.fill_between([0.0, end], m.final - half, m.final + half, color="0.8", alpha=0.6,
                        hatch="////", edgecolor="0.55", linewidth=0.0,
                        label=f"settling band \u00b1{settling_band:g} %")
        for pct, style in ((rise_levels[0], ":"), (50.0, (0, (1, 3))), (rise_levels[1], ":")):
            level = m.initial + pct / 100.0 * amp
            ax.axhline(level, color="0.35", linestyle=style, linewidth=0.7)
            ax.annotate(f"{pct:g} %", (1.0, level), xycoords=("axes fraction", "data"),
                        xytext=(2, 0), textcoords="offset points", va="center", fontsize=7)
        if result.model is not None:
            f = result.model
            tm = np.linspace(start, end, 600)
            ym = m.initial + f.amplitude * step_response(tm - f.dead_time, f.zeta, f.wn)
            # A wide pale band under the trace: where the model fits, the measured trace
            # runs inside it, and where it does not, the band shows beside the trace;
            # either way it hides none of the measurement.
            ax.plot(tm, ym, color="tab:blue", alpha=_MODEL_ALPHA, linewidth=_MODEL_WIDTH,
                    solid_capstyle="butt", zorder=_MODEL_Z,
                    label=f"model \u03b6={f.zeta:.3g}, \u03c9n={f.wn:.3g} rad/s,"
                    f" dead {1e3 * f.dead_time:.3g} ms")
        if m.rise_start is not None and m.rise_time is not None:
            lo, hi = (m.initial + p / 100.0 * amp for p in rise_levels)
            ax.plot([m.rise_start, m.rise_start + m.rise_time], [lo, hi], linestyle="none",
                    marker="o", markersize=6, markerfacecolor="white", markeredgecolor="black",
                    label=f"rise {1e3 * m.rise_time:.3g} ms")
        if m.peak_time is not None and m.peak is not None:
            ax.plot([m.peak_time], [m.peak], linestyle="none", marker="v" if amp > 0 else "^",
                    markersize=7, color="black",
                    label=f"peak {1e3 * m.peak_time:.3g} ms, {m.overshoot_pct:.3g} %")
        if m.settling_time is not None:
            ax.axvline(m.settling_time, color="black", linestyle=":", linewidth=1.4,
                       label=f"settled {1e3 * m.settling_time:.3g} ms")
        ax.set_xlim(start, end)
        ax.set_xlabel("time from the step instant, s")
        ax.set_ylabel("feedback" if w.setpoint is None else "setpoint, feedback")
        ax.set_title(title or f"step {result.index} at t = {m.t_step:.4g} s", loc="left")
        ax.legend(loc="best")
    return fig


@dataclass(frozen=True)
class TrendPoint:
    """One step's value of a metric (``None``: undefined for that step), its verdict on
    that metric and the limits that applied to it (metric's units, ``None``: no limit)."""

    index: int
    value: float | None
    verdict: str | None = None
    low: float | None = None
    high: float | None = None


def trend_figure(points: Sequence[TrendPoint], *, label: str, unit: str) -> Figure:
    """A metric against the step index, each step's marker showing its verdict on this
    metric, with the low and high limits: a horizontal line when every step has the same
    one, else (a ``[[when]]`` section gives some steps other limits, or none) a short
    horizontal mark at each step a limit applies to, never a line joining them."""
    with _style():
        fig = Figure(figsize=_TREND_SIZE)
        fig.subplots_adjust(**_TREND_MARGINS)
        ax = fig.add_subplot()
        known = [p for p in points if p.value is not None]
        ax.plot([p.index for p in known], [p.value for p in known], color="0.4",
                linewidth=0.8)
        for verdict, (marker, colour, size) in _VERDICT_MARKERS.items():
            sel = [p for p in known if p.verdict == verdict]
            if sel:
                ax.plot([p.index for p in sel], [p.value for p in sel], linestyle="none",
                        marker=marker, color=colour, markeredgecolor="black",
                        markersize=size, label=verdict)
        unjudged = [p for p in known if p.verdict not in _VERDICT_MARKERS]
        if unjudged:
            ax.plot([p.index for p in unjudged], [p.value for p in unjudged],
                    linestyle="none", marker="o", color="black", markersize=4.0)
        for attr, style, name in (("low", "--", "min"), ("high", (0, (6, 2, 1, 2)), "max")):
            found = {getattr(p, attr) for p in points}
            if found == {None}:
                continue
            if len(found) == 1:  # one limit for every step: a line across
                ax.axhline(found.pop(), color="black", linestyle=style, linewidth=1.0,
                           label=name)
                continue
            at = [p for p in points if getattr(p, attr) is not None]
            ax.plot([p.index for p in at], [getattr(p, attr) for p in at], linestyle="none",
                    marker="_", markersize=_LIMIT_MARK, markeredgewidth=1.8, color="black",
                    label=f"{name} (per step)")
        ax.set_xlabel("step")
        # The name as a title, not a y label: long tick labels (0.999991) then still fit.
        ax.set_title(f"{label}, {unit}" if unit else label, loc="left")
        ax.xaxis.get_major_locator().set_params(integer=True)
        ax.ticklabel_format(axis="y", useOffset=False)
        if ax.get_legend_handles_labels()[0]:
            ax.legend(loc="best", fontsize=6.5)
    return fig


_ID_REF = re.compile(r'(\bid="|url\(#|href="#)([^")]+)')
_METADATA = re.compile(r"\s*<metadata>.*?</metadata>", re.DOTALL)


#: The overlay's groups: colour and line style each (distinct in black and white too).
_GROUP_STYLES = (("tab:blue", "-"), ("tab:purple", "--"), ("black", ":"), ("tab:cyan", "-."),
                 ("tab:brown", (0, (5, 1, 1, 1, 1, 1))), ("0.45", (0, (1, 3))))


def overlay_figure(groups: Sequence[tuple[str, StepResult, Sequence[StepResult]]], *,
                   settling_band: float = 2.0) -> Figure:
    """Steps on common axes: ``groups`` of (label, median step, other steps), each step's
    response ``(feedback - initial) / amplitude`` against time from its step instant; the
    median thick, the others thin, one colour and line style per group; the settling band
    (+- ``settling_band`` % of the step) around 1 shaded."""
    with _style():
        fig = Figure(figsize=_STEP_SIZE)
        fig.subplots_adjust(**_STEP_MARGINS)
        ax = fig.add_subplot()
        end = 0.0
        for k, (label, rep, others) in enumerate(groups):
            colour, style = _GROUP_STYLES[k % len(_GROUP_STYLES)]
            for r, width, alpha in [(rep, 1.8, 1.0)] + [(o, 0.6, 0.45) for o in others]:
                w, m = r.window, r.metrics
                assert w is not None
                t = w.t - m.t_step
                shown = t <= _view_end(r, float(t[-1]))
                end = max(end, float(t[shown][-1]))
                ax.plot(*_thin(t[shown], (w.feedback[shown] - m.initial) / m.amplitude),
                        color=colour, linestyle=style, linewidth=width, alpha=alpha,
                        label=f"{label} (step {r.index}, median)" if r is rep else None)
        half = settling_band / 100
        ax.axhspan(1 - half, 1 + half, color="0.8", alpha=0.6, linewidth=0.0,
                   label=f"±{settling_band:g} % band")
        ax.axhline(0.0, color="0.35", linestyle=":", linewidth=0.7)
        ax.set_xlim(-0.15 * end, end)
        ax.set_xlabel("time from the step instant, s")
        ax.set_ylabel("response / step")
        ax.set_title("responses normalised to the step", loc="left")
        ax.legend(loc="lower right")
    return fig


def svg_text(fig: Figure, prefix: str) -> str:
    """The figure as an ``<svg>`` element to put inline in HTML: no XML declaration or
    doctype, every id (and every reference to one) prefixed with ``prefix`` so several
    plots in one page never share an id, and no metadata block (no date: the output is
    reproducible)."""
    buf = io.StringIO()
    with _style():
        fig.savefig(buf, format="svg", metadata={"Date": None})
    text = buf.getvalue()
    text = _METADATA.sub("", text[text.index("<svg"):])
    return _ID_REF.sub(lambda mo: f"{mo.group(1)}{prefix}{mo.group(2)}", text)


def save_png(fig: Figure, path: str | Path, dpi: int = 120) -> None:
    """Write the figure as a PNG file (Agg renderer)."""
    with _style():
        fig.savefig(path, format="png", dpi=dpi)
