"""What is known of a step while it is under way, against Ogata's closed-form response."""

from __future__ import annotations

import math

import numpy as np
import pytest
from _signals import reference, unit_step

from livestep.steps.analysis import StepAnalyzer
from livestep.steps.samples import SampleChunk

RATE, ZETA, WN = 2000.0, 0.3, 40.0  # Hz; overshoot 37 %, settling about 0.3 s


def phases_along(noise: float) -> list[tuple[float, object]]:
    """Feed a held step 10 ms at a time; the progress after each piece."""
    t = np.arange(int(2.5 * RATE)) / RATE
    sp = np.where(t >= 0.5, 1.0, 0.0)
    fb = unit_step(t - 0.5, ZETA, WN) + np.random.default_rng(2).normal(0, noise, t.size)
    an, seen = StepAnalyzer(), []
    for k in range(0, t.size, 20):
        sl = slice(k, k + 20)
        done = an.feed(SampleChunk(t=t[sl], setpoint=sp[sl], feedback=fb[sl]))
        seen.append((float(t[sl][-1]), an.progress() if not done else "closed"))
    return seen


@pytest.mark.parametrize("noise", [0.0, 0.003])
def test_progress_tells_instant_rise_peak_then_settling(noise: float) -> None:
    ref = reference(ZETA, WN)  # exact rise, peak time, overshoot (Ogata ch. 5)
    seen = phases_along(noise)
    order = []
    for now, p in seen:
        if p is None or p == "closed":
            continue
        assert p.t_step == pytest.approx(0.5) and p.size == 1.0
        if not order or order[-1] != p.phase:
            order.append(p.phase)
        if p.rise_time is not None:  # known once the 90 % level is passed, not before
            assert now - 0.5 >= ref.t_hi - 1 / RATE
            assert p.rise_time == pytest.approx(ref.t_hi - ref.t_lo, abs=2 / RATE)
        if p.overshoot_pct:  # known once the peak has passed
            assert now - 0.5 > ref.peak_time
            assert p.peak_time == pytest.approx(math.pi / (WN * math.sqrt(1 - ZETA**2)),
                                                abs=2 / RATE)
            assert p.overshoot_pct == pytest.approx(ref.overshoot, abs=0.6)
    # in order; the first is "stepped" or, when the loop passes 10 % within the 20 steady
    # samples that confirm a setpoint change, already "rising"
    canonical = ["stepped", "rising", "risen", "settling"]
    assert order == sorted(order, key=canonical.index) and order[-2:] == ["risen", "settling"]
    assert order[0] in ("stepped", "rising")
    assert "closed" in [p for _, p in seen]  # and the result itself once settled
