"""The listener interface every sink implements."""

from __future__ import annotations

from livestep.decode.counters import LinkCounters
from livestep.judge.verdict import StepVerdict
from livestep.steps.analysis import StepResult
from livestep.steps.samples import SampleChunk
from livestep.steps.tags import Note

__all__ = ["Sink"]


class Sink:
    """Base for the listeners of a session; override what you need."""

    def on_bytes(self, data: bytes) -> None:
        """Raw bytes as received."""

    def on_chunk(self, chunk: SampleChunk) -> None:
        """Decoded samples."""

    def on_step(self, result: StepResult, verdict: StepVerdict | None = None) -> None:
        """A step whose window has closed, measured and modelled; ``verdict``: how it
        fared against the session's profile (``None`` without one)."""

    def on_note(self, note: Note) -> None:
        """A note (``name=value`` at a time) from the stream or the user."""

    def on_state(self, state: str) -> None:
        """Link state: connected, disconnected, ..."""

    def on_message(self, text: str) -> None:
        """Something the user should know about the session, one line (the stream format
        the decoder detected)."""

    def on_tick(self, counters: LinkCounters) -> None:
        """Called now and then, with or without data, with the link's counters (periodic
        flushing and status displays)."""

    def close(self, counters: LinkCounters) -> None:
        """End of the session, with the final counters."""
