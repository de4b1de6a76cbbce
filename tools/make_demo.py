"""Write an invented bench session: the belt-driven transfer axis of a carton
packaging line, position loop, stepped up and down while its gains are retuned.

Usage: python tools/make_demo.py [OUT.csv[.gz]] [--hours H] [--rate HZ] [--seed N]

The plant is a second-order-plus-dead-time response (damping ratio changing as
the "gains" change) with sensor noise, encoder quantisation and timestamp
jitter. Invented data, for the demo and the benchmarks only; tests check
against references outside the project.
"""

from __future__ import annotations

import argparse
import gzip
import sys
from pathlib import Path

import numpy as np

sys.path.insert(0, str(Path(__file__).resolve().parent.parent))
from livestep.steps.second_order import step_response  # noqa: E402

#: (setpoint mm, damping ratio) of each step of the default session
DEMO_STEPS = [(50.0, 0.35), (80.0, 0.35), (30.0, 0.5), (60.0, 0.5), (40.0, 0.7),
              (90.0, 0.7), (20.0, 0.9), (55.0, 1.3)]
#: The name of the gain set giving each damping ratio (a note before its first step)
GAIN_SETS = {0.35: "A", 0.5: "B", 0.7: "C", 0.9: "D", 1.3: "E"}


def synthesize(levels: list[float], zetas: list[float], *, rate: float = 2000.0,
               hold: float = 2.0, wn: float = 25.0, dead_time: float = 0.004,
               noise: float = 0.02, quantum: float = 0.01, jitter: float = 0.1,
               start_level: float = 0.0, seed: int = 1) -> tuple[np.ndarray, ...]:
    """Return (t seconds, setpoint, feedback) of one step every ``hold`` seconds."""
    rng = np.random.default_rng(seed)
    n_per = int(round(hold * rate))
    n = n_per * (len(levels) + 1)
    t = (np.arange(n) + rng.uniform(-jitter, jitter, n)) / rate
    sp = np.full(n, start_level)
    fb = np.full(n, start_level)
    prev = start_level
    for j, (level, zeta) in enumerate(zip(levels, zetas, strict=True)):
        k0 = (j + 1) * n_per
        seg = slice(k0, k0 + n_per)
        ts = t[seg] - t[k0]
        sp[seg] = level
        fb[seg] = prev + (level - prev) * step_response(ts - dead_time, zeta, wn)
        prev = level
    fb = fb + rng.normal(0.0, noise, n)
    fb = np.round(fb / quantum) * quantum
    return t, sp, fb


def write_csv(path: Path, t: np.ndarray, sp: np.ndarray, fb: np.ndarray,
              meta: dict[str, str], notes: dict[int, str] | None = None) -> None:
    """``notes``: note text by sample index, written as a ``# note: <t> name=value`` line
    after that sample (the recording format)."""
    opener = gzip.open if path.suffix == ".gz" else open
    cuts = sorted(notes or {})
    with opener(path, "wt", newline="") as fh:
        for k, v in meta.items():
            fh.write(f"# {k}: {v}\n")
        fh.write("t,setpoint,feedback\n")
        block = 200_000
        start = 0
        for end in [*(c + 1 for c in cuts), t.size]:
            for i in range(start, end, block):
                j = min(i + block, end)
                rows = np.column_stack((t[i:j], sp[i:j], fb[i:j]))
                np.savetxt(fh, rows, fmt=("%.6f", "%.3f", "%.3f"), delimiter=",")
            if notes and end - 1 in notes:
                fh.write(f"# note: {t[end - 1]:.6f} {notes[end - 1]}\n")
            start = end


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("out", nargs="?", default="fixtures/belt-axis.csv")
    ap.add_argument("--seed", type=int, default=1)
    args = ap.parse_args()
    levels = [lv for lv, _ in DEMO_STEPS]
    zetas = [z for _, z in DEMO_STEPS]
    t, sp, fb = synthesize(levels, zetas, seed=args.seed)
    n_per = t.size // (len(levels) + 1)
    notes = {}  # a gain set is chosen just before its first step
    for j, zeta in enumerate(zetas):
        if j == 0 or zeta != zetas[j - 1]:
            notes[(j + 1) * n_per - 1] = f"gains={GAIN_SETS[zeta]}"
    write_csv(Path(args.out), t, sp, fb, notes=notes, meta={
        "source": "invented demo: carton line transfer axis, belt drive, position loop",
        "units": "t s, setpoint mm, feedback mm", "generator": "tools/make_demo.py"})


if __name__ == "__main__":
    main()
