"""The console sink: the notes of one instant share a line, in the order they came."""

from __future__ import annotations

import io

from rich.console import Console

from livestep.decode.counters import LinkCounters
from livestep.sinks.console import ConsoleSink
from livestep.tags import Note


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
