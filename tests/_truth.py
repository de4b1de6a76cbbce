"""Random closed-loop step scenarios and their exact truth, independent of livestep.

A scenario is one recording (timestamps, setpoint, feedback) of a closed loop whose
setpoint steps several times between levels. The loop from setpoint to feedback is
linear: a second-order system wn^2 / (s^2 + 2 zeta wn s + wn^2), sometimes times a third
real pole p3 / (s + p3), both at unit DC gain, preceded by a dead time and scaled by a loop
gain K about the starting point. Every noise-free sample is a closed form:

- second order: the three damping cases of Ogata, Modern Control Engineering, ch. 5
  (underdamped, critically damped, over-damped);
- with the third pole: the partial-fraction expansion of the step response, residues
  written out in :meth:`Plant.step`;
- several steps: superposition of the delayed step responses of each setpoint change
  (the system is linear).

The truth of each step is read off the exact response of that step in isolation (from
the exact asymptotic levels before and after it) by root finding (scipy.optimize.brentq)
on a dense grid, never from livestep. Each figure comes with a tolerance interval, see
:func:`_step_truth` for the rule and its justification.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field

import numpy as np
from numpy.typing import NDArray
from scipy.optimize import brentq, minimize_scalar

FloatArray = NDArray[np.float64]

# -- the drawn ranges -------------------------------------------------------------------------
RATE_RANGE = (200.0, 20_000.0)  # Hz, log-uniform
RISE_SAMPLES_RANGE = (5.0, 300.0)  # exact 10-90 % rise time in sample periods, log-uniform
ZETA_RANGE = (0.1, 1.8)  # uniform
HOLD_RANGE = (1.5, 40.0)  # exact 2 % settling times (dead time included), log-uniform
AMP_RANGE = (0.01, 1000.0)  # setpoint step scale, log-uniform
GAIN_RANGE = (0.95, 1.02)  # loop gain K, uniform
POLE_RANGE = (1.5, 10.0)  # third pole p3 = a zeta wn, a uniform
NOISE_RANGE = (1e-4, 1e-2)  # noise sigma / smallest feedback amplitude, log-uniform
LSB_BITS = (8.0, 16.0)  # quantisation LSB = smallest amplitude / 2^bits, bits uniform
JITTER_MAX = 0.25  # sample-time jitter, fraction of the period
DROP_RATE = 0.01  # fraction of samples removed when a scenario drops samples
MIN_HOLD_SAMPLES = 50  # a level needs tens of samples (common practice, no source)

# -- the tolerance rule (see _step_truth) ----------------------------------------------------
BAND = 0.02  # settling band, fraction of |amplitude|
NOISE_C = 2.5  # noise sigmas a sound reading of a level may be off by
FIXED = 0.003  # fixed part of delta, fraction of |amplitude|
DETECT = 3.0  # an overshoot below DETECT * delta may be reported as none
LEVEL_SHARE = 0.2  # levels are read from the last 20 % of a hold
SETTLED_SHARE = 2.0 / 3.0  # "settled" required when in the band for the last third of the
#                           window (common practice, no source)

NOISE_CLASSES = ("none", "quantised", "noise <=0.1%", "noise 0.1-1%")


def _loguniform(rng: np.random.Generator, lo: float, hi: float) -> float:
    return float(math.exp(rng.uniform(math.log(lo), math.log(hi))))


# -- the closed forms -------------------------------------------------------------------------
@dataclass(frozen=True)
class Plant:
    """Setpoint-to-feedback response at unit DC gain: wn^2 / (s^2 + 2 zeta wn s + wn^2),
    times p3 / (s + p3) when ``p3`` (rad/s) is given. ``wn`` in rad/s."""

    zeta: float
    wn: float
    p3: float | None = None

    def tf(self) -> tuple[list[float], list[float]]:
        """Numerator and denominator polynomials (descending powers of s)."""
        z, w = self.zeta, self.wn
        den2 = [1.0, 2.0 * z * w, w * w]
        if self.p3 is None:
            return [w * w], den2
        return [w * w * self.p3], list(np.polymul(den2, [1.0, self.p3]))

    def second_order_poles(self) -> tuple[float, float] | None:
        """Magnitudes p1 < p2 of the real second-order poles (over-damped), else None."""
        if self.zeta <= 1.0:
            return None
        r = math.sqrt(self.zeta * self.zeta - 1.0)
        return self.wn * (self.zeta - r), self.wn * (self.zeta + r)

    def step(self, tau: FloatArray | float) -> FloatArray:
        """Unit-step response at ``tau`` seconds after the input step; 0 for tau <= 0."""
        tau = np.asarray(tau, dtype=float)
        tp = np.maximum(tau, 0.0)
        z, w = self.zeta, self.wn
        critical = abs(z - 1.0) < 1e-9
        if self.p3 is None:
            # Ogata, Modern Control Engineering, ch. 5 (unit-step response, three cases).
            if critical:
                y = 1.0 - (1.0 + w * tp) * np.exp(-w * tp)
            elif z < 1.0:
                b = math.sqrt(1.0 - z * z)
                y = 1.0 - np.exp(-z * w * tp) / b * np.sin(w * b * tp + math.acos(z))
            else:
                p1, p2 = self.second_order_poles()  # type: ignore[misc]
                y = 1.0 - (p2 * np.exp(-p1 * tp) - p1 * np.exp(-p2 * tp)) / (p2 - p1)
            return np.where(tau > 0.0, y, 0.0)
        # Partial-fraction expansion of the step response Y(s) = wn^2 p / (s Q(s) (s + p)),
        # Q(s) = s^2 + 2 zeta wn s + wn^2:  Y = 1/s + R3/(s + p) + (B s + C)/Q(s), with
        #   R3 = residue at s = -p = -wn^2 / Q(-p),  Q(-p) = p^2 - 2 zeta wn p + wn^2,
        #   B  = -1 - R3                         (s^3 coefficient of the numerator identity),
        #   C  = -(wn^2 + 2 zeta wn p + R3 wn^2) / p   (s^1 coefficient).
        # (B s + C)/Q(s) = (B (s + a) + (C - B a)) / Q(s) inverts by the same three cases.
        p = self.p3
        q = p * p - 2.0 * z * w * p + w * w
        r3 = -w * w / q
        bb = -1.0 - r3
        cc = -(w * w + 2.0 * z * w * p + r3 * w * w) / p
        if critical:
            second = np.exp(-w * tp) * (bb + (cc - bb * w) * tp)
        elif z < 1.0:
            sig, wd = z * w, w * math.sqrt(1.0 - z * z)
            second = np.exp(-sig * tp) * (bb * np.cos(wd * tp) + (cc - bb * sig) / wd
                                          * np.sin(wd * tp))
        else:
            p1, p2 = self.second_order_poles()  # type: ignore[misc]
            m1 = (cc - bb * p1) / (p2 - p1)
            m2 = (cc - bb * p2) / (p1 - p2)
            second = m1 * np.exp(-p1 * tp) + m2 * np.exp(-p2 * tp)
        y = 1.0 + r3 * np.exp(-p * tp) + second
        return np.where(tau > 0.0, y, 0.0)

    def pf_coefficients(self) -> tuple[float, float, float]:
        """(R3, B, C) of the partial-fraction expansion (third pole only)."""
        assert self.p3 is not None
        z, w, p = self.zeta, self.wn, self.p3
        r3 = -w * w / (p * p - 2.0 * z * w * p + w * w)
        return r3, -1.0 - r3, -(w * w + 2.0 * z * w * p + r3 * w * w) / p

    def time_scale(self) -> float:
        """Shortest time constant of the response's modes, seconds (grid spacing)."""
        s = 1.0 / self.wn
        if self.zeta > 1.0:
            s = min(s, 1.0 / self.second_order_poles()[1])  # type: ignore[index]
        if self.p3 is not None:
            s = min(s, 1.0 / self.p3)
        return s


class Curve:
    """The unit-step response of a plant on a dense grid, with exact events found by
    brentq between grid points (about 1e-12 of the time scale)."""

    def __init__(self, plant: Plant, tau_max: float, points_per_scale: int = 60) -> None:
        self.plant = plant
        h = plant.time_scale() / points_per_scale
        if plant.zeta < 1.0:
            h = min(h, 2.0 * math.pi / (plant.wn * math.sqrt(1.0 - plant.zeta ** 2)) / 400.0)
        n = int(math.ceil(tau_max / h)) + 2
        self.tau = np.linspace(0.0, h * (n - 1), n)
        self.g = plant.step(self.tau)
        self.h = h

    def f(self, s: float) -> float:
        return float(self.plant.step(s))

    def _n(self, tau_end: float | None) -> int:
        if tau_end is None:
            return self.tau.size
        return int(np.searchsorted(self.tau, tau_end, side="right"))

    def _root(self, level: float, a: float, b: float) -> float:
        return float(brentq(lambda s: self.f(s) - level, a, b, xtol=1e-12 * self.h, rtol=1e-15))

    def first_crossing(self, level: float, tau_end: float | None = None) -> float | None:
        """First tau with g(tau) >= level (None if not within ``tau_end``)."""
        if level <= 0.0:
            return 0.0
        n = self._n(tau_end)
        above = np.flatnonzero(self.g[:n] >= level)
        if above.size == 0:
            return None
        i = int(above[0])
        return self._root(level, float(self.tau[i - 1]), float(self.tau[i]))

    def last_exit(self, band: float, tau_end: float) -> float | None:
        """Last exit from |g - 1| <= band within ``tau_end`` (None: band <= 0 or still
        outside at ``tau_end``)."""
        if band <= 0.0:
            return None
        n = self._n(tau_end)
        out = np.flatnonzero(np.abs(self.g[:n] - 1.0) > band)
        if out.size == 0:
            return 0.0
        j = int(out[-1])
        if j >= n - 1:
            return None
        edge = 1.0 + band if self.g[j] > 1.0 else 1.0 - band
        return self._root(edge, float(self.tau[j]), float(self.tau[j + 1]))

    def peak(self, tau_end: float) -> tuple[float, float, bool]:
        """(tau, value, interior) of the maximum of g over [0, tau_end]; ``interior`` is
        False when the maximum is at ``tau_end`` (no turning point inside)."""
        n = self._n(tau_end)
        k = int(np.argmax(self.g[:n]))
        if k >= n - 1:
            return float(tau_end), self.f(tau_end), False
        if k == 0:
            return 0.0, 0.0, False
        res = minimize_scalar(lambda s: -self.f(s), bounds=(self.tau[k - 1], self.tau[k + 1]),
                              method="bounded", options={"xatol": 1e-12 * self.h})
        return float(res.x), -float(res.fun), True

    def runs_at_or_above(self, level: float, tau_end: float) -> list[tuple[float, float]]:
        """Intervals of [0, tau_end] where g >= level, edges refined by brentq."""
        n = self._n(tau_end)
        m = self.g[:n] >= level
        if not m.any():
            return []
        d = np.diff(m.astype(np.int8))
        starts = list(np.flatnonzero(d == 1) + 1)
        ends = list(np.flatnonzero(d == -1))
        if m[0]:
            starts.insert(0, 0)
        if m[-1]:
            ends.append(n - 1)
        runs = []
        for a, b in zip(starts, ends, strict=True):
            ta = 0.0 if a == 0 else self._root(level, float(self.tau[a - 1]), float(self.tau[a]))
            if b == n - 1:
                tb = float(tau_end)
            else:
                tb = self._root(level, float(self.tau[b]), float(self.tau[b + 1]))
            runs.append((ta, tb))
        return runs


def rise_time(plant: Plant, lo: float = 0.1, hi: float = 0.9) -> float:
    """Exact lo-hi rise time of the unit-step response, seconds."""
    c = Curve(plant, settling_time(plant) + 5.0 * plant.time_scale())
    t_lo, t_hi = c.first_crossing(lo), c.first_crossing(hi)
    assert t_lo is not None and t_hi is not None
    return t_hi - t_lo


def settling_time(plant: Plant, band: float = BAND) -> float:
    """Exact time of the last exit from 1 +- band of the unit-step response, seconds."""
    # Slowest mode: decay rate of the envelope (Ogata ch. 5) or the slowest real pole.
    rates = [plant.zeta * plant.wn if plant.zeta < 1.0 else
             (plant.wn if plant.zeta == 1.0 else plant.second_order_poles()[0])]  # type: ignore[index]
    if plant.p3 is not None:
        rates.append(plant.p3)
    slow = min(rates)
    horizon = (math.log(1.0 / band) + 12.0) / slow  # far past the band for any residue here
    c = Curve(plant, horizon)
    ts = c.last_exit(band, horizon)
    assert ts is not None
    return ts


# -- scenarios ----------------------------------------------------------------------------------
@dataclass(frozen=True)
class TrueStep:
    """The exact truth of one step and its tolerance intervals. Times in seconds from the
    step instant ``t_step``; levels in feedback units; ``delta`` and ``*_rel`` as fractions
    of |amplitude|; overshoot in percent of |amplitude|."""

    index: int
    t_step: float
    window: float  # from the step instant to the last sample before the next step
    i_first: int  # index of the step-instant sample in the recording
    i_stop: int  # one past the window's last sample
    sp_before: float
    sp_after: float
    initial: float
    final: float
    hold_ts: float  # window length in exact 2 % settling times
    noise_rel: float
    lsb_rel: float
    residual_rel: float  # earlier steps' residue over this step's window
    level_rel: float  # how far the exact signal moves over the stretches levels come from
    delta: float
    slack: float  # seconds: half the longest gap between samples
    cut: bool  # the recording ends before this step settles
    rise: float
    rise_lo: float
    rise_hi: float
    overshoot: float
    overshoot_tol: float
    overshoot_detectable: bool
    peak_time: float | None
    peak_runs: tuple[tuple[float, float], ...]
    settling: float | None
    settle_lo: float
    settle_hi: float
    settled: bool | None  # None: either answer is right (see _step_truth)
    sse: float
    sse_tol: float

    @property
    def amplitude(self) -> float:
        return self.final - self.initial

    @property
    def noise_class(self) -> str:
        if self.noise_rel > 1e-3:
            return NOISE_CLASSES[3]
        if self.noise_rel > 0.0:
            return NOISE_CLASSES[2]
        return NOISE_CLASSES[1] if self.lsb_rel > 0.0 else NOISE_CLASSES[0]


@dataclass(frozen=True)
class Scenario:
    """One recording and its truth. Arrays: ``t`` (s), ``setpoint``, ``feedback`` and the
    noise-free ``clean`` feedback at the recorded instants (feedback units)."""

    seed: int
    rate: float  # Hz (nominal)
    rise_samples: float
    zeta: float
    wn: float
    pole_ratio: float | None  # a, p3 = a zeta wn
    gain: float
    dead_time: float  # s
    noise_frac: float  # sigma / smallest |amplitude|
    lsb_bits: float | None
    jitter: float  # fraction of the period
    drop: float  # fraction of samples removed
    cut: bool
    ts: float  # exact 2 % settling time from the step instant, dead time included, s
    t: FloatArray = field(repr=False)
    setpoint: FloatArray = field(repr=False)
    feedback: FloatArray = field(repr=False)
    clean: FloatArray = field(repr=False)
    steps: tuple[TrueStep, ...] = field(repr=False)

    @property
    def plant(self) -> Plant:
        p3 = None if self.pole_ratio is None else self.pole_ratio * self.zeta * self.wn
        return Plant(self.zeta, self.wn, p3)

    @property
    def dt(self) -> float:
        return 1.0 / self.rate

    def describe(self) -> str:
        """The parameters to reproduce and recognise the scenario, on one line."""
        pole = "-" if self.pole_ratio is None else f"{self.pole_ratio:.2f}"
        lsb = "-" if self.lsb_bits is None else f"2^-{self.lsb_bits:.1f}"
        return (f"seed={self.seed} rate={self.rate:.0f}Hz rise={self.rise_samples:.1f}smp "
                f"zeta={self.zeta:.3f} p3/(zeta wn)={pole} K={self.gain:.4f} "
                f"dead={self.dead_time * self.rate:.1f}smp noise={100 * self.noise_frac:.3g}% "
                f"lsb={lsb} jitter={self.jitter:.2f} drop={self.drop:.2f} "
                f"cut={'yes' if self.cut else 'no'} steps={len(self.steps)}")


def make_scenario(seed: int, **force: object) -> Scenario:
    """Draw a scenario from ``seed``.

    Mix: a third pole in 30 % of scenarios; 25 % noise-free, 20 % quantised only, 55 %
    noisy (30 % of those quantised too); jitter in 60 % (uniform up to JITTER_MAX);
    1 % of the samples dropped in 25 %; the recording cut before the last step's exact
    settling time in 20 % (between 0.5 and 0.95 of it). 2 to 6 steps of 0.5 to 1 times
    the scale, either sign, from a level up to +-10 scales. The step-instant samples are
    never dropped: the truth's time origin is their recorded time.

    ``force`` fixes drawn parameters by name: ``rate``, ``rise_samples``, ``zeta``, ``pole_ratio``
    (None: no third pole), ``gain``, ``dead_time`` (s), ``noise_frac``, ``lsb_bits``
    (None: no quantisation), ``jitter``, ``drop``, ``cut``, ``n_steps``, ``holds``
    (settling times per step), ``scale``."""
    rng = np.random.default_rng(seed)

    def draw(name: str, value: object) -> object:
        return force[name] if name in force else value

    rate = float(draw("rate", _loguniform(rng, *RATE_RANGE)))
    dt = 1.0 / rate
    rise_samples = float(draw("rise_samples", _loguniform(rng, *RISE_SAMPLES_RANGE)))
    zeta = float(draw("zeta", rng.uniform(*ZETA_RANGE)))
    a: float | None = None
    if rng.uniform() < 0.3:
        a = float(rng.uniform(*POLE_RANGE))
        p12 = Plant(zeta, 1.0).second_order_poles()
        # Keep the third pole 5 % away from a real second-order pole (a double pole would
        # need another closed form).
        while p12 is not None and min(abs(a * zeta - p) for p in p12) < 0.05 * a * zeta:
            a = float(rng.uniform(*POLE_RANGE))
    a = draw("pole_ratio", a)  # type: ignore[assignment]
    # wn so that the EXACT 10-90 % rise time is rise_samples periods: the response is a
    # function of wn * tau only (p3 scales with wn), so solve once at wn = 1 and scale.
    unit = Plant(zeta, 1.0, None if a is None else a * zeta)
    wn = rise_time(unit) / (rise_samples * dt)
    plant = Plant(zeta, wn, None if a is None else a * zeta * wn)
    rise = rise_samples * dt
    dead = float(draw("dead_time", rng.uniform(0.0, 2.0 * rise)))
    ts = dead + settling_time(unit) / wn
    gain = float(draw("gain", rng.uniform(*GAIN_RANGE)))
    n_steps = int(draw("n_steps", int(rng.integers(2, 7))))
    scale = float(draw("scale", _loguniform(rng, *AMP_RANGE)))
    sp0 = float(rng.uniform(-10.0, 10.0)) * scale
    changes = rng.choice([-1.0, 1.0], n_steps) * rng.uniform(0.5, 1.0, n_steps) * scale
    amp_min = gain * float(np.min(np.abs(changes)))
    kind = rng.uniform()
    noise_frac, bits = 0.0, None
    if kind < 0.25:
        pass
    elif kind < 0.45:
        bits = float(rng.uniform(*LSB_BITS))
    else:
        noise_frac = _loguniform(rng, *NOISE_RANGE)
        if rng.uniform() < 0.3:
            bits = float(rng.uniform(*LSB_BITS))
    noise_frac = float(draw("noise_frac", noise_frac))
    bits = draw("lsb_bits", bits)  # type: ignore[assignment]
    jitter = float(draw("jitter", rng.uniform(0.0, JITTER_MAX) if rng.uniform() < 0.6 else 0.0))
    drop = float(draw("drop", DROP_RATE if rng.uniform() < 0.25 else 0.0))
    cut = bool(draw("cut", rng.uniform() < 0.2))
    holds = np.asarray(draw("holds", [_loguniform(rng, *HOLD_RANGE) for _ in range(n_steps)]))

    # Sample grid: n_pre steady samples, then each step held as drawn (at least
    # MIN_HOLD_SAMPLES); a cut recording ends before the last step's exact settling time.
    n_pre = int(rng.integers(200, 1001))
    hold_n = np.maximum(np.ceil(holds * ts / dt), MIN_HOLD_SAMPLES).astype(int)
    k_steps = n_pre + np.concatenate([[0], np.cumsum(hold_n[:-1])])
    n_total = int(k_steps[-1] + hold_n[-1])
    if cut:
        lo = max(0.5 * ts, 40.0 * dt)
        hi = 0.95 * ts - dt  # jitter moves an instant by at most 0.25 dt
        if hi > lo:
            n_total = int(k_steps[-1] + math.floor(rng.uniform(lo, hi) / dt))
        else:
            cut = False
    t0 = float(rng.uniform(0.0, 1000.0))
    k = np.arange(n_total)
    t = t0 + (k + jitter * rng.uniform(-1.0, 1.0, n_total)) * dt
    keep = rng.uniform(size=n_total) >= drop if drop > 0 else np.ones(n_total, dtype=bool)
    keep[k_steps] = True  # the step instants define the truth's time origin
    keep[0] = True
    levels = sp0 + np.concatenate([[0.0], np.cumsum(changes)])
    sp = levels[np.searchsorted(k_steps, k, side="right")]
    t_steps = t[k_steps]
    # The loop sits on its setpoint at the start (y = sp0) and answers each setpoint
    # change with gain K: y = sp0 + K sum_j dSP_j g(t - t_j - dead).
    clean = np.full(n_total, sp0)
    for tj, dj in zip(t_steps, changes, strict=True):
        after = t > tj + dead
        clean[after] += gain * dj * plant.step(t[after] - tj - dead)
    y = clean.copy()
    sigma = noise_frac * amp_min
    if sigma > 0:
        y = y + sigma * rng.standard_normal(n_total)
    lsb = 0.0
    if bits is not None:
        lsb = amp_min / 2.0 ** bits
        y = lsb * np.round(y / lsb)
    t, sp, y, clean = t[keep], sp[keep], y[keep], clean[keep]
    i_steps = np.searchsorted(t, t_steps)
    gap = (1.0 + 2.0 * jitter) * dt * (2.0 if drop > 0 else 1.0)

    # One dense grid for the whole scenario's normalised response.
    win_max = float(max(t[-1] - t_steps[-1], np.max(np.diff(t_steps), initial=0.0)))
    curve = Curve(plant, max(win_max - dead, 0.0) + 10.0 * plant.time_scale())

    steps = []
    for i in range(n_steps):
        i0 = int(i_steps[i])
        i1 = int(i_steps[i + 1]) if i + 1 < n_steps else t.size
        prev_hold = (t_steps[i] - t_steps[i - 1]) if i else n_pre * dt
        steps.append(_step_truth(
            index=i, curve=curve, t=t, clean=clean, i0=i0, i1=i1, t_step=float(t_steps[i]),
            prev_hold=float(prev_hold), sp0=sp0, sp_before=float(levels[i]),
            sp_after=float(levels[i + 1]), gain=gain, dead=dead, sigma=sigma, lsb=lsb,
            slack=0.5 * gap, ts=ts, cut=cut and i == n_steps - 1))
    return Scenario(seed=seed, rate=rate, rise_samples=rise_samples, zeta=zeta, wn=wn,
                    pole_ratio=a, gain=gain, dead_time=dead, noise_frac=noise_frac,
                    lsb_bits=bits, jitter=jitter, drop=drop, cut=cut, ts=ts, t=t, setpoint=sp,
                    feedback=y, clean=clean, steps=tuple(steps))


def _step_truth(*, index: int, curve: Curve, t: FloatArray, clean: FloatArray, i0: int,
                i1: int, t_step: float, prev_hold: float, sp0: float, sp_before: float,
                sp_after: float, gain: float, dead: float, sigma: float, lsb: float,
                slack: float, ts: float, cut: bool) -> TrueStep:
    """Exact figures of one step and their tolerance intervals.

    Tolerance rule. A figure is right when it equals the exact figure of this step's
    isolated response for reference levels or band edges moved by at most

        delta = NOISE_C sigma/|A| + LSB/(2|A|) + FIXED + max(level_pre, level_tail) + residual

    (fractions of |A|), and its times are right within ``slack`` = half the longest gap
    between samples (0.5 period, plus the jitter, doubled where samples are dropped: a
    crossing known from the samples on either side of it). The terms:

    - NOISE_C = 2.5: a level or a smoothed sample read from Gaussian noise stays within
      2.5 sigma with about 99 % probability (two-sided normal quantile) and smoothing only
      narrows it; 2 would fail a sound reading about 1 time in 20 per feature.
    - LSB/2: rounding moves every sample by at most half an LSB (quantisation).
    - FIXED = 0.3 % of |A|: level estimates from a finite stretch, the peak refined from
      samples, rounding; it is 15 % of the 2 % settling band, so a figure off by more than
      that in level terms misleads a user checking a spec (common practice, no source).
    - level_pre, level_tail: how far the exact noise-free signal moves over the stretches
      a level is read from, the last LEVEL_SHARE (20 %) of the previous hold and of this
      step's window (common practice, no source): an average of a stretch lies within its
      range, so no measurement from the data can pin the level closer.
    - residual: the largest residue of earlier steps (not yet at their final values)
      inside this step's window; any perturbation bounded by e moves a first crossing, a
      last exit or a peak value exactly as moving the level by e would.

    Rise time: [t90(0.9-d) - t10(0.1+d), t90(0.9+d) - t10(0.1-d)] widened by ``slack``.
    Peak time: the times where the exact response is within 2 delta of its peak (a
    perturbation e moves the peak value by e, and the reading by e again), +- slack.
    Overshoot: exact +- 100 (delta (1 + OS) + the fall of the exact peak over +- slack); the
    (1 + OS) factor covers the amplitude in the denominator being off by delta. An exact
    overshoot below DETECT delta may be reported as none.
    Settling time: between the exact last exits from the bands 2 % + delta and 2 % - delta,
    +- slack (the latter is the end of the window when that band is never reached: the
    settling time jumps where an extremum touches the band, the interval spans the jump).
    Settled: True is required when the exact response is inside the 2 % - delta band for
    the last SETTLED_SHARE of the window; a cut step (recording ends before the exact 2 %
    settling time) must read False, or True with a settling time between the exact time it
    entered the 2 % + delta band for good (infinite horizon) and the end of the data, when
    that is before the end (delta here without level_tail: the final level of a cut step
    cannot be read from the data); otherwise either answer is right, True only with a
    time inside the interval.
    Steady-state error: exact +- delta |A|.
    """
    initial = sp0 + gain * (sp_before - sp0)
    final = sp0 + gain * (sp_after - sp0)
    amp = final - initial
    aa = abs(amp)
    window = float(t[i1 - 1] - t_step)
    tw = t[i0:i1]
    iso = initial + amp * curve.plant.step(tw - t_step - dead)
    residual = float(np.max(np.abs(clean[i0:i1] - iso))) / aa
    pre = (t >= t_step - LEVEL_SHARE * prev_hold) & (t < t_step)
    level_pre = float(np.max(np.abs(clean[pre] - initial), initial=0.0)) / aa
    tail = tw >= t_step + (1.0 - LEVEL_SHARE) * window
    level_tail = float(np.max(np.abs(iso[tail] - final), initial=0.0)) / aa
    base = NOISE_C * sigma / aa + 0.5 * lsb / aa + FIXED + residual
    delta = base + (level_pre if cut else max(level_pre, level_tail))
    tau_end = window - dead  # the window in the response's own time

    def cross(level: float) -> float | None:
        if level <= 0.0:
            return 0.0  # a perturbed signal may cross at the step instant already
        c = curve.first_crossing(level, tau_end)
        return None if c is None else dead + c

    t10, t90 = cross(0.1), cross(0.9)
    rise = (t90 - t10) if (t10 is not None and t90 is not None) else math.nan
    a_lo, a_hi = cross(0.1 - delta), cross(0.1 + delta)
    b_lo, b_hi = cross(0.9 - delta), cross(0.9 + delta)
    rise_lo = (b_lo - a_hi - slack) if (b_lo is not None and a_hi is not None) else 0.0
    rise_hi = ((window if b_hi is None else b_hi) - (a_lo or 0.0)) + slack

    tau_p, m_w, interior = curve.peak(max(tau_end, 0.0))
    os_frac = max(0.0, m_w - 1.0)
    fall = 0.0
    if interior and os_frac > 0.0:
        near = np.linspace(max(tau_p - slack, 0.0), min(tau_p + slack, tau_end), 201)
        fall = m_w - float(np.min(curve.plant.step(near)))
    overshoot_tol = 100.0 * (delta * (1.0 + os_frac) + fall)
    runs = tuple((dead + a, dead + b) for a, b in curve.runs_at_or_above(m_w - 2.0 * delta,
                                                                         tau_end))
    detectable = interior and os_frac >= DETECT * delta
    peak_time = dead + tau_p if (interior and os_frac > 0.0) else None

    def settle(band: float) -> float | None:
        s = curve.last_exit(band, tau_end)
        return None if s is None else dead + s

    settling = settle(BAND)
    wide = settle(BAND + delta)
    narrow = settle(BAND - delta)
    settle_lo = (window if wide is None else wide) - slack
    settle_hi = (window if narrow is None else narrow) + slack
    if cut:
        # The recording ends before the exact 2 % settling time: "settled" is wrong unless
        # the exact response had entered the 2 % + delta band for good (infinite horizon,
        # not just within the window) before the end of the data.
        settled: bool | None = False
        settling = ts
        wide_for_good = dead + settling_time(curve.plant, BAND + delta)
        settle_lo = wide_for_good - slack if wide_for_good <= window else math.inf
        settle_hi = window + slack
    elif narrow is not None and narrow <= SETTLED_SHARE * window:
        settled = True
    else:
        settled = None
    return TrueStep(
        index=index, t_step=t_step, window=window, i_first=i0, i_stop=i1,
        sp_before=sp_before, sp_after=sp_after, initial=initial, final=final,
        hold_ts=window / ts, noise_rel=sigma / aa, lsb_rel=lsb / aa, residual_rel=residual,
        level_rel=max(level_pre, level_tail), delta=delta, slack=slack, cut=cut, rise=rise,
        rise_lo=rise_lo, rise_hi=rise_hi, overshoot=100.0 * os_frac,
        overshoot_tol=overshoot_tol, overshoot_detectable=detectable, peak_time=peak_time,
        peak_runs=runs, settling=settling, settle_lo=settle_lo, settle_hi=settle_hi,
        settled=settled, sse=sp_after - final, sse_tol=delta * aa)


def scenarios(n_steps: int, seed: int) -> list[Scenario]:
    """Scenarios drawn from ``seed`` until they hold at least ``n_steps`` steps; scenario
    k has its own seed (printed by ``describe``) so it can be rebuilt alone."""
    master = np.random.default_rng(seed)
    out: list[Scenario] = []
    total = 0
    while total < n_steps:
        s = make_scenario(int(master.integers(0, 2**31 - 1)))
        out.append(s)
        total += len(s.steps)
    return out
