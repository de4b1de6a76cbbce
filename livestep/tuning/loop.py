"""The declared discrete PID loop around a plant model, simulated loop tick by loop tick.

Many loops run side by side (one "lane" each: a step of the session, a candidate gain set,
a perturbed model), as numpy arrays over the lanes, so one Python loop over the ticks
serves them all.

Plant forms (their parameters in output units, feedback units and seconds):

- ``position``: a mass with viscous and Coulomb friction, J y'' = u - B y' - Fc sign(y'),
  i.e. K/(s (tau s + 1)) with K = 1/B, tau = J/B, plus Coulomb friction with sticking (the
  classical static friction model: Olsson, Astrom, Canudas de Wit, Gafvert and Lischinsky,
  "Friction models and friction compensation", European Journal of Control 4, 1998). Each
  tick is integrated exactly for the force held over it (zero-order hold); a velocity that
  would change sign within a tick stops.
- ``process``: first order, K/(tau s + 1).
- ``second``: second order with real poles, K/((tau s + 1)(tau2 s + 1)), each tick
  integrated exactly (zero-order hold, the matrix exponential of scipy.linalg.expm).

Both take an extra plant dead time of whole loop periods (``dead_ticks``) on top of the
controller's declared computation delay. Pure numpy.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np
from numpy.typing import NDArray

from livestep.tuning.controller import ControllerSpec

__all__ = ["LoopResponse", "PlantModel", "simulate"]

FloatArray = NDArray[np.float64]


@dataclass(frozen=True)
class PlantModel:
    """A plant of one form. ``position``: ``inertia`` J (output units x s^2 per feedback
    unit; a mass in kg when the output is N and the feedback m), ``viscous`` B (output
    units x s per feedback unit), ``coulomb`` Fc (output units). ``process``: ``gain`` K
    (feedback units per output unit), ``tau`` (s); ``second`` also ``tau2`` (s).
    ``dead_ticks``: plant dead time, loop periods."""

    form: str
    inertia: float = 0.0
    viscous: float = 0.0
    coulomb: float = 0.0
    gain: float = 0.0
    tau: float = 0.0
    tau2: float = 0.0
    dead_ticks: int = 0


@dataclass(frozen=True)
class LoopResponse:
    """Simulated lanes: ``y`` (lanes, ticks) the feedback read at each tick (feedback
    units, relative to the start; tick 0 reads the start), ``u`` (lanes, ticks) controller
    output, ``saturated`` (lanes,) whether the output reached its limit, ``period`` (s per
    tick)."""

    y: FloatArray
    u: FloatArray
    saturated: NDArray[np.bool_]
    period: float


def _lanes(x: float | FloatArray, n: int) -> FloatArray:
    return np.broadcast_to(np.asarray(x, dtype=float), (n,)).copy()


def _second_order_hold(models: list[PlantModel], n: int, h: float
                       ) -> tuple[FloatArray, FloatArray]:
    """Per lane, the exact one-tick map of the lag cascade x1' = (K u - x1) / tau,
    y' = (x1 - y) / tau2 for u held: (n, 2, 2) and (n, 2)."""
    from scipy.linalg import expm

    done: dict[tuple[float, float, float], tuple[FloatArray, FloatArray]] = {}
    ad, bd = np.empty((n, 2, 2)), np.empty((n, 2))
    for i in range(n):
        p = models[i] if len(models) == n else models[0]
        key = (p.gain, p.tau, p.tau2)
        if key not in done:
            m = np.zeros((3, 3))
            m[0, 0], m[0, 2] = -1.0 / p.tau, p.gain / p.tau
            m[1, 0], m[1, 1] = 1.0 / p.tau2, -1.0 / p.tau2
            e = expm(m * h)  # [[Ad, Bd], [0, 1]]: the hold of the augmented system
            done[key] = (e[:2, :2], e[:2, 2])
        ad[i], bd[i] = done[key]
    return ad, bd


def simulate(plants: PlantModel | list[PlantModel], spec: ControllerSpec, gains: FloatArray,
             amplitude: float | FloatArray, ticks: int,
             integral: float | FloatArray = 0.0) -> LoopResponse:
    """Step responses of the loop from rest at 0: the setpoint moves to ``amplitude``
    (feedback units) at tick 0. ``gains``: (lanes, 3) kp, ki, kd; ``plants``: one model for
    every lane or one per lane (same form and dead time); ``integral``: the integral term
    at the start (output units; what held the plant at rest, e.g. against friction)."""
    gains = np.atleast_2d(np.asarray(gains, dtype=float))
    n = gains.shape[0]
    models = plants if isinstance(plants, list) else [plants]
    form, dead = models[0].form, models[0].dead_ticks
    if any(p.form != form or p.dead_ticks != dead for p in models):
        raise ValueError("lanes of one simulation share the plant form and dead time")
    kp, ki, kd = (gains[:, i].copy() for i in range(3))
    r = _lanes(amplitude, n)
    h = spec.period
    fcut = spec.derivative_filter
    alpha = 1.0 - math.exp(-2.0 * math.pi * fcut * h) if fcut > 0 else 1.0
    on_error = spec.derivative == "error"
    limit = spec.output_limit
    delay = spec.delay + dead
    pos = np.zeros(n)
    vel = np.zeros(n)
    integ = _lanes(integral, n)
    dfilt = np.zeros(n)
    prev = np.zeros(n)  # previous measurement (or error): at rest before the step
    queue = np.zeros((delay + 1, n))
    ys = np.empty((n, ticks))
    us = np.empty((n, ticks))
    sat = np.zeros(n, dtype=bool)
    if form == "position":
        inertia = np.array([p.inertia for p in models]) * np.ones(n)
        viscous = np.array([p.viscous for p in models]) * np.ones(n)
        fc = np.array([p.coulomb for p in models]) * np.ones(n)
        a = viscous / inertia
        small = a * h < 1e-9
        safe_a = np.where(small, 1.0, a)
        ea = np.exp(-safe_a * h)
        # v' = cv v + cf f,  x' = x + xv v + xf f  (f the net force held over the tick)
        cv = np.where(small, 1.0, ea)
        cf = np.where(small, h / inertia, (1.0 - ea) / (safe_a * inertia))
        xv = np.where(small, h, (1.0 - ea) / safe_a)
        xf = np.where(small, h * h / (2.0 * inertia),
                      (h - (1.0 - ea) / safe_a) / (safe_a * inertia))
        sticky = bool(np.any(fc > 0))
    elif form == "second":
        ad, bd = _second_order_hold(models, n, h)
        lag = np.zeros(n)  # the first lag's output
    else:
        gain = np.array([p.gain for p in models]) * np.ones(n)
        tau = np.array([p.tau for p in models]) * np.ones(n)
        ef = np.exp(-h / tau)
    kih = ki * h
    finite = math.isfinite(limit)
    slot = delay + 1
    for k in range(ticks):
        meas = pos
        ys[:, k] = meas
        e = r - meas
        src = e if on_error else meas
        dfilt += alpha * ((src - prev) * (1.0 / h) - dfilt)
        prev = src
        u = kp * e + integ
        u += kd * dfilt if on_error else -kd * dfilt
        if finite:
            inside = np.abs(u) < limit
            integ += kih * e * inside
            sat |= ~inside
            np.clip(u, -limit, limit, out=u)
        else:
            integ += kih * e
        us[:, k] = u
        if delay:
            queue[k % slot] = u
            force = queue[(k + 1) % slot]
        else:
            force = u
        if form == "position":
            if sticky:  # Coulomb friction; a carriage at rest moves once the force beats it
                sv = np.sign(vel)
                at_rest = sv == 0.0
                net = force - fc * np.where(at_rest, np.sign(force), sv)
                net *= ~(at_rest & (np.abs(force) <= fc))
                pos = pos + xv * vel + xf * net
                v_new = cv * vel + cf * net
                vel = np.where(v_new * sv < 0.0, 0.0, v_new)  # a reversal stops it
            else:
                pos = pos + xv * vel + xf * force
                vel = cv * vel + cf * force
        elif form == "second":
            lag, pos = (ad[:, 0, 0] * lag + ad[:, 0, 1] * pos + bd[:, 0] * force,
                        ad[:, 1, 0] * lag + ad[:, 1, 1] * pos + bd[:, 1] * force)
        else:
            pos = ef * pos + gain * (1.0 - ef) * force
    return LoopResponse(y=ys, u=us, saturated=sat, period=h)
