"""The session's steps as the tuning code needs them: samples from the step instant on,
the gains in force, and whether the controller output saturated.

A step whose output reached the declared limit is left out of identification: the model
would be fitted through the clipped part. When the recording holds the controller output
(a channel such as ``force``), its samples decide; otherwise the output is recomputed from
the recorded feedback with the declared law and gains (:func:`computed_output`). Pure numpy.
"""

from __future__ import annotations

import math
from collections.abc import Sequence
from dataclasses import dataclass

import numpy as np
from numpy.typing import NDArray

from livestep.steps.analysis import StepResult
from livestep.tuning.controller import ControllerSpec

__all__ = ["GainSet", "StepRecord", "computed_output", "gain_sets", "gains_of", "records_of"]

FloatArray = NDArray[np.float64]

#: A gain set: the values of the gain notes, in the order of the names asked for.
GainSet = tuple[float, ...]


@dataclass(frozen=True)
class StepRecord:
    """One measured step for identification. ``t`` (s, from the step instant: the first
    sample with the new setpoint), ``y`` (feedback minus the level before the step),
    ``amplitude`` (setpoint change, feedback units), ``gains`` (kp, ki, kd), ``index`` (the
    step's number in the session), ``output`` (the recorded controller output over the
    same samples, or ``None``), ``offset`` (setpoint minus feedback before the step,
    feedback units)."""

    index: int
    t: FloatArray
    y: FloatArray
    amplitude: float
    gains: GainSet
    output: FloatArray | None = None
    offset: float = 0.0

    @property
    def target(self) -> float:
        """The new setpoint relative to the feedback level before the step."""
        return self.amplitude + self.offset


def gains_of(result: StepResult, names: Sequence[str]) -> GainSet | None:
    """The values of the notes ``names`` active at a step, or ``None`` when one is missing
    or not a finite number."""
    tags = dict(result.tags)
    out = []
    for name in names:
        try:
            x = float(tags[name])
        except (KeyError, ValueError):
            return None
        if not math.isfinite(x):
            return None
        out.append(x)
    return tuple(out)


def gain_sets(results: Sequence[StepResult], names: Sequence[str]
              ) -> dict[GainSet, list[StepResult]]:
    """The steps by gain set (steps without every gain note are left out), in order of
    first appearance."""
    sets: dict[GainSet, list[StepResult]] = {}
    for r in results:
        g = gains_of(r, names)
        if g is not None:
            sets.setdefault(g, []).append(r)
    return sets


def records_of(results: Sequence[StepResult], names: Sequence[str] = ("kp", "ki", "kd"),
               *, span: float = 0.6,
               output: tuple[FloatArray, FloatArray] | None = None) -> list[StepRecord]:
    """Identification records of the steps that kept their samples, carry the gains and
    have a setpoint: at most ``span`` seconds from each step instant. ``output``: (times,
    values) of a recorded controller output channel, on the recording's time axis."""
    out = []
    for r in results:
        w, g = r.window, gains_of(r, names)
        m = r.metrics
        if w is None or g is None or m.setpoint_before is None or m.setpoint_after is None:
            continue
        t0 = w.t[w.i_step]
        keep = slice(w.i_step, int(np.searchsorted(w.t, t0 + span, side="right")))
        t = np.asarray(w.t[keep], dtype=float)
        u = None
        if output is not None and len(output[0]):
            ot, ov = output
            lo, hi = np.searchsorted(ot, [t[0] - 1e-9, t[-1] + 1e-9])
            if hi - lo >= max(2, len(t) // 2):
                u = np.interp(t, ot[lo:hi], ov[lo:hi])
        out.append(StepRecord(index=r.index, t=t - t0, y=np.asarray(w.feedback[keep]) - m.initial,
                              amplitude=m.setpoint_after - m.setpoint_before, gains=g,
                              output=u, offset=m.setpoint_before - m.initial))
    return out


def computed_output(rec: StepRecord, spec: ControllerSpec) -> FloatArray:
    """The controller output (output units, relative to the output holding the loop before
    the step) the declared law computes from the recorded feedback, on the record's samples:
    kp e + ki integral(e) dt -+ kd (filtered derivative), without clipping."""
    kp, ki, kd = rec.gains[:3]
    e = rec.target - rec.y
    t = rec.t
    dt = np.diff(t, prepend=t[0] - (t[1] - t[0] if len(t) > 1 else spec.period))
    dt = np.where(dt > 0, dt, spec.period)
    integ = ki * np.concatenate([[0.0], np.cumsum(e[:-1] * dt[1:])])
    src = e if spec.derivative == "error" else rec.y
    prev = np.concatenate([[0.0], src[:-1]])
    raw = (src - prev) / dt
    if spec.derivative_filter > 0:
        from scipy.signal import lfilter
        a = 1.0 - np.exp(-2.0 * np.pi * spec.derivative_filter * np.median(dt))
        d = lfilter([a], [1.0, a - 1.0], raw)
    else:
        d = raw
    return kp * e + integ + (kd * d if spec.derivative == "error" else -kd * d)


def saturation(rec: StepRecord, spec: ControllerSpec) -> str | None:
    """Why a step reached the output limit (one sentence), or ``None`` when it did not or
    no limit is declared."""
    limit = spec.output_limit
    if not math.isfinite(limit):
        return None
    unit = f" {spec.output_unit}" if spec.output_unit else ""
    if rec.output is not None:
        peak = float(np.max(np.abs(rec.output)))
        if peak >= limit * (1.0 - 1e-6):
            return f"the recorded output sits at its limit ({limit:g}{unit})"
        return None
    peak = float(np.max(np.abs(computed_output(rec, spec))))
    if peak >= limit:
        return (f"the output computed from its samples and gains reaches {peak:.4g}{unit},"
                f" beyond the limit {limit:g}{unit}")
    return None
