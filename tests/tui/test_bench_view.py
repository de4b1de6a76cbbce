"""The bench view: overlay of the gain sets (o), error zoom (z), the force channel under
the response with its limit (c), the gain-set summary (g), at 80 x 24 and 160 x 48, headless
(textual's ``run_test``) and in a real terminal."""

from __future__ import annotations

import asyncio
from pathlib import Path

import numpy as np
import pytest
from test_tui_app import plain, run_in_terminal, screen_text, until

from livestep.bench.plants import AxisParams, AxisPlant, Gains
from livestep.judge.profile import parse_profile
from livestep.live.session import make_decoder
from livestep.live.watch import Watch
from livestep.sources.replay import ReplaySource
from livestep.steps.analysis import AnalysisSettings
from livestep.tui.app import History, LivestepApp, StepPlotView
from livestep.tui.zoom import ZOOM_BANDS

RATE = 2000.0
SETS = (("soft", 0.1), ("medium", 0.2), ("firm", 0.3))
SPEC = 'name = "bench view"\n[limits]\novershoot_pct = { max = 20 }\n'


def bench_recording(path: Path) -> Path:
    """A recording of the virtual bench's transfer axis as the demo steps it: 5 mm out and
    back under three gain sets (a gains note before each), then a 40 mm move out and back
    under the last, with the controller's force as a fourth column."""
    plant = AxisPlant(AxisParams(gains=Gains(kp=20.0, ki=60.0, kd=0.1)), period=1 / RATE,
                      seed=2)
    rows, notes = [], []
    n = 0

    def hold(level: float, samples: int) -> None:
        nonlocal n
        y = plant.advance(samples, level)
        for k in range(samples):
            rows.append(f"{(n + k) / RATE:.6f},{level:g},{y[k]:.6f},{plant.output[k]:.6g}")
        n += samples

    hold(0.0, 1000)
    for name, kd in SETS:
        plant.set_gains(kd=kd)
        notes.append((len(rows), f"# note: {(n - 1) / RATE:.6f} gains={name}"))
        for level in (5.0, 0.0) + ((40.0, 0.0) if name == "firm" else ()):
            hold(level, 1600)
    for at, line in reversed(notes):
        rows.insert(at, line)
    path.write_text("t,setpoint,feedback,force\n" + "\n".join(rows) + "\n")
    return path


@pytest.fixture(scope="module")
def recording(tmp_path_factory) -> Path:
    return bench_recording(tmp_path_factory.mktemp("bench") / "bench-axis.csv")


def bench_app(recording: Path, tmp_path: Path) -> LivestepApp:
    watch = Watch(ReplaySource(recording, speed=None), make_decoder("auto"), AnalysisSettings(),
                  source_name=recording.name, profile=parse_profile(SPEC))
    return LivestepApp(watch, report_folder=tmp_path)


def drive(app: LivestepApp, script, size) -> None:
    async def go() -> None:
        async with app.run_test(size=size) as pilot:
            await until(pilot, lambda: app._rows == 8 and app.link.done)
            await pilot.pause()
            await script(pilot)
    asyncio.run(go())


@pytest.mark.parametrize("size", [(80, 24), (160, 48)])
def test_the_gain_sets_overlaid_zoomed_and_summed_up(recording, tmp_path, size):
    app = bench_app(recording, tmp_path)

    async def script(pilot) -> None:
        view = app.query_one(StepPlotView)
        await pilot.press("o")  # one median step per gain set
        labels = [t.label for t in view.plot.traces]
        assert labels == ["soft", "medium", "firm"]
        # normalised: every response starts near 0 and ends near 1 whatever its size and
        # direction (the 40 mm moves and the steps back down included)
        for tr in view.plot.traces:
            y, t = np.asarray(tr.y), np.asarray(tr.t)
            assert abs(np.median(y[t < 0])) < 0.05 and abs(np.median(y[-50:]) - 1) < 0.05
        assert len({tr.pattern for tr in view.plot.traces}) == 3  # line styles differ
        text = screen_text(app)
        assert "median of each gains" in text and "┈ firm" in text
        await pilot.press("o")
        assert len(view.plot.traces) == 6 and "last 6" in screen_text(app)
        await pilot.press("o")
        assert app.view == "step"
        await pilot.press("z")  # the error zoom: the +-2 % band fills 1 / 2.5 of the height
        assert view.plot.y_range == (-ZOOM_BANDS * 2.0, ZOOM_BANDS * 2.0)
        assert sorted(h.y for h in view.plot.hlines) == [-2.0, 0.0, 2.0]
        assert "-5.0" in screen_text(app) and "% of step" in screen_text(app)
        await pilot.press("z", "g")  # the gain-set summary in the panel
        panel = plain(app.query_one("#panel"))
        for name, count in (("soft", 2), ("medium", 2), ("firm", 4)):
            assert any(line.split()[:2] == [name, str(count)] for line in panel.splitlines()
                       ), panel
        await pilot.press("g")
        assert "step 7" in plain(app.query_one("#panel"))

    drive(app, script, size)


@pytest.mark.parametrize("size", [(80, 24), (160, 48)])
def test_the_force_channel_and_its_limit(recording, tmp_path, size):
    app = bench_app(recording, tmp_path)

    async def script(pilot) -> None:
        view = app.query_one(StepPlotView)
        last = app.link.snapshot().steps[-1].result
        assert last.limit is not None and last.limit.value == -250.0  # the move back down
        await pilot.press("left")  # the 40 mm move out: held at +250 N
        await pilot.press("c")
        assert app.channel == "force" and view.lower is not None
        assert [t.label for t in view.lower.traces] == ["force"]
        assert [m.label for m in view.lower.markers] == ["L", "L"]
        assert [h.y for h in view.lower.hlines] == [250.0]
        text = screen_text(app)
        assert "━ force" in text and "L at its limit" in text
        assert "force at its limit" in text  # the panel's warning, at both sizes
        assert "L ✔ pass" in text or "L ▲ warn" in text or "L ✘ fail" in text  # history
        await pilot.press("c")
        assert app.channel is None and view.lower is None

    drive(app, script, size)


def test_80x24_keeps_the_plot_the_keys_the_name_and_short_tags(recording, tmp_path):
    app = bench_app(recording, tmp_path)

    async def script(pilot) -> None:
        assert app.query_one(StepPlotView).content_size.height >= 10  # 8 rows of dots
        text = screen_text(app).splitlines()
        assert "q quit" in text[-1] and "? help" in text[-1]
        assert "bench-axis.csv" in "\n".join(text[:2])
        table = app.query_one(History)
        tags = [str(table.get_row_at(k)[-1]) for k in range(table.row_count)]
        assert all(len(t) <= 18 for t in tags) and "gains=firm" in tags[-1]
        assert all(len(line) <= 80 for line in text)

    drive(app, script, (80, 24))


def test_160x48_puts_the_history_under_the_panel(recording, tmp_path):
    app = bench_app(recording, tmp_path)

    async def script(pilot) -> None:
        plot, panel = app.query_one(StepPlotView).region, app.query_one("#panel").region
        history = app.query_one(History).region
        assert history.x >= plot.right and history.x == panel.x
        assert history.y >= panel.bottom and history.bottom >= plot.bottom - 1
        assert plot.height >= 40

    drive(app, script, (160, 48))


def test_help_symbols_do_not_wrap_mid_word(tmp_path, recording):
    import io

    from rich.console import Console

    from livestep.tui.app import HelpScreen

    app = bench_app(recording, tmp_path)

    async def script(pilot) -> None:
        await pilot.press("question_mark")
        assert isinstance(app.screen, HelpScreen)
        help_text = app.screen.query_one("#help-box Static")
        console = Console(width=74, file=io.StringIO(), record=True)  # the box at 80 x 24
        console.print(help_text.content)
        lines = console.export_text().splitlines()
        warn = [ln for ln in lines if "▲" in ln]
        assert len(warn) == 1 and warn[0].strip().endswith("within its warning margin)")
        # every word of every key's description is whole on the screen: no line breaks one
        words = set(" ".join(lines).split())
        for b in LivestepApp.BINDINGS:
            assert set((b.tooltip or b.description).split()) <= words, b.key

    drive(app, script, (80, 24))


def test_a_real_80x24_terminal_shows_the_demo_views(tmp_path):
    steps = [(b"o", "median of each gains"), (b"o", "last 6"), (b"oz", "% of step"),
             (b"zg", "verdicts"), (b"gc", "━ force")]
    status, text = run_in_terminal(["demo", "--quick", "--record", str(tmp_path / "d.csv")],
                                   b"q", until="demo over", size=(24, 80), steps=steps,
                                   timeout=60)
    assert status == 0 and "Traceback" not in text
    assert "force at its limit" in text  # the long move's warning in the panel
    assert "s report → " in text  # the end says what to do next
