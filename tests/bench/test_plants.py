"""The bench's plant models: the exact second-order response against Ogata's closed form, and
the PID axis against the physics it claims (derivative gain damps it)."""

from __future__ import annotations

import math

import numpy as np
import pytest
from _signals import unit_step
from scipy.linalg import expm

from livestep.bench.plants import AxisParams, AxisPlant, Gains, SecondOrderPlant, expm2
from livestep.steps.measure import measure_step


@pytest.mark.parametrize("zeta", [0.3, 1.0, 2.5, 20.0, 500.0])
def test_expm2_matches_scipy(zeta):
    # Reference: scipy.linalg.expm (Pade approximation with scaling and squaring).
    wn = 40.0
    a = np.array([[0.0, 1.0], [-wn * wn, -2 * zeta * wn]])
    taus = np.array([0.0, 1e-4, 0.013, 0.2, 1.7])
    got = expm2(a, taus)
    for tau, g in zip(taus, got, strict=True):
        np.testing.assert_allclose(g, expm(a * tau), rtol=1e-10, atol=1e-12)


@pytest.mark.parametrize("zeta", [0.35, 1.0, 1.8, 20.0])
def test_second_order_plant_is_the_closed_form_response(zeta):
    # Two setpoint changes (0 -> 2 at sample 100, 2 -> -1 at sample 900) through a dead time
    # that is not a whole number of samples. Reference: by linearity the response is
    # K (2 s(t - t1 - theta) - 3 s(t - t2 - theta)) with s Ogata's closed-form unit-step
    # response (ch. 5), written out in tests/_signals.unit_step.
    wn, k, theta, dt = 35.0, 1.5, 3.7e-3, 1e-3
    plant = SecondOrderPlant(zeta, wn, gain=k, dead_time=theta, period=dt)
    y = np.concatenate([plant.advance(100, 0.0), plant.advance(800, 2.0),
                        plant.advance(1300, -1.0)])
    t = np.arange(y.size) * dt
    expected = k * (2.0 * unit_step(t - 0.1 - theta, zeta, wn)
                    - 3.0 * unit_step(t - 0.9 - theta, zeta, wn))
    np.testing.assert_allclose(y, expected, atol=1e-9)


def test_second_order_plant_does_not_depend_on_block_sizes():
    a = SecondOrderPlant(0.5, 50.0, dead_time=2.2e-3, period=5e-4, noise=0.01, seed=3)
    b = SecondOrderPlant(0.5, 50.0, dead_time=2.2e-3, period=5e-4, noise=0.01, seed=3)
    ya = np.concatenate([a.advance(10, 0.0), a.advance(1000, 1.0)])
    yb = np.concatenate([b.advance(3, 0.0), b.advance(7, 0.0), b.advance(1, 1.0),
                         b.advance(444, 1.0), b.advance(555, 1.0)])
    np.testing.assert_allclose(ya, yb, rtol=0, atol=1e-12)


def _axis_step(kd: float, seed: int = 1, blocks: tuple[int, ...] = (400, 2000)) -> np.ndarray:
    plant = AxisPlant(AxisParams(gains=Gains(kp=20.0, ki=60.0, kd=kd)), period=1 / 2000,
                      seed=seed)
    first = plant.advance(blocks[0], 0.0)
    rest = [plant.advance(n, 5.0) for n in blocks[1:]]
    return np.concatenate([first, *rest])


def _overshoot(y: np.ndarray) -> float:
    t = np.arange(y.size) / 2000
    sp = np.where(np.arange(y.size) >= 400, 5.0, 0.0)
    return measure_step(t, y, 400, setpoint=sp, setpoint_before=0.0,
                        setpoint_after=5.0).overshoot_pct


def test_axis_overshoots_more_with_less_derivative_gain():
    # Physics of the model: the derivative term is the loop's damping (for m x'' = -kp x -
    # (kd + b) x', zeta = (kd + b) / (2 sqrt(kp m)); Ogata, ch. 5), so less kd, more
    # overshoot. Checked qualitatively: the model also has friction, saturation, delay,
    # an integrator, quantisation and noise.
    overshoots = [_overshoot(_axis_step(kd)) for kd in (0.4, 0.25, 0.15, 0.08)]
    assert all(b > a + 3.0 for a, b in zip(overshoots, overshoots[1:], strict=False)), \
        overshoots
    # the lightly damped end: zeta = (0.08 + 0.02) N s/mm / (2 sqrt(20 N/mm * 4 kg)) ~ 0.18,
    # 56 % overshoot for the bare second-order loop (Ogata); the integrator and delay add
    # some, friction takes some away
    assert 40.0 < overshoots[-1] < 80.0


def test_axis_is_deterministic_with_a_seed_whatever_the_blocks():
    a = _axis_step(0.2, seed=7)
    b = _axis_step(0.2, seed=7, blocks=(400, 1, 999, 1000))
    c = _axis_step(0.2, seed=8)
    np.testing.assert_array_equal(a, b)
    assert not np.array_equal(a, c)


def test_axis_encoder_quantises_and_the_gains_validate():
    plant = AxisPlant(AxisParams(encoder_step=0.01, noise=0.0), period=1e-3)
    y = np.concatenate([plant.advance(100, 0.0), plant.advance(300, 1.0)])
    counts = y / 0.01
    assert np.allclose(counts, np.round(counts), atol=1e-9)
    assert y[-1] == pytest.approx(1.0, abs=0.05)
    assert plant.set_gains(kd=0.5) == Gains(kp=20.0, ki=60.0, kd=0.5)
    with pytest.raises(ValueError, match="unknown gain"):
        plant.set_gains(kv=1.0)
    with pytest.raises(ValueError, match="not negative"):
        plant.set_gains(kp=-1.0)
    with pytest.raises(ValueError):
        plant.set_gains(ki=math.inf)


def test_second_order_plant_has_no_gains():
    with pytest.raises(ValueError, match="no controller gains"):
        SecondOrderPlant(0.5, 10.0).set_gains(kp=1.0)


def test_axis_without_its_nonlinearities_is_the_continuous_pid_loop():
    # Reference: scipy.signal.lsim of the continuous closed loop. With friction, saturation,
    # delay, quantisation and noise off, the axis is the plant P(s) = 1 / (m' s^2 + b s)
    # (m' = m / 1000 kg, x in mm; b in N per mm/s) under u = (kp + ki/s) e - kd s /
    # (tau s + 1) y (derivative on the measurement, tau = 1 / (2 pi f_c)), so
    # Y/R = P C / (1 + P (C + D)) with C = kp + ki/s and D = kd s / (tau s + 1).
    from scipy import signal as sps

    p = AxisParams(coulomb=0.0, force_max=1e9, delay_loops=0, encoder_step=0.0, noise=0.0,
                   loop_rate=20000.0, deriv_cutoff=300.0, gains=Gains(kp=20.0, ki=60.0,
                                                                      kd=0.15))
    rate, n0, n = 20000.0, 200, 8000
    plant = AxisPlant(p, period=1 / rate)
    y = np.concatenate([plant.advance(n0, 0.0), plant.advance(n, 3.0)])[n0:]
    m, b = p.mass / 1000.0, p.viscous / 1000.0
    tau = 1.0 / (2 * math.pi * p.deriv_cutoff)
    g = p.gains
    P = (np.array([1.0]), np.array([m, b, 0.0]))
    C = (np.array([g.kp, g.ki]), np.array([1.0, 0.0]))
    D = (np.array([g.kd, 0.0]), np.array([tau, 1.0]))
    # Y/R = Pn Cn Dd / (Pd Cd Dd + Pn (Cn Dd + Dn Cd))
    num = np.polymul(np.polymul(P[0], C[0]), D[1])
    den = np.polyadd(np.polymul(np.polymul(P[1], C[1]), D[1]),
                     np.polymul(P[0], np.polyadd(np.polymul(C[0], D[1]),
                                                 np.polymul(D[0], C[1]))))
    t = np.arange(n) / rate
    _, ref, _ = sps.lsim((num, den), np.full(n, 3.0), t)
    # discretisation (sampled PID, backward-difference derivative, Euler sub-steps) leaves
    # about 0.1 % of the step
    assert np.max(np.abs(y - ref)) < 0.003 * 3.0, np.max(np.abs(y - ref))  # seen: 0.12 %
    assert np.max(y) > 3.3  # an underdamped loop, so the comparison covers the overshoot
