"""Incremental step detection.

Samples arrive in chunks of any size; the detector keeps only what it needs
(the open step's window and a bounded history) and hands out each step's
:class:`StepWindow` once the window is closed. Every decision depends only on
the samples themselves, never on where a chunk ended, so live, replay and
offline analysis give the same steps.

Setpoint mode (the usual case): the setpoint is "moving" at a sample when it
differs from the previous one by more than a tolerance. Moving samples closer
than ``hold_samples`` apart form one transition. A transition is a step when
it lasts at most ``max_transition`` samples, is followed by at least
``hold_samples`` of steady setpoint and changes the setpoint by at least
``min_step``; a longer transition is a ramp: it ends the open window and opens
none. The step instant is the first sample carrying the new setpoint value.

A window closes at the next step, a ramp, ``max_window`` or the end of data, or as soon
as its response has settled (``close_when_settled``): at checkpoints 2 ``hold_samples``
after the step instant and then every 50 % more samples, the window so far is measured
(:func:`~livestep.steps.measure.measure_step`); it closes there, with the reason
``settled``, once the response is settled by the measurement's own rule, has stayed in the
band for twice its settling time since (the confirmation time: by then what is left of a
second-order transient is a small fraction of the band, so the final level read from the
window's tail is not biased by it) and does not creep there (a line fitted to that stretch
moves by at most a quarter of the band: an integrator still pulling the error out keeps
the window open). A loop that settles in 0.2 s is closed between 0.6 and 0.9 s after the
step. The checkpoints are counted in samples and a checkpoint is only judged once no
setpoint change can come before it, so the decision does not depend on chunk sizes either.

Feedback mode (no setpoint column): a step starts at the first sample that
leaves the noise band (8 sigma) around the held feedback level and stays away
(the median of the next ``hold_samples`` is outside the band too); the
detector re-arms once the feedback has held a new level (block means of
``hold_samples`` agreeing within the noise) for at least as long as it took
to get there, between 2 and 10 blocks. The step instant is then when the
feedback left the band, later than the setpoint moved by the dead time and
the time to move 8 sigma; a ramp of the feedback is taken as a jump.
"""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np
from numpy.typing import NDArray

from livestep.steps.channels import Columns
from livestep.steps.measure import MeasureSettings, StepMetrics, noise_sigma, robust_level
from livestep.steps.settle import confirmed_settled

__all__ = ["DetectorSettings", "StepDetector", "StepWindow"]

FloatArray = NDArray[np.float64]


@dataclass(frozen=True, kw_only=True)
class DetectorSettings:
    """Detection options.

    ``min_step``: smallest setpoint change (setpoint units) that counts as a step;
    ``None`` derives it per step from the data: 10 times the feedback noise sigma
    measured before the step (a smaller step cannot be measured against that
    noise). In feedback mode it is the smallest jump of the feedback.
    ``max_transition``: samples a setpoint change may take and still be a step.
    ``hold_samples``: steady samples that separate transitions and confirm a level.
    ``max_window``: longest step window, seconds. ``pre_samples``: at most this many
    samples before the step are used for the initial level and noise.
    ``setpoint_tolerance``: setpoint differences up to this (setpoint units) are steady.
    ``close_when_settled``: close a window once its response has settled (see the module
    docstring) rather than only at the next step.
    """

    min_step: float | None = None
    max_transition: int = 5
    hold_samples: int = 20
    max_window: float = 120.0
    pre_samples: int = 2000
    setpoint_tolerance: float = 0.0
    close_when_settled: bool = True


@dataclass(frozen=True, kw_only=True, eq=False)
class StepWindow:
    """Samples of one step: ``t`` (seconds), ``feedback``, ``setpoint`` (``None`` in
    feedback mode) from the start of the stretch used for the initial level to the end
    of the window; ``i_step`` indexes the step instant."""

    index: int
    t: FloatArray
    feedback: FloatArray
    setpoint: FloatArray | None
    i_step: int
    setpoint_before: float | None
    setpoint_after: float | None
    end_reason: str
    extras: dict[str, FloatArray] = field(default_factory=dict)  # extra channels, same samples
    #: Closed as settled: the settings and measurement of these samples that closed it.
    measured: tuple[MeasureSettings, StepMetrics] | None = field(
        default=None, compare=False, repr=False)

    @property
    def t_step(self) -> float:
        """Step instant, seconds in the recording's time base."""
        return float(self.t[self.i_step])


@dataclass
class _Open:
    i_step: int
    pre_start: int
    sp_before: float | None
    sp_after: float | None
    next_check: int = 0  # samples after i_step of the next settled check
    level: tuple[float, float] | None = None  # initial level and noise sigma, once known
    not_before: float = -np.inf  # no settled close before this time (seconds)


class StepDetector:
    """Feed chunks with :meth:`feed`; call :meth:`finish` at the end of the stream.

    Both return the windows closed by that call, in order.
    """

    def __init__(self, settings: DetectorSettings = DetectorSettings(),
                 *, has_setpoint: bool = True,
                 measure: MeasureSettings | None = None) -> None:
        self.settings = settings
        self.measure = measure if measure is not None else MeasureSettings()
        self.has_setpoint = has_setpoint
        self._buf = Columns(3)
        self._scan = 1 if has_setpoint else 0
        self._hold_start = 0
        self._open: _Open | None = None
        self._in_ramp = False
        self._count = 0
        self._level: float | None = None  # feedback mode: held level, band, noise
        self._band = 0.0
        self._sigma: float | None = None
        self._moved_at: int | None = None

    # -- public -----------------------------------------------------------------
    def feed(self, t: FloatArray, feedback: FloatArray,
             setpoint: FloatArray | None = None) -> list[StepWindow]:
        """Add samples (seconds; feedback and setpoint in their units)."""
        t = np.asarray(t, dtype=float)
        if t.size == 0:
            return []
        sp = np.asarray(setpoint, dtype=float) if setpoint is not None else np.zeros_like(t)
        self._buf.append([t, np.asarray(feedback, dtype=float), sp])
        out: list[StepWindow] = []
        if self.has_setpoint:
            self._scan_setpoint(out)
        else:
            self._scan_feedback(out)
        # Only up to where no setpoint change (or feedback jump) can still be found: the
        # scan position, so a checkpoint is judged with the same samples whatever the chunks.
        self._check_limits(out, self._scan)
        self._trim()
        return out

    def finish(self, reason: str = "end of data") -> list[StepWindow]:
        """Close the open window at the end of the stream (or segment: ``reason``)."""
        out: list[StepWindow] = []
        if self._open is not None:
            self._check_limits(out, self._buf.end)
        if self._open is not None:
            self._close(self._buf.end, reason, out)
        return out

    @property
    def held(self) -> int:
        """How many of the latest samples the detector still holds."""
        return self._buf.size

    def open_instant(self) -> tuple[int, float] | None:
        """(global sample index of the step instant, seconds from it to the latest
        sample) of the step under way, or ``None``: cheap, no copy."""
        op = self._open
        if op is None:
            return None
        t = self._buf.col(0, op.i_step, self._buf.end)
        return op.i_step, float(t[-1] - t[0])

    def open_window(self, *, copy: bool = True) -> StepWindow | None:
        """The step under way (its samples so far; ``end_reason`` "open"), or ``None``
        when no window is open. ``copy=False`` gives views into the detector's buffer,
        valid only until the next :meth:`feed`."""
        op = self._open
        if op is None or self._buf.end - op.i_step < 2:
            return None
        b, stop = self._buf, self._buf.end

        def col(k: int) -> FloatArray:
            c = b.col(k, op.pre_start, stop)
            return c.copy() if copy else c

        return StepWindow(
            index=self._count, t=col(0), feedback=col(1),
            setpoint=col(2) if self.has_setpoint else None,
            i_step=op.i_step - op.pre_start, setpoint_before=op.sp_before,
            setpoint_after=op.sp_after, end_reason="open")

    # -- setpoint mode ----------------------------------------------------------
    def _moving(self, start: int, stop: int) -> NDArray[np.intp]:
        sp = self._buf.col(2, start - 1, stop)
        changed = np.flatnonzero(sp[1:] != sp[:-1])  # the tolerance is >= 0: only these
        prev, cur = sp[changed], sp[changed + 1]
        tol = self.settings.setpoint_tolerance + 1e-9 * np.maximum(np.abs(prev), np.abs(cur))
        return start + changed[np.abs(cur - prev) > tol]

    def _scan_setpoint(self, out: list[StepWindow]) -> None:
        s = self.settings
        end = self._buf.end
        while self._scan < end:
            moving = self._moving(self._scan, end)
            if moving.size == 0:
                self._scan = end
                return
            a = int(moving[0])
            gaps = np.flatnonzero(np.diff(moving) > s.hold_samples)
            last = int(moving[gaps[0]]) if gaps.size else int(moving[-1])
            complete = gaps.size > 0 or last + s.hold_samples < end
            length = last - a + 1
            if self._in_ramp or length > s.max_transition:
                # A ramp: ends the open window as soon as it is known to be one.
                self._check_limits(out, a)
                if self._open is not None:
                    self._close(a, "ramp", out)
                self._in_ramp = not complete
                self._hold_start = last + 1
                self._scan = last if self._in_ramp else last + 1
                if self._in_ramp:
                    return
                continue
            if not complete:
                self._scan = a
                return
            sp = self._buf.col(2, a - 1, last + 1)
            before, after = float(sp[0]), float(sp[-1])
            pre_start = self._pre_start(a)
            threshold = s.min_step
            if threshold is None:
                threshold = 10.0 * noise_sigma(self._buf.col(1, pre_start, a))
                threshold = max(threshold, 1e-6 * max(abs(before), abs(after)))
            self._scan = last + 1
            if abs(after - before) < threshold or after == before:
                continue
            tol = s.setpoint_tolerance + 1e-9 * abs(after)
            i_step = a - 1 + int(np.argmax(np.abs(sp - after) <= tol))
            self._check_limits(out, a)
            if self._open is not None:
                self._close(a, "next step", out)
            self._open = _Open(i_step, pre_start, before, after, 2 * s.hold_samples)
            self._hold_start = last + 1

    # -- feedback mode ----------------------------------------------------------
    def _scan_feedback(self, out: list[StepWindow]) -> None:
        s = self.settings
        h = max(s.hold_samples, 5)
        end = self._buf.end
        while True:
            if self._level is None:
                if not self._find_hold(h, end):
                    return
                continue
            if end - self._scan < h + 1:
                return
            fb = self._buf.col(1, self._scan, end)
            away = np.flatnonzero(np.abs(fb[: fb.size - h] - self._level) > self._band)
            for k in away:
                confirm = fb[k + 1 : k + 1 + h]
                if abs(float(np.median(confirm)) - self._level) > self._band:
                    break
            else:
                self._scan = end - h
                return
            i = self._scan + int(k)
            jump = float(np.median(confirm)) - self._level
            self._check_limits(out, i)
            if self._open is not None:
                self._close(i, "next step", out)
            if s.min_step is None or abs(jump) >= s.min_step:
                self._open = _Open(i, self._pre_start(i), None, None, 2 * h)
            self._level = None
            self._moved_at = i
            self._scan = i + h

    def _find_hold(self, h: int, end: int) -> bool:
        """Look for a new held level: blocks of h samples from ``self._scan`` whose means
        agree within the noise for at least 2h samples and at least as long as the
        feedback took to get there since it moved (capped at 10h). Sets the level and band
        when found."""
        origin = self._scan
        n_blocks = (end - origin) // h
        if n_blocks < 2:
            return False
        blocks = self._buf.col(1, origin, origin + n_blocks * h).reshape(n_blocks, h)
        means = blocks.mean(axis=1)
        sigma = self._sigma
        if sigma is None:  # no noise estimate yet: from the blocks themselves
            sigma = float(np.median(np.sqrt(np.mean(np.diff(blocks, axis=1) ** 2, axis=1) / 2)))
        tol = 6.0 * sigma / np.sqrt(h) + 1e-12 * max(1.0, float(np.abs(means).max()))
        for b in range(n_blocks - 1):
            start = origin + b * h
            since = start - self._moved_at if self._moved_at is not None else 0
            need = min(max(2, -(-since // h)), 10)
            if b + need > n_blocks:
                self._scan = start
                return False
            seg = means[b : b + need]
            if seg.max() - seg.min() <= tol:
                hold = self._buf.col(1, start, start + need * h)
                self._sigma = noise_sigma(hold)
                self._level = robust_level(hold)
                self._band = max(8.0 * self._sigma, 0.5 * (self.settings.min_step or 0.0))
                self._hold_start = start
                self._scan = start + need * h
                return True
        self._scan = origin + (n_blocks - 1) * h
        return False

    # -- shared -----------------------------------------------------------------
    def _pre_start(self, change: int) -> int:
        """Start of the stretch before a change at ``change`` that gives the initial level
        and the noise: the later half of the hold, at most ``pre_samples``."""
        return max(self._hold_start + (change - self._hold_start) // 2,
                   change - self.settings.pre_samples)

    def _check_limits(self, out: list[StepWindow], upto: int) -> None:
        """Close the open window at its first settled checkpoint or where it passes
        ``max_window``, whichever comes first, judging only samples before ``upto``."""
        op = self._open
        if op is None or upto <= op.i_step:
            return
        t = self._buf.col(0, op.i_step, upto)  # increasing: a binary search, not a scan
        k = int(np.searchsorted(t, t[0] + self.settings.max_window, side="right"))
        limit = op.i_step + k if k < t.size else None
        if self.settings.close_when_settled:
            while op.i_step + op.next_check <= (upto if limit is None else limit):
                stop = op.i_step + op.next_check
                op.next_check = max(op.next_check + 1, -(-op.next_check * 3 // 2))
                measured = self._settled(op, stop)
                if measured is not None:
                    self._close(stop, "settled", out, measured)
                    return
        if limit is not None:
            self._close(limit, "longest window", out)

    def _settled(self, op: _Open, stop: int) -> StepMetrics | None:
        """The measurement of the open step, samples up to ``stop``, when it may close as
        settled there (:func:`~livestep.steps.settle.confirmed_settled`), else ``None``."""
        b = self._buf
        t = b.col(0, op.pre_start, stop)
        i = op.i_step - op.pre_start
        if t[-1] < op.not_before or i < 3:
            return None
        fb = b.col(1, op.pre_start, stop)
        if op.level is None:
            op.level = (robust_level(fb[:i]), noise_sigma(fb[:i]))
        measured, op.not_before = confirmed_settled(
            t, fb, b.col(2, op.pre_start, stop) if self.has_setpoint else None, i,
            op.sp_before, op.sp_after, level=op.level, tail_min=self.settings.hold_samples,
            settings=self.measure)
        return measured

    def _close(self, stop: int, reason: str, out: list[StepWindow],
               measured: StepMetrics | None = None) -> None:
        op = self._open
        assert op is not None
        self._open = None
        if stop - op.i_step < 2:
            return
        b = self._buf
        out.append(StepWindow(
            index=self._count,
            t=b.col(0, op.pre_start, stop).copy(),
            feedback=b.col(1, op.pre_start, stop).copy(),
            setpoint=b.col(2, op.pre_start, stop).copy() if self.has_setpoint else None,
            i_step=op.i_step - op.pre_start,
            setpoint_before=op.sp_before,
            setpoint_after=op.sp_after,
            end_reason=reason,
            measured=None if measured is None else (self.measure, measured),
        ))
        self._count += 1

    def _trim(self) -> None:
        keep = self._scan - self.settings.pre_samples - 1
        if self._open is not None:
            keep = min(keep, self._open.pre_start)
        self._buf.drop_before(max(0, keep))
