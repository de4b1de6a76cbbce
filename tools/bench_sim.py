"""The virtual bench at high sample rates through a real pty: does it keep up, at what CPU cost?

For each plant and format, runs a VirtualBench at RATE for SECONDS with pyserial's reader
draining the other end, and prints the samples received against the samples due (1.00 =
kept up with the wall clock) and the device thread's CPU seconds per simulated second (the
reader and decoder are not counted). The baseline,
measured in the same run, is a naive device loop: the same exact second-order samples,
formatted and written one line per write.

Usage: python tools/bench_sim.py [--rate HZ] [--seconds S]
"""

from __future__ import annotations

import argparse
import os
import queue
import sys
import threading
import time
import tty
from pathlib import Path

sys.path.insert(0, str(Path(__file__).resolve().parent.parent))
from livestep.bench.device import BenchSettings, VirtualBench  # noqa: E402
from livestep.bench.plants import AxisPlant, SecondOrderPlant  # noqa: E402
from livestep.decode.timebase import ClockSettings  # noqa: E402
from livestep.live.session import make_decoder  # noqa: E402
from livestep.sources.serial_port import PortSettings, SerialReader  # noqa: E402


def drain(path: str, seconds: float, fmt: str) -> int:
    """Read ``path`` for ``seconds`` and decode it; returns the samples decoded."""
    clock = ClockSettings(unit="us", wrap_bits=32)
    decoder = make_decoder(fmt, clock=clock, binary_clock=clock)
    reader = SerialReader(PortSettings(url=path))
    reader.start()
    end = time.monotonic() + seconds
    try:
        while time.monotonic() < end:
            try:
                kind, payload = reader.events.get(timeout=0.05)
            except queue.Empty:
                continue
            if kind == "data":
                decoder.feed(payload)
    finally:
        reader.stop()
    return decoder.counters.samples


def run_bench(plant, fmt: str, rate: float, seconds: float) -> tuple[float, float]:
    bench = VirtualBench(plant, BenchSettings(rate=rate, fmt=fmt))
    with bench:
        got = drain(bench.path, seconds, fmt)
    return got / (rate * seconds), bench.cpu_time / seconds


def run_naive(rate: float, seconds: float) -> tuple[float, float]:
    """One formatted line per write, paced per sample: how a simple device loop looks."""
    master, slave = os.openpty()
    tty.setraw(slave)
    plant = SecondOrderPlant(0.5, 60.0, period=1 / rate)
    stop = threading.Event()
    cpu = [0.0]

    def device() -> None:
        start, k = time.monotonic(), 0
        os.write(master, b"t,setpoint,feedback\n")
        while not stop.is_set():
            due = int((time.monotonic() - start) * rate)
            while k < due and not stop.is_set():
                y = float(plant.advance(1, 1.0)[0])
                os.write(master, b"%d,1,%.8g\n" % (round(k * 1e6 / rate), y))
                k += 1
            cpu[0] = time.thread_time()
            time.sleep(0.0005)

    thread = threading.Thread(target=device, daemon=True)
    thread.start()
    got = drain(os.ttyname(slave), seconds, "text")
    stop.set()
    thread.join(2)
    os.close(master)
    os.close(slave)
    return got / (rate * seconds), cpu[0] / seconds


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--rate", type=float, default=20000.0)
    ap.add_argument("--seconds", type=float, default=5.0)
    a = ap.parse_args()
    base_kept, base_cpu = run_naive(a.rate, a.seconds)
    print(f"{a.rate:g} Hz for {a.seconds:g} s; baseline (one write per sample): kept up"
          f" {base_kept:.2f}, CPU {base_cpu:.2f} s/s")
    for name, make in (("second-order", lambda: SecondOrderPlant(0.5, 60.0)),
                       ("axis", lambda: AxisPlant(seed=1))):
        for fmt in ("text", "binary"):
            kept, cpu = run_bench(make(), fmt, a.rate, a.seconds)
            print(f"  {name:12s} {fmt:6s}: kept up {kept:.2f}, CPU {cpu:.2f} s/s"
                  f" ({base_cpu / cpu:.1f}x less than the baseline)")


if __name__ == "__main__":
    main()
