"""The full demo (about 40 s, marked slow): the fourth pass uses the gains suggested from
the first three gain sets, meets the demo spec, and its measured rise, overshoot and
settling are within 20 % of the predicted ones, as its console output says."""

from __future__ import annotations

import re

import pytest

from livestep.cli import main


@pytest.mark.slow
def test_the_fourth_pass_meets_the_spec_as_predicted(tmp_path, capsys):
    assert main(["demo", "--console", "--record", str(tmp_path / "demo.csv")]) == 0
    out, err = capsys.readouterr()
    assert re.search(r"demo: suggested kp=\S+ ki=\S+ kd=\S+; predicted rise", err), err
    steps = [ln for ln in out.splitlines() if ln.startswith("step ") and "gains=suggested" in ln]
    assert len(steps) == 4 and not any(ln.endswith("✘ fail") for ln in steps)
    lines = err.splitlines()
    for q in ("rise time", "overshoot pct", "settling time"):
        [line] = [ln for ln in lines if ln.startswith(f"  {q}: measured")]
        off = float(re.search(r"\(([+-]\d+) %", line).group(1))
        assert abs(off) <= 20 and "within 20 %" in line
    assert "fourth pass: meets the spec, figures as predicted" in lines
