"""livestep.reports.plots: what the step and trend figures draw, and their SVG text.

The step data are the closed-form second-order response (Ogata, Modern Control
Engineering, ch. 5; written out in _signals.unit_step); the figures' lines are read
back from the matplotlib objects and compared with the closed forms.
"""

from __future__ import annotations

import math
import re
import xml.etree.ElementTree as ET

import numpy as np
import pytest
from _signals import WN, make_step, reference, unit_step
from matplotlib.collections import PolyCollection
from matplotlib.figure import Figure
from matplotlib.lines import Line2D

from livestep.reports.plots import TrendPoint, _thin, step_figure, svg_text, trend_figure
from livestep.steps.analysis import AnalysisSettings, StepResult, analyze_chunks
from livestep.steps.samples import SampleChunk

ZETA, Y0 = 0.4, 2.0
DT = 1.0 / 2000.0


def _result(sp_change: float) -> StepResult:
    rec = make_step(ZETA, WN, dt=DT, t_window=1.2, n_pre=400, y0=Y0, sp_change=sp_change,
                    t0=3.0)
    (r,) = analyze_chunks([SampleChunk(t=rec.t, setpoint=rec.sp, feedback=rec.y)],
                          AnalysisSettings(keep_windows=True))
    return r


@pytest.fixture(scope="module")
def up() -> StepResult:
    return _result(5.0)


def _line(fig: Figure, label_start: str) -> Line2D:
    (line,) = [ln for ln in fig.axes[0].get_lines() if ln.get_label().startswith(label_start)]
    return line


def test_step_figure_draws_the_response_where_the_closed_form_puts_it(up: StepResult) -> None:
    fig = step_figure(up)
    ref = reference(ZETA, WN)
    amp = 5.0
    # The model curve, placed at the step instant from the initial level, follows the true
    # response (closed form, Ogata ch. 5) within 0.5 % of the amplitude.
    model = _line(fig, "model")
    x, y = (np.asarray(a, dtype=float) for a in model.get_data())
    assert np.max(np.abs(y - (Y0 + amp * unit_step(x, ZETA, WN)))) < 0.005 * amp
    # Feedback is drawn against time from the step: at x the data are the closed form.
    fx, fy = (np.asarray(a, dtype=float) for a in _line(fig, "feedback").get_data())
    assert np.max(np.abs(fy - (Y0 + amp * unit_step(fx, ZETA, WN)))) < 1e-9
    assert fx.min() < 0.0 < fx.max()
    # Rise markers at the exact 10 % and 90 % crossings (within 1 % of the rise time).
    rx, ry = (np.asarray(a, dtype=float) for a in _line(fig, "rise").get_data())
    assert np.allclose(rx, [ref.t_lo, ref.t_hi], atol=0.01 * ref.rise)
    assert np.allclose(ry, [Y0 + 0.1 * amp, Y0 + 0.9 * amp])
    # Peak at pi/wd with the closed-form overshoot (Ogata ch. 5).
    px, py = (np.asarray(a, dtype=float) for a in _line(fig, "peak").get_data())
    assert px[0] == pytest.approx(math.pi / (WN * math.sqrt(1 - ZETA**2)), abs=DT)
    assert py[0] == pytest.approx(Y0 + amp * (1 + ref.overshoot / 100), abs=0.003 * amp)
    # Settling: a vertical line at the last exit from the 2 % band.
    sx, _ = _line(fig, "settled").get_data()
    assert sx[0] == pytest.approx(ref.settling, abs=max(0.02 * ref.settling, 2 * DT))
    # The band: final level +- 2 % of the amplitude.
    (band,) = [c for c in fig.axes[0].collections if isinstance(c, PolyCollection)]
    ys = band.get_paths()[0].vertices[:, 1]
    assert ys.min() == pytest.approx(Y0 + amp - 0.02 * amp, abs=0.002 * amp)
    assert ys.max() == pytest.approx(Y0 + amp + 0.02 * amp, abs=0.002 * amp)


def test_step_figure_lines_differ_by_style_not_only_colour(up: StepResult) -> None:
    # Legible in black and white: no two curves share line style, marker and width (the
    # model is a band several times wider than the trace it lies under).
    lines = [ln for ln in step_figure(up).axes[0].get_lines() if not
             ln.get_label().startswith("_")]
    looks = {(str(ln.get_linestyle()), str(ln.get_marker()), round(ln.get_linewidth()))
             for ln in lines}
    assert len(looks) == len(lines)


def _trace_pixels_dark(fig: Figure, result: StepResult) -> float:
    """The share of the feedback samples in view whose pixel (the darkest of the 3 x 3
    around it) is near black: the measured trace is visible there, not covered."""
    from matplotlib.backends.backend_agg import FigureCanvasAgg

    canvas = FigureCanvasAgg(fig)
    canvas.draw()
    img = np.asarray(canvas.buffer_rgba())[..., :3].astype(float)
    ax = fig.axes[0]
    w = result.window
    t = w.t - result.metrics.t_step
    lo, hi = ax.get_xlim()
    pick = np.flatnonzero((t > lo) & (t < hi))[::25]
    xy = ax.transData.transform(np.column_stack((t[pick], w.feedback[pick])))
    legend = ax.get_legend().get_window_extent(canvas.get_renderer())
    xy = np.array([p for p in xy if not legend.contains(*p)])  # the legend box is opaque
    dark = 0
    for x, y in xy:
        col, row = int(round(x)), int(round(img.shape[0] - y))
        patch = img[row - 1:row + 2, col - 1:col + 2].mean(axis=2)
        dark += patch.min() < 100  # black over the pale model band: about 60-75
    return dark / len(xy)


def test_the_model_does_not_hide_the_measured_trace(up: StepResult,
                                                    monkeypatch: pytest.MonkeyPatch) -> None:
    from livestep.reports import plots

    fig = step_figure(up)
    model, trace = _line(fig, "model"), _line(fig, "feedback")
    # Drawn under the trace, wider and pale.
    assert model.get_zorder() < trace.get_zorder()
    assert model.get_linewidth() >= 4 * trace.get_linewidth() and model.get_alpha() < 0.5
    # Read back from the rendered pixels: the black trace shows along its whole length,
    # although the model (a good fit) lies right under it.
    assert _trace_pixels_dark(fig, up) > 0.95
    # The check can fail: an opaque model drawn over the trace hides it.
    monkeypatch.setattr(plots, "_MODEL_Z", 5.0)
    monkeypatch.setattr(plots, "_MODEL_ALPHA", 1.0)
    monkeypatch.setattr(plots, "_MODEL_WIDTH", 1.1)
    assert _trace_pixels_dark(step_figure(up), up) < 0.5


def test_down_step_peak_marker_points_the_other_way() -> None:
    fig = step_figure(_result(-5.0))
    assert _line(fig, "peak").get_marker() == "^"


def test_step_figure_needs_the_samples(up: StepResult) -> None:
    from dataclasses import replace
    with pytest.raises(ValueError, match="keep_windows"):
        step_figure(replace(up, window=None))


def _ids_and_refs(svg: str) -> tuple[list[str], set[str]]:
    ids = re.findall(r'\bid="([^"]+)"', svg)
    refs = set(re.findall(r'url\(#([^)]+)\)', svg)) | set(re.findall(r'href="#([^"]+)"', svg))
    return ids, refs


def test_svg_text_is_valid_svg_with_ids_unique_across_plots(up: StepResult) -> None:
    a = svg_text(step_figure(up), "a-")
    b = svg_text(step_figure(up), "b-")
    for text, prefix in ((a, "a-"), (b, "b-")):
        root = ET.fromstring(text)  # well-formed XML, an <svg> root, no XML declaration
        assert root.tag == "{http://www.w3.org/2000/svg}svg"
        assert not text.startswith("<?xml") and "<metadata" not in text
        ids, refs = _ids_and_refs(text)
        assert ids and all(i.startswith(prefix) for i in ids)
        assert len(ids) == len(set(ids))
        assert refs <= set(ids)  # every reference points into the same plot
    assert not set(_ids_and_refs(a)[0]) & set(_ids_and_refs(b)[0])


def test_trend_figure_limits_and_verdict_markers() -> None:
    points = [TrendPoint(0, 30.0, "fail", None, 10.0), TrendPoint(1, 9.5, "warn", None, 10.0),
              TrendPoint(2, None, "not measured", None, 10.0),
              TrendPoint(3, 2.0, "pass", None, 5.0), TrendPoint(4, 1.0, None)]
    fig = trend_figure(points, label="overshoot", unit="%")
    ax = fig.axes[0]
    # A limit that changes between steps ([[when]]): a mark at each step it applies to,
    # nothing joining them (no square wave), none where no limit applies (step 4).
    high = _line(fig, "max")
    assert high.get_label() == "max (per step)"
    assert high.get_linestyle() == "None" and high.get_marker() == "_"
    assert list(high.get_xdata()) == [0, 1, 2, 3]
    assert list(high.get_ydata()) == [10.0, 10.0, 10.0, 5.0]
    assert not [ln for ln in ax.get_lines() if ln.get_drawstyle().startswith("steps")]
    assert not [ln for ln in ax.get_lines() if ln.get_label().startswith("min")]
    fail = _line(fig, "fail")
    assert fail.get_marker() == "X" and list(fail.get_xdata()) == [0]
    assert list(_line(fig, "warn").get_xdata()) == [1]
    assert list(_line(fig, "pass").get_xdata()) == [3]
    assert ax.get_title(loc="left") == "overshoot, %"


def test_trend_figure_one_limit_for_every_step_is_a_line() -> None:
    points = [TrendPoint(k, 1.0 + k, "pass", 0.5, 10.0) for k in range(4)]
    fig = trend_figure(points, label="overshoot", unit="%")
    for name, y in (("max", 10.0), ("min", 0.5)):
        line = _line(fig, name)
        assert line.get_label() == name and list(line.get_ydata()) == [y, y]
        assert line.get_linestyle() in ("--", "-.") and line.get_marker() == "None"
    assert fig.get_size_inches()[0] >= 5.0  # two to a row in the page, about natural size


def test_thin_keeps_the_envelope_of_a_long_trace() -> None:
    rng = np.random.default_rng(3)
    t = np.arange(100_001) * 1e-4
    y = rng.standard_normal(t.size)
    y[54_321] = 9.0  # a spike must survive
    tt, yy = _thin(t, y)
    assert tt.size <= 4100 and np.all(np.diff(tt) > 0)
    assert yy.max() == 9.0 and yy.min() == y.min()
    short_t, short_y = _thin(t[:100], y[:100])
    assert np.array_equal(short_y, y[:100])
