"""Plant identification from closed-loop steps under known gains: output-error fits.

Every step of the session was taken with a declared controller (:mod:`.controller`) and
known gains; each candidate plant form is simulated in that loop (:func:`.loop.simulate`)
for every step at once, and its parameters are those that minimise the squared difference
between simulated and recorded feedback over all steps (the output-error method: Ljung,
*System Identification: Theory for the User*, 2nd ed., 1999, sections 4.2 and 7.3), solved
by :func:`scipy.optimize.least_squares`. Two gain sets or more are needed: one gain set
alone leaves inertia and friction entangled with the gains (the session is then said to be
unidentifiable).

Parameter uncertainties are the usual linearised ones, s^2 (J'J)^-1, with the sample count
reduced for correlated residuals (n (1 - rho) / (1 + rho), rho the lag-one autocorrelation
of the residuals: Bartlett's correction; the figures stay optimistic when the model form
is wrong). The form is chosen by Akaike's criterion on that effective sample count.
"""

from __future__ import annotations

import math
from collections.abc import Sequence
from dataclasses import dataclass, replace

import numpy as np
from numpy.typing import NDArray
from scipy.optimize import least_squares

from livestep.tuning.controller import ControllerSpec
from livestep.tuning.loop import PlantModel, simulate
from livestep.tuning.records import StepRecord

__all__ = ["Identification", "identify"]

FloatArray = NDArray[np.float64]

_PARAMS = {"position": ("inertia", "viscous", "coulomb"), "process": ("gain", "tau"),
           "second": ("gain", "tau", "tau2")}


@dataclass(frozen=True)
class Identification:
    """The chosen plant model and how well it is known. ``sigma``: one standard deviation
    per parameter (same names as the model's fields); ``r2``: share of the feedback's
    variance about its set level explained over all steps; ``rms``: residual (feedback
    units); ``steps``: the step numbers used; ``gain_sets``: how many distinct gain sets;
    ``forms``: (form, r2, aic) of every form tried."""

    model: PlantModel
    sigma: dict[str, float]
    r2: float
    rms: float
    steps: tuple[int, ...]
    gain_sets: int
    forms: tuple[tuple[str, float, float], ...]

    def relative(self, name: str) -> float:
        """One standard deviation of a parameter as a fraction of its value."""
        v = getattr(self.model, name)
        return self.sigma[name] / abs(v) if v else math.inf


def _ticks_at(records: Sequence[StepRecord], spec: ControllerSpec) -> list[NDArray[np.int64]]:
    """The tick each sample reports: sample time from the step instant, in loop periods."""
    return [np.clip(np.round(r.t / spec.period).astype(np.int64), 0, None) for r in records]


def _model(form: str, p: FloatArray, dead: int) -> PlantModel:
    if form == "position":
        return PlantModel("position", inertia=math.exp(p[0]), viscous=math.exp(p[1]),
                          coulomb=max(p[2], 0.0), dead_ticks=dead)
    if form == "second":
        return PlantModel("second", gain=math.exp(p[0]), tau=math.exp(p[1]),
                          tau2=math.exp(p[2]), dead_ticks=dead)
    return PlantModel("process", gain=math.exp(p[0]), tau=math.exp(p[1]), dead_ticks=dead)


class _Fit:
    """Residuals and their Jacobian for one form and dead time, all steps in one run.

    The parameters are the form's (:data:`_PARAMS`, positive ones as logarithms) followed
    by one integral term per step: what held the plant at rest before that step (output
    units; e.g. a carriage stuck by friction short of its setpoint)."""

    def __init__(self, form: str, dead: int, records: Sequence[StepRecord],
                 spec: ControllerSpec, ticks: int | None = None) -> None:
        self.form, self.dead, self.records, self.spec = form, dead, records, spec
        self.ticks = _ticks_at(records, spec)
        if ticks is not None:  # a shorter span: only the samples up to that tick
            keep = [t <= ticks for t in self.ticks]
            self.ticks = [t[k] for t, k in zip(self.ticks, keep, strict=True)]
            self.y = [r.y[k] for r, k in zip(records, keep, strict=True)]
        else:
            self.y = [r.y for r in records]
        self.n_ticks = int(max(t[-1] for t in self.ticks)) + 1
        self.gains = np.array([r.gains[:3] for r in records])
        self.targets = np.array([r.target for r in records])
        self.scale = np.array([1.0 / abs(r.amplitude) for r in records])
        self.force = float(np.max(self.gains[:, 0] * np.abs(self.targets)))
        self.n_form = len(_PARAMS[form])
        self.cache: dict[bytes, FloatArray] = {}

    def _run(self, lanes: list[tuple[FloatArray, int]]) -> list[FloatArray]:
        """Residuals of step ``i`` under parameters ``p`` for each (p, i) lane."""
        models = [_model(self.form, p, self.dead) for p, _ in lanes]
        idx = [i for _, i in lanes]
        out = simulate(models, self.spec, self.gains[idx], self.targets[idx], self.n_ticks,
                       integral=np.array([p[self.n_form + i] for p, i in lanes]))
        return [(out.y[j, self.ticks[i]] - self.y[i]) * self.scale[i]
                for j, (_, i) in enumerate(lanes)]

    def step_sizes(self, p: FloatArray) -> FloatArray:
        d = np.full(len(p), 1e-3 * self.force)
        d[:self.n_form] = 1e-3
        if self.form == "position":
            d[2] = 1e-3 * self.force
        return d

    def fun(self, p: FloatArray) -> FloatArray:
        key = p.tobytes()
        if key not in self.cache:
            n = len(self.records)
            self.cache = {key: np.concatenate(self._run([(p, i) for i in range(n)]))}
        return self.cache[key]

    def jac(self, p: FloatArray) -> FloatArray:
        n = len(self.records)
        d = self.step_sizes(p)
        lanes = [(p, i) for i in range(n)]
        for k in range(self.n_form):  # the form's parameters move every step
            q = p.copy()
            q[k] += d[k]
            lanes += [(q, i) for i in range(n)]
        for i in range(n):  # a step's own integral moves that step only
            q = p.copy()
            q[self.n_form + i] += d[self.n_form + i]
            lanes.append((q, i))
        res = self._run(lanes)
        base = res[:n]
        self.cache = {p.tobytes(): np.concatenate(base)}
        sizes = [len(b) for b in base]
        offsets = np.concatenate([[0], np.cumsum(sizes)])
        jac = np.zeros((offsets[-1], len(p)))
        for k in range(self.n_form):
            for i in range(n):
                jac[offsets[i]:offsets[i + 1], k] = (res[(k + 1) * n + i] - base[i]) / d[k]
        for i in range(n):
            col = self.n_form + i
            jac[offsets[i]:offsets[i + 1], col] = (res[(self.n_form + 1) * n + i]
                                                   - base[i]) / d[col]
        return jac


def _start(form: str, records: Sequence[StepRecord], spec: ControllerSpec) -> FloatArray:
    """A starting point: the best of a coarse grid, simulated over the first rise only."""
    r = records[0]
    y = r.y / r.amplitude
    k = int(np.argmax(y >= 0.5)) if np.any(y >= 0.5) else len(y) - 1
    t50 = max(float(r.t[k]), 10 * spec.period)
    kp = max(r.gains[0], 1e-12)
    n = len(records)
    if form == "position":
        # 50 % of a moderately damped second-order step near 1.6 / wn, wn^2 near kp / J
        j0 = kp * (t50 / 1.6) ** 2
        grid = [np.array([math.log(j0 * f), math.log(j0 * f * b), 0.0] + [0.0] * n)
                for f in (0.25, 0.5, 1.0, 2.0, 4.0) for b in (0.5, 5.0)]
    elif form == "second":
        grid = [np.array([math.log(g / kp), math.log(tau * t50), math.log(0.2 * tau * t50)]
                         + [0.0] * n)
                for g in (0.3, 1.0, 3.0, 10.0) for tau in (0.3, 1.0, 3.0)]
    else:
        grid = [np.array([math.log(g / kp), math.log(tau * t50)] + [0.0] * n)
                for g in (0.3, 1.0, 3.0, 10.0) for tau in (0.3, 1.0, 3.0)]
    fit = _Fit(form, 0, records, spec, ticks=int(4 * t50 / spec.period) + 1)
    lanes = [(p, i) for p in grid for i in range(n)]
    res = fit._run(lanes)
    costs = [sum(float(np.sum(res[j * n + i] ** 2)) for i in range(n))
             for j in range(len(grid))]
    return grid[int(np.argmin(costs))]


def _solve(f: _Fit, p0: FloatArray, max_nfev: int) -> tuple[FloatArray, FloatArray, float]:
    lo = np.full(len(p0), -np.inf)
    if f.form == "position":
        lo[2] = 0.0
    sol = least_squares(f.fun, p0, jac=f.jac, bounds=(lo, np.inf), x_scale="jac",
                        max_nfev=max_nfev, ftol=1e-3, xtol=1e-6)
    return sol.x, sol.jac, float(np.sum(sol.fun**2))


def _fit_form(form: str, records: Sequence[StepRecord], spec: ControllerSpec,
              dead_options: Sequence[int], span: int) -> tuple[float, _Fit, FloatArray]:
    """The best dead time and parameters on the first ``span`` ticks of each step."""
    p0 = _start(form, records, spec)
    tried: dict[int, tuple[float, _Fit, FloatArray]] = {}

    def fit(dead: int) -> tuple[float, _Fit, FloatArray]:
        if dead not in tried:
            f = _Fit(form, dead, records, spec, ticks=span)
            p, _, cost = _solve(f, p0, 15)
            tried[dead] = (cost, f, p)
        return tried[dead]

    best = None
    for dead in dead_options:  # a coarse grid, up while it helps
        cur = fit(dead)
        if best is None or cur[0] < best[0]:
            best = cur
        elif cur[0] > 1.2 * best[0]:
            break  # more dead time only makes it worse
    assert best is not None
    while True:  # then whole loop periods either side of the best
        d = best[1].dead
        better = [fit(x) for x in (d - 1, d + 1) if x >= 0]
        top = min(better, key=lambda c: c[0], default=best)
        if top[0] >= best[0]:
            return best
        best = top


def identify(records: Sequence[StepRecord], spec: ControllerSpec) -> Identification:
    """The plant model that best explains ``records`` (at least two gain sets; see the
    module docstring). :class:`ValueError` when the steps cannot identify a model."""
    sets = {r.gains for r in records}
    if len(sets) < 2:
        raise ValueError(f"{len(sets)} gain set{'s' if len(sets) != 1 else ''} with usable"
                         " steps: a model needs steps under two gain sets or more")
    forms = {"auto": ("position", "process", "second"), "process": ("process", "second"),
             "position": ("position",)}[spec.plant]
    y_all = np.concatenate([r.y / r.amplitude for r in records])
    ss_tot = float(np.sum((y_all - 1.0) ** 2))
    # forms and dead times compared on the first rise and swing (about eight times the
    # time to half the step), then the chosen one refined over the whole span
    first = records[0]
    half = first.t[int(np.argmax(first.y / first.amplitude >= 0.5))] if np.any(
        first.y / first.amplitude >= 0.5) else first.t[-1] / 4
    short = int(max(8.0 * half, 0.05) / spec.period)
    y_short = np.concatenate([r.y[r.t <= short * spec.period] / r.amplitude for r in records])
    ss_short = float(np.sum((y_short - 1.0) ** 2))
    tried = []
    best = None
    for form in forms:
        dead = range(0, 4) if form == "position" else (0, 2, 5, 10, 20, 40, 80)
        cost, f, p = _fit_form(form, records, spec, dead, short)
        n = len(f.fun(p))
        aic = n * math.log(cost / n) + 2 * len(p)
        tried.append((form, 1.0 - cost / ss_short if ss_short > 0 else 0.0, aic))
        if best is None or aic < best[0]:
            best = (aic, form, f, p)
    assert best is not None
    _, form, f_short, p = best
    f = _Fit(form, f_short.dead, records, spec)
    p, jac, rss = _solve(f, p, 8)
    res = f.fun(p)
    n = len(res)
    rho = float(np.corrcoef(res[:-1], res[1:])[0, 1]) if n > 3 else 0.0
    rho = min(max(rho, 0.0), 0.99)
    n_eff = max(n * (1.0 - rho) / (1.0 + rho), len(p) + 2.0)
    r2 = 1.0 - rss / ss_tot if ss_tot > 0 else 0.0
    s2 = rss / max(n_eff - len(p), 1.0)
    try:
        cov = s2 * np.linalg.inv(jac.T @ jac) * (n / n_eff)
    except np.linalg.LinAlgError:
        cov = np.full((len(p), len(p)), np.inf)
    model = _model(form, p, f.dead)
    sd = np.sqrt(np.clip(np.diag(cov), 0.0, None))
    names = _PARAMS[form]
    sigma = {}
    for i, name in enumerate(names):
        v = getattr(model, name)
        # log-parameters: sigma of the value is value x sigma of its log
        sigma[name] = float(sd[i] if name == "coulomb" else abs(v) * sd[i])
    amp_rms = float(np.sqrt(np.mean([r.amplitude**2 for r in records])))
    return Identification(model=replace(model), sigma=sigma, r2=r2,
                          rms=math.sqrt(rss / n) * amp_rms,
                          steps=tuple(r.index for r in records), gain_sets=len(sets),
                          forms=tuple(tried))
