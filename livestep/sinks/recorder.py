"""Recording a live session: samples to CSV (the recording format), bytes to a raw capture.

Both files are flushed to the operating system every half second (and at
every state change and on close), so a session killed outright loses at most
its last second and leaves a file that ``livestep analyze`` reads. A device
restart is marked by a ``# segment: N`` line, which the text decoder honours
on replay. A note is a ``# note: <t> name=value`` line right after the sample it
was stamped with (a note before the first sample: right after the header).
"""

from __future__ import annotations

import datetime as dt
import io
import json
import time
from collections.abc import Callable
from pathlib import Path
from typing import IO

import numpy as np

from livestep import __version__
from livestep.decode.counters import LinkCounters
from livestep.sinks.base import Sink
from livestep.steps.samples import SampleChunk
from livestep.steps.tags import Note, format_note

__all__ = ["Recorder", "unique_path"]


def unique_path(path: Path) -> Path:
    """``path`` itself if free, else ``name-1.csv``, ``name-2.csv``... (never overwrite)."""
    if not path.exists():
        return path
    stem, suffix = path.name.split(".", 1) if "." in path.name else (path.name, "")
    for k in range(1, 10000):
        candidate = path.with_name(f"{stem}-{k}.{suffix}" if suffix else f"{stem}-{k}")
        if not candidate.exists():
            return candidate
    raise FileExistsError(path)


class Recorder(Sink):
    """Writes chunks as CSV rows. The header is written with the first chunk (its channels
    fix the columns: ``t``, ``setpoint`` if present, ``feedback``, extras)."""

    def __init__(self, path: Path, *, metadata: dict[str, str] | Callable[[], dict[str, str]],
                 raw_path: Path | None = None, flush_interval: float = 0.5) -> None:
        self.path = unique_path(Path(path))
        self.raw_path = unique_path(Path(raw_path)) if raw_path is not None else None
        self.flush_interval = flush_interval
        self.rows = 0
        start = dt.datetime.now(dt.UTC).isoformat(timespec="seconds")
        self._meta = {"start": start, "livestep": __version__}
        self._metadata = metadata  # a callable is asked when the header is written
        self._fh: IO[bytes] | None = None
        self._raw: IO[bytes] | None = self.raw_path.open("wb") if self.raw_path else None
        self._columns: list[str] | None = None
        self._extras: list[str] = []
        self._fmt: list[str] = []
        self._segment = 0
        self._last_flush = time.monotonic()
        self._early_notes: list[str] = []  # notes before the header is written

    def write(self, chunk: SampleChunk) -> None:
        """Append the chunk's samples."""
        if self._fh is None:
            self._open(chunk)
        assert self._fh is not None and self._columns is not None
        if chunk.segment != self._segment:
            self._segment = chunk.segment
            self._fh.write(f"# segment: {chunk.segment}\n".encode())
        cols = [chunk.t]
        if "setpoint" in self._columns:
            cols.append(chunk.setpoint if chunk.setpoint is not None
                        else np.full(len(chunk), np.nan))
        cols.append(chunk.feedback)
        cols += [chunk.extras.get(n, np.full(len(chunk), np.nan)) for n in self._extras]
        text = io.StringIO()
        np.savetxt(text, np.column_stack(cols), fmt=self._fmt, delimiter=",")
        self._fh.write(text.getvalue().encode())  # whole lines per write: a kill never splits one
        self.rows += len(chunk)
        self.tick()

    def write_raw(self, data: bytes) -> None:
        """Append received bytes to the raw capture, if there is one."""
        if self._raw is not None:
            self._raw.write(data)

    def note(self, text: str) -> None:
        """A comment line in the recording (state changes, for the reader's eyes)."""
        if self._fh is not None:
            self._fh.write(f"# {text}\n".encode())
            self.flush()

    def on_note(self, note: Note) -> None:
        if self._fh is None:
            self._early_notes.append(format_note(note)[2:])
        else:
            self.note(format_note(note)[2:])

    def on_bytes(self, data: bytes) -> None:
        self.write_raw(data)

    def on_chunk(self, chunk: SampleChunk) -> None:
        self.write(chunk)

    def on_state(self, state: str) -> None:
        self.note(f"state: {state}")

    def on_tick(self, counters: LinkCounters) -> None:
        self.tick()

    def tick(self) -> None:
        """Flush if a flush interval has passed; call it now and then even without data."""
        if time.monotonic() - self._last_flush >= self.flush_interval:
            self.flush()

    def flush(self) -> None:
        for fh in (self._fh, self._raw):
            if fh is not None:
                fh.flush()
        self._last_flush = time.monotonic()

    def close(self, counters: LinkCounters | None = None) -> None:
        if counters is not None and self._fh is not None:
            self.note("counters: " + json.dumps(counters.snapshot()))
        for fh in (self._fh, self._raw):
            if fh is not None:
                fh.close()
        self._fh = self._raw = None

    def _open(self, chunk: SampleChunk) -> None:
        names = ["t", *(["setpoint"] if chunk.setpoint is not None else []), "feedback",
                 *chunk.extras]
        self._columns = names
        self._extras = list(chunk.extras)
        self._fmt = ["%.12g"] + ["%.10g"] * (len(names) - 1)  # time: 1 us over 10^6 s
        self._fh = self.path.open("wb")
        extra = self._metadata() if callable(self._metadata) else self._metadata
        head = "".join(f"# {k}: {v}\n" for k, v in {**self._meta, **extra}.items())
        notes = "".join(f"# {n}\n" for n in self._early_notes)
        self._fh.write((head + ",".join(names) + "\n" + notes).encode())
        self._segment = chunk.segment
        self.flush()
