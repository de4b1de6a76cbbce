"""Benchmark the livestep stream decoders against naive per-frame baselines.

Usage: python tools/bench_decode.py [--frames N] [--baseline-frames M] [--read KIB]
                                    [--repeat R] [--section NAME ...]

Each section builds an invented bench stream in memory (a belt-driven positioning axis
under a position loop, stepped between 0 and 50 mm every 2 s at 1 kHz, with sensor
noise and a 32-bit microsecond counter that wraps), feeds it to a livestep decoder in
fixed-size reads as from a serial port, and runs a naive baseline on the same bytes in
the same process. Rates are frames (samples) per second and MB/s of wire bytes, best of
``--repeat`` runs; the baseline runs on the first ``--baseline-frames`` frames and its
rate is scaled from there. It is a report: nothing about timing is asserted.

Sections (add one: write a function returning ``Row``s, add it to ``SECTIONS``):

- ``binary``: :class:`livestep.decode.frames.FrameDecoder` on 2-channel sample frames
  (20 bytes each) vs a pure-Python loop (split at 0x00, COBS decode byte chain by byte
  chain, ``binascii.crc_hqx``, ``struct.unpack``). Target: at least 1 M frames/s.
- ``text``: :class:`livestep.decode.text.TextDecoder` on ``t_us,setpoint,feedback`` lines
  vs a per-line ``split`` + ``float`` loop. Target: at least 2 M lines/s.
- ``small``: the same decoder fed 256-byte reads, where its fixed cost per read counts.
  Target: at least 310 k lines/s, 10 times a USB full-speed link (~31 k lines/s).
"""

from __future__ import annotations

import argparse
import binascii
import os
import platform
import struct
import sys
import time
from collections.abc import Callable, Iterable
from dataclasses import dataclass
from pathlib import Path

import numpy as np
from rich.console import Console
from rich.table import Table

ROOT = Path(__file__).resolve().parent.parent
sys.path.insert(0, str(ROOT))
from livestep.decode.frames import FrameDecoder, encode_sample_frames  # noqa: E402

RATE_HZ = 1000.0
HOLD_S = 2.0  # s between setpoint steps
STEP_MM = 50.0
WN, ZETA = 40.0, 0.5  # rad/s, damping ratio of the invented axis


@dataclass(frozen=True)
class Row:
    """One decoder's result in a section: ``frames`` decoded in ``seconds`` from
    ``wire_bytes`` bytes (the baseline's measured on a subset)."""

    section: str
    decoder: str
    frames: int
    wire_bytes: int
    seconds: float
    baseline: bool = False
    note: str = ""

    @property
    def frames_per_s(self) -> float:
        return self.frames / self.seconds

    @property
    def mb_per_s(self) -> float:
        return self.wire_bytes / self.seconds / 1e6


# -- the invented signal -----------------------------------------------------------------
def axis_signal(n: int, seed: int = 1) -> tuple[np.ndarray, np.ndarray]:
    """Device timestamps (us, 32-bit, wrapping after 20 s) and (n, 2) setpoint, feedback
    in mm: closed-form underdamped second-order step responses plus 5 um noise."""
    k = np.arange(n)
    t = k / RATE_HZ
    hold = int(HOLD_S * RATE_HZ)
    level = STEP_MM * ((k // hold) % 2)
    since = (k % hold) / RATE_HZ
    wd = WN * np.sqrt(1 - ZETA**2)
    env = np.exp(-ZETA * WN * since)
    resp = 1 - env * (np.cos(wd * since) + ZETA / np.sqrt(1 - ZETA**2) * np.sin(wd * since))
    prev = STEP_MM - level
    feedback = prev + (level - prev) * resp
    feedback[: hold] = level[: hold] * resp[: hold]  # the first hold starts from rest
    feedback += np.random.default_rng(seed).normal(0.0, 0.005, n)
    ts = (np.round(t * 1e6).astype(np.int64) + 2**32 - 20_000_000) % 2**32
    return ts, np.c_[level, feedback]


def reads(stream: bytes, size: int) -> Iterable[memoryview]:
    view = memoryview(stream)
    for i in range(0, len(stream), size):
        yield view[i : i + size]


def best_of(repeat: int, fn: Callable[[], int]) -> tuple[float, int]:
    """Fastest wall time of ``repeat`` calls of ``fn`` and its (last) result."""
    best, out = float("inf"), 0
    for _ in range(repeat):
        start = time.perf_counter()
        out = fn()
        best = min(best, time.perf_counter() - start)
    return best, out


# -- section: binary frames -----------------------------------------------------------------
def naive_binary(stream: Iterable[bytes]) -> int:
    """Per-frame pure Python: split at delimiters, COBS, CRC, unpack; returns samples."""
    tail = b""
    t: list[int] = []
    setpoint: list[float] = []
    feedback: list[float] = []
    for data in stream:
        parts = (tail + bytes(data)).split(b"\x00")
        tail = parts.pop()
        for enc in parts:
            out = bytearray()
            i, n = 0, len(enc)
            while i < n:
                code = enc[i]
                if code == 0 or i + code > n:
                    out = bytearray()
                    break
                out += enc[i + 1 : i + code]
                i += code
                if code != 0xFF and i < n:
                    out.append(0)
            if len(out) != 18 or binascii.crc_hqx(bytes(out[:16]), 0xFFFF) != (
                    out[16] | out[17] << 8):
                continue
            kind, n_ch, _seq, ts, sp, fb, _crc = struct.unpack("<BBHIffH", out)
            if kind == 1 and n_ch == 2:
                t.append(ts)
                setpoint.append(sp)
                feedback.append(fb)
    return len(t)


def bench_binary(args: argparse.Namespace) -> list[Row]:
    ts, values = axis_signal(args.frames)
    stream = encode_sample_frames(ts, values)
    frame_bytes = len(stream) // args.frames
    read = args.read * 1024

    def livestep() -> int:
        dec = FrameDecoder()
        n = sum(len(c) for data in reads(stream, read) for c in dec.feed(data))
        return n + sum(len(c) for c in dec.flush())

    seconds, decoded = best_of(args.repeat, livestep)
    sub = min(args.baseline_frames, args.frames)
    sub_stream = stream[: sub * frame_bytes]
    base_seconds, base_decoded = best_of(args.repeat, lambda: naive_binary(
        reads(sub_stream, read)))
    check = "" if (decoded, base_decoded) == (args.frames, sub) else " MISMATCH"
    return [
        Row("binary", "livestep FrameDecoder", decoded, len(stream), seconds,
            note=f"{frame_bytes} B/frame, {args.read} KiB reads{check}"),
        Row("binary", "naive per-frame Python", base_decoded, len(sub_stream), base_seconds,
            baseline=True, note=f"on {sub:,} frames{check}"),
    ]


# -- section: text lines -------------------------------------------------------------------
def text_stream(n: int) -> bytes:
    """A header and ``n`` lines ``t_us,setpoint,feedback`` (3 numeric fields, ~24 B)."""
    ts, values = axis_signal(n)
    us = np.arange(n, dtype=np.int64) * int(1e6 / RATE_HZ)
    body = "\n".join(f"{a},{b:.3f},{c:.4f}" for a, b, c in zip(
        us.tolist(), values[:, 0].tolist(), values[:, 1].tolist(), strict=True))
    del ts
    return ("t,setpoint,feedback\n" + body + "\n").encode()


def naive_text(stream: Iterable[bytes]) -> int:
    """Per line: split into lines, ``split(",")``, ``float`` each field; returns samples."""
    tail = b""
    rows: list[list[float]] = []
    for data in stream:
        lines = (tail + bytes(data)).split(b"\n")
        tail = lines.pop()
        for line in lines:
            try:
                rows.append([float(x) for x in line.split(b",")])
            except ValueError:
                continue
    return len(rows)


def bench_text(args: argparse.Namespace) -> list[Row]:
    from livestep.decode.text import TextDecoder
    from livestep.decode.timebase import ClockSettings

    stream = text_stream(args.frames)
    read = args.read * 1024

    def livestep() -> int:
        dec = TextDecoder(clock=ClockSettings(unit="us"))
        n = sum(len(c) for data in reads(stream, read) for c in dec.feed(bytes(data)))
        return n + sum(len(c) for c in dec.flush())

    seconds, decoded = best_of(args.repeat, livestep)
    sub = min(args.baseline_frames, args.frames)
    cut = stream.index(b"\n", int(len(stream) * sub / args.frames)) + 1
    base_seconds, base_decoded = best_of(args.repeat, lambda: naive_text(
        reads(stream[:cut], read)))
    per_line = len(stream) / args.frames
    check = "" if decoded == args.frames else " MISMATCH"
    return [
        Row("text", "livestep TextDecoder", decoded, len(stream), seconds,
            note=f"{per_line:.1f} B/line, 3 fields, {args.read} KiB reads{check}"),
        Row("text", "naive split + float loop", base_decoded, cut, base_seconds,
            baseline=True, note=f"on {base_decoded:,} lines"),
    ]


# -- section: small reads -------------------------------------------------------------------
USB_FULL_SPEED_LINES = 31_000  # ~33-byte lines/s a USB full-speed CDC link carries in practice


def bench_small(args: argparse.Namespace) -> list[Row]:
    """The text decoder fed 256-byte reads (a slow link, read as bytes arrive): its fixed
    cost per read dominates. Target: at least 10 times a USB full-speed link's lines/s."""
    from livestep.decode.text import TextDecoder
    from livestep.decode.timebase import ClockSettings

    n = min(args.frames, 200_000)
    stream = text_stream(n)

    def livestep() -> int:
        dec = TextDecoder(clock=ClockSettings(unit="us"))
        got = sum(len(c) for data in reads(stream, 256) for c in dec.feed(bytes(data)))
        return got + sum(len(c) for c in dec.flush())

    seconds, decoded = best_of(args.repeat, livestep)
    base_seconds, base_decoded = best_of(args.repeat, lambda: naive_text(reads(stream, 256)))
    rate = decoded / seconds
    target = 10 * USB_FULL_SPEED_LINES
    return [
        Row("small", "livestep TextDecoder", decoded, len(stream), seconds,
            note=f"256 B reads, {seconds / (len(stream) / 256) * 1e6:.1f} us a read;"
                 f" target >= {target:,} lines/s: {'met' if rate >= target else 'NOT met'}"),
        Row("small", "naive split + float loop", base_decoded, len(stream), base_seconds,
            baseline=True, note="256 B reads"),
    ]


# -- report ----------------------------------------------------------------------------------
SECTIONS: dict[str, Callable[[argparse.Namespace], list[Row]]] = {
    "binary": bench_binary,
    "text": bench_text,
    "small": bench_small,
}


def report(rows: list[Row], args: argparse.Namespace, console: Console) -> None:
    table = Table(title=f"stream decoding, best of {args.repeat}")
    for name, justify in [("section", "left"), ("decoder", "left"), ("frames", "right"),
                          ("MB", "right"), ("s", "right"), ("frames/s", "right"),
                          ("MB/s", "right"), ("× baseline", "right"), ("note", "left")]:
        table.add_column(name, justify=justify)  # type: ignore[arg-type]
    base = {r.section: r for r in rows if r.baseline}
    for r in rows:
        ref = base.get(r.section)
        ratio = "" if ref is None or r.baseline else f"{r.frames_per_s / ref.frames_per_s:.1f}"
        table.add_row(r.section, r.decoder, f"{r.frames:,}", f"{r.wire_bytes / 1e6:.1f}",
                      f"{r.seconds:.3f}", f"{r.frames_per_s / 1e6:.2f} M",
                      f"{r.mb_per_s:.1f}", ratio, r.note)
    console.print(table)


def main(argv: list[str] | None = None) -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--frames", type=int, default=2_000_000, help="frames per stream")
    parser.add_argument("--baseline-frames", type=int, default=200_000,
                        help="frames the baseline decodes (its rate is scaled)")
    parser.add_argument("--read", type=int, default=64, help="read size, KiB")
    parser.add_argument("--repeat", type=int, default=3, help="runs per decoder (best)")
    parser.add_argument("--section", action="append", choices=sorted(SECTIONS),
                        help="run only these sections (default: all)")
    args = parser.parse_args(argv)
    console = Console(width=max(Console().width, 150))
    console.print(f"python {platform.python_version()}, numpy {np.__version__}, "
                  f"{os.cpu_count()} CPUs, {platform.machine()}")
    rows: list[Row] = []
    for name in args.section or list(SECTIONS):
        rows += SECTIONS[name](args)
    report(rows, args, console)


if __name__ == "__main__":
    main()
