"""How a text stream lays out its samples, decided from its first lines: pairs or a
delimiter, the header (if any), the column roles, a ``note`` column.

A pure function of the lines (:func:`detect_layout`), used by
:class:`~livestep.decode.text.TextDecoder` once it holds eight data-looking lines (or
200 candidate lines). ``#`` comment lines never count. The header is the line just
before the first data line (notes aside), when its cells are all names; a
space-separated candidate must also name one of the asked-for columns, else it is
prose (a boot banner such as ``Booting motor drive``). :attr:`Layout.decision` says
what was decided, in words.
"""

from __future__ import annotations

import re
from dataclasses import dataclass, field

from livestep.decode.lines import find_pairs, is_comment, looks_like_data
from livestep.decode.numparse import is_number
from livestep.errors import InputError
from livestep.steps.tags import parse_notes

__all__ = ["Layout", "NOTE_COLUMN", "TextFormat", "detect_layout", "is_data_line", "note_header",
           "split"]

NOTE_COLUMN = b"note"
_DELIM_NAMES = {b",": "comma", b"\t": "tab", b";": "semicolon", b" ": "space"}
_HEADER_CELL = re.compile(rb"[A-Za-z_][\w .\[\]/%-]*")  # a class, then a class repeated


@dataclass(frozen=True, kw_only=True)
class TextFormat:
    """How to read the lines. ``delimiter``: one of , \\t ; or a space, ``None`` to detect;
    ``pairs``: ``True`` for name=value lines, ``None`` to detect; ``names``: column names
    when the stream has no header; ``time``, ``setpoint``, ``feedback``: column roles by
    name or 1-based position (``time=None``: no device time, stamp from ``clock.host_rate``;
    ``setpoint=None``: use a column named ``setpoint`` if any); ``max_line``: bytes."""

    delimiter: str | None = None
    pairs: bool | None = None
    names: tuple[str, ...] | None = None
    time: str | None = "t"
    setpoint: str | None = None
    feedback: str = "feedback"
    max_line: int = 4096


@dataclass(frozen=True)
class Layout:
    """``pairs``: name=value lines; else ``delim`` separates the cells. ``columns``: the
    numeric columns' names; ``roles``: indices of time, feedback and setpoint (``None``:
    absent); ``extra``: the other columns (name, index); ``header_line``: the header as
    read (skipped when met again); ``note_col``: index of a ``note`` column among
    ``ncells`` cells per line, cut before the numbers are read."""

    pairs: bool
    delim: bytes | None
    columns: list[str]
    roles: tuple[int | None, int, int | None]
    extra: list[tuple[str, int]] = field(default_factory=list)
    header_line: bytes | None = None
    note_col: int | None = None
    ncells: int = 0
    decision: str = ""


def split(line: bytes, delim: bytes) -> list[bytes]:
    """The cells of a line (spaces: any run of whitespace)."""
    if delim == b" ":
        return line.split()
    return [c.strip() for c in line.split(delim)]


def note_header(line: bytes, fmt: TextFormat) -> tuple[int, int] | None:
    """``(index, cells)`` when the line is a comma-separated header with a ``note`` column
    (a recording's), else ``None``."""
    if fmt.delimiter not in (None, ","):
        return None
    cells = [c.strip() for c in line.split(b",")]
    if (len(cells) >= 3 and NOTE_COLUMN in cells
            and all(_HEADER_CELL.fullmatch(c) for c in cells)):
        return cells.index(NOTE_COLUMN), len(cells)
    return None


def is_data_line(line: bytes, note: tuple[int, int] | None) -> bool:
    """A data line: numbers (with a note column: numbers besides the note cell) or at
    least two numeric pairs."""
    if note is not None:
        k, n = note
        cells = line.split(b",")
        if len(cells) == n:
            del cells[k]
            return all(is_number(c) for c in cells)
    return looks_like_data(line)


def _is_note(line: bytes) -> bool:
    return b"=" in line and parse_notes(line.decode("utf-8", "replace")) is not None


def detect_layout(lines: list[bytes], fmt: TextFormat,
                  note: tuple[int, int] | None) -> Layout | None:
    """The layout of a stream from its first lines (comments may be among them); ``None``
    when they hold no data to go by; :class:`InputError` when a column asked for is not
    there."""
    data = [ln.strip() for ln in lines if not is_comment(ln)]
    pairs = fmt.pairs
    if pairs is None:
        numeric = sum(is_data_line(ln, note) for ln in data)
        pairs = note is None and (sum(len(find_pairs(ln)) >= 2 for ln in data)
                                  >= max(1, numeric // 2))
    names: list[str] = []
    headerless, how, delim = False, "", None
    header_line, note_col, ncells = None, None, 0
    if pairs:
        first = next((ln for ln in data if len(find_pairs(ln)) >= 2), None)
        if first is not None:
            names = [k.decode() for k, _ in find_pairs(first)]
            how = "name=value pairs"
    else:
        if note is not None:
            delim = b","
        else:
            delim = (fmt.delimiter.encode() if fmt.delimiter is not None
                     else _detect_delimiter(data))
        widths = [len(cells) - (note is not None and len(cells) == note[1]) for ln in data
                  if is_data_line(ln, note) and (cells := split(ln, delim))]
        ncol = max(set(widths), key=widths.count) if widths else 0
        if ncol:
            found = _find_header(data, delim, ncol, fmt, note)
            kind = f"{_DELIM_NAMES[delim]}-separated"
            if found is not None:
                header_line, note_col = found[1], found[2]
                ncells = ncol + (note_col is not None)
            if fmt.names is not None:
                names, how = list(fmt.names), f"{kind}, columns named by option"
            elif found is not None:
                names, how = found[0], f"{kind} with a header"
                if found[2] is not None:
                    how += " and a note column"
            else:
                names, headerless = [f"col{i + 1}" for i in range(ncol)], True
                how = f"{ncol} {kind} columns without a header, taken by position"
    if len(names) < (1 if fmt.time is None else 2):
        return None
    roles, extra = _resolve_roles(names, headerless, fmt)
    banner = 0
    for ln in data:
        if is_data_line(ln, note):
            break
        banner += ln != header_line and not _is_note(ln)
    said = ", ".join(f"{role} {names[i]}" for role, i in
                     zip(("time", "feedback", "setpoint"), roles, strict=True) if i is not None)
    decision = (f"text lines, {how} ({said})"
                + (f"; {banner} line(s) before the data taken for a banner" if banner else ""))
    return Layout(pairs=bool(pairs), delim=delim, columns=names, roles=roles, extra=extra,
                  header_line=header_line, note_col=note_col, ncells=ncells,
                  decision=decision)


def _find_header(data: list[bytes], delim: bytes, ncol: int, fmt: TextFormat,
                 note: tuple[int, int] | None
                 ) -> tuple[list[str], bytes, int | None] | None:
    """``(names, line, note column)`` of the header: see the module docstring."""
    prev = None
    for ln in data:
        if is_data_line(ln, note):
            break
        if not _is_note(ln):
            prev = ln
    else:
        return None
    if prev is None:
        return None
    cells = split(prev, delim)
    note_col = None
    if note is not None and len(cells) == note[1]:
        note_col = note[0]
        cells = cells[:note_col] + cells[note_col + 1:]
    if len(cells) != ncol or not all(_HEADER_CELL.fullmatch(c) for c in cells):
        return None
    names = [c.decode() for c in cells]
    asked = {fmt.time, fmt.feedback, fmt.setpoint, "setpoint"}
    if delim == b" " and not asked & set(names):
        return None
    return names, prev, note_col


def _detect_delimiter(lines: list[bytes]) -> bytes:
    best, best_score = b",", -1
    for d in (b",", b"\t", b";", b" "):
        widths = [len(cells) for ln in lines
                  if len(cells := split(ln, d)) >= 2 and all(is_number(c) for c in cells)]
        score = max((widths.count(w) for w in set(widths)), default=0)
        if score > best_score:
            best, best_score = d, score
    return best


def _resolve_roles(names: list[str], headerless: bool, fmt: TextFormat
                   ) -> tuple[tuple[int | None, int, int | None], list[tuple[str, int]]]:
    """Column indices of time, feedback and setpoint: by name, by 1-based position, or
    (headerless streams) by the usual order [time,] [setpoint,] feedback; and the others."""
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
    return (ti, fi, si), [(name, i) for i, name in enumerate(names) if i not in used]
