"""Verdicts: hand-made steps with known answers, and simulated responses against the
closed-form overshoot."""

from __future__ import annotations

import math

import numpy as np
import pytest
from _results import result
from scipy import signal

from livestep.judge.profile import parse_profile
from livestep.judge.quantities import QUANTITIES
from livestep.judge.verdict import (
    FAIL,
    NOT_MEASURED,
    PASS,
    SYMBOLS,
    WARN,
    check_limit,
    describe_check,
    judge,
    worst,
)
from livestep.steps.analysis import analyze_chunks
from livestep.steps.samples import SampleChunk

RISE = QUANTITIES["rise_time"]


@pytest.mark.parametrize("value, low, high, warn, verdict, limit, margin", [
    (0.05, None, 0.1, 0.0, PASS, 0.1, 0.05),
    (0.1, None, 0.1, 0.0, PASS, 0.1, 0.0),         # at the limit passes
    (0.12, None, 0.1, 0.0, FAIL, 0.1, -0.02),
    (0.095, None, 0.1, 0.01, WARN, 0.1, 0.005),    # inside, within the margin
    (0.02, 0.03, 0.1, 0.0, FAIL, 0.03, -0.01),
    (0.04, 0.03, 0.1, 0.02, WARN, 0.03, 0.01),     # nearer the minimum binds
    (0.07, 0.03, 0.1, 0.02, PASS, 0.1, 0.03),
])
def test_one_limit(value, low, high, warn, verdict, limit, margin):
    c = check_limit(RISE, value, low, high, warn)
    assert c.verdict == verdict and c.limit == limit
    assert c.margin == pytest.approx(margin)
    assert (c.reason == "") == (verdict == PASS)


def test_undefined_values():
    # Never settled: a settling maximum fails (the step did not meet it), with the reason.
    c = check_limit(QUANTITIES["settling_time"], None, None, 0.3)
    assert (c.verdict, c.margin) == (FAIL, None) and "never settled" in c.reason
    # No overshoot peak: the peak time is not measured, which neither passes nor fails.
    c = check_limit(QUANTITIES["peak_time"], None, None, 0.1)
    assert c.verdict == NOT_MEASURED and "no overshoot peak" in c.reason
    assert worst([PASS, NOT_MEASURED]) == PASS
    assert worst([PASS, WARN, NOT_MEASURED]) == WARN and worst([WARN, FAIL]) == FAIL


PROFILE = parse_profile("""
[limits]
rise_time = { max = 0.06 }
overshoot_pct = { max = 10, warn = 2 }
settling_time = { max = 0.3 }
steady_state_error_pct = { max = 1 }
zeta = { min = 0.5 }
""")


def verdicts(**kw):
    v = judge(result(**kw), PROFILE)
    return v.verdict, {c.quantity: c.verdict for c in v.checks}


def test_hand_made_steps_get_the_known_verdicts():
    assert verdicts() == (PASS, dict.fromkeys(
        ("rise_time", "overshoot_pct", "settling_time", "steady_state_error_pct", "zeta"),
        PASS))
    assert verdicts(overshoot_pct=9.0)[1]["overshoot_pct"] == WARN
    assert verdicts(overshoot_pct=9.0)[0] == WARN
    assert verdicts(overshoot_pct=12.0)[0] == FAIL
    # A step that never settled fails its settling limit.
    v, checks = verdicts(settled=False, settling_time=None)
    assert v == FAIL and checks["settling_time"] == FAIL
    # The steady-state error is judged by magnitude: -1.5 % fails a 1 % maximum.
    assert verdicts(steady_state_error_pct=-1.5)[1]["steady_state_error_pct"] == FAIL
    assert verdicts(steady_state_error_pct=-0.5)[1]["steady_state_error_pct"] == PASS
    # No model: the damping ratio is not measured and the step still passes.
    v = judge(result(no_model=True), PROFILE)
    assert v.verdict == PASS
    zeta = next(c for c in v.checks if c.quantity == "zeta")
    assert zeta.verdict == NOT_MEASURED and zeta.reason == "no model was fitted"
    assert judge(result(model={"zeta": 0.45}), PROFILE).verdict == FAIL


def test_descriptions_name_value_limit_and_reason():
    v = judge(result(overshoot_pct=12.5), PROFILE)
    (c,) = v.failed()
    assert describe_check(c) == "overshoot 12.5 % (max 10 %): above the maximum 10 %"
    assert all(SYMBOLS[x] for x in (PASS, WARN, FAIL, NOT_MEASURED))
    assert len(set(SYMBOLS.values())) == 4


@pytest.mark.parametrize("zeta, verdict", [(0.45, FAIL), (0.6, WARN), (0.75, PASS)])
def test_simulated_loops_against_the_closed_form_overshoot(zeta, verdict):
    """wn^2/(s^2 + 2 zeta wn s + wn^2) simulated by scipy.signal.lsim; the overshoot limit
    of 10 % with a 2 % warning margin sits, by %OS = 100 exp(-zeta pi / sqrt(1 - zeta^2))
    (Ogata, Modern Control Engineering, ch. 5), between the three: 20.5 %, 9.5 %, 2.8 %."""
    expected = 100 * math.exp(-zeta * math.pi / math.sqrt(1 - zeta**2))
    assert (expected > 10) == (verdict == FAIL) and (8 < expected <= 10) == (verdict == WARN)
    rate, wn = 2000.0, 30.0
    t = np.arange(int(3 * rate)) / rate
    sp = np.where(t < 0.5, 0.0, 5.0)
    _, y, _ = signal.lsim(signal.TransferFunction([wn**2], [1, 2 * zeta * wn, wn**2]), sp, t)
    y = y + np.random.default_rng(1).normal(0, 0.002, t.size)
    (r,) = analyze_chunks([SampleChunk(t=t, setpoint=sp, feedback=y)])
    profile = parse_profile("[limits]\novershoot_pct = { max = 10, warn = 2 }\n")
    (c,) = judge(r, profile).checks
    assert c.value == pytest.approx(expected, abs=0.5)
    assert c.verdict == verdict
