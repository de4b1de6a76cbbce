"""The virtual bench's command syntax (livestep/bench/commands.py)."""

from __future__ import annotations

import pytest
from hypothesis import given
from hypothesis import strategies as st

from livestep.bench.commands import MAX_LINE, Command, CommandError, parse_command


@pytest.mark.parametrize("line,expected", [
    ("sp 5", Command("sp", value=5.0)),
    ("  SP\t-2.5e-1 ", Command("sp", value=-0.25)),
    ("gains kp=20 kd=0.35", Command("gains", gains=(("kp", 20.0), ("kd", 0.35)))),
    ("Gains KI=1e2", Command("gains", gains=(("ki", 100.0),))),
    ("stream off", Command("stream", on=False)),
    ("stream ON", Command("stream", on=True)),
    ("status", Command("status")),
    ("", None),
    ("   ", None),
])
def test_commands(line, expected):
    assert parse_command(line) == expected


@pytest.mark.parametrize("line,reason", [
    ("sp", "usage: sp VALUE"),
    ("sp 1 2", "usage: sp VALUE"),
    ("sp fast", "must be a number"),
    ("sp nan", "must be finite"),
    ("sp inf", "must be finite"),
    ("gains", "usage: gains"),
    ("gains kp", "expected kp="),
    ("gains kv=1", "expected kp="),
    ("gains kp=1 kp=2", "kp given twice"),
    ("gains kd=x", "kd must be a number"),
    ("stream", "usage: stream"),
    ("stream maybe", "usage: stream"),
    ("status now", "usage: status"),
    ("jog 5", "unknown command 'jog'"),
    ("sp " + "1" * MAX_LINE, "longer than"),
])
def test_refused_commands_say_why(line, reason):
    with pytest.raises(CommandError, match=reason):
        parse_command(line)


@given(st.text(max_size=300))
def test_any_line_is_a_command_nothing_or_a_command_error(line):
    try:
        cmd = parse_command(line)
    except CommandError as exc:
        assert str(exc)
        return
    assert cmd is None or cmd.kind in ("sp", "gains", "stream", "status")
