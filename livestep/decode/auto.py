"""Telling binary frames from text lines by evidence, whatever the read sizes.

:class:`AutoDecoder` holds the first bytes and counts, in stream order, the *valid* items
of each kind: binary frames whose COBS decoding, length, type and CRC-16 check out, and
text lines that are data (numbers, or two numeric ``name=value`` pairs). Whichever kind
reaches :data:`EVIDENCE` items first, by the byte offset where its last item ends, wins;
a boot banner, a half frame or a text-looking first value only delays the decision. A
banner that runs into the first frame (no delimiter between them) is cut off there and
kept as log lines, so the first frame is decoded too.
When neither kind has enough within the first :data:`PROBE_LIMIT` bytes (or at the end
of the stream), the kind with more valid items wins (text on a tie). The decision is a
function of the bytes alone, never of how they were split into reads, and
:attr:`AutoDecoder.decision` says what it was and why.
"""

from __future__ import annotations

from collections.abc import Callable
from typing import Protocol

from livestep.decode.counters import LinkCounters
from livestep.decode.frames import (
    FRAME_LOG,
    FRAME_SAMPLES,
    MAX_CHANNELS,
    MAX_ENCODED,
    cobs_decode,
    crc16,
)
from livestep.decode.lines import looks_like_data
from livestep.steps.samples import SampleChunk
from livestep.steps.tags import Note, clean_text

__all__ = ["EVIDENCE", "PROBE_LIMIT", "AutoDecoder", "Decoder", "is_valid_frame"]

EVIDENCE = 8  # valid items of one kind that settle the question
PROBE_LIMIT = 1 << 16  # bytes held at most before deciding on what they hold


class Decoder(Protocol):
    """Bytes in, sample chunks out (see :mod:`livestep.decode`)."""

    counters: LinkCounters

    def feed(self, data: bytes) -> list[SampleChunk]: ...

    def flush(self) -> list[SampleChunk]: ...


def is_valid_frame(enc: bytes) -> bool:
    """Whether ``enc`` (the bytes between two delimiters) is a whole sample or log frame
    with a good CRC (see :mod:`livestep.decode.frames`)."""
    if not 7 <= len(enc) <= MAX_ENCODED:
        return False
    p = cobs_decode(enc)
    if p is None or len(p) < 6 or crc16(p[:-2]) != p[-2] | (p[-1] << 8):
        return False
    if p[0] == FRAME_SAMPLES:
        return 1 <= p[1] <= MAX_CHANNELS and len(p) == 10 + 4 * p[1]
    return p[0] == FRAME_LOG and p[1] == 0


class _Evidence:
    """Counts the valid items of one kind as delimiters arrive."""

    def __init__(self, delimiter: int, valid: Callable[[bytes], bool]) -> None:
        self.delimiter, self.valid = delimiter, valid
        self.count = 0
        self.done_at: int | None = None  # offset after the EVIDENCE-th valid item
        self._start = 0  # where the next item starts
        self._pos = 0  # scanned up to here

    def scan(self, buf: bytes | bytearray, end: int) -> None:
        """Look at the items that end before offset ``end``."""
        while self.done_at is None:
            z = buf.find(self.delimiter, self._pos, end)
            if z < 0:
                self._pos = max(self._pos, end)
                return
            if self.valid(bytes(buf[self._start:z])):
                self.count += 1
                if self.count == EVIDENCE:
                    self.done_at = z + 1
            self._start = self._pos = z + 1


def _text_line(line: bytes) -> bool:
    return len(line) <= 4096 and looks_like_data(line.replace(b"\r", b"").strip())


class AutoDecoder:
    """Decodes with the binary frame decoder or the text decoder, chosen by evidence (see
    the module docstring); until then it holds the bytes."""

    def __init__(self, make_text: Callable[[LinkCounters], Decoder],
                 make_binary: Callable[[LinkCounters], Decoder]) -> None:
        self.counters = LinkCounters()
        self.logs = None
        self.decision: str | None = None
        self._make = (make_text, make_binary)
        self._buf = bytearray()
        self._frames = _Evidence(0, is_valid_frame)
        self._lines = _Evidence(10, _text_line)
        self._inner: Decoder | None = None
        self._why = ""
        self._rejoined = False

    @property
    def inner(self) -> Decoder | None:
        return self._inner

    def feed(self, data: bytes) -> list[SampleChunk]:
        if self._inner is not None:
            out = self._inner.feed(data)
            self._say()
            return out
        self._buf += data
        end = min(len(self._buf), PROBE_LIMIT)
        self._frames.scan(self._buf, end)
        self._lines.scan(self._buf, end)
        f, t = self._frames.done_at, self._lines.done_at
        if f is not None and (t is None or f < t) and self._lines._pos >= f:
            return self._choose(True, f"{EVIDENCE} valid frames in the first {f} bytes")
        if t is not None and (f is None or t < f) and self._frames._pos >= t:
            return self._choose(False, f"{EVIDENCE} data lines in the first {t} bytes")
        if len(self._buf) >= PROBE_LIMIT:
            return self._by_count(PROBE_LIMIT)
        return []

    def flush(self) -> list[SampleChunk]:
        if self._inner is None:
            if not self._buf:
                return []
            out = self._by_count(len(self._buf))
            return out + self._inner.flush()  # type: ignore[union-attr]
        out = self._inner.flush()
        self._say()
        return out

    def rejoin(self) -> None:
        """A live link was (re)opened (see ``TextDecoder.rejoin``)."""
        if self._inner is not None:
            getattr(self._inner, "rejoin", lambda: None)()
        else:
            self._rejoined = True

    def take_notes(self) -> list[Note]:
        """The inner decoder's new notes (text streams only)."""
        take = getattr(self._inner, "take_notes", None)
        return take() if take is not None else []

    def _by_count(self, end: int) -> list[SampleChunk]:
        nf, nt = self._frames.count, self._lines.count
        binary = nf > nt
        why = (f"{nf} valid frames and {nt} data lines in the first {end} bytes"
               if nf or nt else f"no valid frame or data line in the first {end} bytes")
        return self._choose(binary, why)

    def _choose(self, binary: bool, why: str) -> list[SampleChunk]:
        self._inner = self._make[1 if binary else 0](self.counters)
        self.logs = getattr(self._inner, "logs", None)
        if self._rejoined:
            getattr(self._inner, "rejoin", lambda: None)()
        self._why = why
        data, self._buf = bytes(self._buf), bytearray()
        if binary:
            data = self._past_banner(data)
        out = self._inner.feed(data)
        self._say()
        return out

    def _past_banner(self, data: bytes) -> bytes:
        """The bytes from the first frame on when text (a boot banner) runs into it: the
        first frame is then the end of the first delimited piece, after its last newline.
        The banner's lines become log lines."""
        z = data.find(0)
        nl = data.rfind(b"\n", 0, z)
        if z < 0 or nl < 0 or not is_valid_frame(data[nl + 1:z]):
            return data
        banner = data[:nl + 1].decode("utf-8", "replace").replace("\r", "").splitlines()
        lines = [clean_text(line) for line in banner if line.strip()]
        logs = getattr(self._inner, "logs", None)
        if logs is not None:
            logs.extend(lines)
        self.counters.log_lines += len(lines)
        return data[nl + 1:]

    def _say(self) -> None:
        """The decision, once the inner decoder knows its own layout (a text decoder) or at
        once (binary frames)."""
        if self.decision is not None or self._inner is None:
            return
        inner = getattr(self._inner, "decision", None)
        if inner is None and hasattr(self._inner, "columns"):
            return  # a text decoder still detecting its layout
        what = inner or "binary frames (COBS, CRC-16/CCITT-FALSE)"
        self.decision = f"{what}; detected: {self._why}"
