"""livestep.reports.summary: which quantities a report shows, and Cp.

Cp is checked against a value worked out by hand from its definition
Cp = (USL - LSL) / (6 s), s the sample standard deviation (NIST/SEMATECH e-Handbook
of Statistical Methods, section 6.1.6; from memory).
"""

from __future__ import annotations

import math
from dataclasses import replace

import pytest
from _signals import WN, make_step

from livestep.judge.profile import parse_profile
from livestep.judge.statistics import metric_stats
from livestep.reports.summary import cp, display_unit, report_quantities
from livestep.steps.analysis import AnalysisSettings, StepResult, analyze_chunks
from livestep.steps.samples import SampleChunk


def test_cp_hand_worked() -> None:
    # values 1..5: mean 3, s = sqrt((4 + 1 + 0 + 1 + 4) / 4) = sqrt(2.5); limits 0 and 8
    # (five values: the minimum count is lowered to 2 for the arithmetic)
    st = metric_stats("q", [1.0, 2.0, 3.0, 4.0, 5.0], 0.0, 8.0, min_count=2)
    assert cp(st) == pytest.approx(8.0 / (6 * math.sqrt(2.5)))  # 0.8433
    assert cp(metric_stats("q", [1.0, 2.0, 3.0], None, 8.0, min_count=2)) is None  # one limit
    assert cp(metric_stats("q", [1.0], 0.0, 8.0)) is None  # no spread below 2 values
    # Cp follows Cpk's rule: not from fewer than 30 values (livestep.judge.statistics)
    assert cp(metric_stats("q", [1.0, 2.0, 3.0, 4.0, 5.0], 0.0, 8.0)) is None


def test_display_units() -> None:
    assert display_unit("rise_time") == (1e3, "ms")
    assert display_unit("overshoot_pct") == (1.0, "%")
    assert display_unit("zeta") == (1.0, "")


@pytest.fixture(scope="module")
def results() -> list[StepResult]:
    rec = make_step(0.5, WN, dt=1 / 2000, t_window=1.0, n_pre=400, y0=0.0, sp_change=4.0)
    (r,) = analyze_chunks([SampleChunk(t=rec.t, setpoint=rec.sp, feedback=rec.y)],
                          AnalysisSettings())
    return [replace(r, index=i) for i in range(3)]


def test_report_quantities_profile_first(results: list[StepResult]) -> None:
    profile = parse_profile('[limits]\nwn = { min = 10 }\n[[when]]\ndirection = "down"\n'
                            '[when.limits]\nundershoot_pct = { max = 1 }\n')
    names = report_quantities(results, profile)
    # limited ones first (a limit is shown even where no step defines the quantity), then
    # the defaults, each once
    assert names[:3] == ["wn", "undershoot_pct", "rise_time"]
    assert names.count("wn") == 1
    assert "peak_time" not in report_quantities(results, None)  # not a default quantity
    no_model = [replace(r, model=None) for r in results]
    assert "zeta" not in report_quantities(no_model, None)  # defined on no step
