"""An extra channel held at its limit during the rise (``steps/limits.py``), and extra
channels carried to the step windows (``steps/channels.py`` through the analysis)."""

from __future__ import annotations

import math

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from livestep.steps.analysis import analyze_chunks
from livestep.steps.limits import LimitSettings, limit_hold
from livestep.steps.samples import SampleChunk

RATE = 2000.0


def saturated_first_order(r: float, kp: float, umax: float, tau: float, n: int = 2000):
    """A first-order lag y' = (u - y) / tau under P control u = kp (r - y), the output
    clipped at +-umax, from rest at 0, in closed form (written here, no simulation):
    while saturated y = umax (1 - e^(-t/tau)), until kp (r - y) falls to umax at
    t* = -tau ln(1 - (r - umax/kp) / umax); then the linear loop, whose pole is
    -(1 + kp)/tau and whose final value is kp r / (1 + kp), continues from y(t*).
    Returns t (s), u (the controller output) and t*."""
    t = np.arange(n) / RATE
    y_star = r - umax / kp
    t_star = -tau * math.log(1 - y_star / umax)
    y_inf = kp * r / (1 + kp)
    y = np.where(t < t_star, umax * (1 - np.exp(-t / tau)),
                 y_inf + (y_star - y_inf) * np.exp(-(1 + kp) * (t - t_star) / tau))
    u = np.clip(kp * (r - y), -umax, umax)
    return t, u, t_star


def test_a_clipped_output_is_found_for_as_long_as_it_is_clipped():
    # kp 20, limit 250, step of 40: the output sits at 250 until t* (closed form above)
    t, u, t_star = saturated_first_order(40.0, 20.0, 250.0, 0.05)
    pre = np.zeros(200)
    tt = np.concatenate((np.arange(-200, 0) / RATE, t))
    uu = np.concatenate((pre, u))
    hold = limit_hold(tt, uu, 200, rise_end=None, channel="force")
    assert hold is not None and hold.channel == "force" and hold.value == 250.0
    assert hold.start == 0.0
    assert hold.duration == pytest.approx(t_star, abs=1.5 / RATE)


def test_a_down_step_holds_at_the_lower_limit():
    t, u, t_star = saturated_first_order(40.0, 20.0, 250.0, 0.05)
    hold = limit_hold(t, -u, 0, rise_end=None)
    assert hold is not None and hold.value == -250.0
    assert hold.duration == pytest.approx(t_star, abs=1.5 / RATE)


def test_only_the_rise_counts():
    # the same hold, but the rise ends half-way through it: only that half is reported
    t, u, t_star = saturated_first_order(40.0, 20.0, 250.0, 0.05)
    hold = limit_hold(t, u, 0, rise_end=t_star / 2)
    assert hold is not None and hold.duration == pytest.approx(t_star / 2, abs=1.5 / RATE)


def test_an_output_inside_its_limit_is_not_held():
    # the same loop with a step small enough (kp r = 100 < 250): never clipped. Its output
    # peaks at the step instant and decays: the extreme lasts one sample.
    t, u, _ = saturated_first_order(40.0, 20.0, 250.0, 0.05)
    small = np.clip(20.0 * 5.0 * np.exp(-21 * t / 0.05), -250, 250)  # closed form, linear
    assert limit_hold(t, small, 0, rise_end=None) is None
    # a smooth bump (a controller output rising and falling in 50 ms) is not a hold either
    bump = 200 * np.sin(np.pi * np.clip(t / 0.05, 0, 1))
    assert limit_hold(t, bump, 0, rise_end=None) is None
    # nor a constant channel (a status word, say)
    assert limit_hold(t, np.full(t.size, 3.0), 0, rise_end=None) is None


def test_noise_on_the_limit_and_the_settings():
    # a measured current at its limit with a little noise (0.05 % of the span) is not exactly
    # constant: not a hold by default, a hold with a tolerance of its noise (0.3 % here)
    t, u, t_star = saturated_first_order(40.0, 20.0, 250.0, 0.05)
    rng = np.random.default_rng(3)
    noisy = u + rng.normal(0, 0.0005 * 500 / 3, u.size)
    noisy[u >= 250] = np.minimum(noisy[u >= 250], 250.0)
    assert limit_hold(t, noisy, 0, rise_end=None) is None
    hold = limit_hold(t, noisy, 0, rise_end=None,
                      settings=LimitSettings(tolerance=0.003, min_samples=5))
    assert hold is not None and hold.duration == pytest.approx(t_star, abs=3 / RATE)
    # a hold shorter than min_samples is not reported
    n = int(t_star * RATE)
    assert limit_hold(t, u, 0, None, settings=LimitSettings(min_samples=n + 2)) is None


def _chunks(t, sp, fb, force, cuts):
    edges = [0, *sorted(set(cuts)), t.size]
    return [SampleChunk(t=t[a:b], setpoint=sp[a:b], feedback=fb[a:b],
                        extras={"force": force[a:b]} if force is not None else {})
            for a, b in zip(edges[:-1], edges[1:], strict=True) if b > a]


def _session():
    """Three steps of a lag under clipped P control (closed form per step, the loop at rest
    before each): 5 (never clipped), 40 (clipped), back to 0 (clipped, downwards)."""
    parts_t, parts_sp, parts_y, parts_u = [], [], [], []
    level, t0 = 0.0, 0.0
    for target in (5.0, 40.0, 0.0):
        n = 2000
        t = np.arange(n) / RATE
        r = target - level
        if abs(20 * r) > 250:
            _, u, _ = saturated_first_order(abs(r), 20.0, 250.0, 0.05, n)
            u = np.sign(r) * u
        else:
            u = 20 * r * np.exp(-21 * t / 0.05)
        y = level + r * (1 - np.exp(-21 * t / 0.05))  # the linear loop's lag, to the setpoint
        parts_t.append(t0 + t)
        parts_sp.append(np.full(n, target))
        parts_y.append(y)
        parts_u.append(u)
        level, t0 = target, t0 + n / RATE
    pre = 400
    t = np.concatenate((np.arange(-pre, 0) / RATE, *parts_t))
    sp = np.concatenate((np.zeros(pre), *parts_sp))
    y = np.concatenate((np.zeros(pre), *parts_y)) + np.random.default_rng(1).normal(
        0, 0.01, t.size)
    u = np.concatenate((np.zeros(pre), *parts_u))
    return t, sp, y, u


def test_the_analysis_warns_on_the_clipped_steps_only():
    t, sp, y, u = _session()
    results = list(analyze_chunks(_chunks(t, sp, y, u, [])))
    assert len(results) == 3
    small, up, down = results
    assert small.limit is None and not any("at its limit" in w for w in small.warnings)
    for r, value in ((up, 250.0), (down, -250.0)):
        assert r.limit is not None and r.limit.channel == "force" and r.limit.value == value
        assert r.warnings[0].startswith("force at its limit")
        assert "not linear" in r.warnings[0]


@settings(max_examples=25, deadline=None)
@given(st.lists(st.integers(1, 6999), max_size=12))
def test_windows_carry_their_channels_whatever_the_chunks(cuts):
    t, sp, y, u = _session()
    one = list(analyze_chunks(_chunks(t, sp, y, u, []), _keep()))
    many = list(analyze_chunks(_chunks(t, sp, y, u, cuts), _keep()))
    assert [r.limit for r in many] == [r.limit for r in one]
    for r in many:
        w = r.window
        assert w is not None
        # the window's force samples are the input's at the window's own times
        k = np.searchsorted(t, w.t)
        np.testing.assert_array_equal(w.extras["force"], u[k])


def test_no_channels_cost_nothing_and_workers_agree():
    t, sp, y, u = _session()
    plain = list(analyze_chunks(_chunks(t, sp, y, None, [3000]), _keep()))
    assert all(r.window.extras == {} and r.limit is None for r in plain)
    serial = list(analyze_chunks(_chunks(t, sp, y, u, [3000])))
    parallel = list(analyze_chunks(_chunks(t, sp, y, u, [3000]), workers=2))
    assert [r.limit for r in parallel] == [r.limit for r in serial]
    assert serial[1].limit is not None


def _keep():
    from livestep.steps.analysis import AnalysisSettings

    return AnalysisSettings(keep_windows=True)
