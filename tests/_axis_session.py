"""Sessions of the virtual bench's axis (a known plant: ``AxisParams``, mass 4 kg, viscous
friction 20 N s/m, Coulomb friction 3 N) as tagged, measured steps, for the tuning tests."""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import replace

import numpy as np

from livestep.bench.plants import AxisParams, AxisPlant
from livestep.steps.analysis import AnalysisSettings, StepResult, analyze_window
from livestep.steps.detect import StepWindow

PERIOD = 0.5e-3  # s, 2 kHz samples as the demo bench streams
SETTINGS = AnalysisSettings(keep_windows=True)


def bench_session(gain_sets: Sequence[tuple[float, float, float]],
                  moves: Sequence[float] = (5.0, -5.0, 5.0, -5.0), *, dwell: float = 1.0,
                  seed: int = 0, params: AxisParams | None = None) -> list[StepResult]:
    """Steps of the axis: for each gain set, the setpoint moves by each of ``moves``, held
    ``dwell`` seconds; each step tagged kp, ki, kd as the bench's notes tag them."""
    plant = AxisPlant(params or AxisParams(), period=PERIOD, seed=seed)
    level = 0.0
    before = plant.advance(400, level)
    out = []
    for g in gain_sets:
        plant.set_gains(**dict(zip(("kp", "ki", "kd"), g, strict=True)))
        tags = tuple(sorted(zip(("kp", "ki", "kd"), (f"{x:g}" for x in g), strict=True)))
        for move in moves:
            y = plant.advance(int(dwell / PERIOD), level + move)
            pre = before[-200:]
            t = np.arange(-len(pre), len(y)) * PERIOD + len(out) * 10.0
            sp = np.concatenate([np.full(len(pre), level), np.full(len(y), level + move)])
            w = StepWindow(index=len(out), t=t, feedback=np.concatenate([pre, y]),
                           setpoint=sp, i_step=len(pre), setpoint_before=level,
                           setpoint_after=level + move, end_reason="next step")
            r = analyze_window(w, SETTINGS)
            out.append(replace(r, tags=tags))
            level += move
            before = y
    return out
