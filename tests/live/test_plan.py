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
    ({"commands": {"setpoint": "sp {value:q}"}}, "not a plain number format"),
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
    # along rest, levels, levels (repeats times) at most 1.5; and the safe command (here the
    # setpoint at rest) at most 1.5 from every level, since the plan may stop at any level.
    lo, hi, max_step = -2.0, 2.0, 1.5
    seq = [rest] + levels * repeats
    ok = (all(lo <= x <= hi for x in seq)
          and all(abs(b - a) <= max_step for a, b in zip(seq, seq[1:], strict=False))
          and all(abs(x - rest) <= max_step for x in levels))
    doc = base(levels=levels, rest=rest, repeats=repeats)
    if ok:
        plan = parse_plan(doc)
        assert [c.value for c in plan.commands] == levels * repeats
    else:
        with pytest.raises(InputError):
            parse_plan(doc)


# -- what is sent is what is checked (issue 15) ------------------------------------------
HOSTILE = {"levels": [2.0, 1.0], "dwell": 1.0, "rest": 0.0,
           "limits": {"min": -1.0, "max": 3.0, "max_step": 2.0}}


@pytest.mark.parametrize("commands,message", [
    # a literal safe command outside the limits, or too far from a level
    ({"setpoint": "sp {value}", "safe": "sp 1000"}, "sends 1000, outside the limits"),
    ({"setpoint": "sp {value}", "safe": "sp -1"}, "return to -1 from level 2 .* exceeds"),
    # not a setpoint command: cannot be checked, refused unless allowed explicitly
    ({"setpoint": "sp {value}", "safe": "motor off"}, "safe_unchecked = true"),
    # templates that change the number after the check
    ({"setpoint": "sp {value}0"}, "touches '0'"),
    ({"setpoint": "sp -{value}"}, "touches '-'"),
    ({"setpoint": "sp {value}e3"}, "touches 'e'"),
    ({"setpoint": "sp {value!s:0<5}"}, "no conversion"),
    ({"setpoint": "sp {value:0<5}"}, "pads with characters"),
    ({"setpoint": "sp {value:x>5}"}, "pads with characters"),
    ({"setpoint": "sp {value:.0%}"}, "scales the number by 100"),
    ({"setpoint": "sp {value:,}"}, "groups digits"),
    ({"setpoint": "sp {value:n}"}, "depends on the locale"),
    ({"setpoint": "sp {value:.0f}"}, "renders 2.5 as '2'"),  # rounding: not the checked number
    ({"setpoint": "sp {value} {value}"}, "exactly once"),
    # a second command smuggled in, or a control character
    ({"setpoint": "sp {value}; sp 1000"}, "one command per line"),
    ({"setpoint": "sp {value} | reboot"}, "one command per line"),
    ({"setpoint": "sp {value}\nsp 1000"}, "printable ASCII"),
    ({"setpoint": "sp {value}", "safe": "sp 0\x00"}, "printable ASCII"),
    ({"setpoint": "sp\u202e {value}"}, "printable ASCII"),  # invisible: reverses the display
])
def test_every_line_sent_is_checked_as_sent(commands, message):
    levels = [2.5, -1.0] if "renders" in message else HOSTILE["levels"]
    doc = {**HOSTILE, "levels": levels, "commands": commands}
    with pytest.raises(InputError, match=message) as info:
        parse_plan(doc, source="hostile.toml")
    assert "\n" not in str(info.value)


def test_a_gain_set_name_cannot_carry_lines_or_separators():
    for name in ("soft\n999999,7,7\n# segment: 5", "a\x00b", "x; sp 1000", "esc\x1b[2J"):
        doc = {**HOSTILE, "commands": {"setpoint": "sp {value}", "gains": "g {name} {kp}"},
               "gains": [{"name": name, "kp": 1}]}
        with pytest.raises(InputError, match="gain set 1: its name"):
            parse_plan(doc)
    doc = {**HOSTILE, "commands": {"setpoint": "sp {value}", "gains": "kp={kp!r}"},
           "gains": [{"name": "ok", "kp": 1}]}
    with pytest.raises(InputError, match="no conversion"):
        parse_plan(doc)


def test_an_unchecked_safe_command_needs_saying_so_and_is_shown_as_such():
    doc = {**HOSTILE, "commands": {"setpoint": "sp {value}", "safe": "motor off",
                                   "safe_unchecked": True}}
    plan = parse_plan(doc)
    assert plan.safe == "motor off" and plan.safe_value is None
    assert "NOT a setpoint: not checked" in "\n".join(describe_plan(plan))


def test_the_return_to_rest_is_checked_against_max_step():
    # From the issue: min -1, max 3, max_step 2; ending on 3 and returning to rest 0 is -3.
    doc = {**HOSTILE, "levels": [1.0, 3.0], "commands": {"setpoint": "sp {value:g}"}}
    with pytest.raises(InputError, match="return to 0 from level 3 \\(a change of -3"):
        parse_plan(doc)


def test_repeats_are_bounded_before_expanding():
    from livestep.live.plan import MAX_COMMANDS

    for repeats in (10**9, 3 * 10**7, MAX_COMMANDS // 2 + 1):
        doc = {**HOSTILE, "repeats": repeats, "commands": {"setpoint": "sp {value}"}}
        with pytest.raises(InputError, match=f"at most {MAX_COMMANDS}"):
            parse_plan(doc)  # refused at once, nothing expanded


@settings(max_examples=200, deadline=None)
@given(levels=st.lists(st.floats(-1e6, 1e6, allow_nan=False), min_size=1, max_size=4),
       spec=st.sampled_from(["", ":g", ":.3f", ":e", ":+.6g", ":08.2f", ": g", ":#g", ":>9g",
                             ":.1f", ":G", ":E", ":.12g"]))
def test_a_rendered_setpoint_is_the_number_checked_or_the_plan_is_refused(levels, spec):
    # Outside check: whatever the plan sends, Python's float() of the number in the line is
    # the level it stands for (to 1e-9), or parse_plan refused the plan.
    doc = {"levels": levels, "dwell": 1.0, "commands": {"setpoint": "SP {value" + spec + "}"}}
    try:
        plan = parse_plan(doc)
    except InputError as err:
        assert "renders" in str(err)
        return
    for cmd in plan.commands:
        assert cmd.text.startswith("SP ")
        assert float(cmd.text[3:]) == pytest.approx(cmd.value, rel=1e-9, abs=1e-12)
        assert all(" " <= ch <= "~" for ch in cmd.text)


GOOD, BAD = 6, 1  # how often a harmless piece is drawn against a hostile one


def pieces(good: list, bad: list) -> st.SearchStrategy:
    return st.sampled_from(good * GOOD + bad * BAD)


@settings(max_examples=400, deadline=None)
@given(prefix=pieces(["sp ", "SP ", "sp  "], ["sp -", "sp 1", "sp\t"]),
       field=pieces(["{value}", "{value:g}", "{value:.3f}", "{value:e}", "{value:+g}",
                     "{value:>8.2f}"],
                    ["{value:.0f}", "{value!s}", "{value:0<5}", "{value:.0%}", "{value:,}",
                     "{value:n}"]),
       suffix=pieces([""], ["0", "e3", "; sp 1000", " ", "\n", "\x00", "\r", " | reboot",
                            ".5", "\u202e"]),
       safe=pieces([None, "sp 0", "sp 0.5"], ["sp 1000", "sp -1", "sp 2", "motor off",
                                              "sp 0\nsp 9", "sp 0;sp 9"]),
       levels=st.lists(pieces([0.0, 0.25, 1.0, 1.5, 2.0], [-2.0, -1.0, 2.5, 3.0, 4.0]),
                       min_size=1, max_size=4))
def test_whatever_a_plan_says_the_device_reads_only_numbers_inside_the_limits(
        prefix, field, suffix, safe, levels):
    # The device is the virtual bench's own command parser (livestep.bench.commands), not
    # the plan module: every line an accepted plan may send must read there as one setpoint
    # command inside [min, max], each the level it stands for, and no change (rest, the
    # levels in order, the safe command after any level) larger than max_step.
    from livestep.bench.commands import CommandError, parse_command

    commands = {"setpoint": prefix + field + suffix}
    if safe is not None:
        commands["safe"] = safe
    doc = {**HOSTILE, "levels": levels, "repeats": 2, "commands": commands}
    try:
        plan = parse_plan(doc)
        check_sendable(plan)
    except InputError:
        return
    lo, hi, step = -1.0, 3.0, 2.0
    read = {}
    for line in plan.lines:
        assert all(" " <= ch <= "~" for ch in line) and not set(line) & set(";|&")
        try:
            cmd = parse_command(line)
        except CommandError as err:
            raise AssertionError(f"the device cannot read {line!r}: {err}") from None
        assert cmd is not None and cmd.kind == "sp" and lo <= cmd.value <= hi, line
        read[line] = cmd.value
    sent = [read[c.text] for c in plan.commands]
    assert sent == [c.value for c in plan.commands]
    seq = [0.0, *sent]
    assert all(abs(b - a) <= step for a, b in zip(seq, seq[1:], strict=False))
    assert all(abs(read[plan.safe] - x) <= step for x in sent)
