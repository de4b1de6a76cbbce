"""Step statistics: hand-made metric sets with answers worked out by hand below."""

from __future__ import annotations

import math

import numpy as np
import pytest
from _results import result
from hypothesis import given
from hypothesis import strategies as st

from livestep.judge.profile import parse_profile
from livestep.judge.statistics import (
    CPK_MIN_COUNT,
    capability,
    metric_stats,
    session_statistics,
    size_class,
)


def test_mean_sample_std_min_max_by_hand():
    # Rise times 40, 50, 60, 70 ms: mean 55 ms; deviations -15, -5, 5, 15 ms, squares sum
    # 500 ms^2; sample variance 500/3 ms^2 (n - 1 = 3), s = 12.9099... ms.
    s = metric_stats("rise_time", [0.04, 0.05, None, 0.06, 0.07])
    assert (s.count, s.missing) == (4, 1)
    assert s.mean == pytest.approx(0.055)
    assert s.std == pytest.approx(math.sqrt(500 / 3) * 1e-3)
    assert (s.min, s.max) == (0.04, 0.07)
    assert s.cpk is None  # no limit


def test_cpk_worked_example():
    # Overshoot 4, 6, 5, 7, 3 %: mean 5; deviations -1, 1, 0, 2, -2, squares sum 10;
    # s^2 = 10 / 4 = 2.5, s = 1.58114; 3 s = 4.74342.
    # Two limits 2..10 %: Cpk = min(10 - 5, 5 - 2) / 4.74342 = 3 / 4.74342 = 0.63246.
    # Max 10 % only: Cpu = (10 - 5) / 4.74342 = 1.05409. Min 2 % only: Cpl = 0.63246.
    # (Cpk definitions: NIST/SEMATECH e-Handbook, section 6.1.6, from memory.)
    # Five values are below the minimum count, so it is lowered to 2 for the arithmetic.
    values = [4, 6, 5, 7, 3]
    assert metric_stats("overshoot_pct", values, 2, 10, min_count=2).cpk == pytest.approx(
        0.63246, abs=1e-5)
    assert metric_stats("overshoot_pct", values, None, 10, min_count=2).cpk == pytest.approx(
        1.05409, abs=1e-5)
    assert metric_stats("overshoot_pct", values, 2, None, min_count=2).cpk == pytest.approx(
        0.63246, abs=1e-5)
    # Outside a limit on average: negative.
    assert metric_stats("overshoot_pct", values, None, 4, min_count=2).cpk == pytest.approx(
        -1 / 4.74342, abs=1e-5)
    assert capability(5.0, math.sqrt(2.5), 2, 10) == pytest.approx(0.63246, abs=1e-5)


def test_cpk_is_not_computed_below_the_minimum_count():
    # The rule of thumb livestep documents: 30 values (common practice, no source).
    assert CPK_MIN_COUNT == 30
    rng = np.random.default_rng(7)
    values = list(rng.normal(50.0, 4.0, size=CPK_MIN_COUNT))
    few = metric_stats("rise_time", values[:-1], 30.0, 80.0)
    assert few.cpk is None and few.cpk_note == "n < 30" and few.count == 29
    enough = metric_stats("rise_time", values, 30.0, 80.0)
    # The textbook definition, min(USL - mean, mean - LSL) / (3 s), with the standard
    # library's mean and sample standard deviation.
    import statistics as ref

    mu, sd = ref.fmean(values), ref.stdev(values)
    assert enough.cpk_note == "" and enough.cpk == pytest.approx(min(80 - mu, mu - 30) / (3 * sd))
    # The two groups of two steps the issue showed (Cpk 3.92e+03 and the like): no index.
    pair = metric_stats("rise_time", [0.0501, 0.0502], None, 0.1)
    assert pair.cpk is None and pair.cpk_note == "n < 30"
    # min_count below 2 still needs a standard deviation.
    assert metric_stats("rise_time", [0.05], None, 0.1, min_count=1).cpk_note == "n < 2"


def test_cpk_undefined_cases():
    assert metric_stats("rise_time", [0.05], None, 0.1).cpk is None  # one value: no s
    flat = metric_stats("rise_time", [0.05, 0.05], None, 0.1, min_count=2)
    assert (flat.cpk, flat.cpk_note) == (None, "s = 0")
    assert metric_stats("rise_time", [0.04, 0.05]).cpk_note == "no limit"
    differ = metric_stats("rise_time", [0.04, 0.05], 0.0, 0.1, limits_differ=True)
    assert (differ.cpk, differ.low, differ.high, differ.cpk_note) == (
        None, None, None, "limits differ between steps")
    assert capability(1.0, 0.1, None, None) is None
    empty = metric_stats("rise_time", [None, None])
    assert (empty.count, empty.missing, empty.mean, empty.std) == (0, 2, None, None)


@given(st.lists(st.floats(-1e3, 1e3), min_size=2, max_size=30))
def test_agrees_with_the_statistics_module(values):
    import statistics as ref  # the standard library, a second implementation

    s = metric_stats("iae", values)
    assert s.mean == pytest.approx(ref.fmean(values), abs=1e-9)
    assert s.std == pytest.approx(ref.stdev(values), abs=1e-6)


def test_size_classes_are_decades_of_the_setpoint_change():
    def size(d: float) -> str:
        return size_class(result(setpoint_before=2.0, setpoint_after=2.0 + d))

    assert size(5.0) == "1-10" and size(-5.0) == "1-10" and size(1.0) == "1-10"
    assert size(50.0) == "10-100" and size(0.5) == "0.1-1" and size(9.99) == "1-10"
    no_setpoint = result(setpoint_before=None, setpoint_after=None, amplitude=-300.0)
    assert size_class(no_setpoint) == "100-1000"


PROFILE = parse_profile("""
[limits]
overshoot_pct = { max = 10 }
rise_time = { min = 0.01, max = 0.1 }
[[when]]
direction = "down"
[when.limits]
overshoot_pct = { max = 20 }
""")


def test_groups_and_their_limits():
    steps = [
        result(0, overshoot_pct=4.0, rise_time=0.04, tags=(("gains", "A"),)),
        result(1, overshoot_pct=6.0, rise_time=0.06, direction="down", setpoint_before=10.0,
               setpoint_after=0.0, tags=(("gains", "A"),)),
        result(2, overshoot_pct=8.0, rise_time=0.05, setpoint_after=100.0,
               tags=(("gains", "B"), ("load", "full"))),
        result(3, overshoot_pct=10.0, rise_time=0.07, no_model=True, settled=False,
               settling_time=None, tags=(("gains", "B"),)),
    ]
    groups = session_statistics(steps, PROFILE, min_count=2)
    # Setpoint changes of 10 (exactly a decade: in 10-100) and one of 100.
    keys = [(g.by, g.key, g.steps) for g in groups]
    assert keys == [("all", "all", (0, 1, 2, 3)), ("direction", "up", (0, 2, 3)),
                    ("direction", "down", (1,)), ("size", "10-100", (0, 1, 3)),
                    ("size", "100-1000", (2,)), ("tag", "gains=A", (0, 1)),
                    ("tag", "gains=B", (2, 3)), ("tag", "load=full", (2,))]
    every = groups[0]
    # Overshoot 4, 6, 8, 10: mean 7, deviations -3 -1 1 3, s^2 = 20/3. The down step has
    # its own limit (20 %), so over all steps the limits differ: no Cpk.
    os_all = every.get("overshoot_pct")
    assert os_all.mean == pytest.approx(7.0) and os_all.std == pytest.approx(math.sqrt(20 / 3))
    assert (os_all.high, os_all.cpk) == (None, None)
    assert os_all.limits_differ and os_all.cpk_note == "limits differ between steps"
    assert not groups[1].get("overshoot_pct").limits_differ
    # Up steps 4, 8, 10: mean 22/3, s^2 = ((-10/3)^2 + (2/3)^2 + (8/3)^2) / 2 = 28/3;
    # Cpu = (10 - 22/3) / (3 sqrt(28/3)).
    os_up = groups[1].get("overshoot_pct")
    assert os_up.high == 10 and os_up.cpk == pytest.approx((10 - 22 / 3) / (3 * math.sqrt(28 / 3)))
    # Rise time 40, 60, 50, 70 ms between 10 and 100 ms on every step: the two-sided Cpk
    # is min(100 - 55, 55 - 10) / (3 s) = 45 ms / (3 x 12.9099 ms) = 1.16190.
    rise = every.get("rise_time")
    assert (rise.low, rise.high) == (0.01, 0.1)
    assert rise.cpk == pytest.approx(45 / (3 * math.sqrt(500 / 3)))
    # With the default minimum (30 values) none of these four-step groups gets a Cpk.
    default = session_statistics(steps, PROFILE)
    assert all(m.cpk is None for g in default for m in g.metrics)
    assert default[0].get("rise_time").cpk_note == "n < 30"
    # Undefined values are counted as missing: one step never settled, one has no model.
    assert (every.get("settling_time").count, every.get("settling_time").missing) == (3, 1)
    assert (every.get("zeta").count, every.get("zeta").missing) == (3, 1)
    # Every group lists the same quantities; quantities never defined are left out.
    names = [m.quantity for m in every.metrics]
    assert all([m.quantity for m in g.metrics] == names for g in groups)
    assert "peak_time" in names and "overshoot_pct" in names


def test_grouping_by_one_kind_and_no_results():
    steps = [result(k, rise_time=0.05 + 0.01 * k) for k in range(3)]
    groups = session_statistics(steps, group_by=("direction",))
    assert [g.key for g in groups] == ["all", "up"]
    assert groups[1].get("rise_time").mean == pytest.approx(np.mean([0.05, 0.06, 0.07]))
    assert session_statistics([])[0].metrics == ()
    with pytest.raises(ValueError, match="unknown grouping"):
        session_statistics(steps, group_by=("colour",))
