"""Suggestions end to end on the virtual bench's axis: saturating steps left out with a
warning, the suggested gains applied to the bench meet the demo spec with the figures
predicted, a session of one gain set is said to be unidentifiable."""

from __future__ import annotations

import json

import numpy as np
import pytest
from _axis_session import bench_session

from livestep.bench.demo import demo_controller, demo_profile
from livestep.bench.plants import AxisParams, Gains
from livestep.judge.quantities import value_of
from livestep.judge.verdict import judge
from livestep.reports.suggestion import suggestion_document
from livestep.tuning.records import StepRecord, records_of, saturation
from livestep.tuning.suggest import CAUTIONS, suggest

SETS = [(20.0, 60.0, 0.1), (20.0, 60.0, 0.2), (20.0, 60.0, 0.3)]
AGREE = 0.20  # measured within 20 % of predicted


@pytest.fixture(scope="module")
def session():
    # small steps, and one large move each way under the last set: 15 mm x 20 N/mm is
    # 300 N, beyond the drive's 250 N
    return bench_session(SETS, moves=(5.0, -5.0, 5.0, -5.0, 15.0, -15.0))


@pytest.fixture(scope="module")
def suggestion(session):
    return suggest(session, demo_profile(), demo_controller())


def test_saturating_steps_are_left_out_with_a_warning(session, suggestion):
    big = [r.index for r in session if abs(r.metrics.amplitude) > 10]
    assert len(big) == 6  # each gain set's large moves
    assert sorted(i for i, _ in suggestion.excluded) == big
    assert all("beyond the limit 250 N" in why for _, why in suggestion.excluded)
    assert suggestion.identification is not None
    assert not set(big) & set(suggestion.identification.steps)


def test_a_recorded_output_at_its_limit_excludes_the_step():
    spec = demo_controller()
    t = np.arange(100) * 1e-3
    rec = StepRecord(0, t, np.zeros(100), 1.0, (1.0, 0.0, 0.0), output=np.full(100, 250.0))
    assert "recorded output sits at its limit (250 N)" in saturation(rec, spec)
    below = StepRecord(0, t, np.zeros(100), 1.0, (1.0, 0.0, 0.0), output=np.full(100, 249.0))
    assert saturation(below, spec) is None


def test_suggested_gains_meet_the_spec_on_the_bench_as_predicted(suggestion):
    p = suggestion.suggested
    assert p is not None and p.meets
    spec = demo_controller()
    for name, value in p.gains.items():  # inside the declared [controller.limits]
        lo, hi = spec.bounds(name)
        assert (lo is None or value >= lo) and (hi is None or value <= hi)
    assert p.output_peak < 250.0
    g = Gains(**p.gains)
    tried = bench_session([tuple(p.gains.values())], seed=7,
                          params=AxisParams(gains=g))
    profile = demo_profile()
    assert all(judge(r, profile).verdict != "fail" for r in tried)
    for q in ("rise_time", "overshoot_pct", "settling_time"):
        measured = np.mean([value_of(r, q) for r in tried])
        assert measured == pytest.approx(p.figures[q], rel=AGREE), q


def test_the_json_document_holds_the_contract(suggestion):
    doc = json.loads(json.dumps(suggestion_document(suggestion, source="s.csv",
                                                    profile="demo")))
    assert set(doc) == {"source", "profile", "gain_names", "gain_sets", "trends",
                        "controller", "model", "excluded", "checks", "suggestion", "notes",
                        "cautions"}
    assert doc["model"]["form"] == "position"
    assert set(doc["model"]["parameters"]) == {"inertia", "viscous", "coulomb"}
    assert set(doc["suggestion"]["gains"]) == {"kp", "ki", "kd"}
    assert doc["suggestion"]["predicted"]["rise_time"] > 0
    assert doc["cautions"] == list(CAUTIONS)
    assert any(t["gain"] == "kd" and t["quantity"] == "overshoot_pct" for t in doc["trends"])


def test_one_gain_set_is_unidentifiable():
    results = bench_session([(20.0, 60.0, 0.3)], moves=(5.0, -5.0))
    s = suggest(results, demo_profile(), demo_controller())
    assert s.identification is None and s.suggested is None
    assert any(n.startswith("not identifiable") for n in s.notes)
    assert s.trends == ()  # one gain set: nothing to trend either


def test_without_a_controller_only_trends(session):
    s = suggest(session, demo_profile(), None)
    assert s.suggested is None and s.trends
    assert any("no [controller] section" in n for n in s.notes)
    assert records_of(session)  # the steps kept their samples
