"""What a report says about the session: source, date, duration, sample rate, decode counters.

A recording carries its facts in ``#`` comment lines: ``# key: value`` lines before the
header (``start``, ``livestep``, ``source``, ``decoder``... see
:mod:`livestep.sinks.recorder`) and, among the data, ``# segment: N``, ``# state: ...``
and a final ``# counters: {json}`` line. :func:`comment_lines` finds them all.
"""

from __future__ import annotations

import datetime as dt
import gzip
import json
from collections.abc import Iterator
from dataclasses import dataclass
from pathlib import Path
from typing import Any

from livestep.errors import InputError

__all__ = ["SessionInfo", "comment_lines", "read_session_info"]

_BLOCK = 1 << 22


@dataclass(frozen=True, kw_only=True)
class SessionInfo:
    """The session as a report shows it. ``duration`` in seconds (first to last sample),
    ``sample_rate`` in Hz (samples per second over the duration); ``metadata``: the
    recording's ``# key: value`` lines before the header, in order; ``counters``: the
    link counters of a live recording (``None`` for other files); ``segments``: device
    restarts marked in the recording; ``notes``: what the reader skipped or dropped;
    ``modified``: the file's modification time (ISO 8601, UTC), a date for recordings
    without a ``start`` line."""

    source: str
    samples: int
    duration: float | None
    sample_rate: float | None
    metadata: tuple[tuple[str, str], ...] = ()
    counters: dict[str, Any] | None = None
    segments: int = 0
    states: tuple[str, ...] = ()
    notes: tuple[str, ...] = ()
    modified: str | None = None

    @property
    def start(self) -> str | None:
        """The recording's start date and time (ISO 8601, UTC) when it has one."""
        return dict(self.metadata).get("start")


def _open(path: Path):  # noqa: ANN202 - a binary file object
    try:
        raw = path.open("rb")
    except OSError as exc:
        raise InputError(f"{path}: cannot open ({exc.strerror})") from None
    if raw.peek(2)[:2] == b"\x1f\x8b":
        return gzip.GzipFile(fileobj=raw)
    return raw


def comment_lines(path: str | Path) -> Iterator[str]:
    """The text after the ``#`` of every comment line of a recording, in order. Read in
    large blocks and found by a search for newline-hash, so long recordings are quick."""
    path = Path(path)
    with _open(path) as fh:
        carry = b""
        while True:
            try:
                block = fh.read(_BLOCK)
            except (OSError, EOFError) as exc:
                raise InputError(f"{path}: unreadable ({exc})") from None
            data = carry + block
            if block:  # whole lines only; the rest waits for the next block
                cut = data.rfind(b"\n") + 1
                data, carry = data[:cut], data[cut:]
            view = b"\n" + data
            pos = view.find(b"\n#")
            while pos >= 0:
                end = view.find(b"\n", pos + 1)
                end = len(view) if end < 0 else end
                yield view[pos + 2:end].decode("utf-8", "replace").strip()
                pos = view.find(b"\n#", end)
            if not block:
                return


def read_session_info(path: str | Path, *, metadata: dict[str, str], samples: int,
                 first_t: float | None, last_t: float | None,
                 notes: tuple[str, ...] = ()) -> SessionInfo:
    """The facts of a recording: its header ``metadata`` (as
    :class:`~livestep.sources.recording.RecordingReader` read them), the segment, state and
    counters lines among its data, and what the analysis counted (``samples`` good
    samples between ``first_t`` and ``last_t``, seconds)."""
    counters = None
    segments = 0
    states: list[str] = []
    for text in comment_lines(path):
        key, _, value = (part.strip() for part in text.partition(":"))
        if key == "counters":
            try:
                counters = json.loads(value)
            except json.JSONDecodeError:
                counters = None
            if not isinstance(counters, dict):
                counters = None
        elif key == "segment":
            segments += 1
        elif key == "state":
            states.append(value)
    duration = rate = None
    if first_t is not None and last_t is not None and last_t > first_t:
        duration = last_t - first_t
        rate = (samples - 1) / duration if samples > 1 else None
    mtime = dt.datetime.fromtimestamp(Path(path).stat().st_mtime, dt.UTC)
    return SessionInfo(source=str(path), samples=samples, duration=duration, sample_rate=rate,
                       metadata=tuple(metadata.items()), counters=counters, segments=segments,
                       states=tuple(states), notes=notes,
                       modified=mtime.isoformat(timespec="seconds"))
