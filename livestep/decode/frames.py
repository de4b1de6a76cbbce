"""The compact binary frame format: COBS-delimited sample and log frames.

Wire format (all multi-byte fields little-endian; the full specification, with the C
emitter, is in ``tools/firmware/README.md``). Each frame is ``COBS(payload)`` followed by
one ``0x00`` delimiter byte. Payload:

=========  ===========================================================================
type 0x01  samples: ``u8 n`` (1..16 channels), ``u16 seq``, ``u32 timestamp`` (device
           counter ticks, microseconds by default), ``n x float32`` channel values,
           ``u16 crc``. 2 channels: 18 payload bytes, 19 after COBS, 20 on the wire.
type 0x02  log text: ``u8 0``, ``u16 seq``, UTF-8 text (at most 200 bytes), ``u16 crc``.
=========  ===========================================================================

``seq`` increments by one per frame of any type and wraps at 65536. ``crc`` is
CRC-16/CCITT-FALSE (polynomial 0x1021, initial value 0xFFFF, no reflection, no final
xor; check value 0x29B1) over every payload byte before it, low byte first.

Decoding is vectorised with numpy: a read is split at its delimiters, every frame's COBS
code chain is followed for all frames at once (one pass per zero byte in the longest
chain), CRCs are computed with position tables for all frames of one length as a 2-D
array, and fixed-layout payloads are read through a structured dtype. Frames whose COBS
uses a 0xFF block in the middle (only possible for frames longer than any valid one) take
an exact per-frame path.

Counting (:class:`~livestep.decode.counters.LinkCounters`):

- ``bytes``: every byte fed. ``samples``: samples delivered in chunks.
- ``bad[reason]``: one per rejected frame; reasons ``bad cobs``, ``bad length``,
  ``bad crc``, ``unknown type``, ``bad channel count`` (n outside 1..16), ``bad header``
  (log frame with a non-zero second byte), ``too few channels`` (fewer channels than
  ``channels`` names), ``oversized frame`` (more than :data:`MAX_ENCODED` bytes before a
  delimiter; never buffered beyond that), ``truncated frame`` (bytes left at
  :meth:`FrameDecoder.flush` that fail the COBS, length or CRC check), plus the
  timebase's ``repeated timestamp`` (samples).
- ``resyncs``: one per rejected frame except ``truncated frame`` (the decoder drops its
  bytes and restarts at the next delimiter), and one if the stream starts mid-frame: the
  bytes before the first delimiter are decoded as a frame, and if they fail the COBS,
  length or CRC check they are taken for the end of a frame sent before the decoder
  joined: dropped, counted here and not in ``bad``.
- ``gaps`` / ``lost``: from sequence numbers only. Every frame with a good CRC and a
  full header takes part in the sequence check, whatever its type (so a frame lost to
  corruption counts as lost, and a rejected but intact frame does not). A discontinuity
  adds 1 to ``gaps`` and the number of missing frames (mod 65536) to ``lost``. A
  discontinuity at a device restart (between the last sample of one segment and the
  first of the next) is a sequence reset, not a loss, and is not counted; it is settled
  when the next sample frame arrives (at :meth:`FrameDecoder.flush` at the latest).
  The :class:`~livestep.decode.timebase.Timebase` gets private counters, so its time
  gaps do not count a second time; they are kept in ``FrameDecoder.time_gaps``. Its
  ``restarts`` and ``bad`` counts are passed on.
- ``log_lines``: log frames decoded (UTF-8, invalid bytes replaced).

Why this module is long: about 100 of its lines are the wire format above, the rest is one
vectorised decoder with its CRC and COBS tables and the matching encoders, which the
tests and the virtual bench use to produce exactly what the decoder reads.
"""

from __future__ import annotations

import binascii
from collections import Counter, deque
from collections.abc import Sequence
from dataclasses import dataclass

import numpy as np
from numpy.typing import ArrayLike, NDArray

from livestep.decode.counters import LinkCounters
from livestep.decode.timebase import ClockSettings, Timebase
from livestep.steps.samples import SampleChunk
from livestep.steps.tags import clean_text

__all__ = [
    "DEFAULT_CLOCK",
    "FRAME_LOG",
    "FRAME_SAMPLES",
    "FrameDecoder",
    "MAX_CHANNELS",
    "MAX_ENCODED",
    "MAX_LOG_TEXT",
    "cobs_decode",
    "cobs_encode",
    "crc16",
    "encode_log_frame",
    "encode_sample_frame",
    "encode_sample_frames",
]

FRAME_SAMPLES = 0x01
FRAME_LOG = 0x02
MAX_CHANNELS = 16
MAX_LOG_TEXT = 200  # bytes of UTF-8
MAX_ENCODED = 256  # bytes between delimiters; the longest valid frame is 207
DEFAULT_CLOCK = ClockSettings(unit="us", wrap_bits=32)

_HEADER = 4  # type, u8, u16 seq
_CRC_INIT = 0xFFFF
_POLY = 0x1021

# frame status codes
_UNSEEN, _SAMPLE, _LOG, _LEAD_DROPPED = 0, 1, 2, 3
_REASONS = ("bad cobs", "bad length", "bad crc", "unknown type", "bad channel count",
            "bad header", "too few channels", "oversized frame", "truncated frame")
_CODE = {reason: 4 + i for i, reason in enumerate(_REASONS)}
_FIRST_BAD = 4
_N_CODES = 4 + len(_REASONS)


# -- CRC-16/CCITT-FALSE ------------------------------------------------------------------
def crc16(data: bytes) -> int:
    """CRC-16/CCITT-FALSE of ``data`` (0x29B1 for b"123456789")."""
    return binascii.crc_hqx(data, _CRC_INIT)


def _byte_table() -> NDArray[np.uint16]:
    """``T[b]``: the register after shifting byte ``b`` into a zero register."""
    table = np.zeros(256, dtype=np.uint16)
    for b in range(256):
        c = b << 8
        for _ in range(8):
            c = ((c << 1) ^ _POLY) if c & 0x8000 else (c << 1)
        table[b] = c & 0xFFFF
    return table


def _position_tables(
    byte_table: NDArray[np.uint16], depth: int
) -> tuple[NDArray[np.uint16], NDArray[np.uint16]]:
    """``Z[k, b]``: CRC (zero initial value) of byte ``b`` followed by ``k`` zero bytes;
    ``I[k]``: CRC (initial 0xFFFF) of ``k`` zero bytes. The CRC is linear, so the CRC of
    a K-byte message m is ``I[K] ^ xor_j Z[K-1-j, m[j]]``."""

    def shift_zero(c: NDArray[np.uint16]) -> NDArray[np.uint16]:
        return ((c << 8) & 0xFFFF).astype(np.uint16) ^ byte_table[c >> 8]

    z = np.empty((depth, 256), dtype=np.uint16)
    z[0] = byte_table
    init = np.empty(depth + 1, dtype=np.uint16)
    init[0] = _CRC_INIT
    for k in range(1, depth + 1):
        init[k] = shift_zero(init[k - 1 : k])[0]
        if k < depth:
            z[k] = shift_zero(z[k - 1])
    return z, init


_T = _byte_table()
_Z, _I = _position_tables(_T, MAX_ENCODED)
_Z_FLAT = _Z.ravel()
_PAIR_CACHE: dict[int, NDArray[np.uint16]] = {}
_PAIR_MIN_ROWS = 512  # build 16-bit tables for a length once a read has this many frames
_PAIR_MAX_LEN = 72  # CRC-covered bytes of a 16-channel sample frame: tables <= 4.7 MB


def _pair_tables(k: int) -> NDArray[np.uint16]:
    """For an even message length ``k``: ``P[i, w]`` = CRC contribution (zero initial
    value) of the little-endian byte pair ``w`` at bytes 2i, 2i+1 of the message."""
    tables = _PAIR_CACHE.get(k)
    if tables is None:
        w = np.arange(65536)
        lo, hi = w & 0xFF, w >> 8
        tables = np.empty((k // 2, 65536), dtype=np.uint16)
        for i in range(k // 2):
            tables[i] = _Z[k - 1 - 2 * i, lo] ^ _Z[k - 2 - 2 * i, hi]
        if len(_PAIR_CACHE) < 4:
            _PAIR_CACHE[k] = tables
    return tables


def _crc_rows(m: NDArray[np.uint8]) -> NDArray[np.uint16]:
    """CRC-16/CCITT-FALSE of each row of the (rows, K) byte array ``m``."""
    rows, k = m.shape
    crc = np.full(rows, _I[k], dtype=np.uint16)
    if k % 2 == 0 and k <= _PAIR_MAX_LEN and rows >= _PAIR_MIN_ROWS:
        tables = _pair_tables(k)
        words = np.ascontiguousarray(m).view("<u2")
        for i in range(k // 2):
            crc ^= tables[i][words[:, i]]
        return crc
    for j in range(k):
        crc ^= _Z[k - 1 - j][m[:, j]]
    return crc


# -- COBS ----------------------------------------------------------------------------------
def cobs_encode(data: bytes) -> bytes:
    """COBS encoding of ``data`` (no delimiter)."""
    out = bytearray()
    block = bytearray()
    for b in data:
        if b == 0:
            out.append(len(block) + 1)
            out += block
            block.clear()
        else:
            block.append(b)
            if len(block) == 254:
                out.append(255)
                out += block
                block.clear()
    out.append(len(block) + 1)
    out += block
    return bytes(out)


def cobs_decode(enc: bytes) -> bytes | None:
    """Exact COBS decoding of one frame (no delimiter); ``None`` if malformed."""
    out = bytearray()
    i, n = 0, len(enc)
    while i < n:
        code = enc[i]
        if code == 0 or i + code > n:
            return None
        out += enc[i + 1 : i + code]
        i += code
        if code != 0xFF and i < n:
            out.append(0)
    return bytes(out)


def _cobs_encode_rows(payload: NDArray[np.uint8]) -> NDArray[np.uint8]:
    """COBS encoding of each row of a (rows, P) byte array, P <= 253 (so one overhead
    byte and no 0xFF blocks): (rows, P + 1)."""
    rows, p = payload.shape
    cols = np.arange(p + 1)
    zero_at = np.where(payload == 0, cols[:p], p)
    # next zero at or after each position, the virtual trailing zero at p
    nxt = np.empty((rows, p + 1), dtype=np.int64)
    nxt[:, p] = p
    nxt[:, :p] = np.minimum.accumulate(zero_at[:, ::-1], axis=1)[:, ::-1]
    out = np.empty((rows, p + 1), dtype=np.uint8)
    out[:, 0] = nxt[:, 0] + 1
    out[:, 1:] = np.where(payload == 0, nxt[:, 1:] - cols[:p], payload)
    return out


# -- encoding ------------------------------------------------------------------------------
def _frame(payload_without_crc: bytes) -> bytes:
    crc = crc16(payload_without_crc)
    return cobs_encode(payload_without_crc + bytes((crc & 0xFF, crc >> 8))) + b"\x00"


def encode_sample_frame(seq: int, timestamp: int, values: Sequence[float]) -> bytes:
    """One sample frame on the wire (with its delimiter): sequence number ``seq``
    (mod 65536), device time ``timestamp`` (counter ticks, mod 2**32), 1..16 channel
    values (float32; channel 0 setpoint, 1 feedback by default)."""
    n = len(values)
    if not 1 <= n <= MAX_CHANNELS:
        raise ValueError(f"a sample frame carries 1 to {MAX_CHANNELS} channels, not {n}")
    head = bytes((FRAME_SAMPLES, n)) + (int(seq) & 0xFFFF).to_bytes(2, "little")
    body = (int(timestamp) & 0xFFFFFFFF).to_bytes(4, "little") + np.asarray(
        values, dtype="<f4").tobytes()
    return _frame(head + body)


def encode_log_frame(seq: int, text: str) -> bytes:
    """One log frame on the wire: ``text`` as UTF-8, cut to 200 bytes (at a character
    boundary)."""
    raw = text.encode("utf-8")
    if len(raw) > MAX_LOG_TEXT:
        raw = raw[:MAX_LOG_TEXT].decode("utf-8", errors="ignore").encode("utf-8")
    head = bytes((FRAME_LOG, 0)) + (int(seq) & 0xFFFF).to_bytes(2, "little")
    return _frame(head + raw)


def _sample_dtype(n: int) -> np.dtype:
    return np.dtype([("type", "u1"), ("n", "u1"), ("seq", "<u2"), ("ts", "<u4"),
                     ("values", "<f4", (n,)), ("crc", "<u2")])


def encode_sample_frames(timestamps: ArrayLike, values: ArrayLike, *, seq0: int = 0) -> bytes:
    """Many sample frames at once, vectorised: ``timestamps`` (m,) device ticks,
    ``values`` (m, n) channel values, sequence numbers ``seq0, seq0 + 1, ...``."""
    ts = np.asarray(timestamps)
    vals = np.asarray(values, dtype="<f4")
    if vals.ndim == 1:
        vals = vals[:, None]
    m, n = vals.shape
    if not 1 <= n <= MAX_CHANNELS or ts.shape != (m,):
        raise ValueError("need (m,) timestamps and (m, n) values with 1 <= n <= 16")
    dtype = _sample_dtype(n)
    wire = np.zeros((m, dtype.itemsize + 2), dtype=np.uint8)
    for a in range(0, m, 1 << 16):  # in blocks, to bound the temporaries
        b = min(a + (1 << 16), m)
        rec = np.empty(b - a, dtype=dtype)
        rec["type"], rec["n"] = FRAME_SAMPLES, n
        rec["seq"] = (seq0 + np.arange(a, b)) & 0xFFFF
        rec["ts"] = ts[a:b].astype(np.int64) & 0xFFFFFFFF
        rec["values"] = vals[a:b]
        raw = rec.view(np.uint8).reshape(b - a, dtype.itemsize)
        crc = _crc_rows(raw[:, :-2])
        raw[:, -2] = crc & 0xFF
        raw[:, -1] = crc >> 8
        wire[a:b, :-1] = _cobs_encode_rows(raw)
    return wire.tobytes()


# -- decoding ------------------------------------------------------------------------------
@dataclass
class _Read:
    """Per-frame results for one batch of delimited frames."""

    status: NDArray[np.int8]
    seq: NDArray[np.int32]  # -1: not part of the sequence check
    ts: NDArray[np.uint32]
    samples: list[tuple[NDArray[np.intp], NDArray[np.float32]]]
    logs: list[tuple[int, str]]


class FrameDecoder:
    """Stateful decoder for one link: bytes in (any split), sample chunks out.

    ``channels`` names the channels by position: ``setpoint`` and ``feedback`` fill those
    fields of :class:`~livestep.steps.samples.SampleChunk` (``feedback`` is required; without a
    ``setpoint`` role the chunks' setpoint is ``None``); other names, and ``ch<i>`` for
    channels beyond the names, go to ``extras``. ``clock`` describes the device
    timestamp (microseconds in a 32-bit counter by default). ``logs`` keeps the last
    ``max_logs`` firmware log lines."""

    def __init__(self, *, channels: Sequence[str] = ("setpoint", "feedback"),
                 clock: ClockSettings = DEFAULT_CLOCK, counters: LinkCounters | None = None,
                 max_logs: int = 200) -> None:
        names = tuple(channels)
        if "feedback" not in names:
            raise ValueError("the channels must include 'feedback'")
        if len(set(names)) != len(names) or not 1 <= len(names) <= MAX_CHANNELS:
            raise ValueError(f"need 1 to {MAX_CHANNELS} distinct channel names")
        for i, name in enumerate(names):
            if name.startswith("ch") and name[2:].isdigit() and name != f"ch{i}":
                raise ValueError(f"channel name {name!r} would clash with an unnamed channel")
        self.channels = names
        self.counters = counters if counters is not None else LinkCounters()
        self.logs: deque[str] = deque(maxlen=max_logs)
        self.time_gaps = 0  # time gaps the timebase saw (not added to counters.gaps)
        self._tb_counters = LinkCounters()
        self.timebase = Timebase(clock, self._tb_counters)
        self._feedback = names.index("feedback")
        self._setpoint = names.index("setpoint") if "setpoint" in names else None
        self._tail = b""  # bytes after the last delimiter, at most MAX_ENCODED
        self._discarding = False  # dropping an oversized frame until its delimiter
        self._synced = False  # a delimiter has been seen
        self._last_seq: int | None = None
        self._pending_gaps = 0  # discontinuities after the last sample frame, unsettled
        self._pending_lost = 0
        self._raw_samples = 0  # sample frames passed to the timebase so far
        self._live = False  # joined mid-stream (rejoin): the last frame may be unfinished

    # -- public ------------------------------------------------------------------------
    def feed(self, data: bytes) -> list[SampleChunk]:
        """Decode the next bytes of the stream (any split); returns the chunks completed."""
        data = bytes(data)
        self.counters.bytes += len(data)
        if self._discarding:
            z = data.find(0)
            if z < 0:
                return []
            data = data[z + 1 :]
            self._discarding = False
            self._synced = True
        buf = self._tail + data if self._tail else data
        last = buf.rfind(0)
        if last < 0:
            self._keep_tail(buf)
            return []
        self._keep_tail(buf[last + 1 :])
        return self._decode(buf[: last + 1], final=False)

    def rejoin(self) -> None:
        """A live link was (re)opened: the stream is joined mid-frame. The unfinished frame
        held from before is dropped (``skipped``), the bytes before the next delimiter are
        treated as the end of a frame sent before (see ``resyncs``), and at :meth:`flush` the
        unfinished last frame is dropped (``skipped``, not ``truncated frame``)."""
        if self._tail:
            self.counters.skipped += 1
        self._tail, self._discarding, self._synced = b"", False, False
        self._live = True

    def flush(self) -> list[SampleChunk]:
        """End of stream: decode a last frame that lacks its delimiter (else count it as
        ``truncated frame``; a live link's unfinished frame is dropped, ``skipped``) and
        settle pending sequence gaps."""
        out: list[SampleChunk] = []
        if self._tail and self._live:
            self.counters.skipped += 1
            self._tail = b""
        if self._tail and not self._discarding:
            tail, self._tail = self._tail, b""
            out = self._decode(tail + b"\x00", final=True)
        self._tail = b""
        self._discarding = False
        self.counters.gaps += self._pending_gaps
        self.counters.lost += self._pending_lost
        self._pending_gaps = self._pending_lost = 0
        return out

    # -- stages ------------------------------------------------------------------------
    def _keep_tail(self, tail: bytes) -> None:
        if len(tail) > MAX_ENCODED:
            self.counters.bad["oversized frame"] += 1
            self.counters.resyncs += 1
            self._discarding = True
            tail = b""
        self._tail = tail

    def _decode(self, body: bytes, *, final: bool) -> list[SampleChunk]:
        """Decode ``body``, whole frames each ending in a delimiter."""
        arr = np.frombuffer(body, dtype=np.uint8)
        ends = np.flatnonzero(arr == 0)
        starts = np.empty_like(ends)
        starts[0] = 0
        starts[1:] = ends[:-1] + 1
        lead = not self._synced and ends[0] > 0
        self._synced = True
        if not (ends > starts).all():  # empty frames (repeated delimiters) are fine
            keep = ends > starts
            starts, ends = starts[keep], ends[keep]
            if starts.size == 0:
                return []
        read = self._frames(arr, starts, ends)
        status = read.status
        if (lead and not final and status[0] >= _FIRST_BAD and read.seq[0] < 0
                and status[0] != _CODE["oversized frame"]):
            status[0] = _LEAD_DROPPED  # the tail of a frame sent before we joined
            self.counters.resyncs += 1
        if final and status[-1] >= _FIRST_BAD and read.seq[-1] < 0:
            status[-1] = _CODE["truncated frame"]  # failed COBS, length or CRC
        counts = np.bincount(status, minlength=_N_CODES)
        for i, reason in enumerate(_REASONS):
            c = int(counts[_FIRST_BAD + i])
            if c:
                self.counters.bad[reason] += c
                if reason != "truncated frame":
                    self.counters.resyncs += c
        for _, text in sorted(read.logs):
            self.logs.append(text)
        self.counters.log_lines += len(read.logs)
        return self._emit(read)

    def _frames(self, arr: NDArray[np.uint8], starts: NDArray[np.intp],
                ends: NDArray[np.intp]) -> _Read:
        """COBS-decode and classify every frame ``arr[starts[i]:ends[i]]``."""
        f = starts.size
        read = _Read(status=np.zeros(f, dtype=np.int8), seq=np.full(f, -1, dtype=np.int32),
                     ts=np.zeros(f, dtype=np.uint32), samples=[], logs=[])
        status = read.status
        lengths = ends - starts
        oversized = lengths > MAX_ENCODED
        if oversized.any():
            status[oversized] = _CODE["oversized frame"]
            todo = np.flatnonzero(~oversized)
        else:
            todo = np.arange(f)
        # follow all COBS code chains at once; finished chains sit on their delimiter,
        # whose code 0 keeps them there
        dec = arr.copy()
        p, e = starts[todo], ends[todo]
        slow: list[int] = []
        while True:
            code = arr[p]
            nxt = p + code
            if not (nxt != p).any():
                break
            over = nxt > e
            if over.any():
                status[todo[over]] = _CODE["bad cobs"]
                nxt[over] = e[over]
            ff = (code == 0xFF) & (nxt < e)
            if ff.any():  # a full block mid-frame: no implied zero; exact path
                slow.extend(todo[ff].tolist())
                nxt[ff] = e[ff]
            dec[nxt] = 0  # code bytes inside a frame stand for zeros
            p = nxt
        if slow:
            status[slow] = -1
        good = todo[status[todo] == _UNSEEN]
        if good.size:
            plen = lengths[good] - 1
            lo, hi = int(plen.min()), int(plen.max())
            if lo == hi:
                groups = [(lo, good)]
            else:
                groups = [(int(v), good[plen == v]) for v in np.unique(plen)]
            for size, rows in groups:
                s0 = starts[rows]
                span = size + 2  # code byte, payload, delimiter
                if rows.size > 1 and s0[-1] - s0[0] == (rows.size - 1) * span:
                    m = dec[s0[0] : s0[0] + rows.size * span].reshape(rows.size, span)
                    m = m[:, 1 : size + 1]
                else:
                    m = dec[(s0 + 1)[:, None] + np.arange(size)]
                self._classify(read, rows, m)
        for i in slow:
            payload = cobs_decode(arr[starts[i] : ends[i]].tobytes())
            if payload is None:
                status[i] = _CODE["bad cobs"]
            else:
                status[i] = _UNSEEN
                m = np.frombuffer(payload, dtype=np.uint8)[None, :]
                self._classify(read, np.array([i]), m)
        return read

    def _classify(self, read: _Read, rows: NDArray[np.intp], m: NDArray[np.uint8]) -> None:
        """Check and parse payloads ``m`` (rows, P) of frames ``rows``."""
        status = read.status
        size = m.shape[1]
        if size < _HEADER + 2:
            status[rows] = _CODE["bad length"]
            return
        k = size - 2
        crc = _crc_rows(m[:, :k])
        stored = m[:, k].astype(np.uint16) | (m[:, k + 1].astype(np.uint16) << 8)
        ok = crc == stored
        if not ok.all():
            status[rows[~ok]] = _CODE["bad crc"]
            rows, m = rows[ok], m[ok]
            if rows.size == 0:
                return
        kind, b1 = m[:, 0], m[:, 1]
        read.seq[rows] = m[:, 2].astype(np.int32) | (m[:, 3].astype(np.int32) << 8)
        n = (size - 10) // 4
        if (size - 10) % 4 == 0 and 1 <= n <= MAX_CHANNELS and n >= len(self.channels):
            is_sample = (kind == FRAME_SAMPLES) & (b1 == n)
        else:
            is_sample = np.zeros(rows.size, dtype=bool)
        if is_sample.all():
            sel_rows, sel_m = rows, m
        else:
            bad_sample = (kind == FRAME_SAMPLES) & ~is_sample
            if bad_sample.any():
                b = b1[bad_sample].astype(np.int64)
                fits = (size - 10 == 4 * b) & (b < len(self.channels))
                code = np.where(fits, _CODE["too few channels"], _CODE["bad length"])
                code[(b < 1) | (b > MAX_CHANNELS)] = _CODE["bad channel count"]
                status[rows[bad_sample]] = code
            is_log = kind == FRAME_LOG
            if is_log.any():
                self._logs(read, rows[is_log], m[is_log])
            other = (kind != FRAME_SAMPLES) & ~is_log
            status[rows[other]] = _CODE["unknown type"]
            sel_rows, sel_m = rows[is_sample], m[is_sample]
        if sel_rows.size == 0:
            return
        rec = np.ascontiguousarray(sel_m).view(_sample_dtype(n))[:, 0]
        status[sel_rows] = _SAMPLE
        read.ts[sel_rows] = rec["ts"]
        read.samples.append((sel_rows, rec["values"]))

    def _logs(self, read: _Read, rows: NDArray[np.intp], m: NDArray[np.uint8]) -> None:
        size = m.shape[1]
        for i, payload in zip(rows.tolist(), m, strict=True):
            if payload[1] != 0:
                read.status[i] = _CODE["bad header"]
            elif size - _HEADER - 2 > MAX_LOG_TEXT:
                read.status[i] = _CODE["bad length"]
            else:
                read.status[i] = _LOG
                text = payload[_HEADER : size - 2].tobytes().decode("utf-8", errors="replace")
                read.logs.append((i, clean_text(text)))

    def _emit(self, read: _Read) -> list[SampleChunk]:
        """Sequence check, timebase and chunking of one batch's frames."""
        status = read.status
        # sequence discontinuities, placed by the number of sample frames before them
        tracked = np.flatnonzero(read.seq >= 0)
        disc_at = np.zeros(0, dtype=np.int64)
        disc_lost = np.zeros(0, dtype=np.int64)
        if tracked.size:
            sq = read.seq[tracked].astype(np.int64)
            prev = np.empty_like(sq)
            prev[0] = sq[0] - 1 if self._last_seq is None else self._last_seq
            prev[1:] = sq[:-1]
            missing = (sq - prev - 1) & 0xFFFF
            self._last_seq = int(sq[-1])
            d = np.flatnonzero(missing)
            if d.size:
                is_sample = status == _SAMPLE
                before = np.cumsum(is_sample) - is_sample
                disc_at = before[tracked[d]] + self._raw_samples
                disc_lost = missing[d]
        # samples in stream order
        rows, values, runs = self._gather(read)
        n_raw = rows.size
        chunks: list[SampleChunk] = []
        restart_raw = np.zeros(0, dtype=np.int64)
        if n_raw:
            stamped = self.timebase.stamp(read.ts[rows].astype(np.float64), n_raw)
            tbc = self._tb_counters
            self.counters.restarts += tbc.restarts
            self.counters.bad.update(tbc.bad)
            self.time_gaps += tbc.gaps
            tbc.restarts = tbc.gaps = 0
            tbc.bad = Counter()
            keep = stamped.keep
            starts = stamped.segment_starts
            kept_at = np.flatnonzero(keep)
            restart_raw = kept_at[starts] + self._raw_samples if starts else restart_raw
            chunks = self._chunks(stamped.t, values, keep, starts, runs)
        # settle: pending discontinuities sit at the first sample of this batch
        total = self._raw_samples + n_raw
        if n_raw and self._pending_gaps:
            if not (restart_raw.size and restart_raw[0] == self._raw_samples):
                self.counters.gaps += self._pending_gaps
                self.counters.lost += self._pending_lost
            self._pending_gaps = self._pending_lost = 0
        if disc_at.size:
            excused = np.isin(disc_at, restart_raw)
            settled = (disc_at < total) & ~excused
            self.counters.gaps += int(settled.sum())
            self.counters.lost += int(disc_lost[settled].sum())
            pending = disc_at >= total
            self._pending_gaps += int(pending.sum())
            self._pending_lost += int(disc_lost[pending].sum())
        self._raw_samples = total
        return chunks

    def _gather(self, read: _Read) -> tuple[NDArray[np.intp], NDArray[np.float32],
                                            list[tuple[int, int]]]:
        """Sample frames in stream order: frame indices, values (rows, width) and runs
        ``(start, n_channels)`` of equal channel count."""
        if not read.samples:
            return np.zeros(0, dtype=np.intp), np.zeros((0, 1), np.float32), []
        if len(read.samples) == 1:
            rows, values = read.samples[0]
            return rows, values, [(0, values.shape[1])]
        rows = np.concatenate([r for r, _ in read.samples])
        widths = np.concatenate([np.full(r.size, v.shape[1]) for r, v in read.samples])
        order = np.argsort(rows, kind="stable")
        width = int(widths.max())
        values = np.full((rows.size, width), np.nan, dtype=np.float32)
        at = 0
        for r, v in read.samples:
            values[at : at + r.size, : v.shape[1]] = v
            at += r.size
        rows, values, widths = rows[order], values[order], widths[order]
        change = np.flatnonzero(np.diff(widths)) + 1
        runs = [(int(s), int(widths[s])) for s in (0, *change.tolist())]
        return rows, values, runs

    def _chunks(self, t: NDArray[np.float64], values: NDArray[np.float32],
                keep: NDArray[np.bool_], starts: list[int],
                runs: list[tuple[int, int]]) -> list[SampleChunk]:
        """Cut the kept samples at segment starts and channel-count changes."""
        if not keep.all():
            values = values[keep]
            kept_before = np.cumsum(keep) - keep
            runs = [(int(kept_before[s]), w) for s, w in runs]
        first_segment = self.timebase.segment - len(starts)
        cuts = sorted({0, *starts, *(s for s, _ in runs), t.size})
        out: list[SampleChunk] = []
        for a, b in zip(cuts[:-1], cuts[1:], strict=True):
            if b <= a:
                continue
            width = next(w for s, w in reversed(runs) if s <= a)
            segment = first_segment + sum(1 for s in starts if s <= a)
            v = values[a:b]
            extras = {}
            for i in range(width):
                if i not in (self._feedback, self._setpoint):
                    name = self.channels[i] if i < len(self.channels) else f"ch{i}"
                    extras[name] = v[:, i].astype(np.float64)
            setpoint = None if self._setpoint is None else v[:, self._setpoint].astype(
                np.float64)
            feedback = v[:, self._feedback].astype(np.float64)
            tt = t[a:b]
            finite = np.isfinite(feedback) & (True if setpoint is None else np.isfinite(setpoint))
            if not np.all(finite):  # nan or inf in a role channel: the sample is skipped
                self.counters.bad["nan"] += int(np.count_nonzero(~finite))
                tt, feedback = tt[finite], feedback[finite]
                setpoint = None if setpoint is None else setpoint[finite]
                extras = {k: x[finite] for k, x in extras.items()}
                if tt.size == 0:
                    continue
            out.append(SampleChunk(t=tt, feedback=feedback, setpoint=setpoint, extras=extras,
                                   segment=segment))
            self.counters.samples += tt.size
        return out
