"""The braille plot renderable, without an app: dot coding, placement, joining, layers."""

from __future__ import annotations

import io

import numpy as np
from rich.console import Console

from livestep.tui.plot import HLine, Marker, Plot, Trace, braille_cells

W = 48  # console width: 8 columns of y labels + 40 plot cells (80 dot columns)


def render(plot: Plot, width: int = W) -> tuple[list[str], list]:
    console = Console(width=width, file=io.StringIO(), color_system="truecolor", record=True)
    lines = list(console.render_lines(plot, console.options, pad=False))
    text = ["".join(seg.text for seg in line) for line in lines]
    return text, lines


def test_braille_dot_codes():
    # Unicode braille patterns (U+2800 + bits): dots 1-2-3 down the left column are bits
    # 0-2, dots 4-5-6 down the right column bits 3-5, dot 7 (bottom left) bit 6 and dot 8
    # (bottom right) bit 7 (The Unicode Standard, Braille Patterns block; ISO/TR 11548-1).
    dots = np.zeros((4, 6), dtype=bool)
    dots[0, 0] = True            # dot 1
    dots[3, 3] = True            # dot 8 of the second cell
    dots[:, 4:6] = True          # the whole third cell
    codes = braille_cells(dots)
    assert [chr(0x2800 + c) for c in codes[0]] == ["⠁", "⢀", "⣿"]


def test_a_level_trace_fills_one_dot_row():
    # y = 0 on [-1, 1] with 4 rows (16 dot rows): dot row round(7.5) = 8 (round half to
    # even), the top dot row of the third cell row: dots 1 and 4 in every cell, U+2809.
    t = np.linspace(0.0, 1.0, 500)
    text, _ = render(Plot([Trace(t, np.zeros_like(t))], y_range=(-1, 1), height=5))
    assert len(text) == 5
    assert text[2][8:] == "⠉" * 40
    assert all(set(text[r][8:]) == {" "} for r in (0, 1, 3))
    assert text[0].strip().startswith("1") and text[3].strip().startswith("-1")
    assert text[4].split() == ["0.00", "s", "1.00", "s"]  # one unit on the time axis


def test_a_step_edge_is_joined_and_markers_are_labelled():
    t = np.linspace(0.0, 1.0, 2001)
    y = (t >= 0.5).astype(float)
    plot = Plot([Trace(t, y)], markers=[Marker(0.25, "p")], y_range=(0, 1), height=9)
    text, _ = render(plot)
    col = 8 + 20  # t = 0.5 is dot column 40, cell 20
    assert all(text[r][col] != " " for r in range(8))  # the edge spans every row
    assert text[0][8 + 10] == "p"  # t = 0.25: dot column 20, cell 10
    assert all(text[r][8 + 10] != " " for r in range(1, 8))  # the dotted marker line


def test_samples_in_one_column_show_their_span():
    # 1000 samples of alternating +-1 inside one dot column: the column covers -1..1.
    t = np.linspace(0.0, 0.001, 1000)
    y = np.where(np.arange(1000) % 2, 1.0, -1.0)
    plot = Plot([Trace(t, y)], x_range=(0.0, 1.0), y_range=(-1, 1), height=5)
    text, _ = render(plot)
    assert [text[r][8] for r in range(4)] == ["⡇"] * 4
    assert all(set(text[r][9:]) == {" "} for r in range(4))


def test_the_topmost_layer_styles_a_shared_cell():
    t = np.linspace(0.0, 1.0, 100)
    plot = Plot([Trace(t, np.zeros_like(t), "red"), Trace(t, np.zeros_like(t), "blue")],
                hlines=[HLine(0.5, "green")], y_range=(-1, 1), height=5)
    _, lines = render(plot)
    styles = {str(seg.style) for seg in lines[2] if seg.text.strip() and "⠉" in seg.text}
    assert styles == {"blue"}
    assert any("green" in str(seg.style) for seg in lines[1])  # y = 0.5: dot row 4


def test_nothing_to_show():
    text, _ = render(Plot([], empty="waiting for samples", height=3))
    assert text[0].startswith("waiting for samples") and len(text) == 3


def test_axis_labels_use_one_precision_and_one_unit():
    # y from 0 to 5.4 (span 5.4 plus margins): every label with the same decimals; the time
    # axis from -0.2 s to 1.3 s in seconds at both ends (not "-200 ms" beside "1.30 s")
    t = np.linspace(-0.2, 1.3, 300)
    text, _ = render(Plot([Trace(t, np.where(t > 0, 5.4, 0.0))], height=9))
    labels = [ln[:8].strip() for ln in text[:8] if ln[:8].strip()]
    assert len(labels) == 3
    assert len({lab.partition(".")[2].__len__() for lab in labels}) == 1, labels
    assert text[8].split() == ["-0.20", "s", "1.30", "s"]
    t = np.linspace(-0.05, 0.4, 300)
    text, _ = render(Plot([Trace(t, t)], height=6))
    assert text[5].split() == ["-50", "ms", "400", "ms"]


def test_line_patterns_differ_by_dots_not_only_colour():
    # a dashed level line leaves gaps a dotted one fills differently, and a dashed trace
    # draws fewer columns than a solid one on the same samples
    t = np.linspace(0.0, 1.0, 500)
    z = np.zeros_like(t)
    solid, _ = render(Plot([Trace(t, z)], y_range=(-1, 1), height=5))
    dashed, _ = render(Plot([Trace(t, z, pattern="dashed")], y_range=(-1, 1), height=5))
    dotted, _ = render(Plot([Trace(t, z, pattern="dotted")], y_range=(-1, 1), height=5))
    assert solid[2][8:].count(" ") == 0
    assert 0 < dashed[2][8:].count(" ") < dotted[2][8:].count(" ")
    a, _ = render(Plot([], hlines=[HLine(0.0, pattern="dashed")], x_range=(0, 1),
                       y_range=(-1, 1), height=5))
    b, _ = render(Plot([], hlines=[HLine(0.0, pattern="dotted")], x_range=(0, 1),
                       y_range=(-1, 1), height=5))
    assert a[2][8:] != b[2][8:] and a[2][8:].strip() and b[2][8:].strip()
