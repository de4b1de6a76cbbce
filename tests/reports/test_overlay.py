"""The report's overlay of the gain sets: groups, representatives, normalisation, section."""

from __future__ import annotations

from dataclasses import replace

import numpy as np
from _signals import lsim_staircase

from livestep.reports.overlay import overlay_groups
from livestep.reports.plots import overlay_figure
from livestep.steps.analysis import AnalysisSettings, analyze_chunks
from livestep.steps.samples import SampleChunk

RATE = 1000.0


def _session(zetas: list[float], levels: list[float]):
    """Steps through ``levels`` (1.5 s each), the loop K wn^2 / (s^2 + 2 zeta wn s + wn^2)
    with wn = 30 rad/s simulated by scipy.signal.lsim, the damping ratio changing with each
    step; the steps tagged gains=z<zeta>."""
    results = []
    for zeta in zetas:
        t, sp, y = lsim_staircase(zeta, levels, rate=RATE, noise=1e-3, seed=4)
        for r in analyze_chunks([SampleChunk(t=t, setpoint=sp, feedback=y)],
                                AnalysisSettings(keep_windows=True)):
            results.append(replace(r, tags=(("gains", f"z{zeta:g}"),)))
    return results


def test_each_gain_set_overlaid_by_its_median_step_normalised():
    # up 5, down to -3, up 10: sizes and directions differ, the dynamics do not, so the
    # normalised responses of one gain set coincide (linearity of the simulated loop)
    results = _session([0.3, 0.6], [0.0, 5.0, -3.0, 7.0])
    how, groups = overlay_groups(results)
    assert how == "gain set (note gains)" and [g[0] for g in groups] == ["gains=z0.3",
                                                                          "gains=z0.6"]
    for _, rep, others in groups:
        os_ = sorted(r.metrics.overshoot_pct for r in [rep, *others])
        assert rep.metrics.overshoot_pct == os_[(len(os_) - 1) // 2]  # the median
        curves = []
        for r in [rep, *others]:
            w, m = r.window, r.metrics
            t = w.t - m.t_step
            keep = (t >= 0) & (t <= 0.6)
            curves.append(np.interp(np.linspace(0, 0.6, 200), t[keep],
                                    ((w.feedback - m.initial) / m.amplitude)[keep]))
        assert np.max(np.ptp(np.array(curves), axis=0)) < 0.02
        # the peak of the normalised curve is 1 + overshoot: Ogata's closed form for the
        # damping ratio, 100 exp(-zeta pi / sqrt(1 - zeta^2)) %
    peaks = {k: None for k in ("gains=z0.3", "gains=z0.6")}
    for key, rep, _ in groups:
        w, m = rep.window, rep.metrics
        peaks[key] = float(np.max((w.feedback - m.initial) / m.amplitude))
    for key, zeta in (("gains=z0.3", 0.3), ("gains=z0.6", 0.6)):
        assert abs(peaks[key] - 1 - np.exp(-zeta * np.pi / np.sqrt(1 - zeta ** 2))) < 0.02
    fig = overlay_figure(groups)
    lines = [ln for ln in fig.axes[0].get_lines() if ln.get_label().startswith("gains=")]
    assert len(lines) == 2 and lines[0].get_linestyle() != lines[1].get_linestyle()


def test_one_gain_set_or_a_limited_median():
    results = _session([0.4], [0.0, 5.0, 0.0])
    assert overlay_groups(results)[1] == []  # a session of one gain set: no overlay
    # a step whose drive was at its limit is not the representative while others exist
    from livestep.steps.limits import LimitHold

    results = _session([0.3, 0.6], [0.0, 5.0, 0.0, 5.0])
    flagged = [replace(r, limit=LimitHold("force", 250.0, 0.0, 0.01)) if k == 1 else r
               for k, r in enumerate(results)]
    _, groups = overlay_groups(flagged)
    assert all(rep.limit is None for _, rep, _ in groups)
