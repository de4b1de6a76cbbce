"""Decoding is a function of the bytes alone, whatever the read sizes (issue 15, points 6
and 7): the same bytes fed whole, at every single split point, byte by byte and in random
pieces give the same samples, segments, notes, counters, log lines and format decision.
Also what auto-detection decides on banners and text-looking frames."""

from __future__ import annotations

import numpy as np
import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from livestep.decode.frames import FrameDecoder, encode_log_frame, encode_sample_frames
from livestep.decode.text import TextDecoder, TextFormat
from livestep.decode.timebase import ClockSettings
from livestep.errors import InputError
from livestep.live.session import make_decoder

US = ClockSettings(unit="us", wrap_bits=32)
ROWS = [b"%d,%s,%.3f\n" % (1000 + 500 * k, b"1" if k >= 25 else b"0", 0.01 * k)
        for k in range(60)]
TEXT = (b"\xef\xbb\xbf# start: 2026-01-02T03:04:05+00:00\n# livestep: 0.1.0\n"
        b"Booting motor drive v2\n"  # a banner
        b"t,setpoint,feedback\n" + b"".join(ROWS[:10])
        + b"gains=A\r\n" + b"".join(ROWS[10:20])
        + b"# note: 9.5 mode=a=b\n"  # a recorded note whose value holds '='
        + b"x" * 300 + b"\n"  # overlong for max_line=200, whatever the split
        + b"WARN: following error\n" + b"0.3,1\n"  # a log line, a wrong field count
        + b"".join(ROWS[20:40]) + b"kp = 2.5\n" + b"\n\n"
        + b"# segment: 1\n" + b"".join(ROWS[40:]) + b"note=" + b"y" * 150 + b"\n")
FORMAT = TextFormat(max_line=200)


def frames_stream(ts: list[int], banner: bytes = b"") -> bytes:
    values = np.column_stack([np.zeros(len(ts)), np.arange(len(ts), dtype=float)])
    return banner + encode_sample_frames(np.array(ts), values) + encode_log_frame(9, "done")


def run(make, data: bytes, sizes: list[int] | None = None, live: bool = False) -> dict:
    """Everything a decoder gives for ``data`` fed in pieces of ``sizes`` (``None``: whole)."""
    dec = make()
    if live:
        dec.rejoin()
    chunks, notes = [], []
    pieces = [data] if sizes is None else []
    if sizes is not None:
        i = 0
        for n in sizes:
            pieces.append(data[i:i + n])
            i += n
        pieces.append(data[i:])
    try:
        for piece in pieces:
            chunks += dec.feed(piece)
            notes += getattr(dec, "take_notes", list)()
        chunks += dec.flush()
        notes += getattr(dec, "take_notes", list)()
    except InputError as err:
        return {"error": str(err)}

    def cat(field: str) -> np.ndarray:
        return np.concatenate([getattr(c, field) for c in chunks]) if chunks else np.empty(0)

    return {"t": cat("t").tolist(), "feedback": cat("feedback").tolist(),
            "setpoint": (cat("setpoint").tolist()
                         if all(c.setpoint is not None for c in chunks) else None),
            "segments": [s for c in chunks for s in [c.segment] * len(c)],
            "notes": [(n.t, n.name, n.value) for n in notes],
            "counters": dec.counters.snapshot(), "logs": list(getattr(dec, "logs", []) or []),
            "decision": getattr(dec, "decision", None)}


def text_decoder():
    return TextDecoder(FORMAT, US)


def every_split(make, data: bytes, live: bool = False) -> None:
    whole = run(make, data, live=live)
    assert run(make, data, [1] * len(data), live=live) == whole  # byte by byte
    for k in range(len(data) + 1):
        assert run(make, data, [k], live=live) == whole, f"split at byte {k}"


def test_text_stream_decodes_the_same_at_every_split():
    whole = run(text_decoder, TEXT)
    assert len(whole["t"]) == 60 and whole["segments"].count(1) == 20
    assert ("gains", "A") in [(n, v) for _, n, v in whole["notes"]]
    assert ("mode", "a=b") in [(n, v) for _, n, v in whole["notes"]]
    assert whole["counters"]["bad"] == {"overlong line": 1, "wrong field count": 1}
    # comment lines are kept as log lines (a firmware's "# sp=5" answers), never as data
    assert whole["logs"] == ["# start: 2026-01-02T03:04:05+00:00", "# livestep: 0.1.0",
                             "Booting motor drive v2", "WARN: following error"]
    every_split(text_decoder, TEXT)


def test_a_live_text_stream_decodes_the_same_at_every_split():
    # Joined mid-line: the cut first data row and the unfinished last one are skipped; a
    # cut banner is kept as a log line (it cannot be taken for data).
    data = TEXT[TEXT.index(ROWS[3]) + 2:] + b"1700,0,0.0"
    whole = run(text_decoder, data, live=True)
    assert whole["counters"]["skipped"] == 2 and sum(whole["counters"]["bad"].values()) == 2
    assert whole["t"][0] == 0.0 and len(whole["t"]) == 56  # rows 4 on, row 3 skipped
    every_split(text_decoder, data, live=True)
    banner_cut = TEXT[TEXT.index(b"Booting") + 3:]
    assert run(text_decoder, banner_cut, live=True)["logs"][0] == "ting motor drive v2"


def test_a_note_line_over_the_limit_is_dropped_whatever_the_split():
    # The case: a 5006-byte note line, kept in one read and dropped when split.
    data = b"t,setpoint,feedback\n" + b"".join(ROWS[:20]) + b"n=" + b"v" * 5004 + b"\n" \
        + b"".join(ROWS[20:30])
    make = lambda: TextDecoder(TextFormat(), US)  # noqa: E731 - default max_line 4096
    whole = run(make, data)
    assert whole["notes"] == [] and whole["counters"]["bad"] == {"overlong line": 1}
    for k in range(0, len(data) + 1, 97):
        assert run(make, data, [k]) == whole


def test_frames_decode_the_same_at_every_split_restart_before_the_period_is_known():
    # The case: timestamps 1000, 500, 550, 600, 650 us; the restart was decided
    # differently when the frames came one per read.
    data = frames_stream([1000, 500, 550, 600, 650] + [700 + 50 * k for k in range(80)])
    make = lambda: FrameDecoder(clock=US)  # noqa: E731
    whole = run(make, data)
    assert np.allclose(np.array(whole["t"][:5]) * 1e6, [0, 1, 51, 101, 151])
    assert whole["segments"][:2] == [0, 1]
    every_split(make, data)


def test_timebase_restarts_and_wraps_do_not_depend_on_the_reads():
    # A 16-bit counter that wraps within the first 64 intervals, then a restart.
    ts = [(65000 + 250 * k) % 65536 for k in range(40)] + [100 + 250 * k for k in range(40)]
    text = b"t,setpoint,feedback\n" + b"".join(b"%d,0,%d\n" % (t, k) for k, t in enumerate(ts))
    make = lambda: TextDecoder(TextFormat(), ClockSettings(unit="us", wrap_bits=16))  # noqa: E731
    whole = run(make, text)
    assert np.all(np.diff(whole["t"]) > 0) and whole["counters"]["restarts"] == 1
    every_split(make, text)


BANNER = b"Booting motor drive v2.3 (c) invented controls\r\n" * 6  # about 300 bytes


@pytest.mark.parametrize("read", [1, 7, 64, 256, 1024, 4096, 1 << 16])
def test_auto_detection_looks_past_a_boot_banner_whatever_the_read_size(read):
    # The issue: 300 bytes of banner then frames gave 1999 samples with reads of 4 KiB and
    # more, 0 with reads of 256 bytes or less.
    data = frames_stream([1000 * k for k in range(2000)], BANNER)
    dec = make_decoder("auto", binary_clock=US)
    n = sum(len(c) for i in range(0, len(data), read) for c in dec.feed(data[i:i + read]))
    n += sum(len(c) for c in dec.flush())
    assert n == 2000
    assert isinstance(dec.inner, FrameDecoder)
    assert dec.decision.startswith("binary frames") and "8 valid frames" in dec.decision


def test_frames_whose_values_look_like_text_are_still_frames():
    # Float values whose bytes are digits, commas and newlines: "1,2\n" etc.
    raw = np.frombuffer(b"12,3\n4,5" * 500, dtype="<f4")[:1000]
    values = np.column_stack([raw, raw])
    data = encode_sample_frames(np.arange(1000) * 1000, values)
    results = set()
    for read in (1, 3, 256, 4096, len(data)):
        dec = make_decoder("auto", binary_clock=US)
        n = sum(len(c) for i in range(0, len(data), read) for c in dec.feed(data[i:i + read]))
        n += sum(len(c) for c in dec.flush())
        results.add((type(dec.inner).__name__, n))
    assert results == {("FrameDecoder", 1000 - int(np.sum(~np.isfinite(raw))))}


@pytest.mark.parametrize("read", [1, 5, 100, 4096])
def test_a_banner_before_a_text_stream_is_not_its_header(read):
    # The issue: "Booting motor drive" then space-separated data was taken for the header.
    rows = b"".join(b"%d %d %.2f\n" % (500 * k, k >= 30, 0.01 * k) for k in range(60))
    data = b"Booting motor drive\n" + rows
    dec = make_decoder("auto", clock=ClockSettings(unit="us"))
    n = sum(len(c) for i in range(0, len(data), read) for c in dec.feed(data[i:i + read]))
    n += sum(len(c) for c in dec.flush())
    assert n == 60
    assert "without a header" in dec.decision and "1 line(s) before the data" in dec.decision
    assert list(dec.logs) == ["Booting motor drive"]


def test_a_recordings_own_metadata_is_never_taken_for_pairs():
    data = (b"# start: 2026-12-02T20:07:44+00:00\n# livestep: 0.1.0\n# source: bench: 2\n"
            b"# decoder: text, delimiter b','\nt,setpoint,feedback\n" + b"".join(ROWS))
    dec = make_decoder("auto", clock=US)
    n = sum(len(c) for c in dec.feed(data)) + sum(len(c) for c in dec.flush())
    assert n == 60 and dec.decision.startswith("text lines, comma-separated with a header")
    assert dec.counters.bad == {}


mutated = st.tuples(st.lists(st.tuples(st.integers(0, len(TEXT) - 1), st.integers(0, 255)),
                             min_size=1, max_size=25),
                    st.lists(st.integers(1, 300), max_size=12), st.booleans())


def _mutate(edits: list[tuple[int, int]]) -> bytes:
    buf = bytearray(TEXT)
    for pos, value in edits:
        buf[pos] = value
    return bytes(buf)


@settings(max_examples=120, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(mutated)
def test_mutated_text_streams_decode_the_same_whatever_the_split(case):
    edits, sizes, live = case
    data = _mutate(edits)
    assert run(text_decoder, data, sizes, live) == run(text_decoder, data, live=live)


@settings(max_examples=80, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(st.binary(max_size=600), st.lists(st.integers(1, 200), max_size=8),
       st.sampled_from([b"", BANNER[:120], frames_stream([1000 * k for k in range(12)]),
                        b"t,setpoint,feedback\n" + b"".join(ROWS[:12])]))
def test_auto_detection_is_a_function_of_the_bytes(noise, sizes, prefix):
    data = prefix + noise
    make = lambda: make_decoder("auto", binary_clock=US, clock=US)  # noqa: E731
    assert run(make, data, sizes) == run(make, data)


@pytest.mark.slow
@settings(max_examples=3000, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(mutated)
def test_mutated_text_streams_decode_the_same_whatever_the_split_long_run(case):
    edits, sizes, live = case
    data = _mutate(edits)
    assert run(text_decoder, data, sizes, live) == run(text_decoder, data, live=live)
    assert run(text_decoder, data, [1] * len(data), live) == run(text_decoder, data, live=live)


@pytest.mark.slow
@settings(max_examples=1500, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(st.binary(max_size=2000), st.lists(st.integers(1, 400), max_size=12),
       st.sampled_from([b"", BANNER, frames_stream([1000 * k for k in range(40)], BANNER),
                        b"t,setpoint,feedback\n" + b"".join(ROWS)]))
def test_auto_detection_is_a_function_of_the_bytes_long_run(noise, sizes, prefix):
    data = prefix + noise
    make = lambda: make_decoder("auto", binary_clock=US, clock=US)  # noqa: E731
    assert run(make, data, sizes) == run(make, data)
    assert run(make, data, [1] * len(data)) == run(make, data)


# -- lines among the data cost no more than data lines (issue 16) ------------------------
# Reference: the decoder's line-by-line path, which handles every line in turn; the fast
# path cuts comment, note, header and log lines out of a block, parses the rows in one
# pass and handles the lines cut in their place. Both must give the same of everything.
OTHER_LINES = [b"# a comment", b"# note: 1.5 gains=B", b"kp=2.5 ki=0.1", b"gains=C",
               b"WARN: following error", b"t,setpoint,feedback", b"nan,1,2", b"1,2",
               b"Booting", b"# segment: 3", b"1,nan,0.5"]


@st.composite
def stream_with_lines(draw: st.DrawFn) -> bytes:
    out = [b"t,setpoint,feedback\n"]
    k = 0
    for _ in range(draw(st.integers(1, 12))):
        for _ in range(draw(st.integers(0, 80))):
            out.append(b"%d,%d,%.3f\n" % (1000 + 500 * k, k // 40, 0.01 * k))
            k += 1
        out.append(draw(st.sampled_from(OTHER_LINES)) + b"\n")
    return b"".join(out)


def _line_by_line(monkeypatch_context, data: bytes, sizes: list[int] | None) -> dict:
    with monkeypatch_context() as mp:
        mp.setattr(TextDecoder, "_parse_around_text", lambda self, block, ncol: None)
        return run(text_decoder, data, sizes)


@settings(max_examples=150, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(data=stream_with_lines(), read=st.sampled_from([None, 256, 4096]))
def test_lines_among_the_data_decode_as_line_by_line(data, read):
    sizes = None if read is None else [read] * (len(data) // read)
    assert run(text_decoder, data, sizes) == _line_by_line(pytest.MonkeyPatch.context, data,
                                                           sizes)


def test_the_fixed_stream_decodes_as_line_by_line():
    assert run(text_decoder, TEXT) == _line_by_line(pytest.MonkeyPatch.context, TEXT, None)
    sizes = [7] * (len(TEXT) // 7)
    assert run(text_decoder, TEXT, sizes) == _line_by_line(pytest.MonkeyPatch.context, TEXT,
                                                           sizes)


def test_a_note_among_the_rows_takes_the_time_of_the_row_before_it():
    # By hand: once the format is known (8 data lines), a note after the row at device time
    # 6500 us (5.5 ms after the first row, the time origin) is stamped 5.5 ms, in a block
    # whose rows are parsed in one pass (the fast path, counted).
    head = b"t,setpoint,feedback\n" + b"".join(ROWS[:10])
    data = head + b"".join(ROWS[10:12]) + b"gains=B\n" + b"".join(ROWS[12:40])
    real, taken = TextDecoder._parse_around_text, []

    def spy(self, block, ncol):
        out = real(self, block, ncol)
        taken.append(out is not None)
        return out

    with pytest.MonkeyPatch.context() as mp:
        mp.setattr(TextDecoder, "_parse_around_text", spy)
        out = run(text_decoder, data, [len(head)])
    assert taken and all(taken)
    assert [t for t, n, _ in out["notes"] if n == "gains"] == [pytest.approx(5.5e-3)]


def test_counters_stay_plain_numbers_whatever_the_read_size():
    # The recorder writes them as JSON: a numpy integer there ended a session (found by the
    # live tests once small reads were stamped in Python floats).
    import json

    for size in (7, 256, 4096, len(TEXT)):
        dec = text_decoder()
        for i in range(0, len(TEXT), size):
            dec.feed(TEXT[i:i + size])
        dec.flush()
        json.dumps(dec.counters.snapshot())
