"""Step plans: parsing, expansion, tags and the safety checks that run before anything is sent."""

from __future__ import annotations

import re
from pathlib import Path

import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from livestep.errors import InputError
from livestep.live.plan import check_sendable, describe_plan, load_plan_file, parse_plan

PLAN_TOML = """\
# plan for the carton transfer axis, bench 2 (invented)
levels = [2.0, 0.0]
dwell = 0.5
repeats = 2
rest = 0.0

[limits]
min = -1.0
max = 3.0
max_step = 2.0

[commands]
setpoint = "SET POS {value:.2f}"
gains = "PID {kp} {ki} {kd}"
safe = "SET POS 0"

[[gains]]
name = "soft"
kp = 20
ki = 60
kd = 0.1

[[gains]]
kp = 20
ki = 60
kd = 0.3
"""


def base(**over):
    doc = {"levels": [1.0, 0.0], "dwell": 1.0, "rest": 0.0,
           "limits": {"min": -2.0, "max": 2.0, "max_step": 1.5},
           "commands": {"setpoint": "sp {value}"}}
    doc.update(over)
    return doc


def test_a_plan_file_expands_in_order_with_tags(write_file):
    plan = parse_plan(load_plan_file(write_file("p.toml", PLAN_TOML)), source="p.toml")
    texts = [c.text for c in plan.commands]
    assert texts == ["PID 20 60 0.1", "SET POS 2.00", "SET POS 0.00", "SET POS 2.00",
                     "SET POS 0.00", "PID 20 60 0.3", "SET POS 2.00", "SET POS 0.00",
                     "SET POS 2.00", "SET POS 0.00"]
    assert plan.safe == "SET POS 0" and plan.eol == "\n" and plan.lead_in == 0.5
    assert plan.duration == pytest.approx(2 * 0.2 + 8 * 0.5)
    fourth = plan.commands[4]
    assert dict(fourth.tags) == {"plan_entry": "5", "setpoint": "0", "repeat": "2",
                                 "gains": "soft"}
    assert dict(plan.commands[6].tags)["gains"] == "set 2"
    assert [c.entry for c in plan.commands] == list(range(1, 11))
    check_sendable(plan)
    shown = "\n".join(describe_plan(plan))
    assert "limits: setpoint -1 .. 3, largest change 2" in shown
    assert "'SET POS 0'" in shown and "t+   0.20 s  SET POS 2.00" in shown


def test_safe_command_defaults_to_the_setpoint_at_rest():
    plan = parse_plan(base(rest=0.5, commands={"setpoint": "sp {value:g}"}))
    assert plan.safe == "sp 0.5"


@pytest.mark.parametrize("over,message", [
    ({"levels": [1.0, 2.5]}, "entry 2: setpoint 2.5 is outside the limits"),
    ({"levels": [-1.0, 1.0]}, "step 2: a change of \\+2 from -1 to 1 exceeds limits.max_step"),
    ({"rest": -1.8, "levels": [0.0]}, "the first level: a change of \\+1.8"),
    ({"rest": 5.0}, "rest 5 is outside the limits"),
    # the repeat wraps from the last level back to the first: 1.2 -> -0.5 is too big
    ({"levels": [-0.5, 0.5, 1.2], "repeats": 2}, "step 4: a change of -1.7"),
    ({"limits": {"min": -1.0, "max": 1.0}}, "limits.max_step is missing"),
    ({"limits": {"min": 1.0, "max": -1.0, "max_step": 1.0}}, "min is above limits.max"),
    ({"limits": {"min": 0, "max": 1, "max_step": 1, "speed": 2}}, "unknown key limits.speed"),
    ({"levels": []}, "levels must be a non-empty list"),
    ({"levels": [1, "two"]}, "levels must be a non-empty list"),
    ({"dwell": 0}, "dwell must be positive"),
    ({"repeats": 1.5}, "repeats must be a whole number"),
    ({"speed": 3}, "unknown key 'speed'"),
    ({"commands": {}}, "commands.setpoint .* is missing"),
    ({"commands": {"setpoint": "sp {level}"}}, "its only field is {value}"),
    ({"commands": {"setpoint": "sp {}"}}, "use named fields"),
    ({"commands": {"setpoint": "sp {value:q}"}}, "Unknown format code"),
    ({"commands": {"setpoint": "sp {value"}}, "setpoint template"),
    ({"commands": {"setpoint": "sp {value}", "eol": ";"}}, "commands.eol"),
    ({"gains": [{"kp": 1.0}]}, "gain sets need commands.gains"),
    ({"gains": [{"kp": 1.0}], "commands": {"setpoint": "sp {value}", "gains": "k {kv}"}},
     "no value for {kv}"),
    ({"gains": [{"name": "x"}], "commands": {"setpoint": "s {value}", "gains": "k"}},
     "gain set 1 has no gains"),
])
def test_bad_plans_are_refused_with_one_line(over, message):
    with pytest.raises(InputError, match=message) as info:
        parse_plan(base(**over), source="bench.toml")
    assert str(info.value).startswith("bench.toml: ") and "\n" not in str(info.value)


def test_sending_needs_limits_and_rest():
    with pytest.raises(InputError, match="needs \\[limits\\]"):
        check_sendable(parse_plan({k: v for k, v in base().items() if k != "limits"}))
    with pytest.raises(InputError, match="needs rest"):
        check_sendable(parse_plan({k: v for k, v in base().items() if k != "rest"}))


def test_plan_file_errors_name_the_file_and_line(write_file, tmp_path):
    with pytest.raises(InputError, match="no such plan file"):
        load_plan_file(tmp_path / "nope.toml")
    bad = write_file("bad.toml", "levels = [1, 2]\ndwell = = 1\n")
    with pytest.raises(InputError, match="bad.toml: not valid TOML: .*line 2"):
        load_plan_file(bad)


def test_the_readme_plan_is_the_shipped_fixture_and_is_sendable():
    root = Path(__file__).resolve().parents[2]
    block = re.search(r"```toml\n(.*?)```", (root / "README.md").read_text(), re.S)
    assert block is not None
    assert block.group(1) == (root / "fixtures" / "axis-plan.toml").read_text()
    plan = parse_plan(load_plan_file(root / "fixtures" / "axis-plan.toml"))
    check_sendable(plan)
    assert [c.text for c in plan.commands[:3]] == ["gains kp=20 ki=60 kd=0.1", "sp 2", "sp 0"]
    assert plan.safe == "sp 0"


@settings(max_examples=150, deadline=None)
@given(levels=st.lists(st.floats(-5, 5, allow_nan=False).map(lambda x: round(x, 2)),
                       min_size=1, max_size=6),
       rest=st.floats(-5, 5).map(lambda x: round(x, 2)), repeats=st.integers(1, 3))
def test_limits_accept_exactly_the_plans_that_respect_them(levels, rest, repeats):
    # The rule written out independently: every level and rest in [-2, 2]; every change
    # along rest, levels, levels (repeats times) at most 1.5.
    lo, hi, max_step = -2.0, 2.0, 1.5
    seq = [rest] + levels * repeats
    ok = (all(lo <= x <= hi for x in seq)
          and all(abs(b - a) <= max_step for a, b in zip(seq, seq[1:], strict=False)))
    doc = base(levels=levels, rest=rest, repeats=repeats)
    if ok:
        plan = parse_plan(doc)
        assert [c.value for c in plan.commands] == levels * repeats
    else:
        with pytest.raises(InputError):
            parse_plan(doc)
