"""Fast, exact parsing of blocks of comma-separated numeric lines (bytes in, a 2-D array out).

Shared by the recording reader and the text stream decoder. Every path gives the double
Python's ``float()`` gives for the cell's text, bit for bit:

- a few lines (a small serial read): ``float()`` on each cell, the cheapest per call;
- a large block of plain decimals (digits, ``.``, ``-``) of a recording: pandas' C CSV parser, about
  four times our own vectorised parser on this machine (``tools/bench_decode.py``);
- otherwise our vectorised plain-decimal parser, then numpy's general text parser
  (exponents, nan, signs);

and a block that none of them can read whole returns ``None`` for the caller's
line-by-line path.
"""

from __future__ import annotations

import io
import warnings
from itertools import repeat

import numpy as np

__all__ = ["is_number", "parse_block"]


def is_number(cell: bytes | str) -> bool:
    """Whether ``float()`` reads the cell (nan and inf included)."""
    try:
        float(cell)
    except ValueError:
        return False
    return True


def parse_block(block: bytes, nlines: int, ncol: int, *,
                library: bool = False) -> np.ndarray | None:
    """Values of ``nlines`` complete lines of ``ncol`` comma-separated numbers each (every
    line ending in a newline, no ``\r``), shape (nlines, ncol); ``None`` when any line is
    not exactly that (the caller then goes line by line). ``library``: large blocks may go
    to pandas (the recording reader; a live decoder does not, so a session never stalls
    importing it)."""
    if nlines == 0:  # (a blank line fails every path's row count below)
        return None
    if nlines <= _FEW_LINES:
        return _cell_by_cell(block, nlines, ncol)
    if library and nlines >= _LIBRARY_LINES and not block.translate(None, _PLAIN_BYTES):
        return _library(block, nlines, ncol)
    return _vectorised(block, nlines, ncol)


def _vectorised(block: bytes, nlines: int, ncol: int) -> np.ndarray | None:
    """Our own parsers: plain decimals exactly, then numpy's general text parser."""
    if block.count(b",") != nlines * (ncol - 1):
        return None
    data = _plain_decimals(block, nlines, ncol)
    if data is not None or not _rows_aligned(block, ncol) or _blank_cell(block):
        return data
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", DeprecationWarning)
        try:
            flat = np.fromstring(block.replace(b"\n", b","), sep=",")
        except ValueError:  # a cell that is not a number
            return None
    return flat.reshape(nlines, ncol) if flat.size == nlines * ncol else None


#: Lines up to which ``float()`` per cell beats the vectorised parsers (their fixed cost is
#: some tens of microseconds a call), and from which pandas' parser beats ours (its fixed
#: cost is about 0.3 ms a call). Measured with ``tools/bench_decode.py --section small``.
_FEW_LINES = 64
_LIBRARY_LINES = 4096


def _cell_by_cell(block: bytes, nlines: int, ncol: int) -> np.ndarray | None:
    """``float()`` of every cell of a few lines; ``None`` when a line has the wrong number
    of cells or a cell is not a number (``1_000``, which ``float()`` reads, included)."""
    if b"_" in block:
        return None
    lines = block[:-1].split(b"\n")
    if set(map(len, map(bytes.split, lines, repeat(b",", nlines)))) != {ncol}:
        return None
    try:
        values = list(map(float, b",".join(lines).split(b",")))
    except ValueError:
        return None
    return np.array(values, dtype=np.float64).reshape(nlines, ncol)


def _library(block: bytes, nlines: int, ncol: int) -> np.ndarray | None:
    """pandas' C parser on a block of plain-decimal lines (``None`` if it refuses a cell or
    a row). It reads such cells as ``float()`` does; the tests check it bit for bit
    (``tests/decode/test_numparse.py``). Plain text has no ``nan``, so a NaN can only be a
    missing cell. pandas is imported here, on the first large block of a recording."""
    import pandas as pd

    try:
        frame = pd.read_csv(io.BytesIO(block), header=None, names=range(ncol),
                            dtype=np.float64, engine="c", na_filter=False,
                            low_memory=False)
    except (ValueError, pd.errors.ParserError):  # a cell float() refuses, a row too long
        return None
    data = frame.to_numpy(dtype=np.float64)
    if data.shape != (nlines, ncol) or np.isnan(data).any():  # a row too short: NaN-filled
        return None
    return data


def _blank_cell(block: bytes) -> bool:
    """Whether a cell is empty or only spaces (numpy's text parser would read such a cell
    as -1 instead of refusing it)."""
    b = block.translate(None, b" \t\x0b\x0c\r")  # whitespace bytes.strip() removes
    return b[:1] in (b",", b"\n") or b",," in b or b",\n" in b or b"\n," in b


_PLAIN_BYTES = b"0123456789.-,\n"
_TO_INTEGERS = bytes.maketrans(b"\n", b",")  # with "." deleted: one integer per cell
_MAX_DIGITS = 15  # an integer below 10**15 < 2**53 is an exact double
_POW10 = 10.0 ** np.arange(_MAX_DIGITS + 1)


def _plain_decimals(block: bytes, nlines: int, ncol: int) -> np.ndarray | None:
    """The (nlines, ncol) values of a block of rows whose every cell is a plain decimal
    (``-`` if negative, digits with at most one ``.``, at most 15 digits in all), or
    ``None`` when any cell is anything else (exponents, nan, spaces, ``+``, empty cells,
    rows of the wrong length), for the general parsers to handle.

    Each value is its digits read as an integer (exact in a double) divided by a power of
    ten (exact too): one correctly rounded division, so the same double as ``float()``
    and ``np.fromstring`` give for that text, bit for bit, ``-0.0`` included.
    """
    if block.translate(None, _PLAIN_BYTES):
        return None
    b = np.frombuffer(block, dtype=np.uint8)
    # Cell ends ("," and newline) and decimal points, in order: a "." belongs to the cell
    # the next end closes, and two in a row would be two in one cell.
    marks = np.flatnonzero((b == ord(",")) | (b == ord("\n")) | (b == ord(".")))
    is_dot = b[marks] == ord(".")
    ends = marks[~is_dot]
    if ends.size != nlines * ncol or np.any(b[ends[ncol - 1::ncol]] != ord("\n")):
        return None  # rows of the wrong length
    at_dot = np.flatnonzero(is_dot)
    if np.any(np.diff(at_dot) == 1):
        return None  # two "." in a cell
    cell_of_dot = at_dot - np.arange(at_dot.size)
    starts = np.concatenate(([0], ends[:-1] + 1))
    negative = b[starts] == ord("-")
    if block.count(b"-") != np.count_nonzero(negative):
        return None  # a "-" that does not lead its cell
    n_frac = np.zeros(ends.size, dtype=np.intp)
    n_frac[cell_of_dot] = ends[cell_of_dot] - marks[at_dot] - 1
    n_digits = ends - starts - negative
    n_digits[cell_of_dot] -= 1
    if n_digits.min() < 1 or n_digits.max() > _MAX_DIGITS:
        return None
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", DeprecationWarning)
        try:
            digits = np.fromstring(block.translate(_TO_INTEGERS, b"."), dtype=np.int64,
                                   sep=",")
        except ValueError:
            return None
    if digits.size != ends.size:
        return None
    values = np.abs(digits).astype(np.float64) / _POW10[n_frac]
    np.negative(values, out=values, where=negative)
    return values.reshape(nlines, ncol)


def _rows_aligned(block: bytes, ncol: int) -> bool:
    """Every line of the block has exactly ``ncol - 1`` commas."""
    b = np.frombuffer(block, dtype=np.uint8)
    commas = np.cumsum(b == ord(","))
    at_newline = commas[b == ord("\n")]
    return bool(np.all(np.diff(at_newline, prepend=0) == ncol - 1))
