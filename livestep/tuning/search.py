"""Predicted step figures of gain sets on an identified plant, and the search for gains that
meet a profile with margin.

A prediction simulates the declared loop around the model (:func:`.loop.simulate`),
samples the response at the session's sample period and measures it with the very code
that measures recorded steps (:func:`livestep.steps.analysis.analyze_window`), so a
predicted rise time is the same figure as a measured one. How far a prediction can be
trusted is shown by the same figures on models moved by the parameters' uncertainty (two
standard deviations, at least :data:`MIN_SPREAD` of each value) in the directions that make
the loop faster and slower.

The search (:func:`search_gains`) runs :func:`scipy.optimize.differential_evolution` over
the gains (log scale, inside the user's ``[controller.limits]`` and near the measured gain
sets), every population member simulated at once, starting from the best points of a grid
judged on the nominal model. A candidate must keep every profile
limit with its warning margin (at least :data:`MIN_MARGIN` of the limit) on the nominal
and both moved models, keep its output below :data:`OUTPUT_SHARE` of the declared limit,
and among those the fastest settling (then rise) wins. Pure numpy/scipy.
"""

from __future__ import annotations

import copy
import math
from collections.abc import Sequence
from dataclasses import dataclass, replace

import numpy as np
from numpy.typing import NDArray
from scipy.optimize import differential_evolution

from livestep.judge.profile import Limit, Profile
from livestep.judge.quantities import value_of
from livestep.steps.analysis import AnalysisSettings, StepResult, analyze_window
from livestep.steps.detect import StepWindow
from livestep.steps.measure import MeasureSettings
from livestep.tuning.controller import GAIN_NAMES, ControllerSpec
from livestep.tuning.identify import Identification
from livestep.tuning.loop import PlantModel, simulate

__all__ = ["MIN_MARGIN", "MIN_SPREAD", "OUTPUT_SHARE", "Prediction", "SearchSpace",
           "predict", "search_gains", "search_space"]

FloatArray = NDArray[np.float64]

MIN_SPREAD = 0.05  # the least relative parameter change a prediction's spread allows for
MIN_MARGIN = 0.10  # the least margin kept to a limit, as a share of the limit
OUTPUT_SHARE = 0.8  # a suggestion's predicted peak output stays below this share of the limit
WIDEN = 2.0  # the search stays within this factor of the measured gains
GRID = 6  # grid points per gain of the first look
FRAGILE = 0.05  # the most settling may move (share of the horizon) when the band changes


@dataclass(frozen=True)
class Prediction:
    """Predicted figures of one gain set (name -> value in the quantity's unit; ``None``
    where undefined), the same on the moved models (``low``/``high``: the smallest and
    largest value over the three models), the peak output (output units) and whether the
    loop stays inside every limit with margin on all three models."""

    gains: dict[str, float]
    figures: dict[str, float | None]
    low: dict[str, float | None]
    high: dict[str, float | None]
    output_peak: float
    meets: bool
    result: StepResult  # the nominal predicted step, measured


@dataclass(frozen=True)
class SearchSpace:
    """Per gain (:data:`GAIN_NAMES` order): (low, high) searched, or a fixed value."""

    bounds: tuple[tuple[float, float], ...]

    @property
    def free(self) -> list[int]:
        return [i for i, (lo, hi) in enumerate(self.bounds) if hi > lo]


def search_space(measured: Sequence[Sequence[float]], spec: ControllerSpec) -> SearchSpace:
    """Each gain between 1/:data:`WIDEN` of its smallest and :data:`WIDEN` times its largest
    measured value, inside the declared limits; a gain that was zero in every gain set
    stays zero."""
    arr = np.asarray(measured, dtype=float)
    out = []
    for i, name in enumerate(GAIN_NAMES):
        lo, hi = float(np.min(arr[:, i])) / WIDEN, float(np.max(arr[:, i])) * WIDEN
        if hi == 0.0:
            out.append((0.0, 0.0))
            continue
        dlo, dhi = spec.bounds(name)
        lo = max(lo, dlo) if dlo is not None else lo
        hi = min(hi, dhi) if dhi is not None else hi
        if lo > hi:  # the declared limits lie outside the measured neighbourhood
            lo, hi = (dlo if dlo is not None else hi), (dhi if dhi is not None else lo)
        lo = max(lo, hi * 1e-3)
        out.append((lo, hi))
    return SearchSpace(tuple(out))


def moved_models(ident: Identification) -> list[tuple[PlantModel, float]]:
    """(model, integral term at the start) variants: the nominal model at rest, one moved
    towards a faster loop and one towards a slower, and with Coulomb friction the nominal
    model starting stuck with the integral holding most of the friction force either way
    (as a step that starts where the last one stopped)."""
    m = ident.model

    def share(name: str) -> float:
        v = getattr(m, name)
        return max(2.0 * ident.sigma.get(name, 0.0), MIN_SPREAD * abs(v))

    if m.form == "position":
        faster = replace(m, inertia=m.inertia - share("inertia"),
                         viscous=max(m.viscous - share("viscous"), 0.0),
                         coulomb=max(m.coulomb - share("coulomb"), 0.0))
        slower = replace(m, inertia=m.inertia + share("inertia"),
                         viscous=m.viscous + share("viscous"),
                         coulomb=m.coulomb + share("coulomb"))
        stuck = 0.8 * m.coulomb
        if stuck > 0:
            return [(m, 0.0), (faster, 0.0), (slower, 0.0), (m, stuck), (m, -stuck)]
    else:
        second = m.form == "second"
        faster = replace(m, gain=m.gain + share("gain"), tau=max(m.tau - share("tau"), 1e-6),
                         tau2=max(m.tau2 - share("tau2"), 1e-6) if second else 0.0)
        slower = replace(m, gain=max(m.gain - share("gain"), 1e-12), tau=m.tau + share("tau"),
                         tau2=m.tau2 + share("tau2") if second else 0.0)
    return [(m, 0.0), (faster, 0.0), (slower, 0.0)]


def _needed(limit: Limit) -> tuple[float | None, float | None]:
    """The limit tightened by its warning margin (at least MIN_MARGIN of the limit)."""
    def margin(x: float) -> float:
        return max(limit.warn, MIN_MARGIN * abs(x))
    lo = None if limit.low is None else limit.low + margin(limit.low)
    hi = None if limit.high is None else limit.high - margin(limit.high)
    return lo, hi


def _window(y: FloatArray, amplitude: float, period: float, pre: int = 50) -> StepWindow:
    n = len(y)
    t = (np.arange(-pre, n)) * period
    fb = np.concatenate([np.zeros(pre), y])
    sp = np.concatenate([np.zeros(pre), np.full(n, amplitude)])
    return StepWindow(index=0, t=t, feedback=fb, setpoint=sp, i_step=pre,
                      setpoint_before=0.0, setpoint_after=amplitude, end_reason="settled")


class _Evaluator:
    """Simulates and measures many gain sets on the three models at once."""

    def __init__(self, ident: Identification, spec: ControllerSpec, profile: Profile,
                 amplitude: float, sample_period: float, span: float) -> None:
        self.models = moved_models(ident)
        self.spec, self.profile = spec, profile
        self.amplitude, self.sample_period = amplitude, sample_period
        self.ticks = int(span / spec.period) + 1
        n = int(span / sample_period)
        self.sample_ticks = np.minimum(np.floor(np.arange(n) * sample_period / spec.period
                                                + 1e-9).astype(np.int64), self.ticks - 1)
        band = profile.settling_band or MeasureSettings().settling_band
        levels = profile.rise_levels or MeasureSettings().rise_levels
        self.settings = AnalysisSettings(measure=MeasureSettings(rise_levels=levels,
                                                                 settling_band=band),
                                         keep_windows=True)

    def nominal_only(self) -> _Evaluator:
        """The same evaluator on the nominal model alone."""
        other = copy.copy(self)
        other.models = self.models[:1]
        return other

    def run(self, gains: FloatArray) -> list[list[tuple[StepResult, float]]]:
        """Per gain set, per model: the measured predicted step and the peak output."""
        g = np.asarray(gains, dtype=float)
        k = len(self.models)
        lanes = np.repeat(g, k, axis=0)
        plants = [self.models[j % k][0] for j in range(len(lanes))]
        held = np.array([self.models[j % k][1] for j in range(len(lanes))])
        out = simulate(plants, self.spec, lanes, self.amplitude, self.ticks, integral=held)
        res = []
        for i in range(len(g)):
            per = []
            for j in range(k):
                lane = i * k + j
                y = out.y[lane, self.sample_ticks]
                w = _window(y, self.amplitude, self.sample_period)
                r = analyze_window(w, self.settings)
                per.append((r, float(np.max(np.abs(out.u[lane])))))
            res.append(per)
        return res

    def fragility(self, r: StepResult) -> float:
        """How much the settling time hangs on the band: (settling with 3/4 of the band
        minus settling with 5/4 of it) / the horizon; 1 when either never settles. A
        response that creeps along the band's edge settles at a time no bench repeats."""
        w = r.window
        m = r.metrics
        if w is None or not m.settled:
            return 1.0
        t, y = w.t[w.i_step:], w.feedback[w.i_step:]
        band = self.settings.measure.settling_band / 100.0 * abs(m.amplitude)
        times = []
        for f in (0.75, 1.25):
            out = np.nonzero(np.abs(y - m.final) > f * band)[0]
            if f == 0.75 and len(out) and out[-1] >= len(y) - 2:
                return 1.0
            times.append(float(t[out[-1]]) if len(out) else 0.0)
        return (times[0] - times[1]) / (self.ticks * self.spec.period)

    def violation(self, r: StepResult, peak: float) -> float:
        """How far a predicted step is outside the limits with margin (0 inside), in
        shares of each limit, summed."""
        total = 0.0
        for lim in self.profile.limits_for(r):
            lo, hi = _needed(lim)
            v = value_of(r, lim.quantity)
            scale = max(abs(x) for x in (lim.low, lim.high) if x is not None) or 1.0
            if v is None:
                total += 1.0
                continue
            if hi is not None and v > hi:
                total += (v - hi) / scale
            if lo is not None and v < lo:
                total += (lo - v) / scale
        if math.isfinite(self.spec.output_limit):
            cap = OUTPUT_SHARE * self.spec.output_limit
            if peak > cap:
                total += (peak - cap) / cap
        return total

    def prediction(self, gains: Sequence[float], per: list[tuple[StepResult, float]]
                   ) -> Prediction:
        names = sorted({lim.quantity for lim in self.profile.limits}
                       | {"rise_time", "overshoot_pct", "settling_time", "peak_time",
                          "zeta", "wn"})
        vals = {n: [value_of(r, n) for r, _ in per] for n in names}
        def ext(f, n: str) -> float | None:  # noqa: ANN001
            xs = [x for x in vals[n] if x is not None]
            return f(xs) if len(xs) == len(vals[n]) else None
        return Prediction(
            gains=dict(zip(GAIN_NAMES, (float(x) for x in gains), strict=True)),
            figures={n: vals[n][0] for n in names},
            low={n: ext(min, n) for n in names}, high={n: ext(max, n) for n in names},
            output_peak=max(p for _, p in per),
            meets=all(self.violation(r, p) == 0.0 for r, p in per), result=per[0][0])


def _span(profile: Profile, records_span: float) -> float:
    settle = [lim.high for lim in profile.limits if lim.quantity == "settling_time"
              and lim.high is not None]
    return max([records_span, *(1.5 * s for s in settle)])


def predict(ident: Identification, spec: ControllerSpec, profile: Profile,
            gains: Sequence[Sequence[float]], *, amplitude: float, sample_period: float,
            span: float = 0.6) -> list[Prediction]:
    """Predicted figures of each gain set (kp, ki, kd) for a step of ``amplitude``."""
    ev = _Evaluator(ident, spec, profile, amplitude, sample_period, _span(profile, span))
    return [ev.prediction(g, per) for g, per in zip(gains, ev.run(np.asarray(gains)),
                                                     strict=True)]


def search_gains(ident: Identification, spec: ControllerSpec, profile: Profile,
                 space: SearchSpace, *, amplitude: float, sample_period: float,
                 span: float = 0.6, seed: int = 0) -> Prediction | None:
    """The gains whose predicted step meets every limit with margin on all three models
    and settles fastest (then rises fastest); ``None`` when no gains in ``space`` do."""
    ev = _Evaluator(ident, spec, profile, amplitude, sample_period, _span(profile, span))
    free = space.free
    fixed = np.array([lo for lo, _ in space.bounds])
    horizon = ev.ticks * spec.period

    def gains_of(x: FloatArray) -> FloatArray:  # x: (len(free), S) in log space
        g = np.tile(fixed, (x.shape[1], 1))
        g[:, free] = np.exp(x.T)
        return g

    def cost(x: FloatArray, evaluator: _Evaluator = ev) -> FloatArray:
        g = gains_of(np.atleast_2d(x.T).T if x.ndim == 1 else x)
        out = []
        for per in evaluator.run(g):
            bad = sum(ev.violation(r, p) for r, p in per)
            fragile = max(ev.fragility(r) for r, _ in per)
            settle = [r.metrics.settling_time if r.metrics.settled else horizon
                      for r, _ in per]
            rise = per[0][0].metrics.rise_time or horizon
            spread = (max(settle) - min(settle)) / horizon
            out.append(10.0 * (bad + max(fragile - FRAGILE, 0.0))
                       + (rise + 0.1 * settle[0]) / horizon + spread)
        return np.array(out)

    if not free:
        preds = predict(ident, spec, profile, [fixed], amplitude=amplitude,
                        sample_period=sample_period, span=span)
        return preds[0] if preds[0].meets else None
    bounds = [(math.log(space.bounds[i][0]), math.log(space.bounds[i][1])) for i in free]
    # the first population: the best points of a grid judged on the nominal model alone
    # (one cheap run), so a narrow region of fast, feasible gains is not missed
    members = max(6, 24 // len(free)) * len(free)
    axes = [np.linspace(lo, hi, GRID) for lo, hi in bounds]
    grid = np.array(np.meshgrid(*axes, indexing="ij")).reshape(len(free), -1)
    order = np.argsort(cost(grid, ev.nominal_only()), kind="stable")
    init = grid[:, order[:members]].T
    sol = differential_evolution(cost, bounds, vectorized=True, updating="deferred",
                                 popsize=max(6, 24 // len(free)), maxiter=12, tol=1e-3,
                                 seed=seed, polish=False, init=init)
    best = gains_of(np.asarray(sol.x)[:, None])[0]
    rounded = np.array([float(f"{x:.3g}") for x in best])  # gains as a person types them
    rounded = np.clip(rounded, [lo for lo, _ in space.bounds], [hi for _, hi in space.bounds])
    both = ev.run(np.stack([rounded, best]))
    for g, per in zip((rounded, best), both, strict=True):
        pred = ev.prediction(g, per)
        if pred.meets:
            return pred
    return None
