"""Reading livestep recordings (plain CSV, optionally gzip-compressed).

Format: optional ``# key: value`` metadata lines, then a header row naming the
columns, then one sample per row. Default columns ``t`` (seconds),
``setpoint`` and ``feedback``; other columns are kept as extra channels.
Files are read in blocks, so memory stays bounded whatever the file's length.

Notes (:mod:`livestep.steps.tags`) come from ``# note: <t> name=value`` lines (as the
recorder writes them) and from a column named ``note``: a non-empty cell is a note
at its row's time, ``name=value``, or else the text as the value of a note named
``note`` (cells are split at commas; no CSV quoting). ``reader.notes`` holds them
once the data are read. A ``# note:`` line is a note or nothing, never metadata.

Hostile files cost bounded memory and linear time: blank lines are skipped at the speed
of ``bytes.lstrip`` (header) or numpy (data); no header line is held beyond 64 KB and no
data line beyond :data:`MAX_LINE` (it is skipped and counted as overlong); a UTF-8 byte
order mark is ignored; notes of one name at one time keep one value.

Why this module is long: one reader class whose header scan, block parse and note column
share the reader's line count and statistics; splitting it would pass that state about.
"""

from __future__ import annotations

import math
import queue
import threading
from collections.abc import Callable, Iterable, Iterator
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np

from livestep.decode.lines import (
    COMMENT_START,
    cut_column,
    cut_column_lines,
    cut_comments,
    split_off_lines,
)
from livestep.decode.numparse import is_number, parse_block
from livestep.errors import InputError
from livestep.sources.files import READ_ERRORS, open_file, read_error
from livestep.steps.samples import SampleChunk
from livestep.steps.tags import (
    MAX_NOTE_NAMES,
    NOTE_PREFIX,
    Note,
    clean_text,
    parse_note,
    parse_recorded_note,
)

__all__ = ["ColumnMap", "ReadStats", "RecordingReader", "TIME_UNITS", "read_ahead"]

TIME_UNITS = {"s": 1.0, "ms": 1e-3, "us": 1e-6}
_BLOCK_BYTES = 1 << 22
_PIECE_BYTES = 1 << 16
_HEADER_BLOCK = 1 << 16
_MAX_HEADER_LINE = 1 << 16  # bytes: no header or metadata line is longer
MAX_LINE = 1 << 20  # bytes: a longer data line is skipped as overlong, never held
_BOM = b"\xef\xbb\xbf"  # a UTF-8 byte order mark some editors write first
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


def _resolve(name: str, header: list[str], role: str, source: str) -> int:
    if name in header:
        return header.index(name)
    if name.isdigit() and 1 <= int(name) <= len(header):
        return int(name) - 1
    raise InputError(f"no {role} column {name!r}; the header has: {', '.join(header)}",
                     source=source)


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
        self._note_at: dict[tuple[str, float], int] = {}  # (name, t) -> index in notes
        self._note_names: set[str] = set()
        self._rest = b""  # bytes read past the header
        self.damage: str | None = None  # why the data ended early (a damaged file), one line
        self.stats = ReadStats()
        self._fh = open_file(self.path)
        try:
            self._read_header(columns)
        except BaseException:
            self._fh.close()
            raise

    # -- header -------------------------------------------------------------------
    def _more(self, where: str) -> bytes:
        try:
            return self._fh.read(_HEADER_BLOCK)
        except READ_ERRORS as exc:
            raise read_error(self.path, exc, where) from None

    def _header_text(self) -> tuple[str, int]:
        """The header row and its line number, reading the ``#`` lines before it
        (metadata, notes) and leaving what follows it in ``self._rest``. Blank lines are
        skipped at the speed of ``bytes.lstrip``; no line is held beyond 64 KB."""
        buf, pos, line_no = b"", 0, 0
        while True:
            if pos < len(buf) and buf[pos:pos + 1] in b" \t\r\n":  # skip blank lines fast
                rest = buf[pos:].lstrip(b" \t\r\n")
                q = len(buf) - len(rest)
                start = buf.rfind(b"\n", pos, q) + 1 if rest else len(buf)
                start = max(start, pos)
                line_no += buf.count(b"\n", pos, start)
                pos = start
            nl = buf.find(b"\n", pos)
            if nl < 0:
                if len(buf) - pos > _MAX_HEADER_LINE:
                    raise InputError(f"line {line_no + 1} is longer than 64 KB: not a"
                                     " recording's header", source=str(self.path))
                more = self._more(f"in the header, after line {line_no}")
                if more:
                    buf, pos = buf[pos:] + more, 0
                    continue
                if not buf[pos:].strip():
                    raise InputError(f"{self.path}: empty file, no header row" if
                                     line_no == 0 and not buf else f"{self.path}: no header row")
                nl = len(buf)
                buf += b"\n"
            raw, pos = buf[pos:nl], nl + 1
            line_no += 1
            if line_no == 1 and raw.startswith(_BOM):
                raw = raw[len(_BOM):]
            if len(raw) > _MAX_HEADER_LINE:
                raise InputError(f"line {line_no} is longer than 64 KB: not a recording's"
                                 " header", source=str(self.path))
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
            if text.startswith(NOTE_PREFIX):  # a note, never metadata (even if unreadable)
                note = parse_recorded_note(text)
                if note is not None:
                    self._add_note(note)
                continue
            if text.startswith("#"):
                key, sep, value = text[1:].partition(":")
                if sep:
                    self.metadata[key.strip()] = value.strip()
                continue
            self._rest = buf[pos:]
            return text, line_no

    def _read_header(self, columns: ColumnMap) -> None:
        text, line_no = self._header_text()
        header = [h.strip() for h in text.split(",")]
        src = str(self.path)
        if len(header) < 2:
            raise InputError(f"the header has one column ({header[0]!r}); need at least time"
                             " and feedback, separated by commas", source=str(self.path),
                             line=line_no)
        if all(is_number(h) for h in header):
            raise InputError("the first row is numbers, not a header naming the columns",
                             source=str(self.path), line=line_no)
        self.header = header
        ti = _resolve(columns.time, header, "time", src)
        fi = _resolve(columns.feedback, header, "feedback", src)
        if columns.setpoint is not None:
            si: int | None = _resolve(columns.setpoint, header, "setpoint", src)
        else:
            si = header.index("setpoint") if "setpoint" in header else None
        roles = {ti, fi} | ({si} if si is not None else set())
        if len(roles) < 2 + (si is not None):
            raise InputError("time, setpoint and feedback must be different columns",
                             source=src)
        # A note column is cut from each block before the numeric parse; indices below
        # are into the numeric columns that are left.
        self._ni = header.index(NOTE_COLUMN) if NOTE_COLUMN in header else None
        if self._ni in roles:
            raise InputError(f"the {NOTE_COLUMN!r} column holds text notes, not samples",
                             source=src)
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
        carry, skipping = self._rest, False
        self._rest = b""
        try:
            while True:
                block = self._read_block(carry)
                if not block:
                    break
                if skipping:  # the rest of an overlong line
                    nl = block.find(b"\n")
                    if nl < 0:
                        continue
                    block, skipping = block[nl + 1:], False
                    self._line += 1
                block = carry + block
                cut = block.rfind(b"\n") + 1
                carry = block[cut:]
                if len(carry) > MAX_LINE:  # never held: skipped and counted
                    self.stats.rows += 1
                    self.stats.skip(self._line + block.count(b"\n", 0, cut) + 1,
                                    "overlong line")
                    carry, skipping = b"", True
                if cut:
                    chunk = self._parse(block[:cut])
                    if chunk is not None:
                        yield chunk
            if carry.strip() and self.damage is None:  # a damaged file's last line is cut
                chunk = self._parse(carry + b"\n")
                if chunk is not None:
                    yield chunk
        finally:
            self._fh.close()
        st = self.stats
        if self.damage is not None and st.good == 0:
            raise InputError(self.damage)
        if st.bad > _MAX_BAD_FRACTION * st.rows:
            reason = max(st.reasons, key=st.reasons.__getitem__)
            raise InputError(f"{st.bad} of {st.rows} data rows are bad ({reason}), first at"
                             f" line {st.first_bad_line}", source=str(self.path))
        if st.good == 0:
            raise InputError("no valid data rows after the header", source=str(self.path))

    def _read_block(self, carry: bytes) -> bytes:
        """The next block, read in small pieces so that a file damaged further on (a
        truncated gzip) still gives every whole line before the damage; the damage is kept
        in :attr:`damage` and ends the data there."""
        if self.damage is not None:
            return b""
        parts, size = [], 0
        while size < _BLOCK_BYTES:
            try:
                piece = self._fh.read(_PIECE_BYTES)
            except READ_ERRORS as exc:
                lines = self._line + carry.count(b"\n") + sum(p.count(b"\n") for p in parts)
                self.damage = str(read_error(self.path, exc, f"after line {lines}"))
                break
            if not piece:
                break
            parts.append(piece)
            size += len(piece)
        return b"".join(parts)

    def _add_note(self, note: Note) -> None:
        """Keep a note; a second one of the same name at the same time replaces it (as in
        :class:`~livestep.steps.tags.NoteTimeline`), so a flood of them stays small."""
        key = (note.name, note.t)
        k = self._note_at.get(key)
        if k is not None:
            self.notes[k] = note
            return
        if note.name not in self._note_names:
            if len(self._note_names) >= MAX_NOTE_NAMES:
                return
            self._note_names.add(note.name)
        self._note_at[key] = len(self.notes)
        self.notes.append(note)

    def _parse(self, block: bytes) -> SampleChunk | None:
        ncol = self._ncol
        first_line = self._line + 1
        nlines = block.count(b"\n")
        self._line += nlines
        self.stats.rows += nlines
        if b"\r" in block:
            block = block.replace(b"\r", b"")
        if self._ni is None:
            # The usual block: rows, perhaps with comment and note lines, parsed at once (a
            # blank line, like any line that is not ncol numbers, fails the parse, and the
            # general path below takes the block). The rows' line numbers are counted only
            # if a row needs one (skipped, or its time going backwards).
            rows, comments = cut_comments(block) if b"#" in block else (block, [])
            data = parse_block(rows, nlines - len(comments), ncol, library=True)
            if data is not None:
                for raw in comments:
                    self._comment(raw)
                return self._chunk(data, lambda: _row_lines(block, first_line), [])
        linenos = np.arange(first_line, first_line + nlines)
        if b"#" in block:  # comment and note lines out, so the rest parses in one pass
            block, cut = split_off_lines(block, COMMENT_START)
            if cut:
                for _, raw in cut:
                    self._comment(raw)
                linenos = _without_cut(linenos, cut)
                if linenos.size == 0:
                    return None
        if b"\n\n" in block or block[:1] == b"\n":  # blank lines: dropped at numpy speed
            kept = linenos.size
            block, linenos = _drop_empty_lines(block, linenos)
            self.stats.rows -= kept - linenos.size
            if linenos.size == 0:
                return None
        cells: list[tuple[int, str]] = []
        if self._ni is not None:
            block, found = cut_column(block, self._ni, len(self.header), 0)
            cells = [(int(linenos[k]), text) for k, text in found]
        data = parse_block(block, linenos.size, ncol, library=True)
        if data is None:
            data, linenos = self._parse_slow(block, linenos)
        return self._chunk(data, lambda: linenos, cells)

    def _chunk(self, data: np.ndarray, line_numbers: Callable[[], np.ndarray],
               cells: list[tuple[int, str]]) -> SampleChunk | None:
        """The chunk of the parsed rows ``data`` (``line_numbers()``: their line numbers,
        asked for only when needed): rows with a missing role value skipped, the time
        checked and scaled, notes of the note column (``cells``) placed."""
        lines: np.ndarray | None = None

        def numbers() -> np.ndarray:
            nonlocal lines
            if lines is None:
                lines = line_numbers()
            return lines

        roles = [self._ti, self._fi] + ([self._si] if self._si is not None else [])
        finite = np.isfinite(data[:, roles]).all(axis=1)
        if not finite.all():
            for ln in numbers()[~finite]:
                self.stats.skip(int(ln), "non-numeric or missing value")
            data, lines = data[finite], numbers()[finite]
        if data.shape[0] == 0:
            if cells:
                self._cell_notes(cells, np.empty(0), numbers())
            return None
        t = data[:, self._ti] * self._scale
        prev = np.concatenate(([self._last_t], t[:-1]))
        if np.any(t < prev):
            back = int(np.argmax(t < prev))
            raise InputError("time goes backwards", source=str(self.path),
                             line=int(numbers()[back]))
        fresh = t > prev
        if not fresh.all():
            self.stats.repeated_time += int((~fresh).sum())
            data, t, lines = data[fresh], t[fresh], numbers()[fresh]
        if cells:
            self._cell_notes(cells, t, numbers())
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

    def _comment(self, raw: bytes) -> None:
        """A ``#`` (or blank) line among the data: not a row; a recorded note is kept."""
        self.stats.rows -= 1
        note = parse_recorded_note(raw.decode("utf-8", "replace").strip())
        if note is not None:
            self._add_note(note)

    def _parse_slow(self, block: bytes,
                    linenos: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
        ncol = self._ncol
        rows: list[list[float]] = []
        lines: list[int] = []
        for ln, raw in zip(linenos.tolist(), block.split(b"\n")[:-1], strict=True):
            if not raw.strip() or raw.lstrip().startswith(b"#"):
                self._comment(raw)
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
            self._add_note(Note(at, name, clean_text(value)))


def _row_lines(block: bytes, first_line: int) -> np.ndarray:
    """The line numbers of the rows of ``block`` (its lines but the ``#`` ones), the first
    line being ``first_line``."""
    linenos = np.arange(first_line, first_line + block.count(b"\n"))
    return _without_cut(linenos, split_off_lines(block, COMMENT_START)[1])


def _without_cut(linenos: np.ndarray, cut: list[tuple[int, bytes]]) -> np.ndarray:
    """The line numbers of a block's lines but those :func:`split_off_lines` cut."""
    return np.delete(linenos, [n + j for j, (n, _) in enumerate(cut)])


def _drop_empty_lines(block: bytes, linenos: np.ndarray) -> tuple[bytes, np.ndarray]:
    """The block without its empty lines, and the line numbers of the lines kept."""
    b = np.frombuffer(block, dtype=np.uint8)
    ends = np.flatnonzero(b == 10)
    starts = np.concatenate(([0], ends[:-1] + 1))
    empty = ends == starts
    keep = np.ones(b.size, dtype=bool)
    keep[ends[empty]] = False
    return b[keep].tobytes(), linenos[~empty]


#: The column cut, shared with the text decoder (names kept for the tests).
_cut_column, _cut_column_lines = cut_column, cut_column_lines


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
