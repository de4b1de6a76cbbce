"""End-to-end link benchmark through a real pseudo-terminal.

A writer process pushes text lines (``t_us,setpoint,feedback``, an invented
belt-axis session stepped once a second) into a pty at a fixed byte rate; this
process runs livestep's live path on the other end (reader thread, text
decoder, recorder, step analysis) and reports lost lines and CPU use. The
baseline, run in the same invocation on a fresh pty, is the straightforward
reader: pyserial ``readline()`` in a loop with a ``split`` + ``float`` per line.

Usage: python tools/bench_live.py [--rate BYTES_PER_S] [--seconds S] [--baseline-seconds S]
Targets: zero lost lines at 1 MB/s for 60 s, the reader under half a core. The writer
never holds more than 1/20 s of bytes: a reader that falls behind (the readline baseline)
is offered fewer lines rather than a backlog, so the run ends on time (about 90 s in all
on the defaults).
"""

from __future__ import annotations

import argparse
import os
import resource
import subprocess
import sys
import tempfile
import time
import tty
from pathlib import Path

sys.path.insert(0, str(Path(__file__).resolve().parent.parent))

import serial  # noqa: E402
from rich.console import Console  # noqa: E402
from rich.table import Table  # noqa: E402

from livestep.decode.text import TextDecoder  # noqa: E402
from livestep.decode.timebase import ClockSettings  # noqa: E402
from livestep.live.session import Session  # noqa: E402
from livestep.sinks.recorder import Recorder  # noqa: E402
from livestep.sources.serial_port import PortSettings, SerialReader  # noqa: E402

WRITER = r"""
import math, os, sys, time
fd, rate, seconds = int(sys.argv[1]), float(sys.argv[2]), float(sys.argv[3])
os.write(fd, b"t,setpoint,feedback\n")
k, sent, start = 0, 0, time.monotonic()
period_us = 40  # 25 kHz sample clock, so the byte rate rather than the clock sets the pace
cap = max(65536, rate / 20)  # bytes per write: a reader that falls behind gets fewer lines
while time.monotonic() - start < seconds:  # written, never a backlog that outlasts the run
    due = min((time.monotonic() - start) * rate, sent + cap)
    lines, size = [], sent
    while size < due:
        t = k * period_us
        sp = 10.0 * ((t // 1_000_000) % 2)
        line = b"%d,%.3f,%.4f\n" % (t, sp, sp * (1 - math.exp(-(t % 1_000_000) / 2e4)))
        lines.append(line)
        size += len(line)
        k += 1
    block = b"".join(lines)
    view = memoryview(block)
    while view:
        view = view[os.write(fd, view):]
    sent += len(block)
    time.sleep(0.005)
print(k, flush=True)
time.sleep(1.5)  # keep the pty open while the reader drains it
"""


def start_writer(rate: float, seconds: float) -> tuple[subprocess.Popen, str, int]:
    master, slave = os.openpty()
    tty.setraw(slave)
    path = os.ttyname(slave)
    proc = subprocess.Popen([sys.executable, "-c", WRITER, str(master), str(rate), str(seconds)],
                            pass_fds=(master,), stdout=subprocess.PIPE, text=True)
    os.close(master)
    return proc, path, slave


def cpu() -> float:
    r = resource.getrusage(resource.RUSAGE_SELF)
    return r.ru_utime + r.ru_stime


def run_livestep(rate: float, seconds: float, out: Path) -> dict[str, float]:
    proc, path, slave = start_writer(rate, seconds)
    reader = SerialReader(PortSettings(url=path))
    reader.start()
    recorder = Recorder(out, metadata={"source": "bench"})
    session = Session(TextDecoder(clock=ClockSettings(unit="us")), sinks=[recorder])
    c0, w0 = cpu(), time.monotonic()
    w1, c1 = w0, c0
    while True:
        try:
            kind, payload = reader.events.get(timeout=0.5)
        except Exception:
            session.tick()
            if proc.poll() is not None and reader.events.empty():
                break
            continue
        if kind == "data":
            session.feed(payload)
            w1, c1 = time.monotonic(), cpu()
    wall, used = w1 - w0, c1 - c0
    reader.stop()
    session.close()
    written = int(proc.stdout.read())
    os.close(slave)
    return {"written": written, "got": session.counters.samples, "wall": wall,
            "reader_cpu": reader.cpu_time, "cpu": used,
            "bad": sum(session.counters.bad.values()), "dropped": reader.dropped_bytes}


def run_baseline(rate: float, seconds: float) -> dict[str, float]:
    proc, path, slave = start_writer(rate, seconds)
    port = serial.Serial(path, timeout=0.5)
    got = 0
    c0, w0 = cpu(), time.monotonic()
    w1, c1 = w0, c0
    while True:
        try:
            line = port.readline()
        except serial.SerialException:
            break
        if not line:
            if proc.poll() is not None:
                break
            continue
        try:
            [float(x) for x in line.split(b",")]
            got += 1
        except ValueError:
            pass
        w1, c1 = time.monotonic(), cpu()
    wall, used = w1 - w0, c1 - c0
    port.close()
    written = int(proc.stdout.read())
    os.close(slave)
    return {"written": written, "got": got, "wall": wall, "reader_cpu": used, "cpu": used,
            "bad": 0, "dropped": 0}


def per_cpu(r: dict[str, float]) -> float:
    """Lines decoded per CPU second of the reading process."""
    return r["got"] / max(r["cpu"], 1e-9)


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--rate", type=float, default=1_000_000.0, help="bytes per second")
    ap.add_argument("--seconds", type=float, default=60.0, help="livestep's run (default 60)")
    ap.add_argument("--baseline-seconds", type=float, default=20.0,
                    help="the readline baseline's run (default 20)")
    args = ap.parse_args()
    console = Console()
    with tempfile.TemporaryDirectory() as tmp:
        console.print(f"livestep: {args.rate / 1e6:g} MB/s for {args.seconds:g} s ...")
        ours = run_livestep(args.rate, args.seconds, Path(tmp) / "bench.csv")
    console.print(f"baseline (readline loop) for {args.baseline_seconds:g} s ...")
    base = run_baseline(args.rate, args.baseline_seconds)
    table = Table(title=f"pty link at {args.rate / 1e6:g} MB/s for {args.seconds:g} s")
    for col in ("side", "lines written", "lines decoded", "lost", "lines/s", "reader CPU",
                "process CPU"):
        table.add_column(col, justify="right")
    for name, r in (("livestep (read+decode+record+analyse)", ours), ("baseline", base)):
        table.add_row(name, str(r["written"]), str(r["got"]), str(r["written"] - r["got"]),
                      f"{r['got'] / r['wall']:,.0f}",
                      f"{100 * r['reader_cpu'] / r['wall']:.1f} %",
                      f"{100 * r['cpu'] / r['wall']:.1f} %")
    console.print(table)
    lost = ours["written"] - ours["got"]
    reader_share = ours["reader_cpu"] / ours["wall"]
    console.print(f"zero lost lines: {'yes' if lost == 0 else f'no ({lost} lost)'}; reader "
                  f"thread {100 * reader_share:.1f} % of a core (target < 50 %): "
                  f"{'met' if reader_share < 0.5 else 'NOT met'}; lines per CPU second "
                  f"livestep/baseline {per_cpu(ours) / max(per_cpu(base), 1e-9):.1f}x"
                  " (the pty blocks a writer whose reader falls behind, so a slow reader"
                  " shows as fewer lines written, not as lost ones)")


if __name__ == "__main__":
    main()
