"""Zero-phase smoothing of a sampled step response and the choice of its spans.

Pure functions on a uniform grid: cubic Savitzky-Golay smoothing (Savitzky & Golay, Anal.
Chem. 36, 1964), with long spans first averaged in blocks, and :func:`choose_spans`, which
takes the spans from the response itself and its noise, never from the window's length.
"""

from __future__ import annotations

import math
from functools import lru_cache
from typing import Any

import numpy as np
from numpy.typing import NDArray

__all__ = ["choose_spans", "first_crossing", "noise_gain", "smoothed"]

FloatArray = NDArray[np.float64]


def first_crossing(tg: FloatArray, r: FloatArray, level: float, start: int) -> float | None:
    """Interpolated time of the first sample at or past ``level`` (rising, normalised)."""
    above = np.flatnonzero(r[start:] >= level)
    if above.size == 0:
        return None
    i = start + int(above[0])
    if i == 0 or not r[i - 1] < level:  # at or past the level from the first sample on
        return float(tg[i])
    return float(tg[i - 1] + (level - r[i - 1]) / (r[i] - r[i - 1]) * (tg[i] - tg[i - 1]))


def _odd(n: float, lo: int) -> int:
    k = max(lo, int(round(n)))
    return k if k % 2 else k + 1


def _smooth(y: FloatArray, window: int) -> FloatArray:
    """Cubic Savitzky-Golay smoothing (zero phase), mirrored at the ends."""
    half = window // 2
    if window < 5 or y.size <= 2 * half:
        return y
    mirrored = np.concatenate((y[half:0:-1], y, y[-2:-half - 2:-1]))  # np.pad's "reflect"
    return np.convolve(mirrored, _savgol(window), mode="valid")


@lru_cache(maxsize=256)
def _savgol(window: int) -> FloatArray:
    """Cubic Savitzky-Golay smoothing coefficients: the weights that give the value at the
    centre of a least-squares cubic (or quadratic: the same weights) through ``window`` =
    2m + 1 points, in closed form c_j = 3 (3m^2 + 3m - 1 - 5j^2) / ((2m + 3)(2m + 1)(2m - 1))
    (Savitzky & Golay, Anal. Chem. 36, 1964; the closed form as Madden, Anal. Chem. 50,
    1978 gives it, from memory; the tests check it against scipy.signal.savgol_coeffs)."""
    m = window // 2
    return _weight(m, np.arange(-m, m + 1, dtype=float) ** 2)


def _weight(m: int, j2: Any) -> Any:
    """The weight c_j above of offset j (given as j^2, a float or an array)."""
    return 3.0 * (3.0 * m * m + 3.0 * m - 1.0 - 5.0 * j2) / (
        (2 * m + 3) * (2 * m + 1) * (2 * m - 1))


def _box(y: FloatArray, size: int) -> FloatArray:
    """Centred moving average over an odd ``size``, the ends extended with their values."""
    half = size // 2
    c = np.cumsum(np.concatenate((np.full(half + 1, y[0]), y, np.full(half, y[-1]))))
    return (c[size:] - c[:-size]) / size


Smoothed = tuple[FloatArray, FloatArray, int]  # times, values, index of the step instant


def smoothed(tg: FloatArray, yg: FloatArray, g0: int, window: int,
             stop: int | None = None) -> Smoothed:
    """(times, values, index of the step instant) of ``yg`` smoothed over ``window`` samples
    of the uniform grid ``tg``. A long span first averages blocks of k = window / 10
    samples and goes on with every k-th point, the step instant among them (the same
    smoothing to first order, at 1/k^2 of the cost). ``stop``: only the points before grid
    index ``stop`` are wanted (a shorter result, the same values, for less work)."""
    window = min(window, _odd(yg.size // 2, 1) - 2)  # never longer than the data
    if window < 5:
        return tg, yg, g0
    k = (window // 10) | 1  # odd, so the box is centred on its point
    if stop is not None and stop + window + 2 * k + 2 < yg.size:
        # A point depends on the samples within half a window (and half a box) of it.
        tg, yg = tg[:stop + window + 2 * k + 2], yg[:stop + window + 2 * k + 2]
    else:
        stop = None
    if k < 3:
        ts, ys, s0 = tg, _smooth(yg, window), g0
    else:
        ts, ys, s0 = tg[g0 % k::k], _smooth(_box(yg, k)[g0 % k::k], _odd(window / k, 5)), g0 // k
    if stop is not None:  # the points before grid index stop: one of every k from g0 % k
        keep = stop if k < 3 else -(-(stop - g0 % k) // k)
        ts, ys = ts[:keep], ys[:keep]
    return ts, ys, s0


def noise_gain(window: int) -> float:
    """Standard deviation of white noise after :func:`_smooth` over ``window`` samples, as a
    fraction of the noise's own: the root sum of squares of the filter's weights, which for
    a least-squares smoother is the root of its centre weight (the smoother is a
    projection, so the sum of its squared weights equals that weight)."""
    if window < 5:
        return 1.0
    return math.sqrt(_weight(window // 2, 0.0))


def _span(samples: float) -> int:
    """An odd smoothing span of about ``samples``; 1 (no smoothing) below 5."""
    k = _odd(samples, 1)
    return k if k >= 5 else 1


def choose_spans(tg: FloatArray, yg: FloatArray, g0: int, initial: float, amp: float,
                 rel: float, band: float, dt: float,
                 memo: dict[int, Smoothed] | None = None) -> tuple[int, int]:
    """Smoothing spans (samples) chosen from the response and the noise alone, never from
    the window's length: ``rise`` for the reference-level crossings and ``shape`` for the
    peak and the settling band.

    rise: 0.4 of the rise time, found by iterating from the span the noise needs to place
    the crossings to 2 % of the amplitude (at most three passes; a cubic that short follows
    the rise closely). shape: long enough that the smoothed noise is a tenth of the band,
    but no longer than half the time from the low crossing to the first peak (a quarter of
    the oscillation period) or, without a peak, two rise times, so an oscillation keeps its
    amplitude; never shorter than ``rise``. ``rel``: noise sigma / |amplitude|. ``memo``
    receives each whole smoothing computed here, by span, for the caller to use again.
    """
    # The crossings and the first peak need the smoothed response only up to some rise
    # times past the raw samples' high crossing: smoothed that far first, and all the way
    # only when that was not far enough.
    above = np.flatnonzero((yg[g0:] - initial) / amp >= 0.9)
    reach = None if above.size == 0 else g0 + 8 * int(above[0]) + 16

    def crossings(window: int, stop: int | None = reach
                  ) -> tuple[FloatArray, FloatArray, float | None, float | None]:
        ts, ys, s0 = smoothed(tg, yg, g0, window, stop)
        r = (ys - initial) / amp
        lo_t, hi_t = first_crossing(ts, r, 0.1, s0), first_crossing(ts, r, 0.9, s0)
        cut = stop is not None and stop < tg.size and ts[-1] < tg[stop]
        if cut and (lo_t is None or hi_t is None or ts[-1] < lo_t + 6.0 * max(hi_t - lo_t, dt)):
            return crossings(window, None)
        if not cut and memo is not None:
            memo[window] = (ts, ys, s0)
        return ts, r, lo_t, hi_t

    rise_span = _span((1.5 * rel / 0.02) ** 2)
    ts, r, lo_t, hi_t = crossings(rise_span)
    for _ in range(3):
        if lo_t is None or hi_t is None:
            return rise_span, rise_span
        new = _span(0.4 * (hi_t - lo_t) / dt)
        if new == rise_span:
            break
        rise_span = new
        ts, r, lo_t, hi_t = crossings(rise_span)
    if lo_t is None or hi_t is None:
        return rise_span, rise_span
    rise = hi_t - lo_t
    i_lo = int(np.searchsorted(ts, lo_t))
    horizon = int(np.searchsorted(ts, lo_t + 6.0 * max(rise, dt)))
    i_pk = i_lo + int(np.argmax(r[i_lo:max(horizon, i_lo + 1)]))
    resid = rel * noise_gain(rise_span)
    if r[i_pk] - 1.0 > max(5.0 * resid, 1e-3):
        cap = 0.5 * (ts[i_pk] - lo_t) / dt
    else:
        cap = 2.0 * rise / dt
    wanted = (1.5 * rel / (0.1 * band)) ** 2
    return rise_span, max(rise_span, _span(min(wanted, cap)))
