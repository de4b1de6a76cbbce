"""Design guidance: pole-region bounds against the closed-form second-order relations and
against models fitted to scipy.signal simulations."""

from __future__ import annotations

import math

import numpy as np
import pytest
from _results import _MODEL
from scipy import signal

from livestep.judge.design import assess, design_checks, design_region
from livestep.judge.profile import Limit, parse_profile
from livestep.steps.analysis import analyze_chunks
from livestep.steps.samples import SampleChunk


def limits(os=None, ts=None, tp=None):
    out = []
    for q, x in (("overshoot_pct", os), ("settling_time", ts), ("peak_time", tp)):
        if x is not None:
            out.append(Limit(q, None, x))
    return out


@pytest.mark.parametrize("os_pct, table", [(10, 0.591), (5, 0.690), (2, 0.780)])
def test_damping_ratio_from_the_overshoot_limit(os_pct, table):
    # zeta = -ln(OS) / sqrt(pi^2 + ln^2 OS), OS a fraction (Ogata; Nise; Dorf & Bishop),
    # computed here; the 3-decimal textbook values beside it (from memory).
    ln = math.log(os_pct / 100)
    expected = -ln / math.sqrt(math.pi**2 + ln**2)
    region = design_region(limits(os=os_pct))
    assert region.zeta_min == pytest.approx(expected, rel=1e-12)
    assert region.zeta_min == pytest.approx(table, abs=5e-4)
    # And back: %OS = 100 exp(-zeta pi / sqrt(1 - zeta^2)) (Ogata) returns the limit.
    z = region.zeta_min
    assert 100 * math.exp(-z * math.pi / math.sqrt(1 - z * z)) == pytest.approx(os_pct)
    assert region.sigma_min is None and region.wd_min is None


@pytest.mark.parametrize("band, constant", [(2.0, 4.0), (5.0, -math.log(0.05)),
                                            (1.0, -math.log(0.01))])
def test_decay_rate_and_damped_frequency_bounds(band, constant):
    # Ts = 4 / (zeta wn) for 2 % (Ogata; Dorf & Bishop), -ln(band) / (zeta wn) in general
    # (3.0 for 5 %, 4.6 for 1 %: Nise); Tp = pi / wd (Ogata).
    region = design_region(limits(ts=0.2, tp=0.05), band_pct=band)
    assert region.sigma_min == pytest.approx(constant / 0.2)
    assert region.wd_min == pytest.approx(math.pi / 0.05)
    assert region.zeta_min is None and not region.empty
    assert design_region([Limit("rise_time", None, 0.1)]).empty
    assert design_region(limits(os=0)).zeta_min == 1.0  # no overshoot allowed


def test_sentences_say_what_is_missed_and_by_how_much():
    from dataclasses import replace

    region = design_region(limits(os=10, ts=0.15, tp=0.075))
    model = replace(_MODEL, zeta=0.42, wn=40.0, dead_time=0.0)
    checks = {c.requirement: c for c in design_checks(model, region)}
    # zeta_min = 0.5912 (10 %); zeta wn = 16.8 1/s against 4 / 0.15 = 26.7 1/s;
    # wd = 40 sqrt(1 - 0.42^2) = 36.30 rad/s against pi / 0.075 = 41.89 rad/s.
    assert checks["damping ratio"].met is False
    assert checks["decay rate"].value == pytest.approx(16.8)
    assert checks["decay rate"].needed == pytest.approx(4 / 0.15)
    assert checks["damped frequency"].value == pytest.approx(40 * math.sqrt(1 - 0.42**2))
    assert checks["damped frequency"].met is False
    text = assess(model, region)
    assert text[0] == "damping ratio 0.42, needs >= 0.59 for overshoot <= 10 %: short by 0.17"
    assert text[1] == ("decay rate zeta*wn 16.8 1/s, needs >= 26.7 1/s for settling <= 150 ms"
                       " (2 % band): 37 % short")
    # A dead time of 25 ms leaves 125 ms and 50 ms to the poles: 32 1/s and 62.8 rad/s.
    slow = replace(model, zeta=0.7, wn=80.0, dead_time=0.025)
    checks = {c.requirement: c for c in design_checks(slow, region)}
    assert checks["damping ratio"].met is True
    assert checks["decay rate"].needed == pytest.approx(4 / 0.125)
    assert checks["decay rate"].met is True  # 0.7 x 80 = 56 1/s
    assert checks["damped frequency"].needed == pytest.approx(math.pi / 0.05)
    assert checks["damped frequency"].met is False  # 80 sqrt(0.51) = 57.1 rad/s
    assert "(2 % band, less 25 ms dead time)" in checks["decay rate"].text
    # Real poles: the slower one, wn (zeta - sqrt(zeta^2 - 1)), sets the settling; no peak.
    over = replace(model, zeta=1.5, wn=100.0, dead_time=0.2)
    checks = {c.requirement: c for c in design_checks(over, region)}
    assert checks["damped frequency"].met is None
    assert checks["decay rate"].met is False and "dead time alone" in checks["decay rate"].text
    real = {c.requirement: c for c in design_checks(replace(over, dead_time=0.0), region)}
    assert real["decay rate"].value == pytest.approx(100 * (1.5 - math.sqrt(1.25)))


def simulate(zeta: float, wn: float, rate: float = 2000.0):
    t = np.arange(int(3 * rate)) / rate
    sp = np.where(t < 0.5, 0.0, 2.0)
    _, y, _ = signal.lsim(signal.TransferFunction([wn**2], [1, 2 * zeta * wn, wn**2]), sp, t)
    return t, sp, y + np.random.default_rng(3).normal(0, 0.001, t.size)


def test_on_the_boundary_the_simulated_response_meets_the_limits_exactly():
    # Poles placed on the region's boundary (zeta = zeta_min, wd = wd_min): the response
    # simulated by scipy.signal.step peaks at the overshoot limit at the peak-time limit.
    region = design_region(limits(os=10, tp=0.08))
    zeta = region.zeta_min
    wn = region.wd_min / math.sqrt(1 - zeta**2)
    t, y = signal.step(signal.TransferFunction([wn**2], [1, 2 * zeta * wn, wn**2]),
                       T=np.linspace(0, 0.5, 50001))
    k = int(np.argmax(y))
    assert 100 * (y[k] - 1) == pytest.approx(10, abs=1e-3)
    assert t[k] == pytest.approx(0.08, abs=2e-5)


@pytest.mark.parametrize("zeta, wn, missed", [
    (0.42, 100.0, {"damping ratio"}),  # 23 % overshoot; zeta wn = 42 1/s >= 4 / 0.12
    (0.75, 30.0, {"decay rate"}),  # 2.8 % overshoot; 4 / 22.5 1/s = 178 ms > 120 ms
    (0.75, 60.0, set()),  # inside the region
])
def test_fitted_models_of_simulated_loops(zeta, wn, missed):
    profile = parse_profile("[limits]\novershoot_pct = { max = 10 }\n"
                            "settling_time = { max = 0.12 }\n")
    t, sp, y = simulate(zeta, wn)
    (r,) = analyze_chunks([SampleChunk(t=t, setpoint=sp, feedback=y)])
    region = design_region(profile.limits_for(r))
    checks = design_checks(r.model, region)
    assert {c.requirement for c in checks if c.met is False} == missed
    assert r.model.zeta == pytest.approx(zeta, abs=0.02)
    # The guidance agrees with the measurement where the rules of thumb are sharp: a
    # model inside the region measured within both limits, one outside it not.
    assert (r.metrics.overshoot_pct <= 10) == ("damping ratio" not in missed)
    assert (r.metrics.settling_time <= 0.12) == ("decay rate" not in missed)
