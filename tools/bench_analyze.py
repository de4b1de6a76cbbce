"""Benchmark ``livestep analyze`` end to end against the scripts a user would write.

Usage: python tools/bench_analyze.py [--hours H] [--rate HZ] [--quick] [--repeat N]
                                     [--notes EVERY] [--out PATH] [--keep] [--profile N]

Writes an invented bench recording (a belt-driven positioning axis stepped up and down
every 2 s with changing gains: damping ratio and natural frequency vary, with sensor
noise, encoder quantisation and timestamp jitter), then runs each side in its own
subprocess, ``--repeat`` times interleaved, so that wall time and peak memory (the sum
over the child and the processes it starts, see ``_TIMER``) are its own:

- livestep: ``RecordingReader`` -> ``analyze_chunks`` with model fits, as
  ``livestep analyze`` does (read, detect, measure, fit), with its default ``--jobs``;
- livestep CLI: ``python -m livestep analyze --json FILE`` as a whole process
  (interpreter start, imports and JSON output included);
- loadtxt script: ``numpy.loadtxt`` of the whole file, ``numpy.diff`` of the setpoint
  for the jumps, ``control.step_info`` on each segment (no noise handling, no model);
- pandas script: the same with ``pandas.read_csv`` (when pandas is installed).

Each row gives the median and the spread (min-max) of the runs: ``work`` is the time
inside the child from reading to the last result (imports excluded), ``process`` the
child's whole wall time. Ratios are throughputs against each script, by median.
``--notes EVERY`` also writes the same recording with a ``# note:`` line every EVERY
rows (as a plan-driven session has) and times the CLI on both files.

It is a report: nothing is asserted. Needs python-control for the scripts.
"""

from __future__ import annotations

import argparse
import importlib.util
import json
import os
import shutil
import subprocess
import sys
import tempfile
import time
from pathlib import Path

import numpy as np

ROOT = Path(__file__).resolve().parent.parent
sys.path.insert(0, str(ROOT))
from livestep.steps.second_order import step_response  # noqa: E402

HOLD = 2.0  # seconds between steps
TARGET_RATE = 1e6  # samples/s
TARGET_MB = 500.0
META = {"source": "invented bench session: belt-driven positioning axis, position loop,"
        " gains retuned between steps", "units": "t s, setpoint mm, feedback mm",
        "generator": "tools/bench_analyze.py"}


# -- recording ------------------------------------------------------------------------
def _fixed_point(scaled: np.ndarray, decimals: int) -> np.ndarray:
    """ASCII of integers ``scaled`` = value * 10**decimals as an (n, width) byte matrix,
    right-aligned and padded on the left with spaces (which the caller drops)."""
    mag = np.abs(scaled)
    top = int(mag.max()) // 10**decimals if mag.size else 0
    n_int = max(1, len(str(top)))
    width = 1 + n_int + (1 + decimals if decimals else 0)
    out = np.full((scaled.size, width), ord(" "), dtype=np.uint8)
    col = width - 1
    for k in range(decimals):
        out[:, col] = ord("0") + (mag // 10**k) % 10
        col -= 1
    if decimals:
        out[:, col] = ord(".")
        col -= 1
    shown = np.ones(scaled.size, dtype=np.intp)  # integer digits written per row
    for k in range(n_int):
        p = 10 ** (decimals + k)
        digit = (ord("0") + (mag // p) % 10).astype(np.uint8)
        if k == 0:
            out[:, col] = digit
        else:
            show = mag >= p
            out[:, col] = np.where(show, digit, ord(" "))
            shown += show
        col -= 1
    neg = np.flatnonzero(scaled < 0)
    out[neg, width - (2 + decimals if decimals else 1) - shown[neg]] = ord("-")
    return out


def _csv_bytes(t_us: np.ndarray, sp_mu: np.ndarray, fb_mu: np.ndarray) -> bytes:
    """Rows ``t,setpoint,feedback`` as ``%.6f,%.3f,%.3f`` from integer micro-seconds and
    micro-metres (thousandths of a mm)."""
    n = t_us.size
    comma = np.full((n, 1), ord(","), dtype=np.uint8)
    newline = np.full((n, 1), ord("\n"), dtype=np.uint8)
    rows = np.hstack((_fixed_point(t_us, 6), comma, _fixed_point(sp_mu, 3), comma,
                      _fixed_point(fb_mu, 3), newline)).ravel()
    return rows[rows != ord(" ")].tobytes()


def _plan(n_steps: int, rng: np.random.Generator) -> tuple[np.ndarray, ...]:
    """Setpoint levels (mm), damping ratios and natural frequencies (rad/s) of each step:
    up and down, small and large, on a 0..400 mm stroke."""
    levels = np.empty(n_steps)
    level = 100.0
    sizes = np.exp(rng.uniform(np.log(0.5), np.log(150.0), n_steps))
    signs = rng.choice([-1.0, 1.0], n_steps)
    for j in range(n_steps):
        nxt = level + signs[j] * sizes[j]
        if not 0.0 <= nxt <= 400.0:
            nxt = level - signs[j] * sizes[j]
        level = round(nxt, 1)
        levels[j] = level
    zetas = rng.uniform(0.3, 1.5, n_steps)
    wns = rng.uniform(15.0, 40.0, n_steps)
    return levels, zetas, wns


def write_recording(path: Path, hours: float, rate: float, seed: int = 7) -> int:
    """Write the invented recording; returns the number of samples."""
    rng = np.random.default_rng(seed)
    n_per = int(round(HOLD * rate))
    n_segments = max(2, int(round(hours * 3600.0 / HOLD)))
    levels, zetas, wns = _plan(n_segments - 1, rng)
    start = 100.0
    levels = np.concatenate(([start], levels))
    dead_time, noise, quantum, jitter = 0.004, 0.02, 0.01, 0.1
    ts = np.arange(n_per) / rate  # time since the step, before jitter
    per_block = max(1, 500_000 // n_per)  # segments formatted at a time
    with path.open("wb") as fh:
        fh.write("".join(f"# {k}: {v}\n" for k, v in META.items()).encode())
        fh.write(b"t,setpoint,feedback\n")
        for s0 in range(0, n_segments, per_block):
            segs = range(s0, min(s0 + per_block, n_segments))
            k = np.arange(segs.start * n_per, segs.stop * n_per)
            t = (k + rng.uniform(-jitter, jitter, k.size)) / rate
            t[0] = max(t[0], 0.0)
            sp = np.repeat(levels[segs.start:segs.stop], n_per)
            fb = np.empty(k.size)
            for i, j in enumerate(segs):
                seg = slice(i * n_per, (i + 1) * n_per)
                if j == 0:
                    fb[seg] = start
                    continue
                prev = levels[j - 1]
                fb[seg] = prev + (levels[j] - prev) * step_response(
                    ts - dead_time, zetas[j - 1], wns[j - 1])
            fb += rng.normal(0.0, noise, k.size)
            fb_mu = np.rint(fb / quantum).astype(np.int64) * round(quantum * 1000)
            fh.write(_csv_bytes(np.rint(t * 1e6).astype(np.int64),
                                np.rint(sp * 1000).astype(np.int64), fb_mu))
    return n_segments * n_per


# -- the two sides (run in child processes) -----------------------------------------------
def run_livestep(path: str) -> dict[str, float]:
    """Read, detect, measure and fit, the way ``livestep analyze`` does with its defaults."""
    from livestep.sources.read_process import read_in_process
    from livestep.sources.recording import ColumnMap, RecordingReader
    from livestep.steps.analysis import AnalysisSettings, analyze_chunks
    from livestep.steps.detect import DetectorSettings
    from livestep.steps.measure import MeasureSettings

    t0 = time.perf_counter()
    settings = AnalysisSettings(
        detect=DetectorSettings(min_step=None, max_window=120.0),
        measure=MeasureSettings(rise_levels=(10.0, 90.0), settling_band=2.0), fit_model=True)
    reader = RecordingReader(path, ColumnMap(time="t", setpoint=None, feedback="feedback",
                                             time_unit="s"))
    from livestep.cli.options import default_jobs

    workers = default_jobs()  # the 'livestep analyze' default
    results = list(analyze_chunks(read_in_process(reader), settings,
                                  has_setpoint=reader.has_setpoint, workers=workers))
    seconds = time.perf_counter() - t0
    return {"seconds": seconds, "samples": reader.stats.good, "steps": len(results),
            "fitted": sum(r.model is not None for r in results)}


def run_baseline(path: str, parser: str = "loadtxt") -> dict[str, float]:
    """Whole file into memory (``numpy.loadtxt`` or ``pandas.read_csv``), setpoint jumps by
    numpy.diff, control.step_info per segment: the script a user would write."""
    import control

    t0 = time.perf_counter()
    skip = 0
    with open(path, "rb") as fh:
        for line in fh:
            skip += 1
            if not line.startswith(b"#"):
                break  # the header row
    if parser == "pandas":
        import pandas as pd

        data = pd.read_csv(path, comment="#").to_numpy()
    else:
        data = np.loadtxt(path, delimiter=",", skiprows=skip)
    t, sp, fb = data[:, 0], data[:, 1], data[:, 2]
    jumps = np.flatnonzero(np.diff(sp) != 0.0) + 1
    ends = np.append(jumps[1:], sp.size)
    infos = []
    for a, b in zip(jumps, ends, strict=True):
        before, after = sp[a - 1], sp[a]
        infos.append(control.step_info(fb[a:b] - before, timepts=t[a:b] - t[a],
                                       final_output=after - before))
    seconds = time.perf_counter() - t0
    return {"seconds": seconds, "samples": int(sp.size), "steps": len(infos)}


def _child(side: str, path: str) -> None:
    if side == "livestep":
        result = run_livestep(path)
    else:
        result = run_baseline(path, "pandas" if side == "pandas script" else "loadtxt")
    json.dump(result, sys.stdout)


def _profile(path: str, top: int) -> None:
    import cProfile
    import pstats

    prof = cProfile.Profile()
    prof.enable()
    result = run_livestep(path)
    prof.disable()
    print(f"livestep under cProfile: {result['samples']} samples, {result['steps']} steps,"
          f" {result['seconds']:.2f} s")
    stats = pstats.Stats(prof, stream=sys.stdout)
    stats.sort_stats("tottime").print_stats(top)
    stats.sort_stats("cumulative").print_stats(top)


# -- parent ---------------------------------------------------------------------------------
# A minimal timer process between this one and each measured command: a child's peak
# resident memory starts from its parent's at the spawn, so the parent, which held the
# generator's arrays, must not be the one that spawns it. Memory is the peak of the sum of
# the proportional set sizes (Pss: a shared page counted once in all) of the command and
# every process it starts (livestep reads in a forked child), sampled every 20 ms; without
# /proc, the largest resident set of any one of them (ru_maxrss).
_TIMER = """
import os, sys, time
def tree(pid):
    out = [pid]
    try:
        for tid in os.listdir(f"/proc/{pid}/task"):
            with open(f"/proc/{pid}/task/{tid}/children") as fh:
                out += [q for c in fh.read().split() for q in tree(int(c))]
    except OSError:
        pass
    return out
def pss(pid):
    try:
        with open(f"/proc/{pid}/smaps_rollup") as fh:
            return next(int(x.split()[1]) for x in fh if x.startswith("Pss:"))
    except (OSError, StopIteration):
        return 0
t0 = time.perf_counter()
pid = os.posix_spawn(sys.argv[2], sys.argv[2:], os.environ)
peak = 0
while True:
    done, status, usage = os.wait4(pid, os.WNOHANG)
    if done:
        break
    peak = max(peak, sum(pss(p) for p in tree(pid)))
    time.sleep(0.02)
wall = time.perf_counter() - t0
with open(sys.argv[1], "w") as fh:
    fh.write(f"{wall} {peak or usage.ru_maxrss} {os.waitstatus_to_exitcode(status)}")
"""


def _measure(cmd: list[str], scratch: Path) -> tuple[float, float, str]:
    """Run ``cmd``; its wall seconds, its peak memory (MB, see ``_TIMER``) and its stdout."""
    report = scratch / "timer.txt"
    out = subprocess.run([sys.executable, "-S", "-c", _TIMER, str(report), *cmd],
                         stdout=subprocess.PIPE, check=True).stdout.decode()
    wall, peak_kib, status = report.read_text().split()
    if int(status) != 0:
        raise SystemExit(f"bench: {' '.join(cmd)} exited with status {status}")
    return float(wall), int(peak_kib) * 1024 / 1e6, out


def _with_notes(src: Path, dst: Path, every: int) -> int:
    """Copy the recording with a ``# note:`` line (at the time of the row before it) after
    every ``every`` data rows, in blocks; returns how many notes."""
    count = 0
    with src.open("rb") as fin, dst.open("wb") as fout:
        for line in fin:  # metadata and the header row
            fout.write(line)
            if not line.startswith(b"#"):
                break
        carry = b""
        while True:
            block = fin.read(1 << 24)
            if not block:
                break
            lines = (carry + block).split(b"\n")
            carry = lines.pop()
            out = []
            for k in range(0, len(lines), every):
                part = lines[k:k + every]
                out.append(b"\n".join(part) + b"\n")
                if len(part) == every:
                    t = part[-1].split(b",", 1)[0].decode()
                    out.append(f"# note: {t} plan_entry={count}\n".encode())
                    count += 1
            fout.write(b"".join(out))
        fout.write(carry)
    return count


def _stats(xs: list[float]) -> tuple[float, float, float]:
    return float(np.median(xs)), min(xs), max(xs)


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--hours", type=float, default=1.0, help="recording length (default 1)")
    ap.add_argument("--rate", type=float, default=5000.0, help="sample rate, Hz (default 5000)")
    ap.add_argument("--quick", action="store_true", help="a 0.05 h smoke run, one run each")
    ap.add_argument("--out", type=Path, help="write the recording here (default: a temp dir)")
    ap.add_argument("--keep", action="store_true", help="keep the recording afterwards")
    ap.add_argument("--repeat", type=int, default=3, metavar="N",
                    help="runs of each side, interleaved; median and spread (default 3)")
    ap.add_argument("--notes", type=int, metavar="EVERY",
                    help="also time the CLI on a copy with a note line every EVERY rows")
    ap.add_argument("--profile", type=int, metavar="N",
                    help="instead of the comparison, profile the livestep side (top N)")
    ap.add_argument("--side", choices=("livestep", "loadtxt script", "pandas script"),
                    help=argparse.SUPPRESS)
    ap.add_argument("recording", nargs="?", help=argparse.SUPPRESS)
    args = ap.parse_args()
    if args.side:
        _child(args.side, args.recording)
        return

    from rich.console import Console
    from rich.table import Table

    console = Console(width=150)
    hours = 0.05 if args.quick else args.hours
    repeat = 1 if args.quick else args.repeat
    scratch = Path(tempfile.mkdtemp(prefix="livestep-bench-"))
    path = args.out if args.out is not None else scratch / "bench.csv"
    noted = scratch / "bench-notes.csv"
    try:
        t0 = time.perf_counter()
        n = write_recording(path, hours, args.rate)
        gen = time.perf_counter() - t0
        size = path.stat().st_size / 1e6
        console.print(f"recording: {path} ({hours:g} h at {args.rate:g} Hz, {n:,} samples,"
                      f" {size:.0f} MB) written in {gen:.1f} s")
        if args.profile:
            _profile(str(path), args.profile)
            return
        me = [sys.executable, str(Path(__file__).resolve())]
        cli = [sys.executable, "-m", "livestep", "analyze", "--json"]
        sides = [("livestep", me + ["--side", "livestep", str(path)]),
                 ("livestep CLI", cli + [str(path)]),
                 ("loadtxt script", me + ["--side", "loadtxt script", str(path)])]
        if importlib.util.find_spec("pandas") is not None:
            sides.append(("pandas script", me + ["--side", "pandas script", str(path)]))
        if args.notes:
            notes = _with_notes(path, noted, args.notes)
            console.print(f"with notes: {noted} ({notes:,} note lines, one every"
                          f" {args.notes:,} rows)")
            sides.append(("livestep CLI, notes", cli + [str(noted)]))
        os.sync()  # the new files' dirty pages written back before anything is timed
        runs: dict[str, list[tuple[float, float, float, int, int, int]]] = {}
        for _ in range(repeat):  # sides interleaved
            for label, cmd in sides:
                wall, peak, out = _measure(cmd, scratch)
                res = json.loads(out)
                if label.startswith("livestep CLI"):
                    row = (wall, wall, peak, res["samples"], len(res["steps"]),
                           sum(s["model"] is not None for s in res["steps"]))
                else:
                    row = (res["seconds"], wall, peak, res["samples"], res["steps"],
                           res.get("fitted", -1))
                runs.setdefault(label, []).append(row)
    finally:
        if args.keep:
            console.print(f"kept {path}")
        elif args.out is not None:
            path.unlink(missing_ok=True)
        noted.unlink(missing_ok=True)
        if args.keep and args.out is None:
            (scratch / "timer.txt").unlink(missing_ok=True)
        else:
            shutil.rmtree(scratch, ignore_errors=True)

    def rate(label: str, k: int = 0) -> float:
        """Median throughput, samples/s, of the work (k=0) or whole-process (k=1) seconds."""
        return runs[label][0][3] / _stats([r[k] for r in runs[label]])[0]

    scripts = [x for x in ("loadtxt script", "pandas script") if x in runs]
    table = Table(title=f"{n:,} samples, {hours:g} h at {args.rate:g} Hz, {repeat} run(s)"
                        " each, median (min-max)")
    for col in ("side", "work s", "process s", "M samples/s", "steps", "fitted", "peak MB",
                *[f"vs {x}" for x in scripts]):
        table.add_column(col, justify="left" if col == "side" else "right")
    for label, _ in sides:
        rs = runs[label]
        work, proc = _stats([r[0] for r in rs]), _stats([r[1] for r in rs])
        ratios = [f"{rate(label) / rate(x):.2f}x / {rate(label, 1) / rate(x, 1):.2f}x"
                  for x in scripts]
        table.add_row(label, f"{work[0]:.2f} ({work[1]:.2f}-{work[2]:.2f})",
                      f"{proc[0]:.2f} ({proc[1]:.2f}-{proc[2]:.2f})",
                      f"{rate(label) / 1e6:.2f}", f"{rs[0][4]}",
                      "-" if rs[0][5] < 0 else f"{rs[0][5]}",
                      f"{max(r[2] for r in rs):.0f}", *ratios)
    console.print(table)
    console.print("work s: inside the child from reading to the last result, imports excluded"
                  " (the CLI rows: the whole process). process s: the child's wall time."
                  " vs: throughput ratio, work / whole process, by medians. peak MB: the"
                  " largest sum of the Pss of the child and the processes it starts (10^6"
                  " bytes) over its runs.")
    if args.notes:
        ratio = (_stats([r[1] for r in runs["livestep CLI, notes"]])[0]
                 / _stats([r[1] for r in runs["livestep CLI"]])[0])
        console.print(f"a note line every {args.notes:,} rows: the CLI takes {ratio:.2f}x"
                      " the time of the same file without them")


if __name__ == "__main__":
    main()
