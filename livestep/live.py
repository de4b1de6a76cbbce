"""Running a live session from a serial port, and replaying a recording, on the console.

The serial reader thread fills a queue; this loop (the main thread) decodes,
records and analyses. Ctrl-C or SIGTERM ends the session cleanly: everything
received is decoded, recorded and flushed before the process exits.
"""

from __future__ import annotations

import contextlib
import queue
import signal
import sys
import threading
import time
from collections.abc import Sequence
from pathlib import Path
from typing import Protocol

from rich.console import Console

from livestep.analysis import AnalysisSettings
from livestep.errors import EXIT_OK, InputError
from livestep.session import AutoDecoder, Decoder, Session, replay_file
from livestep.sinks.base import Sink
from livestep.sinks.console import ConsoleSink, JsonLinesSink, counters_table
from livestep.sinks.recorder import Recorder
from livestep.sources.serial_port import PortSettings, SerialReader

__all__ = ["Driver", "describe_decoder", "run_live", "run_replay"]


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


def _step_sink(json_lines: bool) -> Sink:
    return JsonLinesSink(sys.stdout) if json_lines else ConsoleSink(Console(highlight=False))


@contextlib.contextmanager
def _stop_on_sigterm(stop: threading.Event):
    try:
        previous = signal.signal(signal.SIGTERM, lambda *_: stop.set())
    except ValueError:  # not the main thread
        yield
        return
    try:
        yield
    finally:
        signal.signal(signal.SIGTERM, previous)


class Driver(Protocol):
    """Something that acts on the link during a live session (a step plan): the loop calls
    :meth:`begin` once the port is open, :meth:`poll` between reads (``True`` ends the
    session), :meth:`on_state` on link changes, and :meth:`end` (``done``, ``stopped``,
    ``interrupted`` or ``error``) before the port closes, whatever ends the session."""

    def begin(self, link: SerialReader, session: Session) -> None: ...

    def poll(self) -> bool: ...

    def on_state(self, state: str) -> None: ...

    def end(self, reason: str) -> None: ...

    @property
    def exit_status(self) -> int: ...


def run_live(port: PortSettings, decoder: Decoder, settings: AnalysisSettings, *,
             record: Path | None, raw: Path | None = None, duration: float | None = None,
             json_lines: bool = False, driver: Driver | None = None,
             sinks: Sequence[Sink] = (), print_steps: bool = True,
             source: str | None = None, stop: threading.Event | None = None) -> int:
    """Read, decode, record and analyse until stopped (Ctrl-C, SIGTERM, ``duration``, the
    driver, or ``stop`` set from another thread, e.g. a UI's quit); returns the exit status.
    ``sinks`` listen besides the step printer (``print_steps``) and the recorder; ``source``
    names the link in the recording."""
    status_console = Console(stderr=True, highlight=False)
    reader = SerialReader(port)
    reader.start()  # a port that cannot be opened ends here, before any file is made
    all_sinks = ([_step_sink(json_lines)] if print_steps else []) + list(sinks)
    recorder = None
    if record is not None:
        recorder = Recorder(record, raw_path=raw, metadata=lambda: {
            "source": source or port.url, "decoder": describe_decoder(decoder)})
        all_sinks.append(recorder)
        status_console.print(f"recording to {recorder.path}")

    session = Session(decoder, settings, all_sinks)
    stop = stop if stop is not None else threading.Event()
    status = EXIT_OK
    reason = "stopped"
    end = time.monotonic() + duration if duration else None
    if driver is not None:
        driver.begin(reader, session)
    try:
        with _stop_on_sigterm(stop):
            while not stop.is_set() and (end is None or time.monotonic() < end):
                try:
                    kind, payload = reader.events.get(timeout=0.05 if driver else 0.2)
                except queue.Empty:
                    session.tick()
                else:
                    _handle(session, reader, kind, payload)
                    if kind == "state" and driver is not None:
                        driver.on_state(str(payload))
                if driver is not None and driver.poll():
                    reason = "done"
                    break
    except KeyboardInterrupt:
        reason = "interrupted"
    except InputError as exc:
        status_console.print(f"livestep: error: {exc}")
        status = exc.exit_status
        reason = "error"
    except BaseException:
        reason = "error"
        raise
    finally:
        if driver is not None:
            driver.end(reason)
        reader.stop()
        with contextlib.suppress(InputError):
            while True:
                try:
                    kind, payload = reader.events.get_nowait()
                except queue.Empty:
                    break
                _handle(session, reader, kind, payload)
        session.close()
        status_console.print(counters_table(session.counters))
        if recorder is not None and recorder.rows:
            status_console.print(f"recorded {recorder.rows} samples to {recorder.path}")
        elif recorder is not None:
            status_console.print("no samples received: no recording written")
    if status == EXIT_OK and driver is not None:
        status = driver.exit_status
    return status


def _handle(session: Session, reader: SerialReader, kind: str, payload: object) -> None:
    if kind == "data":
        session.feed(payload)  # type: ignore[arg-type]
    else:
        session.counters.reconnects = reader.reconnects
        if reader.dropped_bytes:
            session.counters.bad["queue overflow (bytes)"] = reader.dropped_bytes
        session.state(str(payload))


def run_replay(path: Path, decoder: Decoder, settings: AnalysisSettings, *,
               speed: float | None, json_doc: bool = False, json_lines: bool = False) -> int:
    """Play a recording (or raw capture) through the live path; returns the exit status."""
    if not path.is_file():
        raise InputError(f"{path}: no such file")
    sinks = [] if json_doc else [_step_sink(json_lines)]
    session = Session(decoder, settings, sinks)
    try:
        replay_file(path, session, speed=speed)
    except KeyboardInterrupt:
        pass
    finally:
        session.close()
    if json_doc:
        from livestep.report import analysis_document, write_json

        write_json(analysis_document(str(path), session.counters.samples, session.results),
                   sys.stdout)
    else:
        Console(stderr=True).print(counters_table(session.counters))
    return EXIT_OK
