"""Any line, however hostile, costs work linear in its length (issue 15, point 2).

Work is counted, not timed (``tests/_work.py``): Python bytecode instructions plus the
length of every string a C string method was called on. A regular expression's work is
invisible to that count, so the parsers of untrusted lines must call none (a backtracking
pattern, such as the old note pattern that was cubic on ``a=`` and a run of spaces, would
fail here by being there at all), and the text decoder may use only its block patterns
that are one character class repeated (linear by construction).
"""

from __future__ import annotations

import pytest
from _work import count_work
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from livestep.decode.lines import (
    _first_bytes,
    cut_comments,
    find_pairs,
    is_garbage,
    looks_like_data,
    split_off_lines,
)
from livestep.decode.text import TextDecoder, TextFormat
from livestep.steps.tags import parse_note, parse_notes, parse_recorded_note

# Per character of the line, and a constant for a call's fixed cost. The measured figures
# are 10 to 140 per character (tokens of two characters cost most); the bounds leave room
# for small changes but not for a second power of the length.
PER_CHAR, FIXED = 300, 60_000
# Block patterns of the decoder: one character class, repeated.
LINEAR_PATTERNS = {r"[ \t]+", r"[A-Za-z_][\w .\[\]/%-]*"}

# Pieces that made the old patterns backtrack: runs of spaces around "=" or ":", long names,
# digits, separators, the recorded-note prefix.
PIECES = ["=", ":", " ", "\t", "a", "kp", "1", ".", ",", ";", "e", "-", "#", "_",
          "# note: 0 ", "x=", " = ", "1.5e3", "\u00e9", "\x00"]

FAMILIES = {
    "equals, spaces": lambda n: "a=" + " " * n + "b",
    "spaces, equals": lambda n: "a" + " " * n + "=",
    "recorded note, spaces": lambda n: "# note: 0 a=" + " " * n + "x",
    "pairs": lambda n: "a=1 " * (n // 4),
    "colons": lambda n: ":" * n,
    "name=name=...": lambda n: "a=" * (n // 2),
    "a long name": lambda n: "a" * n + "=1",
    "a long number": lambda n: "t:" + "1" * n,
    "spaced pairs": lambda n: "k = 1.5e3, " * (n // 11),
}


def line_work(text: str) -> tuple[int, list[str]]:
    """The work of every line-level parser on ``text``, and the patterns they used."""
    total, patterns = 0, []
    data = text.encode("utf-8", "surrogatepass")
    for fn, arg in ((parse_note, text), (parse_notes, text),
                    (parse_recorded_note, "# note: 0 " + text), (find_pairs, data),
                    (looks_like_data, data), (is_garbage, text[:4096])):
        _, work = count_work(fn, arg)
        total += work.total
        patterns += work.patterns
    return total, patterns


def decoder_work(line: bytes, before: bytes) -> tuple[int, list[str]]:
    """The work of a text decoder (lines up to 1 MB allowed) fed ``line`` after ``before``."""
    dec = TextDecoder(TextFormat(max_line=1 << 20))
    dec.feed(before)
    _, work = count_work(dec.feed, line + b"\n" + before[-60:])
    return work.total, work.patterns


HEADS = {
    "delimited": b"t,setpoint,feedback\n" + b"".join(b"%d,0,%d\n" % (k, k) for k in range(20)),
    "pairs": b"".join(b"t=%d setpoint=0 feedback=%d\n" % (k, k) for k in range(20)),
    "first line": b"",
}


@pytest.mark.parametrize("family", FAMILIES)
def test_line_parsers_scale_linearly(family):
    make = FAMILIES[family]
    small, patterns = line_work(make(4000))
    large, more = line_work(make(16000))
    assert patterns == [] and more == []
    assert large <= PER_CHAR * len(make(16000)) + FIXED
    assert large <= 4.5 * small  # four times the line, at most four times the work (and a bit)


@pytest.mark.parametrize("head", HEADS)
@pytest.mark.parametrize("family", FAMILIES)
def test_the_decoder_scales_linearly_on_a_hostile_line(family, head):
    make = FAMILIES[family]
    small, p1 = decoder_work(make(4000).encode(), HEADS[head])
    large, p2 = decoder_work(make(16000).encode(), HEADS[head])
    assert set(p1 + p2) <= LINEAR_PATTERNS
    assert large <= PER_CHAR * 16000 + FIXED
    assert large <= 4.5 * small + FIXED


hostile_lines = st.lists(st.tuples(st.sampled_from(PIECES), st.integers(1, 600)),
                         min_size=1, max_size=12).map(
    lambda runs: "".join(piece * k for piece, k in runs))


@settings(max_examples=40, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(hostile_lines)
def test_any_hostile_line_costs_linear_work(text):
    total, patterns = line_work(text)
    assert patterns == []
    assert total <= PER_CHAR * (len(text) + 1) + FIXED


@pytest.mark.slow
@settings(max_examples=300, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(st.lists(st.tuples(st.sampled_from(PIECES), st.integers(1, 8000)), min_size=1,
                max_size=12).map(lambda runs: "".join(piece * k for piece, k in runs)),
       st.sampled_from(list(HEADS)))
def test_any_hostile_line_costs_linear_work_long_run(text, head):
    total, patterns = line_work(text)
    assert patterns == [] and total <= PER_CHAR * (len(text) + 1) + FIXED
    total, patterns = decoder_work(text.encode("utf-8", "surrogatepass"), HEADS[head])
    assert set(patterns) <= LINEAR_PATTERNS
    assert total <= PER_CHAR * (len(text.encode("utf-8", "surrogatepass")) + 1) + FIXED


@given(st.lists(st.sampled_from([b"#", b"# note: 1.5 gains=a", b"#x,1", b"1,2#,3", b"",
                                 b"1.5,2,3", b"a#b"]), max_size=40))
def test_comment_lines_cut_by_search_as_by_first_byte(lines: list[bytes]) -> None:
    # The search for "#" (the recording reader's comments) cuts exactly the lines the
    # general first-byte table does.
    block = b"".join(x + b"\n" for x in lines)
    rest, cut = split_off_lines(block, _first_bytes(b"#"))
    assert cut_comments(block) == (rest, [raw for _, raw in cut])
