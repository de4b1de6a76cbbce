"""Text-line decoder: bytes in any split, sample chunks out.

Accepts delimited lines (comma, tab, semicolon or spaces; with or without a
header) and ``name=value`` / ``name:value`` pairs. The format is detected from
the first eight data-looking lines unless given; ``#`` comment lines (a recording's
own ``# start:`` / ``# key: value`` metadata) never count as data and never decide the
format. The header is the line just before the first data line (banner lines before it
are logged); a space-separated candidate that names none of the asked-for columns is
taken for a banner too. :attr:`TextDecoder.decision` says what was decided. Lines split
across reads, ``\\r\\n``, a leading UTF-8 byte order mark, non-UTF-8 bytes, overlong
lines (over ``max_line`` bytes, wherever the reads split them), wrong field counts,
``nan`` and firmware log lines are skipped, counted by kind in
:class:`~livestep.decode.counters.LinkCounters`, and log lines are kept (the last
``max_logs``) for display. Decisions depend only on the bytes, never on how they were
split into reads.

A line that is one ``name=value`` pair, or several without spaces (``gains=B``,
``kp = 2.5``, ``kp=1.2 ki=30``), is a note (:mod:`livestep.steps.tags`) in a delimited
stream, and in a ``name=value`` stream when none of its names is a column (else it
is a damaged data line); so is a recording's ``# note: <t> name=value`` line
on replay, and a non-empty cell of a recording's ``note`` column: it is stamped with the
time of the last sample before it (a note cell: of its own row; of the first sample, when
none came before) and collected in :meth:`TextDecoder.take_notes`. Control characters in
a note are escaped; notes before the first sample keep one value per name.

A live link joins a stream mid-line (:meth:`TextDecoder.rejoin`, on every port open): the
first line is dropped unless it is plainly not data (a banner, a header, a comment), and
the last, unfinished line is dropped at the end; both count as ``skipped``, not as bad.

Why this module is long: one stateful decoder whose carry, detection buffer, layout,
notes and counters are one stream's state; the layout decision itself is
:mod:`livestep.decode.layout`, the line tests :mod:`livestep.decode.lines`.
"""

from __future__ import annotations

import re
from collections import deque

import numpy as np
from numpy.typing import NDArray

from livestep.decode.counters import LinkCounters
from livestep.decode.layout import (
    Layout,
    TextFormat,
    detect_layout,
    is_data_line,
    note_header,
    split,
)
from livestep.decode.lines import (
    TEXT_START,
    cut_column,
    drop_long_lines,
    find_pairs,
    is_comment,
    is_garbage,
    looks_like_data,
    split_off_lines,
)
from livestep.decode.numparse import is_number, parse_block
from livestep.decode.timebase import ClockSettings, Timebase
from livestep.steps.samples import SampleChunk
from livestep.steps.tags import (
    MAX_NOTE_NAMES,
    Note,
    clean_text,
    parse_note,
    parse_notes,
    parse_recorded_note,
)

__all__ = ["TextDecoder", "TextFormat", "describe"]

_NO_ROWS = (np.empty(0, dtype=np.intp), np.empty(0))
#: A line cut from a block of rows: (data rows before it, order among events at the same
#: place (a row's note cell first), kind, the line or cell).
_Event = tuple[int, int, str, bytes]

DELIMITERS = {"comma": ",", "tab": "\t", "semicolon": ";", "space": " "}
_DETECT_LINES = 8
_MAX_PENDING = 200  # candidate lines held before deciding anyway
_SPACES = re.compile(rb"[ \t]+")  # one character class repeated: linear
_BOM = b"\xef\xbb\xbf"


class TextDecoder:
    """Stateful decoder for one stream; see the module docstring."""

    def __init__(self, fmt: TextFormat | None = None, clock: ClockSettings | None = None,
                 counters: LinkCounters | None = None, max_logs: int = 200) -> None:
        self.fmt = fmt = fmt if fmt is not None else TextFormat()
        self.counters = counters if counters is not None else LinkCounters()
        self.timebase = Timebase(clock if clock is not None else ClockSettings(), self.counters)
        self.logs: deque[str] = deque(maxlen=max_logs)
        self.decision: str | None = None  # what format detection decided, in words
        self.columns: list[str] = []
        self._carry = b""
        self._skipping = False
        self._at_start = True
        self._live = False  # a link joined mid-stream: partial first and last lines
        self._first_partial = False
        self._pending: list[bytes] = []  # candidate lines seen before the format is known
        self._numeric_seen = 0
        self._note_header: tuple[int, int] | None = None  # (note column, cells) if seen
        self._replay: list[bytes] = []
        self._layout: Layout | None = None
        self._delim: bytes | None = None
        self._pairs = False
        self._roles: tuple[int | None, int, int | None] | None = None
        self._extra: list[tuple[str, int]] = []
        self._role_list: list[int] = []  # the indices of time, feedback, setpoint present
        self._header_line: bytes | None = None
        self._note_col: int | None = None  # index of a note column among the cells
        self._ncells = 0  # cells per line, note column included
        self._notes: list[Note] = []
        self._unstamped: dict[str, str] = {}  # notes before the first sample, by name
        self._note_names: set[str] = set()
        self._last_t: float | None = None
        # The last block had text lines among its rows: the next is split first (the
        # order only saves a failed parse; the result is the same either way).
        self._text_lately = False

    # -- public -------------------------------------------------------------------
    @property
    def ready(self) -> bool:
        """True once the line format is known."""
        return self._roles is not None

    def rejoin(self) -> None:
        """A live link was (re)opened: the stream is joined mid-line. The unfinished line
        held from before is dropped, the next first line is dropped unless it is plainly
        not data, and at :meth:`flush` the unfinished last line is dropped (all counted as
        ``skipped``)."""
        if self._carry.strip():
            self.counters.skipped += 1
        self._carry, self._skipping = b"", False
        self._live = self._first_partial = True

    def feed(self, data: bytes) -> list[SampleChunk]:
        """Decode the next bytes of the stream; returns the samples completed."""
        self.counters.bytes += len(data)
        if self._skipping:
            nl = data.find(b"\n")
            if nl < 0:
                return []
            data = data[nl + 1:]
            self._skipping = False
        buf = self._carry + data if self._carry else data
        cut = buf.rfind(b"\n") + 1
        self._carry = buf[cut:]
        if len(self._carry) > self.fmt.max_line:
            if self._first_partial and not cut:
                self._first_partial = False
                self.counters.skipped += 1
            else:
                self.counters.bad["overlong line"] += 1
            self._carry = b""
            self._skipping = True
        return self._lines(buf[:cut]) if cut else []

    def take_notes(self) -> list[Note]:
        """The notes stamped since the last call, in stream order."""
        notes, self._notes = self._notes, []
        return notes

    def flush(self) -> list[SampleChunk]:
        """End of stream: decode a last line without a newline (a live link's unfinished
        line is dropped instead)."""
        tail, self._carry = self._carry, b""
        if self._live:
            if tail.strip():
                self.counters.skipped += 1
            tail = b""
        out = self._lines(tail + b"\n") if tail.strip() else []
        if not self.ready and self._pending and self._decide():
            out += self._decode(b"")
        return out

    # -- lines --------------------------------------------------------------------
    def _lines(self, block: bytes) -> list[SampleChunk]:
        """Complete lines (each ending in a newline), as received."""
        if self._first_partial:
            self._first_partial = self._at_start = False
            nl = block.find(b"\n")
            first, block = block[:nl], block[nl + 1:]
            if self._partial(first):
                self.counters.skipped += 1
            elif first.strip():
                block = first + b"\n" + block
        if self._at_start and block:
            self._at_start = False
            if block.startswith(_BOM):
                block = block[len(_BOM):]
        block, long = drop_long_lines(block, self.fmt.max_line)
        if long:
            self.counters.bad["overlong line"] += long
        if b"\r" in block:
            block = block.replace(b"\r", b"")
        if self.ready:
            return self._decode(block)
        lines = block.split(b"\n")[:-1] if block else []
        for k, line in enumerate(lines):
            if not line.strip():
                continue
            if not self._candidate(line):
                continue
            if self._numeric_seen >= _DETECT_LINES or len(self._pending) > _MAX_PENDING:
                if self._decide():
                    return self._decode(b"".join(ln + b"\n" for ln in lines[k + 1:]))
        return []

    @staticmethod
    def _partial(first: bytes) -> bool:
        """Whether a first line joined mid-stream is dropped: anything that may be the cut
        end of a data line (numbers, a numeric pair) or is garbage; a banner, a header or
        a comment is kept."""
        line = first.replace(b"\r", b"").strip()
        if not line or is_comment(line):
            return False
        if looks_like_data(line) or find_pairs(line):
            return True
        return is_garbage(line.decode("utf-8", "replace"))

    def _candidate(self, line: bytes) -> bool:
        """Take one line while the format is unknown; ``True`` when it was held for the
        decision. Comments and notes are handled at once (in stream order), so a flood of
        them is never held in memory; a segment marker waits with the data lines."""
        stripped = line.strip()
        if is_comment(stripped) and not stripped.startswith(b"# segment"):
            self._comment(stripped)
            return False
        if not is_comment(stripped) and not looks_like_data(stripped):
            if self._note_header is None:
                self._note_header = note_header(stripped, self.fmt)
            notes = self._note(stripped) if self._note_header is None else None
            if notes is not None:
                for name, value in notes:
                    self._stamp_note(name, value)
                return False
        self._pending.append(line)
        if is_data_line(stripped, self._note_header):
            self._numeric_seen += 1
        return True

    def _decide(self) -> bool:
        """Fix the layout from the pending lines (:mod:`livestep.decode.layout`); ``False``
        (and the pending lines counted as not data) when they hold no data to go by."""
        lines, self._pending = self._pending, []
        self._numeric_seen = 0
        layout = detect_layout(lines, self.fmt, self._note_header)
        if layout is None:
            for ln in lines:
                if is_comment(ln):
                    self._comment(ln.strip())
                else:
                    self._not_data(ln.strip())
            return False
        self._layout = layout
        self._pairs, self._delim, self.columns = layout.pairs, layout.delim, layout.columns
        self._roles, self._extra = layout.roles, layout.extra
        self._role_list = [i for i in layout.roles if i is not None]
        self._header_line, self._note_col = layout.header_line, layout.note_col
        self._ncells = layout.ncells
        self.decision = layout.decision
        self._replay = lines
        return True

    # -- decoding -----------------------------------------------------------------
    def _decode(self, block: bytes) -> list[SampleChunk]:
        if self._replay:
            block = b"\n".join(self._replay) + b"\n" + block
            self._replay = []
        if not block:
            return []
        ncol = len(self.columns)
        if not self._pairs and ncol:
            fast = None if self._text_lately else self._parse_fast(block, ncol)
            if fast is None:  # comments, notes or log lines among the data?
                fast = self._parse_around_text(block, ncol)
            if fast is not None:
                return self._emit(*fast)
        out: list[SampleChunk] = []
        rows: list[list[float]] = []

        def emit() -> None:
            nonlocal rows
            if rows:
                out.extend(self._emit(np.array(rows, dtype=float).reshape(-1, ncol)))
                rows = []

        for raw in block.split(b"\n"):
            line = raw.strip()
            if not line:
                continue
            if line[:1] == b"#":
                emit()
                self._comment(line)
                continue
            if line == self._header_line:
                continue
            cell = b""
            if self._note_col is not None:
                cells = line.split(b",")
                if len(cells) == self._ncells:
                    cell = cells.pop(self._note_col).strip()
                    line = b",".join(cells)
            else:
                notes = self._note(line)
                if notes is not None:
                    emit()
                    for name, value in notes:
                        self._stamp_note(name, value)
                    continue
            row = self._parse_line(line, ncol)
            if row is not None:
                rows.append(row)
            if cell:  # a note cell: at its own row's time
                emit()
                text = cell.decode("utf-8", "replace")
                self._stamp_note(*(parse_note(text) or ("note", text)))
        emit()
        return out

    def _comment(self, line: bytes) -> None:
        """A ``#`` line: a recorded segment marker or note, else a log line."""
        if line.startswith(b"# segment"):  # a restart marked by the recorder
            self.timebase.new_segment()
            return
        note = parse_recorded_note(line.decode("utf-8", "replace"))
        if note is not None:  # a recording replayed: the time is re-stamped
            self._stamp_note(note.name, note.value)
            return
        self._not_data(line)

    def _parse_fast(self, block: bytes, ncol: int) -> tuple[NDArray[np.float64],
                                                           list[_Event]] | None:
        """The block's rows in one pass, and its note cells as events (see :meth:`_emit`);
        ``None`` when a line is not a data row."""
        events: list[_Event] = []
        if self._note_col is not None:
            block, cells = cut_column(block, self._note_col, self._ncells, 0)
            events = [(k + 1, 0, "cell", text.encode()) for k, text in cells]
        data = self._parse_rows(block, ncol)
        return None if data is None else (data, events)

    def _parse_around_text(self, block: bytes, ncol: int) -> tuple[NDArray[np.float64],
                                                                  list[_Event]] | None:
        """A block of data rows with comment, note, header or log lines among them: those
        lines cut out (:func:`~livestep.decode.lines.split_off_lines`) and handled in their
        place as events, the rows parsed in one pass, so such lines cost no more than data
        lines. ``None`` (the caller goes line by line) when a line cut might be data or
        changes the time base (a segment marker)."""
        rest, lines = split_off_lines(block, TEXT_START)
        self._text_lately = bool(lines)
        if not lines:
            return self._parse_fast(block, ncol)
        events: list[_Event] = []
        for before, raw in lines:
            line = raw.strip()
            if line.startswith(b"# segment"):
                return None
            if line[:1] == b"#":
                events.append((before, 1, "comment", line))
            elif line == self._header_line:
                continue
            elif self._note_col is not None or looks_like_data(line) or all(
                    is_number(c) for c in split(line, self._delim or b",")):
                return None
            else:
                events.append((before, 1, "text", line))
        parsed = self._parse_fast(rest, ncol) if rest else (np.empty((0, ncol)), [])
        if parsed is None:
            return None
        data, cells = parsed
        return data, sorted(cells + events, key=lambda e: (e[0], e[1]))

    def _event(self, kind: str, payload: bytes) -> None:
        """One line cut from a block, handled as the line-by-line path would."""
        if kind == "comment":
            self._comment(payload)
            return
        text = payload.decode("utf-8", "replace")
        if kind == "cell":
            self._stamp_note(*(parse_note(text) or ("note", text)))
            return
        notes = self._note(payload)
        if notes is None:
            self._not_data(payload)
            return
        for name, value in notes:
            self._stamp_note(name, value)

    def _parse_rows(self, block: bytes, ncol: int) -> NDArray[np.float64] | None:
        delim = self._delim or b","
        if delim == b" " or delim == b"\t":
            block = _SPACES.sub(b",", block).replace(b",\n", b"\n").replace(b"\n,", b"\n")
            if block.startswith(b","):
                block = block[1:]
        elif delim != b",":
            block = block.replace(delim, b",")
        if block[:1] == b"\n":
            return None
        return parse_block(block, block.count(b"\n"), ncol)

    def _parse_line(self, line: bytes, ncol: int) -> list[float] | None:
        if line == self._header_line:
            return None
        if self._pairs:
            found = {k.decode(): float(v) for k, v in find_pairs(line)}
            if found and set(found) >= {self.columns[i] for i in self._role_indices()}:
                return [found.get(n, np.nan) for n in self.columns]
            return self._not_data(line)
        cells = split(line, self._delim or b",")
        if not all(is_number(c) for c in cells):
            return self._not_data(line)
        if len(cells) != ncol:
            self.counters.bad["wrong field count"] += 1
            return None
        row = [float(c) for c in cells]
        if any(np.isnan(row[i]) for i in self._role_indices()):
            self.counters.bad["nan"] += 1
            return None
        return row

    def _note(self, line: bytes) -> list[tuple[str, str]] | None:
        """The ``(name, value)`` pairs when the line is a note (see the module docstring)."""
        if b"=" not in line:
            return None
        try:
            text = line.decode("utf-8").strip()
        except UnicodeDecodeError:
            return None
        if text.startswith("#"):
            return None
        pairs = parse_notes(text)
        if pairs is None or (self._pairs and any(name in self.columns for name, _ in pairs)):
            return None  # a damaged data line of a name=value stream is not a note
        return pairs

    def _stamp_note(self, name: str, value: str) -> None:
        if name not in self._note_names:
            if len(self._note_names) >= MAX_NOTE_NAMES:
                self.counters.bad["note names over the limit"] += 1
                return
            self._note_names.add(name)
        value = clean_text(value)
        self.counters.notes += 1
        if self._last_t is None:  # one value per name until the first sample stamps them
            self._unstamped.pop(name, None)
            self._unstamped[name] = value
        else:
            self._notes.append(Note(self._last_t, name, value))

    def _role_indices(self) -> list[int]:
        assert self._roles is not None
        return self._role_list

    def _not_data(self, line: bytes) -> None:
        try:
            text = line.decode("utf-8")
        except UnicodeDecodeError:
            self.counters.bad["garbage"] += 1
            return None
        if is_garbage(text):
            self.counters.bad["garbage"] += 1
            return None
        self.counters.log_lines += 1
        self.logs.append(clean_text(text))
        return None

    def _emit(self, data: NDArray[np.float64],
              events: list[_Event] | None = None) -> list[SampleChunk]:
        """Rows to stamped samples; then each event (a line that stood among the rows: a
        comment, a note, a log line, a note cell), handled as if the rows before it had just
        been decoded: a note takes the time of the last sample before it."""
        chunks, kept, t = self._stamp(data, want_rows=bool(events))
        for before, _, kind, payload in events or ():
            c = int(np.searchsorted(kept, before))
            if c:
                self._advance(t, c)
            self._event(kind, payload)
        if t.size:
            self._advance(t, t.size)
        return chunks

    def _advance(self, t: NDArray[np.float64], n: int) -> None:
        """The first ``n`` samples of ``t`` are decoded: notes waiting for a first sample
        take its time, and later notes the time of the n-th."""
        if self._unstamped:
            first = float(t[0])
            self._notes += [Note(first, n, v) for n, v in self._unstamped.items()]
            self._unstamped = {}
        self._last_t = float(t[n - 1])

    def _stamp(self, data: NDArray[np.float64], want_rows: bool = False
               ) -> tuple[list[SampleChunk], NDArray[np.intp], NDArray[np.float64]]:
        """(the chunks of the valid rows, stamped; the indices of the rows kept, when
        ``want_rows``; their times)."""
        if data.shape[0] == 0:
            return [], *_NO_ROWS
        ti, fi, si = self._roles  # type: ignore[misc]
        roles = self._role_indices()
        rows = np.arange(data.shape[0]) if want_rows else _NO_ROWS[0]
        role_data = data if len(roles) == data.shape[1] else data[:, roles]
        if not np.isfinite(role_data.sum()):  # one cheap test for the usual case
            finite = np.isfinite(role_data).all(axis=1)
            self.counters.bad["nan"] += int((~finite).sum())
            data = data[finite]
            rows = rows[finite] if want_rows else rows
        if data.shape[0] == 0:
            return [], *_NO_ROWS
        stamped = self.timebase.stamp(data[:, ti] if ti is not None else None, data.shape[0])
        if stamped.t.size != data.shape[0]:
            data = data[stamped.keep]
            if want_rows:
                rows = rows[stamped.keep]
        self.counters.samples += data.shape[0]
        bounds = [0, *stamped.segment_starts, data.shape[0]]
        first_segment = self.timebase.segment - len(stamped.segment_starts)
        cols = data.T.copy()  # each channel contiguous, in one copy
        out = []
        for k in range(len(bounds) - 1):
            a, b = bounds[k], bounds[k + 1]
            if a == b:
                continue
            out.append(SampleChunk(
                t=stamped.t[a:b], feedback=cols[fi, a:b],
                setpoint=cols[si, a:b] if si is not None else None,
                extras={n: cols[i, a:b] for n, i in self._extra},
                segment=first_segment + k))
        return out, rows, stamped.t


def describe(fmt: TextDecoder) -> str:
    """One line for a recording's metadata: how the decoder reads the stream."""
    if not fmt.ready:
        return "text, format not yet detected"
    kind = "name=value pairs" if fmt._pairs else f"delimiter {fmt._delim!r}"
    return f"text, {kind}, columns {','.join(fmt.columns)}"
