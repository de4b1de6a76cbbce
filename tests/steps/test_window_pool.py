"""Steps measured and fitted in worker processes come out as in this process: the same
results (windows and extra channels included), in the same order, whatever slot a window
went through or whether it went whole."""

from __future__ import annotations

import numpy as np
import pytest
from scipy import signal

import livestep.steps.window_pool as wp
from livestep.steps.analysis import AnalysisSettings, StepAnalyzer, analyze_chunks
from livestep.steps.samples import SampleChunk

RATE = 2000.0


def _session(steps: int = 9) -> list[SampleChunk]:
    """Steps of a second-order loop (zeta 0.5, wn 40 rad/s; scipy.signal.lsim) with noise
    and an extra channel, every 0.5 s, in uneven chunks."""
    rng = np.random.default_rng(4)
    t = np.arange(int(0.5 * RATE * steps)) / RATE
    sp = np.repeat(rng.uniform(-2.0, 2.0, steps), int(0.5 * RATE))
    sp[: int(0.25 * RATE)] = 0.0
    _, y, _ = signal.lsim(([1600.0], [1.0, 40.0, 1600.0]), sp, t)
    y = y + rng.normal(0.0, 0.002, t.size)
    edges = [0, 700, 2222, 2223, 5000, t.size]
    return [SampleChunk(t=t[a:b], setpoint=sp[a:b], feedback=y[a:b],
                        extras={"current": 3.0 * sp[a:b]})
            for a, b in zip(edges[:-1], edges[1:], strict=True)]


def _windows(settings: AnalysisSettings) -> list:
    """The detected windows of the session (for submitting them one by one)."""
    analyzer = StepAnalyzer(settings)
    out = []
    for c in _session():
        out += analyzer.detector.feed(c.t, c.feedback, c.setpoint)
    return out + analyzer.detector.finish()


@pytest.mark.parametrize("workers", [2, 3])
def test_workers_give_the_same_results_in_order(workers: int) -> None:
    settings = AnalysisSettings(keep_windows=True)
    here = list(analyze_chunks(_session(), settings))
    there = list(analyze_chunks(_session(), settings, workers=workers))
    assert len(here) >= 8 and there == here
    for a, b in zip(here, there, strict=True):  # the windows came back with their samples
        np.testing.assert_array_equal(a.window.t, b.window.t)
        np.testing.assert_array_equal(a.window.extras["current"], b.window.extras["current"])


def test_slots_reused_and_long_windows_sent_whole(monkeypatch) -> None:
    settings = AnalysisSettings()
    windows = _windows(settings)
    expected = list(analyze_chunks(_session(), settings))
    # Slots for 1 375 samples of four columns: the longer windows go whole; a ring
    # of two slots is reused several times over.
    monkeypatch.setattr(wp, "_SLOT_FLOATS", 5_500)
    assert any(w.t.size * 4 > 5_500 for w in windows)
    assert any(w.t.size * 4 <= 5_500 for w in windows)
    got = []
    with wp.WindowPool(2, settings, ring=2) as pool:
        for w in windows:
            got += list(pool.submit(w))
        got += list(pool.drain())
    assert got == expected


def test_an_error_in_a_worker_is_raised_here(monkeypatch) -> None:
    def broken(w, settings):
        raise ValueError("no")

    monkeypatch.setattr(wp, "analyze_window", broken)  # the forked workers inherit it
    with pytest.raises(RuntimeError, match="ValueError: no"):
        list(analyze_chunks(_session(), AnalysisSettings(), workers=2))
