"""Trends across gain sets: the limit crossing against linear interpolation worked by hand,
flat and noisy data, extrapolation."""

from __future__ import annotations

from dataclasses import replace

import pytest
from _axis_session import bench_session

from livestep.judge.profile import parse_profile
from livestep.tuning.trend import trends

PROFILE = parse_profile("[limits]\novershoot_pct = { max = 20, warn = 5 }\n")


@pytest.fixture(scope="module")
def one_step():
    return bench_session([(20.0, 60.0, 0.3)], moves=(5.0,))[0]


def steps(base, table):
    """Results with the given overshoots: {kd: [overshoot, ...]}, kp and ki fixed."""
    out = []
    for kd, values in table.items():
        for v in values:
            tags = (("kd", f"{kd:g}"), ("ki", "60"), ("kp", "20"))
            out.append(replace(base, metrics=replace(base.metrics, overshoot_pct=v),
                               tags=tags))
    return out


def test_a_clear_trend_crosses_the_limit_where_the_line_does(one_step):
    res = steps(one_step, {0.2: [23.5, 24.5], 0.3: [8.5, 9.5]})
    [t] = trends(res, PROFILE)
    assert t.status == "trend" and t.gain == "kd"
    # the line through (0.2, 24) and (0.3, 9) meets 20 at 0.2 + 0.1 (24 - 20) / 15 and
    # 15 (the limit less its warning margin) at 0.2 + 0.1 (24 - 15) / 15
    assert t.meets_at == pytest.approx(0.2 + 0.1 * 4 / 15)
    assert t.margin_at == pytest.approx(0.2 + 0.1 * 9 / 15)
    assert t.met_above is True and not t.extrapolated
    assert "met from kd ≈ 0.227" in t.text and "between the measured 0.2: 24" in t.text
    assert dict(t.others) == {"kp": 20.0, "ki": 60.0}


def test_extrapolation_is_marked(one_step):
    res = steps(one_step, {0.1: [39.9, 40.1], 0.2: [29.9, 30.1]})
    [t] = trends(res, PROFILE)
    assert t.meets_at == pytest.approx(0.3, rel=1e-3)  # the line 40 - 100 (kd - 0.1)
    assert t.extrapolated and "EXTRAPOLATED" in t.text


def test_a_flat_trend_says_the_gain_does_not_move_it(one_step):
    res = steps(one_step, {0.1: [10.0, 10.01], 0.2: [10.02, 10.0], 0.3: [10.01, 10.02]})
    [t] = trends(res, PROFILE)
    assert t.status == "flat" and t.meets_at is None
    assert "does not move it" in t.text and "met at every measured kd" in t.text


def test_noisy_data_support_no_trend(one_step):
    res = steps(one_step, {0.1: [5.0, 15.0, 10.0], 0.2: [16.0, 6.0, 11.0]})
    [t] = trends(res, PROFILE)
    assert t.status == "noisy" and t.scatter > t.change
    assert "do not support a trend" in t.text


def test_gains_changed_together_give_no_trend(one_step):
    res = steps(one_step, {0.2: [24.0]}) + [
        replace(one_step, tags=(("kd", "0.3"), ("ki", "60"), ("kp", "25")))]
    assert trends(res, PROFILE) == []
