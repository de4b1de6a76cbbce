"""Benchmark of the watch UI at 20 kHz: frame rate, key response, verdict latency, CPU.

An invented 20 kHz recording (a belt axis stepped every second, its loop simulated
with scipy.signal.lsim, noise added) is played in real time through

1. the baseline: the same watch pipeline headless (reader thread, decoding, analysis,
   verdicts, no UI), and
2. the terminal UI (``LivestepApp`` under textual's headless ``run_test``, 120 x 36),
   with a key (``m``, the model overlay) pressed every 0.5 s,

from a replay at the forced rate, from a writer process pushing the same lines into a
pseudo-terminal in real time (``pty``), and from the virtual bench (``bench``: the demo's
transfer axis streaming at 20 kHz in this process, stepped by the demo's plan, about
15 s; its CPU counts on both sides). Reported: UI
frames per second against the 15 frames/s target, key response (press to the state
change, target < 100 ms), verdict latency (the instant the step's window ends in the
replay's schedule, to its verdict being in the history table, target < 100 ms; the
baseline's is to the step being published), and the CPU of the whole process, with
the UI's CPU as a ratio of the headless baseline's.

Usage: python tools/bench_tui.py [--seconds S] [--source replay|pty|bench|all] [--quick]
"""

from __future__ import annotations

import argparse
import asyncio
import bisect
import os
import resource
import subprocess
import sys
import tempfile
import time
import tty
from pathlib import Path

import numpy as np
from scipy import signal as sps

sys.path.insert(0, str(Path(__file__).resolve().parent.parent))

from rich.console import Console  # noqa: E402
from rich.table import Table  # noqa: E402

from livestep.judge.profile import parse_profile  # noqa: E402
from livestep.live.session import make_decoder  # noqa: E402
from livestep.live.watch import Watch  # noqa: E402
from livestep.sinks.base import Sink  # noqa: E402
from livestep.sources.replay import ReplaySource  # noqa: E402
from livestep.sources.serial_port import PortSettings, SerialReader  # noqa: E402
from livestep.steps.analysis import AnalysisSettings  # noqa: E402
from livestep.tui.app import LivestepApp  # noqa: E402

RATE = 20_000.0
PROFILE = parse_profile('name = "bench"\n[limits]\novershoot_pct = { max = 20 }\n'
                        'settling_time = { max = 0.3 }\n')

WRITER = r"""
import os, sys, time
fd, path, rate = int(sys.argv[1]), sys.argv[2], float(sys.argv[3])
lines = open(path, "rb").read().splitlines(keepends=True)
header = [l for l in lines if l.startswith(b"t,")]
data = lines[lines.index(header[0]) + 1:]
time.sleep(0.5)  # let the reader open the port
os.write(fd, header[0])
start, k = time.monotonic(), 0
while k < len(data):
    due = int((time.monotonic() - start) * rate) + 1
    block = b"".join(data[k:due])
    view = memoryview(block)
    while view:
        view = view[os.write(fd, view):]
    k = max(k, due)
    time.sleep(0.002)
time.sleep(1.0)
"""


def make_recording(path: Path, seconds: float) -> None:
    """Setpoint steps every second between invented levels; loop zeta 0.45, wn 90 rad/s;
    feedback noise 0.02 mm."""
    t = np.arange(int(seconds * RATE)) / RATE
    levels = np.array([0.0, 40.0, 10.0, 60.0, 20.0, 50.0])
    sp = levels[(t.astype(int)) % levels.size]
    plant = sps.TransferFunction([90.0**2], [1.0, 2 * 0.45 * 90.0, 90.0**2])
    _, y, _ = sps.lsim(plant, sp, t)
    y = y + np.random.default_rng(1).normal(0, 0.02, t.size)
    with open(path, "w") as fh:
        fh.write("# source: invented bench axis at 20 kHz\nt,setpoint,feedback\n")
        np.savetxt(fh, np.column_stack([t, sp, y]), fmt=["%.6f", "%.3f", "%.4f"],
                   delimiter=",")


def cpu() -> float:
    r = resource.getrusage(resource.RUSAGE_SELF)
    return r.ru_utime + r.ru_stime


class BenchRun:
    """The virtual bench (the demo's transfer axis) at 20 kHz with the demo's plan; it runs
    in this process, so its CPU is counted on both sides."""

    def __init__(self) -> None:
        from livestep.bench.demo import demo_bench

        self.bench = demo_bench(rate=RATE)
        self.path = self.bench.start()

    def poll(self) -> int | None:  # like Popen.poll: None while running
        return None

    def close(self) -> None:
        self.bench.stop()


def make_watch(kind: str, path: Path) -> tuple[Watch, object | None, int | None]:
    settings = AnalysisSettings()
    if kind == "bench":
        from livestep.bench.demo import demo_decoder, demo_plan
        from livestep.live.plan_run import PlanRunner

        run = BenchRun()
        watch = Watch(SerialReader(PortSettings(url=run.path)), demo_decoder(), settings,
                      source_name="virtual bench", profile=PROFILE,
                      driver=PlanRunner(demo_plan(), out=lambda line: None))
        return watch, run, None
    if kind == "replay":
        src = ReplaySource(path, speed=1.0)
        return Watch(src, make_decoder("text"), settings, source_name=str(path),
                     profile=PROFILE), None, None
    master, slave = os.openpty()
    tty.setraw(slave)
    dev = os.ttyname(slave)
    proc = subprocess.Popen([sys.executable, "-c", WRITER, str(master), str(path), str(RATE)],
                            pass_fds=(master,))
    os.close(master)
    watch = Watch(SerialReader(PortSettings(url=dev)), make_decoder("text"), settings,
                  source_name=dev, profile=PROFILE)
    return watch, proc, slave


class ChunkClock(Sink):
    """Notes when each decoded chunk reached the session (wall clock) and its last time."""

    def __init__(self) -> None:
        self.t_last: list[float] = []
        self.wall: list[float] = []

    def on_chunk(self, chunk) -> None:  # noqa: ANN001
        self.t_last.append(float(chunk.t[-1]))
        self.wall.append(time.monotonic())


def _chunk_clock(watch: Watch) -> ChunkClock:
    sink = ChunkClock()
    watch.session.sinks.insert(0, sink)
    return sink


def latencies(watch: Watch, shown: dict[int, float], clock: ChunkClock) -> list[float]:
    """Per step closed by the next step: from the arrival of the window's last sample to
    ``shown`` (its row on screen, or its publication)."""
    out = []
    for e in watch.snapshot().steps:
        w = e.result.window
        if w is None or e.result.end_reason != "next step":
            continue
        k = bisect.bisect_left(clock.t_last, float(w.t[-1]))
        at = shown.get(e.result.index)
        if at is not None and k < len(clock.wall):
            out.append(at - clock.wall[k])
    return out


def run_headless(kind: str, path: Path, seconds: float) -> dict:
    watch, proc, slave = make_watch(kind, path)
    clock = _chunk_clock(watch)
    c0, w0 = cpu(), time.monotonic()
    watch.start()
    if kind == "pty":
        proc.wait()
    else:
        watch.wait(seconds + 60)
    watch.stop()
    watch.wait(30)
    wall, used = time.monotonic() - w0, cpu() - c0
    if slave is not None:
        os.close(slave)
    if isinstance(proc, BenchRun):
        proc.close()
    shown = {e.result.index: e.published for e in watch.snapshot().steps}
    return {"wall": wall, "cpu": used, "steps": len(watch.snapshot().steps),
            "samples": watch.snapshot().counters["samples"],
            "latency": latencies(watch, shown, clock)}


def run_ui(kind: str, path: Path, seconds: float) -> dict:
    watch, proc, slave = make_watch(kind, path)
    clock = _chunk_clock(watch)
    app = LivestepApp(watch, report_folder=Path(tempfile.gettempdir()))
    keys: list[float] = []
    frame_times: list[float] = []
    real_frame = app.frame

    def timed_frame() -> None:
        t0 = time.perf_counter()
        real_frame()
        frame_times.append(time.perf_counter() - t0)

    app.frame = timed_frame  # type: ignore[method-assign]

    async def go() -> dict:
        async with app.run_test(size=(120, 36)) as pilot:
            c0, w0 = cpu(), time.monotonic()
            f0 = len(frame_times)
            while not (watch.done or (proc is not None and proc.poll() is not None)):
                before = app.show_model
                t0 = time.monotonic()
                app.simulate_key("m")  # as the terminal driver delivers a key
                while app.show_model == before and time.monotonic() - t0 < 5:
                    await asyncio.sleep(0.001)
                keys.append(time.monotonic() - t0)
                await asyncio.sleep(0.5)
            await pilot.pause(0.3)
            wall, used = time.monotonic() - w0, cpu() - c0
            return {"wall": wall, "cpu": used, "frames": len(frame_times) - f0,
                    "shown": dict(app.shown_at)}

    out = asyncio.run(go())
    watch.stop()
    watch.wait(30)
    if slave is not None:
        os.close(slave)
    if isinstance(proc, BenchRun):
        proc.close()
    snap = watch.snapshot()
    out.update(steps=len(snap.steps), samples=snap.counters["samples"], keys=keys,
               frame_ms=[1e3 * f for f in frame_times],
               latency=latencies(watch, out["shown"], clock))
    return out


def pct(xs: list[float], q: float) -> float:
    return float(np.percentile(xs, q)) if xs else float("nan")


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--seconds", type=float, default=20.0, help="seconds of 20 kHz data")
    ap.add_argument("--source", choices=("replay", "pty", "bench", "all"), default="all")
    ap.add_argument("--quick", action="store_true", help="6 s of data, replay only")
    args = ap.parse_args()
    seconds = 6.0 if args.quick else args.seconds
    kinds = ["replay"] if args.quick else (["replay", "pty", "bench"] if args.source == "all"
                                           else [args.source])
    console = Console(width=150)
    with tempfile.TemporaryDirectory(prefix="livestep-bench-tui-") as tmp:
        path = Path(tmp) / "bench-20khz.csv"
        make_recording(path, seconds)
        table = Table(title=f"watch at {RATE / 1e3:g} kHz, {seconds:g} s of data")
        for col in ("source", "side", "samples", "steps", "CPU (% of a core)", "UI/headless CPU",
                    "frames/s", "frame ms p50/max", "key ms p50/max",
                    "verdict latency ms p50/max"):
            table.add_column(col, justify="right")
        verdicts = []
        for kind in kinds:
            console.print(f"{kind}: headless baseline ...")
            base = run_headless(kind, path, seconds)
            console.print(f"{kind}: terminal UI ...")
            ui = run_ui(kind, path, seconds)
            base_cpu, ui_cpu = base["cpu"] / base["wall"], ui["cpu"] / ui["wall"]
            table.add_row(kind, "headless", str(base["samples"]), str(base["steps"]),
                          f"{100 * base_cpu:.0f}", "1.00", "-", "-", "-",
                          f"{1e3 * pct(base['latency'], 50):.0f}/"
                          f"{1e3 * max(base['latency'], default=float('nan')):.0f}")
            fps = ui["frames"] / ui["wall"]
            table.add_row(kind, "UI", str(ui["samples"]), str(ui["steps"]),
                          f"{100 * ui_cpu:.0f}", f"{ui_cpu / max(base_cpu, 1e-9):.2f}",
                          f"{fps:.1f}",
                          f"{pct(ui['frame_ms'], 50):.1f}/{max(ui['frame_ms']):.1f}",
                          f"{1e3 * pct(ui['keys'], 50):.0f}/{1e3 * max(ui['keys']):.0f}",
                          f"{1e3 * pct(ui['latency'], 50):.0f}/"
                          f"{1e3 * max(ui['latency'], default=float('nan')):.0f}")
            verdicts.append((kind, fps, max(ui["keys"]), max(ui["latency"], default=np.nan)))
        console.print(table)
        for kind, fps, key, lat in verdicts:
            console.print(
                f"{kind}: frame rate {fps:.1f}/s (target 15: "
                f"{'met' if fps >= 0.9 * LivestepApp.FPS else 'NOT met'}), slowest key "
                f"{1e3 * key:.0f} ms (target < 100: {'met' if key < 0.1 else 'NOT met'}),"
                f" slowest verdict {1e3 * lat:.0f} ms (target < 100: "
                f"{'met' if lat < 0.1 else 'NOT met'})")
        console.print("verdict latency: from the arrival of the window's last sample (just"
                      " before the next step) in the session to the step's row in the table"
                      " (headless: to its publication); it includes the detector's 20-sample"
                      " hold, measuring, the model fit and the verdict.")


if __name__ == "__main__":
    main()
