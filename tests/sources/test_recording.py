"""Reading recordings: format, options, and bad input."""

from __future__ import annotations

import gzip
from pathlib import Path

import numpy as np
import pytest
from hypothesis import given
from hypothesis import strategies as st

from livestep.errors import InputError
from livestep.sources.recording import ColumnMap, RecordingReader, read_all

GOOD = "# source: bench 3\n# units: mm\nt,setpoint,feedback,current\n" + "".join(
    f"{k * 0.001:.3f},{1.0 if k >= 5 else 0.0},{0.1 * k:.1f},{k}\n" for k in range(10))


def test_reads_metadata_columns_and_extras(write_file):
    reader, chunks = read_all(write_file("a.csv", GOOD))
    assert reader.metadata == {"source": "bench 3", "units": "mm"}
    assert reader.has_setpoint and reader.extra_names == ["current"]
    (c,) = chunks
    assert np.allclose(c.t, np.arange(10) * 0.001)
    assert np.array_equal(c.setpoint, [0.0] * 5 + [1.0] * 5)
    assert np.allclose(c.feedback, np.arange(10) * 0.1)
    assert np.array_equal(c.extras["current"], np.arange(10))
    assert reader.stats.good == 10 and reader.stats.bad == 0


def test_gzip_reads_the_same(tmp_path):
    path = tmp_path / "a.csv.gz"
    with gzip.open(path, "wt") as fh:
        fh.write(GOOD)
    _, chunks = read_all(path)
    assert np.allclose(chunks[0].feedback, np.arange(10) * 0.1)


def test_crlf_and_blank_lines(write_file):
    text = GOOD.replace("\n", "\r\n").replace("0.005,", "\r\n0.005,")
    reader, chunks = read_all(write_file("a.csv", text))
    assert sum(len(c) for c in chunks) == 10 and reader.stats.bad == 0


def test_column_options_and_time_unit(write_file):
    text = "time_ms,cmd,pos\n" + "".join(f"{k},{k // 5},{k * 2}\n" for k in range(10))
    reader, chunks = read_all(write_file("a.csv", text), ColumnMap(
        time="time_ms", setpoint="cmd", feedback="pos", time_unit="ms"))
    assert np.allclose(chunks[0].t, np.arange(10) * 1e-3)
    assert np.array_equal(chunks[0].setpoint, np.arange(10) // 5)
    by_position, _ = read_all(write_file("b.csv", text), ColumnMap(time="1", feedback="3"))
    assert not by_position.has_setpoint  # no column named 'setpoint' and none given


def test_bad_cells_are_skipped_and_counted(write_file):
    lines = GOOD.splitlines(keepends=True)
    lines[6] = "0.003,0.0,oops,3\n"  # data line 7 of the file
    body = "".join(lines) + "".join(f"{k * 0.001:.3f},1.0,1.0,0\n" for k in range(10, 40))
    reader, chunks = read_all(write_file("a.csv", body))
    assert reader.stats.bad == 1 and reader.stats.first_bad_line == 7
    assert sum(len(c) for c in chunks) == 39


def test_bad_extra_cell_keeps_the_row(write_file):
    text = GOOD.replace("0.004,0.0,0.4,4", "0.004,0.0,0.4,")
    reader, chunks = read_all(write_file("a.csv", text))
    assert reader.stats.bad == 0 and np.isnan(chunks[0].extras["current"][4])


@pytest.mark.parametrize(("content", "message"), [
    ("", "empty file"),
    ("t,setpoint,feedback\n", "no valid data rows"),
    ("# only: comments\n", "no header row"),
    ("t\n0\n1\n", "one column"),
    ("1,2,3\n4,5,6\n", "first row is numbers"),
    ("t,setpoint,feedback\n0,0,0\n0.2,0,0\n0.1,0,0\n", "line 4: time goes backwards"),
    ("t,setpoint,feedback\n" + "a,b,c\n" * 20, "20 of 20 data rows are bad"),
    (b"\x00\x01\x02binary\xff\xfe", "binary data"),
    (b"t,set\xffpoint,feedback\n", "not UTF-8"),
    ("x,y,z\n1,2,3\n", "no time column 't'"),
])
def test_bad_input_is_one_clear_error(write_file, content, message):
    path = write_file("bad.csv", content)
    with pytest.raises(InputError) as err:
        read_all(path)
    assert message in str(err.value)
    assert "\n" not in str(err.value)


def test_missing_file():
    with pytest.raises(InputError, match="no such file"):
        RecordingReader("/nonexistent/x.csv")


def test_long_file_reads_in_bounded_blocks(write_file):
    n = 300_000
    t = np.arange(n) * 1e-4
    text = "t,setpoint,feedback\n" + "".join(f"{x:.4f},0,{x:.4f}\n" for x in t)
    chunks = list(RecordingReader(write_file("long.csv", text)))
    assert len(chunks) > 1  # read in several blocks, not at once
    assert np.allclose(np.concatenate([c.t for c in chunks]), t)


def test_block_of_repeated_timestamps_only(write_file):
    text = "t,setpoint,feedback\n0.001,0,0\n0.002,0,0\n0.002,0,0"  # no final newline
    reader, chunks = read_all(write_file("a.csv", text))
    assert sum(len(c) for c in chunks) == 2 and reader.stats.repeated_time == 1


def test_rows_of_wrong_length_are_skipped_not_shifted(write_file):
    rows = [f"{k * 0.001:.3f},0,{k}" for k in range(40)]
    rows[10] = "0.010,0,10,99"  # one field too many ...
    rows[11] = "0.011,0"  # ... and one too few: the comma count of the block still matches
    reader, chunks = read_all(write_file("a.csv", "t,setpoint,feedback\n" + "\n".join(rows)
                                         + "\n"))
    assert reader.stats.bad == 2 and reader.stats.first_bad_line == 12
    fb = np.concatenate([c.feedback for c in chunks])
    assert np.array_equal(fb, [k for k in range(40) if k not in (10, 11)])


def test_notes_from_comment_lines_and_a_note_column(write_file):
    rows = [f"{k * 0.001:.3f},{1.0 if k >= 5 else 0.0},{0.1 * k:.1f},{k}," for k in range(10)]
    rows[0] += "gains=A"
    rows[3] += "operator swapped the belt"
    rows[6] = "0.005,bad,0.6,6,gains=B"  # a skipped row keeps its note (at the row before)
    text = ("# note: 0.0005 load=empty\nt,setpoint,feedback,current,note\n" + rows[0] + "\n"
            + "\n".join(rows[1:5]) + "\n# note: 0.0045 load=full\n" + "\n".join(rows[5:]) + "\n")
    reader, chunks = read_all(write_file("n.csv", text))
    assert reader.extra_names == ["current"] and reader.stats.bad == 1
    assert np.array_equal(np.concatenate([c.extras["current"] for c in chunks]),
                          [0, 1, 2, 3, 4, 5, 7, 8, 9])
    got = sorted((n.t, n.name, n.value) for n in reader.notes)
    assert got == [(0.0, "gains", "A"), (0.0005, "load", "empty"),
                   (0.003, "note", "operator swapped the belt"), (0.0045, "load", "full"),
                   (0.005, "gains", "B")]


def test_note_column_cannot_be_a_role(write_file):
    with pytest.raises(InputError, match="text notes"):
        RecordingReader(write_file("n.csv", "t,note\n0,1\n"), ColumnMap(feedback="note"))


@pytest.mark.parametrize("position", [0, 1, 3])
def test_note_column_anywhere(write_file, position):
    names = ["t", "setpoint", "feedback"]
    names.insert(position, "note")
    lines = []
    for k in range(2000):
        cells = [f"{k * 0.001:.3f}", "1.0" if k >= 1000 else "0.0", f"{0.01 * k:.2f}"]
        cells.insert(position, {10: "gains=A", 1500: " gains = B "}.get(k, ""))
        lines.append(",".join(cells))
    reader, chunks = read_all(write_file("n.csv", ",".join(names) + "\n" + "\n".join(lines)
                                         + "\n"))
    assert reader.stats.bad == 0 and reader.extra_names == []
    assert np.allclose(np.concatenate([c.feedback for c in chunks]), np.arange(2000) * 0.01)
    assert [(n.t, n.name, n.value) for n in reader.notes] == [(0.01, "gains", "A"),
                                                               (1.5, "gains", "B")]


@given(st.lists(st.tuples(st.sampled_from(["", "gains=A", "x", " kp=2 "]),
                          st.booleans()), min_size=1, max_size=30),
       st.integers(0, 3))
def test_vectorised_note_cut_agrees_with_the_line_by_line_one(rows, index):
    from livestep.sources.recording import _cut_column, _cut_column_lines

    lines = []
    for k, (note, short) in enumerate(rows):
        cells = [str(k), "1.5", "-2"]
        cells.insert(index, note)
        lines.append(",".join(cells[:-1] if short and index != 3 else cells))
    block = ("\n".join(lines) + "\n").encode()
    assert _cut_column(block, index, 4, 7) == _cut_column_lines(block, index, 7)


# -- hostile files (issue 15) ----------------------------------------------------------------
def test_a_byte_order_mark_is_not_part_of_the_first_line(write_file):
    reader, chunks = read_all(write_file("bom.csv", b"\xef\xbb\xbf" + GOOD.encode()))
    assert reader.metadata == {"source": "bench 3", "units": "mm"}
    assert sum(len(c) for c in chunks) == 10


def test_a_missing_column_names_the_file(write_file):
    with pytest.raises(InputError, match=r"x\.csv: no time column 't'"):
        read_all(write_file("x.csv", "a,b,c\n1,2,3\n"))


def test_a_header_line_over_64_kb_says_so(write_file):
    with pytest.raises(InputError, match="line 2 is longer than 64 KB"):
        read_all(write_file("long.csv", "# a: b\n" + "t" * 70_000 + ",feedback\n0,1\n"))


def test_a_note_line_is_never_metadata(write_file):
    text = "# note: 0 mode=a=b\n# note: garbage\n# note: 0.5 mode=c\n" + GOOD
    reader, _ = read_all(write_file("n.csv", text))
    assert "note" not in reader.metadata
    assert [(n.t, n.name, n.value) for n in reader.notes] == [(0.0, "mode", "a=b"),
                                                               (0.5, "mode", "c")]


def test_blank_lines_cost_no_work_per_line(tmp_path):
    from _work import count_work

    def work(n_blank: int) -> int:
        path = tmp_path / f"blank{n_blank}.csv.gz"
        path.write_bytes(gzip.compress(b"\n" * n_blank))  # the issue: 194 KB of gzip, 122 s
        _, w = count_work(lambda: pytest.raises(InputError, RecordingReader, path))
        return w.opcodes

    # Four times the blank lines: the Python work stays the same (skipped by bytes methods)
    assert work(400_000) < work(100_000) + 2000
    path = tmp_path / "gaps.csv"
    path.write_text("t,setpoint,feedback\n" + "0,0,0\n" + "\n" * 300_000 + "0.001,0,1\n")
    _, w = count_work(read_all, path)
    assert w.opcodes < 200_000  # not one Python step per blank line
    assert sum(len(c) for c in read_all(path)[1]) == 2


def test_an_overlong_data_line_is_skipped_without_holding_it(tmp_path):
    import tracemalloc

    from livestep.sources.recording import MAX_LINE

    path = tmp_path / "huge.csv"
    before = "".join(f"{k * 0.001:.3f},0,{k}\n" for k in range(100))
    after = "".join(f"{1 + k * 0.001:.3f},0,{k}\n" for k in range(100))
    path.write_text("t,setpoint,feedback\n" + before + "9" * (20 * MAX_LINE) + "\n" + after)
    tracemalloc.start()
    reader, chunks = read_all(path)
    peak = tracemalloc.get_traced_memory()[1]
    tracemalloc.stop()
    assert reader.stats.reasons.get("overlong line") == 1
    assert sum(len(c) for c in chunks) == 200
    assert peak < 6 * MAX_LINE + (12 << 20)  # blocks of 4 MB, never the 20 MB line


def test_a_flood_of_notes_before_the_header_stays_small(tmp_path):
    path = tmp_path / "flood.csv"
    path.write_text("# note: 0 gains=A\n" * 200_000 + GOOD)
    reader, _ = read_all(path)
    assert [(n.name, n.value) for n in reader.notes] == [("gains", "A")]


@pytest.mark.parametrize("kind", ["fifo", "dir", "dev"])
def test_only_regular_files_are_read(tmp_path, kind):
    import os

    path = {"fifo": tmp_path / "f.csv", "dir": tmp_path, "dev": Path("/dev/zero")}[kind]
    if kind == "fifo":
        os.mkfifo(path)
    message = {"fifo": "is a FIFO", "dir": "is a directory", "dev": "character device"}[kind]
    with pytest.raises(InputError, match=message):
        RecordingReader(path)  # at once: a FIFO without a writer would block an open()


@pytest.mark.parametrize("rows", [10, 6000])  # a small file; blocks for pandas
def test_line_numbers_count_comment_lines_on_the_fast_path(write_file, rows):
    # Rows that parse in one pass but need their line numbers: a nan and a time going
    # backwards, after note lines; the numbers are the file's own (header on line 2).
    body = [f"{k * 1e-3:.3f},0,{k}" for k in range(rows)]
    body.insert(3, "# note: 0.002 gains=a")
    body.insert(5, "# a comment")
    body[7] = "0.005,0,nan"  # line 2 + 8 = 10
    text = "# source: test\nt,setpoint,feedback\n" + "\n".join(body) + "\n"
    reader, _ = read_all(write_file("n.csv", text))
    assert reader.stats.first_bad_line == 10 and reader.stats.bad == 1
    assert [n.name for n in reader.notes] == ["gains"]
    body.append("0.001,0,1")  # the last line goes back in time
    with pytest.raises(InputError, match=f"line {len(body) + 2}: time goes backwards"):
        read_all(write_file("b.csv", "# source: test\nt,setpoint,feedback\n"
                            + "\n".join(body) + "\n"))
