"""Text-line decoding: formats, damaged input, chunk invariance, fuzzing."""

from __future__ import annotations

import numpy as np
import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from livestep.decode.text import TextDecoder, TextFormat
from livestep.decode.timebase import ClockSettings
from livestep.errors import InputError

N = 60
BODY = "".join(f"{k * 0.001:.3f},{1.0 if k >= 30 else 0.0},{k * 0.01:.2f}\n" for k in range(N))


def decode(data: bytes, fmt: TextFormat | None = None, clock: ClockSettings | None = None,
           sizes: list[int] | None = None):
    dec = TextDecoder(fmt, clock)
    chunks = []
    if sizes is None:
        chunks += dec.feed(data)
    else:
        i = 0
        for n in sizes:
            chunks += dec.feed(data[i:i + n])
            i += n
        chunks += dec.feed(data[i:])
    chunks += dec.flush()
    return dec, chunks


def joined(chunks, field):
    return np.concatenate([getattr(c, field) for c in chunks]) if chunks else np.empty(0)


@pytest.mark.parametrize(("name", "text"), [
    ("comma with header", "t,setpoint,feedback\n" + BODY),
    ("tab", ("t,setpoint,feedback\n" + BODY).replace(",", "\t")),
    ("semicolon", ("t,setpoint,feedback\n" + BODY).replace(",", ";")),
    ("spaces", ("t,setpoint,feedback\n" + BODY).replace(",", "   ")),
    ("crlf", ("t,setpoint,feedback\n" + BODY).replace("\n", "\r\n")),
    ("headerless, roles by position", BODY),
    ("name=value pairs", "".join(
        f"t={k * 0.001:.3f} setpoint={1.0 if k >= 30 else 0.0} feedback={k * 0.01:.2f}\n"
        for k in range(N))),
    ("name:value pairs", "".join(
        f"t:{k * 0.001:.3f}, setpoint:{1.0 if k >= 30 else 0.0}, feedback:{k * 0.01:.2f}\n"
        for k in range(N))),
])
def test_formats(name, text):
    dec, chunks = decode(text.encode())
    assert np.allclose(joined(chunks, "t"), np.arange(N) * 0.001)
    assert np.array_equal(joined(chunks, "setpoint"), [0.0] * 30 + [1.0] * 30)
    assert np.allclose(joined(chunks, "feedback"), np.arange(N) * 0.01)
    assert sum(dec.counters.bad.values()) == 0
    assert dec.counters.samples == N


def test_boot_banner_log_lines_and_damage_are_counted():
    lines = BODY.splitlines(keepends=True)
    text = ("\x00\x13boot v2.1\nt,setpoint,feedback\n" + "".join(lines[:20])
            + "WARN: following error 0.3 mm\n"  # a firmware log line
            + "0.0205,1.0\n"  # wrong field count
            + "0.0206,nan,0.1\n"  # nan
            + "0.02\xff\xfe,1,0\n"  # non-UTF-8 bytes
            + "9" * 10000 + "\n"  # overlong
            + "".join(lines[20:]))
    dec, chunks = decode(text.encode("latin-1"))
    assert dec.counters.samples == N
    assert dec.counters.bad == {"wrong field count": 1, "nan": 1, "garbage": 2,
                                "overlong line": 1}
    assert list(dec.logs) == ["WARN: following error 0.3 mm"]
    assert dec.counters.log_lines == 1


def test_extra_channels_are_kept():
    text = "t,setpoint,feedback,current\n" + "".join(
        f"{k},{k // 10},{k * 2},{-k}\n" for k in range(20))
    _, chunks = decode(text.encode())
    assert np.array_equal(np.concatenate([c.extras["current"] for c in chunks]), -np.arange(20))


def test_column_roles_by_name():
    text = "time_us,cmd,pos\n" + "".join(f"{k * 200},{k // 10},{k}\n" for k in range(20))
    _, chunks = decode(text.encode(), TextFormat(time="time_us", setpoint="cmd", feedback="pos"),
                       ClockSettings(unit="us"))
    assert np.allclose(joined(chunks, "t"), np.arange(20) * 200e-6)
    assert np.array_equal(joined(chunks, "feedback"), np.arange(20))


def test_missing_time_column_is_a_clear_error():
    text = "a,b,c\n" + "1,2,3\n" * 10
    with pytest.raises(InputError, match="no time column 't'"):
        decode(text.encode())


def test_host_stamping_without_device_time():
    text = "setpoint,feedback\n" + "".join(f"{k // 10},{k}\n" for k in range(20))
    _, chunks = decode(text.encode(), TextFormat(time=None), ClockSettings(host_rate=1000.0))
    assert np.allclose(joined(chunks, "t"), np.arange(20) / 1000.0)


def test_counter_wrap_and_device_restart():
    # 16-bit microsecond counter, 250 us period: wraps every 262 samples; then a restart.
    raw = [(k * 250) % 65536 for k in range(600)] + [k * 250 for k in range(100)]
    text = "t,setpoint,feedback\n" + "".join(f"{r},0,0\n" for r in raw)
    dec, chunks = decode(text.encode(), clock=ClockSettings(unit="us", wrap_bits=16))
    t = joined(chunks, "t")
    assert np.all(np.diff(t) > 0)
    assert np.allclose(t[:600], np.arange(600) * 250e-6)
    assert [c.segment for c in chunks] == [0, 1]
    assert dec.counters.restarts == 1 and dec.counters.gaps == 0


def test_time_gaps_are_counted():
    ks = [k for k in range(100) if k not in (40, 41, 70)]
    text = "t,setpoint,feedback\n" + "".join(f"{k * 0.001:.3f},0,0\n" for k in ks)
    dec, _ = decode(text.encode())
    assert dec.counters.gaps == 2


STREAM = ("boot\nt,setpoint,feedback\n" + BODY[:700] + "junk line here\n" + BODY[700:]).encode()


@settings(max_examples=60, deadline=None)
@given(sizes=st.lists(st.integers(0, 200), max_size=30))
def test_any_split_gives_the_same_samples(sizes):
    ref_dec, ref = decode(STREAM)
    dec, chunks = decode(STREAM, sizes=sizes)
    assert np.array_equal(joined(chunks, "t"), joined(ref, "t"))
    assert np.array_equal(joined(chunks, "feedback"), joined(ref, "feedback"))
    assert dec.counters.bad == ref_dec.counters.bad
    assert list(dec.logs) == list(ref_dec.logs)


@settings(max_examples=150, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(data=st.binary(max_size=3000), sizes=st.lists(st.integers(1, 500), max_size=10))
def test_fuzz_random_bytes_never_raise(data, sizes):
    dec = TextDecoder(TextFormat(time=None), ClockSettings(host_rate=100.0))
    i = 0
    for n in [*sizes, len(data)]:
        for c in dec.feed(data[i:i + n]):
            assert np.all(np.isfinite(c.feedback))
        i += n
    dec.flush()
    assert len(dec._carry) <= dec.fmt.max_line


@settings(max_examples=100, deadline=None)
@given(st.data())
def test_fuzz_mutated_stream(data):
    buf = bytearray(STREAM)
    for _ in range(data.draw(st.integers(1, 20))):
        pos = data.draw(st.integers(0, len(buf) - 1))
        buf[pos] = data.draw(st.integers(0, 255))
    try:
        dec, chunks = decode(bytes(buf))
    except InputError as err:  # a damaged header: a clear configuration error, nothing else
        assert "column" in str(err)
        return
    t = joined(chunks, "t")
    assert np.all(np.diff(t) > 0)  # time only increases, whatever the damage
    assert dec.counters.samples == t.size


def test_memory_is_bounded_without_newlines():
    dec = TextDecoder()
    for _ in range(1000):
        dec.feed(b"x" * 1000)
    assert len(dec._carry) <= dec.fmt.max_line
    assert dec.counters.bad["overlong line"] >= 1


def test_note_lines_are_stamped_with_the_sample_before_them():
    rows = [f"{k * 0.001:.3f},{1.0 if k >= 30 else 0.0},{k * 0.01:.2f}\n" for k in range(N)]
    text = ("gains=A\nt,setpoint,feedback\n" + "".join(rows[:20]) + "kp = 2.5\n"
            + "".join(rows[20:40]) + "boot: ok\n# note: 9.5 gains=B\n" + "".join(rows[40:50])
            + "kp=1.2 ki=30\n" + "".join(rows[50:]))
    for sizes in (None, [7] * 300):
        dec, chunks = decode(text.encode(), sizes=sizes)
        assert sum(len(c) for c in chunks) == N
        notes = dec.take_notes()
        # Before any sample: the first sample's time; a recorded note's own time is
        # replaced by the stream's (here the same time base, the sample before it).
        assert [(n.t, n.name, n.value) for n in notes] == [
            (0.0, "gains", "A"), (0.019, "kp", "2.5"), (0.039, "gains", "B"),
            (0.049, "kp", "1.2"), (0.049, "ki", "30")]
        assert dec.counters.notes == 5 and dec.counters.log_lines == 1
        assert dec.take_notes() == []


def test_a_lone_pair_of_a_pairs_stream_is_a_note_unless_it_names_a_column():
    lines = [f"t={k * 0.001:.3f} setpoint=0 feedback={k * 0.01:.2f}\n" for k in range(N)]
    text = "".join(lines[:30]) + "kp=3\nfeedback=1.5\n" + "".join(lines[30:])
    dec, _ = decode(text.encode())
    assert [(n.t, n.name, n.value) for n in dec.take_notes()] == [(0.029, "kp", "3")]


# -- issue 15 --------------------------------------------------------------------------------
ROWS = [f"{k * 0.001:.3f},{1.0 if k >= 30 else 0.0},{k * 0.01:.2f}\n" for k in range(N)]


def test_a_note_column_is_cut_and_stamped_at_its_row():
    rows = [r.rstrip("\n") + "," for r in ROWS]
    rows[5] += "gains=A"
    rows[40] += "operator swapped the belt"
    rows[41] = "0.041,bad,0.41,gains=B"  # a bad row keeps its note, at the row before
    text = "t,setpoint,feedback,note\n" + "\n".join(rows) + "\n"
    for sizes in (None, [13] * 400):
        dec, chunks = decode(text.encode(), sizes=sizes)
        assert sum(len(c) for c in chunks) == N - 1 and dec.columns == ["t", "setpoint",
                                                                         "feedback"]
        assert [(n.t, n.name, n.value) for n in dec.take_notes()] == [
            (0.005, "gains", "A"), (0.04, "note", "operator swapped the belt"),
            (0.04, "gains", "B")]
        assert dict(dec.counters.bad) == {} and dec.counters.log_lines == 1  # "bad" row


def test_notes_before_the_first_sample_keep_one_value_per_name():
    import tracemalloc

    tracemalloc.start()
    dec = TextDecoder()
    for _ in range(50):
        dec.feed(b"gains=A\nkp=1\n" * 2000)  # 200 000 note lines before any sample
    dec.feed(("t,setpoint,feedback\n" + "".join(ROWS)).encode())
    peak = tracemalloc.get_traced_memory()[1]
    tracemalloc.stop()
    assert sorted((n.t, n.name, n.value) for n in dec.take_notes()) == [
        (0.0, "gains", "A"), (0.0, "kp", "1")]
    assert dec.counters.notes == 200_000 and peak < 8 << 20


def test_control_characters_in_stream_notes_are_escaped():
    dec, _ = decode(("gains=\x1b[2Jsoft\x07\n" + "t,setpoint,feedback\n" + "".join(ROWS)
                     ).encode())
    assert [(n.name, n.value) for n in dec.take_notes()] == [("gains", "\\x1b[2Jsoft\\x07")]


@pytest.mark.parametrize(("first", "kept"), [
    ("345,0.000,0.12", False),  # the cut end of a data row: never a sample
    ("dback=0.5", False),  # the cut end of a pair: never a note
    ("=\x13\x00", False),  # garbage
    ("ting motor drive v2", True),  # a cut banner is a log line
    ("t,setpoint,feedback", True),  # a whole header, when the port opened at a line start
])
def test_the_first_line_of_a_live_link_is_dropped_unless_plainly_not_data(first, kept):
    dec = TextDecoder()
    dec.rejoin()
    chunks = dec.feed((first + "\n" + "".join(ROWS)).encode()) + dec.flush()
    assert dec.counters.skipped == (0 if kept else 1)
    assert sum(dec.counters.bad.values()) == 0 and sum(len(c) for c in chunks) == N
    assert dec.take_notes() == []
