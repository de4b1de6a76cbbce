"""A braille line plot as a pure rich renderable (no textual): traces, level lines, markers.

Each character cell holds 2 x 4 dots (Unicode braille patterns, U+2800-U+28FF), so a
plot of W x H cells has 2W x 4H dots. A trace is drawn column by column as the span
from the lowest to the highest sample in that dot column, joined to the previous
column, so fast edges and noise stay visible however many samples fall in a column.
A cell takes the style of the topmost layer with a dot in it. Markers are vertical
dotted lines labelled with a letter in the top row, so they read without colour. Traces
and level lines also differ by line pattern (solid, dashed, dotted), not only by colour.
The value axis labels use one number of decimals; the time axis one unit.
"""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass

import numpy as np
from numpy.typing import ArrayLike, NDArray
from rich.console import Console, ConsoleOptions, RenderResult
from rich.segment import Segment
from rich.style import Style

__all__ = ["HLine", "Marker", "Plot", "Trace", "braille_cells"]

# Bit of each dot (row 0..3, column 0..1) in a braille pattern (Unicode, ISO/TR 11548-1).
_BITS = np.array([[0x01, 0x08], [0x02, 0x10], [0x04, 0x20], [0x40, 0x80]], dtype=np.int32)


@dataclass(frozen=True)
class Trace:
    """A line through samples ``t`` (seconds, increasing) and ``y``."""

    t: ArrayLike
    y: ArrayLike
    style: str = ""
    label: str = ""
    pattern: str = "solid"  # solid, dashed or dotted


@dataclass(frozen=True)
class HLine:
    """A horizontal line at ``y`` (a reference level or a band edge), ``dashed`` or
    ``dotted``."""

    y: float
    style: str = "dim"
    pattern: str = "dashed"


@dataclass(frozen=True)
class Marker:
    """A dotted vertical line at ``t`` (seconds) with a one-letter ``label`` on top."""

    t: float
    label: str
    style: str = "bold"


def pattern_mask(pattern: str, width: int) -> NDArray[np.bool_]:
    """Which of ``width`` dot columns a line of ``pattern`` draws: all (solid), long dashes
    (dashed: 6 on, 4 off) or short dots (dotted: 1 on, 3 off)."""
    c = np.arange(width)
    if pattern == "dashed":
        return c % 10 < 6
    if pattern == "dotted":
        return c % 4 == 0
    return np.ones(width, dtype=bool)


def braille_cells(dots: NDArray[np.bool_]) -> NDArray[np.int32]:
    """Braille code offsets (0..255) of each cell of a (4 rows, 2 columns per cell) dot
    grid; 0 is a blank cell."""
    h, w = dots.shape
    cells = dots.reshape(h // 4, 4, w // 2, 2).astype(np.int32)
    return np.einsum("rawb,ab->rw", cells, _BITS)


def _rows(y: NDArray[np.float64], y0: float, y1: float, hd: int) -> NDArray[np.intp]:
    """Dot rows of values ``y`` (row 0 at the top, ``y1``)."""
    r = np.rint((y1 - y) / (y1 - y0) * (hd - 1))
    return np.clip(r, 0, hd - 1).astype(np.intp)


def _trace_dots(tr: Trace, x0: float, x1: float, y0: float, y1: float,
                shape: tuple[int, int]) -> NDArray[np.bool_]:
    hd, wd = shape
    dots = np.zeros(shape, dtype=bool)
    t, y = np.asarray(tr.t, dtype=float), np.asarray(tr.y, dtype=float)
    keep = (t >= x0) & (t <= x1) & np.isfinite(y)
    t, y = t[keep], y[keep]
    if t.size == 0:
        return dots
    col = np.minimum(((t - x0) / (x1 - x0) * wd).astype(np.intp), wd - 1)
    row = _rows(y, y0, y1, hd)
    starts = np.concatenate(([0], np.flatnonzero(np.diff(col)) + 1))
    cols = col[starts]
    lo = np.minimum.reduceat(row, starts)
    hi = np.maximum.reduceat(row, starts)
    last = row[np.concatenate((starts[1:] - 1, [row.size - 1]))]
    joined = np.concatenate(([False], np.diff(cols) == 1))  # neighbour columns: join them
    prev = np.concatenate(([0], last[:-1]))
    lo = np.where(joined, np.minimum(lo, prev), lo)
    hi = np.where(joined, np.maximum(hi, prev), hi)
    r = np.arange(hd)[:, None]
    dots[:, cols] = (r >= lo) & (r <= hi)
    if tr.pattern != "solid":
        dots &= pattern_mask(tr.pattern, wd)[None, :]
    return dots


class Plot:
    """A plot of ``traces`` over ``x_range`` (seconds; default: the traces' span) and
    ``y_range`` (default: all traces and lines, with a margin), ``height`` rows including
    the time axis and the legend (``(text, style)`` pieces, cut at the width, whole pieces
    only). Times on the axis are shown relative to ``t_origin``."""

    def __init__(self, traces: Sequence[Trace], *, hlines: Sequence[HLine] = (),
                 markers: Sequence[Marker] = (), x_range: tuple[float, float] | None = None,
                 y_range: tuple[float, float] | None = None, height: int | None = None,
                 t_origin: float = 0.0, legend: Sequence[tuple[str, str]] = (),
                 empty: str = "no samples yet", axis: bool = True) -> None:
        self.traces, self.hlines, self.markers = list(traces), list(hlines), list(markers)
        self.x_range, self.y_range, self.height = x_range, y_range, height
        self.t_origin, self.legend, self.empty = t_origin, list(legend), empty
        self.axis = axis  # the time axis row (a plot stacked under another may go without)

    def ranges(self) -> tuple[tuple[float, float], tuple[float, float]] | None:
        """The x and y ranges the plot shows, or ``None`` when there is nothing to show."""
        ts = [np.asarray(tr.t, dtype=float) for tr in self.traces]
        ts = [t for t in ts if t.size]
        if self.x_range is not None:
            x0, x1 = self.x_range
        elif ts:
            x0, x1 = min(float(t[0]) for t in ts), max(float(t[-1]) for t in ts)
        else:
            return None
        if not x1 > x0:
            x1 = x0 + 1e-3
        if self.y_range is not None:
            y0, y1 = self.y_range
        else:
            ys = [np.asarray(tr.y, dtype=float)[(np.asarray(tr.t) >= x0) &
                                                  (np.asarray(tr.t) <= x1)]
                  for tr in self.traces]
            ys = [y[np.isfinite(y)] for y in ys]
            vals = [v for y in ys if y.size for v in (float(y.min()), float(y.max()))]
            vals += [h.y for h in self.hlines]
            if not vals:
                return None
            y0, y1 = min(vals), max(vals)
            pad = 0.08 * (y1 - y0) if y1 > y0 else max(1e-9, 0.1 * abs(y0) or 1.0)
            y0, y1 = y0 - pad, y1 + pad
        return (x0, x1), (y0, y1)

    def __rich_console__(self, console: Console, options: ConsoleOptions) -> RenderResult:
        width = options.max_width
        height = self.height or options.height or 12
        rng = self.ranges()
        if rng is None or height < 2 + int(self.axis) or width < 12:
            yield Segment(self.empty[:width].ljust(width) + "\n", Style(dim=True))
            for _ in range(max(0, height - 1)):
                yield Segment(" " * width + "\n")
            return
        (x0, x1), (y0, y1) = rng
        rows = height - int(self.axis) - (1 if self.legend else 0)
        gutter = 8
        w = width - gutter
        hd, wd = 4 * rows, 2 * w
        layers: list[tuple[NDArray[np.bool_], Style]] = []
        for h in self.hlines:
            d = np.zeros((hd, wd), dtype=bool)
            if y0 <= h.y <= y1:
                d[_rows(np.array([h.y]), y0, y1, hd)[0]] = pattern_mask(h.pattern, wd)
            layers.append((d, Style.parse(h.style)))
        for tr in self.traces:
            layers.append((_trace_dots(tr, x0, x1, y0, y1, (hd, wd)), Style.parse(tr.style)))
        labels: dict[int, tuple[str, Style]] = {}
        for m in self.markers:
            if x0 <= m.t <= x1:
                c = min(int((m.t - x0) / (x1 - x0) * wd), wd - 1)
                d = np.zeros((hd, wd), dtype=bool)
                d[4::2, c] = True
                layers.append((d, Style.parse(m.style)))
                labels[c // 2] = (m.label[:1], Style.parse(m.style))
        codes = [braille_cells(d) for d, _ in layers]
        code = np.zeros((rows, w), dtype=np.int32)
        owner = np.full((rows, w), -1)
        for k, c in enumerate(codes):
            code |= c
            owner = np.where(c > 0, k, owner)
        ticks = {0: y1, rows // 2: 0.5 * (y0 + y1), rows - 1: y0}
        labels_y = _value_labels(list(ticks.values()), y1 - y0, gutter - 1)
        for r in range(rows):
            label = labels_y[list(ticks).index(r)] + " " if r in ticks else " " * gutter
            yield Segment(label[:gutter], Style(dim=True))
            run, run_style = [], None
            for c in range(w):
                if r == 0 and c in labels:
                    ch, st = labels[c]
                else:
                    ch = chr(0x2800 + int(code[r, c])) if code[r, c] else " "
                    st = layers[owner[r, c]][1] if owner[r, c] >= 0 else None
                if st != run_style and run:
                    yield Segment("".join(run), run_style)
                    run = []
                run_style = st
                run.append(ch)
            if run:
                yield Segment("".join(run), run_style)
            yield Segment("\n")
        if self.axis:
            left, right = _times([x0 - self.t_origin, x1 - self.t_origin])
            axis = " " * gutter + left + " " * max(1, w - len(left) - len(right)) + right
            yield Segment(axis[:width] + "\n", Style(dim=True))
        if self.legend:
            used = 0
            for text, style in self.legend:
                if used + len(text) > width:
                    break
                yield Segment(text, Style.parse(style))
                used += len(text)
            yield Segment("\n")


def _value_labels(values: list[float], span: float, width: int) -> list[str]:
    """The value axis labels with one number of decimals, enough to tell them apart
    (``span``: the axis span), right-aligned in ``width`` characters; the general format
    when fixed decimals do not fit."""
    digits = 0 if not span > 0 else max(0, min(6, 2 - int(np.floor(np.log10(span)))))
    out = [f"{v:.{digits}f}" for v in values]
    out = [o[1:] if o.startswith("-") and float(o) == 0 else o for o in out]  # no "-0.00"
    if max(len(o) for o in out) > width:
        out = [f"{v:.3g}" for v in values]
    return [o[:width].rjust(width) for o in out]


def _times(seconds: list[float]) -> list[str]:
    """Times on the axis in one unit: ms when all are under a second, else s."""
    if max(abs(x) for x in seconds) < 1:
        return [f"{x * 1e3:.0f} ms" for x in seconds]
    return [f"{x:.2f} s" for x in seconds]
