"""What a text line is: data, ``name=value`` pairs, a comment, garbage; and cutting a text
column out of a block of CSV lines.

Every function here costs time linear in the length of its input, however hostile the
line: they use only bytes methods that pass over the text once (``split``, ``partition``,
``replace``, ``translate``, ``float``) and Python loops over the pieces those give, never
a regular expression that could backtrack (``tests/test_faults.py`` counts the work on
long adversarial lines). Shared by the text decoder and the recording reader.
"""

from __future__ import annotations

import numpy as np

from livestep.decode.numparse import is_number

__all__ = ["COMMENT", "COMMENT_START", "TEXT_START", "cut_column", "cut_column_lines",
           "cut_comments", "drop_long_lines", "find_pairs", "is_comment", "is_garbage",
           "is_name", "looks_like_data", "numeric_cells", "split_off_lines"]

COMMENT = b"#"
_SEPARATORS = bytes.maketrans(b",;\t", b"   ")
_PAIR_SEP = bytes.maketrans(b":,;\t", b"=   ")
_NAME_REST = bytes.maketrans(b".", b"_")
_NOT_NUMBER = b"_"  # float() reads "1_000"; a stream value never looks like that
_MAX_NUMBER = 64  # characters; a longer cell is not a value a controller sends


def is_comment(line: bytes) -> bool:
    """Whether the line is a ``#`` comment (a recording's metadata, state, note or segment
    line, or a firmware's commented log line)."""
    return line.lstrip()[:1] == COMMENT


def is_name(cell: bytes) -> bool:
    """An ASCII name: a letter or ``_``, then letters, digits, ``_`` or ``.``."""
    if not cell[:1].isalpha() and cell[:1] != b"_":
        return False
    rest = cell.translate(_NAME_REST).replace(b"_", b"a")
    return rest.isascii() and rest.isalnum()


def _is_value(cell: bytes) -> bool:
    return len(cell) <= _MAX_NUMBER and _NOT_NUMBER not in cell and is_number(cell)


def find_pairs(line: bytes) -> list[tuple[bytes, bytes]]:
    """The ``name=value`` (or ``name:value``) pairs of a line whose value is a number, in
    order: ``t=1 sp=2``, ``t:1, sp:2``, ``kp = 2.5`` (spaces around the sign allowed)."""
    parts = line.translate(_PAIR_SEP).split(b"=")
    pairs = []
    for left, right in zip(parts[:-1], parts[1:], strict=True):
        words_left = left.rsplit(None, 1)
        if not words_left:
            continue
        name = words_left[-1]
        words_right = right.split(None, 1)
        if words_right and is_name(name) and _is_value(words_right[0]):
            pairs.append((name, words_right[0]))
    return pairs


def numeric_cells(line: bytes) -> bool:
    """Whether the line is one or more numbers separated by commas, semicolons, tabs or
    spaces."""
    cells = line.translate(_SEPARATORS).split()
    return bool(cells) and all(_is_value(c) for c in cells)


def looks_like_data(line: bytes) -> bool:
    """A data line of some text format: numbers only, or at least two numeric pairs."""
    return numeric_cells(line) or len(find_pairs(line)) >= 2


def is_garbage(text: str) -> bool:
    """Not even a log line: under 90 % printable characters, or no two ASCII letters in a
    row."""
    printable = sum(ch.isprintable() for ch in text)
    if not text or printable < 0.9 * len(text):
        return True
    run = 0
    for ch in text:
        run = run + 1 if ch.isascii() and ch.isalpha() else 0
        if run == 2:
            return False
    return True


def drop_long_lines(block: bytes, max_line: int) -> tuple[bytes, int]:
    """``block`` (whole lines, each ending in a newline) without the lines longer than
    ``max_line`` bytes (newline not counted), and how many were dropped."""
    if len(block) <= max_line + 1:
        return block, 0
    b = np.frombuffer(block, dtype=np.uint8)
    ends = np.flatnonzero(b == 10)
    starts = np.concatenate(([0], ends[:-1] + 1))
    long = (ends - starts) > max_line
    if not long.any():
        return block, 0
    keep = np.ones(b.size, dtype=bool)
    for a, e in zip(starts[long].tolist(), ends[long].tolist(), strict=True):
        keep[a:e + 1] = False
    return b[keep].tobytes(), int(long.sum())


def _first_bytes(chars: bytes) -> np.ndarray:
    table = np.zeros(256, dtype=bool)
    table[np.frombuffer(chars, dtype=np.uint8)] = True
    return table


#: Lines that start with ``#`` (a recording's comment and note lines).
COMMENT_START = _first_bytes(COMMENT)
#: Lines that start with ``#`` or an ASCII letter: never a data line of a delimited stream
#: (a comment, a ``name=value`` note, a log line, the header again; "nan" is checked).
TEXT_START = _first_bytes(COMMENT + bytes(range(65, 91)) + bytes(range(97, 123)))


def split_off_lines(block: bytes, first: np.ndarray) -> tuple[bytes, list[tuple[int, bytes]]]:
    """Cut the lines whose first byte is marked in ``first`` (a 256-entry table) out of
    ``block`` (whole lines, each ending in a newline): (the rest, in one piece, and each line
    cut, without its newline, with the number of lines of the rest before it). So a block
    of data with a comment or a note every thousand lines is still parsed in one pass;
    the caller handles the lines cut in their place (by that count)."""
    b = np.frombuffer(block, dtype=np.uint8)
    ends = np.flatnonzero(b == 10)
    starts = np.empty_like(ends)
    starts[:1] = 0
    starts[1:] = ends[:-1] + 1
    marked = np.flatnonzero(first[b[starts[starts < b.size]]])
    if marked.size == 0:
        return block, []
    pieces, cut, at = [], [], 0
    for n_before, k in enumerate(marked.tolist()):
        a, e = int(starts[k]), int(ends[k])
        pieces.append(block[at:a])
        cut.append((k - n_before, block[a:e]))
        at = e + 1
    pieces.append(block[at:])
    return b"".join(pieces), cut


def cut_comments(block: bytes) -> tuple[bytes, list[bytes]]:
    """The block without its ``#`` lines, and those lines (without their newlines): what
    :func:`split_off_lines` cuts with :data:`COMMENT_START`, found by searching for ``#``
    (a few comment lines in a large block cost much less than looking at the first byte
    of every line) and without the count of lines before each."""
    spans = []
    k = block.find(COMMENT)
    while k >= 0:
        if k == 0 or block[k - 1] == 10:  # at a line's start
            e = block.index(b"\n", k)
            spans.append((k, e))
            k = block.find(COMMENT, e + 1)
        else:
            k = block.find(COMMENT, k + 1)
    if not spans:
        return block, []
    view, at, pieces = memoryview(block), 0, []  # the rest joined once: one copy
    for a, e in spans:
        pieces.append(view[at:a])
        at = e + 1
    pieces.append(view[at:])
    return b"".join(pieces), [block[a:e] for a, e in spans]


def cut_column(block: bytes, index: int, ncol: int,
               first_line: int) -> tuple[bytes, list[tuple[int, str]]]:
    """The block without column ``index`` of ``ncol`` (comment lines, and lines that do
    not have the column, left as they are), and the non-empty cells cut, with their line
    numbers (``first_line`` is the block's first). Vectorised when every line of the block
    has ``ncol`` cells."""
    b = np.frombuffer(block, dtype=np.uint8)
    ends = np.flatnonzero(b == ord("\n"))
    commas = np.flatnonzero(b == ord(","))
    if ncol < 2 or commas.size != ends.size * (ncol - 1) or b"#" in block:
        return cut_column_lines(block, index, first_line)
    at = commas.reshape(ends.size, ncol - 1)
    starts = np.concatenate(([0], ends[:-1] + 1))
    if not (np.all(at[:, 0] >= starts) and np.all(at[:, -1] < ends)):
        return cut_column_lines(block, index, first_line)  # rows of different lengths
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


def cut_column_lines(block: bytes, index: int,
                     first_line: int) -> tuple[bytes, list[tuple[int, str]]]:
    """:func:`cut_column` line by line, for blocks with comment or short lines."""
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
