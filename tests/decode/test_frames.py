"""livestep.decode.frames.FrameDecoder against an independent encoder and the C emitter.

References outside the package: frames are built by the encoder in this file, a
direct implementation of the COBS algorithm as published (S. Cheshire and M. Baker,
"Consistent Overhead Byte Stuffing", IEEE/ACM Transactions on Networking 7(2), 1999),
with Python's ``binascii.crc_hqx(data, 0xFFFF)`` as CRC-16/CCITT-FALSE (checked against
the catalogued check value 0x29B1 for b"123456789"), and ``struct`` for the little-endian
fields. The firmware header is tested by compiling ``tools/firmware/example.c`` with
the system C compiler and decoding its output, against a simulation computed here.
"""

from __future__ import annotations

import binascii
import shutil
import struct
import subprocess
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np
import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from livestep.decode.counters import LinkCounters
from livestep.decode.frames import (
    MAX_ENCODED,
    FrameDecoder,
    encode_log_frame,
    encode_sample_frame,
    encode_sample_frames,
)
from livestep.decode.timebase import ClockSettings

ROOT = Path(__file__).resolve().parents[2]
FIRMWARE = ROOT / "tools" / "firmware"
PERIOD_US = 1000
WRAP = 2**32


# -- the independent reference ---------------------------------------------------------
def crc(data: bytes) -> int:
    """CRC-16/CCITT-FALSE: binascii.crc_hqx is CRC-CCITT (0x1021, unreflected)."""
    return binascii.crc_hqx(data, 0xFFFF)


def cobs_encode(data: bytes) -> bytes:
    """COBS as in Cheshire & Baker (1999): each block is a code byte (its length + 1)
    then up to 254 non-zero bytes; a code under 0xFF stands for a zero after the block."""
    out = bytearray()
    code_at, code = 0, 1
    out.append(0)  # placeholder for the first code
    for byte in data:
        if byte == 0:
            out[code_at] = code
            code_at, code = len(out), 1
            out.append(0)
        else:
            out.append(byte)
            code += 1
            if code == 0xFF:
                out[code_at] = code
                code_at, code = len(out), 1
                out.append(0)
    out[code_at] = code
    return bytes(out)


def cobs_decode(enc: bytes) -> bytes:
    out = bytearray()
    i = 0
    while i < len(enc):
        code = enc[i]
        assert code and i + code <= len(enc), "malformed COBS"
        out += enc[i + 1 : i + code]
        i += code
        if code < 0xFF and i < len(enc):
            out.append(0)
    return bytes(out)


def frame(body: bytes) -> bytes:
    """Payload ``body`` + CRC (low byte first), COBS, delimiter."""
    return cobs_encode(body + struct.pack("<H", crc(body))) + b"\x00"


def sample(seq: int, ts: int, *values: float) -> bytes:
    body = struct.pack("<BBHI", 1, len(values), seq % 65536, ts % WRAP)
    return frame(body + struct.pack(f"<{len(values)}f", *values))


def log(seq: int, text: str | bytes) -> bytes:
    raw = text.encode() if isinstance(text, str) else text
    return frame(struct.pack("<BBH", 2, 0, seq % 65536) + raw)


def f32(x: float) -> float:
    return struct.unpack("<f", struct.pack("<f", x))[0]


# -- running the decoder ------------------------------------------------------------------
@dataclass
class Result:
    chunks: list
    counters: LinkCounters
    logs: list[str]
    t: np.ndarray = field(init=False)
    setpoint: np.ndarray = field(init=False)
    feedback: np.ndarray = field(init=False)
    segment: np.ndarray = field(init=False)

    def __post_init__(self) -> None:
        cat = (lambda xs: np.concatenate(xs) if xs else np.zeros(0))  # noqa: E731
        self.t = cat([c.t for c in self.chunks])
        self.feedback = cat([c.feedback for c in self.chunks])
        self.setpoint = cat([c.setpoint for c in self.chunks if c.setpoint is not None])
        self.segment = cat([np.full(len(c), c.segment) for c in self.chunks])


def run(stream: bytes, cuts: list[int] | None = None, **kwargs) -> Result:
    """Feed ``stream`` split at ``cuts`` (byte offsets), then flush."""
    dec = FrameDecoder(**kwargs)
    bounds = [0, *sorted(set(cuts or [])), len(stream)]
    chunks = []
    for a, b in zip(bounds[:-1], bounds[1:], strict=True):
        chunks += dec.feed(stream[a:b])
        assert len(dec._tail) <= MAX_ENCODED  # bounded buffering
    chunks += dec.flush()
    check_invariants(dec, chunks, len(stream))
    return Result(chunks, dec.counters, list(dec.logs))


def check_invariants(dec: FrameDecoder, chunks: list, n_bytes: int) -> None:
    c = dec.counters
    assert c.bytes == n_bytes
    assert c.samples == sum(len(ch) for ch in chunks)
    rejected = sum(v for k, v in c.bad.items() if k not in ("repeated timestamp",
                                                            "truncated frame", "nan"))
    assert c.resyncs in (rejected, rejected + 1)  # + 1: joined mid-frame
    assert 0 <= c.gaps <= c.lost
    last_t, last_seg = -np.inf, 0
    for ch in chunks:
        assert len(ch) > 0 and ch.feedback.shape == ch.t.shape
        assert np.all(np.diff(ch.t) > 0) and ch.t[0] > last_t
        assert ch.segment >= last_seg
        last_t, last_seg = ch.t[-1], ch.segment
    assert c.restarts == last_seg


def steady(n: int, *, seq0: int = 0, ts0: int = 0, fb0: float = 0.0) -> list[bytes]:
    """n 2-channel frames, 1 kHz, feedback fb0 + k mm (distinct), setpoint 50 mm."""
    return [sample(seq0 + k, ts0 + k * PERIOD_US, 50.0, fb0 + k) for k in range(n)]


# -- format basics ------------------------------------------------------------------------
def test_crc_reference_check_value():
    assert crc(b"123456789") == 0x29B1


def test_frame_sizes_and_package_encoders_match_the_reference():
    f = sample(7, 123456, 1.5, -2.25)
    payload = cobs_decode(f[:-1])
    assert (len(payload), len(f) - 1, len(f)) == (18, 19, 20)
    assert f.count(0) == 1 and f[-1] == 0
    assert encode_sample_frame(7, 123456, [1.5, -2.25]) == f
    assert encode_log_frame(65537, "Riemen gespannt ✓") == log(1, "Riemen gespannt ✓")
    ts = np.arange(600) * 997 + WRAP - 3000  # wraps; covers the 16-bit CRC tables
    vals = np.c_[np.zeros(600), np.linspace(-1, 1, 600)]
    ref = b"".join(sample(65500 + k, int(t), *v) for k, (t, v) in enumerate(zip(ts, vals,
                                                                               strict=True)))
    assert encode_sample_frames(ts, vals, seq0=65500) == ref


def test_decodes_values_times_and_counts():
    stream = b"\x00" + b"".join(steady(50, ts0=10_000))
    r = run(stream)
    assert len(r.chunks) == 1 and r.chunks[0].extras == {}
    np.testing.assert_array_equal(r.feedback, np.arange(50.0))
    np.testing.assert_array_equal(r.setpoint, np.full(50, 50.0))
    np.testing.assert_allclose(r.t, np.arange(50) * 1e-3, atol=1e-12)
    c = r.counters
    assert (c.samples, c.gaps, c.lost, c.resyncs, c.restarts, sum(c.bad.values())) == (
        50, 0, 0, 0, 0, 0)


def test_every_channel_count_and_extras():
    frames = [sample(n - 1, n * PERIOD_US, *[f32(0.1 * i + n) for i in range(n)])
              for n in range(2, 17)]
    r = run(b"".join(frames))
    assert len(r.chunks) == 15  # the channel count changes at every frame
    for n, ch in zip(range(2, 17), r.chunks, strict=True):
        assert list(ch.extras) == [f"ch{i}" for i in range(2, n)]
        assert ch.setpoint[0] == f32(n) and ch.feedback[0] == f32(0.1 + n)
        for i in range(2, n):
            assert ch.extras[f"ch{i}"][0] == f32(0.1 * i + n)
    assert r.counters.samples == 15 and r.counters.gaps == 0


def test_channel_roles():
    frames = b"".join(sample(k, k * PERIOD_US, 1.0 + k, 2.0, 3.0) for k in range(20))
    r = run(frames, channels=("feedback", "current", "setpoint"))
    ch = r.chunks[0]
    np.testing.assert_array_equal(ch.feedback, 1.0 + np.arange(20))
    np.testing.assert_array_equal(ch.setpoint, np.full(20, 3.0))
    assert list(ch.extras) == ["current"]
    r = run(frames, channels=("feedback",))
    assert r.chunks[0].setpoint is None and list(r.chunks[0].extras) == ["ch1", "ch2"]
    r = run(frames, channels=("setpoint", "feedback", "current", "temperature"))
    assert r.counters.bad == {"too few channels": 20} and r.counters.samples == 0
    assert r.counters.gaps == 0  # intact frames still carry the sequence
    with pytest.raises(ValueError):
        FrameDecoder(channels=("setpoint", "position"))


# -- sequence numbers, clock, restarts -----------------------------------------------------
def test_sequence_wraparound_is_not_a_gap():
    r = run(b"".join(steady(40, seq0=65520)))
    assert (r.counters.gaps, r.counters.lost, r.counters.samples) == (0, 0, 40)


@pytest.mark.parametrize(("seq0", "skip"), [(100, 1), (100, 5), (65533, 4), (65535, 300)])
def test_sequence_gaps(seq0: int, skip: int):
    frames = steady(40 + skip, seq0=seq0)
    del frames[20 : 20 + skip]
    r = run(b"".join(frames))
    assert (r.counters.gaps, r.counters.lost) == (1, skip)
    assert r.counters.samples == 40


def test_log_frames_take_part_in_the_sequence():
    frames = steady(20)
    frames.insert(10, log(10, "gain kp=1.8"))
    frames[11:] = steady(10, seq0=11, ts0=10 * PERIOD_US, fb0=10)
    r = run(b"".join(frames))
    assert (r.counters.gaps, r.counters.lost, r.counters.log_lines) == (0, 0, 1)
    assert r.logs == ["gain kp=1.8"]


def test_timestamp_wraps_at_32_bits():
    ts0 = WRAP - 25 * PERIOD_US + 123
    r = run(b"".join(steady(60, ts0=ts0)))
    assert len(r.chunks) == 1 and r.counters.restarts == 0
    np.testing.assert_allclose(np.diff(r.t), 1e-3, rtol=1e-9)


def test_16_bit_tick_counter():
    clock = ClockSettings(unit="ticks", tick_rate=10_000.0, wrap_bits=16)
    frames = [sample(k, (60_000 + 10 * k) % 65536, 0.0, float(k)) for k in range(1000)]
    r = run(b"".join(frames), clock=clock)
    np.testing.assert_allclose(np.diff(r.t), 1e-3, rtol=1e-9)
    assert r.counters.restarts == 0


def restart_stream(*, boot_log: bool) -> list[bytes]:
    old = steady(30, seq0=400, ts0=5_000_000)
    new = steady(30, seq0=1 if boot_log else 0, ts0=2_000, fb0=100)
    return old + ([log(0, "boot")] if boot_log else []) + new


@pytest.mark.parametrize("boot_log", [False, True])
def test_device_restart_starts_a_segment(boot_log: bool):
    frames = restart_stream(boot_log=boot_log)
    r = run(b"".join(frames))
    assert [(len(c), c.segment) for c in r.chunks] == [(30, 0), (30, 1)]
    assert r.counters.restarts == 1
    assert (r.counters.gaps, r.counters.lost) == (0, 0)  # a sequence reset, not a loss
    assert np.all(np.diff(r.t) > 0)
    np.testing.assert_allclose(np.diff(r.chunks[1].t), 1e-3, rtol=1e-9)
    # across reads: the old segment, the boot log on its own, then the new segment
    cut = sum(len(f) for f in frames[:30])
    cuts = [cut, cut + len(frames[30])] if boot_log else [cut]
    r2 = run(b"".join(frames), cuts)
    assert [(len(c), c.segment) for c in r2.chunks] == [(30, 0), (30, 1)]
    assert (r2.counters.gaps, r2.counters.lost, r2.counters.restarts) == (0, 0, 1)


def test_sequence_jump_without_restart_is_counted_even_at_the_end():
    frames = steady(30) + [log(40, "fault: following error")]
    r = run(b"".join(frames))
    assert (r.counters.gaps, r.counters.lost) == (1, 10)


# -- damaged streams ------------------------------------------------------------------------
def corrupt_data_byte(f: bytes) -> bytes:
    """Change one non-code byte (a payload byte that is not zero) to another non-zero."""
    payload = cobs_decode(f[:-1])
    j = next(i for i in range(8, len(payload)) if payload[i] not in (0, 0x10))
    enc = bytearray(f)
    enc[j + 1] ^= 0x10  # payload byte j sits at wire offset j + 1 when it is not zero
    return bytes(enc)


def test_corrupted_byte_rejects_one_frame_and_resyncs():
    frames = steady(40)
    frames[17] = corrupt_data_byte(frames[17])
    r = run(b"".join(frames))
    c = r.counters
    assert c.bad == {"bad crc": 1} and c.resyncs == 1
    assert (c.gaps, c.lost, c.samples) == (1, 1, 39)
    np.testing.assert_array_equal(r.feedback, np.delete(np.arange(40.0), 17))


def test_zero_inside_a_frame_loses_only_that_frame():
    frames = steady(40)
    frames[5] = frames[5][:9] + b"\x00" + frames[5][10:]
    r = run(b"".join(frames))
    assert r.counters.samples == 39 and r.counters.lost == 1
    np.testing.assert_array_equal(r.feedback, np.delete(np.arange(40.0), 5))


@pytest.mark.parametrize("skip", range(1, 21))
def test_joining_mid_frame(skip: int):
    stream = b"".join(steady(30))
    r = run(stream[skip:])
    assert sum(r.counters.bad.values()) == 0
    assert r.counters.resyncs == (0 if skip >= 19 else 1)  # 19: starts at a delimiter
    np.testing.assert_array_equal(r.feedback, np.arange(1.0, 30.0))


def test_log_frames_text_and_limits():
    text200 = "é" * 100  # 200 bytes of UTF-8
    frames = [log(0, "Achse 2: Riemen nachgespannt"), log(1, b"bad \xff\xfe utf-8"),
              log(2, text200), log(3, text200 + "x"),
              frame(struct.pack("<BBH", 2, 1, 4) + b"x"), *steady(3, seq0=5)]
    r = run(b"".join(frames))
    assert r.logs == ["Achse 2: Riemen nachgespannt", "bad \ufffd\ufffd utf-8", text200]
    assert r.counters.log_lines == 3
    assert r.counters.bad == {"bad length": 1, "bad header": 1}
    assert (r.counters.gaps, r.counters.samples) == (0, 3)
    dec = FrameDecoder(max_logs=2)
    dec.feed(b"".join(log(k, f"line {k}") for k in range(5)))
    assert list(dec.logs) == ["line 3", "line 4"] and dec.counters.log_lines == 5


def test_unknown_type_and_malformed_frames():
    frames = steady(10)
    frames[3] = frame(struct.pack("<BBH", 7, 0, 3) + b"future")
    frames[5] = frame(struct.pack("<BBHI", 1, 3, 5, 5000) + struct.pack("<2f", 1, 2))
    frames[6] = frame(struct.pack("<BBHI", 1, 0, 6, 6000))
    frames[7] = b"\x05\x01\x02\x00"  # code points past the delimiter
    frames[8] = cobs_encode(struct.pack("<BBH", 1, 2, 8)) + b"\x00"  # too short
    r = run(b"".join(frames))
    assert r.counters.bad == {"unknown type": 1, "bad length": 2, "bad channel count": 1,
                              "bad cobs": 1}
    assert r.counters.resyncs == 5 and r.counters.samples == 5
    assert (r.counters.gaps, r.counters.lost) == (1, 2)  # frames 7 and 8 lost their seq
    np.testing.assert_array_equal(r.feedback, [0, 1, 2, 4, 9])


def test_full_cobs_block_mid_frame_takes_the_exact_path():
    body = struct.pack("<BBH", 2, 1, 0x0505) + b"A" * 248  # 254 bytes with the CRC
    enc = frame(body)
    assert len(enc) == 257 and enc[0] == 0xFF  # 256 bytes before the delimiter
    r = run(b"\x00" + enc + b"".join(steady(3, seq0=0x0506)))
    assert r.counters.bad == {"bad header": 1} and r.counters.samples == 3
    assert r.counters.gaps == 0  # its sequence number was read


@pytest.mark.parametrize("garbage", [300, 5000])
def test_oversized_garbage_is_dropped_with_bounded_memory(garbage: int):
    rng = np.random.default_rng(garbage)
    junk = bytes(rng.integers(1, 256, garbage, dtype=np.uint8))
    stream = b"".join(steady(10)) + junk + b"\x00" + b"".join(steady(10, seq0=10, ts0=10_000,
                                                                          fb0=10))
    whole = run(stream)
    piecewise = run(stream, cuts=list(range(0, len(stream), 7)))
    for r in (whole, piecewise):
        assert r.counters.bad == {"oversized frame": 1} and r.counters.resyncs == 1
        np.testing.assert_array_equal(r.feedback, np.arange(20.0))
    dec = FrameDecoder()
    for _ in range(100):
        dec.feed(junk)
        assert len(dec._tail) <= MAX_ENCODED


def test_flush_decodes_or_counts_the_last_frame():
    frames = steady(5)
    r = run(b"".join(frames)[:-1])  # the last delimiter is missing
    assert r.counters.samples == 5 and sum(r.counters.bad.values()) == 0
    r = run(b"".join(frames)[:-6])
    assert r.counters.bad == {"truncated frame": 1} and r.counters.resyncs == 0
    assert r.counters.samples == 4


def test_shared_counters_object():
    counters = LinkCounters(reconnects=2)
    dec = FrameDecoder(counters=counters)
    dec.feed(b"".join(steady(5)))
    assert dec.counters is counters and counters.samples == 5 and counters.reconnects == 2


# -- any split of the stream -------------------------------------------------------------------
def eventful_stream() -> bytes:
    """Wrap, log, sequence gap, corrupted frame, unknown type, garbage, restart."""
    ts0 = WRAP - 100 * PERIOD_US + 7
    frames = steady(300, ts0=ts0)
    frames[50] = log(50, "kp 2.4 -> 3.0")
    del frames[150:152]
    frames[200] = corrupt_data_byte(frames[200])
    frames[220] = frame(struct.pack("<BBH", 9, 0, 222) + b"?")
    frames[240] = bytes(range(1, 256)) * 2 + b"\x00"  # replaces a frame: lost
    frames[260:] = [log(0, "boot"), *steady(40, seq0=1, ts0=3_000, fb0=500)]
    return b"".join(frames)


EVENTFUL = eventful_stream()
EVENTFUL_WHOLE = run(EVENTFUL)


def test_eventful_stream_counts():
    c = EVENTFUL_WHOLE.counters
    assert c.bad == {"bad crc": 1, "unknown type": 1, "oversized frame": 1}
    assert (c.resyncs, c.gaps, c.lost, c.restarts, c.log_lines) == (3, 3, 4, 1, 2)
    assert [len(ch) for ch in EVENTFUL_WHOLE.chunks] == [256, 40]


def assert_same(a: Result, b: Result) -> None:
    assert a.counters.snapshot() == b.counters.snapshot()
    assert a.logs == b.logs
    np.testing.assert_array_equal(a.feedback, b.feedback)
    np.testing.assert_array_equal(a.setpoint, b.setpoint)
    np.testing.assert_array_equal(a.segment, b.segment)
    # times: exact in the first segment; after a restart the timebase places the new
    # segment one median period on, which it may not know yet from a short read
    first = a.segment == 0
    np.testing.assert_array_equal(a.t[first], b.t[first])
    for s in np.unique(a.segment):
        np.testing.assert_allclose(np.diff(a.t[a.segment == s]), np.diff(b.t[b.segment == s]),
                                   rtol=1e-9)


@settings(max_examples=60, deadline=None)
@given(st.lists(st.integers(0, len(EVENTFUL)), max_size=40))
def test_any_split_gives_the_same_result(cuts: list[int]):
    assert_same(run(EVENTFUL, cuts), EVENTFUL_WHOLE)


def test_byte_by_byte():
    assert_same(run(EVENTFUL, list(range(len(EVENTFUL)))), EVENTFUL_WHOLE)


# -- fuzz ----------------------------------------------------------------------------------------
BYTES = st.one_of(st.integers(0, 255), st.sampled_from([0, 0, 1, 2, 0xFF]))


@settings(max_examples=150, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(st.lists(BYTES, max_size=3000).map(bytes), st.lists(st.integers(0, 3000), max_size=8))
def test_random_bytes_never_raise(stream: bytes, cuts: list[int]):
    split = run(stream, [c for c in cuts if c <= len(stream)])
    assert_same(split, run(stream))


VALID = b"\x00" + b"".join(steady(120, ts0=77_000))


@settings(max_examples=150, deadline=None)
@given(st.lists(st.tuples(st.sampled_from(["flip", "zero", "insert", "delete"]),
                          st.integers(0, len(VALID) - 1), st.integers(1, 255)),
                min_size=1, max_size=6),
       st.lists(st.integers(0, len(VALID)), max_size=6))
def test_mutated_streams(mutations: list[tuple[str, int, int]], cuts: list[int]):
    data = bytearray(VALID)
    for op, at, value in mutations:
        at = min(at, len(data) - 1)
        if op == "flip":
            data[at] ^= value
        elif op == "zero":
            data[at] = 0
        elif op == "insert":
            data.insert(at, value)
        else:
            del data[at]
    r = run(bytes(data), [c for c in cuts if c <= len(data)])
    assert_same(r, run(bytes(data)))
    # each mutation damages at most two frames; what survives is the original data
    assert 120 - 2 * len(mutations) <= r.counters.samples <= 120
    assert set(r.feedback.tolist()) <= set(range(120))
    assert np.all(np.diff(r.feedback) > 0)


# -- the C emitter ------------------------------------------------------------------------------
def simulate_axis(frames: int) -> np.ndarray:
    """The invented belt axis of example.c, computed here: x'' = wn^2 (r - x) - 2 zeta wn x',
    wn 50 rad/s, zeta 0.6, semi-implicit Euler with 10 steps per 1 ms sample, 50 mm step
    at sample 100; channels setpoint, position, 2e-5 A per mm/s^2 of acceleration."""
    h = 1000 * 1e-6 / 10
    x = v = 0.0
    out = np.empty((frames, 3))
    for k in range(frames):
        r = 50.0 if k >= 100 else 0.0
        acc = 50.0 * 50.0 * (r - x) - 2.0 * 0.6 * 50.0 * v
        out[k] = (r, x, acc * 2e-5)
        for _ in range(10):
            acc = 50.0 * 50.0 * (r - x) - 2.0 * 0.6 * 50.0 * v
            v += acc * h
            x += v * h
    return out


def test_c_example_output(tmp_path: Path):
    cc = shutil.which("cc") or shutil.which("gcc") or shutil.which("clang")
    if cc is None:
        pytest.skip("no C compiler")
    exe = tmp_path / "example"
    build = subprocess.run([cc, "-std=c99", "-Wall", "-Wextra", "-pedantic", "-Werror", "-O2",
                            "-o", str(exe), str(FIRMWARE / "example.c")],
                           capture_output=True, text=True)
    assert build.returncode == 0, build.stderr
    n, ts0 = 400, WRAP - 150 * PERIOD_US  # the counter wraps at sample 150
    out = tmp_path / "step.bin"
    subprocess.run([str(exe), str(n), str(ts0), str(out)], check=True, timeout=30)
    wire = out.read_bytes()
    assert wire[0] == 0
    # the reference parse: every frame re-encodes to the same bytes with a good CRC
    pieces = wire[1:].split(b"\x00")
    assert pieces[-1] == b""
    payloads = [cobs_decode(p) for p in pieces[:-1]]
    assert len(payloads) == n + 2
    for p, enc in zip(payloads, pieces[:-1], strict=True):
        assert struct.unpack("<H", p[-2:])[0] == crc(p[:-2])
        assert frame(p[:-2]) == enc + b"\x00"
    assert [struct.unpack("<H", p[2:4])[0] for p in payloads] == list(range(n + 2))
    expected = simulate_axis(n)
    got = np.array([struct.unpack("<BBHI3fH", p)[4:7] for p in payloads if p[0] == 1])
    np.testing.assert_allclose(got, expected.astype(np.float32), rtol=1e-6, atol=1e-5)
    # the decoder
    r = run(wire, cuts=list(range(0, len(wire), 64)),
            channels=("setpoint", "feedback", "current"))
    assert r.logs == ["boot: belt axis demo, 1 kHz", "setpoint step 0 -> 50 mm"]
    c = r.counters
    assert (c.samples, c.gaps, c.lost, c.resyncs, c.restarts, sum(c.bad.values())) == (
        n, 0, 0, 0, 0, 0)
    np.testing.assert_allclose(r.t, np.arange(n) * 1e-3, atol=1e-9)
    np.testing.assert_allclose(r.setpoint, expected[:, 0], atol=1e-5)
    np.testing.assert_allclose(r.feedback, expected[:, 1], rtol=1e-6, atol=1e-5)
    current = np.concatenate([ch.extras["current"] for ch in r.chunks])
    np.testing.assert_allclose(current, expected[:, 2], rtol=1e-6, atol=1e-5)


def test_nan_channel_values_are_skipped_and_counted():
    # Frames built by the test's own encoder; a NaN feedback is no sample (the frame itself
    # is intact, so no resync).
    stream = b"\x00" + b"".join(sample(k, 1000 * k, 1.0, float("nan") if k == 3 else 0.5)
                                for k in range(8))
    res = run(stream)
    assert res.feedback.size == 7 and res.counters.bad["nan"] == 1
    assert res.counters.samples == 7
