"""Identification against known plants: the virtual bench's axis (mass, viscous and
Coulomb friction known), and a first-order-plus-dead-time process simulated with
python-control, cross-checked with Skogestad's SIMC rules."""

from __future__ import annotations

import math

import control
import numpy as np
import pytest
from _axis_session import bench_session

from livestep.bench.plants import AxisParams
from livestep.tuning.controller import ControllerSpec
from livestep.tuning.identify import identify
from livestep.tuning.records import StepRecord, records_of

AXIS = ControllerSpec(rate=5000, derivative_filter=400, output_limit=250, delay=1,
                      plant="auto")  # the bench's loop (AxisParams' defaults)

# Stated tolerances for the axis: the bench integrates its mechanics with two
# semi-implicit Euler sub-steps per loop period, the model exactly, so a small bias is
# expected: mass within 5 %, viscous friction within 15 %, Coulomb friction within 20 %.
MASS_TOL, VISCOUS_TOL, COULOMB_TOL = 0.05, 0.15, 0.20


def test_the_axis_mass_and_friction_are_recovered_from_small_steps_under_three_gain_sets():
    truth = AxisParams()
    results = bench_session([(20.0, 60.0, 0.1), (20.0, 60.0, 0.2), (20.0, 60.0, 0.3)])
    ident = identify(records_of(results), AXIS)
    m = ident.model
    assert m.form == "position"  # chosen over first order by the fit
    # the model is per mm: N s^2/mm x 1000 = kg, N s/mm x 1000 = N s/m
    assert m.inertia * 1000 == pytest.approx(truth.mass, rel=MASS_TOL)
    assert m.viscous * 1000 == pytest.approx(truth.viscous, rel=VISCOUS_TOL)
    assert m.coulomb == pytest.approx(truth.coulomb, rel=COULOMB_TOL)
    assert ident.r2 > 0.999 and ident.gain_sets == 3
    assert all(ident.sigma[n] > 0 for n in ("inertia", "viscous", "coulomb"))


def test_one_gain_set_cannot_identify():
    results = bench_session([(20.0, 60.0, 0.3)], moves=(5.0, -5.0))
    with pytest.raises(ValueError, match="two gain sets or more"):
        identify(records_of(results), AXIS)


def fopdt_steps(k: float, tau: float, theta: float, spec: ControllerSpec,
                gain_sets: list[tuple[float, float]], tau2: float = 0.0) -> list[StepRecord]:
    """Unit steps of a PI loop around K e^(-theta s) / ((tau s + 1)(tau2 s + 1)), simulated
    with python-control (zero-order-hold plant, theta a whole number of loop periods)."""
    h = spec.period
    z = control.tf([1, 0], [1], h)
    den = np.polymul([tau, 1], [tau2, 1]) if tau2 else [tau, 1]
    plant = control.ss(control.c2d(control.tf([k], den), h, "zoh")) \
        * control.ss(z ** (-round(theta / h)))
    out = []
    t = np.arange(int(6 * tau / h)) * h
    for i, (kp, ki) in enumerate(gain_sets):
        loop = control.feedback(plant * control.ss(kp + ki * h / (z - 1)), 1)
        y = control.forced_response(loop, t, np.ones(len(t))).outputs
        rng = np.random.default_rng(i)
        out.append(StepRecord(i, t, y + rng.normal(0, 0.002, len(t)), 1.0, (kp, ki, 0.0)))
    return out


def simc_pi(k: float, tau: float, theta: float) -> tuple[float, float]:
    """SIMC PI settings with tau_c = theta (Skogestad, "Simple analytic rules for model
    reduction and PID controller tuning", J. Process Control 13, 2003): Kc = tau / (k
    (tau_c + theta)), tau_I = min(tau, 4 (tau_c + theta)); returned as (kp, ki = Kc /
    tau_I)."""
    tc = theta
    kc = tau / (k * (tc + theta))
    ti = min(tau, 4 * (tc + theta))
    return kc, kc / ti


def test_a_first_order_process_with_dead_time_is_recovered_and_gives_the_same_simc_tuning():
    spec = ControllerSpec(rate=100, plant="auto")
    k, tau, theta = 2.0, 1.5, 0.2
    records = fopdt_steps(k, tau, theta, spec, [(0.5, 0.3), (1.0, 0.6)])
    ident = identify(records, spec)
    m = ident.model
    assert m.form == "process"
    assert m.gain == pytest.approx(k, rel=0.03)
    assert m.tau == pytest.approx(tau, rel=0.05)
    assert m.dead_ticks == round(theta * spec.rate)
    # cross-check: SIMC PI settings from the identified model agree with those of the truth
    kp, ki = simc_pi(m.gain, m.tau, m.dead_ticks / spec.rate)
    kp0, ki0 = simc_pi(k, tau, theta)
    assert kp == pytest.approx(kp0, rel=0.08) and ki == pytest.approx(ki0, rel=0.08)
    assert math.isfinite(ident.relative("tau"))


def test_a_second_order_process_is_told_from_a_first_order_one():
    spec = ControllerSpec(rate=100, plant="process")
    records = fopdt_steps(1.5, 1.2, 0.1, spec, [(0.6, 0.4), (1.2, 0.8)], tau2=0.4)
    ident = identify(records, spec)
    m = ident.model
    assert m.form == "second"  # Akaike's criterion prefers it to first order
    assert m.gain == pytest.approx(1.5, rel=0.05)
    assert sorted([m.tau, m.tau2]) == pytest.approx([0.4, 1.2], rel=0.1)
    assert {f for f, _, _ in ident.forms} == {"process", "second"}
