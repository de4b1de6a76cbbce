"""Randomised validation of livestep's step measurement against exact truth.

Random recordings (tests/_truth.py) of a closed loop stepped several times: sample rate,
rise time in samples, damping, an optional third pole, dead time, loop gain, noise,
quantisation, jitter, dropped samples, holds and cut recordings all drawn at random.
Every figure livestep gives is scored against the exact closed-form truth with the
tolerance rule of _truth._step_truth (tests/_scoring.py); python-control's step_info on
hand-cut segments is the floor livestep must reach; an oracle (the noise-free samples
read with the exact levels) must pass every check and a plain smoothing reading of the
noisy samples nearly every one, which shows the rule is fair.

The truth generator is itself checked here against outside references: Ogata's
closed forms for peak time and overshoot, scipy.signal's step and lsim simulations of the
same transfer functions and scipy.signal.residue for the partial fractions.

The long run is marked ``validation`` and left out of the default run
(``python -m pytest -m validation tests/steps/test_validation.py`` runs it).
"""

from __future__ import annotations

import dataclasses
import math

import numpy as np
import pytest
from _scoring import (
    QUANTITIES,
    Measured,
    Validation,
    format_failure,
    format_tables,
    run,
    score,
    validate,
)
from _truth import BAND, Curve, Plant, TrueStep, make_scenario, rise_time, scenarios, settling_time
from scipy import signal

QUICK_STEPS, QUICK_SEED = 80, 1  # the first steps of tools/validate_measure.py --seed 1
LONG_STEPS, LONG_SEEDS = 600, (2, 3, 4, 5)
REQUIRED = 0.995  # fraction of checks within tolerance, per quantity


def _failures(v: Validation, quantity: str | None = None, n: int = 8) -> str:
    fs = [f for f in v.stats["livestep"].failures if quantity in (None, f.quantity)]
    fs.sort(key=lambda f: -f.check.excess)
    return "\n".join(format_failure(f) for f in fs[:n])


def _assert_counts(v: Validation) -> None:
    st = v.stats["livestep"]
    raised = "\n".join(f"step {i}: {msg}\n    {scn.describe()}" for scn, i, msg in st.raised[:8])
    assert (st.missed, st.extra, len(st.raised)) == (0, 0, 0), (
        f"missed {st.missed}, extra {st.extra}, raised {len(st.raised)}\n{raised}")


def _assert_rate(v: Validation, quantity: str) -> None:
    n, rate = v.stats["livestep"].rate(quantity)
    assert n > 0
    assert rate >= REQUIRED, (
        f"{quantity}: {100 * rate:.1f} % of {n} checks within tolerance\n"
        f"{format_tables(v)}\n{_failures(v, quantity)}")


def _assert_floor(v: Validation, quantity: str) -> None:
    _, mine = v.stats["livestep"].rate(quantity)
    _, base = v.stats["python-control"].rate(quantity)
    assert mine >= base, (f"{quantity}: livestep {100 * mine:.1f} % < python-control "
                          f"{100 * base:.1f} %\n{_failures(v, quantity)}")


def _assert_oracle(v: Validation) -> None:
    fs = v.stats["oracle"].failures
    assert not fs, "the tolerance rule fails a correct reading:\n" + "\n".join(
        format_failure(f) for f in fs[:8])


def _assert_reference(v: Validation) -> None:
    # A plain smoothing reading of the noisy data passes: the noise allowance is fair.
    st = v.stats["reference"]
    for q in QUANTITIES:
        n, rate = st.rate(q)
        assert rate >= REQUIRED, f"{q}: reference {100 * rate:.1f} % of {n}\n" + "\n".join(
            format_failure(f) for f in st.failures[:8])


# -- (a) the quick run --------------------------------------------------------------------------
@pytest.fixture(scope="module")
def quick() -> Validation:
    v = run(QUICK_STEPS, QUICK_SEED)
    assert v.n_steps >= QUICK_STEPS
    return v


def test_quick_run_finds_every_step_and_none_raises(quick: Validation) -> None:
    _assert_counts(quick)


@pytest.mark.parametrize("quantity", QUANTITIES)
def test_quick_run_within_tolerance(quick: Validation, quantity: str) -> None:
    _assert_rate(quick, quantity)


@pytest.mark.parametrize("quantity", QUANTITIES)
def test_quick_run_python_control_is_the_floor(quick: Validation, quantity: str) -> None:
    _assert_floor(quick, quantity)


def test_quick_run_tolerance_is_fair(quick: Validation) -> None:
    # Every quantity is checked on the quick run: the rates are not vacuous.
    for q in QUANTITIES:
        assert quick.stats["oracle"].rate(q)[0] >= 40
    _assert_oracle(quick)
    _assert_reference(quick)


# -- (b) the long run ---------------------------------------------------------------------------
@pytest.mark.validation
@pytest.mark.parametrize("seed", LONG_SEEDS)
def test_long_run(seed: int) -> None:
    v = run(LONG_STEPS, seed)
    _assert_oracle(v)
    _assert_reference(v)
    _assert_counts(v)
    problems = []
    for q in QUANTITIES:
        _, rate = v.stats["livestep"].rate(q)
        _, base = v.stats["python-control"].rate(q)
        if rate < REQUIRED or rate < base:
            problems.append(f"{q}: livestep {100 * rate:.1f} %, python-control {100 * base:.1f} %")
    assert not problems, "\n".join(problems) + f"\n{format_tables(v)}\n{_failures(v, n=15)}"


# -- (c) the truth generator against outside references -----------------------------------------
WN = 30.0  # rad/s
SHAPES = [(0.15, None), (0.5, None), (1.0, None), (1.6, None),
          (0.3, 2.0), (0.8, 6.0), (1.0, 3.0), (1.6, 1.5), (1.6, 8.0), (0.1, 1.5)]


def _plant(zeta: float, a: float | None) -> Plant:
    return Plant(zeta, WN, None if a is None else a * zeta * WN)


@pytest.mark.parametrize("zeta", [0.1, 0.2, 0.35, 0.5, 0.7, 0.9])
def test_peak_matches_ogata(zeta: float) -> None:
    # Ogata, Modern Control Engineering, ch. 5: Tp = pi / wd, Mp = exp(-zeta pi / sqrt(1-z^2)).
    c = Curve(Plant(zeta, WN), 20.0 / WN)
    tau, value, interior = c.peak(20.0 / WN)
    wd = WN * math.sqrt(1.0 - zeta * zeta)
    assert interior
    assert tau == pytest.approx(math.pi / wd, rel=1e-7)
    assert value - 1.0 == pytest.approx(math.exp(-zeta * math.pi / math.sqrt(1 - zeta**2)),
                                        rel=1e-9, abs=1e-12)


@pytest.mark.parametrize("zeta", [0.15, 0.3, 0.5, 0.7])
def test_settling_within_the_envelope_bound(zeta: float) -> None:
    # Ogata ch. 5: the envelope 1 +- exp(-zeta wn t)/sqrt(1 - zeta^2) bounds the response,
    # so the exact 2 % settling time is at most -ln(0.02 sqrt(1 - zeta^2)) / (zeta wn), and
    # the response is outside the band just before the last exit.
    ts = settling_time(Plant(zeta, WN))
    bound = -math.log(BAND * math.sqrt(1.0 - zeta * zeta)) / (zeta * WN)
    assert 0.6 * bound < ts <= bound
    p = Plant(zeta, WN)
    assert abs(float(p.step(ts * (1 - 1e-6))) - 1.0) > BAND
    late = np.linspace(ts * (1 + 1e-6), 3 * bound, 20_001)
    assert np.all(np.abs(p.step(late) - 1.0) <= BAND)


@pytest.mark.parametrize(("zeta", "a"), SHAPES)
def test_closed_form_matches_scipy_step(zeta: float, a: float | None) -> None:
    p = _plant(zeta, a)
    t = np.linspace(0.0, settling_time(p) * 2.0, 20_001)
    num, den = p.tf()
    _, y = signal.step(signal.TransferFunction(num, den), T=t)
    assert np.max(np.abs(p.step(t) - y)) < 1e-9


@pytest.mark.parametrize(("zeta", "a"), [s for s in SHAPES if s[1] is not None])
def test_partial_fractions_match_scipy_residue(zeta: float, a: float) -> None:
    p = _plant(zeta, a)
    r3, b, c = p.pf_coefficients()
    num, den = p.tf()
    res, poles, _ = signal.residue(num, np.polymul(den, [1.0, 0.0]))  # Y(s) = H(s)/s
    assert res[np.argmin(np.abs(poles))].real == pytest.approx(1.0, rel=1e-9)
    assert res[np.argmin(np.abs(poles + p.p3))].real == pytest.approx(r3, rel=1e-8)
    # The s^2 coefficient of the numerator identity, not used to find B and C, holds too.
    z, w, pp = zeta, WN, p.p3
    assert pp + 2 * z * w + 2 * z * w * r3 + b * pp + c == pytest.approx(0.0, abs=1e-9 * w)


@pytest.mark.parametrize(("zeta", "a"), SHAPES)
def test_rise_and_settling_match_a_dense_scipy_simulation(zeta: float, a: float | None) -> None:
    p = _plant(zeta, a)
    ts = settling_time(p)
    t = np.linspace(0.0, 3.0 * ts, 60_001)
    num, den = p.tf()
    _, y = signal.step(signal.TransferFunction(num, den), T=t)

    def cross(level: float) -> float:
        i = int(np.flatnonzero(y >= level)[0])
        return float(t[i - 1] + (level - y[i - 1]) / (y[i] - y[i - 1]) * (t[i] - t[i - 1]))

    j = int(np.flatnonzero(np.abs(y - 1.0) > BAND)[-1])
    edge = 1.0 + BAND if y[j] > 1.0 else 1.0 - BAND
    ts_sim = t[j] + (edge - y[j]) / (y[j + 1] - y[j]) * (t[j + 1] - t[j])
    assert rise_time(p) == pytest.approx(cross(0.9) - cross(0.1), rel=1e-6)
    assert ts == pytest.approx(ts_sim, rel=1e-6)


@pytest.mark.parametrize("seed", [3, 17, 29, 41])
def test_drawn_rise_time_is_exact(seed: int) -> None:
    s = make_scenario(seed)
    assert rise_time(s.plant) == pytest.approx(s.rise_samples / s.rate, rel=1e-9)
    assert all(st.rise == pytest.approx(s.rise_samples / s.rate, rel=1e-9)
               for st in s.steps if not st.cut)


@pytest.mark.parametrize(("zeta", "a"), [(0.25, None), (0.7, 4.0), (1.4, None), (1.3, 2.5)])
def test_scenario_samples_match_lsim(zeta: float, a: float | None) -> None:
    # A whole recording (several steps from an offset, dead time of 7 samples, gain K) with
    # no noise, jitter or drops against scipy.signal.lsim of the same transfer function
    # driven by the delayed setpoint (zero-order hold: the setpoint moves at samples).
    rate, dead_n = 1000.0, 7
    s = make_scenario(11, rate=rate, rise_samples=20.0, zeta=zeta, pole_ratio=a,
                      dead_time=dead_n / rate, noise_frac=0.0, lsb_bits=None, jitter=0.0,
                      drop=0.0, cut=False, n_steps=4, holds=[3.0, 5.0, 2.0, 4.0])
    num, den = s.plant.tf()
    sp0 = s.setpoint[0]
    u = np.concatenate([np.full(dead_n, sp0), s.setpoint[:-dead_n]]) - sp0
    T = np.arange(s.t.size) / rate
    _, y, _ = signal.lsim(signal.TransferFunction(num, den), U=u, T=T, interp=False)
    scale = max(abs(st.amplitude) for st in s.steps)
    assert np.max(np.abs((s.clean - sp0) - s.gain * y)) < 1e-9 * scale
    # The levels the truth uses are the gain K about the starting point.
    for st in s.steps:
        assert st.final - st.initial == pytest.approx(s.gain * (st.sp_after - st.sp_before))
        assert st.sse == pytest.approx(st.sp_after - st.final)


def test_noise_quantisation_jitter_and_drops_are_as_drawn() -> None:
    s = make_scenario(5, noise_frac=0.005, lsb_bits=10.0, jitter=0.25, drop=0.01)
    dt = 1.0 / s.rate
    gaps = np.diff(s.t)
    assert gaps.min() >= 0.5 * dt - 1e-12 and gaps.max() <= 3.5 * dt + 1e-12
    assert 0.0 < np.mean(gaps > 1.5 * dt) < 0.03  # dropped samples leave double gaps
    lsb = min(abs(st.amplitude) for st in s.steps) / 2**10
    k = s.feedback / lsb
    assert np.allclose(k, np.round(k), atol=1e-6)
    sigma = np.std(s.feedback - s.clean)
    assert sigma == pytest.approx(0.005 * min(abs(st.amplitude) for st in s.steps), rel=0.1)
    # The step instants are samples whose setpoint is the new level.
    for st in s.steps:
        assert s.t[st.i_first] == st.t_step and s.setpoint[st.i_first] == st.sp_after
        assert s.setpoint[st.i_first - 1] == st.sp_before


def test_python_control_passes_on_clean_dense_data() -> None:
    # python-control's step_info reads samples without interpolation: on noise-free,
    # jitter-free data at 200 samples per rise it must pass nearly everything, or the
    # tolerance rule is unfair to a plain reading.
    rng = np.random.default_rng(3)
    scns = [make_scenario(int(rng.integers(2**31)), noise_frac=0.0, lsb_bits=None, jitter=0.0,
                          drop=0.0, cut=False, rise_samples=200.0) for _ in range(15)]
    v = validate(scns, ("python-control", "oracle"))
    _assert_oracle(v)
    for q in QUANTITIES:
        n, rate = v.stats["python-control"].rate(q)
        assert n >= 40 and rate >= 0.97, format_tables(v)


# -- the scoring can fail ----------------------------------------------------------------------
def _inside(ts: TrueStep) -> Measured:
    a, b = ts.peak_runs[0]
    return Measured(rise=0.5 * (ts.rise_lo + ts.rise_hi), peak_time=0.5 * (a + b),
                    overshoot=ts.overshoot, settling=0.5 * (ts.settle_lo + ts.settle_hi),
                    settled=True, sse=ts.sse)


def _scored_steps() -> list[TrueStep]:
    steps = [st for s in scenarios(60, 9) for st in s.steps if st.settled and not st.cut]
    assert len(steps) >= 40
    return steps


def test_readings_inside_the_tolerance_pass() -> None:
    for ts in _scored_steps():
        m = _inside(ts)
        edges = dataclasses.replace(m, rise=ts.rise_hi * (1 - 1e-12),
                                    overshoot=ts.overshoot + 0.999 * ts.overshoot_tol,
                                    settling=ts.settle_lo * (1 + 1e-12),
                                    sse=ts.sse - 0.999 * ts.sse_tol)
        for mm in (m, edges):
            checks = score(ts, mm)
            assert set(checks) == set(QUANTITIES)
            assert all(c.ok for c in checks.values()), checks


def test_readings_outside_the_tolerance_fail() -> None:
    for ts in _scored_steps():
        m = _inside(ts)
        a, b = ts.peak_runs[-1]
        wrong = {
            "rise": dict(rise=ts.rise_hi + 1e-6 * ts.rise),
            "peak time": dict(peak_time=b + ts.slack + 1e-6 * ts.window),
            "overshoot": dict(overshoot=ts.overshoot - 1.001 * ts.overshoot_tol),
            "settling": dict(settling=ts.settle_hi + 1e-6 * ts.window),
            "sse": dict(sse=ts.sse + 1.001 * ts.sse_tol),
            "settled": dict(settled=False),
        }
        for q, change in wrong.items():
            if q == "peak time" and b + ts.slack >= ts.window:
                change = dict(peak_time=ts.peak_runs[0][0] - ts.slack - 1e-6 * ts.window)
                if change["peak_time"] < 0:
                    continue  # the whole window is within 2 delta of the peak
            checks = score(ts, dataclasses.replace(m, **change))
            failed = {k for k, c in checks.items() if not c.ok}
            assert q in failed, (q, checks[q])
            assert failed <= {q, "settling", "overshoot"}, failed
        if ts.overshoot_detectable:
            assert not score(ts, dataclasses.replace(m, peak_time=None, overshoot=0.0))[
                "peak time"].ok
    assert not score(ts, None)["rise"].ok
