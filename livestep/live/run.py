"""Running a live session from a serial port, a headless watch, and a replay, on the console.

The source's reader thread fills a queue and the analysis thread (see
:mod:`livestep.live.watch`) decodes, records and analyses. Ctrl-C or SIGTERM ends the
session cleanly: everything received is decoded, recorded and flushed before the
process exits.
"""

from __future__ import annotations

import contextlib
import dataclasses
import json
import signal
import sys
import threading
from collections import Counter
from collections.abc import Sequence
from pathlib import Path
from typing import IO

from rich.console import Console

from livestep.errors import EXIT_BAD_INPUT, EXIT_FAIL, EXIT_OK, InputError
from livestep.judge.profile import Profile
from livestep.judge.verdict import gate_status
from livestep.live.session import AutoDecoder, Decoder, Session, replay_file
from livestep.live.watch import Driver, StepEntry, Watch, step_line_record
from livestep.sinks.base import Sink
from livestep.sinks.console import ConsoleSink, JsonLinesSink, counters_table
from livestep.sinks.terminal import make_console
from livestep.sources.files import open_file
from livestep.sources.serial_port import PortSettings, SerialReader
from livestep.steps.analysis import AnalysisSettings
from livestep.steps.progress import StepProgress

__all__ = ["Driver", "describe_decoder", "metadata_for", "run_headless", "run_live", "run_replay",
           "run_until_done", "stop_on_sigterm"]


def describe_decoder(decoder: Decoder) -> str:
    """One line for a recording's metadata: how the bytes were decoded."""
    inner = decoder.inner if isinstance(decoder, AutoDecoder) else decoder
    if inner is None:
        return "not yet known"
    from livestep.decode.text import TextDecoder, describe

    if isinstance(inner, TextDecoder):
        return f"{describe(inner)}; time {inner.timebase.settings.describe()}"
    channels = ",".join(getattr(inner, "channels", ()))
    return f"binary frames (COBS, CRC-16/CCITT-FALSE), channels {channels}"


def metadata_for(source: str, decoder: Decoder):
    """The recording's metadata, asked for when its header is written."""
    return lambda: {"source": source, "decoder": describe_decoder(decoder)}


def _step_sink(json_lines: bool) -> Sink:
    return JsonLinesSink(sys.stdout) if json_lines else ConsoleSink(make_console(highlight=False))


@contextlib.contextmanager
def stop_on_sigterm(stop: threading.Event):  # noqa: ANN201 - a context manager
    """While inside, SIGTERM sets ``stop`` (a no-op off the main thread)."""
    try:
        previous = signal.signal(signal.SIGTERM, lambda *_: stop.set())
    except ValueError:  # not the main thread
        yield
        return
    try:
        yield
    finally:
        signal.signal(signal.SIGTERM, previous)


def run_until_done(watch: Watch, stop: threading.Event | None = None) -> None:
    """Start ``watch`` and wait for its end; Ctrl-C, SIGTERM or ``stop`` (set from another
    thread) end it cleanly."""
    stop = stop if stop is not None else threading.Event()
    watch.start()
    try:
        with stop_on_sigterm(stop):
            while not watch.wait(0.1):
                if stop.is_set():
                    watch.stop()
    except KeyboardInterrupt:
        watch.stop("interrupted")
    finally:
        watch.stop()
        while not watch.wait(0.5):
            pass


def exit_status(error: str | None, status: int | None = None) -> int:
    """The exit status of a session that ended with ``error`` (``None``: success); ``status``
    when the session knows it (a snapshot's ``error_status``)."""
    if error is None:
        return EXIT_OK
    if status:
        return status
    return EXIT_FAIL if error.startswith("internal error") else EXIT_BAD_INPUT


class _Messages(Sink):
    """Says on stderr what the session wants the user to know (the stream format)."""

    def __init__(self, console: Console) -> None:
        self.console = console

    def on_message(self, text: str) -> None:
        self.console.print(f"livestep: {text}", markup=False, highlight=False,
                           soft_wrap=True)


class _Announce(_Messages):
    """Says where the recording goes, once the port is open (and the stream format)."""

    def __init__(self, watch: Watch, console: Console) -> None:
        super().__init__(console)
        self.watch, self.said = watch, False

    def on_state(self, state: str) -> None:
        if not self.said and self.watch.recorder is not None:
            self.console.print(f"recording to {self.watch.recorder.path}", markup=False,
                               highlight=False)
        self.said = True


def run_live(port: PortSettings, decoder: Decoder, settings: AnalysisSettings, *,
             record: Path | None, raw: Path | None = None, duration: float | None = None,
             json_lines: bool = False, driver: Driver | None = None,
             sinks: Sequence[Sink] = (), print_steps: bool = True,
             source: str | None = None, stop: threading.Event | None = None,
             profile: Profile | None = None) -> int:
    """Read, decode, record, analyse (and judge, with a profile) until stopped (Ctrl-C,
    SIGTERM, ``duration``, the driver, or ``stop`` set from another thread, e.g. a UI's
    quit); returns the exit status.
    ``sinks`` listen besides the step printer (``print_steps``) and the recorder; ``source``
    names the link in the recording."""
    console = make_console(stderr=True, highlight=False)
    name = source or port.url
    watch = Watch(SerialReader(port), decoder, settings, source_name=name, record=record,
                  raw=raw, metadata=metadata_for(name, decoder), driver=driver,
                  profile=profile,
                  sinks=([_step_sink(json_lines)] if print_steps else []) + list(sinks),
                  duration=duration)
    watch.session.sinks.insert(0, _Announce(watch, console))
    run_until_done(watch, stop)
    snap = watch.snapshot()
    error = snap.error
    console.print(counters_table(watch.session.counters))
    recorder = watch.recorder
    if recorder is not None and recorder.rows:
        console.print(f"recorded {recorder.rows} samples to {recorder.path}", markup=False,
                      highlight=False)
    elif recorder is not None:
        console.print("no samples received: no recording written")
    if error:  # last, where it is seen: one line
        console.print(f"livestep: error: {error}", markup=False, highlight=False,
                      soft_wrap=True)
    status = exit_status(error, snap.error_status)
    if status == EXIT_OK and driver is not None:
        status = driver.exit_status
    return status


def run_headless(watch: Watch, out: IO[str], *, progress: bool = False) -> int:
    """``watch --headless``: one JSON line per finished step on ``out`` as soon as it is
    measured, then one ``{"summary": ...}`` line; with ``progress``, also a
    ``{"progress": {...}}`` line (the fields of :class:`StepProgress`) whenever more is
    known of the step under way. Exit status as for ``analyze --profile``:
    1 when a step failed its profile (or none was found to judge) or on an internal error,
    2 on bad input, else 0."""

    def on_step(entry: StepEntry) -> None:
        out.write(json.dumps(step_line_record(entry), allow_nan=False) + "\n")
        out.flush()

    def on_progress(p: StepProgress) -> None:
        out.write(json.dumps({"progress": dataclasses.asdict(p)}, allow_nan=False) + "\n")
        out.flush()

    watch.on_step = on_step
    if progress:
        watch.on_progress = on_progress
    watch.session.sinks.insert(0, _Announce(watch, make_console(stderr=True, highlight=False)))
    run_until_done(watch)
    snap = watch.snapshot()
    verdicts = Counter(e.verdict.verdict for e in snap.steps if e.verdict is not None)
    summary = {"source": snap.source, "steps": len(snap.steps), "verdicts": dict(verdicts),
               "profile": snap.profile, "samples": snap.counters["samples"],
               "counters": snap.counters, "recording": snap.recording,
               "results_log": snap.results_log, "error": snap.error,
               "stream_format": snap.stream_format}
    out.write(json.dumps({"summary": summary}, allow_nan=False) + "\n")
    out.flush()
    if snap.error:
        print(f"livestep: error: {snap.error}", file=sys.stderr)
        return exit_status(snap.error, snap.error_status)
    if watch.profile is None:
        return EXIT_OK
    return gate_status([e.verdict for e in snap.steps])


def run_replay(path: Path, decoder: Decoder, settings: AnalysisSettings, *,
               speed: float | None, json_doc: bool = False, json_lines: bool = False) -> int:
    """Play a recording (or raw capture) through the live path; returns the exit status.
    A file that stops being readable (a damaged gzip) ends the replay with one line and
    exit status 2, after the steps of everything read before it."""
    open_file(path).close()  # a FIFO, a device or a folder: one line, before anything else
    err = make_console(stderr=True, highlight=False)
    sinks = ([] if json_doc else [_step_sink(json_lines)]) + [_Messages(err)]
    session = Session(decoder, settings, sinks)
    error: InputError | None = None
    try:
        replay_file(path, session, speed=speed)
    except KeyboardInterrupt:
        pass
    except InputError as exc:
        error = exc
    finally:
        try:
            session.close()
        except InputError as exc:
            error = error or exc
    if json_doc:
        from livestep.reports.tables import analysis_document, write_json

        verdicts = list(session.verdicts) if session.profile is not None else None
        write_json(analysis_document(str(path), session.counters.samples, session.results,
                                     verdicts=verdicts, profile=session.profile), sys.stdout)
    else:
        err.print(counters_table(session.counters))
    if error is not None:
        err.print(f"livestep: error: {error}", markup=False, soft_wrap=True)
        return error.exit_status
    return EXIT_OK
