"""Sample buffers: :class:`Columns`, the detector's growable buffer of time, feedback and
setpoint, and the extra channels (a controller output, a current, a force) carried beside
the step detector, so each step window gets its stretch of them. Pure numpy.

The detector sees time, feedback and setpoint only; :class:`ChannelBuffer` keeps the extra
channels of the same samples, in step with it (both are fed every sample of a segment, and
the buffer drops what the detector has dropped), and cuts a window's stretch out of them
by the window's times. A stream without extra channels costs nothing: the buffer stays
empty and windows keep their empty ``extras``.
"""

from __future__ import annotations

from collections.abc import Mapping

import numpy as np
from numpy.typing import NDArray

__all__ = ["ChannelBuffer", "Columns"]

FloatArray = NDArray[np.float64]


class Columns:
    """Growable column buffer with a global sample index for its first row."""

    def __init__(self, width: int) -> None:
        self.data = np.empty((width, 1024))
        self.size = 0
        self.base = 0

    @property
    def end(self) -> int:
        return self.base + self.size

    def append(self, cols: list[FloatArray]) -> None:
        n = cols[0].size
        if self.size + n > self.data.shape[1]:
            grown = np.empty((self.data.shape[0], max(2 * self.data.shape[1], self.size + n)))
            grown[:, : self.size] = self.data[:, : self.size]
            self.data = grown
        for row, col in zip(self.data, cols, strict=True):
            row[self.size : self.size + n] = col
        self.size += n

    def col(self, k: int, start: int, stop: int) -> FloatArray:
        return self.data[k, start - self.base : stop - self.base]

    def drop_before(self, index: int) -> None:
        k = index - self.base
        if k <= 0:
            return
        k = min(k, self.size)
        if k * 2 >= self.size or k > 65536:
            self.data[:, : self.size - k] = self.data[:, k : self.size]
            self.size -= k
            self.base += k


class ChannelBuffer:
    """The extra channels of the recent samples, with their times (seconds).

    The channel names are those of the first chunk that has any; a later chunk missing
    one gives NaN for it, a new name is ignored."""

    def __init__(self) -> None:
        self.names: tuple[str, ...] = ()
        self._data = np.empty((0, 0))
        self._start = 0  # the first kept sample's column
        self._size = 0  # samples kept

    def __bool__(self) -> bool:
        return bool(self.names)

    def append(self, t: FloatArray, extras: Mapping[str, FloatArray]) -> None:
        """Add a chunk's samples (every chunk once the buffer has channels)."""
        if not self.names:
            if not extras:
                return
            self.names = tuple(extras)
            self._data = np.empty((1 + len(self.names), max(1024, 2 * t.size)))
        n = t.size
        if self._start + self._size + n > self._data.shape[1]:  # compact, or grow
            width = self._data.shape[1]
            if self._size + n > width // 2:
                width = max(2 * width, 2 * (self._size + n))
            moved = np.empty((self._data.shape[0], width))
            moved[:, :self._size] = self._data[:, self._start:self._start + self._size]
            self._data, self._start = moved, 0
        end = self._start + self._size
        cols = self._data[:, end:end + n]
        cols[0] = t
        for k, name in enumerate(self.names, start=1):
            cols[k] = extras.get(name, np.nan)
        self._size += n

    def keep_last(self, count: int) -> None:
        """Drop all but the last ``count`` samples (what the detector still holds)."""
        drop = self._size - max(0, count)
        if drop > 0:  # no copy: the start moves (appending compacts now and then)
            self._start += drop
            self._size -= drop

    def window(self, t: FloatArray) -> dict[str, FloatArray]:
        """The channels at the window's samples ``t`` (a stretch of the samples appended,
        in order), as copies; empty when there are none."""
        if not self.names or t.size == 0:
            return {}
        held = self._data[:, self._start:self._start + self._size]
        a = int(np.searchsorted(held[0], t[0]))
        b = a + t.size
        if b > self._size or held[0, a] != t[0] or held[0, b - 1] != t[-1]:
            return {}  # not held any more (cannot happen while in step with the detector)
        return {name: held[k, a:b].copy() for k, name in enumerate(self.names, start=1)}
