"""`livestep suggest` through the command line: a recorded session of the virtual bench
(the quick demo: three gain sets), its trends, the suggested gains, the JSON contract, the
plan file it writes, and bad input as one line."""

from __future__ import annotations

import json
import tomllib
from pathlib import Path

import pytest

from livestep.bench.demo import DEMO_PLAN, DEMO_PROFILE_TOML
from livestep.cli import main
from livestep.cli.tuning import dump_toml
from livestep.live.plan import parse_plan


@pytest.fixture(scope="module")
def session(tmp_path_factory) -> tuple[Path, Path, Path]:
    """A quick demo's recording, the demo spec (with its [controller]) and its plan."""
    folder = tmp_path_factory.mktemp("suggest")
    rec = folder / "demo.csv"
    assert main(["demo", "--quick", "--console", "--record", str(rec)]) == 0
    spec = folder / "spec.toml"
    spec.write_text(DEMO_PROFILE_TOML)
    plan = folder / "plan.toml"
    plan.write_text(dump_toml(DEMO_PLAN))
    return rec, spec, plan


def test_suggest_prints_trends_gains_and_cautions_and_writes_a_plan(session, capsys):
    rec, spec, plan = session
    out_plan = rec.parent / "next.toml"
    assert main(["suggest", str(rec), "--profile", str(spec), "--plan", str(plan),
                 "--write-plan", str(out_plan), "--json"]) == 0
    doc = json.loads(capsys.readouterr().out)
    assert [g["gains"]["kd"] for g in doc["gain_sets"]] == [0.1, 0.2, 0.3]
    over = [t for t in doc["trends"] if t["quantity"] == "overshoot_pct"]
    assert over and over[0]["gain"] == "kd" and over[0]["met_above"] is True
    gains = doc["suggestion"]["gains"]
    assert doc["suggestion"]["meets_profile_with_margin"] is True
    assert "Nothing has been sent" in " ".join(doc["cautions"])
    written = tomllib.loads(out_plan.read_text())
    assert written["gains"] == [{"name": "suggested", **gains}]
    assert written["commands"] == DEMO_PLAN["commands"]
    parse_plan(written)  # a valid plan, to review and send with live --plan --send
    assert "nothing has been sent" in out_plan.read_text()


def test_without_a_controller_it_prints_the_trends(session, tmp_path, capsys):
    rec, _, _ = session
    spec = tmp_path / "spec.toml"
    spec.write_text(DEMO_PROFILE_TOML.split("[controller]")[0])
    assert main(["suggest", str(rec), "--profile", str(spec)]) == 0
    out = capsys.readouterr().out
    assert "overshoot ≤ 20 % is met from kd ≈" in out
    assert "no [controller] section" in out and "Nothing has been sent" in out


@pytest.mark.parametrize("extra, message", [
    (["--write-plan", "x.toml"], "--write-plan needs --plan"),
    (["--gain-notes", "kp,ki"], "expected three note names"),
    (["--controller", "missing.toml"], "missing.toml: no such file"),
])
def test_bad_input_is_one_line(session, capsys, extra, message):
    rec, spec, _ = session
    assert main(["suggest", str(rec), "--profile", str(spec), *extra]) == 2
    err = capsys.readouterr().err
    assert message in err and err.count("\n") == 1
