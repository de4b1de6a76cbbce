"""The error zoom and the overlay as pure plots, against simulated steps."""

from __future__ import annotations

import numpy as np
from _signals import lsim_staircase

from livestep.live.watch import StepEntry
from livestep.steps.analysis import AnalysisSettings, analyze_chunks
from livestep.steps.measure import MeasureSettings
from livestep.steps.samples import SampleChunk
from livestep.tui.overlay import gain_summary, overlay_plot
from livestep.tui.zoom import ZOOM_BANDS, error_zoom_plot

RATE = 1000.0


def _entries(zeta: float, levels: list[float], tag: str) -> list[StepEntry]:
    """Steps through ``levels`` (1.5 s each) of wn^2 / (s^2 + 2 zeta wn s + wn^2), wn 30
    rad/s, simulated by scipy.signal.lsim."""
    t, sp, y = lsim_staircase(zeta, levels, rate=RATE, noise=1e-4, seed=2)
    from dataclasses import replace

    return [StepEntry(replace(r, tags=(("gains", tag), ("plan_entry", str(k)))))
            for k, r in enumerate(analyze_chunks([SampleChunk(t=t, setpoint=sp, feedback=y)],
                                                 AnalysisSettings(keep_windows=True)))]


def test_the_error_zoom_shows_the_overshoot_in_percent_of_the_step():
    # zeta 0.7: 100 exp(-zeta pi / sqrt(1 - zeta^2)) = 4.6 % overshoot (Ogata), inside the
    # zoom's +-5 % (2.5 bands of 2 %): the trace's highest point is the overshoot, for the
    # step down as for the step up (past the final level is positive)
    expected = 100 * np.exp(-0.7 * np.pi / np.sqrt(1 - 0.49))
    for e in _entries(0.7, [0.0, 4.0, -2.0], "a"):
        plot = error_zoom_plot(e, MeasureSettings())
        assert plot.y_range == (-ZOOM_BANDS * 2.0, ZOOM_BANDS * 2.0)
        (trace,) = plot.traces
        assert abs(float(np.max(trace.y)) - expected) < 0.3
        assert float(np.min(trace.y)) < -99  # it starts a whole step away


def test_the_overlay_and_the_summary_group_by_gain_set():
    entries = _entries(0.3, [0.0, 5.0, 0.0], "soft") + _entries(0.8, [0.0, 5.0, 0.0], "firm")
    plot = overlay_plot(entries, MeasureSettings())
    assert [t.label for t in plot.traces] == ["soft", "firm"]
    # normalised peaks: 1 + the closed-form overshoot of each damping ratio (Ogata)
    for tr, zeta in zip(plot.traces, (0.3, 0.8), strict=True):
        peak = float(np.max(np.asarray(tr.y)))
        assert abs(peak - 1 - np.exp(-zeta * np.pi / np.sqrt(1 - zeta ** 2))) < 0.01
    last = overlay_plot(entries, MeasureSettings(), mode="last")
    assert len(last.traces) == 4
    import io

    from rich.console import Console

    out = io.StringIO()
    Console(file=out, width=80, color_system=None).print(gain_summary(entries))
    rows = {ln.split()[0]: ln.split() for ln in out.getvalue().splitlines() if ln.strip()}
    assert rows["soft"][1] == "2" and rows["firm"][1] == "2"
    # mean overshoot of each set: its closed-form value, to the table's 0.1 %
    assert abs(float(rows["soft"][3]) - 100 * np.exp(-0.3 * np.pi / np.sqrt(0.91))) < 0.3
    assert "plan_entry" not in out.getvalue()
