"""The terminal UI of ``livestep watch``: link, live plot, verdict, history, keys.

The app never handles samples one by one: a timer pulls the watch's snapshot at
:attr:`LivestepApp.FPS` frames per second, appends only the new history rows and
redraws the plot from the recent samples. Everything it shows is built by
:mod:`livestep.tui.views`.

Why this module is long: it is one textual ``App`` (keys, layout, frame timer) and the
two modal screens (notes, help) whose bindings only make sense with it; what the UI
draws lives in :mod:`livestep.tui.views` and :mod:`livestep.tui.plot` already.
"""

from __future__ import annotations

import asyncio
import contextlib
import signal
import time
from pathlib import Path

import numpy as np
from rich.console import Group, RenderableType
from rich.table import Table
from rich.text import Text
from textual.app import App, ComposeResult
from textual.binding import Binding
from textual.containers import Grid, Vertical, VerticalScroll
from textual.css.query import NoMatches
from textual.message import Message
from textual.screen import ModalScreen
from textual.widget import Widget
from textual.widgets import DataTable, Footer, Input, Static

from livestep.errors import EXIT_OK, InputError
from livestep.judge.profile import Profile
from livestep.live.watch import Samples, Snapshot, StepEntry, Watch
from livestep.sources.replay import ReplaySource
from livestep.steps.analysis import AnalysisSettings
from livestep.steps.tags import parse_notes
from livestep.tui import views
from livestep.tui.overlay import OVERLAY_MODES, gain_summary, overlay_plot
from livestep.tui.plot import Plot
from livestep.tui.suggestion_view import SuggestionScreen, SuggestionTracker, controller_of
from livestep.tui.zoom import channel_plot, error_zoom_plot
from livestep.tuning.controller import ControllerSpec

__all__ = ["LivestepApp", "run_app", "save_report"]


class StepPlotView(Widget):
    """Thin widget around the pure :class:`~livestep.tui.plot.Plot` renderable; a second
    plot (an extra channel) takes the lower third, at least 4 rows (its legend and 3 rows of
    dots: it has no time axis of its own, the plot above gives it)."""

    def __init__(self, **kwargs) -> None:  # noqa: ANN003
        super().__init__(**kwargs)
        self.plot = Plot([], empty="waiting for samples")
        self.lower: Plot | None = None

    def show(self, plot: Plot, lower: Plot | None = None) -> None:
        self.plot, self.lower = plot, lower
        self.refresh()

    def render(self) -> RenderableType:
        h = self.content_size.height
        if self.lower is None or h < 8:
            self.plot.height = h
            return self.plot
        self.lower.height = max(4, h // 3)
        self.plot.height = h - self.lower.height
        return Group(self.plot, self.lower)


class History(DataTable):
    """The steps so far, newest at the bottom; the app moves the cursor."""

    can_focus = False
    clicked = False  # the next highlight comes from the user's click

    async def _on_click(self, event) -> None:  # noqa: ANN001 - textual's Click
        self.clicked = True
        await super()._on_click(event)


class NoteScreen(ModalScreen[str | None]):
    """Asks for a note: ``name=value`` (e.g. ``gains=B``) or a few words."""

    BINDINGS = [Binding("escape", "cancel", "cancel")]

    def compose(self) -> ComposeResult:
        with Vertical(id="note-box"):
            yield Static("Note for the steps from now on: NAME=VALUE (e.g. gains=B) or a few"
                         " words. Enter to add, Escape to cancel.")
            yield Input(placeholder="gains=B", id="note-input")

    def on_input_submitted(self, event: Input.Submitted) -> None:
        self.dismiss(event.value)

    def action_cancel(self) -> None:
        self.dismiss(None)


class HelpScreen(ModalScreen[None]):
    """Every key, and what the symbols mean."""

    BINDINGS = [Binding("escape,question_mark,q,f1", "close", "close")]

    def compose(self) -> ComposeResult:
        keys = _two_columns([(b.key_display or b.key, b.tooltip or b.description)
                             for b in LivestepApp.BINDINGS if isinstance(b, Binding)])
        symbols = _two_columns([("✔", "pass"), ("▲", "warn (inside the limit, within its"
                                                   " warning margin)"),
                                ("✘", "fail"), ("·", "not measured"),
                                ("L", "(history) an extra channel at its limit in the rise"),
                                *((sym, state) for state, sym in
                                  views.STATE_SYMBOLS.items())])
        plot = Text("Plot: r rise (lower and upper level crossings), p peak, s settled, L an"
                    " extra channel at its limit; dashed lines: the settling band; dotted"
                    " lines: the rise reference levels. Overlay (o): responses normalised to"
                    " the step (0 before, 1 at the final level) against time from the step"
                    " instant. Error zoom (z): the distance to the final level in % of the"
                    " step, the band filling the middle of the plot.\n")
        with VerticalScroll(id="help-box"):
            yield Static(Group(Text("Keys", "bold"), keys, Text("\nSymbols", "bold"), symbols,
                               Text(""), plot,
                               Text("Escape, q or ? closes this screen; arrows scroll it.",
                                    "dim")))

    def on_mount(self) -> None:
        self.query_one("#help-box").focus()  # arrows and page keys scroll a long help

    def action_close(self) -> None:
        self.dismiss(None)


def _two_columns(rows: list[tuple[str, str]]) -> Table:
    """Keys or symbols beside what they do, the text wrapping in its own column."""
    table = Table(box=None, show_header=False, pad_edge=False, padding=(0, 2))
    table.add_column(no_wrap=True, min_width=6)
    table.add_column(ratio=1)
    for key, text in rows:
        table.add_row(Text("  " + key), Text(text))
    return table


def save_report(watch: Watch, folder: Path) -> str:
    """Write the HTML report (:mod:`livestep.reports`) of the steps so far into ``folder``;
    returns the line to show. The steps still in memory get their plots, older ones their
    figures only."""
    from livestep.reports import SessionInfo, write_report  # loads matplotlib: on demand

    snap = watch.snapshot()
    if not snap.steps:
        return "no steps yet: no report written"
    first, last = watch.session.first_t, watch.session.last_t
    duration = None if first is None or last is None else last - first
    samples = snap.counters["samples"]
    meta = [("source", snap.source)] + ([("recording", snap.recording)] if snap.recording
                                        else [])
    info = SessionInfo(source=snap.recording or snap.source, samples=samples,
                       duration=duration, sample_rate=samples / duration if duration else None,
                       metadata=tuple(meta), counters=snap.counters)
    path = folder / time.strftime("livestep-report-%Y%m%d-%H%M%S.html")
    try:
        out = write_report(path, [e.result for e in snap.steps], info, watch.profile,
                           measure=watch.session.settings.measure)
    except (OSError, InputError) as exc:
        return f"report not written: {exc}"
    return f"report saved to {out}"


class LivestepApp(App[int]):
    """The live view of one :class:`~livestep.live.watch.Watch` (started on mount if it has
    not been, stopped on exit)."""

    CSS_PATH = "app.tcss"
    TITLE = "livestep"
    ENABLE_COMMAND_PALETTE = False
    FPS = 15.0
    LIVE_SPAN = 10.0  # s: the longest stretch the live plot shows
    HORIZONTAL_BREAKPOINTS = [(0, "-narrow"), (110, "-wide"), (150, "-xwide")]
    BINDINGS = [
        Binding("q", "quit", "quit", tooltip="quit (the recording is flushed and closed)"),
        Binding("question_mark,f1", "help", "help", key_display="?",
                tooltip="this help: every key and symbol"),
        Binding("space", "pause", "pause",
                tooltip="pause / resume (replay: playback; live: the view)"),
        Binding("o", "overlay", "overlay", tooltip="overlay: the median step of each gain set;"
                " again: the last 6 steps; again: one step"),
        Binding("z", "zoom", "zoom", tooltip="the error zoomed around the settling band;"
                " again: the step"),
        Binding("g", "summary", "gain sets", tooltip="one row per gain set: means and verdict"
                " counts, in the panel; again: the step"),
        Binding("c", "channel", "channel", tooltip="plot the next extra channel (a drive's"
                " output, such as force) under the response; after the last: none"),
        Binding("s", "save", "report", tooltip="save an HTML report of the steps so far"),

        Binding("m", "model", "model", tooltip="show / hide the fitted model over the data"),
        Binding("n", "note", "note", tooltip="add a note (e.g. gains=B) tagging the next steps"),
        Binding("left,up", "older", "older", key_display="←/↑",
                tooltip="show the previous step of the history"),
        Binding("right,down", "newer", "newer", key_display="→/↓",
                tooltip="show the next step of the history"),
        Binding("end,l", "follow", "live", key_display="end/l",
                tooltip="follow the stream: newest step, current samples"),
        Binding("t", "suggestion", "gains", tooltip="gain suggestion: trends across gain sets,"
                " and gains to try with a [controller] section (nothing is sent)"),
        Binding("plus,equals_sign", "faster", "faster", key_display="+", show=False,
                tooltip="replay: twice as fast"),
        Binding("minus", "slower", "slower", key_display="-", show=False,
                tooltip="replay: half as fast"),
        Binding("ctrl+c", "quit", "quit", show=False, priority=True, key_display="ctrl+c",
                tooltip="quit, as q"),
    ]

    def __init__(self, watch: Watch, *, report_folder: Path | None = None,
                 quit_on_sigterm: bool = False, demo: bool = False,
                 controller: ControllerSpec | None = None) -> None:
        super().__init__()
        self.demo = demo
        spec, why = (controller, "") if controller is not None else controller_of(watch.profile)
        self.tracker = SuggestionTracker(watch.profile, spec, why, extra=lambda: getattr(
            watch.driver, "report_lines", []))  # the demo's fourth pass, once it has run
        self.quit_on_sigterm = quit_on_sigterm
        self.link = watch
        self.report_folder = report_folder or Path.cwd()
        self.selected: int | None = None  # index into the history; None: follow live
        self.paused = False
        self.show_model = False
        self.view = "step"  # step, zoom, or an overlay mode (OVERLAY_MODES)
        self.channel: str | None = None  # the extra channel plotted under the response
        self.summary = False  # the side panel shows the gain-set summary
        self._ended = False
        self.message = ""
        self.frames = 0
        self.snap: Snapshot | None = None
        self._rows = 0
        self._link: Text | None = None
        self._shown: tuple | None = None
        self._plotted: tuple | None = None
        self._said = ""
        self.shown_at: dict[int, float] = {}  # step index -> when its row appeared
        self._chained = watch.on_step
        watch.on_step = self._notify_step

    # -- layout -----------------------------------------------------------------
    def compose(self) -> ComposeResult:
        yield Static(id="link")
        with Grid(id="body"):  # placed by the stylesheet per terminal width
            yield StepPlotView(id="plot")
            yield Static(id="panel")
            yield History(id="history", cursor_type="row", zebra_stripes=True)
        yield Static(id="message")
        yield Footer()

    class StepArrived(Message):
        """Posted from the analysis thread when a step is published: draw it now rather
        than at the next frame."""

    def on_livestep_app_step_arrived(self, message: StepArrived) -> None:
        self.frame()

    def _notify_step(self, entry: StepEntry) -> None:  # on the analysis thread
        if self._chained is not None:
            self._chained(entry)
        self.post_message(self.StepArrived())

    def on_mount(self) -> None:
        table = self.query_one(History)
        for name in views.HISTORY_COLUMNS:
            table.add_column(name, key=name)
        if not self.link.started:
            self.link.start()
        if self.quit_on_sigterm:  # SIGTERM ends the session as cleanly as q
            with contextlib.suppress(NotImplementedError, RuntimeError):
                asyncio.get_running_loop().add_signal_handler(signal.SIGTERM, self.exit)
        self.set_interval(1.0 / self.FPS, self.frame)
        self.frame()

    def on_unmount(self) -> None:
        self.tracker.close()
        self.link.stop()
        self.link.wait(5.0)

    @property
    def narrow(self) -> bool:
        return self.size.width < 110

    # -- the frame --------------------------------------------------------------
    def frame(self) -> None:
        """Pull one snapshot and update what changed."""
        snap = self.link.snapshot()
        self.snap = snap
        self.frames += 1
        self.tracker.poll(snap.steps)
        try:
            self._frame(snap)
        except NoMatches:  # a timer firing while the screen is torn down
            pass

    def _frame(self, snap: Snapshot) -> None:
        with self.batch_update():
            link = views.link_text(snap, narrow=self.narrow, width=self.size.width - 2)
            if link != self._link:  # a new line count needs a new layout, new text does not
                self.query_one("#link", Static).update(
                    link, layout=self._link is None or link.plain.count("\n") !=
                    self._link.plain.count("\n"))
                self._link = link
            table = self.query_one(History)
            new = snap.steps[self._rows:]
            for e in new:
                table.add_row(*views.history_row(e, narrow=self.narrow), key=str(self._rows))
                self.shown_at[e.result.index] = time.monotonic()
                self._rows += 1
            if new and self.selected is None:
                self._move_cursor(self._rows - 1)
            if snap.said and snap.said != self._said:
                self._said = snap.said
                self.say(snap.said)
            if snap.done and not self._ended:
                self._ended = True
                self.say(self._end_text(snap))
            self._update_step(snap)

    def _end_text(self, snap: Snapshot) -> str:
        """What to do once the session has ended (the demo's plan done, a replay finished,
        the link stopped)."""
        what = "demo over" if self.demo else "session ended"
        if snap.error:
            return f"{what} with an error (above); q quits"
        n = len(snap.steps)
        folder = self.report_folder
        with contextlib.suppress(ValueError):
            folder = folder.resolve().relative_to(Path.cwd())
        return (f"{what}, {n} step{'s' * (n != 1)}: q quit  o overlay  g gain sets"
                f"  s report → {folder}/")

    def _entry(self, snap: Snapshot) -> StepEntry | None:
        if not snap.steps:
            return None
        return snap.steps[-1 if self.selected is None else self.selected]

    def _update_step(self, snap: Snapshot) -> None:
        entry = self._entry(snap)
        live = self.selected is None
        p = snap.under_way
        if self.summary:
            key: tuple = ("summary", len(snap.steps))
            if key != self._shown:
                self._shown = key
                self.query_one("#panel", Static).update(gain_summary(snap.steps))
        elif live and p is not None and (not snap.steps or
                                         p.t_step > snap.steps[-1].result.metrics.t_step):
            # a step under way, newer than the last finished one: what is known of it
            key = ("under way", *p.known(), round(p.elapsed, 1))
            if key != self._shown:
                self._shown = key
                self.query_one("#panel", Static).update(views.under_way_panel(p))
        else:
            key = (None if entry is None else entry.result.index, live, self.narrow,
                   entry.result.tags if entry else None)
        if key != self._shown:
            self._shown = key
            guidance = "" if entry is None else views.design_sentence(
                entry.result, self.link.profile,
                self.link.session.settings.measure.settling_band)
            self.query_one("#panel", Static).update(
                views.step_panel(entry, live=live, narrow=self.narrow, guidance=guidance))
        self._draw(snap, entry, live, key)

    def _draw(self, snap: Snapshot, entry: StepEntry | None, live: bool, key: tuple) -> None:
        """The plot of the chosen view: the step (with the chosen extra channel under it),
        the error zoom or the overlay."""
        plot = self.query_one(StepPlotView)
        measure = self.link.session.settings.measure
        if self.view != "step":
            view_key: tuple = (self.view, len(snap.steps),
                               None if entry is None else entry.result.index)
            if view_key != self._plotted:
                self._plotted = view_key
                plot.show(error_zoom_plot(entry, measure) if self.view == "zoom" else
                          overlay_plot(snap.steps, measure, mode=self.view))
            return
        plot_key = (key, self.show_model, snap.data_time if live else None,
                    self.paused and live and not snap.replay, self.channel)
        if plot_key == self._plotted or (plot_key[3] and self._plotted is not None):
            return  # nothing new to draw (or the live view holds still)
        self._plotted = plot_key
        if not live:
            w = entry.result.window if entry is not None else None
            if w is None:
                plot.show(Plot([], empty=f"step {entry.result.index}: its samples are only"
                               " in the recording (the last steps are kept in memory)"))
                return
            t_step, t_end = entry.result.metrics.t_step, float(w.t[-1])
            start = max(float(w.t[0]), t_step - 0.15 * (t_end - t_step))
            lower = None
            if self.channel is not None:
                x = w.extras.get(self.channel)
                lower = channel_plot(self.channel, w.t, x if x is not None else
                                     np.full(w.t.size, np.nan), x_range=(start, t_end),
                                     t_origin=t_step, e=entry)
            plot.show(views.step_plot(Samples(t=w.t, feedback=w.feedback, setpoint=w.setpoint),
                                      entry, measure, x_range=(start, t_end),
                                      model=self.show_model, narrow=self.narrow), lower)
            return
        if snap.data_time is None:
            return
        end = snap.data_time
        start = end - 5.0
        if entry is not None:
            start = max(entry.result.metrics.t_step - 0.1 * (end - entry.result.metrics.t_step),
                        end - self.LIVE_SPAN)
        samples = self.link.samples(since=start, extras=self.channel is not None)
        main = views.step_plot(samples, entry, measure, x_range=(start, end),
                               model=self.show_model, narrow=self.narrow)
        lower = None
        if self.channel is not None:
            tx, x = samples.extras.get(self.channel, (samples.t, np.full(samples.t.size,
                                                                         np.nan)))
            lower = channel_plot(self.channel, tx, x, x_range=(start, end),
                                 t_origin=main.t_origin, e=entry)
        plot.show(main, lower)

    # -- keys -------------------------------------------------------------------
    def say(self, text: str) -> None:
        self.message = text
        self.query_one("#message", Static).update(
            Text(text, style="italic", no_wrap=True, overflow="ellipsis"), layout=False)

    def _select(self, index: int | None) -> None:
        self.selected = index
        if index is not None:
            self._move_cursor(index)
        self._shown = self._plotted = None
        if self.snap is not None:
            self._update_step(self.snap)

    def action_older(self) -> None:
        n = self._rows
        if n == 0:
            return
        cur = n - 1 if self.selected is None else self.selected
        self._select(max(0, cur - 1))

    def action_newer(self) -> None:
        if self.selected is None:
            return
        if self.selected + 1 >= self._rows:
            self._select(None)
            return
        self._select(self.selected + 1)

    def action_follow(self) -> None:
        self._select(None)
        if self._rows:
            self._move_cursor(self._rows - 1)

    def _move_cursor(self, row: int) -> None:
        self.query_one(History).move_cursor(row=row, animate=False)

    def on_data_table_row_highlighted(self, event: DataTable.RowHighlighted) -> None:
        """A row the user clicked (the app's own cursor moves are not choices)."""
        table = event.data_table  # not a query: another screen (a note) may be on top
        if isinstance(table, History) and table.clicked:
            table.clicked = False
            self._select(event.cursor_row)

    def on_data_table_row_selected(self, event: DataTable.RowSelected) -> None:
        self._select(event.cursor_row)

    def action_pause(self) -> None:
        src = self.link.source
        if isinstance(src, ReplaySource):
            if src.paused:
                src.resume()
                self.say("replay playing")
            else:
                src.pause()
                self.say("replay paused")
            self.paused = src.paused
            return
        self.paused = not self.paused
        if self.link.done:
            self._ended = True  # said now: the end's hint would only repeat it
            self.say("the session has ended: nothing is recorded or measured any more")
            return
        self.say("view paused: recording and measuring go on" if self.paused
                 else "view follows the stream again")

    def _speed(self, factor: float) -> None:
        src = self.link.source
        if not isinstance(src, ReplaySource):
            self.say("speed applies to a replay only")
            return
        if src.speed is None:
            self.say("replay runs as fast as it can")
            return
        speed = min(max(src.speed * factor, 1 / 64), 1024)
        src.set_speed(speed)
        self.say(f"replay speed ×{speed:g}")

    def action_faster(self) -> None:
        self._speed(2.0)

    def action_slower(self) -> None:
        self._speed(0.5)

    def action_model(self) -> None:
        self.show_model = not self.show_model
        self.say("model shown over the data" if self.show_model else "model hidden")
        if self.snap is not None:
            self._update_step(self.snap)

    def _redraw(self) -> None:
        self._shown = self._plotted = None
        if self.snap is not None:
            self._update_step(self.snap)

    def action_overlay(self) -> None:
        modes = ("step", *OVERLAY_MODES)
        k = modes.index(self.view) if self.view in modes else 0
        self.view = modes[(k + 1) % len(modes)]
        self.say({"step": "one step: its response, band and instants",
                  "groups": "overlay: the median step of each gain set (o: the last 6)",
                  "last": "overlay: the last 6 steps (o: back to one step)"}[self.view])
        self._redraw()

    def action_zoom(self) -> None:
        self.view = "step" if self.view == "zoom" else "zoom"
        self.say("error zoom: distance to the final level, % of the step" if self.view ==
                 "zoom" else "one step: its response, band and instants")
        self._redraw()

    def action_channel(self) -> None:
        names = self.link.channels
        if not names:
            self.channel = None
            self.say("no extra channel in this stream (a column or frame channel besides"
                     " time, setpoint and feedback)")
            return
        order = [None, *names]
        k = order.index(self.channel) if self.channel in order else 0
        self.channel = order[(k + 1) % len(order)]
        if self.view != "step":
            self.view = "step"
        self.say(f"{self.channel} plotted under the response" if self.channel else
                 "no extra channel plotted")
        self._redraw()

    def action_summary(self) -> None:
        self.summary = not self.summary
        self.say("side panel: one row per gain set" if self.summary else
                 "side panel: the step")
        self._redraw()

    def action_suggestion(self) -> None:
        self.push_screen(SuggestionScreen(self.tracker))

    def action_note(self) -> None:
        self.push_screen(NoteScreen(), self._add_note)

    def _add_note(self, text: str | None) -> None:
        """``name=value`` pairs (one, or several tokens such as ``kp=1.2 ki=30``), else the
        words as ``note=...``."""
        if not text or not text.strip():
            self.say("no note added")
            return
        pairs = parse_notes(text) or [("note", text.strip())]
        try:
            notes = [self.link.add_note(name, value) for name, value in pairs]
        except InputError as exc:
            self.say(str(exc))
            return
        said = " ".join(f"{n.name}={n.value}" for n in notes)
        self.say(f"note {said} tags the steps from {notes[0].t:.3f} s on")

    def action_save(self) -> None:
        """Writes in a thread: a report with plots takes a moment, the view goes on."""
        self.say("writing the report ...")
        self.run_worker(self._save, thread=True, exclusive=True, exit_on_error=False)

    def _save(self) -> None:
        self.call_from_thread(self.say, save_report(self.link, self.report_folder))

    def action_help(self) -> None:
        self.push_screen(HelpScreen())

    def action_quit(self) -> None:
        self.exit(EXIT_OK)


def run_demo_app(*, quick: bool = False, record: Path | None = None, fmt: str = "text",
                 seed: int = 1, settings: AnalysisSettings | None = None,
                 profile: Profile | None = None, folder: Path | None = None) -> int:
    """``livestep demo`` in the terminal UI: the virtual bench on a pty, the built-in plan
    sent by a plan runner (its progress on the message line), each step judged against
    ``profile`` (default: the built-in demo spec), everything else as live; reports saved
    with ``s`` go into ``folder`` (default: the recording's folder, else the current one)."""
    from livestep.bench.demo import (
        demo_bench,
        demo_controller,
        demo_decoder,
        demo_driver,
        demo_profile,
    )
    from livestep.live.run import metadata_for
    from livestep.sources.serial_port import PortSettings, SerialReader

    bench = demo_bench(fmt=fmt, seed=seed)
    path = bench.start()
    try:
        name = f"livestep demo (virtual bench on {path})"
        decoder = demo_decoder()
        holder: list[Watch] = []
        profile = profile if profile is not None else demo_profile()
        runner = demo_driver(quick, profile, out=lambda line: holder[0].say(line))
        watch = Watch(SerialReader(PortSettings(url=path)), decoder,
                      settings if settings is not None else AnalysisSettings(),
                      source_name=name, record=record, metadata=metadata_for(name, decoder),
                      driver=runner, profile=profile)
        holder.append(watch)
        status = run_app(watch, report_folder=folder or (record.parent if record else None),
                         demo=True, controller=demo_controller())
        return status if status != EXIT_OK else runner.exit_status
    finally:
        bench.stop()


def run_app(watch: Watch, *, report_folder: Path | None = None, demo: bool = False,
            controller: ControllerSpec | None = None) -> int:
    """Run the UI on the terminal until the user quits; returns the exit status."""
    watch.start()  # a port that cannot be opened fails here, as one line
    app = LivestepApp(watch, quit_on_sigterm=True, report_folder=report_folder, demo=demo,
                      controller=controller)
    try:
        status = app.run()
    finally:
        watch.stop()
        watch.wait(10.0)
    snap = watch.snapshot()
    if snap.recording:
        print(f"livestep: recorded to {snap.recording}; steps in {snap.results_log}")
    if snap.error:
        from livestep.live.run import exit_status

        print(f"livestep: error: {snap.error}")
        return exit_status(snap.error, snap.error_status)
    return EXIT_OK if status is None else status
