"""Notes and tags: parsing note text, which notes are active when."""

from __future__ import annotations

import re

from hypothesis import assume, given
from hypothesis import strategies as st

from livestep.steps.tags import (
    MAX_NOTE_NAMES,
    Note,
    NoteTimeline,
    clean_text,
    format_note,
    parse_note,
    parse_notes,
    parse_recorded_note,
)


def test_parse_note_accepts_one_pair_only():
    assert parse_note("gains=B") == ("gains", "B")
    assert parse_note("  kp = 2.5 ") == ("kp", "2.5")
    assert parse_note("gains=set B") == ("gains", "set B")
    assert parse_note("kp=") == ("kp", "")
    for not_a_note in ("t=1 sp=2", "a=1=2", "boot ok", "2kp=3", "=3", "loop time = 5 us"):
        assert parse_note(not_a_note) is None, not_a_note


def test_parse_notes_takes_several_tokens_without_spaces():
    assert parse_notes("gains=set B") == [("gains", "set B")]
    assert parse_notes("kp=1.2 ki=30, kd=0.01") == [("kp", "1.2"), ("ki", "30"), ("kd", "0.01")]
    assert parse_notes("kp=1.2 and ki=30") is None  # a word that is not a pair: a log line
    assert parse_notes("boot ok") is None and parse_notes("") is None


def test_recorded_note_round_trip():
    note = Note(12.0005, "gains", "B")
    assert format_note(note) == "# note: 12.0005 gains=B"
    assert parse_recorded_note(format_note(note)) == note
    assert parse_recorded_note("# state: connected") is None
    assert parse_recorded_note("# note: x gains=B") is None


def test_active_at_follows_the_latest_note_of_each_name():
    tl = NoteTimeline([Note(1.0, "gains", "A"), Note(5.0, "gains", "B"),
                       Note(3.0, "load", "empty"), Note(7.0, "load", "")])
    assert tl.active_at(0.5) == ()
    assert tl.active_at(1.0) == (("gains", "A"),)  # set at the instant: active
    assert tl.active_at(4.0) == (("gains", "A"), ("load", "empty"))
    assert tl.active_at(6.0) == (("gains", "B"), ("load", "empty"))
    assert tl.active_at(8.0) == (("gains", "B"),)  # an empty value ends the note
    assert len(tl) == 4 and [n.t for n in tl.notes] == [1.0, 3.0, 5.0, 7.0]


@given(st.lists(st.tuples(st.floats(0, 100), st.sampled_from("ab"), st.sampled_from("xyz")),
                max_size=20), st.floats(0, 100))
def test_active_at_matches_a_linear_scan(raw, t):
    notes = [Note(*n) for n in raw]
    assume(len({n.t for n in notes}) == len(notes))
    tl = NoteTimeline(reversed(notes))  # order of adding does not matter (distinct times)
    expect = {}
    for n in sorted(notes, key=lambda n: n.t):
        if n.t <= t:
            expect[n.name] = n.value
    assert tl.active_at(t) == tuple(sorted(expect.items()))


# -- hostile text (issue 15) -----------------------------------------------------------------
_OLD_NOTE = re.compile(r"\s*([A-Za-z_][\w.\-]*)\s*=\s*([^=]*?)\s*")  # the former definition


@given(st.text(alphabet="ab_.-=1 \t:", max_size=14))
def test_parse_note_agrees_with_the_former_pattern_on_short_text(text):
    # The former regular expression is the specification on short ASCII text (where its
    # backtracking costs nothing): the linear parser must give the same answer.
    m = _OLD_NOTE.fullmatch(text)
    assert parse_note(text) == ((m[1], m[2]) if m else None)


def test_a_recorded_note_keeps_an_equals_sign_and_escapes_controls():
    assert parse_recorded_note("# note: 1.5 mode=a=b") == Note(1.5, "mode", "a=b")
    assert parse_recorded_note("# note: 1.5 esc=\x1b[2J") == Note(1.5, "esc", "\\x1b[2J")
    assert parse_recorded_note("# note: nan a=1") is None
    assert parse_recorded_note("# note: 1 bad name=1") is None


def test_format_note_can_never_write_a_second_line():
    line = format_note(Note(1.0, "gains", "soft\n999999,7,7\n# segment: 5\r\u2028x"))
    assert "\n" not in line and "\r" not in line and "\u2028" not in line
    assert parse_recorded_note(line).value == "soft\\x0a999999,7,7\\x0a# segment: 5\\x0d\\u2028x"
    assert clean_text("plain [bold] text") == "plain [bold] text"


def test_a_flood_of_notes_keeps_one_per_name_and_instant():
    tl = NoteTimeline()
    for k in range(100_000):
        tl.add(Note(0.0, "gains", str(k)))
    assert len(tl) == 1 and tl.active_at(0.0) == (("gains", "99999"),)
    for k in range(MAX_NOTE_NAMES + 10):
        tl.add(Note(1.0, f"n{k}", "x"))
    assert len(tl.active_at(1.0)) == MAX_NOTE_NAMES and tl.dropped == 11
