"""livestep.steps.model_fit (fit_second_order, closed_form_estimate) against known systems.

The data are closed-form second-order responses (Ogata, Modern Control Engineering,
ch. 5) or scipy.signal simulations, sampled, delayed and impaired in the test helpers
(_signals.py); the fitted zeta, wn, gain and dead time are compared with the values
the data were made from.
"""

from __future__ import annotations

import math

import control
import numpy as np
import pytest
from _signals import (
    BENCH,
    HEAVY,
    NOISE_SEEDS,
    NOISY_ZETAS,
    WN,
    ZETAS,
    StepRecord,
    interpolated,
    jump_margin,
    make_step,
    reference,
    sampled_for,
    scipy_step,
)
from hypothesis import given, settings
from hypothesis import strategies as st
from scipy import signal
from scipy.optimize import brentq

from livestep.steps.measure import StepMetrics, measure_step
from livestep.steps.model_fit import ModelFit, closed_form_estimate, fit_second_order

DEAD_TIME = 3e-3  # s


def measure(rec: StepRecord) -> StepMetrics:
    return measure_step(rec.t, rec.y, rec.i_step, setpoint=rec.sp,
                        setpoint_before=rec.sp_before, setpoint_after=rec.sp_after,
                        pre_start=0)


def fit(rec: StepRecord) -> tuple[StepMetrics, ModelFit]:
    m = measure(rec)
    model = fit_second_order(rec.t, rec.y, m)
    assert model is not None
    return m, model


def _rel(value: float, expected: float) -> float:
    return abs(value / expected - 1.0)


# ---------------------------------------------------------------- clean data


@pytest.mark.parametrize("y0,sp_change,gain", [(0.0, 1.0, 1.0), (250.0, -40.0, 0.97),
                                               (1.5e-3, -2.0e-3, 1.02)])
@pytest.mark.parametrize("zeta", ZETAS)
def test_clean_fit(zeta: float, y0: float, sp_change: float, gain: float) -> None:
    # Clean sampled steps: zeta and wn within 3 % of the values the closed form was made
    # with; gain (feedback change / setpoint change) within 1 %; no dead time invented
    # (within the 1.5 ms dead-time tolerance).
    rec, _ = sampled_for(zeta, y0=y0, sp_change=sp_change, gain=gain)
    _, model = fit(rec)
    assert _rel(model.zeta, zeta) <= 0.03
    assert _rel(model.wn, WN) <= 0.03
    assert model.gain is not None and _rel(model.gain, gain) <= 0.01
    assert model.amplitude == pytest.approx(gain * sp_change, rel=0.01)
    assert 0.0 <= model.dead_time <= 1.5e-3
    # an exact model of noise-free data leaves (almost) nothing unexplained
    assert model.fit_r2 > 0.999 and model.fit_nrmse < 1e-3


@pytest.mark.parametrize("zeta", [0.27, 0.6, 1.0, 2.0])
@pytest.mark.parametrize("theta", [3.3e-3, 8e-3])
def test_clean_fit_dead_time_from_a_scipy_simulation(zeta: float, theta: float) -> None:
    # Reference: scipy.signal.step of wn^2/(s^2 + 2 zeta wn s + wn^2), delayed by theta (not a
    # multiple of the sample period).
    ref = reference(zeta, WN)
    td, yd = scipy_step([WN * WN], [1.0, 2 * zeta * WN, WN * WN], 3.0 * ref.settling)
    rec = make_step(zeta, WN, dt=ref.rise / 120, t_window=2.5 * ref.settling + theta,
                    y0=5.0, sp_change=-2.0, dead_time=theta, response=interpolated(td, yd))
    _, model = fit(rec)
    assert _rel(model.zeta, zeta) <= 0.03
    assert _rel(model.wn, WN) <= 0.03
    assert abs(model.dead_time - theta) <= 1.5e-3


def test_fit_derived_figures() -> None:
    # bandwidth: the -3 dB frequency of the fitted closed loop (scipy.signal.freqresp);
    # phase margin: control.margin of the fitted loop wn^2 / (s (s + 2 zeta wn));
    # settling estimate: 4 / (zeta wn) (Ogata) for an underdamped fit.
    rec, _ = sampled_for(0.45, sp_change=1.0)
    _, model = fit(rec)
    z, wn = model.zeta, model.wn
    sys = signal.TransferFunction([wn * wn], [1.0, 2 * z * wn, wn * wn])

    def excess(w: float) -> float:
        return float(np.abs(signal.freqresp(sys, [w])[1][0]) ** 2) - 0.5

    w_res = wn * math.sqrt(max(1 - 2 * z * z, 0.0))
    assert model.bandwidth == pytest.approx(brentq(excess, w_res + 1e-9, 100 * wn), rel=1e-6)
    _, pm, _, _ = control.margin(control.tf([wn * wn], [1.0, 2 * z * wn, 0.0]))
    assert model.phase_margin_deg == pytest.approx(pm, abs=1e-6)
    assert model.settling_time_estimate == pytest.approx(4.0 / (z * wn), rel=1e-12)
    over, _ = sampled_for(2.0)
    assert fit(over)[1].settling_time_estimate is None


# ---------------------------------------------------------------- impaired data


@pytest.mark.parametrize("seed", NOISE_SEEDS)
@pytest.mark.parametrize("zeta", NOISY_ZETAS)
def test_bench_impairments_fit(zeta: float, seed: int) -> None:
    # Noise 0.1 % rms, quantisation 0.1 %, 3 ms dead time, +-25 % jitter, 2 % dropped
    # samples: zeta and wn within 6 %, dead time within 1.5 ms, gain within 1 %.
    rec, _ = sampled_for(zeta, y0=40.0, sp_change=-8.0, gain=0.98, dead_time=DEAD_TIME,
                         extra=DEAD_TIME, seed=seed, **BENCH)
    _, model = fit(rec)
    assert _rel(model.zeta, zeta) <= 0.06
    assert _rel(model.wn, WN) <= 0.06
    assert abs(model.dead_time - DEAD_TIME) <= 1.5e-3
    assert model.gain is not None and _rel(model.gain, 0.98) <= 0.01
    # the residual is the injected noise: sqrt(0.1 %^2 + q^2/12) of the amplitude, +-30 %
    assert model.fit_nrmse == pytest.approx(math.sqrt(1e-6 + 1e-6 / 12), rel=0.3)


@pytest.mark.parametrize("seed", NOISE_SEEDS)
@pytest.mark.parametrize("zeta", NOISY_ZETAS)
def test_no_invented_dead_time(zeta: float, seed: int) -> None:
    # The same impairments without dead time: the fit must not invent any (beyond the
    # 1.5 ms dead-time tolerance).
    rec, _ = sampled_for(zeta, y0=-2.0, sp_change=1.0, seed=seed, **BENCH)
    _, model = fit(rec)
    assert model.dead_time <= 1.5e-3
    assert _rel(model.zeta, zeta) <= 0.06
    assert _rel(model.wn, WN) <= 0.06


@pytest.mark.parametrize("seed", NOISE_SEEDS)
@pytest.mark.parametrize("zeta", NOISY_ZETAS)
def test_heavy_noise_fit(zeta: float, seed: int) -> None:
    # Noise 1 % rms of the amplitude: zeta within 10 %, wn within 8 %.
    rec, _ = sampled_for(zeta, y0=1.0, sp_change=2.0, seed=seed, **HEAVY)
    _, model = fit(rec)
    assert _rel(model.zeta, zeta) <= 0.10
    assert _rel(model.wn, WN) <= 0.08
    assert model.fit_nrmse == pytest.approx(1e-2, rel=0.2)


# ---------------------------------------------------------------- closed-form estimate


@pytest.mark.parametrize("zeta", [0.2, 0.27, 0.35, 0.45, 0.6, 0.65])
def test_closed_form_estimate_clean(zeta: float) -> None:
    # zeta from %OS by zeta = -ln(OS) / sqrt(pi^2 + ln^2 OS) and wn = pi / (Tp sqrt(1 -
    # zeta^2)) (Ogata; Dorf & Bishop), from the measured overshoot and peak time: on clean
    # data both within 3 % (the fit's clean-data tolerance); the settling estimate is
    # 4 / (zeta wn) of those estimates.
    rec, _ = sampled_for(zeta, y0=3.0, sp_change=-1.0)
    est = closed_form_estimate(measure(rec))
    assert est.zeta is not None and est.wn is not None and est.settling_time is not None
    assert _rel(est.zeta, zeta) <= 0.03
    assert _rel(est.wn, WN) <= 0.03
    assert est.settling_time == pytest.approx(4.0 / (est.zeta * est.wn), rel=1e-12)


def test_closed_form_estimate_with_dead_time() -> None:
    # The peak time is measured from the step instant, so dead time theta adds to it and the
    # estimate is wn' = pi / ((Tp + theta) sqrt(1 - zeta^2)), Tp = pi / wd (Ogata).
    zeta, theta = 0.35, 5e-3
    rec, _ = sampled_for(zeta, dead_time=theta, extra=theta)
    est = closed_form_estimate(measure(rec))
    tp = math.pi / (WN * math.sqrt(1 - zeta * zeta))
    assert est.zeta is not None and est.wn is not None
    assert _rel(est.zeta, zeta) <= 0.03
    assert _rel(est.wn, math.pi / ((tp + theta) * math.sqrt(1 - zeta * zeta))) <= 0.03
    assert est.wn < WN


@pytest.mark.parametrize("zeta", [1.0, 1.5, 3.0])
def test_closed_form_estimate_without_overshoot(zeta: float) -> None:
    # No overshoot, no peak time: the formulas do not apply.
    rec, _ = sampled_for(zeta)
    est = closed_form_estimate(measure(rec))
    assert est.zeta is None and est.wn is None and est.settling_time is None


def test_no_fit_without_a_response() -> None:
    rng = np.random.default_rng(3)
    t = np.arange(1000) * 1e-3
    y = 1.0 + 1e-4 * rng.standard_normal(t.size)
    m = measure_step(t, y, 300, setpoint_before=1.0, setpoint_after=2.0)
    assert fit_second_order(t, y, m) is None


# ---------------------------------------------------------------- properties

CLEAR_ZETAS = st.floats(min_value=0.2, max_value=3.0).filter(
    lambda z: jump_margin(z, 0.02) > 0.05)


@settings(max_examples=25, deadline=None)
@given(zeta=CLEAR_ZETAS, offset=st.floats(-1e4, 1e4), magnitude=st.floats(1e-3, 1e3),
       sign=st.sampled_from([1.0, -1.0]), shift=st.floats(-1e3, 1e4))
def test_fit_invariance_and_accuracy(zeta: float, offset: float, magnitude: float, sign: float,
                                     shift: float) -> None:
    # The model is of the normalised response, so an offset, a scaling, a sign flip of the
    # data (with the setpoint) and a shift of the time origin leave zeta, wn and the dead
    # time unchanged, and the gain too. Against the truth: the clean-data tolerances.
    scale = sign * magnitude
    base = make_step(zeta, WN, dt=reference(zeta, WN).rise / 120,
                     t_window=2.5 * reference(zeta, WN).settling)
    moved = StepRecord(t=base.t + shift, y=offset + scale * base.y, sp=offset + scale * base.sp,
                       i_step=base.i_step, sp_before=offset + scale * base.sp_before,
                       sp_after=offset + scale * base.sp_after, t_step=base.t_step + shift,
                       dt=base.dt, initial=offset + scale * base.initial,
                       final=offset + scale * base.final)
    _, a = fit(base)
    _, b = fit(moved)
    assert b.zeta == pytest.approx(a.zeta, rel=1e-3)
    assert b.wn == pytest.approx(a.wn, rel=1e-3)
    assert b.dead_time == pytest.approx(a.dead_time, abs=1e-3 / WN)
    assert b.gain is not None and a.gain is not None
    assert b.gain == pytest.approx(a.gain, rel=1e-4)
    assert _rel(b.zeta, zeta) <= 0.03 and _rel(b.wn, WN) <= 0.03
    assert _rel(b.gain, 1.0) <= 0.01
