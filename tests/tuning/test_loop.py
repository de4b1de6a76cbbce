"""The loop simulation against python-control's discrete-time closed loop of the same law
(independent of livestep's code), and Coulomb friction's dead band."""

from __future__ import annotations

import math

import control
import numpy as np
import pytest

from livestep.tuning.controller import ControllerSpec
from livestep.tuning.loop import PlantModel, simulate

H = 1.0 / 5000.0


def reference(plant: control.TransferFunction, spec: ControllerSpec, kp: float, ki: float,
              kd: float, ticks: int, amplitude: float, dead: int = 0) -> np.ndarray:
    """The closed loop built from transfer functions with python-control: the plant
    discretised with a zero-order hold, the integral as ki h / (z - 1) (the sum of past
    errors), the filtered backward-difference derivative alpha (z - 1) / (h (z - (1 -
    alpha))), the computation delay z^-delay."""
    h = spec.period
    z = control.tf([1, 0], [1], h)
    pd = control.ss(control.c2d(plant, h, "zoh"))  # state space: polynomials of poles near
    alpha = 1 - math.exp(-2 * math.pi * spec.derivative_filter * h) \
        if spec.derivative_filter else 1.0  # z = 1 multiplied out lose digits
    c1 = control.ss(kp + ki * h / (z - 1))
    deriv = control.ss(kd * alpha * (z - 1) / (h * (z - (1 - alpha))))
    fwd = pd * control.ss(z ** (-(spec.delay + dead)))
    if spec.derivative == "measurement":
        loop = control.feedback(fwd, c1 + deriv) * c1  # u = c1 e - deriv y
    else:
        loop = control.feedback(fwd * (c1 + deriv), 1)  # u = (c1 + deriv) e
    t = np.arange(ticks) * h
    return control.forced_response(loop, t, np.full(ticks, amplitude)).outputs


@pytest.mark.parametrize("derivative", ["measurement", "error"])
@pytest.mark.parametrize("kd", [0.1, 0.3])
def test_position_loop_matches_python_control(derivative, kd):
    spec = ControllerSpec(rate=5000, derivative=derivative, derivative_filter=400, delay=1)
    inertia, viscous = 0.004, 0.02  # N s^2/mm, N s/mm
    ticks = 2000
    ours = simulate(PlantModel("position", inertia=inertia, viscous=viscous), spec,
                    np.array([[20.0, 60.0, kd]]), 5.0, ticks).y[0]
    ref = reference(control.tf([1], [inertia, viscous, 0]), spec, 20.0, 60.0, kd, ticks, 5.0)
    assert np.max(np.abs(ours - ref)) < 1e-8 * 5.0


def test_process_loop_with_dead_time_matches_python_control():
    spec = ControllerSpec(rate=100, derivative_filter=0, delay=0)
    dead = 7  # loop periods of plant dead time
    ticks = 600
    ours = simulate(PlantModel("process", gain=2.0, tau=0.8, dead_ticks=dead), spec,
                    np.array([[0.4, 0.5, 0.0]]), 1.0, ticks).y[0]
    z = control.tf([1, 0], [1], spec.period)
    plant = control.ss(control.c2d(control.tf([2.0], [0.8, 1]), spec.period, "zoh")) \
        * control.ss(z ** (-dead))
    c = control.ss(0.4 + 0.5 * spec.period / (z - 1))
    ref = control.forced_response(control.feedback(plant * c, 1),
                                  np.arange(ticks) * spec.period, np.ones(ticks)).outputs
    assert np.max(np.abs(ours - ref)) < 1e-8


def test_second_order_process_loop_matches_python_control():
    spec = ControllerSpec(rate=200, derivative="error", derivative_filter=20, delay=1)
    ticks = 1200
    ours = simulate(PlantModel("second", gain=1.5, tau=0.9, tau2=0.25, dead_ticks=4), spec,
                    np.array([[1.2, 0.8, 0.1]]), 2.0, ticks).y[0]
    ref = reference(control.tf([1.5], np.polymul([0.9, 1], [0.25, 1])), spec, 1.2, 0.8, 0.1,
                    ticks + 4, 2.0, dead=4)[:ticks]
    assert np.max(np.abs(ours - ref)) < 1e-8 * 2.0


def test_output_limit_clips_and_is_reported():
    spec = ControllerSpec(rate=5000, derivative_filter=400, delay=1, output_limit=250)
    out = simulate(PlantModel("position", inertia=0.004, viscous=0.02), spec,
                   np.array([[20.0, 60.0, 0.3], [20.0, 60.0, 0.3]]),
                   np.array([5.0, 20.0]), 1000)
    assert out.saturated.tolist() == [False, True]  # 20 N/mm x 20 mm = 400 N > 250 N
    assert np.max(np.abs(out.u)) == pytest.approx(250.0)


def test_coulomb_friction_leaves_a_dead_band_under_p_control():
    # At rest, friction holds the carriage while |kp e| <= Fc, so a P loop stops short by
    # at most Fc / kp (static Coulomb friction; Olsson et al. 1998) and not at e = 0.
    spec = ControllerSpec(rate=5000, derivative_filter=400, delay=1)
    kp, fc = 20.0, 3.0
    y = simulate(PlantModel("position", inertia=0.004, viscous=0.02, coulomb=fc), spec,
                 np.array([[kp, 0.0, 0.3]]), 5.0, 10000).y[0]
    error = 5.0 - y[-1]
    assert 0 < abs(error) <= fc / kp + 1e-9  # on either side: it may stop after overshooting
    assert np.all(y[-100:] == y[-1])  # stuck: not creeping
