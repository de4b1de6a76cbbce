"""The live view's gain suggestion: computed off the analysis thread once two gain sets
have steps, shown on its own screen (key t), never sent."""

from __future__ import annotations

import asyncio
import io
import time
from pathlib import Path

import numpy as np
from _axis_session import bench_session
from rich.console import Console
from textual.widgets import Static

from livestep.bench.demo import DEMO_PROFILE_TOML
from livestep.bench.plants import AxisParams, AxisPlant
from livestep.judge.profile import load_profile, parse_profile
from livestep.live.session import make_decoder
from livestep.live.watch import StepEntry, Watch
from livestep.sources.replay import ReplaySource
from livestep.steps.analysis import AnalysisSettings
from livestep.tui.app import LivestepApp
from livestep.tui.suggestion_view import SuggestionScreen, SuggestionTracker, controller_of

SPEC = DEMO_PROFILE_TOML.split("[controller]")[0]  # the demo spec's limits, no controller


def test_the_tracker_waits_for_two_gain_sets_then_computes_once_per_change():
    profile = parse_profile(SPEC)
    one = [StepEntry(r) for r in bench_session([(20.0, 60.0, 0.1)], moves=(5.0, -5.0))]
    tracker = SuggestionTracker(profile, None)
    try:
        assert not tracker.poll(one) and not tracker.busy
        assert "waiting for steps of two gain sets (1 so far" in tracker.status
        two = [StepEntry(r) for r in bench_session([(20.0, 60.0, 0.1), (20.0, 60.0, 0.3)],
                                                   moves=(5.0, -5.0))]
        tracker.poll(two)
        assert tracker.busy  # in its worker process
        end = time.monotonic() + 60
        while not tracker.poll(two):
            assert time.monotonic() < end, "no suggestion in time"
            time.sleep(0.05)
        s = tracker.suggestion
        assert s is not None and any(t.quantity == "overshoot_pct" for t in s.trends)
        tracker.poll(two, now=time.monotonic() + 100)  # nothing new: nothing computed
        assert not tracker.busy
    finally:
        tracker.close()


def test_the_profile_file_declares_the_controller(tmp_path):
    path = tmp_path / "spec.toml"
    path.write_text(DEMO_PROFILE_TOML)
    spec, why = controller_of(load_profile(path))
    assert spec is not None and spec.rate == 5000 and why == ""
    path.write_text(SPEC)
    assert controller_of(load_profile(path)) == (None, "the profile has no [controller]"
                                                       " section: trends only")


def write_session(path: Path) -> None:
    """A recording of the axis under two gain sets (kd 0.1, then 0.3), 5 mm steps, with
    the gain notes the bench echoes."""
    period = 0.5e-3
    plant = AxisPlant(AxisParams(), period=period, seed=3)
    rows, notes, t0, level = [], [], 0.0, 0.0
    for kd in (0.1, 0.3):
        plant.set_gains(kp=20.0, ki=60.0, kd=kd)
        notes += [(t0, f"kp={20:g}"), (t0, f"ki={60:g}"), (t0, f"kd={kd:g}")]
        for target in (0.0, 5.0, 0.0):
            y = plant.advance(2000, target)
            t = t0 + np.arange(1, 2001) * period
            rows += [(a, target, b) for a, b in zip(t, y, strict=True)]
            t0 = float(t[-1])
            level = target
    lines = ["t,setpoint,feedback"]
    k = 0
    for a, sp, fb in rows:
        while k < len(notes) and notes[k][0] <= a:
            lines.append(f"# note: {notes[k][0]:.6f} {notes[k][1]}")
            k += 1
        lines.append(f"{a:.6f},{sp:g},{fb:.4f}")
    path.write_text("\n".join(lines) + "\n")
    assert level == 0.0


def test_key_t_shows_the_suggestion_and_goes_back(tmp_path):
    rec, spec = tmp_path / "session.csv", tmp_path / "spec.toml"
    write_session(rec)
    spec.write_text(SPEC)
    watch = Watch(ReplaySource(rec, speed=None), make_decoder("auto"), AnalysisSettings(),
                  source_name="session.csv", profile=load_profile(spec))
    app = LivestepApp(watch, report_folder=tmp_path)

    async def script(pilot) -> None:
        loop = asyncio.get_running_loop()
        end = loop.time() + 60
        while app.tracker.suggestion is None:  # bounded polling, not a fixed wait
            assert loop.time() < end, "no suggestion in time"
            await pilot.pause(0.05)
        await pilot.press("t")
        assert isinstance(app.screen, SuggestionScreen)
        await pilot.pause()
        console = Console(width=120, record=True, file=io.StringIO())
        console.print(app.screen.query_one("#suggestion", Static).content)
        shown = console.export_text()
        assert "overshoot ≤ 20 % is met from kd ≈" in shown
        assert "no [controller] section" in shown and "Nothing has been sent" in shown
        await pilot.press("t")
        assert not isinstance(app.screen, SuggestionScreen)

    async def go() -> None:
        async with app.run_test(size=(120, 36)) as pilot:
            await script(pilot)
    asyncio.run(go())
