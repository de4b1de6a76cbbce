"""Comparing two sets of steps: hand-made results with answers worked out by hand, and the
compare command on recordings."""

from __future__ import annotations

import json
import math
from pathlib import Path

import pytest
from _results import result

from livestep.cli import main
from livestep.judge.compare import BETTER, SAME, WORSE, compare, judge_change

DEMO = str(Path(__file__).resolve().parents[2] / "fixtures" / "belt-axis.csv")


def t4_cdf(t: float) -> float:
    """Student's t distribution with 4 degrees of freedom, closed form:
    F(t) = 1/2 + (3/8) u (1 - t^2 / (12 (1 + t^2/4))), u = t / sqrt(1 + t^2/4)
    (standard result for even degrees of freedom; from memory, checked at several points)."""
    u = t / math.sqrt(1 + t * t / 4)
    return 0.5 + 3 / 8 * u * (1 - t * t / (12 * (1 + t * t / 4)))


def test_changes_by_hand():
    a = [result(k, rise_time=x, model={"wn": 40.0 + k}) for k, x in enumerate((0.05, 0.06, 0.07))]
    b = [result(k, rise_time=x, model={"wn": 50.0 + k}) for k, x in enumerate((0.04, 0.05, 0.06))]
    cmp = compare(a, b, "old gains", "new gains")
    assert (cmp.a_label, cmp.b_steps) == ("old gains", 3)
    rise = cmp.get("rise_time")
    # Means 60 and 50 ms: change -10 ms, -16.7 % of A; lower rise time is better.
    assert rise.change == pytest.approx(-0.01) and rise.change_pct == pytest.approx(-100 / 6)
    assert rise.judgement == BETTER
    # Welch's t: both s = 10 ms, n = 3: se = 10 sqrt(2/3) ms, t = -1.2247, and the
    # Welch-Satterthwaite degrees of freedom are (2 s^2/3)^2 / (2 (s^2/3)^2 / 2) = 4;
    # two-sided p = 2 (1 - F4(|t|)).
    t = 0.01 / (0.01 * math.sqrt(2 / 3))
    assert rise.p_value == pytest.approx(2 * (1 - t4_cdf(t)), rel=1e-9)
    assert rise.significant is False
    # Natural frequency 40..42 -> 50..52 rad/s: higher is better, and clear of the scatter:
    # t = 10 / sqrt(2/3) = 12.25, p = 2 (1 - F4(12.25)).
    wn = cmp.get("wn")
    assert wn.judgement == BETTER and wn.p_value == pytest.approx(
        2 * (1 - t4_cdf(10 / math.sqrt(2 / 3))), rel=1e-6)
    assert wn.significant is True
    # No preferred direction for the damping ratio: no judgement; identical: no p-value.
    zeta = cmp.get("zeta")
    assert zeta.judgement is None and zeta.change == 0.0 and zeta.p_value is None


def test_judge_change_directions():
    assert judge_change(-1.0, "lower") == BETTER and judge_change(1.0, "lower") == WORSE
    assert judge_change(1.0, "higher") == BETTER and judge_change(-1.0, "higher") == WORSE
    assert judge_change(0.0, "lower") == SAME
    assert judge_change(None, "lower") is None and judge_change(1.0, None) is None


def test_a_quantity_missing_on_one_side():
    a = [result(0, peak_time=None), result(1, peak_time=None)]
    b = [result(0, peak_time=0.1), result(1, peak_time=0.12)]
    peak = compare(a, b).get("peak_time")
    assert (peak.a.count, peak.a.missing, peak.b.count) == (0, 2, 2)
    assert peak.change is None and peak.judgement is None and peak.p_value is None


def test_compare_command_on_tags_and_files(capsys, tmp_path):
    # The shipped demo: gain set A (zeta 0.35) against C (zeta 0.7), tools/make_demo.py.
    assert main(["compare", DEMO, "--tags", "gains=A", "gains=C",
                 "--json", "--jobs", "1"]) == 0
    doc = json.loads(capsys.readouterr().out)
    assert doc["a"] == {"label": f"{DEMO} [gains=A]", "steps": 2}
    rows = {q["quantity"]: q for q in doc["quantities"]}
    # More damping: less overshoot (better), a slower rise (worse). %OS = 100 exp(-zeta pi /
    # sqrt(1 - zeta^2)) (Ogata) gives 30.9 % and 4.6 % for zeta 0.35 and 0.7.
    assert rows["overshoot_pct"]["judgement"] == "better"
    assert rows["overshoot_pct"]["a"]["mean"] == pytest.approx(
        100 * math.exp(-0.35 * math.pi / math.sqrt(1 - 0.35**2)), abs=0.5)
    assert rows["overshoot_pct"]["b"]["mean"] == pytest.approx(
        100 * math.exp(-0.7 * math.pi / math.sqrt(1 - 0.7**2)), abs=0.5)
    assert rows["rise_time"]["judgement"] == "worse"
    # The table says it in words beside any colour.
    assert main(["compare", DEMO, "--tags", "gains=A", "gains=C",
                 "--jobs", "1"]) == 0
    out = capsys.readouterr().out
    assert "better" in out and "worse" in out and "[gains=A]" in out
    # Two files: the same recording against itself changes nothing.
    assert main(["compare", DEMO, DEMO, "--json",
                 "--jobs", "1"]) == 0
    rows = {q["quantity"]: q for q in json.loads(capsys.readouterr().out)["quantities"]}
    assert rows["rise_time"]["change"] == 0.0 and rows["rise_time"]["judgement"] == "same"


@pytest.mark.parametrize("argv, message", [
    ([DEMO], "two recordings, or one recording and --tags"),
    (["a.csv", "b.csv", "c.csv"], "two recordings"),
    ([DEMO, "--tags", "gains=A", "gains=Z"], "no step carries the note"),
    ([DEMO, "--tags", "gains", "gains=B"], "expected name=value"),
    (["missing.csv", DEMO], "no such file"),
])
def test_bad_compare_input_is_one_line_with_status_2(capsys, argv, message):
    assert main(["compare", *argv, "--jobs", "1"]) == 2
    err = capsys.readouterr().err
    assert message in err and err.count("\n") == 1
