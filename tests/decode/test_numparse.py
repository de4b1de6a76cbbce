"""The reader's plain-decimal fast path: same values as the general parsers, bit for bit.

References: Python's ``float()`` (correctly rounded decimal to double conversion) and
the reader itself with the fast path switched off.
"""

from __future__ import annotations

import tempfile
from pathlib import Path

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

import livestep.decode.numparse as numparse
import livestep.sources.recording as recording
from livestep.errors import InputError

DIGITS = "0123456789"


@st.composite
def plain_decimal(draw: st.DrawFn) -> str:
    """A cell the fast path takes: optional "-", 1..15 digits, at most one "."."""
    digits = draw(st.text(DIGITS, min_size=1, max_size=15))
    dot = draw(st.none() | st.integers(0, len(digits)))
    text = digits if dot is None else digits[:dot] + "." + digits[dot:]
    return ("-" if draw(st.booleans()) else "") + text


UNUSUAL = ["", ".", "-", "-.", "1.2.3", "1-2", "--1", "+1", "1e3", "1E-3", "nan", "inf",
           " 1.5", "1.5 ", "1234567890123456", "0.1234567890123456", "x", "0x10"]


def _values(block: bytes, ncol: int) -> np.ndarray | None:
    return numparse._plain_decimals(block, block.count(b"\n"), ncol)


@given(st.lists(plain_decimal(), min_size=3, max_size=90).map(lambda c: c[: len(c) // 3 * 3]))
def test_plain_cells_are_the_doubles_float_gives(cells):
    block = "".join(",".join(cells[i:i + 3]) + "\n" for i in range(0, len(cells), 3)).encode()
    got = _values(block, 3)
    assert got is not None
    want = np.array([float(c) for c in cells]).reshape(-1, 3)
    assert np.array_equal(got.view(np.int64), want.view(np.int64))  # bits, so -0.0 too


def test_edge_cells():
    cells = ["-0.000", "0", "-0", "007.50", ".5", "5.", "-.5", "999999999999999",
             "0.00000000000001", "-123456789.01234", "3600.000000", "1"]
    block = ("\n".join(",".join(cells[i:i + 3]) for i in range(0, 12, 3)) + "\n").encode()
    got = _values(block, 3).ravel()
    assert np.array_equal(got.view(np.int64), np.array([float(c) for c in cells]).view(np.int64))


@pytest.mark.parametrize("cell", UNUSUAL)
def test_anything_else_is_left_to_the_general_parsers(cell):
    assert _values(f"1.0,2.0,3.0\n4.0,{cell},6.0\n".encode(), 3) is None


def test_rows_of_the_wrong_length_are_left_to_the_general_parsers():
    assert _values(b"1,2,3,4\n5,6\n", 3) is None


def _read(path: Path, fast: bool, monkeypatch: pytest.MonkeyPatch):
    with monkeypatch.context() as m:
        m.setattr(recording, "_BLOCK_BYTES", 97)  # many blocks, cut anywhere
        if not fast:
            m.setattr(numparse, "_plain_decimals", lambda *args: None)
        try:
            reader = recording.RecordingReader(path)
            chunks = [(c.t.tobytes(), c.setpoint.tobytes(), c.feedback.tobytes())
                      for c in reader]
        except InputError as exc:
            return "error", str(exc)
        except Exception as exc:  # compare crashes too: the fast path must not change them
            return "crash", type(exc).__name__
        return chunks, vars(reader.stats)


row_cells = st.one_of(plain_decimal(), plain_decimal(), plain_decimal(), st.sampled_from(UNUSUAL))


@st.composite
def recording_text(draw: st.DrawFn) -> str:
    lines = ["# source: invented test rows", "t,setpoint,feedback"]
    for k in range(draw(st.integers(1, 40))):
        kind = draw(st.sampled_from(["row"] * 8 + ["blank", "comment", "short", "long"]))
        t = f"{0.001 * (k + 1):.{draw(st.sampled_from([3, 6]))}f}"
        cells = [t, draw(row_cells), draw(row_cells)]
        if kind == "blank":
            lines.append("")
        elif kind == "comment":
            lines.append("# note")
        else:
            lines.append(",".join(cells[:2] if kind == "short" else
                                  cells + ["1"] if kind == "long" else cells))
    return "\n".join(lines) + ("\n" if draw(st.booleans()) else "")


@settings(max_examples=200, deadline=None)
@given(recording_text())
def test_reader_gives_the_same_with_and_without_the_fast_path(text):
    with tempfile.TemporaryDirectory() as tmp, pytest.MonkeyPatch.context() as mp:
        path = Path(tmp) / "a.csv"
        path.write_text(text)
        assert _read(path, True, mp) == _read(path, False, mp)


def test_a_blank_cell_is_refused_not_read_as_minus_one():
    # Python's float() refuses an empty or blank cell; numpy's text parser read it as -1.0
    # (found by the split fuzzer: "9000,\t,0.160" gave a setpoint of -1 in one read split).
    for cell in ("", " ", "\t", " \t ", "\x0b", "\x0c"):
        with pytest.raises(ValueError):
            float(cell)
        assert numparse.parse_block(f"1,{cell},2\n3,4,5\n".encode(), 2, 3) is None
    assert numparse.parse_block(b"1, 2,3\n", 1, 3).tolist() == [[1.0, 2.0, 3.0]]


# -- every path of parse_block against float() ------------------------------------------
# Reference: Python's float() (correctly rounded); a block any cell of which float() refuses
# (or a row of the wrong length) must give None, for the caller's line-by-line path.
ANY_PLAIN = st.text("0123456789.-", min_size=0, max_size=20)  # valid or not


def _want(cells: list[str], ncol: int) -> np.ndarray | None:
    try:
        return np.array([float(c) for c in cells]).reshape(-1, ncol)
    except ValueError:
        return None


@pytest.mark.parametrize("path", ["cell by cell", "pandas", "vectorised"])
@settings(max_examples=150, deadline=None)
@given(cells=st.lists(plain_decimal() | ANY_PLAIN, min_size=3, max_size=60))
def test_each_path_reads_cells_as_float_does(path, cells):
    cells = cells[: len(cells) // 3 * 3]
    if not cells:
        return
    block = "".join(",".join(cells[i:i + 3]) + "\n" for i in range(0, len(cells), 3)).encode()
    few, library = {"cell by cell": (10**6, 10**6), "pandas": (0, 1),
                    "vectorised": (0, 10**6)}[path]
    with pytest.MonkeyPatch.context() as mp:
        mp.setattr(numparse, "_FEW_LINES", few)
        mp.setattr(numparse, "_LIBRARY_LINES", library)
        got = numparse.parse_block(block, block.count(b"\n"), 3, library=True)
    want = _want(cells, 3)
    if want is None:
        assert got is None
    else:
        assert got is not None and np.array_equal(got.view(np.int64), want.view(np.int64))


@pytest.mark.parametrize("few, library", [(10**6, 10**6), (0, 1)])
def test_rows_of_the_wrong_length_are_refused_by_every_path(few, library):
    # Same comma count as three rows of three cells, but one short row and one long.
    with pytest.MonkeyPatch.context() as mp:
        mp.setattr(numparse, "_FEW_LINES", few)
        mp.setattr(numparse, "_LIBRARY_LINES", library)
        assert numparse.parse_block(b"1,2\n3,4,5\n6,7,8,9\n", 3, 3, library=True) is None
        assert numparse.parse_block(b"1,2,3\n4,5,6\n", 2, 3,
                                    library=True).tolist() == [[1, 2, 3], [4, 5, 6]]


def test_a_large_plain_block_takes_the_library_path_and_keeps_every_bit():
    rng = np.random.default_rng(3)
    values = np.round(rng.normal(0, 1e4, (numparse._LIBRARY_LINES + 7, 3)), 6)
    cells = [[f"{v:.6f}" for v in row] for row in values]
    block = "".join(",".join(r) + "\n" for r in cells).encode()
    with pytest.MonkeyPatch.context() as mp:  # the own parser must not be reached
        mp.setattr(numparse, "_plain_decimals", lambda *a: pytest.fail("own parser used"))
        got = numparse.parse_block(block, len(cells), 3, library=True)
    want = np.array([[float(c) for c in r] for r in cells])
    assert got is not None and np.array_equal(got.view(np.int64), want.view(np.int64))


def test_the_live_decoder_never_imports_pandas():
    # Importing pandas takes about half a second: a live session must not stall on it when
    # a large read arrives (only the recording reader hands blocks to pandas).
    import subprocess
    import sys

    code = ("import sys\n"
            "from livestep.decode.text import TextDecoder\n"
            "from livestep.decode.timebase import ClockSettings\n"
            "rows = b''.join(b'%d,1.5,2.25\\n' % (1000 * k) for k in range(20000))\n"
            "d = TextDecoder(clock=ClockSettings(unit='us'))\n"
            "n = sum(len(c) for c in d.feed(b't,setpoint,feedback\\n' + rows))\n"
            "print(n, 'pandas' in sys.modules)")
    out = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True,
                         check=True).stdout.split()
    assert out == ["20000", "False"]
