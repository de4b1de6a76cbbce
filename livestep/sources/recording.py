"""Reading livestep recordings (plain CSV, optionally gzip-compressed).

Format: optional ``# key: value`` metadata lines, then a header row naming the
columns, then one sample per row. Default columns ``t`` (seconds),
``setpoint`` and ``feedback``; other columns are kept as extra channels.
Files are read in blocks, so memory stays bounded whatever the file's length.

Notes (:mod:`livestep.steps.tags`) come from ``# note: <t> name=value`` lines (as the
recorder writes them) and from a column named ``note``: a non-empty cell is a note
at its row's time, ``name=value``, or else the text as the value of a note named
``note`` (cells are split at commas; no CSV quoting). ``reader.notes`` holds them
once the data are read.
"""

from __future__ import annotations

import gzip
import math
import queue
import threading
from collections.abc import Iterable, Iterator
from dataclasses import dataclass, field
from pathlib import Path
from typing import BinaryIO

import numpy as np

from livestep.decode.numparse import is_number, parse_block
from livestep.errors import InputError
from livestep.steps.samples import SampleChunk
from livestep.steps.tags import Note, parse_note, parse_recorded_note

__all__ = ["ColumnMap", "ReadStats", "RecordingReader", "TIME_UNITS", "read_ahead"]

TIME_UNITS = {"s": 1.0, "ms": 1e-3, "us": 1e-6}
_BLOCK_BYTES = 1 << 22
_MAX_BAD_FRACTION = 0.1
NOTE_COLUMN = "note"


@dataclass(frozen=True, kw_only=True)
class ColumnMap:
    """Which columns hold time, setpoint and feedback (by header name, or a 1-based
    position given as digits); ``time_unit`` is one of ``s``, ``ms``, ``us``.
    ``setpoint=None`` means: use the ``setpoint`` column if there is one."""

    time: str = "t"
    setpoint: str | None = None
    feedback: str = "feedback"
    time_unit: str = "s"


@dataclass
class ReadStats:
    """What the reader saw: data rows, rows skipped (with the first such line), repeated
    timestamps dropped, and the time of the first and last good sample (seconds)."""

    rows: int = 0
    good: int = 0
    bad: int = 0
    first_bad_line: int | None = None
    repeated_time: int = 0
    reasons: dict[str, int] = field(default_factory=dict)
    first_time: float | None = None
    last_time: float | None = None

    def skip(self, line: int, reason: str) -> None:
        self.bad += 1
        self.reasons[reason] = self.reasons.get(reason, 0) + 1
        if self.first_bad_line is None:
            self.first_bad_line = line


def _open(path: Path) -> BinaryIO:
    try:
        raw = path.open("rb")
    except FileNotFoundError:
        raise InputError(f"{path}: no such file") from None
    except IsADirectoryError:
        raise InputError(f"{path}: is a directory, not a recording") from None
    except OSError as exc:
        raise InputError(f"{path}: cannot open ({exc.strerror})") from None
    magic = raw.peek(2)[:2] if hasattr(raw, "peek") else b""
    if magic == b"\x1f\x8b":
        return gzip.GzipFile(fileobj=raw)  # type: ignore[return-value]
    return raw


def _resolve(name: str, header: list[str], role: str) -> int:
    if name in header:
        return header.index(name)
    if name.isdigit() and 1 <= int(name) <= len(header):
        return int(name) - 1
    raise InputError(f"no {role} column {name!r}; the header has: {', '.join(header)}")


class RecordingReader:
    """Iterate over a recording as :class:`SampleChunk` blocks.

    Opening reads the metadata and header (and raises :class:`InputError` on a
    file that is not a recording); iterating reads the data. ``stats`` fills in
    as it goes; after the last chunk, too many bad rows raise :class:`InputError`.
    """

    def __init__(self, path: str | Path, columns: ColumnMap = ColumnMap()) -> None:
        self.path = Path(path)
        if columns.time_unit not in TIME_UNITS:
            raise InputError(f"unknown time unit {columns.time_unit!r}; use s, ms or us")
        self._scale = TIME_UNITS[columns.time_unit]
        self.metadata: dict[str, str] = {}
        self.notes: list[Note] = []
        self.stats = ReadStats()
        self._fh = _open(self.path)
        try:
            self._read_header(columns)
        except BaseException:
            self._fh.close()
            raise

    # -- header -------------------------------------------------------------------
    def _read_header(self, columns: ColumnMap) -> None:
        line_no = 0
        while True:
            try:
                raw = self._fh.readline(1 << 16)
            except (OSError, EOFError, gzip.BadGzipFile) as exc:
                raise InputError(f"{self.path}: unreadable ({exc})") from None
            line_no += 1
            if not raw:
                raise InputError(f"{self.path}: empty file, no header row" if line_no == 1
                                 else f"{self.path}: no header row")
            if b"\x00" in raw:
                raise InputError("binary data, not a CSV recording", source=str(self.path),
                                 line=line_no)
            try:
                text = raw.decode("utf-8").strip()
            except UnicodeDecodeError:
                raise InputError("not UTF-8 text, not a CSV recording", source=str(self.path),
                                 line=line_no) from None
            if not text:
                continue
            if text.startswith("#"):
                note = parse_recorded_note(text)
                if note is not None:
                    self.notes.append(note)
                    continue
                key, sep, value = text[1:].partition(":")
                if sep:
                    self.metadata[key.strip()] = value.strip()
                continue
            break
        header = [h.strip() for h in text.split(",")]
        if len(header) < 2:
            raise InputError(f"the header has one column ({header[0]!r}); need at least time"
                             " and feedback, separated by commas", source=str(self.path),
                             line=line_no)
        if all(is_number(h) for h in header):
            raise InputError("the first row is numbers, not a header naming the columns",
                             source=str(self.path), line=line_no)
        self.header = header
        ti = _resolve(columns.time, header, "time")
        fi = _resolve(columns.feedback, header, "feedback")
        if columns.setpoint is not None:
            si: int | None = _resolve(columns.setpoint, header, "setpoint")
        else:
            si = header.index("setpoint") if "setpoint" in header else None
        roles = {ti, fi} | ({si} if si is not None else set())
        if len(roles) < 2 + (si is not None):
            raise InputError("time, setpoint and feedback must be different columns")
        # A note column is cut from each block before the numeric parse; indices below
        # are into the numeric columns that are left.
        self._ni = header.index(NOTE_COLUMN) if NOTE_COLUMN in header else None
        if self._ni in roles:
            raise InputError(f"the {NOTE_COLUMN!r} column holds text notes, not samples")
        numeric = [i for i in range(len(header)) if i != self._ni]
        self._ncol = len(numeric)
        self._ti, self._fi = numeric.index(ti), numeric.index(fi)
        self._si = numeric.index(si) if si is not None else None
        self.extra_names = [header[i] for i in numeric if i not in roles]
        self._extra_idx = [k for k, i in enumerate(numeric) if i not in roles]
        self._line = line_no  # last line consumed
        self._last_t = -math.inf

    @property
    def has_setpoint(self) -> bool:
        return self._si is not None

    # -- data -----------------------------------------------------------------------
    def __iter__(self) -> Iterator[SampleChunk]:
        carry = b""
        try:
            while True:
                try:
                    block = self._fh.read(_BLOCK_BYTES)
                except (OSError, EOFError, gzip.BadGzipFile) as exc:
                    raise InputError(f"{self.path}: unreadable after line {self._line}"
                                     f" ({exc})") from None
                if not block:
                    break
                block = carry + block
                cut = block.rfind(b"\n") + 1
                carry = block[cut:]
                if cut:
                    chunk = self._parse(block[:cut])
                    if chunk is not None:
                        yield chunk
            if carry.strip():
                chunk = self._parse(carry + b"\n")
                if chunk is not None:
                    yield chunk
        finally:
            self._fh.close()
        st = self.stats
        if st.bad > _MAX_BAD_FRACTION * st.rows:
            reason = max(st.reasons, key=st.reasons.__getitem__)
            raise InputError(f"{st.bad} of {st.rows} data rows are bad ({reason}), first at"
                             f" line {st.first_bad_line}", source=str(self.path))
        if st.good == 0:
            raise InputError("no valid data rows after the header", source=str(self.path))

    def _parse(self, block: bytes) -> SampleChunk | None:
        ncol = self._ncol
        first_line = self._line + 1
        nlines = block.count(b"\n")
        self._line += nlines
        self.stats.rows += nlines
        data = None
        if b"\r" in block:
            block = block.replace(b"\r", b"")
        cells: list[tuple[int, str]] = []
        if self._ni is not None:
            block, cells = _cut_column(block, self._ni, len(self.header), first_line)
        data = parse_block(block, nlines, ncol)
        if data is not None:
            lines = np.arange(first_line, first_line + nlines)
        if data is None:
            data, lines = self._parse_slow(block, first_line)
        roles = [self._ti, self._fi] + ([self._si] if self._si is not None else [])
        finite = np.isfinite(data[:, roles]).all(axis=1)
        if not finite.all():
            for ln in lines[~finite]:
                self.stats.skip(int(ln), "non-numeric or missing value")
            data, lines = data[finite], lines[finite]
        if data.shape[0] == 0:
            return None
        t = data[:, self._ti] * self._scale
        prev = np.concatenate(([self._last_t], t[:-1]))
        if np.any(t < prev):
            back = int(np.argmax(t < prev))
            raise InputError("time goes backwards", source=str(self.path),
                             line=int(lines[back]))
        fresh = t > prev
        if not fresh.all():
            self.stats.repeated_time += int((~fresh).sum())
            data, t, lines = data[fresh], t[fresh], lines[fresh]
        if cells:
            self._cell_notes(cells, t, lines)
        if t.size == 0:
            return None
        self._last_t = float(t[-1])
        if self.stats.first_time is None:
            self.stats.first_time = float(t[0])
        self.stats.last_time = self._last_t
        self.stats.good += t.size
        return SampleChunk(
            t=t, feedback=np.ascontiguousarray(data[:, self._fi]),
            setpoint=np.ascontiguousarray(data[:, self._si]) if self._si is not None else None,
            extras={n: np.ascontiguousarray(data[:, i])
                    for n, i in zip(self.extra_names, self._extra_idx, strict=True)})

    def _parse_slow(self, block: bytes, first_line: int) -> tuple[np.ndarray, np.ndarray]:
        ncol = self._ncol
        rows: list[list[float]] = []
        lines: list[int] = []
        for k, raw in enumerate(block.split(b"\n")[:-1]):
            ln = first_line + k
            if not raw.strip() or raw.lstrip().startswith(b"#"):
                self.stats.rows -= 1
                note = parse_recorded_note(raw.decode("utf-8", "replace").strip())
                if note is not None:
                    self.notes.append(note)
                continue
            cells = raw.split(b",")
            if len(cells) != ncol:
                self.stats.skip(ln, f"{len(cells)} fields instead of {ncol}")
                continue
            row = []
            for c in cells:
                try:
                    row.append(float(c))
                except ValueError:
                    row.append(math.nan)
            rows.append(row)
            lines.append(ln)
        return (np.array(rows, dtype=float).reshape(-1, ncol), np.array(lines, dtype=np.intp))


    def _cell_notes(self, cells: list[tuple[int, str]], t: np.ndarray,
                    lines: np.ndarray) -> None:
        """Notes of a note column, at their row's time (the last good row before, for a row
        that was skipped; the first good one when none came before)."""
        for line, text in cells:
            k = int(np.searchsorted(lines, line, side="right")) - 1
            if k >= 0:
                at = float(t[k])
            elif math.isfinite(self._last_t):
                at = self._last_t
            elif t.size:
                at = float(t[0])
            else:
                continue
            name, value = parse_note(text) or (NOTE_COLUMN, text)
            self.notes.append(Note(at, name, value))


def _cut_column(block: bytes, index: int, ncol: int,
                first_line: int) -> tuple[bytes, list[tuple[int, str]]]:
    """The block without column ``index`` of ``ncol`` (comment lines, and lines that do
    not have the column, left as they are), and the non-empty cells cut, with their line
    numbers. Vectorised when every line of the block has ``ncol`` cells."""
    b = np.frombuffer(block, dtype=np.uint8)
    ends = np.flatnonzero(b == ord("\n"))
    commas = np.flatnonzero(b == ord(","))
    if commas.size != ends.size * (ncol - 1) or b"#" in block:
        return _cut_column_lines(block, index, first_line)
    at = commas.reshape(ends.size, ncol - 1)
    starts = np.concatenate(([0], ends[:-1] + 1))
    if not (np.all(at[:, 0] >= starts) and np.all(at[:, -1] < ends)):
        return _cut_column_lines(block, index, first_line)  # rows of different lengths
    if index == 0:
        lo, hi = starts, at[:, 0]
        gone = (lo, hi + 1)  # the cell and the comma after it
    elif index == ncol - 1:
        lo, hi = at[:, -1] + 1, ends
        gone = (lo - 1, hi)  # the comma before it and the cell
    else:
        lo, hi = at[:, index - 1] + 1, at[:, index]
        gone = (lo, hi + 1)
    cells = [(first_line + int(k), block[lo[k]:hi[k]].strip().decode("utf-8", "replace"))
             for k in np.flatnonzero(hi > lo)]
    edge = np.zeros(b.size + 1, dtype=np.int32)
    edge[gone[0]] += 1  # one range per line: no index repeats within either array
    edge[gone[1]] -= 1
    keep = np.cumsum(edge[:-1]) == 0
    return b[keep].tobytes(), [(ln, text) for ln, text in cells if text]


def _cut_column_lines(block: bytes, index: int,
                      first_line: int) -> tuple[bytes, list[tuple[int, str]]]:
    """:func:`_cut_column` line by line, for blocks with comment or short lines."""
    lines = block.split(b"\n")
    cells: list[tuple[int, str]] = []
    for k, line in enumerate(lines[:-1]):
        if line.startswith(b"#"):
            continue
        parts = line.split(b",")
        if len(parts) <= index:
            continue
        cell = parts.pop(index).strip()
        if cell:
            cells.append((first_line + k, cell.decode("utf-8", "replace")))
        lines[k] = b",".join(parts)
    return b"\n".join(lines), cells


def read_all(path: str | Path, columns: ColumnMap = ColumnMap()) -> tuple[RecordingReader,
                                                                         list[SampleChunk]]:
    """Read a whole (small) recording: the reader, for its metadata and stats, and its chunks."""
    reader = RecordingReader(path, columns)
    return reader, list(reader)



def read_ahead(chunks: Iterable[SampleChunk], depth: int = 2) -> Iterator[SampleChunk]:
    """Iterate ``chunks`` with the next ``depth`` read (parsed) in a background thread, so
    reading overlaps the analysis (numpy releases the GIL while it parses). Errors from the
    reader are raised here, in the consumer, in their place in the sequence."""
    q: queue.Queue[tuple[str, object]] = queue.Queue(maxsize=depth)
    stop = threading.Event()

    def run() -> None:
        try:
            for chunk in chunks:
                while not stop.is_set():
                    try:
                        q.put(("chunk", chunk), timeout=0.1)
                        break
                    except queue.Full:
                        continue
                if stop.is_set():
                    return
            q.put(("end", None))
        except BaseException as exc:  # noqa: BLE001 - handed to the consumer
            q.put(("error", exc))

    worker = threading.Thread(target=run, name="livestep-read-ahead", daemon=True)
    worker.start()
    try:
        while True:
            kind, item = q.get()
            if kind == "end":
                return
            if kind == "error":
                raise item  # type: ignore[misc]
            yield item  # type: ignore[misc]
    finally:
        stop.set()
