"""Recording a live session: samples to CSV (the recording format), bytes to a raw capture.

Both files are flushed to the operating system every half second (and at
every state change and on close), so a session killed outright loses at most
its last second and leaves a file that ``livestep analyze`` reads. A device
restart is marked by a ``# segment: N`` line, which the text decoder honours
on replay. A note is a ``# note: <t> name=value`` line right after the sample it
was stamped with (a note before the first sample: right after the header).

Nothing written can be read back as something else: every text that reaches the file
(metadata values, note names and values, comments, column names) has its control
characters escaped (:func:`~livestep.steps.tags.clean_text`), so it stays on its own
``#`` line and can never become a data row or a metadata or segment line.

A write that fails (disk full, file-size limit, a vanished disk) never raises into the
session: the recorder cuts the file back to its last whole line, adds a
``# recording stopped: ...`` line when it can, closes both files and keeps the reason in
:attr:`Recorder.failed`; the session then ends with that one line
(:class:`~livestep.errors.WriteError`). Everything written before stays readable.
"""

from __future__ import annotations

import datetime as dt
import io
import json
import os
import time
from collections.abc import Callable
from pathlib import Path
from typing import IO

import numpy as np

from livestep import __version__
from livestep.decode.counters import LinkCounters
from livestep.errors import WriteError
from livestep.sinks.base import Sink
from livestep.steps.samples import SampleChunk
from livestep.steps.tags import Note, clean_text, format_note

__all__ = ["Recorder", "unique_path"]

_FLUSH_BYTES = 1 << 20  # pending bytes that force a write before the interval is up


def unique_path(path: Path) -> Path:
    """``path`` itself if free, else ``name-1.csv``, ``name-2.csv``... (never overwrite)."""
    if not path.exists():
        return path
    stem, suffix = path.name.split(".", 1) if "." in path.name else (path.name, "")
    for k in range(1, 10000):
        candidate = path.with_name(f"{stem}-{k}.{suffix}" if suffix else f"{stem}-{k}")
        if not candidate.exists():
            return candidate
    raise WriteError(f"{path}: no free name beside it (tried 10000)")


def _writable_folder(path: Path) -> None:
    folder = path.parent if str(path.parent) else Path(".")
    if not folder.is_dir():
        raise WriteError(f"{path}: cannot record there: no folder {folder}")
    if not os.access(folder, os.W_OK | os.X_OK):
        raise WriteError(f"{path}: cannot record there: permission denied")


class _File:
    """A file written in whole lines: bytes wait in memory until :meth:`flush`; a failed
    write cuts the file back to the last whole piece handed to :meth:`add`."""

    def __init__(self, path: Path) -> None:
        self.path = path
        self.fh: IO[bytes] | None = path.open("wb", buffering=0)
        self.size = 0  # bytes on disk, whole pieces only
        self.pending = bytearray()
        self.marks: list[tuple[int, int]] = []  # (end in pending, rows) of each piece
        self.rows = 0  # rows on disk

    def add(self, data: bytes, rows: int = 0) -> None:
        self.pending += data
        self.marks.append((len(self.pending), rows))

    def flush(self) -> str | None:
        """Write what is pending; the reason (one line) when it could not be written."""
        fh = self.fh
        if fh is None or not self.pending:
            return None
        view, done = memoryview(self.pending), 0
        try:
            while done < len(view):
                n = fh.write(view[done:])
                if not n:
                    raise OSError(0, "nothing could be written")
                done += n
        except OSError as exc:
            view.release()
            return self._failed(exc, done)
        view.release()
        self.size += done
        self.rows += sum(r for _, r in self.marks)
        self.pending.clear()
        self.marks.clear()
        return None

    def _failed(self, exc: OSError, done: int) -> str:
        """Keep the whole pieces that reached the disk, drop the rest, close."""
        whole = 0
        for end, rows in self.marks:
            if end > done:
                break
            whole, self.rows = end, self.rows + rows
        self.size += whole
        reason = exc.strerror or str(exc)
        fh, self.fh = self.fh, None
        self.pending.clear()
        self.marks.clear()
        try:
            assert fh is not None
            os.ftruncate(fh.fileno(), self.size)  # no half line at the end
            fh.seek(self.size)
            line = f"# recording stopped: {clean_text(reason)}\n".encode()
            if fh.write(line) == len(line):
                self.size += len(line)
            else:
                os.ftruncate(fh.fileno(), self.size)
        except OSError:
            pass
        try:
            fh.close()  # type: ignore[union-attr]
        except OSError:
            pass
        return reason

    def close(self) -> str | None:
        reason = self.flush()
        fh, self.fh = self.fh, None
        if fh is not None:
            try:
                fh.close()
            except OSError as exc:
                return reason or exc.strerror or str(exc)
        return reason


class Recorder(Sink):
    """Writes chunks as CSV rows. The header is written with the first chunk (its channels
    fix the columns: ``t``, ``setpoint`` if present, ``feedback``, extras). ``rows``: the
    samples recorded (after a failure, those on disk); ``failed``: why the recording stopped
    (one line), else ``None``."""

    def __init__(self, path: Path, *, metadata: dict[str, str] | Callable[[], dict[str, str]],
                 raw_path: Path | None = None, flush_interval: float = 0.5) -> None:
        self.path = unique_path(Path(path))
        _writable_folder(self.path)
        self.raw_path = unique_path(Path(raw_path)) if raw_path is not None else None
        self.flush_interval = flush_interval
        self.failed: str | None = None
        start = dt.datetime.now(dt.UTC).isoformat(timespec="seconds")
        self._meta = {"start": start, "livestep": __version__}
        self._metadata = metadata  # a callable is asked when the header is written
        self._csv: _File | None = None
        self._raw: _File | None = None
        if self.raw_path is not None:
            _writable_folder(self.raw_path)
            try:
                self._raw = _File(self.raw_path)
            except OSError as exc:
                raise WriteError(f"{self.raw_path}: cannot write ({exc.strerror})") from None
        self._columns: list[str] | None = None
        self._extras: list[str] = []
        self._fmt: list[str] = []
        self._segment = 0
        self._last_flush = time.monotonic()
        self._early_notes: list[str] = []  # notes before the header is written

    @property
    def rows(self) -> int:
        """Samples recorded so far (written or waiting to be)."""
        if self._csv is None:
            return 0
        return self._csv.rows + (0 if self.failed else sum(r for _, r in self._csv.marks))

    def write(self, chunk: SampleChunk) -> None:
        """Append the chunk's samples."""
        if self.failed:
            return
        if self._csv is None and not self._open(chunk):
            return
        assert self._csv is not None and self._columns is not None
        if chunk.segment != self._segment:
            self._segment = chunk.segment
            self._csv.add(f"# segment: {int(chunk.segment)}\n".encode())
        cols = [chunk.t]
        if "setpoint" in self._columns:
            cols.append(chunk.setpoint if chunk.setpoint is not None
                        else np.full(len(chunk), np.nan))
        cols.append(chunk.feedback)
        cols += [chunk.extras.get(n, np.full(len(chunk), np.nan)) for n in self._extras]
        text = io.StringIO()
        np.savetxt(text, np.column_stack(cols), fmt=self._fmt, delimiter=",")
        self._csv.add(text.getvalue().encode(), len(chunk))  # whole lines, never split
        if len(self._csv.pending) > _FLUSH_BYTES:
            self.flush()
        self.tick()

    def write_raw(self, data: bytes) -> None:
        """Append received bytes to the raw capture, if there is one."""
        if self._raw is not None and not self.failed:
            self._raw.add(bytes(data))
            if len(self._raw.pending) > _FLUSH_BYTES:
                self.flush()

    def note(self, text: str) -> None:
        """A comment line in the recording (state changes, for the reader's eyes)."""
        if self._csv is not None and not self.failed:
            self._csv.add(f"# {clean_text(text)}\n".encode())
            self.flush()

    def on_note(self, note: Note) -> None:
        if self._csv is None:
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
        """Hand what is pending to the operating system; a failure stops the recording
        (:attr:`failed`) and never raises."""
        self._last_flush = time.monotonic()
        for f in (self._csv, self._raw):
            if f is not None and not self.failed:
                reason = f.flush()
                if reason is not None:
                    self._stop(f, reason)

    def close(self, counters: LinkCounters | None = None) -> None:
        """Close both files (never raises; a failure is kept in :attr:`failed`)."""
        if counters is not None and self._csv is not None:
            self.note("counters: " + json.dumps(counters.snapshot()))
        for f in (self._csv, self._raw):
            if f is not None:
                reason = f.close()
                if reason is not None and not self.failed:
                    self._stop(f, reason)

    def _stop(self, failed: _File, reason: str) -> None:
        for f in (self._csv, self._raw):
            if f is not None and f is not failed:
                f.close()
        kept = self._csv.rows if self._csv is not None else 0
        self.failed = (f"{failed.path}: cannot write ({reason}); the recording stopped,"
                       f" {kept} samples kept")

    def _open(self, chunk: SampleChunk) -> bool:
        names = ["t", *(["setpoint"] if chunk.setpoint is not None else []), "feedback",
                 *chunk.extras]
        self._columns = names
        self._extras = list(chunk.extras)
        self._fmt = ["%.12g"] + ["%.10g"] * (len(names) - 1)  # time: 1 us over 10^6 s
        try:
            self._csv = _File(self.path)
        except OSError as exc:
            self.failed = f"{self.path}: cannot write ({exc.strerror})"
            return False
        extra = self._metadata() if callable(self._metadata) else self._metadata
        head = "".join(f"# {clean_text(str(k)).replace(':', '_')}: {clean_text(str(v))}\n"
                       for k, v in {**self._meta, **extra}.items())
        notes = "".join(f"# {n}\n" for n in self._early_notes)
        header = ",".join(clean_text(n).replace(",", "_") for n in names)
        self._csv.add((head + header + "\n" + notes).encode())
        self._segment = chunk.segment
        self.flush()
        return not self.failed
