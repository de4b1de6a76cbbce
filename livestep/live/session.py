"""A session: bytes from any source through one decoder and the analysis into the sinks.

Live data and replay take exactly this path, so a replayed recording gives the
same steps as the session that made it. A device restart (a new segment) closes
the open step: steps never span a restart. Notes (``name=value`` lines of a text
stream, or :meth:`Session.add_note` from a user interface) go to the sinks and
tag every step that starts while they are active. Binary frames carry no notes.
"""

from __future__ import annotations

import gzip
import time
from collections import deque
from collections.abc import Callable, Iterable, Sequence
from dataclasses import replace
from pathlib import Path
from typing import Protocol

from livestep.decode.counters import LinkCounters
from livestep.decode.text import TextDecoder, TextFormat
from livestep.decode.timebase import ClockSettings
from livestep.judge.profile import Profile
from livestep.judge.verdict import StepVerdict, judge
from livestep.sinks.base import Sink
from livestep.steps.analysis import AnalysisSettings, StepAnalyzer, StepResult
from livestep.steps.samples import SampleChunk
from livestep.steps.tags import Note, NoteTimeline

__all__ = ["AutoDecoder", "Decoder", "Session", "Sink", "make_decoder", "replay_file"]


class Decoder(Protocol):
    """Bytes in, sample chunks out (see :mod:`livestep.decode`)."""

    counters: LinkCounters

    def feed(self, data: bytes) -> list[SampleChunk]: ...

    def flush(self) -> list[SampleChunk]: ...


def _take_notes(decoder: object) -> list[Note]:
    take = getattr(decoder, "take_notes", None)
    return take() if take is not None else []


class AutoDecoder:
    """Looks at the first bytes and picks the binary frame decoder (0x00 delimiters
    outnumber newlines) or the text decoder."""

    def __init__(self, make_text: Callable[[LinkCounters], Decoder],
                 make_binary: Callable[[LinkCounters], Decoder], probe: int = 256) -> None:
        self.counters = LinkCounters()
        self._make = (make_text, make_binary)
        self._buf = b""
        self._probe = probe
        self._inner: Decoder | None = None

    @property
    def inner(self) -> Decoder | None:
        return self._inner

    def feed(self, data: bytes) -> list[SampleChunk]:
        if self._inner is not None:
            return self._inner.feed(data)
        self._buf += data
        if len(self._buf) < self._probe:
            return []
        return self._choose().feed(self._take())

    def flush(self) -> list[SampleChunk]:
        if self._inner is None:
            if not self._buf:
                return []
            out = self._choose().feed(self._take())
            return out + self._inner.flush()  # type: ignore[union-attr]
        return self._inner.flush()

    def take_notes(self) -> list[Note]:
        """The inner decoder's new notes (text streams only)."""
        return _take_notes(self._inner)

    def _take(self) -> bytes:
        buf, self._buf = self._buf, b""
        return buf

    def _choose(self) -> Decoder:
        binary = self._buf.count(0) > self._buf.count(b"\n")
        self._inner = self._make[1 if binary else 0](self.counters)
        self.logs = getattr(self._inner, "logs", None)
        return self._inner


def make_decoder(kind: str = "auto", *, text: TextFormat | None = None,
                 clock: ClockSettings | None = None,
                 channels: Sequence[str] = ("setpoint", "feedback"),
                 binary_clock: ClockSettings | None = None) -> Decoder:
    """A decoder for ``kind`` = text, binary or auto. Text time defaults to seconds;
    binary time to a 32-bit microsecond counter."""

    def make_text(counters: LinkCounters) -> Decoder:
        return TextDecoder(text, clock, counters)

    def make_binary(counters: LinkCounters) -> Decoder:
        from livestep.decode.frames import FrameDecoder

        return FrameDecoder(channels=channels, counters=counters, clock=binary_clock or clock
                            or ClockSettings(unit="us", wrap_bits=32))

    if kind == "text":
        return make_text(LinkCounters())
    if kind == "binary":
        return make_binary(LinkCounters())
    return AutoDecoder(make_text, make_binary)


class Session:
    """Feed bytes with :meth:`feed`; :meth:`close` at the end. ``results`` keeps every
    step, or the last ``keep_results`` (an endless live stream); ``published`` counts
    them all; with a ``profile`` every step is judged (``verdicts``, parallel to
    ``results``) before the sinks hear of it; sinks hear about everything as it happens."""

    def __init__(self, decoder: Decoder, settings: AnalysisSettings | None = None,
                 sinks: Sequence[Sink] = (), *, keep_results: int | None = None,
                 profile: Profile | None = None) -> None:
        self.decoder = decoder
        self.profile = profile
        self.settings = settings if settings is not None else AnalysisSettings()
        self.sinks = list(sinks)
        self.results: list[StepResult] | deque[StepResult] = (
            [] if keep_results is None else deque(maxlen=keep_results))
        self.verdicts: list[StepVerdict | None] | deque[StepVerdict | None] = (
            [] if keep_results is None else deque(maxlen=keep_results))
        self.published = 0
        self.last_t: float | None = None
        self.first_t: float | None = None
        self._analyzer: StepAnalyzer | None = None
        self._segment = 0
        self._closed = False
        self.notes = NoteTimeline()
        self._unsent: list[Note] = []  # notes not yet handed to the sinks

    @property
    def counters(self) -> LinkCounters:
        return self.decoder.counters

    def feed(self, data: bytes) -> list[StepResult]:
        """Decode and analyse the next bytes; returns the steps they closed."""
        for s in self.sinks:
            s.on_bytes(data)
        return self._chunks(self.decoder.feed(data))

    def add_note(self, name: str, value: str, t: float | None = None) -> Note:
        """Add a note from outside the stream (a user interface): ``name`` is ``value``
        from ``t`` (seconds, the stream's time base; ``None``: the time of the latest
        sample, 0 before any). An empty ``value`` ends the note. Call it from the thread
        that feeds the session."""
        note = Note(float(t if t is not None else self.last_t or 0.0), name, value)
        self.notes.add(note)
        for s in self.sinks:
            s.on_note(note)
        return note

    def state(self, state: str) -> None:
        for s in self.sinks:
            s.on_state(state)

    def tick(self) -> None:
        for s in self.sinks:
            s.on_tick(self.counters)

    def close(self) -> list[StepResult]:
        """Flush the decoder, close the open step and the sinks."""
        if self._closed:
            return []
        self._closed = True
        out = self._chunks(self.decoder.flush())
        out += self._finish()
        self._send_notes(None)
        for s in self.sinks:
            s.close(self.counters)
        return out

    def _finish(self, reason: str = "end of data") -> list[StepResult]:
        if self._analyzer is None:
            return []
        done = self._analyzer.finish(reason)
        self._analyzer = None
        return self._publish(done)

    def _send_notes(self, until: float | None) -> None:
        """Hand the sinks the notes stamped at or before ``until`` (all, for ``None``), so
        a recorder writes each one right after the sample it was stamped with."""
        k = 0
        while k < len(self._unsent) and (until is None or self._unsent[k].t <= until):
            k += 1
        send, self._unsent = self._unsent[:k], self._unsent[k:]
        for note in send:
            for s in self.sinks:
                s.on_note(note)

    def _chunks(self, chunks: Iterable[SampleChunk]) -> list[StepResult]:
        out: list[StepResult] = []
        new = _take_notes(self.decoder)  # stamped already: in the timeline before any step
        for note in new:
            self.notes.add(note)
        self._unsent += new
        for chunk in chunks:
            if self._unsent:  # stamped with the previous chunk's last sample (or this first)
                self._send_notes(float(chunk.t[0]))
            if chunk.segment != self._segment:
                out += self._finish("device restart")
                self._segment = chunk.segment
            if self._analyzer is None:
                self._analyzer = StepAnalyzer(self.settings,
                                              has_setpoint=chunk.setpoint is not None)
            for s in self.sinks:
                s.on_chunk(chunk)
            if self.first_t is None:
                self.first_t = float(chunk.t[0])
            self.last_t = float(chunk.t[-1])
            out += self._publish(self._analyzer.feed(chunk))
        if self._unsent and self.last_t is not None:
            self._send_notes(self.last_t)
        return out

    def _publish(self, results: list[StepResult]) -> list[StepResult]:
        """Number the steps across segments (each has its own detector) and hand them on."""
        out = [replace(r, index=self.published + k,
                       tags=self.notes.active_at(r.metrics.t_step))
               for k, r in enumerate(results)]
        profile = self.profile  # judged after tagging: a profile's rules may match tags
        verdicts = [None if profile is None else judge(r, profile) for r in out]
        self.results += out
        self.verdicts += verdicts
        self.published += len(out)
        for r, v in zip(out, verdicts, strict=True):
            for s in self.sinks:
                s.on_step(r, v)
        return out


def replay_file(path: Path, session: Session, *, speed: float | None = 1.0,
                block: int = 1 << 16, stop: Callable[[], bool] = lambda: False,
                sleep: Callable[[float], None] = time.sleep) -> None:
    """Push a file's bytes through ``session``, paced by the decoded sample times at
    ``speed`` x real time (``None``: as fast as possible). Does not close the session."""
    if speed is not None:
        block = min(block, 4096)
    start = time.monotonic()
    with open(path, "rb") as raw:
        fh = gzip.GzipFile(fileobj=raw) if raw.peek(2)[:2] == b"\x1f\x8b" else raw
        while not stop():
            data = fh.read(block)
            if not data:
                return
            session.feed(data)
            session.tick()
            if speed is not None and session.first_t is not None and session.last_t is not None:
                due = (session.last_t - session.first_t) / speed - (time.monotonic() - start)
                if due > 0:
                    sleep(due)
