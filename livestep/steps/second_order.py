"""Closed-form relations of the standard second-order system.

The system is G(s) = wn^2 / (s^2 + 2 zeta wn s + wn^2): damping ratio ``zeta``
(dimensionless), natural frequency ``wn`` (rad/s). Every formula here is the
textbook one under its usual name; sources are named beside each (Ogata,
*Modern Control Engineering*; Franklin, Powell & Emami-Naeini, *Feedback
Control of Dynamic Systems*; Dorf & Bishop, *Modern Control Systems*).
"""

from __future__ import annotations

import math

import numpy as np
from numpy.typing import ArrayLike, NDArray

__all__ = [
    "bandwidth",
    "overshoot_pct",
    "peak_time",
    "phase_margin_deg",
    "settling_constant",
    "settling_time_envelope",
    "settling_time_estimate",
    "step_and_impulse",
    "step_response",
    "zeta_from_overshoot",
]


def step_response(t: ArrayLike, zeta: float, wn: float) -> NDArray[np.float64]:
    """Unit-step response of the second-order system at times ``t`` (seconds).

    Zero for t < 0. Continuous across zeta = 1: the underdamped and
    over-damped forms are written with cos/cosh and sin(x)/x, sinh(x)/x so the
    critically damped limit 1 - (1 + wn t) exp(-wn t) falls out of both
    (Ogata, ch. 5, the three damping cases).
    """
    return step_and_impulse(t, zeta, wn)[0]


def step_and_impulse(t: ArrayLike, zeta: float,
                     wn: float) -> tuple[NDArray[np.float64], NDArray[np.float64]]:
    """Unit-step response s(t) and its time derivative, the impulse response h(t) (1/s).

    With wd = wn sqrt(|1 - zeta^2|), x = wd t and decay = exp(-zeta wn t):
    s = 1 - decay (cos x + (zeta wn / wd) sin x) and h = (wn^2 / wd) decay sin x when
    underdamped (sin(wd t) / wd stays accurate as wd goes to zero); cosh and sinh in place
    of cos and sin when over-damped.
    """
    t = np.maximum(np.asarray(t, dtype=float), 0.0)
    if zeta < 1.0:
        wd = wn * math.sqrt(1.0 - zeta * zeta)
        x = wd * t
        decay = np.exp(t * (-zeta * wn))
        sin_x = np.sin(x)
        s = 1.0 - decay * (np.cos(x) + (zeta * wn / wd) * sin_x)
        return s, (wn * wn / wd) * (decay * sin_x)
    sigma_t = zeta * wn * t
    root = math.sqrt(zeta * zeta - 1.0)
    x = wn * root * t
    # exp(-sigma t) cosh, sinh without overflow; the slow pole wn (zeta - root) written as
    # wn / (zeta + root) so heavy damping does not cancel it to zero
    e_slow = np.exp(-wn / (zeta + root) * t)
    e_fast = np.exp(-x - sigma_t)
    small = x < 1e-4
    safe_x = np.where(small, 1.0, x)
    sinh_over_x = np.where(small, np.exp(-sigma_t) * (1.0 + x * x / 6.0),
                           (e_slow - e_fast) / (2.0 * safe_x))
    s = 1.0 - 0.5 * (e_slow + e_fast) - sigma_t * sinh_over_x
    return s, wn * wn * t * sinh_over_x


def overshoot_pct(zeta: float) -> float:
    """Percent overshoot of the step response, 100 exp(-zeta pi / sqrt(1 - zeta^2)).

    Zero for zeta >= 1 (Ogata, eq. for maximum overshoot Mp).
    """
    if zeta >= 1.0:
        return 0.0
    return 100.0 * math.exp(-zeta * math.pi / math.sqrt(1.0 - zeta * zeta))


def zeta_from_overshoot(os_pct: float) -> float | None:
    """Damping ratio from percent overshoot: zeta = -ln(OS) / sqrt(pi^2 + ln^2(OS)).

    OS is the overshoot as a fraction (Dorf & Bishop; Nise). ``None`` when there
    is no overshoot to invert.
    """
    if not os_pct or os_pct <= 0.0 or os_pct >= 100.0:
        return None
    ln_os = math.log(os_pct / 100.0)
    return -ln_os / math.sqrt(math.pi**2 + ln_os**2)


def peak_time(zeta: float, wn: float) -> float | None:
    """Peak time Tp = pi / wd, wd = wn sqrt(1 - zeta^2), in seconds (Ogata)."""
    if zeta >= 1.0:
        return None
    return math.pi / (wn * math.sqrt(1.0 - zeta * zeta))


def settling_constant(band_pct: float = 2.0) -> float:
    """c in the rule of thumb Ts = c / (zeta wn): -ln(band), 3.0 for 5 % and 4.6 for 1 %;
    for 2 % the rounded 4 that Ogata and Dorf & Bishop quote (-ln 0.02 = 3.9)."""
    if math.isclose(band_pct, 2.0):
        return 4.0
    return -math.log(band_pct / 100.0)


def settling_time_estimate(zeta: float, wn: float, band_pct: float = 2.0) -> float:
    """Rule-of-thumb settling time, seconds: 4/(zeta wn) for a 2 % band.

    Generalised as -ln(band) / (zeta wn) (:func:`settling_constant`). Valid for
    underdamped responses only (it follows the decay envelope).
    """
    return settling_constant(band_pct) / (zeta * wn)


def settling_time_envelope(zeta: float, wn: float, band_pct: float = 2.0) -> float:
    """Envelope bound on the settling time, -ln(tol sqrt(1 - zeta^2)) / (zeta wn), seconds."""
    tol = band_pct / 100.0
    return -math.log(tol * math.sqrt(1.0 - zeta * zeta)) / (zeta * wn)


def bandwidth(zeta: float, wn: float) -> float:
    """Closed-loop -3 dB bandwidth, rad/s.

    wBW = wn sqrt(1 - 2 zeta^2 + sqrt(4 zeta^4 - 4 zeta^2 + 2)) (Nise; Ogata), valid
    for all zeta > 0. With a = 1 - 2 zeta^2 the root's argument is a + sqrt(a^2 + 1), written
    1 / (sqrt(a^2 + 1) - a) for a < 0, so heavy damping does not cancel to zero.
    """
    a = 1.0 - 2.0 * zeta * zeta
    root = math.hypot(a, 1.0)
    return wn * math.sqrt(a + root if a >= 0.0 else 1.0 / (root - a))


def phase_margin_deg(zeta: float) -> float:
    """Phase margin, degrees, of the unity-feedback loop wn^2 / (s (s + 2 zeta wn)).

    PM = atan(2 zeta / sqrt(sqrt(1 + 4 zeta^4) - 2 zeta^2)) (Ogata; Franklin et
    al., who also give the rule of thumb zeta ~ PM/100 up to about 60 degrees).
    Only meaningful when the closed loop really is that standard form. Computed as
    atan(2 zeta sqrt(sqrt(1 + 4 zeta^4) + 2 zeta^2)), the same value (multiply the root's
    argument by its conjugate), which does not cancel to zero for heavy damping.
    """
    z2 = zeta * zeta
    return math.degrees(math.atan(2.0 * zeta * math.sqrt(math.hypot(1.0, 2.0 * z2) + 2.0 * z2)))
