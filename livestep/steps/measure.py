"""Time-domain step-response measurements on sampled, possibly noisy data.

Pure functions: arrays in, a frozen :class:`StepMetrics` out. Definitions
(times in seconds from the step instant ``t_step``, percentages of the step
amplitude ``|final - initial|``):

- levels: ``initial`` and ``final`` are robust levels (10 % trimmed means) of the
  feedback before the step and over the settled tail. IEEE Std 181 defines the
  two state levels of a transition the same way, from the data (histogram or
  mean), and normalises every reference level by the amplitude between them.
- ``rise_time``: first crossing of the low reference level (10 %) to the first
  crossing of the high one (90 %); ``delay_time``: first crossing of 50 %.
  Crossings are interpolated linearly between samples, as IEEE Std 181 does for
  reference-level instants. 10-90 % rise time is the control-textbook
  convention (Franklin, Powell & Emami-Naeini; Dorf & Bishop).
- ``peak_time`` / ``peak``: the largest excursion in the step's direction,
  refined between samples by a parabola through the three samples around it;
  ``overshoot_pct`` = 100 (peak - final) / |amplitude| (Ogata's maximum
  overshoot, normalised by the amplitude rather than the final value so steps
  that end near zero behave); ``undershoot_pct``: the largest motion against
  the step's direction before the 50 % instant.
- ``settling_time``: the last exit from the band final +- band % of |amplitude|
  (Ogata: "the time required for the response curve to reach and stay within a
  range about the final value"). IEEE Std 181 times its settling duration from
  the 50 % instant; livestep times it from the step instant, as control
  practice does.
- ``steady_state_error`` = setpoint after - final; ``iae``, ``ise``, ``itae``:
  integrals over the window of |e|, e^2 and (t - t_step)|e| with
  e = setpoint - feedback, by the trapezoid rule on the real timestamps.

Noise: the response is put on a uniform grid at the median sample period (by
linear interpolation on the real timestamps, which also bridges dropped
samples) and, when noise is significant against the settling band, smoothed by
a zero-phase Savitzky-Golay filter (cubic) whose length is kept short against
the rise time, so crossings and the peak are not biased while the residual
noise stays well inside the band.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field

import numpy as np
from numpy.typing import NDArray

from livestep.steps.smoothing import (
    Smoothed,
    choose_spans,
    first_crossing,
    noise_gain,
    smoothed,
)

__all__ = ["MeasureSettings", "StepMetrics", "measure_step", "noise_sigma", "robust_level",
           "without_figures"]

FloatArray = NDArray[np.float64]


@dataclass(frozen=True, kw_only=True)
class MeasureSettings:
    """Measurement options.

    ``rise_levels``: low and high reference levels, percent of the amplitude.
    ``settling_band``: half-width of the settling band, percent of |amplitude|.
    """

    rise_levels: tuple[float, float] = (10.0, 90.0)
    settling_band: float = 2.0

    def __post_init__(self) -> None:
        lo, hi = self.rise_levels
        if not 0.0 < lo < hi < 100.0:
            raise ValueError(f"rise levels must satisfy 0 < LO < HI < 100, got {lo},{hi}")
        if not 0.0 < self.settling_band < 50.0:
            raise ValueError(f"settling band must be between 0 and 50 %, got {self.settling_band}")


@dataclass(frozen=True, kw_only=True)
class StepMetrics:
    """Measured figures of one step. Times in seconds from ``t_step``; levels in
    feedback units; ``*_pct`` in percent of |amplitude| (``steady_state_error_pct``
    in percent of the setpoint change). ``None`` where a value is undefined."""

    t_step: float
    direction: str
    setpoint_before: float | None
    setpoint_after: float | None
    initial: float
    final: float
    amplitude: float
    rise_time: float | None
    delay_time: float | None
    peak_time: float | None
    peak: float | None
    overshoot_pct: float
    undershoot_pct: float
    settling_time: float | None
    settled: bool
    steady_state_error: float | None
    steady_state_error_pct: float | None
    iae: float | None
    ise: float | None
    itae: float | None
    noise_sigma: float
    sample_period: float
    smoothing_samples: int
    warnings: tuple[str, ...] = field(default=())
    #: First crossing of the low rise reference level, seconds from ``t_step`` (plots).
    rise_start: float | None = None


def without_figures(*, t_step: float, direction: str, setpoint_before: float | None,
                    setpoint_after: float | None, initial: float, final: float,
                    steady_state_error: float | None, noise_sigma: float,
                    sample_period: float, smoothing_samples: int,
                    warnings: tuple[str, ...]) -> StepMetrics:
    """The metrics of a step that has no response to measure (or could not be measured):
    its instant, setpoints and levels, every figure ``None``, ``warnings`` saying why."""
    return StepMetrics(
        t_step=t_step, direction=direction, setpoint_before=setpoint_before,
        setpoint_after=setpoint_after, initial=initial, final=final,
        amplitude=final - initial, rise_time=None, delay_time=None, peak_time=None,
        peak=None, overshoot_pct=0.0, undershoot_pct=0.0, settling_time=None, settled=False,
        steady_state_error=steady_state_error, steady_state_error_pct=None, iae=None,
        ise=None, itae=None, noise_sigma=noise_sigma, sample_period=sample_period,
        smoothing_samples=smoothing_samples, warnings=warnings)


def line_slope(t: FloatArray, y: FloatArray) -> float:
    """Slope of the least-squares straight line through (t, y), y's units per second:
    sum((t - mean t)(y - mean y)) / sum((t - mean t)^2); zero for fewer than 2 points."""
    if t.size < 2:
        return 0.0
    tc = t - t.mean()
    den = float(np.dot(tc, tc))
    return float(np.dot(tc, y - y.mean())) / den if den > 0.0 else 0.0


def robust_level(x: FloatArray) -> float:
    """Robust level of a stretch of samples: the 10 % trimmed mean (same units as ``x``),
    the mean of what is left after cutting the lowest and highest 10 % of the samples."""
    n = x.size
    cut = int(0.1 * n)
    if cut == 0:
        return float(np.mean(x))
    part = np.partition(x, (cut, n - cut - 1))
    return float(np.mean(part[cut:n - cut]))


def noise_sigma(x: FloatArray) -> float:
    """Noise standard deviation from first differences (same units as ``x``).

    Differencing removes a slow drift; sigma = 1.4826 MAD(diff) / sqrt(2). When
    more than half of the differences are zero (quantised, nearly quiet data)
    the MAD is zero and the plain standard deviation of the differences is used.
    """
    if x.size < 3:
        return 0.0
    d = np.diff(x)
    mad = float(np.median(np.abs(d - np.median(d))))
    if mad > 0.0:
        return 1.4826 * mad / math.sqrt(2.0)
    return float(np.std(d)) / math.sqrt(2.0)


def _parabolic_peak(tg: FloatArray, y: FloatArray, i: int) -> tuple[float, float]:
    """Vertex of the parabola through samples i-1, i, i+1 of a uniform grid."""
    if i <= 0 or i >= y.size - 1:
        return float(tg[i]), float(y[i])
    ym, y0, yp = y[i - 1], y[i], y[i + 1]
    denom = ym - 2.0 * y0 + yp
    if denom >= 0.0:
        return float(tg[i]), float(y0)
    delta = 0.5 * (ym - yp) / denom
    dt = tg[1] - tg[0]
    return float(tg[i] + delta * dt), float(y0 - 0.25 * (ym - yp) * delta)


def _trapezoid(y: FloatArray, x: FloatArray) -> float:
    """Integral of y over x by the trapezoid rule."""
    return float(np.sum(0.5 * (y[1:] + y[:-1]) * np.diff(x)))


def _settling(tg: FloatArray, r: FloatArray, start: int, band: float) -> tuple[float | None, int]:
    """Time of the last exit from |r - 1| <= band, and its grid index (-1 if never settled)."""
    outside = np.flatnonzero(np.abs(r[start:] - 1.0) > band)
    if outside.size == 0:
        return float(tg[start]), start
    j = start + int(outside[-1])
    if j >= r.size - 1:
        return None, -1
    edge = 1.0 + band if r[j] > 1.0 else 1.0 - band
    t = tg[j] + (edge - r[j]) / (r[j + 1] - r[j]) * (tg[j + 1] - tg[j])
    return float(t), j + 1


def measure_step(
    t: FloatArray,
    feedback: FloatArray,
    i_step: int,
    *,
    setpoint: FloatArray | None = None,
    setpoint_before: float | None = None,
    setpoint_after: float | None = None,
    pre_start: int = 0,
    settings: MeasureSettings = MeasureSettings(),
    level: tuple[float, float] | None = None,
) -> StepMetrics:
    """Measure one step response.

    ``t`` (seconds, strictly increasing) and ``feedback`` cover the stretch used
    for the initial level, ``[pre_start, i_step)``, then the step window
    ``[i_step, end)``; ``t[i_step]`` is the step instant. ``setpoint`` (same
    length) is needed for the error integrals. ``level``: the initial level and noise
    sigma of that stretch, when already known (:func:`robust_level`, :func:`noise_sigma`
    of it), so a window measured again as it grows does not compute them again.
    """
    warnings: list[str] = []
    t = np.asarray(t, dtype=float)
    y = np.asarray(feedback, dtype=float)
    t_step = float(t[i_step])
    pre = y[pre_start:i_step]
    if pre.size < 3:
        warnings.append("fewer than 3 samples before the step: initial level is uncertain")
        pre = y[max(0, i_step - 3): i_step + 1]
        level = None
    initial, sigma = level if level is not None else (robust_level(pre), noise_sigma(pre))

    post_t = t[i_step:]
    dt = float(np.median(np.diff(post_t))) if post_t.size > 1 else 0.0
    span = float(post_t[-1] - t_step) if post_t.size else 0.0

    sp_change = None
    if setpoint_before is not None and setpoint_after is not None:
        sp_change = setpoint_after - setpoint_before

    # Uniform grid aligned on the step instant, covering the stretch before and the window.
    t0 = t[pre_start]
    if dt > 0:
        k0 = -int(math.floor((t_step - t0) / dt))
        k1 = int(math.floor(span / dt))
        tg = t_step + dt * np.arange(k0, k1 + 1)
    else:
        tg = post_t.copy()
    yg = np.interp(tg, t, y)
    g0 = int(np.searchsorted(tg, t_step))

    def tail_final(from_time: float) -> float:
        sel = y[i_step:][post_t >= from_time]
        if sel.size < 10:
            sel = y[-max(10, (y.size - i_step) // 5):]
        return robust_level(sel)

    tail_from = t_step + 0.8 * span
    final = tail_final(tail_from)
    amp = final - initial
    band = settings.settling_band / 100.0
    w_rise = w_shape = 1
    memo: dict[int, Smoothed] = {}  # the smoothings choose_spans made, by span
    if abs(amp) >= 5.0 * sigma and sigma > 1e-6 * abs(amp) and dt > 0:
        w_rise, w_shape = choose_spans(tg, yg, g0, initial, amp, sigma / abs(amp), band, dt,
                                       memo)
    # for the reference-level crossings, and for the peak and the settling band
    tr, yr, r0 = memo.get(w_rise) or smoothed(tg, yg, g0, w_rise)
    tsh, ys, s0 = (tr, yr, r0) if w_shape == w_rise else (
        memo.get(w_shape) or smoothed(tg, yg, g0, w_shape))
    for _ in range(3):
        amp = final - initial
        if amp == 0.0 or abs(amp) < 5.0 * sigma:
            break
        settle_t, _ = _settling(tsh, (ys - initial) / amp, s0, band)
        if settle_t is None:
            break
        tail_from = max(t_step + 0.8 * span, 0.5 * (settle_t + post_t[-1]))
        new_final = tail_final(tail_from)
        if new_final == final:
            break
        final = new_final

    amp = final - initial
    direction = "up" if (sp_change if sp_change else amp) >= 0 else "down"
    still = amp == 0.0 or abs(amp) < 5.0 * sigma
    if still:
        warnings.append("the feedback did not move measurably: no response to measure")
    elif sp_change and amp / sp_change < 0.01:
        # Against the setpoint, or by less than 1 % of its change (a window that ends
        # inside the dead time): what moved is not a response to this step.
        still = True
        warnings.append(f"the feedback did not follow the setpoint change (it moved"
                        f" {100.0 * amp / sp_change:.2g} % of it): no response to measure")
    if still:
        return without_figures(
            t_step=t_step, direction=direction, setpoint_before=setpoint_before,
            setpoint_after=setpoint_after, initial=initial, final=final,
            steady_state_error=None if setpoint_after is None else setpoint_after - final,
            noise_sigma=sigma, sample_period=dt, smoothing_samples=w_shape,
            warnings=tuple(warnings))

    r_rise = (yr - initial) / amp
    r = (ys - initial) / amp
    rel = sigma / abs(amp)
    resid = rel * noise_gain(w_shape)
    lo, hi = (x / 100.0 for x in settings.rise_levels)
    t_lo = first_crossing(tr, r_rise, lo, r0)
    t_hi = first_crossing(tr, r_rise, hi, r0)
    t_50 = first_crossing(tr, r_rise, 0.5, r0)
    rise = None if t_lo is None or t_hi is None else t_hi - t_lo
    delay = None if t_50 is None else t_50 - t_step
    if rise is not None and dt > 0 and rise < 2.0 * dt:
        warnings.append(f"the rise spans fewer than 2 samples: rise time {rise * 1e3:.3g} ms"
                        f" is known only to about a sample period ({dt * 1e3:.3g} ms)")

    i_pk = s0 + int(np.argmax(r[s0:]))
    peak_time = peak = None
    overshoot = 0.0
    if i_pk < r.size - 1:
        tp, rp = _parabolic_peak(tsh, r, i_pk)
        if rp - 1.0 > max(5.0 * resid, 1e-3):
            peak_time, peak = tp - t_step, initial + rp * amp
            overshoot = 100.0 * (rp - 1.0)

    i_50 = int(np.searchsorted(tr, t_50)) if t_50 is not None else r_rise.size
    undershoot = max(0.0, -100.0 * float(np.min(r_rise[r0:max(i_50, r0 + 1)])))
    if undershoot <= 100.0 * max(5.0 * rel * noise_gain(w_rise), 1e-3):
        undershoot = 0.0

    settle_t, _ = _settling(tsh, r, s0, band)
    settled = False
    settling_time = None
    if settle_t is not None:
        # In the band for at least one rise time (common practice, no source), 10 samples,
        # 5 % of the window and, when the next extremum after the first peak may still be
        # outside the band, the time from the low crossing to the peak (about half a period:
        # past the next extremum). Each extremum of a second-order response is the one
        # before it times the overshoot fraction (Ogata, the log decrement), so that is
        # when the overshoot squared exceeds the band, ...
        swing = (0.0 if peak_time is None or t_lo is None or (overshoot / 100.0) ** 2 <= band
                 else peak_time - (t_lo - t_step))
        hold = max(10.0 * dt, 0.05 * span, rise or 0.0, swing)
        # ... and the tail that gives the final level not still moving (a straight line
        # fitted to it drifts by less than the band's half-width over the tail).
        sel = post_t >= tail_from
        drift = 0.0
        if np.count_nonzero(sel) >= 10:
            tt = post_t[sel] - post_t[sel][0]
            drift = abs(line_slope(tt, y[i_step:][sel])) * float(tt[-1])
        if tg[-1] - settle_t >= hold and drift <= band * abs(amp):
            settled, settling_time = True, settle_t - t_step
    if not settled:
        warnings.append("the window ended before the response settled inside the band")
    if sigma > 0.5 * band * abs(amp):
        warnings.append(
            f"noise sigma is {100 * sigma / abs(amp):.2g} % of the amplitude, large against the"
            f" +-{settings.settling_band:g} % settling band; measured on a response smoothed over"
            f" {w_shape} samples")

    sse = sse_pct = iae = ise = itae = None
    if setpoint_after is not None:
        sse = setpoint_after - final
        if sp_change:
            sse_pct = 100.0 * sse / sp_change
    if setpoint is not None and post_t.size > 1:
        e = np.abs(np.asarray(setpoint, dtype=float)[i_step:] - y[i_step:])
        iae = _trapezoid(e, post_t)
        ise = _trapezoid(e * e, post_t)
        itae = _trapezoid((post_t - t_step) * e, post_t)

    return StepMetrics(
        t_step=t_step, direction=direction, setpoint_before=setpoint_before,
        setpoint_after=setpoint_after, initial=initial, final=final, amplitude=amp,
        rise_time=rise, delay_time=delay, peak_time=peak_time, peak=peak,
        overshoot_pct=overshoot, undershoot_pct=undershoot, settling_time=settling_time,
        settled=settled, steady_state_error=sse, steady_state_error_pct=sse_pct, iae=iae,
        ise=ise, itae=itae, noise_sigma=sigma, sample_period=dt, smoothing_samples=w_shape,
        warnings=tuple(warnings), rise_start=None if t_lo is None else t_lo - t_step)
