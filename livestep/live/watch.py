"""The threaded live pipeline behind ``livestep watch`` (headless or with the terminal UI)
and ``livestep live``.

Two threads besides the caller's: the source's reader thread (a serial port, or a
recording played back at its own pace) only moves bytes into a queue; the analysis
thread runs the one :class:`~livestep.live.session.Session` (decode, record, detect,
measure, fit, judge) and keeps a lock-protected :class:`Snapshot` that a display pulls
at its own frame rate. Nothing is pushed per sample. Memory is bounded on an endless
stream: the recent samples live in a fixed ring buffer and only the last
``keep_windows`` steps keep their samples; everything else is on disk.

Why this module is long: :class:`Watch` owns the two threads, the lock and the state they
share (snapshot, ring buffer, results log); splitting it would spread one lock's
discipline over several files. The session it runs is in :mod:`livestep.live.session`.
"""

from __future__ import annotations

import json
import queue
import threading
import time
from collections import deque
from collections.abc import Callable, Sequence
from dataclasses import dataclass, field, replace
from pathlib import Path
from typing import IO, Any, Protocol

import numpy as np
from numpy.typing import NDArray

from livestep.errors import EXIT_FAIL, EXIT_OK, InputError, WriteError
from livestep.judge.profile import Profile
from livestep.judge.verdict import StepVerdict
from livestep.live.session import Decoder, Session, check_note
from livestep.sinks.base import Sink
from livestep.sinks.recorder import Recorder
from livestep.sources.replay import ReplaySource
from livestep.steps.analysis import AnalysisSettings, StepResult
from livestep.steps.progress import StepProgress
from livestep.steps.samples import SampleChunk
from livestep.steps.tags import Note

__all__ = ["Driver", "Samples", "Snapshot", "Source", "StepEntry", "Watch",
           "results_log_path"]

FloatArray = NDArray[np.float64]

# Link states shown to the user.
STREAMING, WAITING, DISCONNECTED = "streaming", "waiting for data", "disconnected, retrying"
PAUSED, FINISHED, STOPPED = "replay paused", "replay finished", "stopped"


class Source(Protocol):
    """A byte source with a reader thread: events ``("data", bytes)`` and
    ``("state", "connected" | "disconnected" | "paused" | "playing" | "finished")``."""

    events: queue.Queue[tuple[str, object]]

    def start(self) -> None: ...

    def stop(self, timeout: float = 1.0) -> None: ...


class Driver(Protocol):
    """Something that acts on the link during a session (a step plan): :meth:`begin` once
    the source is open, :meth:`poll` between reads on the analysis thread (``True`` ends
    the session), :meth:`on_state` on link changes, and :meth:`end` with the reason
    (``done``, ``stopped``, ``interrupted`` or ``error``) before the source closes,
    whatever ends the session; :attr:`exit_status` when it ended well."""

    def begin(self, link: Any, session: Session) -> None: ...

    def poll(self) -> bool: ...

    def on_state(self, state: str) -> None: ...

    def end(self, reason: str) -> None: ...

    @property
    def exit_status(self) -> int: ...


@dataclass(frozen=True)
class StepEntry:
    """One finished step as a display sees it: the result (its ``window`` set for the
    recent steps only), the verdict (``None`` without a profile) and when it was
    published (``time.monotonic()``)."""

    result: StepResult
    verdict: StepVerdict | None = None
    published: float = 0.0


@dataclass(frozen=True)
class Samples:
    """Recent samples (copies): ``t`` seconds, ``setpoint`` (``None`` without one);
    ``extras``: the stream's extra channels by name, each with its own times
    (``(t, values)``), empty for a stream without any."""

    t: FloatArray
    feedback: FloatArray
    setpoint: FloatArray | None
    extras: dict[str, tuple[FloatArray, FloatArray]] = field(default_factory=dict)


@dataclass(frozen=True)
class Snapshot:
    """The state of a watch at one instant, safe to read from any thread.

    ``sample_rate`` in Hz from the device time of the last samples; ``data_time``: device
    time of the last sample, seconds; ``version`` grows with every change of the steps
    or notes (a display redraws its tables only then)."""

    source: str
    replay: bool
    state: str
    counters: dict[str, Any]
    sample_rate: float | None
    data_time: float | None
    recording: str | None
    results_log: str | None
    steps: tuple[StepEntry, ...]
    notes: tuple[Note, ...]
    speed: float | None
    profile: str | None
    version: int
    done: bool
    error: str | None = None
    said: str = ""  # the latest line of the driver (a plan runner), for the display
    error_status: int = EXIT_OK  # the exit status the error calls for (0 without one)
    stream_format: str | None = None  # what the decoder decided about the stream
    under_way: StepProgress | None = None  # the step under way, once its instant is known


class _Ring:
    """Fixed-size ring buffer of (t, setpoint, feedback) samples (or of ``rows`` rows, time
    first: the extra channels)."""

    def __init__(self, capacity: int, rows: int = 3) -> None:
        self.data = np.empty((rows, capacity))  # only written samples are ever read
        self.n = 0  # samples ever written

    def append(self, t: FloatArray, sp: FloatArray | None, fb: FloatArray) -> None:
        self.push([t, sp if sp is not None else np.full(t.size, np.nan), fb])

    def push(self, cols: list[FloatArray]) -> None:
        cap = self.data.shape[1]
        size = cols[0].size
        if size >= cap:
            cols = [c[-cap:] for c in cols]
            self.n += size - cap
        k = cols[0].size
        start = self.n % cap
        first = min(k, cap - start)
        for row, c in zip(self.data, cols, strict=True):
            row[start:start + first] = c[:first]
            row[: k - first] = c[first:]
        self.n += k

    def last(self, count: int) -> FloatArray:
        cap = self.data.shape[1]
        count = min(count, self.n, cap)
        end = self.n % cap
        idx = np.arange(end - count, end) % cap
        return self.data[:, idx]

    def since(self, t0: float) -> FloatArray:
        """The samples from time ``t0`` on, copying only those (each of the ring's two
        stretches is in time order)."""
        cap = self.data.shape[1]
        end = self.n % cap
        parts = [(0, self.n)] if self.n <= cap else [(end, cap), (0, end)]
        count = sum(b - a - int(np.searchsorted(self.data[0, a:b], t0)) for a, b in parts)
        return self.last(count)


def results_log_path(recording: Path) -> Path:
    """Where the results log of a recording goes: ``NAME.steps.jsonl`` beside it."""
    name = recording.name
    for suffix in (".csv.gz", ".csv", ".gz"):
        if name.endswith(suffix):
            name = name[: -len(suffix)]
            break
    return recording.with_name(name + ".steps.jsonl")


def step_line_record(entry: StepEntry) -> dict[str, Any]:
    """The JSON line of a finished step: the ``analyze --json`` step record (with its
    tags, and its verdict and checks when there is a profile)."""
    from livestep.reports.tables import step_record

    return step_record(entry.result, entry.verdict)


class _Collector(Sink):
    """The watch's own sink: fills the ring buffer and the step history."""

    def __init__(self, watch: Watch) -> None:
        self.watch = watch

    def on_chunk(self, chunk: SampleChunk) -> None:
        w = self.watch
        with w._lock:
            w._ring.append(chunk.t, chunk.setpoint, chunk.feedback)
            if chunk.extras or w._xring is not None:
                w._push_extras(chunk)
            w._data_time = float(chunk.t[-1])
            w._last_data = time.monotonic()

    def on_step(self, result: StepResult, verdict: StepVerdict | None = None) -> None:
        self.watch._add_step(result, verdict)

    def on_note(self, note: Note) -> None:
        with self.watch._lock:
            self.watch._notes.append(note)
            self.watch._version += 1

    def on_message(self, text: str) -> None:
        with self.watch._lock:
            self.watch._format = text
            self.watch._version += 1


class Watch:
    """A live session in threads. ``start()``, then read :meth:`snapshot` and
    :meth:`samples` from any thread; :meth:`stop` (or the source ending, ``duration``
    seconds, ``max_steps`` steps) ends it; :meth:`wait` joins it.

    ``on_step(entry)`` is called on the analysis thread for every finished step, after
    the results log has it (headless output); ``on_progress(progress)`` whenever what is
    known of the step under way changes (its phase or a figure), at most 10 times a
    second. ``profile``: a tolerance profile whose verdict every step gets, or ``None``."""

    def __init__(self, source: Source, decoder: Decoder, settings: AnalysisSettings, *,
                 source_name: str, record: Path | None = None, raw: Path | None = None,
                 metadata: Callable[[], dict[str, str]] | None = None,
                 profile: Profile | None = None, sinks: Sequence[Sink] = (),
                 on_step: Callable[[StepEntry], None] | None = None,
                 duration: float | None = None, max_steps: int | None = None,
                 driver: Driver | None = None, keep_windows: int = 20,
                 ring_samples: int = 1 << 19) -> None:
        self.source = source
        self.source_name = source_name
        self.replay = isinstance(source, ReplaySource)
        self.profile = profile
        self.on_step = on_step
        self.on_progress: Callable[[StepProgress], None] | None = None
        self._under_way: StepProgress | None = None
        self._progress_at = 0.0
        self.duration = duration
        self.driver = driver
        self.reason = "stopped"  # why the session ended: done, stopped, interrupted, error
        self.max_steps = max_steps
        self.keep_windows = keep_windows
        self._lock = threading.Lock()
        self._ring = _Ring(ring_samples)
        self._xring: _Ring | None = None  # the extra channels, once the stream has any
        self._xnames: tuple[str, ...] = ()
        self._entries: list[StepEntry] = []
        self._notes: deque[Note] = deque(maxlen=1000)  # the latest, for the display
        self._format: str | None = None
        self._error_status = EXIT_OK
        self._new_notes: list[Note] = []
        self._said = ""
        self._data_time: float | None = None
        self._last_data: float | None = None
        self._version = 0
        self._state = WAITING
        self._error: str | None = None
        self._stop = threading.Event()
        self._done = threading.Event()
        self._thread: threading.Thread | None = None
        self.recorder: Recorder | None = None
        self.results_log: Path | None = None
        self._log: IO[str] | None = None
        self._log_failed: str | None = None
        self._record = (record, raw, metadata or (lambda: {"source": source_name}))
        # The session keeps only the recent steps (with their samples); the full list of
        # step summaries is ``_entries``, for the history, the report and the summary.
        self.session = Session(decoder, replace(settings, keep_windows=True),
                               [_Collector(self), *sinks], keep_results=keep_windows,
                               profile=profile)
        if isinstance(source, ReplaySource):
            source.progress = self._progress

    # -- control (any thread) ---------------------------------------------------
    def start(self) -> None:
        """Start the source (a port that cannot be opened raises here) and the analysis."""
        self.source.start()  # a port that cannot be opened ends here, before any file
        record, raw, metadata = self._record
        if record is not None:
            try:
                self.recorder = Recorder(record, raw_path=raw, metadata=metadata)
            except InputError:  # nowhere to record: one line, and the port closes again
                self.source.stop()
                raise
            self.results_log = results_log_path(self.recorder.path)
            self.session.sinks.append(self.recorder)
        self._started = time.monotonic()
        if self.driver is not None:
            self.driver.begin(self.source, self.session)
        self._thread = threading.Thread(target=self._run, name="livestep-analysis",
                                        daemon=True)
        self._thread.start()

    def stop(self, reason: str = "stopped") -> None:
        """Ask the session to end (``reason``: stopped or interrupted); everything received
        is still decoded and recorded."""
        if not self._stop.is_set():
            self.reason = reason
        self._stop.set()

    def wait(self, timeout: float | None = None) -> bool:
        """Wait for the end of the session; ``True`` once it has ended."""
        return self._done.wait(timeout)

    @property
    def started(self) -> bool:
        return self._thread is not None

    @property
    def done(self) -> bool:
        return self._done.is_set()

    @property
    def channels(self) -> tuple[str, ...]:
        """The names of the stream's extra channels seen so far (in the sample ring)."""
        with self._lock:
            return self._xnames

    def add_note(self, name: str, value: str) -> Note:
        """Tag the steps from now on (the device time of the last sample) with
        ``name=value`` (an empty value ends the note); it reaches the session, and through
        it the recording, on the analysis thread. Refused once the session has ended
        (nothing would record it)."""
        if self._done.is_set():
            raise InputError("the session has ended: a note now would be recorded nowhere")
        if not name.strip():
            raise InputError("a note needs a name: NAME=VALUE or a few words")
        name, value = check_note(name, value)
        with self._lock:
            note = Note(self._data_time or 0.0, name, value)
            self._new_notes.append(note)
        return note

    def say(self, line: str) -> None:
        """Keep ``line`` (from any thread, e.g. a plan runner's progress) for the display."""
        with self._lock:
            self._said = line
            self._version += 1

    def snapshot(self) -> Snapshot:
        with self._lock:
            ring_n = self._ring.n
            rate = None
            if ring_n > 1:
                t = self._ring.last(4096)[0]
                if t[-1] > t[0]:
                    rate = (t.size - 1) / (t[-1] - t[0])
            return Snapshot(
                source=self.source_name, replay=self.replay, state=self._state_now(),
                counters=self.session.counters.snapshot(), sample_rate=rate,
                data_time=self._data_time,
                recording=str(self.recorder.path) if self.recorder is not None else None,
                results_log=str(self.results_log) if self.results_log is not None else None,
                steps=tuple(self._entries), notes=tuple(self._notes),
                speed=getattr(self.source, "speed", None),
                profile=getattr(self.profile, "name", None), version=self._version,
                done=self._done.is_set(), error=self._error, said=self._said,
                error_status=self._error_status, stream_format=self._format,
                under_way=self._under_way)

    def samples(self, since: float | None = None, count: int = 1 << 16, *,
                extras: bool = False) -> Samples:
        """Copies of the recent samples: from device time ``since`` (seconds), or the
        last ``count``; with ``extras``, the extra channels too."""
        with self._lock:
            d = self._ring.since(since) if since is not None else self._ring.last(count)
            x = None
            if extras and self._xring is not None:
                x = (self._xring.since(since) if since is not None
                     else self._xring.last(count))
        sp = None if np.isnan(d[1]).all() else d[1].copy()
        extras = {} if x is None else {name: (x[0].copy(), x[k].copy())
                                       for k, name in enumerate(self._xnames, start=1)}
        return Samples(t=d[0].copy(), feedback=d[2].copy(), setpoint=sp, extras=extras)

    def _push_extras(self, chunk: SampleChunk) -> None:
        """The chunk's extra channels into their ring (under the lock): names fixed by the
        first chunk that has any, NaN for a missing one."""
        if self._xring is None:
            self._xnames = tuple(chunk.extras)
            self._xring = _Ring(self._ring.data.shape[1], rows=1 + len(self._xnames))
        x = chunk.extras
        self._xring.push([chunk.t, *(x[n] if n in x else np.full(len(chunk), np.nan)
                                     for n in self._xnames)])

    # -- analysis thread --------------------------------------------------------
    def _progress(self) -> float | None:
        s = self.session
        return None if s.first_t is None or s.last_t is None else s.last_t - s.first_t

    def _state_now(self) -> str:
        if self._state in (DISCONNECTED, PAUSED, FINISHED, STOPPED):
            return self._state
        if self._last_data is None or time.monotonic() - self._last_data > 1.0:
            return WAITING
        return STREAMING

    def _add_step(self, result: StepResult, verdict: StepVerdict | None) -> None:
        entry = StepEntry(result, verdict, time.monotonic())
        if self.results_log is not None and self._log_failed is None:
            try:
                if self._log is None:
                    self._log = self.results_log.open("a", encoding="utf-8")
                self._log.write(json.dumps(step_line_record(entry), allow_nan=False) + "\n")
                self._log.flush()
            except OSError as exc:  # the session ends with it; the steps so far are kept
                self._log_failed = (f"{self.results_log}: cannot write ({exc.strerror or exc});"
                                    " the results log stopped")
                self._close_log()
        if self.max_steps is not None and len(self._entries) >= self.max_steps:
            return  # a step closed while stopping: recorded and logged, not announced
        with self._lock:
            self._entries.append(entry)
            old = len(self._entries) - self.keep_windows - 1
            if old >= 0 and self._entries[old].result.window is not None:
                e = self._entries[old]
                self._entries[old] = replace(e, result=replace(e.result, window=None))
            self._version += 1
        if self.on_step is not None:
            self.on_step(entry)
        if self.max_steps is not None and len(self._entries) >= self.max_steps:
            self._stop.set()

    def _pass_notes(self) -> None:
        with self._lock:
            notes, self._new_notes = self._new_notes, []
        for note in notes:
            self.session.add_note(note.name, note.value, t=note.t)

    def _set_state(self, state: str) -> None:
        with self._lock:
            self._state = state
            self._version += 1

    def _handle(self, kind: str, payload: object) -> None:
        if kind == "data":
            self.session.feed(payload)  # type: ignore[arg-type]
            return
        if kind == "error":  # the source cannot go on (a damaged file): one line
            raise InputError(str(payload))
        reader = self.source
        reconnects = getattr(reader, "reconnects", 0)
        dropped = getattr(reader, "dropped_bytes", 0)
        self.session.counters.reconnects = reconnects
        if dropped:
            self.session.counters.bad["queue overflow (bytes)"] = dropped
        state = {"connected": WAITING, "disconnected": DISCONNECTED, "paused": PAUSED,
                 "playing": WAITING, "finished": FINISHED}.get(str(payload), str(payload))
        self._set_state(state)
        self.session.state(str(payload))
        if self.driver is not None:
            self.driver.on_state(str(payload))
        if payload == "finished":
            self._stop.set()

    def _run(self) -> None:
        end = self._started + self.duration if self.duration else None
        events = self.source.events
        timeout = 0.1 if self.driver is None else 0.05
        try:
            while not self._stop.is_set() and (end is None or time.monotonic() < end):
                if self._new_notes:
                    self._pass_notes()
                try:
                    kind, payload = events.get(timeout=timeout)
                except queue.Empty:
                    self.session.tick()
                else:
                    self._handle(kind, payload)
                    self.session.tick()
                self._check_progress()
                self._check_writes()
                if self.driver is not None and self.driver.poll():
                    self.reason = "done"
                    break
        except InputError as exc:
            self._fail(exc)
        except Exception as exc:  # a bug: keep what was recorded, say it in one line
            self._fail(exc)
        finally:
            self._finish()

    def _check_progress(self) -> None:
        """Publish what is known of the step under way when it changed (at most 10 Hz)."""
        now = time.monotonic()
        if now - self._progress_at < 0.1:
            return
        self._progress_at = now
        p = self.session.progress()
        old = self._under_way
        changed = (p and p.known()) != (old and old.known())  # more than the time elapsed
        with self._lock:
            self._under_way = p
            self._version += int(changed)
        if changed and p is not None and self.on_progress is not None:
            self.on_progress(p)

    def _fail(self, exc: BaseException) -> None:
        """The session's error (the first one counts): one line and its exit status."""
        self.reason = "error"
        if self._error is not None:
            return
        if isinstance(exc, InputError):
            self._error, self._error_status = str(exc), exc.exit_status
        else:
            self._error = f"internal error: {type(exc).__name__}: {exc}"
            self._error_status = EXIT_FAIL

    def _check_writes(self) -> None:
        """A recording or results log that cannot be written ends the session."""
        failed = (self.recorder.failed if self.recorder is not None else None) or \
            self._log_failed
        if failed:
            raise WriteError(failed)

    def _close_log(self) -> None:
        log, self._log = self._log, None
        if log is not None:
            try:
                log.close()
            except OSError as exc:
                self._log_failed = self._log_failed or (
                    f"{self.results_log}: cannot write ({exc.strerror or exc})")

    def _drain(self) -> None:
        """Decode what the reader has queued (a file loses nothing by being left)."""
        try:
            while self._error is None and not self.replay:
                try:
                    kind, payload = self.source.events.get_nowait()
                except queue.Empty:
                    return
                if kind == "data":
                    self._handle(kind, payload)
                    self._check_writes()
        except Exception as exc:  # noqa: BLE001 - the session's error, in one line
            self._fail(exc)

    def _finish(self) -> None:
        """End the session whatever happened: the driver hears the end (and sends its safe
        command while the link is up), the source closes, what was received is decoded and
        recorded, the files close. Every stage is guarded, so :meth:`wait` always returns."""
        try:
            if self.reason != "error":
                self._drain()  # while the link is open: a driver hears how it really ended
            if self.driver is not None:
                try:
                    self.driver.end(self.reason)
                except Exception as exc:  # noqa: BLE001 - the source still closes
                    self._fail(exc)
            try:
                self.source.stop()
            except Exception as exc:  # noqa: BLE001
                self._fail(exc)
            try:
                self._pass_notes()
            except Exception as exc:  # noqa: BLE001
                self._fail(exc)
            self._drain()
            try:
                self.session.close()
                self._check_writes()
            except Exception as exc:  # noqa: BLE001 - a recorder that failed at the end
                self._fail(exc)
            self._close_log()
            if self._log_failed and self._error is None:
                self._fail(WriteError(self._log_failed))
        finally:
            with self._lock:
                if self._state != FINISHED:
                    self._state = STOPPED
                self._version += 1
            self._done.set()
