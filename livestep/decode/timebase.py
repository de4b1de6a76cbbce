"""Device time to seconds that only increase.

Device timestamps come in seconds, milliseconds, microseconds or ticks of a
given rate, possibly from a 16- or 32-bit counter that wraps. A counter that
goes backwards by a wrap (the next interval, taken modulo the wrap, is under
ten median periods) is unwrapped; any other backwards jump is a device restart
and starts a new segment, whose times continue one median period after the
last sample so the stream's time still increases. A repeated timestamp is
dropped. Without a device time, samples are stamped from their count at a
configured rate (host arrival times bunch up in bursts and are never used raw).
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from numpy.typing import NDArray

from livestep.decode.counters import LinkCounters

__all__ = ["ClockSettings", "Stamped", "Timebase", "UNIT_SECONDS"]

UNIT_SECONDS = {"s": 1.0, "ms": 1e-3, "us": 1e-6}
_PERIOD_INTERVALS = 64


@dataclass(frozen=True, kw_only=True)
class ClockSettings:
    """``unit``: s, ms, us or ticks (then ``tick_rate`` in Hz); ``wrap_bits``: 16 or 32 for
    a wrapping counter, ``None`` for none; ``host_rate`` (Hz): no device time, stamp
    samples from their count at this rate."""

    unit: str = "s"
    tick_rate: float | None = None
    wrap_bits: int | None = None
    host_rate: float | None = None

    def __post_init__(self) -> None:
        if self.unit == "ticks":
            if not self.tick_rate or self.tick_rate <= 0:
                raise ValueError("time unit 'ticks' needs a positive tick rate in Hz")
        elif self.unit not in UNIT_SECONDS:
            raise ValueError(f"unknown time unit {self.unit!r}; use s, ms, us or ticks")
        if self.wrap_bits not in (None, 16, 32):
            raise ValueError("counter wrap must be 16 or 32 bits")
        if self.host_rate is not None and self.host_rate <= 0:
            raise ValueError("the sample rate must be positive")

    @property
    def seconds_per_unit(self) -> float:
        return 1.0 / self.tick_rate if self.unit == "ticks" else UNIT_SECONDS[self.unit]

    def describe(self) -> str:
        """One line for a recording's metadata."""
        if self.host_rate:
            return f"host, from the sample count at {self.host_rate:g} Hz (no device time)"
        unit = f"ticks at {self.tick_rate:g} Hz" if self.unit == "ticks" else self.unit
        wrap = f", {self.wrap_bits}-bit counter" if self.wrap_bits else ""
        return f"device, {unit}{wrap}"


@dataclass(frozen=True, eq=False)
class Stamped:
    """``t`` in seconds for the kept samples; ``keep`` marks which input samples were
    kept; ``segment_starts`` are indices into ``t`` where a new segment begins."""

    t: NDArray[np.float64]
    keep: NDArray[np.bool_]
    segment_starts: list[int]


class Timebase:
    """Stateful converter; one per stream."""

    def __init__(self, settings: ClockSettings, counters: LinkCounters | None = None) -> None:
        self.settings = settings
        self.counters = counters if counters is not None else LinkCounters()
        self._scale = settings.seconds_per_unit
        self._wrap = float(2**settings.wrap_bits) if settings.wrap_bits else None
        self._count = 0
        self._last_raw: float | None = None
        self._offset = 0.0  # raw units added for wraps in this segment
        self._origin_raw = 0.0  # unwrapped raw value at the segment's first sample
        self._origin_t = 0.0  # seconds at the segment's first sample
        self._last_t: float | None = None
        self._period: float | None = None  # median sample period, seconds
        self._early = np.empty(0)  # intervals seen before the period is fixed
        self.segment = 0

    @property
    def period(self) -> float | None:
        """Median sample period seen so far, seconds."""
        return self._period

    def new_segment(self) -> None:
        """Start a new segment now (a restart marked in the stream itself)."""
        self.segment += 1
        self.counters.restarts += 1

    def stamp(self, raw: NDArray[np.float64] | None, n: int) -> Stamped:
        """Seconds for the next ``n`` samples with raw device times ``raw`` (or none)."""
        if raw is None:
            rate = self.settings.host_rate or 1.0
            t = (self._count + np.arange(n)) / rate
            self._count += n
            self._last_t = float(t[-1]) if n else self._last_t
            return Stamped(t, np.ones(n, dtype=bool), [])
        raw = np.asarray(raw, dtype=float)
        if self._period is not None:  # fixed: nothing below depends on the split
            return self._stamp(raw)
        # Causal: until the median period is fixed, a backwards step is decided with the
        # period of the samples before it alone, so the result does not depend on how the
        # stream was split into reads (a forward step needs no period at all).
        parts: list[Stamped] = []
        while raw.size and self._period is None:
            prev = self._last_raw if self._last_raw is not None else raw[0]
            back = np.flatnonzero(np.diff(raw, prepend=prev) < 0)
            if back.size == 0:
                break
            j = int(back[0])
            if j:
                parts.append(self._stamp(raw[:j]))
            parts.append(self._stamp(raw[j:j + 1]))
            raw = raw[j + 1:]
        if raw.size or not parts:
            parts.append(self._stamp(raw))
        if len(parts) == 1:
            return parts[0]
        starts, kept = [], 0
        for part in parts:
            starts += [kept + s for s in part.segment_starts]
            kept += part.t.size
        return Stamped(np.concatenate([x.t for x in parts]),
                       np.concatenate([x.keep for x in parts]), starts)

    def _stamp(self, raw: NDArray[np.float64]) -> Stamped:
        if raw.size == 0:
            return Stamped(raw, np.ones(0, dtype=bool), [])
        if self._period is not None and self._last_raw is not None:
            if raw.size <= _FEW and _increasing(self._last_raw, rl := raw.tolist()):
                return self._stamp_few(rl)
        prev = self._last_raw if self._last_raw is not None else raw[0]
        d = _diff_from(prev, raw)
        if self._last_raw is None:
            self._origin_raw = raw[0]
            self._origin_t = 0.0
        known = self._provisional_period()
        period_raw = known / self._scale if known else None
        if period_raw is None:
            pos = d[d > 0]
            period_raw = float(np.median(pos)) if pos.size else None
        adjust = np.zeros_like(raw)  # raw units to add from each index on
        restarts: list[int] = []
        keep = d != 0.0
        if self._last_raw is None:
            keep[0] = True
        for i in np.flatnonzero(d < 0):
            wrapped = d[i] + self._wrap if self._wrap else None
            limit = 10.0 * period_raw if period_raw else (self._wrap or 0.0) / 2
            if wrapped is not None and 0 < wrapped <= limit:
                adjust[i] += self._wrap
            else:
                restarts.append(int(i))
        offsets = self._offset + np.cumsum(adjust)
        t = np.empty_like(raw)
        bounds = [0, *restarts, raw.size]
        origin_raw, origin_t = self._origin_raw, self._origin_t
        for k in range(len(bounds) - 1):
            a, b = bounds[k], bounds[k + 1]
            if k > 0:  # a restart: continue one period after the last sample
                offsets[a:b] -= offsets[a]
                origin_raw = raw[a]
                step = (period_raw or 1.0) * self._scale
                origin_t = float(t[a - 1] if a > 0 else self._last_t or 0.0) + step
                self.segment += 1
                self.counters.restarts += 1
                keep[a] = True
            t[a:b] = origin_t + (raw[a:b] + offsets[a:b] - origin_raw) * self._scale
        self._offset = float(offsets[-1])
        self._origin_raw, self._origin_t = origin_raw, origin_t
        self._last_raw = float(raw[-1])
        t = t[keep]
        if not keep.all():
            self.counters.bad["repeated timestamp"] += int((~keep).sum())
        kept_index = np.cumsum(keep) - 1
        starts = [int(kept_index[i]) for i in restarts]
        self._update_period(t, starts)
        self._last_t = float(t[-1]) if t.size else self._last_t
        return Stamped(t, keep, starts)

    def _stamp_few(self, raw: list[float]) -> Stamped:
        """:meth:`_stamp` in the usual case of a small read: the period fixed, a few samples
        whose times increase (no wrap, restart or repeat), stamped in Python floats (numpy's
        fixed cost per call exceeds the samples' own): the same IEEE operations in the same
        order, so the same seconds to the bit."""
        o_t, off, sc = float(self._origin_t), float(self._offset), float(self._scale)
        o_r = float(self._origin_raw)  # numpy scalars would make numpy counts below
        t = [o_t + (x + off - o_r) * sc for x in raw]
        prev, limit = float(self._last_t), 1.5 * float(self._period)  # type: ignore[arg-type]
        gaps = 0
        for x in t:
            gaps += x - prev > limit  # type: ignore[operator]
            prev = x
        self.counters.gaps += int(gaps)
        self._last_raw, self._last_t = float(raw[-1]), float(t[-1])
        return Stamped(np.array(t), np.ones(len(t), dtype=bool), [])

    def _update_period(self, t: NDArray[np.float64], starts: list[int]) -> None:
        """The median period is fixed by the stream's first 64 sample intervals (so it does
        not depend on how the stream was split into reads); every interval over 1.5 times
        it counts as a gap."""
        if t.size == 0:
            return
        prev = self._last_t if self._last_t is not None else t[0]
        d = np.diff(t, prepend=prev)
        for s in starts:
            d[s] = 0.0
        pos = d[d > 0]
        if self._period is None:
            self._early = np.concatenate((self._early, pos))
            if self._early.size < _PERIOD_INTERVALS:
                return
            self._period = float(np.median(self._early[:_PERIOD_INTERVALS]))
            pos = self._early
            self._early = np.empty(0)
        self.counters.gaps += int(np.count_nonzero(pos > 1.5 * self._period))

    def _provisional_period(self) -> float | None:
        """The period, or while it is not yet fixed, the median of the intervals so far."""
        if self._period is not None:
            return self._period
        return float(np.median(self._early)) if self._early.size else None


def _diff_from(prev: float, x: NDArray[np.float64]) -> NDArray[np.float64]:
    """``np.diff(x, prepend=prev)``, the same values at a fraction of the fixed cost."""
    d = np.empty_like(x)
    d[0] = x[0] - prev
    np.subtract(x[1:], x[:-1], out=d[1:])
    return d


_FEW = 64  # samples up to which stamping in Python floats beats numpy's fixed costs


def _increasing(prev: float, xs: list[float]) -> bool:
    """Every value above the one before it (``prev`` before the first)."""
    for x in xs:
        if not x > prev:
            return False
        prev = x
    return True
