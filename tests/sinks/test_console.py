"""The console sink: the notes of one instant share a line, in the order they came."""

from __future__ import annotations

import io
import json

from rich.console import Console

from livestep.decode.counters import LinkCounters
from livestep.sinks.console import ConsoleSink
from livestep.steps.tags import Note


def test_notes_of_one_instant_share_a_line():
    out = io.StringIO()
    sink = ConsoleSink(Console(file=out, width=200))
    for note in (Note(1.5, "kp", "20"), Note(1.5, "ki", "60"), Note(2.25, "gains", "soft")):
        sink.on_note(note)
    assert out.getvalue() == "note at 1.500 s: kp=20, ki=60\n"  # the next instant began
    sink.on_tick(LinkCounters())
    assert out.getvalue().splitlines()[-1] == "note at 2.250 s: gains=soft"
    sink.on_note(Note(3.0, "kd", "0.1"))
    sink.close(LinkCounters())
    assert out.getvalue().splitlines()[-1] == "note at 3.000 s: kd=0.1"


def test_steps_carry_their_verdict_with_a_profile():
    from _results import result

    from livestep.judge.profile import parse_profile
    from livestep.judge.verdict import judge
    from livestep.sinks.console import JsonLinesSink

    profile = parse_profile("[limits]\novershoot_pct = { max = 10 }\n")

    def judged(r):  # as a session with this profile hands steps to its sinks
        return r, judge(r, profile)

    out = io.StringIO()
    sink = ConsoleSink(Console(file=out, width=300))
    sink.on_step(*judged(result(overshoot_pct=12.0)))
    sink.on_step(*judged(result(1, overshoot_pct=4.0)))
    lines = out.getvalue().splitlines()
    assert lines[0].endswith(": ✘ fail")
    assert lines[1] == "  ✘ fail: overshoot 12 % (max 10 %): above the maximum 10 %"
    assert lines[2].startswith("step 1 ") and lines[2].endswith(": ✔ pass") and len(lines) == 3
    js = io.StringIO()
    JsonLinesSink(js).on_step(*judged(result(overshoot_pct=12.0)))
    rec = json.loads(js.getvalue())
    assert rec["verdict"] == "fail" and rec["checks"][0]["margin"] == -2.0
