"""Reference signals and reference measurements for the numerical-core tests.

Everything here is independent of livestep: the step responses are the textbook
closed forms written out below (Ogata, Modern Control Engineering, ch. 5, the
three damping cases) or scipy.signal simulations, and the reference figures are
computed on a dense grid of those curves, refined by root finding.
"""

from __future__ import annotations

import math
from collections.abc import Callable
from dataclasses import dataclass
from functools import lru_cache

import numpy as np
from numpy.typing import NDArray
from scipy import signal
from scipy.optimize import brentq

FloatArray = NDArray[np.float64]
Response = Callable[[FloatArray], FloatArray]

# Damping ratios used across the suite: underdamped, critically damped and over-damped,
# chosen away from the points where the exact 2 % settling time jumps (see jump_margin).
ZETAS = (0.2, 0.27, 0.35, 0.45, 0.6, 0.65, 0.85, 1.0, 1.5, 2.0, 3.0)
# For the noisy cases the lightest damping is 0.22 rather than 0.2: at zeta = 0.2 the sixth
# extremum of the response misses the 2 % band by only 7 % of the band (jump_margin 0.064).
NOISY_ZETAS = (0.22, 0.27, 0.35, 0.45, 0.6, 0.65, 0.85, 1.0, 1.5, 2.0, 3.0)
WN = 30.0  # rad/s: a rise time of tens of ms, so "a few ms of dead time" is a few % of it


def unit_step(t: FloatArray, zeta: float, wn: float) -> FloatArray:
    """Unit-step response of wn^2 / (s^2 + 2 zeta wn s + wn^2); zero for t <= 0.

    Ogata, Modern Control Engineering, ch. 5 (transient response of second-order systems):
    underdamped  1 - exp(-zeta wn t) / sqrt(1 - zeta^2) sin(wd t + acos zeta),
    critical     1 - (1 + wn t) exp(-wn t),
    over-damped  1 - (p2 exp(-p1 t) - p1 exp(-p2 t)) / (p2 - p1),
                 with p1,2 = wn (zeta -+ sqrt(zeta^2 - 1)).
    """
    t = np.asarray(t, dtype=float)
    tp = np.maximum(t, 0.0)
    if zeta < 1.0:
        b = math.sqrt(1.0 - zeta * zeta)
        y = 1.0 - np.exp(-zeta * wn * tp) / b * np.sin(wn * b * tp + math.acos(zeta))
    elif zeta == 1.0:
        y = 1.0 - (1.0 + wn * tp) * np.exp(-wn * tp)
    else:
        r = math.sqrt(zeta * zeta - 1.0)
        p1, p2 = wn * (zeta - r), wn * (zeta + r)
        y = 1.0 - (p2 * np.exp(-p1 * tp) - p1 * np.exp(-p2 * tp)) / (p2 - p1)
    return np.where(t > 0.0, y, 0.0)


def overshoot_closed_form(zeta: float) -> float:
    """Percent overshoot 100 exp(-zeta pi / sqrt(1 - zeta^2)) (Ogata, ch. 5); 0 for zeta >= 1."""
    if zeta >= 1.0:
        return 0.0
    return 100.0 * math.exp(-zeta * math.pi / math.sqrt(1.0 - zeta * zeta))


def jump_margin(zeta: float, band: float) -> float:
    """Distance (|ln(ratio)|) between the band and the nearest extremum of the deviation.

    The k-th extremum of the underdamped response deviates from 1 by OS^k (OS as a
    fraction; Ogata, ch. 5). Where one of them equals the band the exact settling time jumps
    by half a damped period, so a test case must keep clear of those damping ratios.
    """
    if zeta >= 1.0:
        return math.inf
    os = overshoot_closed_form(zeta) / 100.0
    margin, k = math.inf, 1
    while os**k > 0.1 * band:
        margin = min(margin, abs(math.log(os**k / band)))
        k += 1
    return margin


def _horizon(zeta: float, wn: float, band: float) -> float:
    """A time certainly past the settling time (1.5 x the decay bound, plus 10/wn)."""
    if zeta < 1.0:
        return 1.5 * -math.log(band * math.sqrt(1.0 - zeta * zeta)) / (zeta * wn) + 10.0 / wn
    p1 = wn * (zeta - math.sqrt(zeta * zeta - 1.0))
    return 1.5 * math.log(2.0 / band) / p1 + 10.0 / wn


@dataclass(frozen=True)
class Ref:
    """Reference figures of a unit step response (seconds from the input step; % of 1)."""

    t_lo: float
    t_hi: float
    rise: float
    t50: float
    t100: float | None  # first time the response reaches 1 (underdamped only)
    peak_time: float | None
    overshoot: float
    settling: float


@lru_cache(maxsize=256)
def reference(zeta: float, wn: float, lo: float = 0.1, hi: float = 0.9,
              band: float = 0.02) -> Ref:
    """Exact reference figures of the closed-form response ``unit_step``.

    A dense grid (200 001 points to past the settling time) brackets each event and
    brentq refines it to ~1e-14 s: first crossings of ``lo``, ``hi``, 0.5 and 1, and the
    last exit from the band 1 +- ``band``. Peak time pi/wd and overshoot are Ogata's closed
    forms (ch. 5); the grid maximum is checked against them in test_second_order.
    """

    def f(s: float) -> float:
        return float(unit_step(np.array(s), zeta, wn))

    x = np.linspace(0.0, _horizon(zeta, wn, band), 200_001)
    y = unit_step(x, zeta, wn)

    def cross(level: float) -> float | None:
        above = np.flatnonzero(y >= level)
        if above.size == 0:
            return None
        i = int(above[0])
        return brentq(lambda s: f(s) - level, x[i - 1], x[i], xtol=1e-15)

    out = np.flatnonzero(np.abs(y - 1.0) > band)
    j = int(out[-1])
    edge = 1.0 + band if y[j] > 1.0 else 1.0 - band
    ts = brentq(lambda s: f(s) - edge, x[j], x[j + 1], xtol=1e-15)
    t_lo, t_hi, t50 = cross(lo), cross(hi), cross(0.5)
    assert t_lo is not None and t_hi is not None and t50 is not None
    if zeta < 1.0:
        peak_time = math.pi / (wn * math.sqrt(1.0 - zeta * zeta))
        t100 = cross(1.0)
    else:
        peak_time = t100 = None
    return Ref(t_lo=t_lo, t_hi=t_hi, rise=t_hi - t_lo, t50=t50, t100=t100,
               peak_time=peak_time, overshoot=overshoot_closed_form(zeta), settling=ts)


@dataclass(frozen=True)
class DenseRef:
    """Reference figures read from a dense simulated curve (seconds from the input step)."""

    rise: float
    t50: float
    peak_time: float
    overshoot: float
    undershoot: float
    settling: float


def dense_reference(t: FloatArray, y: FloatArray, lo: float = 0.1, hi: float = 0.9,
                    band: float = 0.02) -> DenseRef:
    """Figures of a dense normalised curve (0 -> 1): crossings and the last band exit by
    linear interpolation between grid points, peak at the grid maximum, undershoot as the
    most negative value before the 50 % crossing (IEEE Std 181 style definitions)."""

    def cross(level: float) -> float:
        i = int(np.flatnonzero(y >= level)[0])
        return float(t[i - 1] + (level - y[i - 1]) / (y[i] - y[i - 1]) * (t[i] - t[i - 1]))

    out = np.flatnonzero(np.abs(y - 1.0) > band)
    j = int(out[-1])
    edge = 1.0 + band if y[j] > 1.0 else 1.0 - band
    ts = float(t[j] + (edge - y[j]) / (y[j + 1] - y[j]) * (t[j + 1] - t[j]))
    t50 = cross(0.5)
    i_pk = int(np.argmax(y))
    before = y[t <= t50]
    return DenseRef(rise=cross(hi) - cross(lo), t50=t50, peak_time=float(t[i_pk]),
                    overshoot=max(0.0, 100.0 * (float(y[i_pk]) - 1.0)),
                    undershoot=max(0.0, -100.0 * float(before.min())), settling=ts)


def scipy_step(num: list[float], den: list[float], t_end: float,
               n: int = 200_001) -> tuple[FloatArray, FloatArray]:
    """Unit-step response of num/den simulated by scipy.signal.step on a dense uniform grid."""
    t = np.linspace(0.0, t_end, n)
    _, y = signal.step(signal.TransferFunction(num, den), T=t)
    return t, np.asarray(y, dtype=float)


def interpolated(t_dense: FloatArray, y_dense: FloatArray) -> Response:
    """A response function from a dense simulated curve: zero before 0, last value after."""
    return lambda s: np.interp(s, t_dense, y_dense, left=0.0, right=float(y_dense[-1]))


@dataclass(frozen=True)
class StepRecord:
    """One synthetic step as livestep receives it (seconds, feedback units)."""

    t: FloatArray
    y: FloatArray
    sp: FloatArray
    i_step: int
    sp_before: float
    sp_after: float
    t_step: float
    dt: float
    initial: float
    final: float

    @property
    def amplitude(self) -> float:
        return self.final - self.initial


def make_step(
    zeta: float = 0.5,
    wn: float = WN,
    *,
    dt: float,
    t_window: float,
    n_pre: int = 300,
    y0: float = 0.0,
    sp_change: float = 1.0,
    gain: float = 1.0,
    sp_before: float | None = None,
    dead_time: float = 0.0,
    t0: float = 0.0,
    noise: float = 0.0,
    quantum: float = 0.0,
    jitter: float = 0.0,
    drop: float = 0.0,
    seed: int = 0,
    response: Response | None = None,
) -> StepRecord:
    """A sampled closed-loop step: ``n_pre`` samples before the step, then ``t_window`` s.

    feedback = y0 + gain * sp_change * response(t - t_step - dead_time), with
    ``response`` the closed form ``unit_step`` unless given (e.g. a scipy.signal curve).
    ``noise``: Gaussian rms and ``quantum``: quantisation step, both as fractions of the
    feedback amplitude. ``jitter``: each sample interval is dt (1 + U(-jitter, jitter)).
    ``drop``: fraction of samples removed at random (never the step-instant sample, which
    defines the reference instant). The setpoint column steps at ``t_step``.
    """
    rng = np.random.default_rng(seed)
    n = n_pre + int(math.ceil(t_window / dt)) + 1
    steps = dt * (1.0 + jitter * rng.uniform(-1.0, 1.0, n - 1))
    t = t0 + np.concatenate([[0.0], np.cumsum(steps)])
    t_step = float(t[n_pre])
    resp = response if response is not None else (lambda s: unit_step(s, zeta, wn))
    amp = gain * sp_change
    y = y0 + amp * resp(t - t_step - dead_time)
    if noise:
        y = y + noise * abs(amp) * rng.standard_normal(n)
    if quantum:
        q = quantum * abs(amp)
        y = q * np.round(y / q)
    spb = y0 if sp_before is None else sp_before
    sp = np.where(np.arange(n) >= n_pre, spb + sp_change, spb)
    keep = np.ones(n, dtype=bool)
    if drop:
        keep = rng.uniform(size=n) >= drop
        keep[n_pre] = True
    i_step = int(np.count_nonzero(keep[:n_pre]))
    return StepRecord(t=t[keep], y=y[keep], sp=sp[keep], i_step=i_step, sp_before=spb,
                      sp_after=spb + sp_change, t_step=t_step, dt=dt, initial=y0,
                      final=y0 + amp)


def sampled_for(zeta: float, wn: float = WN, *, per_rise: int = 120, settle_factor: float = 2.5,
                extra: float = 0.0, **kw) -> tuple[StepRecord, Ref]:
    """A step sampled at ``per_rise`` samples per 10-90 % rise, with a window of
    ``settle_factor`` exact 2 % settling times (plus ``extra`` s), and its reference."""
    ref = reference(zeta, wn)
    rec = make_step(zeta, wn, dt=ref.rise / per_rise,
                    t_window=settle_factor * ref.settling + extra, **kw)
    return rec, ref


# Impairments of the acceptance criteria (fractions of the feedback amplitude).
BENCH = dict(noise=1e-3, quantum=1e-3, jitter=0.25, drop=0.02)  # + a few ms of dead time
HEAVY = dict(noise=1e-2)
# Noise realisations per impaired case: every case runs on all of them (no seed picking).
NOISE_SEEDS = (1, 2, 3, 4, 5, 6)


def lsim_staircase(zeta: float, levels: list[float], *, rate: float, hold: float = 1.5,
                   wn: float = 30.0, noise: float = 0.0,
                   seed: int = 0) -> tuple[FloatArray, FloatArray, FloatArray]:
    """(t, setpoint, feedback): the setpoint held at each of ``levels`` for ``hold`` s, the
    loop wn^2 / (s^2 + 2 zeta wn s + wn^2) simulated by scipy.signal.lsim (a reference
    outside the project), white noise of sigma ``noise`` on the feedback."""
    n = int(hold * rate)
    t = np.arange(n * len(levels)) / rate
    sp = np.repeat(levels, n).astype(float)
    sys_ = signal.TransferFunction([wn * wn], [1.0, 2 * zeta * wn, wn * wn])
    _, y, _ = signal.lsim(sys_, sp - sp[0], t)
    return t, sp, sp[0] + y + np.random.default_rng(seed).normal(0, noise, t.size)
