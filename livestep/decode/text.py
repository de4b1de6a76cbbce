"""Text-line decoder: bytes in any split, sample chunks out.

Accepts delimited lines (comma, tab, semicolon or spaces; with or without a
header) and ``name=value`` / ``name:value`` pairs. The format is detected from
the first eight data-looking lines unless given. Lines split across reads,
``\\r\\n``, non-UTF-8 bytes, overlong lines (bounded by ``max_line``), wrong
field counts, ``nan`` and firmware log lines are skipped, counted by kind in
:class:`~livestep.decode.counters.LinkCounters`, and log lines are kept (the
last ``max_logs``) for display. Decisions depend only on the bytes, never on
how they were split into reads.

A line that is one ``name=value`` pair, or several without spaces (``gains=B``,
``kp = 2.5``, ``kp=1.2 ki=30``), is a note (:mod:`livestep.steps.tags`) in a delimited
stream, and in a ``name=value`` stream when none of its names is a column (else it
is a damaged data line); so is a recording's ``# note: <t> name=value`` line
on replay: it is stamped with the time of the last sample before it (of the first
sample, when none came before) and collected in :meth:`TextDecoder.take_notes`.
"""

from __future__ import annotations

import re
from collections import deque
from dataclasses import dataclass

import numpy as np
from numpy.typing import NDArray

from livestep.decode.counters import LinkCounters
from livestep.decode.numparse import is_number, parse_block
from livestep.decode.timebase import ClockSettings, Timebase
from livestep.errors import InputError
from livestep.steps.samples import SampleChunk
from livestep.steps.tags import NOTE_PREFIX, Note, parse_notes

__all__ = ["TextDecoder", "TextFormat"]

DELIMITERS = {"comma": ",", "tab": "\t", "semicolon": ";", "space": " "}
_DETECT_LINES = 8
_NUMBER = rb"[-+]?(?:\d+\.?\d*|\.\d+)(?:[eE][-+]?\d+)?|[-+]?(?:nan|inf)"
_PAIR = re.compile(rb"([A-Za-z_][\w.]*)\s*[=:]\s*(" + _NUMBER + rb")", re.IGNORECASE)
_SPACES = re.compile(rb"[ \t]+")


@dataclass(frozen=True, kw_only=True)
class TextFormat:
    """How to read the lines. ``delimiter``: one of , \\t ; or a space, ``None`` to detect;
    ``pairs``: ``True`` for name=value lines, ``None`` to detect; ``names``: column names
    when the stream has no header; ``time``, ``setpoint``, ``feedback``: column roles by
    name or 1-based position (``time=None``: no device time, stamp from ``clock.host_rate``;
    ``setpoint=None``: use a column named ``setpoint`` if any)."""

    delimiter: str | None = None
    pairs: bool | None = None
    names: tuple[str, ...] | None = None
    time: str | None = "t"
    setpoint: str | None = None
    feedback: str = "feedback"
    max_line: int = 4096


def _split(line: bytes, delim: bytes) -> list[bytes]:
    if delim == b" ":
        return line.split()
    return [c.strip() for c in line.split(delim)]


class TextDecoder:
    """Stateful decoder for one stream; see the module docstring."""

    def __init__(self, fmt: TextFormat | None = None, clock: ClockSettings | None = None,
                 counters: LinkCounters | None = None, max_logs: int = 200) -> None:
        self.fmt = fmt = fmt if fmt is not None else TextFormat()
        self.counters = counters if counters is not None else LinkCounters()
        self.timebase = Timebase(clock if clock is not None else ClockSettings(), self.counters)
        self.logs: deque[str] = deque(maxlen=max_logs)
        self._carry = b""
        self._skipping = False
        self._pending: list[bytes] = []  # lines seen before the format is known
        self._numeric_seen = 0
        self._delim: bytes | None = None
        self._pairs = False
        self._names: list[str] | None = None
        self._roles: tuple[int | None, int, int | None] | None = None
        self._extra: list[tuple[str, int]] = []
        self._header_line: bytes | None = None
        self.columns: list[str] = []
        self._notes: list[Note] = []
        self._unstamped: list[tuple[str, str]] = []  # notes seen before the first sample
        self._last_t: float | None = None

    # -- public -------------------------------------------------------------------
    @property
    def ready(self) -> bool:
        """True once the line format is known."""
        return self._roles is not None

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
            self.counters.bad["overlong line"] += 1
            self._carry = b""
            self._skipping = True
        return self._lines(buf[:cut]) if cut else []

    def take_notes(self) -> list[Note]:
        """The notes stamped since the last call, in stream order."""
        notes, self._notes = self._notes, []
        return notes

    def flush(self) -> list[SampleChunk]:
        """End of stream: decode a last line without a newline."""
        tail, self._carry = self._carry, b""
        out = self._lines(tail + b"\n") if tail.strip() else []
        if not self.ready and self._pending and self._decide():
            out += self._decode(b"")
        return out

    # -- lines --------------------------------------------------------------------
    def _lines(self, block: bytes) -> list[SampleChunk]:
        if b"\r" in block:
            block = block.replace(b"\r", b"")
        if self.ready:
            return self._decode(block)
        lines = block.split(b"\n")[:-1] if block else []
        for k, line in enumerate(lines):
            if not line.strip():
                continue
            self._pending.append(line)
            if self._looks_numeric(line):
                self._numeric_seen += 1
            if self._numeric_seen >= _DETECT_LINES or len(self._pending) > 200:
                if self._decide():
                    return self._decode(b"".join(ln + b"\n" for ln in lines[k + 1:]))
        return []

    @staticmethod
    def _looks_numeric(line: bytes) -> bool:
        if len(_PAIR.findall(line)) >= 2:
            return True
        cells = [c for c in re.split(rb"[,;\s]+", line.strip()) if c]
        return len(cells) >= 1 and all(is_number(c) for c in cells)

    def _decide(self) -> bool:
        """Fix delimiter, header and column roles from the pending lines; ``False`` (and
        the pending lines counted as not data) when they hold no data to go by."""
        fmt = self.fmt
        lines, self._pending = self._pending, []
        numeric, self._numeric_seen = self._numeric_seen, 0
        pairs = fmt.pairs
        if pairs is None:
            pairs = sum(len(_PAIR.findall(ln)) >= 2 for ln in lines) >= max(1, numeric // 2)
        names: list[str] = []
        headerless = False
        if pairs:
            first = next((ln for ln in lines if len(_PAIR.findall(ln)) >= 2), None)
            if first is not None:
                names = [m[0].decode() for m in _PAIR.findall(first)]
        else:
            delim = (fmt.delimiter.encode() if fmt.delimiter is not None
                     else self._detect_delimiter(lines))
            widths = [len(cells) for ln in lines
                      if (cells := _split(ln, delim)) and all(is_number(c) for c in cells)]
            ncol = max(set(widths), key=widths.count) if widths else 0
            if ncol:
                self._delim = delim
                header = self._find_header(lines, delim, ncol)
                if fmt.names is not None:
                    names = list(fmt.names)
                elif header is not None:
                    names = header
                else:
                    names, headerless = [f"col{i + 1}" for i in range(ncol)], True
        if len(names) < (1 if fmt.time is None else 2):
            for ln in lines:
                self._not_data(ln)
            return False
        self._pairs = bool(pairs)
        self.columns = names
        self._roles = self._resolve_roles(names, headerless)
        self._replay = lines
        return True

    def _find_header(self, lines: list[bytes], delim: bytes, ncol: int) -> list[str] | None:
        """The last line before the first data line whose cells are all names."""
        header = None
        for ln in lines:
            cells = _split(ln, delim)
            if all(is_number(c) for c in cells):
                break
            if len(cells) == ncol and all(re.fullmatch(rb"[A-Za-z_][\w .\[\]/%-]*", c)
                                          for c in cells):
                header, self._header_line = [c.decode() for c in cells], ln.strip()
        return header

    def _detect_delimiter(self, lines: list[bytes]) -> bytes:
        best, best_score = b",", -1
        for d in (b",", b"\t", b";", b" "):
            widths = [len(cells) for ln in lines
                      if len(cells := _split(ln, d)) >= 2 and all(is_number(c) for c in cells)]
            score = max((widths.count(w) for w in set(widths)), default=0)
            if score > best_score:
                best, best_score = d, score
        return best

    def _resolve_roles(self, names: list[str],
                       headerless: bool) -> tuple[int | None, int, int | None]:
        """Column indices of time, feedback and setpoint: by name, by 1-based position, or
        (headerless streams) by the usual order [time,] [setpoint,] feedback."""
        fmt = self.fmt
        n = len(names)

        def find(name: str | None, position: int | None) -> int | None:
            if name is None:
                return None
            if name in names:
                return names.index(name)
            if name.isdigit() and 1 <= int(name) <= n:
                return int(name) - 1
            if headerless and position is not None and position < n:
                return position
            return None

        ti = find(fmt.time, 0)
        if fmt.time is not None and ti is None:
            raise InputError(f"the stream has no time column {fmt.time!r} (columns:"
                             f" {', '.join(names)}); name it, or give the sample rate to stamp"
                             " samples on the host")
        k = 0 if ti is None else 1
        sp_pos, fb_pos = (k, k + 1) if n >= k + 2 else (None, k)
        fi = find(fmt.feedback, fb_pos)
        if fi is None:
            raise InputError(f"the stream has no feedback column {fmt.feedback!r} (columns:"
                             f" {', '.join(names)})")
        if fmt.setpoint is not None:
            si = find(fmt.setpoint, sp_pos)
            if si is None:
                raise InputError(f"the stream has no setpoint column {fmt.setpoint!r}")
        else:
            si = names.index("setpoint") if "setpoint" in names else (
                sp_pos if headerless else None)
        used = {i for i in (ti, fi, si) if i is not None}
        self._extra = [(name, i) for i, name in enumerate(names) if i not in used]
        return ti, fi, si

    # -- decoding -----------------------------------------------------------------
    def _decode(self, block: bytes) -> list[SampleChunk]:
        replay = getattr(self, "_replay", None)
        if replay:
            self._replay = []
            block = b"\n".join(replay) + b"\n" + block
        if not block:
            return []
        ncol = len(self.columns)
        if not self._pairs and ncol:
            fast = self._parse_fast(block, ncol)
            if fast is not None:
                return self._emit(fast)
        out: list[SampleChunk] = []
        rows: list[list[float]] = []
        for line in block.split(b"\n"):
            if line.startswith(b"# segment"):  # a restart marked by the recorder
                out += self._emit(np.array(rows, dtype=float).reshape(-1, ncol))
                rows = []
                self.timebase.new_segment()
                continue
            note = self._note(line)
            if note is not None:
                out += self._emit(np.array(rows, dtype=float).reshape(-1, ncol))
                rows = []
                for name, value in note:
                    self._stamp_note(name, value)
                continue
            row = self._parse_line(line, ncol)
            if row is not None:
                rows.append(row)
        return out + self._emit(np.array(rows, dtype=float).reshape(-1, ncol))

    def _parse_fast(self, block: bytes, ncol: int) -> NDArray[np.float64] | None:
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
        line = line.strip()
        if not line or line == self._header_line:
            return None
        if len(line) > self.fmt.max_line:
            self.counters.bad["overlong line"] += 1
            return None
        if self._pairs:
            found = {k.decode(): float(v) for k, v in _PAIR.findall(line)}
            if found and set(found) >= {self.columns[i] for i in self._role_indices()}:
                return [found.get(n, np.nan) for n in self.columns]
            return self._not_data(line)
        cells = _split(line, self._delim or b",")
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
        if text.startswith(NOTE_PREFIX):  # a recording replayed: the time is re-stamped
            text = text[len(NOTE_PREFIX):].strip().partition(" ")[2]
        elif text.startswith("#"):
            return None
        pairs = parse_notes(text)
        if pairs is None or (self._pairs and any(name in self.columns for name, _ in pairs)):
            return None  # a damaged data line of a name=value stream is not a note
        return pairs

    def _stamp_note(self, name: str, value: str) -> None:
        self.counters.notes += 1
        if self._last_t is None:
            self._unstamped.append((name, value))
        else:
            self._notes.append(Note(self._last_t, name, value))

    def _role_indices(self) -> list[int]:
        assert self._roles is not None
        return [i for i in self._roles if i is not None]

    def _not_data(self, line: bytes) -> None:
        try:
            text = line.decode("utf-8")
        except UnicodeDecodeError:
            self.counters.bad["garbage"] += 1
            return None
        printable = sum(ch.isprintable() for ch in text)
        if printable < 0.9 * len(text) or not re.search(r"[A-Za-z]{2}", text):
            self.counters.bad["garbage"] += 1
            return None
        self.counters.log_lines += 1
        self.logs.append(text)
        return None

    def _emit(self, data: NDArray[np.float64]) -> list[SampleChunk]:
        if data.shape[0] == 0:
            return []
        ti, fi, si = self._roles  # type: ignore[misc]
        roles = [i for i in (ti, fi, si) if i is not None]
        finite = np.isfinite(data[:, roles]).all(axis=1)
        if not finite.all():
            self.counters.bad["nan"] += int((~finite).sum())
            data = data[finite]
        if data.shape[0] == 0:
            return []
        stamped = self.timebase.stamp(data[:, ti] if ti is not None else None, data.shape[0])
        data = data[stamped.keep]
        if stamped.t.size:
            if self._unstamped:
                first = float(stamped.t[0])
                self._notes += [Note(first, n, v) for n, v in self._unstamped]
                self._unstamped = []
            self._last_t = float(stamped.t[-1])
        self.counters.samples += data.shape[0]
        bounds = [0, *stamped.segment_starts, data.shape[0]]
        first_segment = self.timebase.segment - len(stamped.segment_starts)
        out = []
        for k in range(len(bounds) - 1):
            a, b = bounds[k], bounds[k + 1]
            if a == b:
                continue
            out.append(SampleChunk(
                t=stamped.t[a:b], feedback=np.ascontiguousarray(data[a:b, fi]),
                setpoint=np.ascontiguousarray(data[a:b, si]) if si is not None else None,
                extras={n: np.ascontiguousarray(data[a:b, i]) for n, i in self._extra},
                segment=first_segment + k))
        return out


def describe(fmt: TextDecoder) -> str:
    """One line for a recording's metadata: how the decoder reads the stream."""
    if not fmt.ready:
        return "text, format not yet detected"
    kind = "name=value pairs" if fmt._pairs else f"delimiter {fmt._delim!r}"
    return f"text, {kind}, columns {','.join(fmt.columns)}"


