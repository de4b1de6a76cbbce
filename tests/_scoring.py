"""Scoring step measurements against the exact truth of tests/_truth.py.

Four measurers run on the same scenarios:

- ``livestep``: the recording fed in a handful of chunks of random sizes through
  livestep's step detector and ``analyze_window`` (what ``StepAnalyzer.feed`` and
  ``analyze_chunks`` do, one step at a time so that a step whose analysis raises, or
  reports an internal error in its warnings, is counted and the others still measured);
  model fits off.
- ``python-control``: ``control.step_info`` on hand-cut segments, as a user's script
  would do it: from the exact step instant to the next setpoint change, the exact
  initial level subtracted (sign flipped for downward steps), time from 0, ``yfinal``
  the mean of the last 10 % of the segment, ``SettlingTimeThreshold=0.02``,
  ``RiseTimeLimits=(0.1, 0.9)``. step_info reports times in T's units from T[0], here the
  step instant; overshoot in % of yfinal (about |amplitude| here); its peak time counts
  as "no peak" when it reports no overshoot; "settled" when its settling time is finite.
- ``oracle``: the figures of the noise-free samples at the recorded instants, from the
  exact levels, crossings and the last band exit interpolated linearly, the peak by a
  parabola through three samples, "settled" when inside the band for the last third of
  the window. It must pass every check: it shows that the time
  allowance covers sampling, jitter and dropped samples.
- ``reference``: a plain reading of the noisy samples that a careful script could do,
  to show that the noise allowance is fair: levels as the means of the last 20 % of the
  previous hold and of the window, the samples put on a uniform grid by linear
  interpolation and, when the stretch before the step shows noise, smoothed by cubic
  Savitzky-Golay filters (scipy.signal.savgol_filter; Savitzky & Golay, Anal. Chem. 36,
  1964) over 0.3 rise time for the crossings and the peak and over one rise time for the
  settling band; an overshoot counts above 3 noise sigmas. It takes the smoothing length
  from the drawn rise time (a tool would estimate it), so it is a probe of the
  tolerance, not a method to compare with.

Imported by tests/steps/test_validation.py and tools/validate_measure.py.
"""

from __future__ import annotations

import math
import time
from collections.abc import Callable, Iterable
from dataclasses import dataclass, field

import numpy as np
from _truth import LEVEL_SHARE, NOISE_CLASSES, SETTLED_SHARE, Scenario, TrueStep, scenarios

QUANTITIES = ("rise", "peak time", "overshoot", "settling", "sse", "settled")
METHODS = ("livestep", "python-control", "oracle", "reference")
MATCH_SAMPLES = 3.0  # a detected step matches a true one within this many periods


@dataclass(frozen=True)
class Measured:
    """One method's figures of one step (seconds from the step instant, overshoot in %,
    steady-state error in feedback units; None where the method gives none)."""

    rise: float | None
    peak_time: float | None
    overshoot: float
    settling: float | None
    settled: bool
    sse: float | None


@dataclass(frozen=True)
class Check:
    """The verdict on one figure: ``excess`` is how far outside the tolerance it is, in
    units of the tolerance's half-width (0 inside, inf when the figure is missing)."""

    ok: bool
    excess: float
    got: str
    want: str


def _fmt(x: float | None, unit: str = "") -> str:
    return "None" if x is None else f"{x:.6g}{unit}"


def _interval_check(x: float | None, lo: float, hi: float, unit: str = "s") -> Check:
    want = f"[{lo:.6g}, {hi:.6g}]{unit}"
    if x is None or not math.isfinite(x):
        return Check(False, math.inf, _fmt(x, unit), want)
    half = max(0.5 * (hi - lo), 1e-300)
    excess = max(lo - x, x - hi, 0.0) / half
    return Check(excess == 0.0, excess, _fmt(x, unit), want)


def _in_runs(x: float, ts: TrueStep) -> float:
    """Distance from ``x`` to the peak-time set (runs +- slack), 0 inside."""
    d = math.inf
    for a, b in ts.peak_runs:
        d = min(d, max(a - ts.slack - x, x - b - ts.slack, 0.0))
    return d


def score(ts: TrueStep, m: Measured | None) -> dict[str, Check]:
    """Check each applicable figure of ``m`` against the truth ``ts`` (rule in
    _truth._step_truth). A cut step is judged on "settled" only; the settling time is
    judged where settling is required; ``m`` None (missed, raised) fails every check."""
    out: dict[str, Check] = {}
    miss = Check(False, math.inf, "no result", "")
    if not ts.cut:
        if m is None:
            for q in ("rise", "peak time", "overshoot", "sse"):
                out[q] = miss
        else:
            out["rise"] = _interval_check(m.rise, ts.rise_lo, ts.rise_hi)
            runs = " u ".join(f"[{a:.6g}, {b:.6g}]" for a, b in ts.peak_runs[:3])
            want = f"{runs} +-{ts.slack:.3g}s" + ("" if ts.overshoot_detectable else " or None")
            if m.peak_time is None:
                ok = not ts.overshoot_detectable
                out["peak time"] = Check(ok, 0.0 if ok else math.inf, "None", want)
            else:
                d = _in_runs(m.peak_time, ts)
                half = max(ts.slack, 0.5 * (ts.peak_runs[0][1] - ts.peak_runs[0][0])
                           if ts.peak_runs else ts.slack)
                out["peak time"] = Check(d == 0.0, d / half, _fmt(m.peak_time, "s"), want)
            err = abs(m.overshoot - ts.overshoot)
            none_ok = not ts.overshoot_detectable and m.overshoot == 0.0
            want = f"{ts.overshoot:.4g} +- {ts.overshoot_tol:.3g} %" + (
                "" if ts.overshoot_detectable else " or 0")
            ok = err <= ts.overshoot_tol or none_ok
            out["overshoot"] = Check(ok, 0.0 if ok else err / ts.overshoot_tol - 1.0,
                                     _fmt(m.overshoot, "%"), want)
            if m.sse is None:
                out["sse"] = Check(False, math.inf, "None", f"{ts.sse:.6g}")
            else:
                err = abs(m.sse - ts.sse)
                out["sse"] = Check(err <= ts.sse_tol, max(0.0, err / ts.sse_tol - 1.0),
                                   f"{m.sse:.6g}", f"{ts.sse:.6g} +- {ts.sse_tol:.3g}")
    if ts.settled:
        out["settling"] = (miss if m is None else
                           _interval_check(m.settling, ts.settle_lo, ts.settle_hi))
    want_flag = {True: "True", False: "False", None: "either"}[ts.settled]
    if m is None:
        out["settled"] = Check(False, math.inf, "no result", want_flag)
    elif ts.settled:
        out["settled"] = Check(m.settled, 0.0 if m.settled else math.inf, str(m.settled),
                               want_flag)
    elif not m.settled:
        out["settled"] = Check(True, 0.0, "False", want_flag)
    else:
        c = _interval_check(m.settling, ts.settle_lo, ts.settle_hi)
        out["settled"] = Check(c.ok, c.excess, f"True at {c.got}",
                               f"{want_flag} (True only at {c.want})")
    return out


# -- the measurers ----------------------------------------------------------------------------
@dataclass
class Outcome:
    """One method on one scenario: a result (or None) per true step, extra detections,
    error messages of steps whose analysis raised, wall time (s)."""

    per_step: list[Measured | None]
    extra: int = 0
    raised: dict[int, str] = field(default_factory=dict)
    wall: float = 0.0


def _chunks(scn: Scenario) -> list[tuple[int, int]]:
    rng = np.random.default_rng(scn.seed + 1)
    k = int(rng.integers(3, 9))
    cuts = np.sort(rng.integers(1, scn.t.size, k - 1))
    edges = [0, *cuts.tolist(), scn.t.size]
    return [(a, b) for a, b in zip(edges[:-1], edges[1:], strict=True) if b > a]


def measure_livestep(scn: Scenario) -> Outcome:
    """livestep's figures of each true step (see the module docstring)."""
    from livestep.steps.analysis import AnalysisSettings, analyze_window
    from livestep.steps.detect import DetectorSettings, StepDetector

    # max_window beyond any hold: the truth's window is the whole hold.
    settings = AnalysisSettings(fit_model=False, detect=DetectorSettings(max_window=1e12))
    out = Outcome(per_step=[None] * len(scn.steps))
    t_true = np.array([s.t_step for s in scn.steps])
    start = time.perf_counter()
    detector = StepDetector(settings.detect)
    windows = []
    try:
        for a, b in _chunks(scn):
            windows += detector.feed(scn.t[a:b], scn.feedback[a:b], scn.setpoint[a:b])
        windows += detector.finish()
    except Exception as exc:  # noqa: BLE001 - a report counts it
        for i, m in enumerate(out.per_step):
            if m is None:
                out.raised[i] = f"detector: {type(exc).__name__}: {exc}"
    for w in windows:
        j = int(np.argmin(np.abs(t_true - w.t_step)))
        if abs(t_true[j] - w.t_step) > MATCH_SAMPLES * scn.dt or out.per_step[j] is not None:
            out.extra += 1
            continue
        try:
            r = analyze_window(w, settings)
        except Exception as exc:  # noqa: BLE001 - a report counts it
            out.raised[j] = f"{type(exc).__name__}: {exc}"
            continue
        m = r.metrics
        errors = [x for x in r.warnings if "internal error" in x]
        if errors:  # analyze_window reports an exception in its warnings
            out.raised[j] = errors[0]
            continue
        out.per_step[j] = Measured(rise=m.rise_time, peak_time=m.peak_time,
                                   overshoot=m.overshoot_pct, settling=m.settling_time,
                                   settled=m.settled, sse=m.steady_state_error)
    out.wall = time.perf_counter() - start
    return out


def measure_control(scn: Scenario) -> Outcome:
    """python-control's step_info on hand-cut segments (see the module docstring)."""
    import control

    out = Outcome(per_step=[])
    start = time.perf_counter()
    edges = [s.t_step for s in scn.steps[1:]] + [math.inf]
    for ts, t_next in zip(scn.steps, edges, strict=True):
        sel = (scn.t >= ts.t_step) & (scn.t < t_next)
        sign = 1.0 if ts.sp_after >= ts.sp_before else -1.0
        T = scn.t[sel] - ts.t_step
        y = sign * (scn.feedback[sel] - ts.initial)
        yfinal = float(np.mean(y[-max(1, y.size // 10):]))
        try:
            info = control.step_info(y, T, yfinal=yfinal, SettlingTimeThreshold=0.02,
                                     RiseTimeLimits=(0.1, 0.9))
        except Exception as exc:  # noqa: BLE001 - a report counts it
            out.per_step.append(None)
            out.raised[ts.index] = f"{type(exc).__name__}: {exc}"
            continue
        os_pct = float(info["Overshoot"])
        st = float(info["SettlingTime"])
        out.per_step.append(Measured(
            rise=float(info["RiseTime"]),
            peak_time=float(info["PeakTime"]) if os_pct > 0 else None,
            overshoot=os_pct, settling=st if math.isfinite(st) else None,
            settled=math.isfinite(st), sse=ts.sp_after - (ts.initial + sign * yfinal)))
    out.wall = time.perf_counter() - start
    return out


def measure_oracle(scn: Scenario) -> Outcome:
    """Figures of the noise-free samples with the exact levels (see the module docstring)."""
    out = Outcome(per_step=[])
    start = time.perf_counter()
    for ts in scn.steps:
        t = scn.t[ts.i_first:ts.i_stop] - ts.t_step
        r = (scn.clean[ts.i_first:ts.i_stop] - ts.initial) / ts.amplitude

        def cross(level: float, t: np.ndarray = t, r: np.ndarray = r) -> float | None:
            above = np.flatnonzero(r >= level)
            if above.size == 0:
                return None
            i = int(above[0])
            if i == 0:
                return float(t[0])
            return float(t[i - 1] + (level - r[i - 1]) / (r[i] - r[i - 1]) * (t[i] - t[i - 1]))

        lo, hi = cross(0.1), cross(0.9)
        k = int(np.argmax(r))
        peak_time, os_pct = None, 0.0
        if 0 < k < r.size - 1 and r[k] > 1.0:
            tc = t[k - 1:k + 2] - t[k]
            a, b, c = np.polyfit(tc, r[k - 1:k + 2], 2)
            tp, rp = t[k], r[k]
            if a < 0 and tc[0] <= -b / (2 * a) <= tc[2]:  # the vertex, between the samples
                tp, rp = t[k] - b / (2 * a), c - b * b / (4 * a)
            peak_time, os_pct = float(tp), 100.0 * (float(rp) - 1.0)
        outside = np.flatnonzero(np.abs(r - 1.0) > 0.02)
        settling: float | None = None
        if outside.size and outside[-1] < r.size - 1:
            j = int(outside[-1])
            edge = 1.02 if r[j] > 1.0 else 0.98
            settling = float(t[j] + (edge - r[j]) / (r[j + 1] - r[j]) * (t[j + 1] - t[j]))
        # Settled when inside the band for the last third of the window at least (the
        # share _truth uses; a response just passing through the band at the end of a cut
        # recording is not settled).
        settled = settling is not None and settling <= SETTLED_SHARE * float(t[-1])
        out.per_step.append(Measured(
            rise=None if lo is None or hi is None else hi - lo, peak_time=peak_time,
            overshoot=os_pct, settling=settling if settled else None, settled=settled,
            sse=ts.sp_after - ts.final))
    out.wall = time.perf_counter() - start
    return out


def measure_reference(scn: Scenario) -> Outcome:
    """A plain, independent reading of the noisy data (see the module docstring)."""
    from scipy.signal import savgol_filter

    out = Outcome(per_step=[])
    start = time.perf_counter()
    dt = scn.dt
    for n, ts in enumerate(scn.steps):
        prev = scn.steps[n - 1].t_step if n else float(scn.t[0])
        pre = (scn.t >= ts.t_step - LEVEL_SHARE * (ts.t_step - prev)) & (scn.t < ts.t_step)
        t = scn.t[ts.i_first:ts.i_stop] - ts.t_step
        y = scn.feedback[ts.i_first:ts.i_stop]
        initial = float(np.mean(scn.feedback[pre]))
        final = float(np.mean(y[t >= (1.0 - LEVEL_SHARE) * t[-1]]))
        amp = final - initial
        tg = np.arange(0.0, t[-1], dt)  # uniform grid from the step instant
        r = (np.interp(tg, t, y) - initial) / amp
        sigma = float(np.std(np.diff(scn.feedback[pre]))) / math.sqrt(2.0) / abs(amp)
        rs = r
        if sigma > 0.0:
            short = max(5, int(0.3 * scn.rise_samples) | 1)
            long = max(5, int(scn.rise_samples) | 1)
            rs = savgol_filter(r, long, 3) if long <= r.size else r
            r = savgol_filter(r, short, 3) if short <= r.size else r

        def cross(level: float, r: np.ndarray = r, tg: np.ndarray = tg) -> float | None:
            above = np.flatnonzero(r >= level)
            if above.size == 0:
                return None
            i = int(above[0])
            if i == 0:
                return 0.0
            return float(tg[i - 1] + (level - r[i - 1]) / (r[i] - r[i - 1]) * dt)

        lo, hi = cross(0.1), cross(0.9)
        k = int(np.argmax(r))
        peak_time, os_pct = None, 0.0
        if 0 < k < r.size - 1 and r[k] - 1.0 > max(3.0 * sigma, 1e-3):
            ym, y0, yp = r[k - 1:k + 2]
            den = ym - 2.0 * y0 + yp
            d = 0.5 * (ym - yp) / den if den < 0 else 0.0
            peak_time, os_pct = float(tg[k] + d * dt), 100.0 * (y0 - 0.25 * (ym - yp) * d - 1.0)
        outside = np.flatnonzero(np.abs(rs - 1.0) > 0.02)
        settling: float | None = None
        if outside.size and outside[-1] < rs.size - 1:
            j = int(outside[-1])
            edge = 1.02 if rs[j] > 1.0 else 0.98
            settling = float(tg[j] + (edge - rs[j]) / (rs[j + 1] - rs[j]) * dt)
        settled = settling is not None and settling <= SETTLED_SHARE * float(t[-1])
        out.per_step.append(Measured(
            rise=None if lo is None or hi is None else hi - lo, peak_time=peak_time,
            overshoot=os_pct, settling=settling if settled else None, settled=settled,
            sse=ts.sp_after - final))
    out.wall = time.perf_counter() - start
    return out


MEASURERS: dict[str, Callable[[Scenario], Outcome]] = {
    "livestep": measure_livestep, "python-control": measure_control, "oracle": measure_oracle,
    "reference": measure_reference}


# -- the run and its report -------------------------------------------------------------------
@dataclass(frozen=True)
class Failure:
    method: str
    quantity: str
    check: Check
    scenario: Scenario
    step: TrueStep


@dataclass
class MethodStats:
    """Counts of one method: ``counts[(quantity, noise class)] = [checks, passed]``."""

    name: str
    counts: dict[tuple[str, str], list[int]] = field(default_factory=dict)
    missed: int = 0
    extra: int = 0
    raised: list[tuple[Scenario, int, str]] = field(default_factory=list)
    failures: list[Failure] = field(default_factory=list)
    #: every check as (quantity, scenario, step, passed), for breakdowns
    checks: list[tuple[str, Scenario, TrueStep, bool]] = field(default_factory=list)
    wall: float = 0.0

    def rate(self, quantity: str, noise_class: str | None = None) -> tuple[int, float]:
        """(checks, fraction passed) of a quantity, over one noise class or all."""
        n = ok = 0
        for (q, c), (cn, cok) in self.counts.items():
            if q == quantity and (noise_class is None or c == noise_class):
                n, ok = n + cn, ok + cok
        return n, (ok / n if n else math.nan)


@dataclass
class Validation:
    stats: dict[str, MethodStats]
    scenarios: list[Scenario]
    truth_wall: float

    @property
    def n_steps(self) -> int:
        return sum(len(s.steps) for s in self.scenarios)


def validate(scns: Iterable[Scenario], methods: Iterable[str] = METHODS,
             truth_wall: float = 0.0) -> Validation:
    """Run each method on each scenario and score every step."""
    scns = list(scns)
    stats = {m: MethodStats(m) for m in methods}
    for scn in scns:
        for name, st in stats.items():
            res = MEASURERS[name](scn)
            st.wall += res.wall
            st.extra += res.extra
            for i, msg in res.raised.items():
                st.raised.append((scn, i, msg))
            for ts, m in zip(scn.steps, res.per_step, strict=True):
                if m is None and ts.index not in res.raised:
                    st.missed += 1
                for q, c in score(ts, m).items():
                    cell = st.counts.setdefault((q, ts.noise_class), [0, 0])
                    cell[0] += 1
                    cell[1] += int(c.ok)
                    st.checks.append((q, scn, ts, c.ok))
                    if not c.ok:
                        st.failures.append(Failure(name, q, c, scn, ts))
    return Validation(stats=stats, scenarios=scns, truth_wall=truth_wall)


def run(n_steps: int, seed: int, methods: Iterable[str] = METHODS) -> Validation:
    """Draw scenarios from ``seed`` until ``n_steps`` steps, and validate them."""
    start = time.perf_counter()
    scns = scenarios(n_steps, seed)
    return validate(scns, methods, truth_wall=time.perf_counter() - start)


def format_tables(v: Validation) -> str:
    """Pass rates per quantity and noise class, the methods side by side."""
    names = list(v.stats)
    head = f"{'':16s}{'checks':>7s}" + "".join(f"{n:>16s}" for n in names)
    lines = [f"{v.n_steps} steps in {len(v.scenarios)} recordings; % of checks within "
             "tolerance", ""]
    for q in QUANTITIES:
        lines.append(f"{q}:")
        lines.append(head)
        for c in (*NOISE_CLASSES, None):
            n, _ = v.stats[names[0]].rate(q, c)
            if n == 0:
                continue
            row = f"  {c or 'all':14s}{n:7d}"
            for name in names:
                _, r = v.stats[name].rate(q, c)
                row += f"{100 * r:15.1f}%"
            lines.append(row)
        lines.append("")
    lines.append(f"{'':23s}" + "".join(f"{n:>16s}" for n in names))
    for label, get in (("missed steps", lambda s: s.missed), ("extra steps", lambda s: s.extra),
                       ("steps that raised", lambda s: len(s.raised))):
        lines.append(f"{label:23s}" + "".join(f"{get(v.stats[n]):16d}" for n in names))
    lines.append(f"{'wall time (s)':23s}" + "".join(f"{v.stats[n].wall:16.2f}" for n in names))
    lines.append(f"(truth generation {v.truth_wall:.2f} s)")
    return "\n".join(lines)


def format_failure(f: Failure) -> str:
    ts = f.step
    return (f"{f.method} {f.quantity}: got {f.check.got}, want {f.check.want} "
            f"(excess {f.check.excess:.3g})\n"
            f"    step {ts.index} ({'up' if ts.sp_after > ts.sp_before else 'down'}, "
            f"{ts.noise_class}, hold {ts.hold_ts:.2f} Ts, delta {100 * ts.delta:.3g} %, "
            f"exact rise {ts.rise:.6g}s os {ts.overshoot:.4g}% settling "
            f"{_fmt(ts.settling, 's')}, t_step {ts.t_step:.9g}s)\n"
            f"    {f.scenario.describe()}")


def pass_rates(v: Validation, method: str) -> dict[str, float]:
    """Fraction of checks passed per quantity (all noise classes)."""
    return {q: v.stats[method].rate(q)[1] for q in QUANTITIES}
