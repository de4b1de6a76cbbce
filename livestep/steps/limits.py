"""Is the drive at its limit during a step's rise? Read off an extra channel (a controller
output, a current, a force) of the step's window. Pure numpy.

A drive at its output limit holds its output at one value, the extreme of the window, while
the error would ask for more: the response is then limited by the drive, not shaped by the
loop, so a linear model (and any design guidance read from it) does not hold for that
step. :func:`limit_hold` finds the longest run of samples, between the step instant and
the end of the rise, whose value stays within ``tolerance`` of the channel's maximum (or
minimum) over the step, and reports it when it lasts at least ``min_samples`` samples. An
extreme within 10 % of the span of where the channel ends (the median of the window's last
tenth) is not a limit: an output that settles at its lowest value holds that value too.
An output clipped by the controller is reported at exactly its limit value, sample after
sample, while a smooth peak of an output that is not limited passes its extreme in a
sample or two (common practice, no source): so the default tolerance is tight (1e-5 of the
span, which single-precision frames and six-digit text keep). A measured channel at its
limit (a current with noise on it) needs a tolerance of about its noise.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from numpy.typing import ArrayLike

__all__ = ["LimitHold", "LimitSettings", "limit_hold", "limit_warning"]


@dataclass(frozen=True, kw_only=True)
class LimitSettings:
    """``tolerance``: how close to the extreme a sample counts as on it, as a fraction of the
    channel's span over the step (highest minus lowest value); ``min_samples``: the shortest
    run that counts as held."""

    tolerance: float = 1e-5
    min_samples: int = 5


@dataclass(frozen=True)
class LimitHold:
    """A channel held at an extreme during the rise: ``channel`` (its name), ``value`` (the
    extreme, in the channel's units), ``start`` (seconds from the step instant to the first
    sample of the run), ``duration`` (seconds from the first to past the last sample of the
    run: samples times the median sample period)."""

    channel: str
    value: float
    start: float
    duration: float


def _longest_run(on: np.ndarray) -> tuple[int, int]:
    """(start, length) of the longest run of ``True`` in ``on`` ((0, 0) when none)."""
    if not on.any():
        return 0, 0
    edges = np.diff(np.concatenate(([0], on.astype(np.int8), [0])))
    starts, ends = np.flatnonzero(edges == 1), np.flatnonzero(edges == -1)
    k = int(np.argmax(ends - starts))
    return int(starts[k]), int(ends[k] - starts[k])


def limit_hold(t: ArrayLike, x: ArrayLike, i_step: int, rise_end: float | None, *,
               channel: str = "output", settings: LimitSettings = LimitSettings()
               ) -> LimitHold | None:
    """The longest stretch from sample ``i_step`` (the step instant) to time ``rise_end``
    (seconds, the recording's time base; ``None``: the end of the window) during which the
    channel ``x`` sits at its extreme over the step (from ``i_step`` on), or ``None`` when
    it never does for ``settings.min_samples`` samples. ``t`` in seconds, increasing."""
    t = np.asarray(t, dtype=float)
    x = np.asarray(x, dtype=float)
    if t.size != x.size or not 0 <= i_step < t.size - 1:
        return None
    after = x[i_step:]
    ok = np.isfinite(after)
    if ok.sum() < settings.min_samples:
        return None
    hi, lo = float(after[ok].max()), float(after[ok].min())
    span = hi - lo
    if not span > 0:
        return None  # a constant channel holds nothing
    stop = t.size if rise_end is None else int(np.searchsorted(t, rise_end, side="right"))
    rise = x[i_step:max(stop, i_step + 1)]
    tol = settings.tolerance * span
    tail = after[ok][-max(settings.min_samples, after[ok].size // 10):]
    final = float(np.median(tail))  # where the channel ends: a settled output is no limit
    best: tuple[int, int, float] = (0, 0, hi)
    for extreme in (hi, lo):
        if abs(extreme - final) <= 0.1 * span:
            continue
        start, length = _longest_run(np.abs(rise - extreme) <= tol)
        if length > best[1]:
            best = (start, length, extreme)
    start, length, extreme = best
    if length < settings.min_samples:
        return None
    period = float(np.median(np.diff(t))) if t.size > 1 else 0.0
    k = i_step + start
    return LimitHold(channel=channel, value=extreme, start=float(t[k] - t[i_step]),
                     duration=length * period)


def limit_warning(hold: LimitHold) -> str:
    """The step's warning for a held output, in words."""
    return (f"{hold.channel} at its limit ({hold.value:.4g}) for {1e3 * hold.duration:.0f} ms"
            " during the rise: the response is limited, not linear; the model and the design"
            " guidance do not hold for this step")
