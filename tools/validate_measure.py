"""Randomised validation of livestep's step measurement against exact truth.

Usage: python tools/validate_measure.py [--steps N] [--seed S] [--only-seed K]
                                        [--worst W] [--no-control]

Draws random recordings (tests/_truth.py: sample rate, rise time in samples, damping,
third pole, dead time, loop gain, noise, quantisation, jitter, dropped samples, holds,
cut recordings) until there are N steps, runs livestep and python-control's step_info
on each (tests/_scoring.py says how), scores every figure against the exact closed-form
truth and prints pass rates per quantity and noise class side by side, with two columns
that probe the tolerance rule: "oracle" (the noise-free samples read with the exact
levels), which must be 100 %, and "reference" (a plain smoothing reading of the noisy
samples), which should be close to it. Then the missed, extra and raising steps, wall
times, the worst livestep failures with the scenario seed to rerun alone (--only-seed K)
and where the failures gather.

It is a report: the exit status is 0 whatever the results.
"""

from __future__ import annotations

import argparse
import sys
import time
from pathlib import Path

ROOT = Path(__file__).resolve().parent.parent
sys.path.insert(0, str(ROOT))
sys.path.insert(0, str(ROOT / "tests"))
from _scoring import (  # noqa: E402
    METHODS,
    QUANTITIES,
    Validation,
    format_failure,
    format_tables,
    run,
    validate,
)
from _truth import make_scenario  # noqa: E402

BINS = {
    "zeta": (("0.1-0.4", 0.1, 0.4), ("0.4-0.8", 0.4, 0.8), ("0.8-1.2", 0.8, 1.2),
             ("1.2-1.8", 1.2, 1.81)),
    "rise smp": (("5-20", 5, 20), ("20-80", 20, 80), ("80-300", 80, 301)),
    "hold Ts": (("<5", 0, 5), ("5-15", 5, 15), (">15", 15, 1e9)),
}


def where_failures_gather(v: Validation, method: str = "livestep") -> str:
    """Failed checks / checks per quantity, by damping, rise samples and hold."""
    st = v.stats[method]
    fails: dict[tuple[str, str, str], list[int]] = {}
    for q, scn, ts, ok in st.checks:
        for key, val in (("zeta", scn.zeta), ("rise smp", scn.rise_samples),
                         ("hold Ts", ts.hold_ts)):
            for label, lo, hi in BINS[key]:
                if lo <= val < hi:
                    cell = fails.setdefault((q, key, label), [0, 0])
                    cell[0] += int(not ok)
                    cell[1] += 1
    cols = [(k, lab) for k, bins in BINS.items() for lab, _, _ in bins]
    groups = "".join(f"{k:<{9 * len(BINS[k])}s}" for k in BINS)
    lines = [f"{method} failed/checks by damping, rise time in samples and hold (in exact"
             " settling times):", f"{'':12s}{groups}".rstrip(),
             f"{'':12s}" + "".join(f"{lab:>9s}" for _, lab in cols)]
    for q in QUANTITIES:
        cells = (fails.get((q, k, lab), [0, 0]) for k, lab in cols)
        lines.append(f"{q:12s}" + "".join(f"{f'{a}/{b}':>9s}" for a, b in cells))
    return "\n".join(lines)


def main(argv: list[str] | None = None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--steps", type=int, default=600, help="steps to draw (default 600)")
    ap.add_argument("--seed", type=int, default=1, help="master seed (default 1)")
    ap.add_argument("--only-seed", type=int, default=None,
                    help="run the one scenario with this seed (as printed in failures)")
    ap.add_argument("--worst", type=int, default=15, help="livestep failures to print")
    ap.add_argument("--no-control", action="store_true", help="skip python-control")
    args = ap.parse_args(argv)
    methods = [m for m in METHODS if not (args.no_control and m == "python-control")]
    start = time.perf_counter()
    if args.only_seed is not None:
        t0 = time.perf_counter()
        scn = make_scenario(args.only_seed)
        v = validate([scn], methods, truth_wall=time.perf_counter() - t0)
        print(scn.describe())
    else:
        v = run(args.steps, args.seed, methods)
    print(format_tables(v))
    st = v.stats["livestep"]
    if st.raised:
        print("\nlivestep steps that raised:")
        for scn, i, msg in st.raised[: args.worst]:
            print(f"  step {i}: {msg}\n    {scn.describe()}")
    worst = sorted(st.failures, key=lambda f: -f.check.excess)[: args.worst]
    if worst:
        print(f"\nworst {len(worst)} livestep failures of {len(st.failures)}:")
        for f in worst:
            print(format_failure(f))
        print()
        print(where_failures_gather(v))
    oracle = v.stats.get("oracle")
    if oracle is not None and oracle.failures:
        print(f"\nORACLE FAILURES ({len(oracle.failures)}): the tolerance rule is too tight")
        for f in oracle.failures[: args.worst]:
            print(format_failure(f))
    print(f"\ntotal wall time {time.perf_counter() - start:.1f} s")
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
