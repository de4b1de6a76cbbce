"""Second-order-plus-dead-time model of a measured step response.

Two independent estimates per step:

- closed form from the measured overshoot and peak time: zeta from %OS and
  wn = pi / (Tp sqrt(1 - zeta^2)), with the 4/(zeta wn) settling estimate
  (see :mod:`livestep.steps.second_order` for the formulas and their sources);
- a least-squares fit (scipy.optimize.least_squares) of
  y(t) = y0 + A s(t - t_step - dead_time; zeta, wn) to the sampled response,
  valid for over-damped responses (zeta >= 1) as well.

Pure functions: arrays in, frozen dataclasses out.
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from functools import lru_cache
from typing import TYPE_CHECKING

import numpy as np
from numpy.typing import NDArray

from livestep.steps import second_order as so
from livestep.steps.measure import StepMetrics

if TYPE_CHECKING:
    from scipy.optimize import OptimizeResult

__all__ = ["ClosedFormEstimate", "ModelFit", "closed_form_estimate", "fit_second_order",
           "load_solver"]

FloatArray = NDArray[np.float64]
_MAX_BINS = 200
_CHI2_1DOF_95 = 3.841  # scipy.stats.chi2.ppf(0.95, 1)
_LOG_ZETA = (math.log(1e-3), math.log(1e4))  # the damping ratios a fit may reach
_LOG_WN_RANGE = math.log(1e6)  # how far (a factor) wn may go from its start


@dataclass(frozen=True, kw_only=True)
class ClosedFormEstimate:
    """zeta (dimensionless) from %OS; wn (rad/s) from the peak time measured from the step
    instant (so dead time inflates it); ``settling_time`` = 4/(zeta wn), seconds."""

    zeta: float | None
    wn: float | None
    settling_time: float | None


@dataclass(frozen=True, kw_only=True)
class ModelFit:
    """Fitted model. ``gain``: steady-state gain, feedback change per setpoint change
    (``None`` without a setpoint); ``wn`` and ``bandwidth`` in rad/s; ``dead_time`` in
    seconds; ``fit_r2`` and ``fit_nrmse`` (rms residual, fraction of |amplitude|) on the
    raw samples of the fitted span; ``phase_margin_deg`` from zeta for the standard loop."""

    zeta: float
    wn: float
    gain: float | None
    dead_time: float
    amplitude: float
    fit_r2: float
    fit_nrmse: float
    bandwidth: float
    phase_margin_deg: float
    settling_time_estimate: float | None


def closed_form_estimate(m: StepMetrics, band_pct: float = 2.0) -> ClosedFormEstimate:
    """Textbook estimates from the measured overshoot and peak time (underdamped only)."""
    zeta = so.zeta_from_overshoot(m.overshoot_pct) if m.peak_time else None
    if zeta is None or not m.peak_time:
        return ClosedFormEstimate(zeta=None, wn=None, settling_time=None)
    wn = math.pi / (m.peak_time * math.sqrt(1.0 - zeta * zeta))
    return ClosedFormEstimate(zeta=zeta, wn=wn,
                              settling_time=so.settling_time_estimate(zeta, wn, band_pct))


def _bin_means(t: FloatArray, y: FloatArray, edges_t: FloatArray
               ) -> tuple[FloatArray, FloatArray, FloatArray]:
    """Means of t and y in the time bins ``edges_t`` (empty bins dropped) and the
    sample counts, for weighting."""
    edges = np.searchsorted(t, edges_t)  # sorted: the empty bins are repeated edges
    edges = edges[(edges < t.size) & np.append(True, np.diff(edges) > 0)]
    counts = np.diff(np.append(edges, t.size)).astype(float)
    return (np.add.reduceat(t, edges) / counts, np.add.reduceat(y, edges) / counts, counts)


def _bin_edges(pre: float, span: float, finest: float) -> FloatArray:
    """Time bin edges, seconds from the step: 20 even bins before it, then bins that
    widen geometrically from ``finest`` so the start of the response keeps its shape."""
    before = np.linspace(-pre, 0.0, 21)[:-1] if pre > 0 else np.empty(0)
    finest = min(max(finest, 1e-12), span / 10)
    after = np.geomspace(finest, span, _MAX_BINS - 20)
    return np.concatenate((before, [0.0], after))


def _dead_time_is_clear(sol: OptimizeResult, noise_var: float) -> bool:
    """The fitted dead time is more than 4 standard errors from zero (a Wald test, so
    the likelihood-ratio refit is not needed); errors from the Jacobian at the solution."""
    q = abs(float(sol.x[4]))
    if q == 0.0:
        return False
    try:
        cov = np.linalg.inv(sol.jac.T @ sol.jac) * noise_var
    except np.linalg.LinAlgError:
        return False
    se = math.sqrt(max(float(cov[4, 4]), 0.0))
    return se > 0.0 and q / se > 4.0


def _model_crossing(zeta: float, level: float) -> float:
    """Normalised time wn*t of the first crossing of ``level`` by the unit step response
    (to 0.1 % of zeta: a start value for the fit)."""
    return _crossing(round(zeta, 3), level)


@lru_cache(maxsize=4096)
def _crossing(zeta: float, level: float) -> float:
    horizon = 20.0 * max(1.0, zeta) + 10.0
    x = np.linspace(0.0, horizon, 4001)
    s = so.step_response(x, zeta, 1.0)
    return float(x[int(np.argmax(s >= level))])


def _initial_guess(m: StepMetrics) -> tuple[float, float, float]:
    """(zeta, wn, dead_time) to start the fit from, using the measured crossings."""
    cf = closed_form_estimate(m)
    t10 = (m.delay_time or 0.0) - (m.rise_time or 0.0) * 0.5
    if cf.zeta is not None and m.peak_time:
        zeta = cf.zeta
        x10 = _model_crossing(zeta, 0.1)
        xp = math.pi / math.sqrt(1.0 - zeta * zeta)
        # t10 = theta + x10/wn and Tp = theta + xp/wn
        wn = (xp - x10) / max(m.peak_time - t10, 1e-12)
    else:
        zeta = 1.2
        x10, x90 = _model_crossing(zeta, 0.1), _model_crossing(zeta, 0.9)
        wn = (x90 - x10) / max(m.rise_time or 1.0, 1e-12)
    theta = max(0.0, t10 - _model_crossing(zeta, 0.1) / wn)
    return zeta, wn, theta


def load_solver() -> None:
    """Load the least-squares solver (scipy.optimize, about half a second) now rather than
    on the first fit: for a caller with something else running meanwhile (a recording
    read by another process)."""
    import scipy.optimize  # noqa: F401


def fit_second_order(
    t: FloatArray,
    feedback: FloatArray,
    m: StepMetrics,
    *,
    window_end: float | None = None,
) -> ModelFit | None:
    """Least-squares fit of gain, damping ratio, natural frequency and dead time.

    ``t`` (seconds) and ``feedback`` are the samples of the step (before and after
    ``m.t_step``); ``m`` gives the measured levels and crossings used to start the
    fit and to choose the span (to about three settling times). ``None`` when the
    response has no measurable rise.
    """
    if m.rise_time is None or m.delay_time is None or m.amplitude == 0.0:
        return None
    # Loaded on the first fit, not with the module: half a second of a command's start,
    # which a forked reader can use meanwhile.
    from scipy.optimize import least_squares

    t = np.asarray(t, dtype=float)
    y = np.asarray(feedback, dtype=float)
    end = float(t[-1]) if window_end is None else window_end
    reach = m.settling_time if m.settling_time is not None else end - m.t_step
    span = min(end - m.t_step, max(3.0 * reach, 10.0 * (m.delay_time + m.rise_time)))
    pre = min(0.2 * span, m.t_step - float(t[0]))
    sel = (t >= m.t_step - pre) & (t <= m.t_step + span)
    ts, yn = t[sel] - m.t_step, (y[sel] - m.initial) / m.amplitude
    if ts.size < 8:
        return None
    finest = max(m.sample_period, min(m.delay_time, m.rise_time) / 40.0)
    tb, yb, counts = _bin_means(ts, yn, _bin_edges(pre, span, finest))
    weight = np.sqrt(counts)  # a bin mean of n samples has 1/n of a sample's variance

    zeta0, wn0, theta0 = _initial_guess(m)

    # Parameters: offset, gain (both of the normalised response), log zeta, log wn and
    # q = sqrt(dead time), which keeps the dead time at or above zero without bounds so
    # the fast Levenberg-Marquardt solver (MINPACK) can be used. The solver may wander far
    # on data the model cannot describe (a first-order response drives zeta up without
    # limit): zeta is held within 1e-3..1e4 and wn within 1e-6..1e6 times its start.
    log_wn0 = math.log(wn0)

    def zeta_wn(log_zeta: float, log_wn: float) -> tuple[float, float]:
        return (math.exp(min(max(log_zeta, _LOG_ZETA[0]), _LOG_ZETA[1])),
                math.exp(min(max(log_wn, log_wn0 - _LOG_WN_RANGE), log_wn0 + _LOG_WN_RANGE)))

    def residual(p: FloatArray, tt: FloatArray, yy: FloatArray) -> FloatArray:
        c0, g, log_zeta, log_wn, q = p
        return c0 + g * so.step_response(tt - q * q, *zeta_wn(log_zeta, log_wn)) - yy

    def weighted(p: FloatArray, tt: FloatArray, yy: FloatArray) -> FloatArray:
        return weight * residual(p, tt, yy)

    def jacobian(p: FloatArray, tt: FloatArray, yy: FloatArray) -> FloatArray:
        # s(tau; zeta, wn) = S(wn tau; zeta): ds/dlog(wn) = tau h, ds/dtheta = -h; the
        # zeta column by a forward difference.
        c0, g, log_zeta, log_wn, q = p
        zeta, wn = zeta_wn(log_zeta, log_wn)
        tau = tt - q * q
        s, h = so.step_and_impulse(tau, zeta, wn)
        dz = 1e-6
        s_dz = so.step_response(tau, zeta * math.exp(dz), wn)
        return weight[:, None] * np.column_stack((np.ones_like(tt), s, g * (s_dz - s) / dz,
                                                  g * np.maximum(tau, 0.0) * h, -2 * q * g * h))

    q0 = math.sqrt(max(min(theta0, 0.4 * span), 1e-3 / wn0))
    x0 = np.array([0.0, 1.0, math.log(zeta0), math.log(wn0), q0])
    best = least_squares(weighted, x0, jac=jacobian, args=(tb, yb), method="lm",
                         x_scale=np.array([0.1, 0.1, 0.5, 0.5, q0]))
    res = residual(best.x, ts, yn)
    # Residual variance, floored at (0.01 % of the amplitude)^2 so that exact data do not
    # make a numerical crumb of improvement look significant.
    noise_var = max(float(np.mean(res**2)), 1e-8)
    if not _dead_time_is_clear(best, noise_var):
        # Keep the dead time only if the data need it: refit without one and compare by a
        # likelihood-ratio test (Wilks: 2 x the cost difference over the noise variance is
        # chi-square with one degree of freedom; 95 % level, 3.84).
        no_delay = least_squares(
            lambda v, tt, yy: weighted(np.append(v, 0.0), tt, yy), best.x[:4],
            jac=lambda v, tt, yy: jacobian(np.append(v, 0.0), tt, yy)[:, :4],
            args=(tb, yb), method="lm", x_scale=np.array([0.1, 0.1, 0.5, 0.5]))
        if 2.0 * (no_delay.cost - best.cost) / noise_var < _CHI2_1DOF_95:
            best.x = np.append(no_delay.x, 0.0)
            res = residual(best.x, ts, yn)
    c0, g, log_zeta, log_wn, q = best.x
    theta = q * q
    zeta, wn = zeta_wn(log_zeta, log_wn)
    ss_tot = float(np.sum((yn - yn.mean()) ** 2))
    r2 = 1.0 - float(np.sum(res**2)) / ss_tot if ss_tot > 0 else 0.0
    amplitude = g * m.amplitude
    sp_change = None
    if m.setpoint_before is not None and m.setpoint_after is not None:
        sp_change = m.setpoint_after - m.setpoint_before
    return ModelFit(
        zeta=zeta, wn=wn, gain=amplitude / sp_change if sp_change else None,
        dead_time=float(theta), amplitude=amplitude, fit_r2=r2,
        fit_nrmse=float(np.sqrt(np.mean(res**2))),
        bandwidth=so.bandwidth(zeta, wn), phase_margin_deg=so.phase_margin_deg(zeta),
        settling_time_estimate=4.0 / (zeta * wn) if zeta < 1.0 else None,
    )
