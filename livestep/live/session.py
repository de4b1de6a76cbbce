"""A session: bytes from any source through one decoder and the analysis into the sinks.

Live data and replay take exactly this path, so a replayed recording gives the
same steps as the session that made it. A device restart (a new segment) closes
the open step: steps never span a restart. Notes (``name=value`` lines of a text
stream, or :meth:`Session.add_note` from a user interface) go to the sinks and
tag every step that starts while they are active. Binary frames carry no notes.
"""

from __future__ import annotations

import time
from collections import deque
from collections.abc import Callable, Iterable, Sequence
from dataclasses import replace
from pathlib import Path

from livestep.decode.auto import AutoDecoder, Decoder
from livestep.decode.counters import LinkCounters
from livestep.decode.text import TextDecoder, TextFormat
from livestep.decode.timebase import ClockSettings
from livestep.errors import InputError
from livestep.judge.profile import Profile
from livestep.judge.verdict import StepVerdict, judge
from livestep.sinks.base import Sink
from livestep.sources.files import READ_ERRORS, open_file, read_error
from livestep.steps.analysis import AnalysisSettings, StepAnalyzer, StepResult
from livestep.steps.progress import StepProgress
from livestep.steps.samples import SampleChunk
from livestep.steps.tags import (
    MAX_NOTE_NAMES,
    Note,
    NoteTimeline,
    clean_text,
    is_note_name,
)

__all__ = ["AutoDecoder", "Decoder", "Session", "Sink", "check_note", "make_decoder",
           "replay_file"]


def check_note(name: str, value: str) -> tuple[str, str]:
    """``(name, value)`` of a note from outside the stream, checked: the name is a note name
    (letters, digits, ``_ . -``; :class:`InputError` otherwise), control characters in the
    value are escaped."""
    name = name.strip()
    if not is_note_name(name):
        raise InputError(f"a note name is one word of letters, digits, _ . or -, not"
                         f" {clean_text(name)!r}")
    return name, clean_text(value.strip())


def _take_notes(decoder: object) -> list[Note]:
    take = getattr(decoder, "take_notes", None)
    return take() if take is not None else []


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
        self._said: str | None = None  # the decoder's decision, once told

    @property
    def counters(self) -> LinkCounters:
        return self.decoder.counters

    def feed(self, data: bytes) -> list[StepResult]:
        """Decode and analyse the next bytes; returns the steps they closed."""
        for s in self.sinks:
            s.on_bytes(data)
        out = self._chunks(self.decoder.feed(data))
        if self._said is None:
            self._announce()
        return out

    def _announce(self) -> None:
        """Tell the sinks, once, what the decoder decided about the stream's format."""
        said = getattr(self.decoder, "decision", None)
        if said:
            self._said = said
            for s in self.sinks:
                s.on_message(f"stream format: {said}")

    def add_note(self, name: str, value: str, t: float | None = None) -> Note:
        """Add a note from outside the stream (a user interface): ``name`` is ``value``
        from ``t`` (seconds, the stream's time base; ``None``: the time of the latest
        sample, 0 before any). An empty ``value`` ends the note. Call it from the thread
        that feeds the session. The name must be a note name (:func:`check_note`); control
        characters in the value are escaped, so nothing can break a recording's line."""
        name, value = check_note(name, value)
        note = Note(float(t if t is not None else self.last_t or 0.0), name, value)
        if not self.notes.add(note):
            raise InputError(f"a note name too many (at most {MAX_NOTE_NAMES} names)")
        for s in self.sinks:
            s.on_note(note)
        return note

    def progress(self) -> StepProgress | None:
        """What is known of the step under way, if one is (see
        :mod:`livestep.steps.progress`)."""
        return None if self._analyzer is None else self._analyzer.progress()

    def state(self, state: str) -> None:
        """A link state change: ``connected`` means a port was (re)opened, so the decoder
        joins the stream mid-line or mid-frame (``rejoin``)."""
        if state == "connected":
            rejoin = getattr(self.decoder, "rejoin", None)
            if rejoin is not None:
                rejoin()
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
        if self._said is None:
            self._announce()
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
    ``speed`` x real time (``None``: as fast as possible). Does not close the session. Only
    a regular file is read (:func:`~livestep.sources.files.open_file`); a file that stops
    being readable (a damaged gzip) raises :class:`InputError` after the bytes before it
    went through the session."""
    if speed is not None:
        block = min(block, 4096)
    start = time.monotonic()
    done = 0
    with open_file(path) as fh:
        while not stop():
            try:
                data = fh.read(block)
            except READ_ERRORS as exc:
                raise read_error(Path(path), exc, f"after {done} bytes") from None
            if not data:
                return
            done += len(data)
            session.feed(data)
            session.tick()
            if speed is not None and session.first_t is not None and session.last_t is not None:
                due = (session.last_t - session.first_t) / speed - (time.monotonic() - start)
                if due > 0:
                    sleep(due)
