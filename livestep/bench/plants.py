"""Plant models of the virtual bench: a held setpoint in, feedback samples out. Pure numpy.

Both plants produce samples block by block at a fixed sample period: ``advance(n, setpoint)``
returns the next ``n`` feedback samples, the setpoint being held from the block's first
sample on (that sample is the first one the device reports with the new setpoint, the
step instant livestep measures from).

- :class:`SecondOrderPlant`: the exact response of K wn^2 e^(-theta s) / (s^2 + 2 zeta wn s
  + wn^2) to the held setpoint, sampled without discretisation error (the state is carried
  by the exact matrix exponential between samples and input changes, whatever the dead
  time). For tests.
- :class:`AxisPlant`: an invented belt-driven carton transfer axis: a PID position loop at a
  fixed loop rate driving a carriage with mass, viscous and Coulomb friction, force
  saturation, one loop period of computation delay, encoder quantisation and sensor noise.
  Gains change the response as they would on a real axis.

Randomness comes only from a seeded :class:`numpy.random.Generator`, drawn in sample order,
so the same seed and the same commands at the same samples give the same samples whatever
the block sizes.
"""

from __future__ import annotations

import math
from collections import deque
from dataclasses import dataclass, field, replace

import numpy as np
from numpy.typing import NDArray

__all__ = ["AxisParams", "AxisPlant", "Gains", "Plant", "SecondOrderPlant", "expm2"]

FloatArray = NDArray[np.float64]


class Plant:
    """What the bench needs from a plant."""

    period: float  # s between samples
    gains: Gains | None = None
    #: The name of the controller output the plant reports beside the feedback (``None``:
    #: none); its values for the last :meth:`advance` are in :attr:`output`.
    output_name: str | None = None
    output: FloatArray | None = None

    def reset(self, setpoint: float) -> None:
        """Start at rest at ``setpoint``."""
        raise NotImplementedError

    def advance(self, n: int, setpoint: float) -> FloatArray:
        """The next ``n`` feedback samples with ``setpoint`` held from the first one on."""
        raise NotImplementedError

    def set_gains(self, **gains: float) -> Gains:
        """New controller gains (applied from the next sample); returns the gains in use."""
        raise ValueError("this plant has no controller gains")


def expm2(a: FloatArray, tau: FloatArray) -> FloatArray:
    """exp(A tau) of a real 2x2 matrix for each tau: shape (len(tau), 2, 2).

    By Cayley-Hamilton, exp(A tau) = e^(s tau) [(C - s S) I + S A] with s = tr(A) / 2,
    q^2 = s^2 - det(A), C = cosh(q tau) and S = sinh(q tau) / q (cos and sin for q^2 < 0,
    1 and tau for q = 0).
    """
    tau = np.asarray(tau, dtype=float)
    s = 0.5 * (a[0, 0] + a[1, 1])
    q2 = s * s - (a[0, 0] * a[1, 1] - a[0, 1] * a[1, 0])
    scale = max(abs(s), 1e-300)
    if q2 > 1e-12 * scale * scale:
        # e^(s tau) cosh and sinh from the two real exponents s +- q, which stay finite
        # however heavily damped the system is (e^(q tau) alone overflows)
        q = math.sqrt(q2)
        fast, slow = np.exp((s - q) * tau), np.exp((s + q) * tau)
        ec, esn = 0.5 * (slow + fast), (slow - fast) / (2.0 * q)
    elif q2 < -1e-12 * scale * scale:
        w = math.sqrt(-q2)
        e = np.exp(s * tau)
        ec, esn = e * np.cos(w * tau), e * np.sin(w * tau) / w
    else:
        e = np.exp(s * tau)
        ec, esn = e, e * tau
    out = np.empty(tau.shape + (2, 2))
    out[..., 0, 0] = ec - s * esn + esn * a[0, 0]
    out[..., 0, 1] = esn * a[0, 1]
    out[..., 1, 0] = esn * a[1, 0]
    out[..., 1, 1] = ec - s * esn + esn * a[1, 1]
    return out


@dataclass(frozen=True)
class Gains:
    """PID gains of the axis: ``kp`` in N/mm, ``ki`` in N/(mm s), ``kd`` in N s/mm."""

    kp: float
    ki: float
    kd: float

    def describe(self) -> str:
        """The note the bench echoes into its stream: ``gains kp=.. ki=.. kd=..``."""
        return f"gains kp={self.kp:g} ki={self.ki:g} kd={self.kd:g}"


class SecondOrderPlant(Plant):
    """Exact sampled response of K wn^2 e^(-theta s) / (s^2 + 2 zeta wn s + wn^2).

    ``zeta`` (damping ratio), ``wn`` (rad/s), ``gain`` (feedback units per setpoint unit),
    ``dead_time`` (s, any value, not only whole samples), ``period`` (s); ``noise``: standard
    deviation of white measurement noise (feedback units), 0 for the exact response.
    """

    def __init__(self, zeta: float, wn: float, *, gain: float = 1.0, dead_time: float = 0.0,
                 period: float = 1e-3, noise: float = 0.0, seed: int = 0) -> None:
        if not (zeta > 0 and wn > 0 and period > 0 and dead_time >= 0 and noise >= 0):
            raise ValueError("need zeta > 0, wn > 0, period > 0, dead time >= 0, noise >= 0")
        self.zeta, self.wn, self.gain, self.dead_time = zeta, wn, gain, dead_time
        self.period, self.noise = period, noise
        self._a = np.array([[0.0, 1.0], [-wn * wn, -2.0 * zeta * wn]])
        self._rng = np.random.default_rng(seed)
        self.reset(0.0)

    def reset(self, setpoint: float) -> None:
        self._x = np.array([self.gain * setpoint, 0.0])  # (y, dy/dt) at time self._t
        self._t = 0.0  # plant time of the next sample, s
        self._u = setpoint  # input applied to the plant now
        self._commanded = setpoint
        self._pending: deque[tuple[float, float]] = deque()  # (time applied, input)

    def _propagate(self, tau: FloatArray) -> FloatArray:
        """States (len(tau), 2) at ``tau`` seconds after the current state, input held."""
        xss = np.array([self.gain * self._u, 0.0])
        return xss + expm2(self._a, tau) @ (self._x - xss)

    def advance(self, n: int, setpoint: float) -> FloatArray:
        if setpoint != self._commanded:
            self._commanded = setpoint
            self._pending.append((self._t + self.dead_time, setpoint))
        times = self._t + self.period * np.arange(n)
        y = np.empty(n)
        k = 0
        while True:
            t_event = self._pending[0][0] if self._pending else math.inf
            j = int(np.searchsorted(times, t_event, side="left")) if n else 0
            if j > k:
                y[k:j] = self._propagate(times[k:j] - self._t)[:, 0]
                k = j
            if k >= n:
                break
            # an input change before the next sample: carry the state to it exactly
            self._x = self._propagate(np.array([t_event - self._t]))[0]
            self._t = t_event
            self._u = self._pending.popleft()[1]
        t_next = times[-1] + self.period if n else self._t
        self._x = self._propagate(np.array([t_next - self._t]))[0]
        self._t = t_next
        if self.noise:
            y += self._rng.normal(0.0, self.noise, n)
        return y


@dataclass(frozen=True, kw_only=True)
class AxisParams:
    """The invented carton transfer axis: a belt-driven carriage under a PID position loop.

    Positions in mm, forces in N. ``mass`` (kg, carriage, carton and reflected motor
    inertia), ``viscous`` (N s/m), ``coulomb`` (N, friction force while moving; the
    carriage sticks when the drive force is below it at standstill), ``force_max`` (N,
    drive saturation), ``loop_rate`` (Hz, the PID runs once per loop period),
    ``delay_loops`` (computation delay: a force computed at one tick is applied this many
    ticks later), ``encoder_step`` (mm per count), ``noise`` (mm, standard deviation of the
    sensor noise before quantisation), ``deriv_cutoff`` (Hz, first-order filter of the
    derivative term, taken on the measurement), ``gains``.
    """

    mass: float = 4.0
    viscous: float = 20.0
    coulomb: float = 3.0
    force_max: float = 250.0
    loop_rate: float = 5000.0
    delay_loops: int = 1
    encoder_step: float = 0.002
    noise: float = 0.003
    deriv_cutoff: float = 400.0
    gains: Gains = field(default_factory=lambda: Gains(kp=20.0, ki=60.0, kd=0.35))


class AxisPlant(Plant):
    """A PID loop at ``params.loop_rate`` around the axis mechanics, sampled at ``period``.
    Its controller output (the force command after the +-``force_max`` clip, N) at each
    sample instant is :attr:`output`, named ``force``.

    Each loop tick: read the encoder (position plus noise, quantised), compute
    ``kp e + integral - kd d(measured)/dt`` (derivative on the measurement, filtered; the
    integral stops growing while the output saturates), clip to +-``force_max``, and apply
    the force computed ``delay_loops`` ticks earlier to the mechanics for one tick (two
    semi-implicit Euler sub-steps, Coulomb friction with sticking). The sample reported at
    a sample instant is the controller's latest encoder reading.
    """

    output_name = "force"

    def __init__(self, params: AxisParams | None = None, *, period: float = 1e-3,
                 seed: int = 0) -> None:
        self.params = params if params is not None else AxisParams()
        if not (self.params.loop_rate > 0 and period > 0 and self.params.mass > 0):
            raise ValueError("need a positive loop rate, sample period and mass")
        self.period = period
        self.gains = self.params.gains
        self._rng = np.random.default_rng(seed)
        self.reset(0.0)

    def reset(self, setpoint: float) -> None:
        self._pos = setpoint  # mm
        self._vel = 0.0  # mm/s
        self._integral = 0.0  # N
        self._dfilt = 0.0  # mm/s, filtered measured velocity
        self._meas = self._quantise(setpoint)
        self._queue = deque([0.0] * self.params.delay_loops)
        self._u = 0.0  # N, the latest controller output
        self._ticks = 0  # loop ticks done
        self._samples = 0  # samples reported

    def set_gains(self, **gains: float) -> Gains:
        unknown = set(gains) - {"kp", "ki", "kd"}
        if unknown:
            raise ValueError(f"unknown gain {sorted(unknown)[0]!r}; the axis has kp, ki, kd")
        if any(not math.isfinite(v) or v < 0 for v in gains.values()):
            raise ValueError("gains must be finite and not negative")
        self.gains = replace(self.gains, **gains)
        return self.gains

    def _quantise(self, x: float) -> float:
        q = self.params.encoder_step
        return round(x / q) * q if q > 0 else x

    def advance(self, n: int, setpoint: float) -> FloatArray:
        p = self.params
        ratio = p.loop_rate * self.period  # loop ticks per sample
        k = self._samples + np.arange(n)
        ticks_at = np.floor(k * ratio + 1e-9).astype(np.int64) + 1  # ticks done at sample k
        total = int(ticks_at[-1] - self._ticks) if n else 0
        noise = self._rng.standard_normal(total) * p.noise
        out = np.empty(n)
        forces = np.empty(n)
        u = self._u
        h = 1.0 / p.loop_rate
        sub = 0.5 * h
        g = self.gains
        alpha = 1.0 - math.exp(-2.0 * math.pi * p.deriv_cutoff * h)
        accel = 1000.0 / p.mass  # (mm/s^2) per N
        fmax, fc, b = p.force_max, p.coulomb, p.viscous / 1000.0  # b: N per (mm/s)
        pos, vel, integ, dfilt, meas = self._pos, self._vel, self._integral, self._dfilt, \
            self._meas
        queue, q = self._queue, p.encoder_step
        i = 0
        done = self._ticks
        for j in range(n):
            for _ in range(int(ticks_at[j] - done)):
                prev = meas
                x = pos + noise[i]
                meas = round(x / q) * q if q > 0 else x
                i += 1
                e = setpoint - meas
                dfilt += alpha * ((meas - prev) / h - dfilt)
                u = g.kp * e + integ - g.kd * dfilt
                if -fmax < u < fmax:
                    integ += g.ki * e * h
                else:
                    u = fmax if u > 0 else -fmax
                queue.append(u)
                force = queue.popleft()
                for _ in range(2):
                    drive = force - b * vel
                    if vel != 0.0:
                        f = drive - (fc if vel > 0 else -fc)
                        v = vel + sub * accel * f
                        vel = 0.0 if (v > 0) != (vel > 0) else v
                    elif abs(drive) > fc:
                        vel = sub * accel * (drive - (fc if drive > 0 else -fc))
                    pos += sub * vel
            done = int(ticks_at[j])
            out[j] = meas
            forces[j] = u
        self._pos, self._vel, self._integral, self._dfilt, self._meas = pos, vel, integ, \
            dfilt, meas
        self._ticks = done
        self._samples += n
        self._u = u
        self.output = forces
        return out
