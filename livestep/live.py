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
from pathlib import Path

from rich.console import Console

from livestep.analysis import AnalysisSettings
from livestep.errors import EXIT_OK, InputError
from livestep.session import AutoDecoder, Decoder, Session, replay_file
from livestep.sinks.base import Sink
from livestep.sinks.console import ConsoleSink, JsonLinesSink, counters_table
from livestep.sinks.recorder import Recorder
from livestep.sources.serial_port import PortSettings, SerialReader

__all__ = ["describe_decoder", "run_live", "run_replay"]


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


def run_live(port: PortSettings, decoder: Decoder, settings: AnalysisSettings, *,
             record: Path | None, raw: Path | None = None, duration: float | None = None,
             json_lines: bool = False) -> int:
    """Read, decode, record and analyse until stopped; returns the exit status."""
    status_console = Console(stderr=True, highlight=False)
    reader = SerialReader(port)
    reader.start()  # a port that cannot be opened ends here, before any file is made
    sinks = [_step_sink(json_lines)]
    recorder = None
    if record is not None:
        recorder = Recorder(record, raw_path=raw, metadata=lambda: {
            "source": port.url, "decoder": describe_decoder(decoder)})
        sinks.append(recorder)
        status_console.print(f"recording to {recorder.path}")

    session = Session(decoder, settings, sinks)
    stop = threading.Event()
    status = EXIT_OK
    end = time.monotonic() + duration if duration else None
    try:
        with _stop_on_sigterm(stop):
            while not stop.is_set() and (end is None or time.monotonic() < end):
                try:
                    kind, payload = reader.events.get(timeout=0.2)
                except queue.Empty:
                    session.tick()
                    continue
                _handle(session, reader, kind, payload)
    except KeyboardInterrupt:
        pass
    except InputError as exc:
        status_console.print(f"livestep: error: {exc}")
        status = exc.exit_status
    finally:
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
