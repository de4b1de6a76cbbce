"""livestep.reports.summary: the statistics and capability indices of the report summary.

Capability indices are checked against values worked out by hand below from the
definitions Cp = (USL - LSL) / 6s and Cpk = min(USL - mean, mean - LSL) / 3s with s the
sample standard deviation (ISO 22514-2; AIAG SPC manual; from memory).
"""

from __future__ import annotations

import math
from dataclasses import replace

import pytest
from _signals import WN, make_step

from livestep.analysis import AnalysisSettings, StepResult, analyze_chunks
from livestep.profile import parse_profile
from livestep.reports.summary import cp, metric_stats, report_quantities, session_statistics
from livestep.samples import SampleChunk


def test_capability_indices_hand_worked() -> None:
    # values 1..5: mean 3, s = sqrt(((-2)^2 + (-1)^2 + 0 + 1 + 4) / 4) = sqrt(2.5)
    s = math.sqrt(2.5)
    st = metric_stats("q", [1.0, 2.0, None, 3.0, 4.0, 5.0, math.nan], 0.0, 8.0)
    assert (st.count, st.missing, st.mean, st.min, st.max) == (5, 2, 3.0, 1.0, 5.0)
    assert st.std == pytest.approx(s)
    assert cp(st) == pytest.approx(8.0 / (6 * s))       # 0.8433
    assert st.cpk == pytest.approx(3.0 / (3 * s))       # nearer limit: LSL, 3 away: 0.6325
    upper = metric_stats("q", [1.0, 2.0, 3.0, 4.0, 5.0], None, 8.0)
    assert cp(upper) is None and upper.cpk == pytest.approx(5.0 / (3 * s))  # 1.054
    # a mean outside the limit gives a negative Cpk
    assert metric_stats("q", [11.0, 12.0, 13.0], None, 10.0).cpk == pytest.approx(-2.0 / 3.0)


def test_statistics_without_enough_values_or_limits() -> None:
    one = metric_stats("q", [4.0], None, 10.0)
    assert one.std is None and one.cpk is None and one.mean == 4.0
    assert metric_stats("q", [1.0, 2.0]).cpk is None
    assert metric_stats("q", [2.0, 2.0], None, 3.0).cpk is None  # s = 0: undefined
    assert metric_stats("q", [None]).count == 0


@pytest.fixture(scope="module")
def results() -> list[StepResult]:
    rec = make_step(0.5, WN, dt=1 / 2000, t_window=1.0, n_pre=400, y0=0.0, sp_change=4.0)
    (r,) = analyze_chunks([SampleChunk(t=rec.t, setpoint=rec.sp, feedback=rec.y)],
                          AnalysisSettings())
    m = r.metrics
    # Four steps with hand-set overshoots, two tagged "gains=soft", one going down.
    out = []
    for i, (os, tag, direction) in enumerate([(10.0, "soft", "up"), (20.0, "soft", "up"),
                                              (30.0, "stiff", "up"), (40.0, "stiff", "down")]):
        out.append(replace(r, index=i, tags=(("gains", tag),),
                           metrics=replace(m, overshoot_pct=os, direction=direction)))
    return out


def test_groups_per_direction_and_tag(results: list[StepResult]) -> None:
    profile = parse_profile('[limits]\novershoot_pct = { max = 50 }\n'
                            '[[when]]\ndirection = "down"\n'
                            '[when.limits]\novershoot_pct = { max = 60 }\n')
    groups = {g.key: g for g in session_statistics(results, profile)}
    assert list(groups) == ["all", "up", "down", "gains=soft", "gains=stiff"]
    assert groups["gains=soft"].by == "tag" and groups["gains=soft"].steps == (0, 1)
    overshoot = {k: g.get("overshoot_pct") for k, g in groups.items()}
    assert overshoot["all"].mean == 25.0
    # 10, 20: mean 15, s = sqrt(50) = 7.071; Cpk = (50 - 15) / (3 s) = 1.650
    assert overshoot["gains=soft"].cpk == pytest.approx(35.0 / (3 * math.sqrt(50.0)))
    # the down step has other limits than the up ones: no single Cpk for all steps
    assert overshoot["all"].cpk is None and overshoot["all"].high is None
    assert overshoot["up"].high == 50.0
    assert groups["down"].steps == (3,) and overshoot["down"].cpk is None


def test_report_quantities_profile_first(results: list[StepResult]) -> None:
    profile = parse_profile('[limits]\nwn = { min = 10 }\n[[when]]\ndirection = "down"\n'
                            '[when.limits]\nundershoot_pct = { max = 1 }\n')
    names = report_quantities(results, profile)
    assert names[:3] == ["wn", "undershoot_pct", "rise_time"]
    assert names.count("wn") == 1
    assert "peak_time" not in report_quantities(results, None)  # not a default quantity
